//! Convexification of an exact-Hessian stage QP that keeps its solution: the backward sweep
//! of M. Verschueren, M. Zanon, R. Quirynen, M. Diehl, "A sparsity preserving convexification
//! procedure for indefinite quadratic programs arising in direct optimal control", SIAM J.
//! Optim. 27, 2017.
//!
//! Owns [`RiccatiConvexifier`]. Must not evaluate the problem. Works on a [`StageQp`] whose
//! coupling rows each tie stage `k` to one variable of stage `k + 1` (`J_k z_k + e_i x_i = b_i`,
//! the multiple-shooting structure: continuity, copies, running sums); those variables are
//! the stage's *determined* ones, the rest its *free* ones.
//!
//! The Lagrangian Hessian of a shooting NLP is indefinite in most stage blocks even at a
//! minimum (the dynamics' curvature times the costates); what must be positive is its
//! restriction to the directions the linearised dynamics allow. Stage by stage from the end,
//! the cost-to-go `1/2 x'P x` of the determined variables is added to the previous stage
//! through `x_{k+1} = T_k z_k + r_k` and subtracted from the stage itself:
//!
//! ```text
//! M_k = H_k + T_k' P_{k+1} T_k,   free block R of M_k made positive definite (only if it is
//! not), P_k = Q - S' R^{-1} S (Q, S the determined and mixed blocks of M_k),
//! H~_k = M_k - P_k on the determined block,   g~_k = g_k + T_k' P_{k+1} r_k.
//! ```
//!
//! The sum of the added and subtracted terms telescopes, so on every point that satisfies the
//! coupling rows the new objective equals the old one: when no free block needed changing the
//! QP's solution is exactly the Newton step, and every `H~_k` is positive semidefinite by
//! construction (`[S' R^{-1} S, S'; S, R]`). The coupling rows' multipliers shift by
//! `P_{k+1} x_{k+1} / e_i`, corrected back by [`RiccatiConvexifier::correct_multipliers`].

use crate::hessian::Convexified;
use crate::nlp::Pattern;
use crate::qp::{StageLayout, StageQp};

/// The determined variable of one coupling row: its position among the next stage's
/// determined variables and its column in the next stage.
#[derive(Clone, Copy, Debug)]
struct Tie {
    row: usize,
    /// Local index in the next stage.
    col: usize,
    /// Position in the next stage's determined list.
    slot: usize,
}

/// An augmented-Lagrangian term `1/2 sum rho_j d_j^2 + 1/2 sum rho_i (residual_i + a_i' d)^2`
/// on the constraints expected to stay active (bounds a variable sits on, local rows held at a
/// side, equality rows): it vanishes wherever they do hold in the QP, so it changes neither
/// the step nor (after [`RiccatiConvexifier::correct_multipliers`]) the multipliers, yet it
/// gives the free blocks the curvature that those constraints stand for (Debreu's lemma;
/// J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., 2006, Section 17.3). Without
/// it an active bound's direction of negative curvature would be convexified away.
#[derive(Clone, Debug)]
pub struct Augmentation {
    /// Per variable.
    pub var: Vec<f64>,
    /// Per row (local rows only; coupling rows are exact in the sweep already).
    pub row: Vec<f64>,
    /// Per row: its distance from the side it is held at.
    pub residual: Vec<f64>,
}

impl Augmentation {
    pub fn new(n: usize, m: usize) -> Self {
        Augmentation { var: vec![0.0; n], row: vec![0.0; m], residual: vec![0.0; m] }
    }
}

/// Workspace and results of the sweep for one layout.
#[derive(Clone, Debug)]
pub struct RiccatiConvexifier {
    layout: StageLayout,
    /// Per stage: its coupling rows' ties into the next stage.
    ties: Vec<Vec<Tie>>,
    /// Per stage: local indices of its determined variables (in slot order) and whether each
    /// local variable is determined.
    determined: Vec<Vec<usize>>,
    free: Vec<Vec<usize>>,
    /// Per stage `k`: `T_k' P_{k+1}` (`n_k x d_{k+1}`, column-major) for the gradient terms.
    tp: Vec<Vec<f64>>,
    /// Per stage `k`: `P_k` (`d_k x d_k`).
    p: Vec<Vec<f64>>,
    // Scratch.
    m: Vec<f64>,
    t: Vec<f64>,
    w: Vec<f64>,
    r: Vec<f64>,
    s: Vec<f64>,
    x: Vec<f64>,
    dense: crate::hessian::Convexifier,
}

impl RiccatiConvexifier {
    /// `None` when some coupling row does not tie its stage to exactly one variable of the
    /// next (structurally, in the Jacobian `pattern`), or two rows tie to the same one.
    pub fn new(layout: &StageLayout, pattern: &Pattern) -> Option<RiccatiConvexifier> {
        let s = layout.stages();
        let mut next_cols: Vec<Vec<usize>> = vec![Vec::new(); layout.num_rows()];
        for (&r, &c) in pattern.rows.iter().zip(&pattern.cols) {
            let (k, coupling) = layout.stage_of_row(r);
            if coupling && layout.vars(k + 1).contains(&c) {
                let local = c - layout.vars(k + 1).start;
                if !next_cols[r].contains(&local) {
                    next_cols[r].push(local);
                }
            }
        }
        let mut ties = vec![Vec::new(); s];
        let mut determined = vec![Vec::new(); s];
        let mut is_determined: Vec<Vec<bool>> =
            (0..s).map(|k| vec![false; layout.stage_size(k)]).collect();
        for k in 0..s.saturating_sub(1) {
            for r in layout.coupling_rows(k) {
                let [col] = next_cols[r][..] else { return None };
                if is_determined[k + 1][col] {
                    return None;
                }
                is_determined[k + 1][col] = true;
                let slot = determined[k + 1].len();
                determined[k + 1].push(col);
                ties[k].push(Tie { row: r, col, slot });
            }
        }
        let free = (0..s)
            .map(|k| (0..layout.stage_size(k)).filter(|&j| !is_determined[k][j]).collect())
            .collect();
        let nmax = (0..s).map(|k| layout.stage_size(k)).max().unwrap_or(0);
        let tp = (0..s)
            .map(|k| vec![0.0; layout.stage_size(k) * determined.get(k + 1).map_or(0, Vec::len)])
            .collect();
        let p = (0..s).map(|k| vec![0.0; determined[k].len() * determined[k].len()]).collect();
        Some(RiccatiConvexifier {
            ties,
            determined,
            free,
            tp,
            p,
            m: vec![0.0; nmax * nmax],
            t: vec![0.0; nmax * nmax],
            w: vec![0.0; nmax * nmax],
            r: vec![0.0; nmax * nmax],
            s: vec![0.0; nmax * nmax],
            x: vec![0.0; nmax],
            dense: crate::hessian::Convexifier::new(layout),
            layout: layout.clone(),
        })
    }

    /// Replace `qp.hessian` by the convexified one (see the module docs), the free blocks'
    /// eigenvalues below `relative_floor` times their largest raised; call
    /// [`Self::gradient`] next. Variables pinned at a zero step (both bounds 0) take no part:
    /// their rows and columns are cleared (a unit diagonal where free), so their curvature
    /// neither needs convexifying nor travels to the previous stage.
    pub fn convexify(
        &mut self,
        qp: &mut StageQp,
        aug: &Augmentation,
        relative_floor: f64,
    ) -> Convexified {
        let l = self.layout.clone();
        let mut out = Convexified::default();
        for k in (0..l.stages()).rev() {
            let n = l.stage_size(k);
            let m = &mut self.m[..n * n];
            m.copy_from_slice(qp.hessian_block(k));
            // M += T' P_{k+1} T, with T's row for slot d: -(row's stage-k part) / e.
            if k + 1 < l.stages() {
                let ties = &self.ties[k];
                let d = self.determined[k + 1].len();
                let t = &mut self.t[..d * n];
                for tie in ties {
                    let (row, _) = qp.row(tie.row);
                    let e = row[n + tie.col];
                    for j in 0..n {
                        t[tie.slot + j * d] = -row[j] / e;
                    }
                }
                let p1 = &self.p[k + 1];
                // W = P T (d x n), then tp = T' P = W' (n x d), M += T' W.
                let w = &mut self.w[..d * n];
                for j in 0..n {
                    for a in 0..d {
                        w[a + j * d] = (0..d).map(|b| p1[a + b * d] * t[b + j * d]).sum();
                    }
                }
                let tp = &mut self.tp[k];
                for a in 0..d {
                    for j in 0..n {
                        tp[j + a * n] = w[a + j * d];
                    }
                }
                for c in 0..n {
                    for r in 0..n {
                        m[r + c * n] += (0..d).map(|a| t[a + r * d] * w[a + c * d]).sum::<f64>();
                    }
                }
            }
            let v0 = l.vars(k).start;
            for j in 0..n {
                if qp.var_lower[v0 + j] == 0.0 && qp.var_upper[v0 + j] == 0.0 {
                    for i in 0..n {
                        m[i + j * n] = 0.0;
                        m[j + i * n] = 0.0;
                    }
                }
                m[j + j * n] += aug.var[v0 + j];
            }
            for i in l.local_rows(k) {
                let rho = aug.row[i];
                if rho != 0.0 {
                    let (row, _) = qp.row(i);
                    for c in 0..n {
                        let rc = rho * row[c];
                        if rc != 0.0 {
                            for r in 0..n {
                                m[r + c * n] += row[r] * rc;
                            }
                        }
                    }
                }
            }
            // Free block R made positive definite, then P_k = Q - S' R^{-1} S.
            let free_list = &self.free[k];
            let free = free_list.len();
            let dk = self.determined[k].len();
            let r = &mut self.r[..free * free];
            for (b, &jb) in free_list.iter().enumerate() {
                for (a, &ja) in free_list.iter().enumerate() {
                    r[a + b * free] = m[ja + jb * n];
                }
            }
            let det_list = &self.determined[k];
            let scale = r.iter().fold(0.0_f64, |a, v| a.max(v.abs())).max(1.0);
            let chol = &mut self.s[..free * free];
            chol.copy_from_slice(r);
            let p = &mut self.p[k];
            if cholesky(chol, free, relative_floor * scale) {
                // R positive definite: nothing changes but the cost-to-go, P = Q - S'R^{-1}S,
                // through the Cholesky factor (X = L^{-1} S, S'R^{-1}S = X'X).
                let x = &mut self.w[..free * dk];
                for (b, &jb) in det_list.iter().enumerate() {
                    for (a, &ja) in free_list.iter().enumerate() {
                        x[a + b * free] = m[ja + jb * n];
                    }
                    forward(chol, free, &mut x[b * free..(b + 1) * free]);
                }
                for (b, &jb) in det_list.iter().enumerate() {
                    for (a, &ja) in det_list.iter().enumerate() {
                        let srs: f64 = (0..free).map(|i| x[i + a * free] * x[i + b * free]).sum();
                        p[a + b * dk] = m[ja + jb * n] - srs;
                        m[ja + jb * n] = srs;
                    }
                }
            } else {
                // R not positive definite. Each eigenvalue below the floor becomes
                // max(|value|, floor) (Nocedal & Wright's absolute-value modification), and
                // its eigendirection is cut loose from the determined variables: a direction
                // of negative curvature is one an active bound stops, and passing it on
                // through S' R^{-1} S with the small modified curvature would drive the
                // cost-to-go of every earlier stage toward minus infinity.
                let (av, vv, dv) = (&mut self.dense.a, &mut self.dense.v, &mut self.dense.d);
                let (a, v, d) = (&mut av[..free * free], &mut vv[..free * free], &mut dv[..free]);
                a.copy_from_slice(r);
                crate::hessian::symmetric_eigen(a, free, v, d);
                let largest = d.iter().fold(0.0_f64, |m, x| m.max(x.abs())).max(1.0);
                let floor = relative_floor * largest;
                out.blocks += 1;
                for (a, &ja) in free_list.iter().enumerate() {
                    for (b, &jb) in free_list.iter().enumerate() {
                        let mut acc = 0.0;
                        for i in 0..free {
                            acc += v[a + i * free] * d[i].abs().max(floor) * v[b + i * free];
                        }
                        m[ja + jb * n] = acc;
                    }
                }
                for &e in d.iter() {
                    if e < floor {
                        out.largest_raise = out.largest_raise.max(e.abs().max(floor) - e);
                    }
                }
                // Per determined column: its coupling in the eigenbasis, kept on the positive
                // directions only; S'R+^{-1}S from those.
                let x = &mut self.w[..free * dk];
                for (b, &jb) in det_list.iter().enumerate() {
                    for i in 0..free {
                        x[i + b * free] = if d[i] > floor {
                            free_list
                                .iter()
                                .enumerate()
                                .map(|(a, &ja)| v[a + i * free] * m[ja + jb * n])
                                .sum()
                        } else {
                            0.0
                        };
                    }
                    for (a, &ja) in free_list.iter().enumerate() {
                        let s: f64 = (0..free).map(|i| v[a + i * free] * x[i + b * free]).sum();
                        m[ja + jb * n] = s;
                        m[jb + ja * n] = s;
                    }
                }
                for (b, &jb) in det_list.iter().enumerate() {
                    for (a, &ja) in det_list.iter().enumerate() {
                        let srs: f64 = (0..free)
                            .filter(|&i| d[i] > floor)
                            .map(|i| x[i + a * free] * x[i + b * free] / d[i])
                            .sum();
                        p[a + b * dk] = m[ja + jb * n] - srs;
                        m[ja + jb * n] = srs;
                    }
                }
            }
            // Exact symmetry.
            for b in 0..dk {
                for a in b + 1..dk {
                    let v = 0.5 * (p[a + b * dk] + p[b + a * dk]);
                    p[a + b * dk] = v;
                    p[b + a * dk] = v;
                }
            }
            qp.hessian[l.hessian_block(k)].copy_from_slice(m);
        }
        out
    }

    /// `g~ = g + T' P r`, with `r` from the coupling rows' current bounds (`b_i / e_i`); to be
    /// called after [`Self::convexify`] and again whenever the row bounds change.
    pub fn gradient(&mut self, qp: &mut StageQp, g: &[f64], aug: &Augmentation) {
        let l = &self.layout;
        qp.gradient.copy_from_slice(g);
        for i in 0..qp.num_rows() {
            let rho = aug.row[i];
            if rho != 0.0 {
                let (_, first) = l.row_span(i);
                let v = rho * aug.residual[i];
                for (p, g) in l.row_block(i).zip(first..) {
                    qp.gradient[g] += v * qp.jacobian[p];
                }
            }
        }
        for k in 0..l.stages().saturating_sub(1) {
            let n = l.stage_size(k);
            let d = self.determined[k + 1].len();
            let x = &mut self.x[..d];
            for tie in &self.ties[k] {
                let (row, _) = qp.row(tie.row);
                x[tie.slot] = qp.row_lower[tie.row] / row[n + tie.col];
            }
            let v0 = l.vars(k).start;
            let tp = &self.tp[k];
            for j in 0..n {
                qp.gradient[v0 + j] += (0..d).map(|a| tp[j + a * n] * x[a]).sum::<f64>();
            }
        }
    }

    /// The multipliers of the original QP from those of the convexified one at its solution
    /// `step`: coupling rows `lambda_i -= (P_{k+1} x_{k+1})_i / e_i`, augmented rows
    /// `lambda_i += rho_i (residual_i + a_i' d)`, augmented bounds `nu_j += rho_j d_j`.
    pub fn correct_multipliers(
        &mut self,
        qp: &StageQp,
        aug: &Augmentation,
        step: &[f64],
        lambda: &mut [f64],
        nu: &mut [f64],
    ) {
        for j in 0..step.len() {
            nu[j] += aug.var[j] * step[j];
        }
        for i in 0..qp.num_rows() {
            let rho = aug.row[i];
            if rho != 0.0 {
                let (row, first) = qp.row(i);
                let ad: f64 = row.iter().zip(&step[first..]).map(|(a, d)| a * d).sum();
                lambda[i] += rho * (aug.residual[i] + ad);
            }
        }
        let l = &self.layout;
        for k in 0..l.stages().saturating_sub(1) {
            let n = l.stage_size(k);
            let d = self.determined[k + 1].len();
            let v1 = l.vars(k + 1).start;
            let xd = &mut self.x[..d];
            for (slot, &col) in self.determined[k + 1].iter().enumerate() {
                xd[slot] = step[v1 + col];
            }
            let p1 = &self.p[k + 1];
            for tie in &self.ties[k] {
                let (row, _) = qp.row(tie.row);
                let px: f64 = (0..d).map(|b| p1[tie.slot + b * d] * xd[b]).sum();
                lambda[tie.row] -= px / row[n + tie.col];
            }
        }
    }
}

/// Cholesky in place (lower, column-major); `false` unless every pivot exceeds `floor`.
fn cholesky(a: &mut [f64], n: usize, floor: f64) -> bool {
    for j in 0..n {
        let mut d = a[j + j * n];
        for p in 0..j {
            d -= a[j + p * n] * a[j + p * n];
        }
        if !(d > floor && d.is_finite()) {
            return false;
        }
        let r = d.sqrt();
        a[j + j * n] = r;
        for i in j + 1..n {
            let mut s = a[i + j * n];
            for p in 0..j {
                s -= a[i + p * n] * a[j + p * n];
            }
            a[i + j * n] = s / r;
        }
    }
    true
}

/// `x = L^{-1} x` with the lower Cholesky factor in `l`.
fn forward(l: &[f64], n: usize, x: &mut [f64]) {
    for i in 0..n {
        let mut s = x[i];
        for p in 0..i {
            s -= l[i + p * n] * x[p];
        }
        x[i] = s / l[i + i * n];
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::qp::{QpSolution, QpSolver, StageIpm};
    use std::sync::Arc;

    /// A chain x_{k+1} = x_k + u_k (two stages of (x, u), a last stage of x), with an
    /// indefinite stage Hessian whose restriction to the dynamics is positive definite: the
    /// convexified QP has exactly the original's solution (computed densely by the KKT
    /// system, nalgebra's LU) and multipliers, and positive semidefinite blocks.
    #[test]
    fn same_solution_and_multipliers_with_convex_blocks() {
        let layout = Arc::new(StageLayout::new(&[2, 2, 1], &[0, 0, 0], &[1, 1, 0]).unwrap());
        let mut qp = StageQp::zeros(layout.clone());
        // Stage 0: [[1, 0], [0, -0.5]] (indefinite in u), stage 1 [[2, 1], [1, 1.5]], end 3.
        for (r, c, v) in
            [(0, 0, 1.0), (1, 1, -0.5), (2, 2, 2.0), (3, 2, 1.0), (3, 3, 1.5), (4, 4, 3.0)]
        {
            qp.add_hessian(r, c, v).unwrap();
        }
        qp.gradient = vec![0.2, -0.3, 0.1, 0.4, -0.5];
        // Rows: x1 - x0 - u0 = 0.1, x2 - x1 - u1 = -0.2.
        for (row, x, u, next) in [(0, 0, 1, 2), (1, 2, 3, 4)] {
            qp.set_jacobian(row, x, -1.0).unwrap();
            qp.set_jacobian(row, u, -1.0).unwrap();
            qp.set_jacobian(row, next, 1.0).unwrap();
        }
        qp.row_lower = vec![0.1, -0.2];
        qp.row_upper = vec![0.1, -0.2];
        qp.var_lower[0] = 0.5;
        qp.var_upper[0] = 0.5;
        let mut pattern = Pattern::new();
        for (r, c) in [(0, 0), (0, 1), (0, 2), (1, 2), (1, 3), (1, 4)] {
            pattern.push(r, c);
        }
        // Dense KKT of the original: unknowns d (5), rows (2), fixed x0 (1).
        let n = 5;
        let mut k = nalgebra::DMatrix::zeros(8, 8);
        let mut rhs = nalgebra::DVector::zeros(8);
        let mut hd = vec![0.0; n];
        for j in 0..n {
            let mut e = vec![0.0; n];
            e[j] = 1.0;
            qp.mul_hessian(&e, &mut hd);
            for i in 0..n {
                k[(i, j)] = hd[i];
            }
            rhs[j] = -qp.gradient[j];
        }
        for (row, cols) in
            [(0usize, [(0usize, -1.0), (1, -1.0), (2, 1.0)]), (1, [(2, -1.0), (3, -1.0), (4, 1.0)])]
        {
            for (c, v) in cols {
                k[(5 + row, c)] = v;
                k[(c, 5 + row)] = v;
            }
            rhs[5 + row] = qp.row_lower[row];
        }
        k[(7, 0)] = 1.0;
        k[(0, 7)] = 1.0;
        rhs[7] = 0.5;
        let exact = k.lu().solve(&rhs).unwrap();

        let mut cv = RiccatiConvexifier::new(&layout, &pattern).expect("a shooting chain");
        let g = qp.gradient.clone();
        let aug = Augmentation::new(5, 2);
        let c = cv.convexify(&mut qp, &aug, 1e-8);
        cv.gradient(&mut qp, &g, &aug);
        assert_eq!(c.blocks, 0, "the restriction to the dynamics is positive definite");
        for b in 0..3 {
            let nb = layout.stage_size(b);
            let m = nalgebra::DMatrix::from_column_slice(nb, nb, qp.hessian_block(b));
            let least = m.symmetric_eigenvalues().iter().fold(f64::INFINITY, |a, &v| a.min(v));
            assert!(least > -1e-12, "block {b} not semidefinite: {m}");
        }
        let mut sol = QpSolution::new(5, 2);
        StageIpm::default().solve(&qp, &mut sol).unwrap();
        let mut lambda = sol.row_multipliers.clone();
        let mut nu = sol.bound_multipliers.clone();
        cv.correct_multipliers(&qp, &aug, &sol.step, &mut lambda, &mut nu);
        // Interior-point accuracy 1e-10 relative: 1e-8 absolute here.
        for j in 0..n {
            assert!((sol.step[j] - exact[j]).abs() < 1e-8, "{:?} vs {exact}", sol.step);
        }
        // The dense system's multipliers use +A' lambda with rows as written: same convention.
        for r in 0..2 {
            assert!((lambda[r] - exact[5 + r]).abs() < 1e-8, "{lambda:?} vs {exact}");
        }
    }
}
