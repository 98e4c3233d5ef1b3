//! [`ClarabelQp`]: a stage QP handed to the general sparse interior-point solver Clarabel.
//!
//! Kept as the reference for [`super::StageIpm`] (the property tests compare the two) and as a
//! second opinion when a QP is in doubt. Builds Clarabel's sparse matrices on every call:
//! it is not for the SQP's hot path.

use clarabel::algebra::CscMatrix;
use clarabel::solver::{DefaultSettings, DefaultSolver, IPSolver, SolverStatus, SupportedConeT};

use super::{QpError, QpSolution, QpSolver, QpStatus, StageQp};
use crate::nlp::finite_bound;

/// Settings of [`ClarabelQp`].
#[derive(Clone, Debug, PartialEq)]
pub struct ClarabelQpSettings {
    /// Feasibility and duality-gap tolerance (relative and absolute). Default `1e-10`.
    pub tolerance: f64,
    /// Interior-point iteration limit. Default 200.
    pub max_iterations: u32,
}

impl Default for ClarabelQpSettings {
    fn default() -> Self {
        ClarabelQpSettings { tolerance: 1e-10, max_iterations: 200 }
    }
}

/// [`QpSolver`] on Clarabel (`min 1/2 x'Px + q'x  subject to  Ax + s = b, s in K`). Each
/// equality row or fixed variable is one row of the zero cone; each finite side of an
/// inequality row or bound one row of the nonnegative cone. A penalised row gets two
/// variables of its own, `p, q >= 0` costing the penalty each, and enters as `a'x + p - q`.
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

/// Sort the two sides of one bounded quantity into conic rows `(origin, rhs)`.
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

impl QpSolver for ClarabelQp {
    fn solve(&mut self, qp: &StageQp, out: &mut QpSolution) -> Result<(), QpError> {
        qp.validate()?;
        let (n, m) = (qp.num_variables(), qp.num_rows());
        out.resize(n, m);
        let l = &qp.layout;
        // Slack pair of each penalised row (with a finite side) after the QP's variables.
        let mut slack = vec![usize::MAX; m];
        let mut total = n;
        for (i, s) in slack.iter_mut().enumerate() {
            if qp.is_penalised(i)
                && (finite_bound(qp.row_lower[i]) || finite_bound(qp.row_upper[i]))
            {
                *s = total;
                total += 2;
            }
        }
        let mut eq = Vec::new();
        let mut ineq = Vec::new();
        for i in 0..m {
            classify(
                qp.row_lower[i],
                qp.row_upper[i],
                |sign| Origin::Row { index: i, sign },
                &mut eq,
                &mut ineq,
            );
        }
        for j in 0..total {
            let (lo, hi) =
                if j < n { (qp.var_lower[j], qp.var_upper[j]) } else { (0.0, f64::INFINITY) };
            classify(lo, hi, |sign| Origin::Var { index: j, sign }, &mut eq, &mut ineq);
        }
        let (mut ai, mut aj, mut av, mut b) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
        for (k, (origin, rhs)) in eq.iter().chain(ineq.iter()).enumerate() {
            b.push(*rhs);
            match *origin {
                Origin::Row { index, sign } => {
                    let (row, first) = qp.row(index);
                    for (c, &v) in row.iter().enumerate() {
                        if v != 0.0 {
                            ai.push(k);
                            aj.push(first + c);
                            av.push(sign * v);
                        }
                    }
                    if slack[index] != usize::MAX {
                        ai.extend([k, k]);
                        aj.extend([slack[index], slack[index] + 1]);
                        av.extend([sign, -sign]);
                    }
                }
                Origin::Var { index, sign } => {
                    ai.push(k);
                    aj.push(index);
                    av.push(sign);
                }
            }
        }
        let a = CscMatrix::new_from_triplets(b.len(), total, ai, aj, av);
        let (mut pi, mut pj, mut pv) = (Vec::new(), Vec::new(), Vec::new());
        for k in 0..l.stages() {
            let v0 = l.vars(k).start;
            let nk = l.stage_size(k);
            let h = qp.hessian_block(k);
            for c in 0..nk {
                for r in 0..=c {
                    let v = h[r + c * nk];
                    if v != 0.0 {
                        pi.push(v0 + r);
                        pj.push(v0 + c);
                        pv.push(v);
                    }
                }
            }
        }
        let p = CscMatrix::new_from_triplets(total, total, pi, pj, pv);
        let mut q = qp.gradient.clone();
        q.resize(total, 0.0);
        for (i, &s) in slack.iter().enumerate() {
            if s != usize::MAX {
                q[s] = qp.row_penalty[i];
                q[s + 1] = qp.row_penalty[i];
            }
        }
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
            tol_feas: tol,
            tol_gap_abs: tol,
            tol_gap_rel: tol,
            ..DefaultSettings::default()
        };
        let mut solver = DefaultSolver::new(&p, &q, &a, &b, &cones, settings)
            .map_err(|e| QpError(e.to_string()))?;
        solver.solve();
        let sol = &solver.solution;
        out.status = match sol.status {
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
        out.iterations = sol.iterations;
        out.row_multipliers.fill(0.0);
        out.bound_multipliers.fill(0.0);
        if !out.status.has_solution() {
            out.step.fill(0.0);
            return Ok(());
        }
        out.step.copy_from_slice(&sol.x[..n]);
        // Clarabel's stationarity is P x + q + A'z = 0 and our rows enter A with `sign`, so
        // each conic dual contributes `sign * z` to our multiplier.
        for (k, (origin, _)) in eq.iter().chain(ineq.iter()).enumerate() {
            match *origin {
                Origin::Row { index, sign } => out.row_multipliers[index] += sign * sol.z[k],
                Origin::Var { index, sign } if index < n => {
                    out.bound_multipliers[index] += sign * sol.z[k]
                }
                Origin::Var { .. } => {}
            }
        }
        Ok(())
    }
}
