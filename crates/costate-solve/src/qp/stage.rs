//! The stage structure of a multiple-shooting QP and the QP data laid out along it.
//!
//! Owns [`StageLayout`] (which variables and rows belong to which stage) and [`StageQp`] (dense
//! blocks per stage: Hessian, local rows, coupling rows). Must not solve anything or know where
//! the structure came from: the transcription builds the layout once per solve, the SQP fills
//! the blocks in place every iteration, the QP solvers read them.
//!
//! A stage QP is
//!
//! ```text
//! minimise   sum_k 1/2 d_k' H_k d_k + g_k' d_k
//! subject to rl_i <= a_i' d_k <= ru_i                    local row i of stage k
//!            a_i' d_k + b_i' d_{k+1} == rl_i (== ru_i)   coupling row i of stage k
//!            dl <= d <= du
//! ```
//!
//! A row may instead be *penalised* (`row_penalty[i]` finite): it is not enforced, and
//! `row_penalty[i]` times its violation `dist(a_i' d, [rl_i, ru_i])` joins the objective (the
//! l1 relaxation of an elastic QP). Its multiplier then lies in `[-row_penalty[i],
//! row_penalty[i]]`. Hard rows have an infinite penalty (the default).
//!
//! with `d_k` the variables of stage `k`. Variables are numbered stage after stage, and so are
//! rows: stage `k`'s local rows, then its coupling rows (which tie it to stage `k + 1`; the
//! last stage has none). Coupling rows are equalities.
//!
//! Storage: `H_k` is dense `n_k x n_k`, column-major, both triangles (symmetric). Local rows of
//! stage `k` are dense rows of width `n_k`; coupling rows of stage `k` dense rows of width
//! `n_k + n_{k+1}` over the variables of both stages (contiguous, since stage `k + 1`'s follow
//! stage `k`'s). Rows are row-major, one after another, stage by stage.
//!
//! Multiplier convention: `H d + g + A' lambda + nu = 0`, with `lambda[i] >= 0` when the upper
//! side of row `i` is active and `<= 0` when the lower side is (likewise `nu` for bounds).

use std::ops::Range;
use std::sync::Arc;

use super::QpError;
use crate::nlp::finite_bound;

/// Which variables and rows belong to which stage, and where each stage's blocks are stored.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct StageLayout {
    /// Stage `k` holds variables `var_start[k]..var_start[k + 1]`.
    var_start: Vec<usize>,
    /// Stage `k` holds rows `row_start[k]..row_start[k + 1]`: local ones up to `local_end[k]`,
    /// coupling ones after.
    row_start: Vec<usize>,
    local_end: Vec<usize>,
    /// Start of stage `k`'s Hessian block in [`StageQp::hessian`].
    hessian_start: Vec<usize>,
    /// Start of stage `k`'s row block (local rows, then coupling rows) in
    /// [`StageQp::jacobian`].
    jacobian_start: Vec<usize>,
    /// Per row: start of its storage, its width and the first variable it covers (looked up
    /// on every product, so kept rather than recomputed).
    row_offset: Vec<usize>,
    row_width: Vec<usize>,
    row_first: Vec<usize>,
}

impl StageLayout {
    /// Stages with `variables[k]` variables, `local_rows[k]` local rows and `coupling_rows[k]`
    /// coupling rows each (the last stage's must be 0). `Err` for mismatched lengths, no
    /// stage, or coupling rows on the last stage.
    pub fn new(
        variables: &[usize],
        local_rows: &[usize],
        coupling_rows: &[usize],
    ) -> Result<StageLayout, QpError> {
        let s = variables.len();
        if s == 0 {
            return Err(QpError("a stage layout needs at least one stage".into()));
        }
        if local_rows.len() != s || coupling_rows.len() != s {
            return Err(QpError("stage sizes differ in length".into()));
        }
        if coupling_rows[s - 1] != 0 {
            return Err(QpError("the last stage cannot have coupling rows".into()));
        }
        let mut var_start = Vec::with_capacity(s + 1);
        let mut row_start = Vec::with_capacity(s + 1);
        let mut local_end = Vec::with_capacity(s);
        let mut hessian_start = Vec::with_capacity(s + 1);
        let mut jacobian_start = Vec::with_capacity(s + 1);
        let (mut v, mut r, mut h, mut j) = (0, 0, 0, 0);
        for k in 0..s {
            var_start.push(v);
            row_start.push(r);
            hessian_start.push(h);
            jacobian_start.push(j);
            let n = variables[k];
            let next = if k + 1 < s { variables[k + 1] } else { 0 };
            local_end.push(r + local_rows[k]);
            v += n;
            r += local_rows[k] + coupling_rows[k];
            h += n * n;
            j += local_rows[k] * n + coupling_rows[k] * (n + next);
        }
        var_start.push(v);
        row_start.push(r);
        hessian_start.push(h);
        jacobian_start.push(j);
        let mut row_offset = Vec::with_capacity(r);
        let mut row_width = Vec::with_capacity(r);
        let mut row_first = Vec::with_capacity(r);
        for k in 0..s {
            let n = variables[k];
            let next = if k + 1 < s { variables[k + 1] } else { 0 };
            let mut at = jacobian_start[k];
            for _ in 0..local_rows[k] {
                row_offset.push(at);
                row_width.push(n);
                row_first.push(var_start[k]);
                at += n;
            }
            for _ in 0..coupling_rows[k] {
                row_offset.push(at);
                row_width.push(n + next);
                row_first.push(var_start[k]);
                at += n + next;
            }
        }
        Ok(StageLayout {
            var_start,
            row_start,
            local_end,
            hessian_start,
            jacobian_start,
            row_offset,
            row_width,
            row_first,
        })
    }

    /// One stage holding `n` variables and `m` local rows: a QP without stage structure.
    pub fn single(n: usize, m: usize) -> StageLayout {
        StageLayout::new(&[n], &[m], &[0]).expect("one stage without coupling is valid")
    }

    pub fn stages(&self) -> usize {
        self.local_end.len()
    }

    pub fn num_variables(&self) -> usize {
        self.var_start[self.stages()]
    }

    pub fn num_rows(&self) -> usize {
        self.row_start[self.stages()]
    }

    pub fn vars(&self, k: usize) -> Range<usize> {
        self.var_start[k]..self.var_start[k + 1]
    }

    pub fn stage_size(&self, k: usize) -> usize {
        self.var_start[k + 1] - self.var_start[k]
    }

    pub fn local_rows(&self, k: usize) -> Range<usize> {
        self.row_start[k]..self.local_end[k]
    }

    pub fn coupling_rows(&self, k: usize) -> Range<usize> {
        self.local_end[k]..self.row_start[k + 1]
    }

    /// Stage of variable `j` (`j < num_variables()`).
    pub fn stage_of_var(&self, j: usize) -> usize {
        self.var_start.partition_point(|&s| s <= j) - 1
    }

    /// Stage of row `i` (`i < num_rows()`), and whether it is a coupling row.
    pub fn stage_of_row(&self, i: usize) -> (usize, bool) {
        let k = self.row_start.partition_point(|&s| s <= i) - 1;
        (k, i >= self.local_end[k])
    }

    /// Length of [`StageQp::hessian`].
    pub fn hessian_len(&self) -> usize {
        self.hessian_start[self.stages()]
    }

    /// Length of [`StageQp::jacobian`].
    pub fn jacobian_len(&self) -> usize {
        self.jacobian_start[self.stages()]
    }

    /// Range of stage `k`'s dense Hessian block in [`StageQp::hessian`].
    pub fn hessian_block(&self, k: usize) -> Range<usize> {
        self.hessian_start[k]..self.hessian_start[k + 1]
    }

    /// Width of row `i`'s dense storage and the first variable it covers.
    pub fn row_span(&self, i: usize) -> (usize, usize) {
        (self.row_width[i], self.row_first[i])
    }

    /// Range of row `i`'s dense storage in [`StageQp::jacobian`].
    pub fn row_block(&self, i: usize) -> Range<usize> {
        self.row_offset[i]..self.row_offset[i] + self.row_width[i]
    }

    /// Position in [`StageQp::jacobian`] of entry `(row, var)`, or `None` when the variable is
    /// outside the row's stages.
    pub fn jacobian_position(&self, row: usize, var: usize) -> Option<usize> {
        let (w, first) = self.row_span(row);
        if var < first || var >= first + w {
            return None;
        }
        Some(self.row_block(row).start + (var - first))
    }

    /// Positions in [`StageQp::hessian`] of entries `(r, c)` and `(c, r)`, or `None` when the
    /// two variables are in different stages.
    pub fn hessian_positions(&self, r: usize, c: usize) -> Option<(usize, usize)> {
        let k = self.stage_of_var(r);
        if !self.vars(k).contains(&c) {
            return None;
        }
        let n = self.stage_size(k);
        let (i, j) = (r - self.var_start[k], c - self.var_start[k]);
        let base = self.hessian_start[k];
        Some((base + i + j * n, base + j + i * n))
    }
}

/// One QP along a [`StageLayout`]; see the module docs for the storage. Infinite bounds are
/// `+-inf` (magnitudes >= 1e20 count as infinite).
#[derive(Clone, Debug, PartialEq)]
pub struct StageQp {
    pub layout: Arc<StageLayout>,
    pub hessian: Vec<f64>,
    pub gradient: Vec<f64>,
    pub jacobian: Vec<f64>,
    pub row_lower: Vec<f64>,
    pub row_upper: Vec<f64>,
    pub var_lower: Vec<f64>,
    pub var_upper: Vec<f64>,
    /// Per row: `+inf` for a hard row, else the weight of its violation in the objective.
    pub row_penalty: Vec<f64>,
}

impl StageQp {
    /// All data zero, all bounds infinite.
    pub fn zeros(layout: Arc<StageLayout>) -> StageQp {
        let (n, m) = (layout.num_variables(), layout.num_rows());
        StageQp {
            hessian: vec![0.0; layout.hessian_len()],
            gradient: vec![0.0; n],
            jacobian: vec![0.0; layout.jacobian_len()],
            row_lower: vec![f64::NEG_INFINITY; m],
            row_upper: vec![f64::INFINITY; m],
            var_lower: vec![f64::NEG_INFINITY; n],
            var_upper: vec![f64::INFINITY; n],
            row_penalty: vec![f64::INFINITY; m],
            layout,
        }
    }

    pub fn num_variables(&self) -> usize {
        self.gradient.len()
    }

    pub fn num_rows(&self) -> usize {
        self.row_lower.len()
    }

    /// Whether row `i` is penalised rather than enforced.
    pub fn is_penalised(&self, i: usize) -> bool {
        finite_bound(self.row_penalty[i])
    }

    /// Dense row `i` and the first variable it covers.
    #[inline]
    pub fn row(&self, i: usize) -> (&[f64], usize) {
        let l = &self.layout;
        (&self.jacobian[l.row_block(i)], l.row_first[i])
    }

    /// Stage `k`'s Hessian block (`n_k x n_k`, column-major).
    pub fn hessian_block(&self, k: usize) -> &[f64] {
        &self.hessian[self.layout.hessian_block(k)]
    }

    /// Add `v` at `(r, c)` and, off the diagonal, at `(c, r)`; `Err` if they are in different
    /// stages.
    pub fn add_hessian(&mut self, r: usize, c: usize, v: f64) -> Result<(), QpError> {
        let (a, b) = self
            .layout
            .hessian_positions(r, c)
            .ok_or_else(|| QpError(format!("hessian entry ({r}, {c}) couples two stages")))?;
        self.hessian[a] += v;
        if a != b {
            self.hessian[b] += v;
        }
        Ok(())
    }

    /// Set entry `(row, var)` of the constraint matrix; `Err` outside the row's stages.
    pub fn set_jacobian(&mut self, row: usize, var: usize, v: f64) -> Result<(), QpError> {
        let p = self.layout.jacobian_position(row, var).ok_or_else(|| {
            QpError(format!("constraint entry ({row}, {var}) lies outside the row's stages"))
        })?;
        self.jacobian[p] = v;
        Ok(())
    }

    /// Sizes, finiteness, symmetry, bound order, and equality coupling rows.
    pub fn validate(&self) -> Result<(), QpError> {
        let l = &self.layout;
        let (n, m) = (l.num_variables(), l.num_rows());
        let bad = |s: String| Err(QpError(s));
        if self.gradient.len() != n || self.var_lower.len() != n || self.var_upper.len() != n {
            return bad("variable data differ in length from the layout".into());
        }
        if self.row_lower.len() != m || self.row_upper.len() != m || self.row_penalty.len() != m {
            return bad("row bounds differ in length from the layout".into());
        }
        if self.hessian.len() != l.hessian_len() || self.jacobian.len() != l.jacobian_len() {
            return bad("matrix blocks differ in length from the layout".into());
        }
        if let Some(i) = self.gradient.iter().position(|v| !v.is_finite()) {
            return bad(format!("non-finite gradient entry {i}"));
        }
        if let Some(i) = self.jacobian.iter().position(|v| !v.is_finite()) {
            return bad(format!("non-finite constraint matrix entry at storage position {i}"));
        }
        for k in 0..l.stages() {
            let nk = l.stage_size(k);
            let h = self.hessian_block(k);
            let scale = h.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
            for j in 0..nk {
                for i in 0..nk {
                    let (a, b) = (h[i + j * nk], h[j + i * nk]);
                    if !a.is_finite() {
                        return bad(format!("non-finite hessian entry in stage {k}"));
                    }
                    if (a - b).abs() > 1e-10 * scale {
                        return bad(format!("hessian block of stage {k} is not symmetric"));
                    }
                }
            }
        }
        let ordered = |lo: f64, hi: f64| !lo.is_nan() && !hi.is_nan() && lo <= hi;
        for i in 0..m {
            if !ordered(self.row_lower[i], self.row_upper[i]) {
                return bad(format!("row {i}: lower bound above upper bound or NaN"));
            }
            if l.stage_of_row(i).1
                && !(finite_bound(self.row_lower[i]) && self.row_lower[i] == self.row_upper[i])
            {
                return bad(format!("coupling row {i} is not an equality"));
            }
        }
        if let Some(i) = self.row_penalty.iter().position(|&w| w.is_nan() || w <= 0.0) {
            return bad(format!("row {i}: penalty not positive"));
        }
        for j in 0..n {
            if !ordered(self.var_lower[j], self.var_upper[j]) {
                return bad(format!("variable {j}: lower bound above upper bound or NaN"));
            }
        }
        Ok(())
    }

    /// `out = A d`.
    pub fn mul_jacobian(&self, d: &[f64], out: &mut [f64]) {
        for (i, o) in out.iter_mut().enumerate() {
            let (row, first) = self.row(i);
            *o = row.iter().zip(&d[first..first + row.len()]).map(|(a, b)| a * b).sum();
        }
    }

    /// `out += A' v`.
    pub fn mul_jacobian_transpose_add(&self, v: &[f64], out: &mut [f64]) {
        for (i, &vi) in v.iter().enumerate() {
            if vi == 0.0 {
                continue;
            }
            let (row, first) = self.row(i);
            for (o, a) in out[first..first + row.len()].iter_mut().zip(row) {
                *o += a * vi;
            }
        }
    }

    /// `out = H d`.
    pub fn mul_hessian(&self, d: &[f64], out: &mut [f64]) {
        mul_blocks(&self.layout, &self.hessian, d, out);
    }

    /// `1/2 d'Hd + g'd`.
    pub fn objective(&self, d: &[f64]) -> f64 {
        let mut hd = vec![0.0; d.len()];
        self.mul_hessian(d, &mut hd);
        d.iter().zip(&hd).zip(&self.gradient).map(|((di, hi), gi)| di * (0.5 * hi + gi)).sum()
    }
}

/// `out = H d` for Hessian blocks `hessian` laid out like [`StageQp::hessian`].
pub fn mul_blocks(l: &StageLayout, hessian: &[f64], d: &[f64], out: &mut [f64]) {
    {
        for k in 0..l.stages() {
            let r = l.vars(k);
            let nk = r.len();
            let h = &hessian[l.hessian_block(k)];
            let (dk, ok) = (&d[r.clone()], &mut out[r]);
            ok.fill(0.0);
            for j in 0..nk {
                let dj = dk[j];
                if dj != 0.0 {
                    for (o, hij) in ok.iter_mut().zip(&h[j * nk..(j + 1) * nk]) {
                        *o += hij * dj;
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn positions_follow_the_stage_order() {
        // Stages of 2, 3 and 1 variables; stage 0: 1 local + 2 coupling rows, stage 1: 0 + 1,
        // stage 2: 2 local rows.
        let l = StageLayout::new(&[2, 3, 1], &[1, 0, 2], &[2, 1, 0]).unwrap();
        assert_eq!((l.num_variables(), l.num_rows()), (6, 6));
        assert_eq!(l.local_rows(0), 0..1);
        assert_eq!(l.coupling_rows(0), 1..3);
        assert_eq!(l.coupling_rows(1), 3..4);
        assert_eq!(l.local_rows(2), 4..6);
        assert_eq!(l.stage_of_row(2), (0, true));
        assert_eq!(l.stage_of_row(4), (2, false));
        assert_eq!(l.stage_of_var(4), 1);
        // Row 1 (coupling of stage 0) spans variables 0..5 and is stored after row 0 (width 2).
        assert_eq!(l.row_block(1), 2..7);
        assert_eq!(l.jacobian_position(1, 4), Some(6));
        assert_eq!(l.jacobian_position(0, 2), None);
        assert_eq!(l.jacobian_position(3, 5), Some(2 + 2 * 5 + 3));
        assert_eq!(l.hessian_positions(3, 4), Some((4 + 1 + 2 * 3, 4 + 2 + 3)));
        assert_eq!(l.hessian_positions(1, 2), None);
        assert_eq!(l.jacobian_len(), 2 + 2 * 5 + 4 + 2);
        assert!(StageLayout::new(&[1], &[0], &[1]).is_err());
    }

    #[test]
    fn products_match_dense_arithmetic() {
        let l = Arc::new(StageLayout::new(&[2, 1], &[1, 1], &[1, 0]).unwrap());
        let mut qp = StageQp::zeros(l);
        qp.add_hessian(0, 0, 2.0).unwrap();
        qp.add_hessian(1, 0, 1.0).unwrap();
        qp.add_hessian(1, 1, 3.0).unwrap();
        qp.add_hessian(2, 2, 4.0).unwrap();
        qp.set_jacobian(0, 1, 5.0).unwrap();
        qp.set_jacobian(1, 0, 1.0).unwrap();
        qp.set_jacobian(1, 2, -1.0).unwrap();
        qp.set_jacobian(2, 2, 7.0).unwrap();
        qp.gradient = vec![1.0, 0.0, -1.0];
        let d = [1.0, 2.0, 3.0];
        let mut hd = [0.0; 3];
        qp.mul_hessian(&d, &mut hd);
        assert_eq!(hd, [4.0, 7.0, 12.0]);
        let mut ad = [0.0; 3];
        qp.mul_jacobian(&d, &mut ad);
        assert_eq!(ad, [10.0, -2.0, 21.0]);
        let mut atv = [0.0; 3];
        qp.mul_jacobian_transpose_add(&[1.0, 1.0, 1.0], &mut atv);
        assert_eq!(atv, [1.0, 5.0, 6.0]);
        // 1/2 (4 + 14 + 36) + (1 - 3) = 25.
        assert_eq!(qp.objective(&d), 25.0);
        qp.row_lower[1] = 0.0;
        qp.row_upper[1] = 0.0;
        assert!(qp.validate().is_ok());
        qp.row_upper[1] = 1.0;
        assert!(qp.validate().is_err());
    }
}
