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
    /// `1 / D`, as a block vector.
    inv_diag: Vec<f64>,
    /// Per coupling row (in `next` row order): the one column of `D_k` it has, when every
    /// row of `D_k` has at most one (`selection[k]`); `D_k` is then applied by index.
    select_col: Vec<usize>,
    select_val: Vec<f64>,
    selection: Vec<bool>,
    /// Fill of the next block's `Q` (`n_{k+1} x n_{k+1}`) and scratch.
    fill: Vec<f64>,
    scratch: Vec<f64>,
    /// `M = L_ww^{-1} D_k` of the fill (`c_k x n_{k+1}`), or `L_ww^{-1}` and
    /// `X = L_ww^{-T} diag(-1/d_w) L_ww^{-1}` (`c_k x c_k` each) for a selection.
    fill_factor: Vec<f64>,
    cross: Vec<f64>,
    /// One block's worth of scratch for the solves.
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
        let mut max_c = 0;
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
            max_c = max_c.max(c[k]);
            if k + 1 < s {
                max_m = max_m.max(c[k] * n[k + 1]);
            }
        }
        offset.push(o);
        dense_start.push(d);
        next_start.push(x);
        let rows: usize = c.iter().sum();
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
            inv_diag: vec![0.0; o],
            select_col: vec![0; rows],
            select_val: vec![0.0; rows],
            selection: vec![false; s],
            fill: vec![0.0; max_n * max_n],
            scratch: vec![0.0; max_b],
            fill_factor: vec![0.0; max_m.max(max_c * max_c)],
            cross: vec![0.0; max_c * max_c],
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
        let mut row0 = 0;
        for k in 0..s {
            let (nk, ek, ck) = self.sizes(k);
            let b = nk + ek + ck;
            let range = self.dense_start[k]..self.dense_start[k + 1];
            let f = &mut self.factor[range.clone()];
            f.copy_from_slice(&self.matrix[range]);
            if k > 0 {
                for j in 0..nk {
                    let (col, fill) = (&mut f[j * b..j * b + nk], &self.fill[j * nk..(j + 1) * nk]);
                    for (x, y) in col.iter_mut().zip(fill) {
                        *x += y;
                    }
                }
            }
            for i in 0..b {
                f[i + i * b] += if i < nk { reg.delta } else { -reg.delta };
            }
            self.perturbed += ldl_in_place(f, b, nk, reg, &mut self.scratch);
            let inv = &mut self.inv_diag[self.offset[k]..self.offset[k + 1]];
            for (i, x) in inv.iter_mut().enumerate() {
                *x = 1.0 / f[i + i * b];
            }
            if k + 1 < s {
                self.detect_selection(k, row0);
                if self.selection[k] {
                    self.next_fill_selection(k, row0);
                } else {
                    self.next_fill(k);
                }
            }
            row0 += ck;
        }
    }

    /// Whether every row of `D_k` has at most one nonzero (true of continuity rows, whose
    /// next-stage part is `-I` up to scaling); records the column and value of each.
    fn detect_selection(&mut self, k: usize, row0: usize) {
        let (ck, n1) = (self.c[k], self.n[k + 1]);
        let d = &self.next[self.next_start[k]..self.next_start[k + 1]];
        let mut ok = true;
        for i in 0..ck {
            let row = &d[i * n1..(i + 1) * n1];
            let mut col = 0;
            let mut val = 0.0;
            let mut count = 0;
            for (j, &v) in row.iter().enumerate() {
                if v != 0.0 {
                    count += 1;
                    col = j;
                    val = v;
                }
            }
            if count > 1 {
                ok = false;
                break;
            }
            self.select_col[row0 + i] = col;
            self.select_val[row0 + i] = val;
        }
        self.selection[k] = ok;
    }

    /// `fill = D_k' X D_k` with `X = L_ww^{-T} diag(-1/d_w) L_ww^{-1}`, scattered by the
    /// selection's columns.
    fn next_fill_selection(&mut self, k: usize, row0: usize) {
        let (nk, ek, ck) = self.sizes(k);
        let b = nk + ek + ck;
        let n1 = self.n[k + 1];
        let w0 = nk + ek;
        let f = &self.factor[self.dense_start[k]..self.dense_start[k + 1]];
        let inv = &self.inv_diag[self.offset[k] + w0..self.offset[k + 1]];
        // Linv = L_ww^{-1}, column-major lower (unit diagonal), by columns.
        let li = &mut self.fill_factor[..ck * ck];
        li.fill(0.0);
        for j in 0..ck {
            let col = &mut li[j * ck..(j + 1) * ck];
            col[j] = 1.0;
            for i in j + 1..ck {
                let mut acc = 0.0;
                for p in j..i {
                    acc -= f[(w0 + i) + (w0 + p) * b] * col[p];
                }
                col[i] = acc;
            }
        }
        // X_ij = sum_{p >= max(i, j)} Linv_pi Linv_pj (-1/d_p).
        let x = &mut self.cross[..ck * ck];
        for j in 0..ck {
            for i in j..ck {
                let (ci, cj) = (&li[i * ck..(i + 1) * ck], &li[j * ck..(j + 1) * ck]);
                let mut acc = 0.0;
                for p in i..ck {
                    acc -= ci[p] * cj[p] * inv[p];
                }
                x[i + j * ck] = acc;
                x[j + i * ck] = acc;
            }
        }
        let fill = &mut self.fill[..n1 * n1];
        fill.fill(0.0);
        let (cols, vals) = (&self.select_col[row0..row0 + ck], &self.select_val[row0..row0 + ck]);
        for j in 0..ck {
            if vals[j] == 0.0 {
                continue;
            }
            for i in 0..ck {
                fill[cols[i] + cols[j] * n1] += vals[i] * vals[j] * x[i + j * ck];
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
        let inv = &self.inv_diag[self.offset[k] + w0..self.offset[k + 1]];
        for i in 0..ck {
            let weight = -inv[i];
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

    /// Solve with the factorisation in place: `u = K_reg^{-1} u`.
    ///
    /// With the stage-wise factorisation `K = L D L'`, the block of `L` between `x_{k+1}` and
    /// `w_k` is `D_k' L_ww^{-T} diag(1/d_w)`: the forward sweep subtracts
    /// `D_k' L_ww^{-T} z_w` from the next block (`z = D^{-1} y`, already scaled), the backward
    /// sweep subtracts `diag(1/d_w) L_ww^{-1} D_k x_{k+1}` from `z_w`.
    pub(crate) fn solve_in_place(&mut self, u: &mut [f64]) {
        let s = self.stages();
        let mut back = std::mem::take(&mut self.back);
        let mut row0 = 0;
        for k in 0..s {
            let (nk, ek, ck) = self.sizes(k);
            let b = nk + ek + ck;
            let r = self.block_range(k);
            let f = &self.factor[self.dense_start[k]..self.dense_start[k + 1]];
            let v = &mut u[r.clone()];
            forward_unit(f, b, v);
            for (x, d) in v.iter_mut().zip(&self.inv_diag[r.clone()]) {
                *x *= d;
            }
            if k + 1 < s && ck > 0 {
                // t = L_ww^{-T} z_w, then u_{k+1,x} -= D_k' t.
                let w0 = nk + ek;
                let t = &mut back[..ck];
                t.copy_from_slice(&v[w0..]);
                backward_unit_part(f, b, w0, t);
                let n1 = self.n[k + 1];
                let next_x = &mut u[self.offset[k + 1]..self.offset[k + 1] + n1];
                if self.selection[k] {
                    let cols = &self.select_col[row0..row0 + ck];
                    let vals = &self.select_val[row0..row0 + ck];
                    for i in 0..ck {
                        next_x[cols[i]] -= vals[i] * t[i];
                    }
                } else {
                    let d = &self.next[self.next_start[k]..self.next_start[k + 1]];
                    for i in 0..ck {
                        let ti = t[i];
                        if ti != 0.0 {
                            for (x, dij) in next_x.iter_mut().zip(&d[i * n1..(i + 1) * n1]) {
                                *x -= dij * ti;
                            }
                        }
                    }
                }
            }
            row0 += ck;
        }
        for k in (0..s).rev() {
            let (nk, ek, ck) = self.sizes(k);
            let b = nk + ek + ck;
            row0 -= ck;
            if k + 1 < s && ck > 0 {
                // z_w -= diag(1/d_w) L_ww^{-1} D_k x_{k+1}.
                let w0 = nk + ek;
                let n1 = self.n[k + 1];
                let t = &mut back[..ck];
                let next_x = &u[self.offset[k + 1]..self.offset[k + 1] + n1];
                if self.selection[k] {
                    let cols = &self.select_col[row0..row0 + ck];
                    let vals = &self.select_val[row0..row0 + ck];
                    for i in 0..ck {
                        t[i] = vals[i] * next_x[cols[i]];
                    }
                } else {
                    let d = &self.next[self.next_start[k]..self.next_start[k + 1]];
                    for i in 0..ck {
                        t[i] = d[i * n1..(i + 1) * n1].iter().zip(next_x).map(|(a, x)| a * x).sum();
                    }
                }
                let f = &self.factor[self.dense_start[k]..self.dense_start[k + 1]];
                forward_unit_part(f, b, w0, t);
                let o = self.offset[k] + w0;
                let inv = &self.inv_diag[o..o + ck];
                for ((x, ti), d) in u[o..o + ck].iter_mut().zip(t.iter()).zip(inv) {
                    *x -= ti * d;
                }
            }
            let r = self.block_range(k);
            let f = &self.factor[self.dense_start[k]..self.dense_start[k + 1]];
            backward_unit(f, b, &mut u[r]);
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
/// number of pivots replaced by `+-reg.dynamic`. Left-looking by columns; each column's
/// update by the columns before it runs four rows at a time, so the short loops of these
/// small blocks carry four products per pass.
fn ldl_in_place(
    a: &mut [f64],
    b: usize,
    positive: usize,
    reg: Regularisation,
    w: &mut [f64],
) -> usize {
    assert!(a.len() == b * b && w.len() >= b);
    let mut perturbed = 0;
    for j in 0..b {
        let (left, right) = a.split_at_mut(j * b);
        let colj = &mut right[..b];
        // w_p = L_jp d_p for p < j.
        let mut d = colj[j];
        for (p, lc) in left.chunks_exact(b).enumerate() {
            let l = lc[j];
            let wp = l * lc[p];
            w[p] = wp;
            d -= l * wp;
        }
        let sign = if j < positive { 1.0 } else { -1.0 };
        // A NaN pivot is replaced too.
        if (sign * d).partial_cmp(&reg.threshold) != Some(std::cmp::Ordering::Greater) {
            d = sign * reg.dynamic;
            perturbed += 1;
        }
        colj[j] = d;
        let wj = &w[..j];
        let mut i = j + 1;
        while i + 4 <= b {
            let mut acc = [colj[i], colj[i + 1], colj[i + 2], colj[i + 3]];
            for (lc, &wp) in left.chunks_exact(b).zip(wj) {
                let v = &lc[i..i + 4];
                acc[0] -= v[0] * wp;
                acc[1] -= v[1] * wp;
                acc[2] -= v[2] * wp;
                acc[3] -= v[3] * wp;
            }
            colj[i..i + 4].copy_from_slice(&acc);
            i += 4;
        }
        while i + 2 <= b {
            let mut acc = [colj[i], colj[i + 1]];
            for (lc, &wp) in left.chunks_exact(b).zip(wj) {
                let v = &lc[i..i + 2];
                acc[0] -= v[0] * wp;
                acc[1] -= v[1] * wp;
            }
            colj[i..i + 2].copy_from_slice(&acc);
            i += 2;
        }
        if i < b {
            let mut acc = colj[i];
            for (lc, &wp) in left.chunks_exact(b).zip(wj) {
                acc -= lc[i] * wp;
            }
            colj[i] = acc;
        }
        let inv = 1.0 / d;
        for x in colj[j + 1..].iter_mut() {
            *x *= inv;
        }
    }
    perturbed
}

/// `v = L^{-1} v` for the unit lower triangle of the `b x b` column-major factor `f`, four
/// columns at a time.
fn forward_unit(f: &[f64], b: usize, v: &mut [f64]) {
    assert!(f.len() == b * b && v.len() == b);
    let mut j = 0;
    while j + 4 <= b {
        let c0 = &f[j * b..(j + 1) * b];
        let c1 = &f[(j + 1) * b..(j + 2) * b];
        let c2 = &f[(j + 2) * b..(j + 3) * b];
        let c3 = &f[(j + 3) * b..(j + 4) * b];
        let v0 = v[j];
        let v1 = v[j + 1] - c0[j + 1] * v0;
        let v2 = v[j + 2] - c0[j + 2] * v0 - c1[j + 2] * v1;
        let v3 = v[j + 3] - c0[j + 3] * v0 - c1[j + 3] * v1 - c2[j + 3] * v2;
        v[j + 1] = v1;
        v[j + 2] = v2;
        v[j + 3] = v3;
        let r = j + 4;
        let t = &mut v[r..];
        let n = t.len();
        let (a0, a1, a2, a3) = (&c0[r..r + n], &c1[r..r + n], &c2[r..r + n], &c3[r..r + n]);
        for i in 0..n {
            t[i] -= a0[i] * v0 + a1[i] * v1 + a2[i] * v2 + a3[i] * v3;
        }
        j += 4;
    }
    while j < b {
        let vj = v[j];
        let col = &f[j * b + j + 1..(j + 1) * b];
        for (x, l) in v[j + 1..].iter_mut().zip(col) {
            *x -= l * vj;
        }
        j += 1;
    }
}

/// `v = L^{-T} v` for the unit lower triangle of `f`, four columns at a time.
fn backward_unit(f: &[f64], b: usize, v: &mut [f64]) {
    assert!(f.len() == b * b && v.len() == b);
    let rem = b % 4;
    for j in (b - rem..b).rev() {
        let col = &f[j * b + j + 1..(j + 1) * b];
        let s: f64 = col.iter().zip(&v[j + 1..]).map(|(l, x)| l * x).sum();
        v[j] -= s;
    }
    let mut end = b - rem;
    while end >= 4 {
        let j = end - 4;
        let c0 = &f[j * b..(j + 1) * b];
        let c1 = &f[(j + 1) * b..(j + 2) * b];
        let c2 = &f[(j + 2) * b..(j + 3) * b];
        let c3 = &f[(j + 3) * b..(j + 4) * b];
        let (mut s0, mut s1, mut s2, mut s3) = (0.0, 0.0, 0.0, 0.0);
        let t = &v[end..];
        let n = t.len();
        let (a0, a1, a2, a3) =
            (&c0[end..end + n], &c1[end..end + n], &c2[end..end + n], &c3[end..end + n]);
        for i in 0..n {
            let x = t[i];
            s0 += a0[i] * x;
            s1 += a1[i] * x;
            s2 += a2[i] * x;
            s3 += a3[i] * x;
        }
        let x3 = v[j + 3] - s3;
        let x2 = v[j + 2] - s2 - c2[j + 3] * x3;
        let x1 = v[j + 1] - s1 - c1[j + 2] * x2 - c1[j + 3] * x3;
        let x0 = v[j] - s0 - c0[j + 1] * x1 - c0[j + 2] * x2 - c0[j + 3] * x3;
        v[j] = x0;
        v[j + 1] = x1;
        v[j + 2] = x2;
        v[j + 3] = x3;
        end = j;
    }
}

/// `t = L_ww^{-1} t` for the trailing unit lower triangle of `f` from index `w0` (`t` of
/// length `b - w0`).
fn forward_unit_part(f: &[f64], b: usize, w0: usize, t: &mut [f64]) {
    let c = t.len();
    for j in 0..c {
        let tj = t[j];
        if tj != 0.0 {
            let col = &f[(w0 + j) * b + w0 + j + 1..(w0 + j + 1) * b];
            for (x, l) in t[j + 1..].iter_mut().zip(col) {
                *x -= l * tj;
            }
        }
    }
}

/// `t = L_ww^{-T} t`, the transpose of [`forward_unit_part`].
fn backward_unit_part(f: &[f64], b: usize, w0: usize, t: &mut [f64]) {
    let c = t.len();
    for j in (0..c).rev() {
        let col = &f[(w0 + j) * b + w0 + j + 1..(w0 + j + 1) * b];
        let s: f64 = col.iter().zip(&t[j + 1..]).map(|(l, x)| l * x).sum();
        t[j] -= s;
    }
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

    /// A general coupling block `D_k`, and one whose rows each have one nonzero (the
    /// continuity rows' shape, factorised by the selection path).
    #[test]
    fn block_solve_matches_the_dense_system() {
        check_against_dense(false);
        check_against_dense(true);
    }

    fn check_against_dense(selection: bool) {
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
                let n1 = n[k + 1];
                for (t, v) in kkt.next_mut(k).iter_mut().enumerate() {
                    let (row, col) = (t / n1, t % n1);
                    let keep = !selection || col == (row + k) % n1;
                    *v = if keep { rand() } else { 0.0 };
                }
            }
        }
        kkt.factorise(Regularisation { delta: 1e-12, threshold: 1e-14, dynamic: 1e-8 });
        assert_eq!(kkt.perturbed, 0);
        // (Stage 1's single coupling row on a single variable is a selection either way.)
        assert_eq!(kkt.selection[0], selection);
        assert!(kkt.selection[1]);
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
