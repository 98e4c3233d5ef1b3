//! Convex QP subproblems behind a trait, and the default implementation on Clarabel.
//!
//! ```text
//! minimise 1/2 d'Hd + g'd   subject to   rl <= A d <= ru,   dl <= d <= du
//! ```
//!
//! Owns [`QpProblem`], [`QpSolution`], [`QpStatus`], the [`QpSolver`] trait and
//! [`ClarabelQp`]. Must not know about the NLP or the SQP: it sees matrices only. `H` must be
//! positive semidefinite (the SQP guarantees it). Sparse throughout: data stays in triplet
//! form until it is handed to the sparse LDL-based interior-point method, so the cost of a
//! QP with banded (multiple-shooting) structure grows about linearly with its size.
//!
//! Multiplier convention: `H d + g + A' lambda + nu = 0`, with `lambda[i] >= 0` when the
//! upper side of row `i` is active and `<= 0` when the lower side is (likewise `nu`).

use clarabel::algebra::CscMatrix;
use clarabel::solver::{DefaultSettings, DefaultSolver, IPSolver, SolverStatus, SupportedConeT};

use crate::nlp::finite_bound;
pub use crate::qp::{QpError, QpStatus};

/// A sparse matrix as `(row, col, value)` triplets; repeated entries are summed.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Triplets {
    pub nrows: usize,
    pub ncols: usize,
    pub rows: Vec<usize>,
    pub cols: Vec<usize>,
    pub values: Vec<f64>,
}

impl Triplets {
    pub fn new(nrows: usize, ncols: usize) -> Self {
        Triplets { nrows, ncols, ..Default::default() }
    }

    pub fn push(&mut self, row: usize, col: usize, value: f64) {
        self.rows.push(row);
        self.cols.push(col);
        self.values.push(value);
    }

    pub fn nnz(&self) -> usize {
        self.values.len()
    }

    /// `y += M x`.
    pub fn mul_add(&self, x: &[f64], y: &mut [f64]) {
        for k in 0..self.values.len() {
            y[self.rows[k]] += self.values[k] * x[self.cols[k]];
        }
    }

    /// `y += M' x`.
    pub fn mul_transpose_add(&self, x: &[f64], y: &mut [f64]) {
        for k in 0..self.values.len() {
            y[self.cols[k]] += self.values[k] * x[self.rows[k]];
        }
    }

    /// `y += S x` where `self` holds one triangle of the symmetric `S`.
    pub fn sym_mul_add(&self, x: &[f64], y: &mut [f64]) {
        for k in 0..self.values.len() {
            let (r, c, v) = (self.rows[k], self.cols[k], self.values[k]);
            y[r] += v * x[c];
            if r != c {
                y[c] += v * x[r];
            }
        }
    }

    fn check(&self, what: &str) -> Result<(), QpError> {
        if self.rows.len() != self.values.len() || self.cols.len() != self.values.len() {
            return Err(QpError(format!("{what}: index and value arrays differ in length")));
        }
        for k in 0..self.values.len() {
            if self.rows[k] >= self.nrows || self.cols[k] >= self.ncols {
                return Err(QpError(format!(
                    "{what}: entry ({}, {}) outside {}x{}",
                    self.rows[k], self.cols[k], self.nrows, self.ncols
                )));
            }
            if !self.values[k].is_finite() {
                return Err(QpError(format!("{what}: non-finite value at entry {k}")));
            }
        }
        Ok(())
    }
}

/// One QP. `hessian` holds the upper triangle (`row <= col`) of `H`; `jacobian` is `A`
/// (`m x n`). Infinite bounds are `+-inf`.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct QpProblem {
    pub hessian: Triplets,
    pub gradient: Vec<f64>,
    pub jacobian: Triplets,
    pub row_lower: Vec<f64>,
    pub row_upper: Vec<f64>,
    pub var_lower: Vec<f64>,
    pub var_upper: Vec<f64>,
}

impl QpProblem {
    pub fn num_variables(&self) -> usize {
        self.gradient.len()
    }

    pub fn num_rows(&self) -> usize {
        self.row_lower.len()
    }

    /// Dimensions, triangle, finiteness and bound order.
    pub fn validate(&self) -> Result<(), QpError> {
        let n = self.gradient.len();
        let m = self.row_lower.len();
        if self.hessian.nrows != n || self.hessian.ncols != n {
            return Err(QpError("hessian dimension differs from the gradient length".into()));
        }
        if self.jacobian.ncols != n || self.jacobian.nrows != m || self.row_upper.len() != m {
            return Err(QpError("constraint matrix and row bounds disagree in size".into()));
        }
        if self.var_lower.len() != n || self.var_upper.len() != n {
            return Err(QpError("variable bounds differ from the gradient length".into()));
        }
        self.hessian.check("hessian")?;
        self.jacobian.check("constraint matrix")?;
        if self.hessian.rows.iter().zip(&self.hessian.cols).any(|(r, c)| r > c) {
            return Err(QpError("hessian entry below the diagonal".into()));
        }
        if let Some(i) = self.gradient.iter().position(|v| !v.is_finite()) {
            return Err(QpError(format!("non-finite gradient entry {i}")));
        }
        let bounds_ok = |lo: &[f64], hi: &[f64]| {
            lo.iter().zip(hi).all(|(l, u)| !l.is_nan() && !u.is_nan() && l <= u)
        };
        if !bounds_ok(&self.row_lower, &self.row_upper)
            || !bounds_ok(&self.var_lower, &self.var_upper)
        {
            return Err(QpError("a lower bound is above its upper bound or NaN".into()));
        }
        Ok(())
    }

    /// `1/2 d'Hd + g'd`.
    pub fn objective(&self, d: &[f64]) -> f64 {
        let mut hd = vec![0.0; d.len()];
        self.hessian.sym_mul_add(d, &mut hd);
        d.iter().zip(&hd).zip(&self.gradient).map(|((di, hi), gi)| di * (0.5 * hi + gi)).sum()
    }
}

/// A QP result; vectors are sized to the problem even when `status` has no solution.
#[derive(Clone, Debug, PartialEq)]
pub struct QpSolution {
    pub status: QpStatus,
    pub step: Vec<f64>,
    /// One per row of `A`.
    pub row_multipliers: Vec<f64>,
    /// One per variable.
    pub bound_multipliers: Vec<f64>,
    pub iterations: u32,
}

/// Solves convex QPs. `Err` only for a malformed problem; every numerical outcome is a status.
pub trait QpSolver {
    fn solve(&mut self, qp: &QpProblem) -> Result<QpSolution, QpError>;
}

/// Settings of [`ClarabelQp`].
#[derive(Clone, Debug, PartialEq)]
pub struct ClarabelQpSettings {
    /// Feasibility and duality-gap tolerance of the interior-point method (relative and
    /// absolute). Default `1e-9`.
    pub tolerance: f64,
    /// Interior-point iteration limit. Default 200.
    pub max_iterations: u32,
    /// Wall-clock limit per QP in seconds. Default: none (`inf`).
    pub time_limit: f64,
}

impl Default for ClarabelQpSettings {
    fn default() -> Self {
        ClarabelQpSettings { tolerance: 1e-9, max_iterations: 200, time_limit: f64::INFINITY }
    }
}

/// [`QpSolver`] on the Clarabel interior-point solver (sparse LDL of the KKT system).
///
/// Clarabel solves `min 1/2 x'Px + q'x  subject to  Ax + s = b, s in K`. Each two-sided row becomes
/// up to two rows of the nonnegative cone (`a'd <= u` and `-a'd <= -l`); each equality row
/// (`l == u`) one row of the zero cone; absent bounds produce no row.
#[derive(Clone, Debug, Default)]
pub struct ClarabelQp {
    pub settings: ClarabelQpSettings,
}

impl ClarabelQp {
    pub fn new(settings: ClarabelQpSettings) -> Self {
        ClarabelQp { settings }
    }
}

/// Where a conic row came from, to map its dual back.
#[derive(Clone, Copy)]
enum Origin {
    Row { index: usize, sign: f64 },
    Var { index: usize, sign: f64 },
}

impl QpSolver for ClarabelQp {
    fn solve(&mut self, qp: &QpProblem) -> Result<QpSolution, QpError> {
        qp.validate()?;
        let n = qp.num_variables();
        let m = qp.num_rows();

        // Rows of A grouped by cone: equalities first (zero cone), then one-sided rows.
        let mut eq: Vec<(Origin, f64)> = Vec::new();
        let mut ineq: Vec<(Origin, f64)> = Vec::new();
        for i in 0..m {
            classify(
                qp.row_lower[i],
                qp.row_upper[i],
                |sign| Origin::Row { index: i, sign },
                &mut eq,
                &mut ineq,
            );
        }
        for j in 0..n {
            classify(
                qp.var_lower[j],
                qp.var_upper[j],
                |sign| Origin::Var { index: j, sign },
                &mut eq,
                &mut ineq,
            );
        }

        // For each original row of `A`, the conic rows it feeds (at most two).
        let mut feeds: Vec<[(usize, f64); 2]> = vec![[(usize::MAX, 0.0); 2]; m];
        let mut b = Vec::with_capacity(eq.len() + ineq.len());
        let mut ai = Vec::new();
        let mut aj = Vec::new();
        let mut av = Vec::new();
        for (k, (origin, rhs)) in eq.iter().chain(ineq.iter()).enumerate() {
            b.push(*rhs);
            match *origin {
                Origin::Row { index, sign } => {
                    let slot = if feeds[index][0].0 == usize::MAX { 0 } else { 1 };
                    feeds[index][slot] = (k, sign);
                }
                Origin::Var { index, sign } => {
                    ai.push(k);
                    aj.push(index);
                    av.push(sign);
                }
            }
        }
        for t in 0..qp.jacobian.nnz() {
            for &(k, sign) in &feeds[qp.jacobian.rows[t]] {
                if k != usize::MAX {
                    ai.push(k);
                    aj.push(qp.jacobian.cols[t]);
                    av.push(sign * qp.jacobian.values[t]);
                }
            }
        }
        let nrows = b.len();
        let a = CscMatrix::new_from_triplets(nrows, n, ai, aj, av);
        let p = CscMatrix::new_from_triplets(
            n,
            n,
            qp.hessian.rows.clone(),
            qp.hessian.cols.clone(),
            qp.hessian.values.clone(),
        );
        let mut cones = Vec::new();
        if !eq.is_empty() {
            cones.push(SupportedConeT::ZeroConeT(eq.len()));
        }
        if !ineq.is_empty() {
            cones.push(SupportedConeT::NonnegativeConeT(ineq.len()));
        }

        let tol = self.settings.tolerance;
        let settings = DefaultSettings::<f64> {
            verbose: false,
            max_iter: self.settings.max_iterations,
            time_limit: self.settings.time_limit,
            tol_feas: tol,
            tol_gap_abs: tol,
            tol_gap_rel: tol,
            ..DefaultSettings::default()
        };
        let mut solver = DefaultSolver::new(&p, &qp.gradient, &a, &b, &cones, settings)
            .map_err(|e| QpError(e.to_string()))?;
        solver.solve();
        let sol = &solver.solution;

        let status = match sol.status {
            SolverStatus::Solved => QpStatus::Solved,
            SolverStatus::AlmostSolved => QpStatus::SolvedReducedAccuracy,
            SolverStatus::PrimalInfeasible | SolverStatus::AlmostPrimalInfeasible => {
                QpStatus::Infeasible
            }
            SolverStatus::DualInfeasible | SolverStatus::AlmostDualInfeasible => {
                QpStatus::Unbounded
            }
            SolverStatus::MaxIterations => QpStatus::IterationLimit,
            SolverStatus::MaxTime => QpStatus::TimeLimit,
            SolverStatus::Unsolved
            | SolverStatus::NumericalError
            | SolverStatus::InsufficientProgress
            | SolverStatus::CallbackTerminated => QpStatus::NumericalFailure,
        };

        let mut row_multipliers = vec![0.0; m];
        let mut bound_multipliers = vec![0.0; n];
        let step = if status.has_solution() { sol.x.clone() } else { vec![0.0; n] };
        if status.has_solution() {
            // Clarabel's stationarity is P x + q + A'z = 0, and our rows enter A with `sign`,
            // so each conic dual contributes `sign * z` to our multiplier.
            for (k, (origin, _)) in eq.iter().chain(ineq.iter()).enumerate() {
                match *origin {
                    Origin::Row { index, sign } => row_multipliers[index] += sign * sol.z[k],
                    Origin::Var { index, sign } => bound_multipliers[index] += sign * sol.z[k],
                }
            }
        }
        Ok(QpSolution {
            status,
            step,
            row_multipliers,
            bound_multipliers,
            iterations: sol.iterations,
        })
    }
}

/// Sort the two sides of one bounded quantity into conic rows: `(origin with sign, rhs)`.
fn classify(
    lo: f64,
    hi: f64,
    origin: impl Fn(f64) -> Origin,
    eq: &mut Vec<(Origin, f64)>,
    ineq: &mut Vec<(Origin, f64)>,
) {
    let (has_lo, has_hi) = (finite_bound(lo), finite_bound(hi));
    if has_lo && has_hi && lo == hi {
        eq.push((origin(1.0), hi));
        return;
    }
    if has_hi {
        ineq.push((origin(1.0), hi));
    }
    if has_lo {
        ineq.push((origin(-1.0), -lo));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// min 1/2 (d0^2 + d1^2) - d0 - d1  subject to d0 + d1 <= 1, d0 >= 0.75 ... solved by hand:
    /// KKT with both constraints active gives d = (0.75, 0.25); the row multiplier is
    /// 1 - d1 = 0.75 and the bound multiplier on d0 is -(d0 - 1 + 0.75) = -0.5
    /// (independent computation).
    #[test]
    fn small_qp_with_active_row_and_bound() {
        let mut h = Triplets::new(2, 2);
        h.push(0, 0, 1.0);
        h.push(1, 1, 1.0);
        let mut a = Triplets::new(1, 2);
        a.push(0, 0, 1.0);
        a.push(0, 1, 1.0);
        let qp = QpProblem {
            hessian: h,
            gradient: vec![-1.0, -1.0],
            jacobian: a,
            row_lower: vec![f64::NEG_INFINITY],
            row_upper: vec![1.0],
            var_lower: vec![0.75, f64::NEG_INFINITY],
            var_upper: vec![f64::INFINITY, f64::INFINITY],
        };
        let sol = ClarabelQp::default().solve(&qp).unwrap();
        assert_eq!(sol.status, QpStatus::Solved);
        // Interior-point accuracy with tolerance 1e-9: 1e-6 leaves margin for the
        // complementarity gap of the last iterate.
        assert!((sol.step[0] - 0.75).abs() < 1e-6, "{:?}", sol.step);
        assert!((sol.step[1] - 0.25).abs() < 1e-6);
        assert!((sol.row_multipliers[0] - 0.75).abs() < 1e-6, "{:?}", sol.row_multipliers);
        assert!((sol.bound_multipliers[0] + 0.5).abs() < 1e-6, "{:?}", sol.bound_multipliers);
        assert!(sol.bound_multipliers[1].abs() < 1e-6);
    }

    #[test]
    fn equality_and_infeasible_rows() {
        let mut h = Triplets::new(1, 1);
        h.push(0, 0, 2.0);
        let mut a = Triplets::new(2, 1);
        a.push(0, 0, 1.0);
        a.push(1, 0, 1.0);
        let mut qp = QpProblem {
            hessian: h,
            gradient: vec![0.0],
            jacobian: a,
            row_lower: vec![3.0, f64::NEG_INFINITY],
            row_upper: vec![3.0, 5.0],
            var_lower: vec![f64::NEG_INFINITY],
            var_upper: vec![f64::INFINITY],
        };
        let sol = ClarabelQp::default().solve(&qp).unwrap();
        assert_eq!(sol.status, QpStatus::Solved);
        assert!((sol.step[0] - 3.0).abs() < 1e-6);
        // Stationarity 2 d + lambda = 0 gives lambda = -6 (independent computation).
        assert!((sol.row_multipliers[0] + 6.0).abs() < 1e-5, "{:?}", sol.row_multipliers);
        qp.row_upper[1] = 2.0;
        let sol = ClarabelQp::default().solve(&qp).unwrap();
        assert_eq!(sol.status, QpStatus::Infeasible);
    }

    #[test]
    fn malformed_qp_is_an_error() {
        let qp = QpProblem {
            hessian: Triplets::new(1, 1),
            gradient: vec![f64::NAN],
            jacobian: Triplets::new(0, 1),
            row_lower: vec![],
            row_upper: vec![],
            var_lower: vec![0.0],
            var_upper: vec![1.0],
        };
        assert!(ClarabelQp::default().solve(&qp).is_err());
    }
}
