//! The Newton systems of the stage QP's interior-point method: a symmetric block-tridiagonal
//! matrix, one block per stage, factorised stage after stage.
//!
//! Owns [`BlockKkt`]: storage for the blocks, the factorisation and solves with iterative
//! refinement. Must not know what the rows mean (the interior-point method assembles them) or
//! allocate after [`BlockKkt::new`].
//!
//! Block `k` holds the unknowns `[x_k (n_k), y_k (e_k), w_k (c_k)]`: the stage's primal step,
//! the multipliers of its local equality rows and those of its coupling rows. Its diagonal
//! block is
//!
//! ```text
//! [ Q_k  E_k'  C_k' ]
//! [ E_k  0     0    ]        Q_k: Hessian plus the barrier terms of the inequalities
//! [ C_k  0     0    ]        E_k: local equality rows, C_k: coupling rows on stage k
//! ```
//!
//! and its coupling to block `k + 1` is `D_k` (the coupling rows on stage `k + 1`'s
//! variables) between `w_k` and `x_{k+1}`. The matrix is quasi-definite after regularisation
//! (`+delta` on the primal diagonal, `-delta` on the dual one), so a symmetric `LDL'` without
//! pivoting exists in any order (R. J. Vanderbei, "Symmetric quasidefinite matrices", SIAM J.
//! Optim. 5, 1995). In stage order, eliminating block `k` changes only `Q_{k+1}`, by the
//! positive semidefinite `D_k' (-S_k^{-1})_{ww} D_k`: the block form of the Riccati recursion
//! of C. V. Rao, S. J. Wright, J. B. Rawlings, "Application of interior-point methods to model
//! predictive control", J. Optim. Theory Appl. 99, 1998. Each stage costs `O(b_k^3)` with
//! `b_k = n_k + e_k + c_k`, so a factorisation costs `O(N b^3)` for `N` stages.
//!
//! Pivots of the wrong sign or near zero (a singular block) are replaced by `+-delta_dynamic`
//! as they appear; iterative refinement against the unregularised matrix removes the error
//! the regularisation makes (as in P. J. Goulart, Y. Chen, "Clarabel: An interior-point solver
//! for conic programs with quadratic objectives", 2024, sec. 5).

/// Symmetric block-tridiagonal matrix with its factorisation.
#[derive(Clone, Debug)]
pub(crate) struct BlockKkt {
    n: Vec<usize>,
    e: Vec<usize>,
    c: Vec<usize>,
    /// Start of block `k` in a block vector.
    offset: Vec<usize>,
    /// Start of block `k`'s `b_k x b_k` storage in `matrix` and `factor`.
    dense_start: Vec<usize>,
    /// Start of `D_k` (`c_k x n_{k+1}`, row-major) in `next`.
    next_start: Vec<usize>,
    /// Unregularised diagonal blocks, full symmetric, column-major.
    matrix: Vec<f64>,
    next: Vec<f64>,
    /// `L` below the diagonal and `D` on it, per block (column-major).
    factor: Vec<f64>,
    /// Fill of the next block's `Q` (`n_{k+1} x n_{k+1}`) and scratch.
    fill: Vec<f64>,
    scratch: Vec<f64>,
    /// `M = L_ww^{-1} D_k` of the fill (`c_k x n_{k+1}`).
    fill_factor: Vec<f64>,
    /// Right-hand side of the backward sweep (one block).
    back: Vec<f64>,
    /// Pivots replaced in the last factorisation.
    pub(crate) perturbed: usize,
}

/// Regularisation of one factorisation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct Regularisation {
    /// Added to the primal diagonal (subtracted from the dual one).
    pub(crate) delta: f64,
    /// Pivots whose signed value is below `threshold` become `+-dynamic`.
    pub(crate) threshold: f64,
    pub(crate) dynamic: f64,
}

impl BlockKkt {
    /// Blocks of `n[k]` primal unknowns, `e[k]` local equality and `c[k]` coupling
    /// multipliers (`c` of the last block must be 0).
    pub(crate) fn new(n: &[usize], e: &[usize], c: &[usize]) -> BlockKkt {
        let s = n.len();
        let mut offset = Vec::with_capacity(s + 1);
        let mut dense_start = Vec::with_capacity(s + 1);
        let mut next_start = Vec::with_capacity(s + 1);
        let (mut o, mut d, mut x) = (0, 0, 0);
        let mut max_b = 0;
        let mut max_n = 0;
        let mut max_m = 0;
        for k in 0..s {
            offset.push(o);
            dense_start.push(d);
            next_start.push(x);
            let b = n[k] + e[k] + c[k];
            o += b;
            d += b * b;
            x += if k + 1 < s { c[k] * n[k + 1] } else { 0 };
            max_b = max_b.max(b);
            max_n = max_n.max(n[k]);
            if k + 1 < s {
                max_m = max_m.max(c[k] * n[k + 1]);
            }
        }
        offset.push(o);
        dense_start.push(d);
        next_start.push(x);
        BlockKkt {
            n: n.to_vec(),
            e: e.to_vec(),
            c: c.to_vec(),
            offset,
            dense_start,
            next_start,
            matrix: vec![0.0; d],
            next: vec![0.0; x],
            factor: vec![0.0; d],
            fill: vec![0.0; max_n * max_n],
            scratch: vec![0.0; max_b],
            fill_factor: vec![0.0; max_m],
            back: vec![0.0; max_b],
            perturbed: 0,
        }
    }

    pub(crate) fn stages(&self) -> usize {
        self.n.len()
    }

    /// Length of a block vector.
    pub(crate) fn len(&self) -> usize {
        self.offset[self.stages()]
    }

    pub(crate) fn block_range(&self, k: usize) -> std::ops::Range<usize> {
        self.offset[k]..self.offset[k + 1]
    }

    pub(crate) fn sizes(&self, k: usize) -> (usize, usize, usize) {
        (self.n[k], self.e[k], self.c[k])
    }

    /// Block `k`'s diagonal matrix (`b_k x b_k`, column-major, both triangles), to assemble.
    pub(crate) fn block_mut(&mut self, k: usize) -> &mut [f64] {
        &mut self.matrix[self.dense_start[k]..self.dense_start[k + 1]]
    }

    /// `D_k`: `c_k x n_{k+1}`, row-major, to assemble.
    pub(crate) fn next_mut(&mut self, k: usize) -> &mut [f64] {
        &mut self.next[self.next_start[k]..self.next_start[k + 1]]
    }

    /// Factorise `matrix` (regularised) block after block.
    pub(crate) fn factorise(&mut self, reg: Regularisation) {
        self.perturbed = 0;
        let s = self.stages();
        for k in 0..s {
            let (nk, ek, ck) = self.sizes(k);
            let b = nk + ek + ck;
            let range = self.dense_start[k]..self.dense_start[k + 1];
            let f = &mut self.factor[range.clone()];
            f.copy_from_slice(&self.matrix[range]);
            if k > 0 {
                for j in 0..nk {
                    for i in 0..nk {
                        f[i + j * b] += self.fill[i + j * nk];
                    }
                }
            }
            for i in 0..b {
                f[i + i * b] += if i < nk { reg.delta } else { -reg.delta };
            }
            self.perturbed += ldl_in_place(f, b, nk, reg, &mut self.scratch);
            if k + 1 < s {
                self.next_fill(k);
            }
        }
    }

    /// `fill = D_k' (-S_k^{-1})_{ww} D_k = M' diag(-1/d_w) M` with `M = L_ww^{-1} D_k`.
    fn next_fill(&mut self, k: usize) {
        let (nk, ek, ck) = self.sizes(k);
        let b = nk + ek + ck;
        let n1 = self.n[k + 1];
        let f = &self.factor[self.dense_start[k]..self.dense_start[k + 1]];
        let d_next = &self.next[self.next_start[k]..self.next_start[k + 1]];
        let w0 = nk + ek;
        // M row by row (unit lower-triangular solve on whole rows), then accumulated into
        // `fill` with its diagonal weights.
        let fill = &mut self.fill[..n1 * n1];
        fill.fill(0.0);
        let m = &mut self.fill_factor[..ck * n1];
        m.copy_from_slice(&d_next[..ck * n1]);
        for i in 0..ck {
            let (done, rest) = m.split_at_mut(i * n1);
            let row = &mut rest[..n1];
            for p in 0..i {
                let l = f[(w0 + i) + (w0 + p) * b];
                if l != 0.0 {
                    for (x, y) in row.iter_mut().zip(&done[p * n1..(p + 1) * n1]) {
                        *x -= l * y;
                    }
                }
            }
        }
        for i in 0..ck {
            let d = f[(w0 + i) + (w0 + i) * b];
            let weight = -1.0 / d;
            let row = &m[i * n1..(i + 1) * n1];
            for c in 0..n1 {
                let rc = row[c] * weight;
                if rc == 0.0 {
                    continue;
                }
                for (x, r) in fill[c * n1..(c + 1) * n1].iter_mut().zip(row) {
                    *x += r * rc;
                }
            }
        }
    }

    /// `v = S_k^{-1} v` for the factorised block `k` (`v` of length `b_k`), whose entries
    /// before `first` are zero.
    fn block_solve(&self, k: usize, v: &mut [f64], first: usize) {
        let b = v.len();
        let f = &self.factor[self.dense_start[k]..self.dense_start[k + 1]];
        for j in first..b {
            let vj = v[j];
            if vj != 0.0 {
                let col = &f[j * b + j + 1..(j + 1) * b];
                for (x, l) in v[j + 1..].iter_mut().zip(col) {
                    *x -= l * vj;
                }
            }
        }
        for j in 0..b {
            v[j] /= f[j + j * b];
        }
        for j in (0..b).rev() {
            let col = &f[j * b + j + 1..(j + 1) * b];
            let s: f64 = col.iter().zip(&v[j + 1..]).map(|(l, x)| l * x).sum();
            v[j] -= s;
        }
    }

    /// Solve with the factorisation in place: `u = K_reg^{-1} u`.
    pub(crate) fn solve_in_place(&mut self, u: &mut [f64]) {
        let s = self.stages();
        for k in 0..s {
            if k > 0 {
                // v_x -= D_{k-1}' w_{k-1}
                let (np, ep, cp) = self.sizes(k - 1);
                let prev_w = self.offset[k - 1] + np + ep;
                let nk = self.n[k];
                let d = &self.next[self.next_start[k - 1]..self.next_start[k]];
                let (head, tail) = u.split_at_mut(self.offset[k]);
                for i in 0..cp {
                    let wi = head[prev_w + i];
                    if wi != 0.0 {
                        for j in 0..nk {
                            tail[j] -= d[i * nk + j] * wi;
                        }
                    }
                }
            }
            let r = self.block_range(k);
            self.block_solve(k, &mut u[r], 0);
        }
        let mut back = std::mem::take(&mut self.back);
        for k in (0..s.saturating_sub(1)).rev() {
            let (nk, ek, ck) = self.sizes(k);
            let b = nk + ek + ck;
            let n1 = self.n[k + 1];
            let d = &self.next[self.next_start[k]..self.next_start[k + 1]];
            let next_x = self.offset[k + 1];
            let t = &mut back[..b];
            t.fill(0.0);
            let mut any = false;
            for i in 0..ck {
                let v: f64 = (0..n1).map(|j| d[i * n1 + j] * u[next_x + j]).sum();
                t[nk + ek + i] = v;
                any |= v != 0.0;
            }
            if any {
                self.block_solve(k, t, nk + ek);
                let r = self.block_range(k);
                for (ui, ti) in u[r].iter_mut().zip(t.iter()) {
                    *ui -= ti;
                }
            }
        }
        self.back = back;
    }

    /// `out = K u` with the unregularised matrix.
    #[cfg(test)]
    pub(crate) fn multiply(&self, u: &[f64], out: &mut [f64]) {
        let s = self.stages();
        for k in 0..s {
            let (nk, ek, ck) = self.sizes(k);
            let b = nk + ek + ck;
            let m = &self.matrix[self.dense_start[k]..self.dense_start[k + 1]];
            let r = self.block_range(k);
            let uk = &u[r.clone()];
            let ok = &mut out[r];
            ok.fill(0.0);
            for j in 0..b {
                let uj = uk[j];
                if uj != 0.0 {
                    for (o, mij) in ok.iter_mut().zip(&m[j * b..(j + 1) * b]) {
                        *o += mij * uj;
                    }
                }
            }
        }
        for k in 0..s.saturating_sub(1) {
            let (nk, ek, ck) = self.sizes(k);
            let n1 = self.n[k + 1];
            let d = &self.next[self.next_start[k]..self.next_start[k + 1]];
            let w = self.offset[k] + nk + ek;
            let x1 = self.offset[k + 1];
            for i in 0..ck {
                let mut acc = 0.0;
                let wi = u[w + i];
                for j in 0..n1 {
                    let dij = d[i * n1 + j];
                    acc += dij * u[x1 + j];
                    out[x1 + j] += dij * wi;
                }
                out[w + i] += acc;
            }
        }
    }

    /// Solve `K u = rhs` (unregularised `K`) with the factorisation and up to `max_steps`
    /// steps of iterative refinement, stopping once the residual is below
    /// `tolerance * (1 + |rhs|_inf)` or stops shrinking. Returns the final residual norm.
    #[cfg(test)]
    pub(crate) fn solve_refined(
        &mut self,
        rhs: &[f64],
        u: &mut [f64],
        max_steps: usize,
        tolerance: f64,
    ) -> f64 {
        u.copy_from_slice(rhs);
        self.solve_in_place(u);
        let limit = tolerance * (1.0 + inf_norm(rhs));
        let mut residual = vec![0.0; u.len()];
        let mut correction = vec![0.0; u.len()];
        let mut norm = self.residual_norm(rhs, u, &mut residual);
        for _ in 0..max_steps {
            if norm <= limit {
                break;
            }
            correction.copy_from_slice(&residual);
            self.solve_in_place(&mut correction);
            for (ui, ci) in u.iter_mut().zip(&correction) {
                *ui += ci;
            }
            let before = norm;
            norm = self.residual_norm(rhs, u, &mut residual);
            if norm > 0.9 * before {
                if norm > before {
                    // A step that made it worse is undone.
                    for (ui, ci) in u.iter_mut().zip(&correction) {
                        *ui -= ci;
                    }
                    norm = before;
                }
                break;
            }
        }
        norm
    }

    #[cfg(test)]
    fn residual_norm(&self, rhs: &[f64], u: &[f64], residual: &mut [f64]) -> f64 {
        self.multiply(u, residual);
        let mut norm: f64 = 0.0;
        for (r, b) in residual.iter_mut().zip(rhs) {
            *r = b - *r;
            norm = norm.max(r.abs());
        }
        norm
    }
}

#[cfg(test)]
fn inf_norm(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a, x| a.max(x.abs()))
}

/// Dense `LDL'` of the lower triangle of the `b x b` column-major `a`, in place, without
/// pivoting: the first `positive` pivots are expected positive, the rest negative. Returns the
/// number of pivots replaced by `+-reg.dynamic`. Left-looking by columns, so the inner loops
/// run over contiguous column slices.
fn ldl_in_place(a: &mut [f64], b: usize, positive: usize, reg: Regularisation, w: &mut [f64]) -> usize {
    let mut perturbed = 0;
    for j in 0..b {
        // w_p = L_jp d_p for p < j.
        let mut d = a[j + j * b];
        for p in 0..j {
            let l = a[j + p * b];
            let wp = l * a[p + p * b];
            w[p] = wp;
            d -= l * wp;
        }
        let sign = if j < positive { 1.0 } else { -1.0 };
        // A NaN pivot is replaced too.
        if (sign * d).partial_cmp(&reg.threshold) != Some(std::cmp::Ordering::Greater) {
            d = sign * reg.dynamic;
            perturbed += 1;
        }
        let (left, right) = a.split_at_mut(j * b);
        right[j] = d;
        let col = &mut right[j + 1..b];
        for p in 0..j {
            let wp = w[p];
            if wp != 0.0 {
                let lp = &left[p * b + j + 1..p * b + b];
                for (x, y) in col.iter_mut().zip(lp) {
                    *x -= y * wp;
                }
            }
        }
        let inv = 1.0 / d;
        for x in col.iter_mut() {
            *x *= inv;
        }
    }
    perturbed
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A dense copy of the whole unregularised matrix.
    fn dense(k: &BlockKkt) -> Vec<Vec<f64>> {
        let n = k.len();
        let mut m = vec![vec![0.0; n]; n];
        for j in 0..n {
            let mut e = vec![0.0; n];
            e[j] = 1.0;
            let mut col = vec![0.0; n];
            k.multiply(&e, &mut col);
            for i in 0..n {
                m[i][j] = col[i];
            }
        }
        m
    }

    #[test]
    fn block_solve_matches_the_dense_system() {
        // Three stages: n = (2, 2, 1), local equalities e = (1, 0, 1), coupling c = (2, 1, 0).
        let (n, e, c) = ([2, 2, 1], [1, 0, 1], [2, 1, 0]);
        let mut kkt = BlockKkt::new(&n, &e, &c);
        // Deterministic pseudo-random data.
        let mut seed = 12345_u64;
        let mut rand = || {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            ((seed >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
        };
        for k in 0..3 {
            let b = n[k] + e[k] + c[k];
            let mut blk = vec![0.0; b * b];
            // Q_k = R'R + I, equality and coupling rows random.
            let r: Vec<f64> = (0..n[k] * n[k]).map(|_| rand()).collect();
            for i in 0..n[k] {
                for j in 0..n[k] {
                    let v: f64 = (0..n[k]).map(|p| r[p * n[k] + i] * r[p * n[k] + j]).sum();
                    blk[i + j * b] = v + if i == j { 1.0 } else { 0.0 };
                }
            }
            for row in n[k]..b {
                for j in 0..n[k] {
                    let v = rand();
                    blk[row + j * b] = v;
                    blk[j + row * b] = v;
                }
            }
            kkt.block_mut(k).copy_from_slice(&blk);
            if k < 2 {
                for v in kkt.next_mut(k).iter_mut() {
                    *v = rand();
                }
            }
        }
        kkt.factorise(Regularisation { delta: 1e-12, threshold: 1e-14, dynamic: 1e-8 });
        assert_eq!(kkt.perturbed, 0);
        let len = kkt.len();
        let rhs: Vec<f64> = (0..len).map(|_| rand()).collect();
        let mut u = vec![0.0; len];
        let res = kkt.solve_refined(&rhs, &mut u, 3, 1e-14);
        // Rounding on a random quasi-definite system of this size: well below 1e-10.
        assert!(res < 1e-10, "residual {res}");
        // Against the dense matrix, independently multiplied out.
        let m = dense(&kkt);
        for i in 0..len {
            let ku: f64 = (0..len).map(|j| m[i][j] * u[j]).sum();
            assert!((ku - rhs[i]).abs() < 1e-10, "row {i}: {ku} vs {}", rhs[i]);
        }
        // The dense matrix is symmetric (both coupling blocks present).
        for i in 0..len {
            for j in 0..len {
                assert!((m[i][j] - m[j][i]).abs() < 1e-15);
            }
        }
    }
}
