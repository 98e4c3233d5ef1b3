//! Convex QP subproblems of the SQP, laid out along the stages of a multiple-shooting
//! transcription, behind the [`QpSolver`] trait.
//!
//! Owns the stage structure and QP data ([`stage`]), the default solver [`StageIpm`] (an
//! interior-point method whose Newton systems are solved stage by stage, [`ipm`] and its
//! linear algebra in `kkt`), and [`ClarabelQp`], the general sparse interior-point solver
//! kept as the reference that [`StageIpm`] is tested against. Must not know about the NLP or
//! the SQP: it sees matrices only.

mod clarabel;
pub mod ipm;
mod kkt;
mod scaling;
pub mod stage;

pub use clarabel::{ClarabelQp, ClarabelQpSettings};
pub use ipm::{StageIpm, StageIpmSettings};
pub use stage::{StageLayout, StageQp};

/// Outcome of one QP solve.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum QpStatus {
    Solved,
    /// Converged to the solver's looser tolerances.
    SolvedReducedAccuracy,
    /// No point satisfies the constraints.
    Infeasible,
    /// The objective decreases without bound on the feasible set.
    Unbounded,
    IterationLimit,
    TimeLimit,
    /// Numerical breakdown or no progress.
    NumericalFailure,
}

impl QpStatus {
    /// Whether `step` and the multipliers are a usable solution.
    pub fn has_solution(self) -> bool {
        matches!(self, QpStatus::Solved | QpStatus::SolvedReducedAccuracy)
    }

    /// Short lowercase label for logs.
    pub fn label(self) -> &'static str {
        match self {
            QpStatus::Solved => "solved",
            QpStatus::SolvedReducedAccuracy => "inexact",
            QpStatus::Infeasible => "infeasible",
            QpStatus::Unbounded => "unbounded",
            QpStatus::IterationLimit => "iterlimit",
            QpStatus::TimeLimit => "timelimit",
            QpStatus::NumericalFailure => "numfail",
        }
    }
}

/// A QP result; vectors are sized to the problem even when `status` has no solution (then
/// they are zero).
#[derive(Clone, Debug, PartialEq)]
pub struct QpSolution {
    pub status: QpStatus,
    pub step: Vec<f64>,
    /// One per row.
    pub row_multipliers: Vec<f64>,
    /// One per variable.
    pub bound_multipliers: Vec<f64>,
    pub iterations: u32,
}

impl QpSolution {
    /// Zero vectors for `n` variables and `m` rows.
    pub fn new(n: usize, m: usize) -> QpSolution {
        QpSolution {
            status: QpStatus::NumericalFailure,
            step: vec![0.0; n],
            row_multipliers: vec![0.0; m],
            bound_multipliers: vec![0.0; n],
            iterations: 0,
        }
    }

    /// Resize for `n` variables and `m` rows (allocates only when they grow).
    pub fn resize(&mut self, n: usize, m: usize) {
        self.step.resize(n, 0.0);
        self.row_multipliers.resize(m, 0.0);
        self.bound_multipliers.resize(n, 0.0);
    }
}

/// A malformed QP (wrong sizes, NaN data, crossed bounds, an asymmetric Hessian block).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct QpError(pub String);

impl std::fmt::Display for QpError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "invalid QP: {}", self.0)
    }
}

impl std::error::Error for QpError {}

/// Solves convex stage QPs. `Err` only for a malformed problem; every numerical outcome is a
/// status. The solution goes into `out`, resized to the QP.
pub trait QpSolver {
    fn solve(&mut self, qp: &StageQp, out: &mut QpSolution) -> Result<(), QpError>;

    /// After a successful [`QpSolver::solve`]: the change of its solution when the rows'
    /// bounds move by `row_shift` and the gradient by `gradient_shift`, keeping the solution's
    /// active set, into `out` (one linear solve, the second-order correction of an SQP).
    /// `false` when the solver cannot, and the caller solves the shifted QP instead.
    fn shifted_step(
        &mut self,
        _row_shift: &[f64],
        _gradient_shift: &[f64],
        _out: &mut [f64],
    ) -> bool {
        false
    }

    /// Stop iterating at `deadline` (status [`QpStatus::TimeLimit`]), so that a solve's time
    /// limit holds within one QP iteration, not one QP. Solvers without the means ignore it.
    fn set_deadline(&mut self, _deadline: Option<std::time::Instant>) {}
}
