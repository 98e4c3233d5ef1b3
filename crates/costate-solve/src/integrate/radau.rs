//! The 3-stage Radau IIA step (implicit, L-stable, order 5 at step ends) with Newton on the
//! stage equations and sensitivities by the implicit function theorem.
//!
//! Owns the stage solve and its work arrays. The stage unknowns are the increments
//! `Z_i = X_i - x`, solving `G(Z) = Z_i - hs Σ_j a_ij f(τ_j, x + Z_j, u_j, p) = 0`. The method
//! is stiffly accurate (`b` is the last row of `A`), so `x+ = x + Z_3`; the integrals use the
//! same stages, `q+ = q + hs Σ b_j l(τ_j, X_j, u_j, p)`.
//!
//! Solve: simplified Newton with `I - hs (A ⊗ J0)`, `J0 = f_x` at the step start; if that
//! diverges or runs out of iterations, full Newton restarted from `Z = 0`.
//! Sensitivities: at the converged stages, with `J_j = f_x(X_j)`,
//! `(I - hs (A ⊗ I) diag(J_j)) dZ/dw = Σ_j a_ij [hs ∂f_j/∂w |_(Z fixed) + F_j e_h / M]`,
//! where `∂f_j/∂w` uses `dX_j = S_x`. Then `S_x += dZ_3` and `S_q += Σ_j b_j [hs dL_j +
//! L_j e_h / M]` with `dX_j = S_x + dZ_j`. This is exact for the map defined by the converged
//! stages (no approximation of the matrix: the full stage Jacobian is used).

// Index loops mirror the tableau formulas `Σ_j a_ij K_j` term by term.
#![allow(clippy::needless_range_loop)]

use super::{
    apply_jacobian, state_block, DenseLu, Dims, Evaluator, IntegrationError, IntegratorSettings,
    Interval, NewtonFailure, StepState,
};

const S: usize = 3;

/// Radau IIA, s = 3 (E. Hairer, G. Wanner, "Solving Ordinary Differential Equations II",
/// 2nd ed., 1996, sec. IV.5, Table 5.6).
struct Tableau {
    a: [[f64; S]; S],
    b: [f64; S],
    c: [f64; S],
}

fn tableau() -> Tableau {
    let r6 = 6f64.sqrt();
    let a = [
        [(88.0 - 7.0 * r6) / 360.0, (296.0 - 169.0 * r6) / 1800.0, (-2.0 + 3.0 * r6) / 225.0],
        [(296.0 + 169.0 * r6) / 1800.0, (88.0 + 7.0 * r6) / 360.0, (-2.0 - 3.0 * r6) / 225.0],
        [(16.0 - r6) / 36.0, (16.0 + r6) / 36.0, 1.0 / 9.0],
    ];
    Tableau { a, b: a[2], c: [(4.0 - r6) / 10.0, (4.0 + r6) / 10.0, 1.0] }
}

#[derive(Clone, Debug)]
pub(crate) struct Work {
    a: [[f64; S]; S],
    b: [f64; S],
    c: [f64; S],
    input: Vec<f64>,
    xs: Vec<f64>,
    /// Stage increments `Z` and the Newton step (`S x nx` each).
    z: Vec<f64>,
    dz: Vec<f64>,
    /// `F_j` (`S x nx`) and `L_j` (`S x nq`) at the stages.
    fz: Vec<f64>,
    lz: Vec<f64>,
    /// Jacobian values of `f` and `l` at each stage, and of `f` at the step start.
    jf: Vec<f64>,
    jl: Vec<f64>,
    jf0: Vec<f64>,
    /// Dense state blocks `f_x` (`S x nx x nx`; the simplified matrix uses the first block).
    jx: Vec<f64>,
    lu: DenseLu,
    /// `S nx x max(nw, 1)` for the LU solve.
    lu_scratch: Vec<f64>,
    /// `∂f_j/∂w` (`S x nx x nw`), then the right-hand side / solution `dZ` (`S nx x nw`).
    g: Vec<f64>,
    rhs: Vec<f64>,
    dxs: Vec<f64>,
    dl: Vec<f64>,
}

impl Work {
    pub(crate) fn new(dims: &Dims, f: &Evaluator, l: &Evaluator) -> Self {
        let Dims { nx, nq, nw, layout, .. } = *dims;
        let t = tableau();
        Work {
            a: t.a,
            b: t.b,
            c: t.c,
            input: vec![0.0; layout.len()],
            xs: vec![0.0; nx],
            z: vec![0.0; S * nx],
            dz: vec![0.0; S * nx],
            fz: vec![0.0; S * nx],
            lz: vec![0.0; S * nq],
            jf: vec![0.0; S * f.nnz()],
            jl: vec![0.0; S * l.nnz()],
            jf0: vec![0.0; f.nnz()],
            jx: vec![0.0; S * nx * nx],
            lu: DenseLu::new(S * nx),
            lu_scratch: vec![0.0; S * nx * nw.max(1)],
            g: vec![0.0; S * nx * nw],
            rhs: vec![0.0; S * nx * nw],
            dxs: vec![0.0; nx * nw],
            dl: vec![0.0; nq * nw],
        }
    }

    /// Fill the LU matrix with `I - hs (A ⊗ I) diag(J_j)`; `per_stage == false` uses the first
    /// state block for every stage.
    fn build_stage_matrix(&mut self, nx: usize, hs: f64, per_stage: bool) {
        let n = S * nx;
        let a = self.a;
        let m = self.lu.matrix_mut();
        m.fill(0.0);
        for i in 0..S {
            for j in 0..S {
                let blk = if per_stage { j } else { 0 };
                let jx = &self.jx[blk * nx * nx..(blk + 1) * nx * nx];
                for r in 0..nx {
                    for c in 0..nx {
                        m[(i * nx + r) * n + j * nx + c] = -hs * a[i][j] * jx[r * nx + c];
                    }
                }
            }
        }
        for d in 0..n {
            m[d * n + d] += 1.0;
        }
    }
}

/// Why one Newton attempt stopped without converging.
enum Attempt {
    Failed(NewtonFailure),
    /// An evaluation at a point that is not a trial iterate (the step start) failed.
    Fatal(IntegrationError),
}

#[allow(clippy::too_many_arguments)]
pub(crate) fn step(
    dims: &Dims,
    iv: &Interval<'_>,
    settings: &IntegratorSettings,
    k_step: usize,
    f: &mut Evaluator,
    l: &mut Evaluator,
    w: &mut Work,
    st: &mut StepState<'_>,
) -> Result<(), IntegrationError> {
    let Dims { nx, nq, nw, cols, .. } = *dims;
    let m = iv.substeps as f64;
    let hs = iv.input.h / m;
    let t_step = iv.input.t_start + iv.theta(k_step, 0.0) * iv.input.h;

    let first = newton(dims, iv, settings, k_step, f, w, st.x, true);
    match first {
        Ok(()) => {}
        Err(Attempt::Fatal(e)) => return Err(e),
        Err(Attempt::Failed(_)) => match newton(dims, iv, settings, k_step, f, w, st.x, false) {
            Ok(()) => {}
            Err(Attempt::Fatal(e)) => return Err(e),
            Err(Attempt::Failed(failure)) => {
                return Err(IntegrationError::Newton { time: t_step, failure })
            }
        },
    }

    // Evaluate at the converged stages: these points define the map, so failures are genuine.
    let (nnz_f, nnz_l) = (f.nnz(), l.nnz());
    for j in 0..S {
        let theta = iv.theta(k_step, w.c[j]);
        for ((xs, x), z) in w.xs.iter_mut().zip(st.x.iter()).zip(&w.z[j * nx..(j + 1) * nx]) {
            *xs = x + z;
        }
        let t = iv.running_input(theta, &w.xs, &mut w.input);
        let fj = &mut w.fz[j * nx..(j + 1) * nx];
        let lj = &mut w.lz[j * nq..(j + 1) * nq];
        if iv.sens {
            let jf = &mut w.jf[j * nnz_f..(j + 1) * nnz_f];
            f.value_and_jacobian(&w.input, fj, jf, t)?;
            state_block(dims, f.pattern(), jf, &mut w.jx[j * nx * nx..(j + 1) * nx * nx]);
            if nq > 0 {
                l.value_and_jacobian(&w.input, lj, &mut w.jl[j * nnz_l..(j + 1) * nnz_l], t)?;
            }
        } else {
            f.value(&w.input, fj, t)?;
            if nq > 0 {
                l.value(&w.input, lj, t)?;
            }
        }
    }

    if iv.sens {
        let col_h = cols.h();
        let block = nx * nw;
        w.build_stage_matrix(nx, hs, true);
        if w.lu.factor().is_err() {
            return Err(IntegrationError::Newton {
                time: t_step,
                failure: NewtonFailure::SingularMatrix,
            });
        }
        // ∂f_j/∂w at fixed Z: the stage state moves with x only.
        for j in 0..S {
            let theta = iv.theta(k_step, w.c[j]);
            apply_jacobian(
                dims,
                f.pattern(),
                &w.jf[j * nnz_f..(j + 1) * nnz_f],
                theta,
                st.sx,
                &mut w.g[j * block..(j + 1) * block],
            );
        }
        w.rhs.fill(0.0);
        for i in 0..S {
            let rhs_i = &mut w.rhs[i * block..(i + 1) * block];
            for j in 0..S {
                let a = w.a[i][j];
                for (r, g) in rhs_i.iter_mut().zip(&w.g[j * block..(j + 1) * block]) {
                    *r += hs * a * g;
                }
                for r in 0..nx {
                    rhs_i[r * nw + col_h] += a * w.fz[j * nx + r] / m;
                }
            }
        }
        w.lu.solve(&mut w.rhs, nw, &mut w.lu_scratch);
        if nq > 0 {
            for j in 0..S {
                let theta = iv.theta(k_step, w.c[j]);
                for ((d, s), dz) in
                    w.dxs.iter_mut().zip(st.sx.iter()).zip(&w.rhs[j * block..(j + 1) * block])
                {
                    *d = s + dz;
                }
                apply_jacobian(
                    dims,
                    l.pattern(),
                    &w.jl[j * nnz_l..(j + 1) * nnz_l],
                    theta,
                    &w.dxs,
                    &mut w.dl,
                );
                let b = w.b[j];
                for (s, d) in st.sq.iter_mut().zip(&w.dl) {
                    *s += hs * b * d;
                }
                for r in 0..nq {
                    st.sq[r * nw + col_h] += b * w.lz[j * nq + r] / m;
                }
            }
        }
        for (s, dz) in st.sx.iter_mut().zip(&w.rhs[(S - 1) * block..S * block]) {
            *s += dz;
        }
    }

    for (x, z) in st.x.iter_mut().zip(&w.z[(S - 1) * nx..S * nx]) {
        *x += z;
    }
    for j in 0..S {
        for (q, lj) in st.q.iter_mut().zip(&w.lz[j * nq..(j + 1) * nq]) {
            *q += hs * w.b[j] * lj;
        }
    }
    Ok(())
}

/// One Newton attempt from `Z = 0`; on success `w.z` holds the converged increments.
#[allow(clippy::too_many_arguments)]
fn newton(
    dims: &Dims,
    iv: &Interval<'_>,
    settings: &IntegratorSettings,
    k_step: usize,
    f: &mut Evaluator,
    w: &mut Work,
    x: &[f64],
    simplified: bool,
) -> Result<(), Attempt> {
    let nx = dims.nx;
    let nnz_f = f.nnz();
    let hs = iv.input.h / iv.substeps as f64;
    let tol = settings.newton_tolerance;
    let not_finite = |e: IntegrationError| match e {
        IntegrationError::NotFinite { function, row, .. } => {
            Attempt::Failed(NewtonFailure::NotFinite { function, row })
        }
        other => Attempt::Fatal(other),
    };
    w.z.fill(0.0);
    if simplified {
        let theta = iv.theta(k_step, 0.0);
        let t = iv.running_input(theta, x, &mut w.input);
        // The step start is a point of the trajectory, not a trial iterate: a failure there is
        // the caller's to report as such.
        f.value_and_jacobian(&w.input, &mut w.fz[..nx], &mut w.jf0, t).map_err(Attempt::Fatal)?;
        state_block(dims, f.pattern(), &w.jf0, &mut w.jx[..nx * nx]);
        w.build_stage_matrix(nx, hs, false);
        w.lu.factor().map_err(|_| Attempt::Failed(NewtonFailure::SingularMatrix))?;
    }
    let mut previous: Option<f64> = None;
    let mut last = f64::NAN;
    let max_iter = settings.newton_max_iterations;
    for _ in 0..max_iter {
        for j in 0..S {
            let theta = iv.theta(k_step, w.c[j]);
            for ((xs, xv), z) in w.xs.iter_mut().zip(x).zip(&w.z[j * nx..(j + 1) * nx]) {
                *xs = xv + z;
            }
            let t = iv.running_input(theta, &w.xs, &mut w.input);
            let fj = &mut w.fz[j * nx..(j + 1) * nx];
            if simplified {
                f.value(&w.input, fj, t).map_err(not_finite)?;
            } else {
                let jf = &mut w.jf[j * nnz_f..(j + 1) * nnz_f];
                f.value_and_jacobian(&w.input, fj, jf, t).map_err(not_finite)?;
                state_block(dims, f.pattern(), jf, &mut w.jx[j * nx * nx..(j + 1) * nx * nx]);
            }
        }
        if !simplified {
            w.build_stage_matrix(nx, hs, true);
            w.lu.factor().map_err(|_| Attempt::Failed(NewtonFailure::SingularMatrix))?;
        }
        // dz = -G(Z)
        for i in 0..S {
            for r in 0..nx {
                let mut acc = 0.0;
                for j in 0..S {
                    acc += w.a[i][j] * w.fz[j * nx + r];
                }
                w.dz[i * nx + r] = hs * acc - w.z[i * nx + r];
            }
        }
        w.lu.solve(&mut w.dz, 1, &mut w.lu_scratch);
        let mut norm = 0.0f64;
        for i in 0..S {
            for r in 0..nx {
                let z = &mut w.z[i * nx + r];
                *z += w.dz[i * nx + r];
                let scale = 1.0 + x[r].abs() + z.abs();
                norm = norm.max((w.dz[i * nx + r] / scale).abs());
            }
        }
        if !norm.is_finite() {
            return Err(Attempt::Failed(NewtonFailure::NotConverged {
                iterations: max_iter,
                increment: norm,
            }));
        }
        last = norm;
        if norm <= tol {
            return Ok(());
        }
        if let Some(prev) = previous {
            let rate = norm / prev;
            // Linear convergence at `rate` leaves an error of about rate / (1 - rate) times
            // the last increment (Hairer & Wanner 1996, sec. IV.8).
            if rate < 1.0 && rate / (1.0 - rate) * norm <= tol {
                return Ok(());
            }
            if simplified && rate >= 1.0 {
                break;
            }
        }
        previous = Some(norm);
    }
    Err(Attempt::Failed(NewtonFailure::NotConverged { iterations: max_iter, increment: last }))
}
