//! Diagonal equilibration of a stage QP before the interior-point method sees it.
//!
//! Owns [`Equilibration`]: the variable scales `D`, row scales `E` and cost scale `c`, the
//! scaled copy of the QP and the way back. Ruiz's iteration (D. Ruiz, "A scaling algorithm to
//! equilibrate both rows and columns norms in matrices", RAL-TR-2001-034, 2001) on the KKT
//! matrix `[P A'; A 0]` brings every row and column to an infinity norm near one, then the
//! cost is scaled so its gradient and curvature are of order one, as P. J. Goulart, Y. Chen
//! do for Clarabel ("Clarabel: An interior-point solver for conic programs with quadratic
//! objectives", 2024, sec. 5). Diagonal scaling keeps the stage structure.
//!
//! Why: the SQP hands over QPs whose rows and multipliers span many orders of magnitude (a
//! penalty of 1e6, bounds far from the step), and an interior-point method on such data
//! crawls or stalls where it converges in a dozen steps after scaling.

use super::{QpSolution, StageQp};
use crate::nlp::finite_bound;

/// Ruiz iterations per QP.
const ITERATIONS: usize = 5;
/// Every scale factor stays in `[1 / LIMIT, LIMIT]`.
const LIMIT: f64 = 1e4;

pub(crate) struct Equilibration {
    d: Vec<f64>,
    e: Vec<f64>,
    c: f64,
    pub(crate) scaled: StageQp,
    col: Vec<f64>,
    row: Vec<f64>,
}

impl Equilibration {
    pub(crate) fn new(qp: &StageQp) -> Equilibration {
        let (n, m) = (qp.num_variables(), qp.num_rows());
        Equilibration {
            d: vec![1.0; n],
            e: vec![1.0; m],
            c: 1.0,
            scaled: StageQp::zeros(qp.layout.clone()),
            col: vec![0.0; n],
            row: vec![0.0; m],
        }
    }

    /// Whether this was set up for `qp`'s layout.
    pub(crate) fn fits(&self, qp: &StageQp) -> bool {
        std::sync::Arc::ptr_eq(&self.scaled.layout, &qp.layout) || *self.scaled.layout == *qp.layout
    }

    /// Column and row infinity norms of the KKT matrix scaled by the current `d`, `e`.
    fn norms(&mut self, qp: &StageQp) {
        let l = &qp.layout;
        self.col.fill(0.0);
        for k in 0..l.stages() {
            let vars = l.vars(k);
            let n = vars.len();
            let h = qp.hessian_block(k);
            for j in 0..n {
                let dj = self.d[vars.start + j];
                let mut best = self.col[vars.start + j];
                for i in 0..n {
                    best = best.max((h[i + j * n] * self.d[vars.start + i] * dj).abs());
                }
                self.col[vars.start + j] = best;
            }
        }
        for r in 0..qp.num_rows() {
            let (a, first) = qp.row(r);
            let er = self.e[r];
            let mut best: f64 = 0.0;
            for (c, &v) in a.iter().enumerate() {
                let s = (v * self.d[first + c] * er).abs();
                best = best.max(s);
                let cj = &mut self.col[first + c];
                *cj = cj.max(s);
            }
            self.row[r] = best;
        }
    }

    /// Scale `qp` into `self.scaled`.
    pub(crate) fn apply(&mut self, qp: &StageQp) {
        self.d.fill(1.0);
        self.e.fill(1.0);
        for _ in 0..ITERATIONS {
            self.norms(qp);
            for (d, &c) in self.d.iter_mut().zip(&self.col) {
                if c > 0.0 && c.is_finite() {
                    *d = (*d / c.sqrt()).clamp(1.0 / LIMIT, LIMIT);
                }
            }
            for (e, &r) in self.e.iter_mut().zip(&self.row) {
                if r > 0.0 && r.is_finite() {
                    *e = (*e / r.sqrt()).clamp(1.0 / LIMIT, LIMIT);
                }
            }
        }
        // Cost: the larger of the scaled gradient and the mean curvature to order one.
        let l = &qp.layout;
        let mut curvature = 0.0;
        for k in 0..l.stages() {
            let vars = l.vars(k);
            let n = vars.len();
            let h = qp.hessian_block(k);
            for j in 0..n {
                let dj = self.d[vars.start + j];
                let mut best: f64 = 0.0;
                for i in 0..n {
                    best = best.max((h[i + j * n] * self.d[vars.start + i] * dj).abs());
                }
                curvature += best;
            }
        }
        let n = qp.num_variables().max(1) as f64;
        let gradient =
            qp.gradient.iter().zip(&self.d).fold(0.0_f64, |a, (g, d)| a.max((g * d).abs()));
        let size = (curvature / n).max(gradient);
        self.c = if size > 0.0 && size.is_finite() {
            (1.0 / size).clamp(1.0 / LIMIT, LIMIT)
        } else {
            1.0
        };

        let s = &mut self.scaled;
        for k in 0..l.stages() {
            let vars = l.vars(k);
            let n = vars.len();
            let (src, dst) = (qp.hessian_block(k), &mut s.hessian[l.hessian_block(k)]);
            for j in 0..n {
                for i in 0..n {
                    dst[i + j * n] =
                        self.c * self.d[vars.start + i] * src[i + j * n] * self.d[vars.start + j];
                }
            }
        }
        for j in 0..qp.num_variables() {
            s.gradient[j] = self.c * self.d[j] * qp.gradient[j];
            let scale = |v: f64| if finite_bound(v) { v / self.d[j] } else { v };
            s.var_lower[j] = scale(qp.var_lower[j]);
            s.var_upper[j] = scale(qp.var_upper[j]);
        }
        for r in 0..qp.num_rows() {
            let block = l.row_block(r);
            let (_, first) = l.row_span(r);
            let er = self.e[r];
            for (p, dst) in block.clone().zip(first..) {
                s.jacobian[p] = er * qp.jacobian[p] * self.d[dst];
            }
            let scale = |v: f64| if finite_bound(v) { v * er } else { v };
            s.row_lower[r] = scale(qp.row_lower[r]);
            s.row_upper[r] = scale(qp.row_upper[r]);
            // The violation is measured in scaled row units, the objective in scaled cost.
            let w = qp.row_penalty[r];
            s.row_penalty[r] = if finite_bound(w) { self.c * w / er } else { w };
        }
    }

    /// The scales: variables `x = d x~`, rows `e a'x`, cost `c f`.
    pub(crate) fn copy_scales(&self, d: &mut [f64], e: &mut [f64], c: &mut f64) {
        d.copy_from_slice(&self.d);
        e.copy_from_slice(&self.e);
        *c = self.c;
    }

    /// The solution of the original QP from that of the scaled one.
    pub(crate) fn unscale(&self, scaled: &QpSolution, out: &mut QpSolution) {
        out.status = scaled.status;
        out.iterations = scaled.iterations;
        for j in 0..self.d.len() {
            out.step[j] = self.d[j] * scaled.step[j];
            out.bound_multipliers[j] = scaled.bound_multipliers[j] / (self.d[j] * self.c);
        }
        for r in 0..self.e.len() {
            out.row_multipliers[r] = self.e[r] * scaled.row_multipliers[r] / self.c;
        }
    }
}
