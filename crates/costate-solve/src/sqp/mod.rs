//! Our SQP method for a sparse [`Nlp`], as an argmin [`Solver`] with its own [`SqpState`].
//!
//! Owns the algorithm, its state, statuses, results and the iteration log rows. Must not know
//! what the NLP stands for (no names, no time grids): locations of failures and violated rows
//! are plain indices and the problem's own [`EvalError`] codes.
//!
//! One iteration ([`Sqp::next_iter`]), in scaled variables `y = w / scale` ([`Scaling`]):
//! 1. Hessian model: block BFGS, or the exact Lagrangian Hessian made convex along the chain
//!    of stages so that the QP keeps the Newton step (`convexify.rs`, with an augmented term
//!    on the constraints expected to stay active); where that would have to raise a free
//!    block's curvature by more than `CHAIN_RAISE_LIMIT`, each stage block is made positive
//!    definite on its own instead (`hessian.rs`). Every QP is strictly convex.
//! 2. QP `min 1/2 d'Bd + g'd  subject to  cl <= c + J d <= cu,  yl <= y + d <= yu` on the
//!    stage structure (`model.rs`). If it has no solution or its multipliers explode (a nearly
//!    inconsistent linearisation), the elastic QP relaxes every row with nonnegative slacks
//!    weighted by the penalty, so a step always exists; if the violation alone is stationary
//!    (a proximal QP on the l1 violation returns a tiny step), the point is reported locally
//!    infeasible, with the rows and bounds that hold the violation up.
//! 3. Penalty update from the QP multipliers (`rho > |lambda|_inf`) and the sufficient model
//!    decrease rule of J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., 2006,
//!    eq. (18.36).
//! 4. Backtracking line search on the l1 merit `f + rho * sum(violation)` (Nocedal & Wright,
//!    Algorithm 18.3), with one second-order correction (eq. (18.51)) when the full step is
//!    rejected; trial points where the problem cannot be evaluated (NaN/Inf) are backtracked
//!    from like rejected ones (`merit.rs`).
//! 5. Multipliers take the QP's (a full step, whatever the step length); bound multipliers
//!    are the QP's or the projected ones, whichever satisfies stationarity better; BFGS is
//!    updated from the Lagrangian gradient difference.
//! 6. Stagnation: after [`STAGNATION_ITERATIONS`] accepted steps in a row that change nothing
//!    (or are cut by the line search without lowering the merit), the solve ends "solved to
//!    reduced accuracy" if the loosened tolerances hold, "locally infeasible" if the violation
//!    is stationary, else stalled ([`StallReason::NoProgress`]).
//! 7. Restart: with the Hessian left to the solver ([`HessianMode::Auto`]) and exact, a dead
//!    end (stalled or locally infeasible) goes back once to the starting point with block
//!    BFGS, within the same solve: a row marked `restart:bfgs`, the iterations counted on
//!    against the same limit. (A minimum-time problem whose first exact step jumps the final
//!    time to its lower bound needs it: the double integrator from (1, 1).)
//!
//! Termination on scaled KKT residuals ([`Residuals`], `termination.rs`); "solved" is only ever
//! reported when the feasibility, stationarity and complementarity tolerances all hold.

mod merit;
mod model;
pub(crate) mod setup;
mod termination;

use std::collections::HashMap;
use std::fmt::Write as _;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use argmin::core::observers::{Observe, ObserverMode};
use argmin::core::{
    Error as ArgminError, Executor, Problem, Solver, State, TerminationReason, TerminationStatus,
    KV,
};

use crate::convexify::{Augmentation, RiccatiConvexifier};
use crate::hessian::{convexify_blocks, BfgsUpdate, BlockBfgs, Convexified, Convexifier};
use crate::nlp::{EvalError, Nlp};
use crate::qp::{QpSolver, QpStatus, StageIpm, StageIpmSettings, StageQp};
use crate::settings::{HessianMode, SettingsError, SqpSettings};

use merit::{LineSearch, Search};
use model::{ElasticKind, QpModel};
pub use setup::Scaling;
use setup::{EvalBuffers, Setup};
use termination::{
    dot, inf_norm, l1_violation, lagrangian_gradient, meets, meets_reduced,
    projected_bound_multipliers, residuals, violated_rows,
};

/// A row or bound in a conflict (see [`SqpStatus::LocallyInfeasible`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ConflictItem {
    Row(usize),
    Bound(usize),
}

/// One of the rows and bounds that hold the violation up at a locally infeasible point: a
/// constraint with a nonzero multiplier in the problem of least violation (its linearisation
/// at the point), whose side (`upper`) it presses against. Together they are a certificate:
/// no step can reduce the violation without breaking one of them further.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Conflict {
    pub item: ConflictItem,
    pub upper: bool,
    /// Multiplier magnitude relative to the largest (in (0, 1]).
    pub weight: f64,
}

/// A constraint row left violated, with its violation in the problem's units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ViolatedRow {
    pub row: usize,
    /// Distance of `c_i(w)` outside `[cl_i, cu_i]`.
    pub violation: f64,
}

/// Why the solver stopped without meeting its tolerances.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum StallReason {
    /// No step length gave sufficient decrease of the merit function.
    LineSearch,
    /// The QP subproblem (also in its elastic form) had no usable solution.
    Qp(QpStatus),
    /// Steps were accepted but moved the iterate by (almost) nothing for several iterations
    /// in a row ([`STAGNATION_ITERATIONS`]).
    NoProgress,
}

/// Consecutive accepted steps of length at most `1e-10 (1 + |y|_inf)` (scaled), or cut by
/// the line search and lowering the merit by at most `1e-9 max(1, |merit|)`, after which the
/// solver stops as stagnated.
pub const STAGNATION_ITERATIONS: u32 = 5;

/// How a solve ended.
#[derive(Clone, Debug, PartialEq)]
pub enum SqpStatus {
    /// Feasibility, stationarity and complementarity tolerances all met.
    Solved,
    /// No further progress possible, and the stationarity and complementarity tolerances
    /// loosened by `reduced_accuracy_factor` are met (feasibility loosened by at most 10).
    SolvedReducedAccuracy,
    /// The constraint violation is (locally) as small as it gets and still above the
    /// tolerance. `rows` are the most violated rows, largest first (at most 10); `conflict`
    /// the rows and bounds that hold the violation up (see [`Conflict`]).
    LocallyInfeasible {
        rows: Vec<ViolatedRow>,
        conflict: Vec<Conflict>,
    },
    IterationLimit,
    TimeLimit,
    /// The problem could not be evaluated at the start, or at any trial point of a step.
    EvaluationFailed {
        error: EvalError,
    },
    /// The cancel flag was raised.
    Interrupted,
    /// No further progress possible and even the loosened tolerances are not met.
    Stalled {
        reason: StallReason,
    },
}

impl SqpStatus {
    pub fn is_solved(&self) -> bool {
        matches!(self, SqpStatus::Solved | SqpStatus::SolvedReducedAccuracy)
    }

    /// Short lowercase description.
    pub fn label(&self) -> &'static str {
        match self {
            SqpStatus::Solved => "solved",
            SqpStatus::SolvedReducedAccuracy => "solved to reduced accuracy",
            SqpStatus::LocallyInfeasible { .. } => "locally infeasible",
            SqpStatus::IterationLimit => "iteration limit reached",
            SqpStatus::TimeLimit => "time limit reached",
            SqpStatus::EvaluationFailed { .. } => "evaluation failed",
            SqpStatus::Interrupted => "interrupted",
            SqpStatus::Stalled { .. } => "stalled",
        }
    }
}

/// Scaled KKT residuals at an iterate (all dimensionless).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Residuals {
    /// Largest violation of a scaled constraint row or variable bound.
    pub violation: f64,
    /// `|grad f + J' lambda + nu|_inf / max(1, |grad f|_inf)` in scaled variables.
    pub stationarity: f64,
    /// Largest `|multiplier| * slack` over inequality rows and bounds, divided like
    /// stationarity.
    pub complementarity: f64,
}

/// Which QP produced the step of an iteration.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum StepKind {
    /// Row 0: the starting point, no step yet.
    Start,
    Regular,
    /// The elastic (l1-relaxed) QP, after the regular one had no solution.
    Elastic,
    /// No step was taken (recovery: BFGS reset or a higher eigenvalue floor).
    None,
    /// The exact-Hessian iteration reached a dead end (stalled or locally infeasible) with
    /// the Hessian left to the solver: back to the starting point with block BFGS, in the same
    /// solve (the iterations go on counting against the same limit).
    Restart,
}

/// One row of the iteration log.
#[derive(Clone, Debug, PartialEq)]
pub struct IterationRow {
    pub iteration: u64,
    /// Objective in the problem's units.
    pub objective: f64,
    pub residuals: Residuals,
    /// Accepted step length in (0, 1]; 0 for row 0 and when no step was taken.
    pub step_length: f64,
    /// `|y_new - y_old|_inf` in scaled variables.
    pub step_norm: f64,
    /// Penalty weight of the merit function.
    pub penalty: f64,
    /// Merit function value (scaled).
    pub merit: f64,
    pub step_kind: StepKind,
    /// Status of the (last) QP solved this iteration.
    pub qp_status: Option<QpStatus>,
    pub qp_iterations: u32,
    /// Wall-clock time spent in QP solves this iteration.
    pub qp_time: Duration,
    /// Largest amount an eigenvalue of an exact Hessian block was raised by to make the block
    /// positive definite (0 for BFGS or when every block already was).
    pub hessian_shift: f64,
    /// Exact Hessian blocks that were not positive definite.
    pub convexified_blocks: u32,
    /// Constraints expected to stay active whose augmented-Lagrangian term entered the
    /// convexified model (0 when the blocks were made convex one by one, or for BFGS).
    pub augmented: u32,
    /// QP solves this iteration (regular, elastic, second-order correction).
    pub qp_solves: u32,
    /// BFGS blocks damped / skipped in the update after this step.
    pub bfgs: BfgsUpdate,
    /// Whether the accepted point came from a second-order correction.
    pub second_order_correction: bool,
    /// Trial points rejected in the line search (including ones that could not be evaluated).
    pub backtracks: u32,
}

/// Wall-clock time split of a solve.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Timing {
    /// In the problem's evaluation functions.
    pub evaluation: Duration,
    /// In QP solves.
    pub qp: Duration,
    /// Everything else (Hessian models, bookkeeping).
    pub other: Duration,
    pub total: Duration,
}

/// Everything a solve returns. Vectors are in the problem's units and index order.
#[derive(Clone, Debug, PartialEq)]
pub struct SqpResult {
    pub status: SqpStatus,
    /// Final iterate `w`.
    pub x: Vec<f64>,
    /// `lambda`, one per constraint row (sign convention in `nlp.rs`).
    pub constraint_multipliers: Vec<f64>,
    /// `nu`, one per variable.
    pub bound_multipliers: Vec<f64>,
    pub objective: f64,
    /// `c(x)`.
    pub constraints: Vec<f64>,
    pub residuals: Residuals,
    pub iterations: u64,
    pub timing: Timing,
    pub history: Vec<IterationRow>,
    /// Evaluation counts by kind ("objective", "constraints", "gradient", "jacobian", "hessian").
    pub evaluations: HashMap<String, u64>,
}

/// Invalid input: settings, or a problem whose description is inconsistent.
#[derive(Clone, Debug, PartialEq)]
pub enum SolveError {
    Settings(SettingsError),
    Problem(String),
    /// Failure inside the argmin machinery or a malformed QP (a bug, not a problem property).
    Internal(String),
}

impl std::fmt::Display for SolveError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SolveError::Settings(e) => write!(f, "{e}"),
            SolveError::Problem(s) => write!(f, "invalid problem: {s}"),
            SolveError::Internal(s) => write!(f, "internal solver error: {s}"),
        }
    }
}

impl std::error::Error for SolveError {}

/// The SQP's argmin state: what an observer sees after every iteration.
#[derive(Clone, Debug, Default)]
pub struct SqpState {
    /// Current iterate in the problem's units.
    pub x: Vec<f64>,
    pub constraint_multipliers: Vec<f64>,
    pub bound_multipliers: Vec<f64>,
    pub objective: f64,
    pub constraints: Vec<f64>,
    pub merit: f64,
    pub penalty: f64,
    pub residuals: Residuals,
    /// The row for the latest iteration (row 0 after `init`).
    pub last_row: Option<IterationRow>,
    pub history: Vec<IterationRow>,
    /// Set by the solver when it decides the outcome itself.
    pub status: Option<SqpStatus>,
    pub evaluation_time: Duration,
    pub qp_time: Duration,
    iter: u64,
    max_iters: u64,
    counts: HashMap<String, u64>,
    time: Option<Duration>,
    termination: TerminationStatus,
}

impl State for SqpState {
    type Param = Vec<f64>;
    type Float = f64;

    fn new() -> Self {
        SqpState { max_iters: u64::MAX, ..Default::default() }
    }
    fn update(&mut self) {}
    fn get_param(&self) -> Option<&Vec<f64>> {
        Some(&self.x)
    }
    fn get_best_param(&self) -> Option<&Vec<f64>> {
        Some(&self.x)
    }
    fn get_max_iters(&self) -> u64 {
        self.max_iters
    }
    fn increment_iter(&mut self) {
        self.iter += 1;
    }
    fn get_iter(&self) -> u64 {
        self.iter
    }
    fn get_cost(&self) -> f64 {
        self.merit
    }
    /// The l1 merit never reaches argmin's target cost test (`-inf`), so this returns the
    /// current merit; "best" has no meaning for a penalty function whose weight changes.
    fn get_best_cost(&self) -> f64 {
        if self.merit.is_nan() {
            f64::INFINITY
        } else {
            self.merit
        }
    }
    fn get_target_cost(&self) -> f64 {
        f64::NEG_INFINITY
    }
    fn func_counts<O>(&mut self, problem: &Problem<O>) {
        for (k, v) in &problem.counts {
            self.counts.insert((*k).to_string(), *v);
        }
    }
    fn get_func_counts(&self) -> &HashMap<String, u64> {
        &self.counts
    }
    fn time(&mut self, time: Option<Duration>) -> &mut Self {
        self.time = time;
        self
    }
    fn get_time(&self) -> Option<Duration> {
        self.time
    }
    fn get_last_best_iter(&self) -> u64 {
        self.iter
    }
    fn is_best(&self) -> bool {
        true
    }
    fn terminate_with(mut self, reason: TerminationReason) -> Self {
        self.termination = TerminationStatus::Terminated(reason);
        self
    }
    fn get_termination_status(&self) -> &TerminationStatus {
        &self.termination
    }
    fn get_termination_reason(&self) -> Option<&TerminationReason> {
        match &self.termination {
            TerminationStatus::Terminated(r) => Some(r),
            TerminationStatus::NotTerminated => None,
        }
    }
}

/// The current point and the data evaluated there, all scaled.
#[derive(Clone)]
struct Point {
    y: Vec<f64>,
    f: f64,
    c: Vec<f64>,
    g: Vec<f64>,
    jac: Vec<f64>,
}

impl Point {
    fn new(s: &Setup) -> Point {
        Point {
            y: vec![0.0; s.n],
            f: 0.0,
            c: vec![0.0; s.m],
            g: vec![0.0; s.n],
            jac: vec![0.0; s.jac.len()],
        }
    }
}

/// Mutable solver data created by `init`; nothing in it is allocated again during the
/// iterations.
struct Work {
    setup: Setup,
    point: Point,
    /// Trial point of the line search; becomes `point` when accepted.
    trial: Point,
    lambda: Vec<f64>,
    nu: Vec<f64>,
    penalty: f64,
    model: QpModel,
    qp: Box<dyn QpSolver>,
    /// Solver of the elastic problems (their own structure, their own workspace).
    qp_elastic: Box<dyn QpSolver>,
    bfgs: Option<BlockBfgs>,
    /// The solution-preserving convexification along the shooting chain (exact Hessian on a
    /// stage structure), else block by block.
    riccati: Option<RiccatiConvexifier>,
    /// Whether the current QP's model is the chain convexification (its gradient and
    /// multipliers carry the cost-to-go terms), else the blocks made convex one by one.
    chain_convexified: bool,
    /// The starting point and its multipliers, kept for a restart with block BFGS while the
    /// Hessian is the exact one and left to the solver (`None` otherwise or once used).
    restart: Option<(Point, Vec<f64>, Vec<f64>)>,
    convexifier: Convexifier,
    /// The Hessian model before convexification (exact) or the BFGS blocks.
    hess_orig: Vec<f64>,
    /// The augmented-Lagrangian term of the convexification on the constraints expected to
    /// stay active.
    aug: Augmentation,
    /// Current floor of the eigenvalue convexification (raised after a failed step).
    floor: f64,
    hess_mult: Vec<f64>,
    hess_values: Vec<f64>,
    buf: EvalBuffers,
    /// The accepted QP step and its multipliers (a second-order correction solve may
    /// overwrite the model's solution).
    step: Vec<f64>,
    step_lambda: Vec<f64>,
    step_nu: Vec<f64>,
    /// Scratch: `c + J d` (m), `H d` and Lagrangian gradients (n), and the shifts of a
    /// second-order correction.
    cjd: Vec<f64>,
    row_shift: Vec<f64>,
    grad_shift: Vec<f64>,
    hd: Vec<f64>,
    lg: Vec<f64>,
    lg_old: Vec<f64>,
    nu_proj: Vec<f64>,
    /// The least linearised violation at the current point (from the last feasibility QP).
    least_violation: f64,
    /// Consecutive failed iterations (no step) and accepted steps that changed nothing.
    failures: u32,
    stagnant: u32,
}

impl Work {
    fn merit(&self, f: f64, c: &[f64]) -> f64 {
        f + self.penalty * l1_violation(&self.setup, c)
    }

    fn residuals(&mut self) -> Residuals {
        let (s, p) = (&self.setup, &self.point);
        lagrangian_gradient(s, &p.g, &p.jac, &self.lambda, &mut self.lg);
        residuals(s, &p.y, &p.c, &p.g, &self.lg, &self.lambda, &self.nu)
    }
}

/// The SQP solver. Build with [`Sqp::new`], optionally attach a cancel flag and a QP solver,
/// then drive it with argmin's [`Executor`] (or use [`solve_nlp`]).
pub struct Sqp {
    settings: SqpSettings,
    cancel: Option<Arc<AtomicBool>>,
    make_qp: Box<dyn Fn() -> Box<dyn QpSolver>>,
    /// When the time limit runs out (set by [`solve_nlp`]); handed to the QP solvers.
    deadline: Option<Instant>,
    work: Option<Work>,
    eval_time: Duration,
    qp_time: Duration,
}

fn uninit() -> ArgminError {
    ArgminError::msg("solver not initialised")
}

impl Sqp {
    /// `Err` when a setting is invalid. The QP solver defaults to [`StageIpm`] with the
    /// settings' QP tolerance and iteration limit.
    pub fn new(settings: SqpSettings) -> Result<Self, SettingsError> {
        settings.validate()?;
        let ipm = StageIpmSettings {
            tolerance: settings.qp_tolerance,
            max_iterations: settings.qp_max_iterations,
            ..StageIpmSettings::default()
        };
        Ok(Sqp {
            settings,
            cancel: None,
            make_qp: Box::new(move || Box::new(StageIpm::new(ipm.clone()))),
            deadline: None,
            work: None,
            eval_time: Duration::ZERO,
            qp_time: Duration::ZERO,
        })
    }

    /// Stop at the next iteration boundary once `flag` is set.
    #[must_use]
    pub fn with_cancel(mut self, flag: Arc<AtomicBool>) -> Self {
        self.cancel = Some(flag);
        self
    }

    /// Use QP solvers made by `make` (one for the regular QPs, one for the elastic ones).
    #[must_use]
    /// A QP solver that stops at the solve's deadline.
    fn deadline_qp(&self) -> Box<dyn QpSolver> {
        let mut qp = (self.make_qp)();
        qp.set_deadline(self.deadline);
        qp
    }

    pub fn with_qp_solver(mut self, make: impl Fn() -> Box<dyn QpSolver> + 'static) -> Self {
        self.make_qp = Box::new(make);
        self
    }

    pub fn settings(&self) -> &SqpSettings {
        &self.settings
    }

    /// The scaling in use (after `init`).
    pub fn scaling(&self) -> Option<&Scaling> {
        self.work.as_ref().map(|w| &w.setup.scaling)
    }

    fn finish(&self, mut state: SqpState, status: SqpStatus) -> SqpState {
        let reason = match status {
            SqpStatus::Solved | SqpStatus::SolvedReducedAccuracy => {
                TerminationReason::SolverConverged
            }
            _ => TerminationReason::SolverExit(status.label().to_string()),
        };
        state.status = Some(status);
        state.terminate_with(reason)
    }

    /// Copy the current point, unscaled, into `state`.
    fn publish(&mut self, state: &mut SqpState) {
        let Some(wk) = &mut self.work else { return };
        let r = wk.residuals();
        let s = &wk.setup;
        let sc = &s.scaling;
        let p = &wk.point;
        state.x.clear();
        state.x.extend((0..s.n).map(|j| p.y[j] * sc.var[j]));
        state.constraints.clear();
        state.constraints.extend((0..s.m).map(|i| p.c[i] * sc.con[i]));
        state.constraint_multipliers.clear();
        state.constraint_multipliers.extend((0..s.m).map(|i| wk.lambda[i] * sc.obj / sc.con[i]));
        state.bound_multipliers.clear();
        state.bound_multipliers.extend((0..s.n).map(|j| wk.nu[j] * sc.obj / sc.var[j]));
        state.objective = p.f * sc.obj;
        state.penalty = wk.penalty;
        state.merit = wk.merit(p.f, &p.c);
        state.residuals = r;
        state.evaluation_time = self.eval_time;
        state.qp_time = self.qp_time;
    }

    /// Multipliers of the equality rows that best satisfy stationarity at the start in the
    /// least-squares sense (`min |g + J_E' lambda|`), from the QP `min 1/2 d'd + g'd,
    /// J_E d = 0` whose optimality conditions `d + g + J_E' lambda = 0` make `d` the residual;
    /// inequality rows get 0. Used for the first exact Hessian, which with zero multipliers
    /// would ignore the curvature of the constraints (for a minimum-time problem it would be
    /// zero, and the first step a jump to a bound). Zero multipliers when the QP fails.
    fn least_squares_multipliers(&mut self) {
        let Some(wk) = &mut self.work else { return };
        let s = &wk.setup;
        let mut qp = StageQp::zeros(s.stages.clone());
        for k in 0..s.stages.stages() {
            let n = s.stages.stage_size(k);
            let h = &mut qp.hessian[s.stages.hessian_block(k)];
            for i in 0..n {
                h[i + i * n] = 1.0;
            }
        }
        qp.gradient.copy_from_slice(&wk.point.g);
        for (e, &p) in s.jac_pos.iter().enumerate() {
            qp.jacobian[p] += wk.point.jac[e];
        }
        for i in 0..s.m {
            if !s.inequality[i] {
                (qp.row_lower[i], qp.row_upper[i]) = (0.0, 0.0);
            }
        }
        let mut solver = (self.make_qp)();
        let mut sol = crate::qp::QpSolution::new(s.n, s.m);
        let t = Instant::now();
        let solved = solver.solve(&qp, &mut sol).is_ok() && sol.status.has_solution();
        self.qp_time += t.elapsed();
        if solved && sol.row_multipliers.iter().all(|v| v.is_finite()) {
            wk.lambda.copy_from_slice(&sol.row_multipliers);
        }
    }

    /// Step 1, the QP at the current point: gradient, constraints and bounds, and the
    /// Hessian model, the exact one made convex (keeping the QP's solution where the chain
    /// allows, `convexify.rs`) or BFGS.
    fn model<N: Nlp>(
        &mut self,
        problem: &mut Problem<N>,
        row: &mut IterationRow,
    ) -> Result<Result<(), EvalError>, ArgminError> {
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let p = &wk.point;
        wk.model.fill(&wk.setup, &p.y, &p.c, &p.g, &p.jac);
        if let Some(bfgs) = &wk.bfgs {
            wk.model.qp.hessian.copy_from_slice(bfgs.blocks());
            wk.hess_orig.copy_from_slice(bfgs.blocks());
            return Ok(Ok(()));
        }
        let t = Instant::now();
        let out = wk.setup.hessian(
            problem,
            &wk.point.y,
            &wk.lambda,
            &mut wk.hess_mult,
            &mut wk.hess_values,
            &mut wk.model.qp.hessian,
            &mut wk.buf,
        )?;
        self.eval_time += t.elapsed();
        if out.is_err() {
            return Ok(out);
        }
        wk.hess_orig.copy_from_slice(&wk.model.qp.hessian);
        wk.chain_convexified = false;
        let mut c = Convexified::default();
        if let Some(r) = &mut wk.riccati {
            estimate_active(&wk.setup, &wk.point, &wk.lambda, &wk.nu, &wk.hess_orig, &mut wk.aug);
            c = r.convexify(&mut wk.model.qp, &wk.aug, wk.floor);
            // The chain convexification keeps the Newton step while the reduced Hessian is
            // positive definite; where it must raise a free block by much, the raised
            // curvature travels through the cost-to-go to every earlier stage and the steps
            // shrink to nothing (hang glider: raises of 1e4 to 1e10, 500 iterations), while
            // the blocks made convex one by one distort only their own stage.
            if c.blocks == 0 || c.largest_raise <= CHAIN_RAISE_LIMIT {
                r.gradient(&mut wk.model.qp, &wk.point.g, &wk.aug);
                wk.chain_convexified = true;
            } else {
                wk.model.qp.hessian.copy_from_slice(&wk.hess_orig);
            }
        }
        if !wk.chain_convexified {
            c = convexify_blocks(
                &wk.setup.stages,
                &mut wk.model.qp.hessian,
                wk.floor,
                &mut wk.convexifier,
            );
        }
        row.hessian_shift = c.largest_raise;
        row.convexified_blocks = c.blocks;
        row.augmented = if wk.chain_convexified {
            let active = |v: &[f64]| v.iter().filter(|&&r| r != 0.0).count();
            u32::try_from(active(&wk.aug.var) + active(&wk.aug.row)).unwrap_or(u32::MAX)
        } else {
            0
        };
        Ok(Ok(()))
    }

    /// The model of the elastic problems: the Hessian blocks made convex each on its own and
    /// the plain gradient (the chain convexification assumes the coupling rows hold exactly,
    /// which the elastic slacks relax).
    fn elastic_model(&mut self) -> Result<(), ArgminError> {
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        if wk.chain_convexified {
            wk.chain_convexified = false;
            wk.model.qp.hessian.copy_from_slice(&wk.hess_orig);
            convexify_blocks(
                &wk.setup.stages,
                &mut wk.model.qp.hessian,
                wk.floor,
                &mut wk.convexifier,
            );
            wk.model.qp.gradient.copy_from_slice(&wk.point.g);
        }
        Ok(())
    }

    /// Step 2, solve the QP; when it has no usable solution, the elastic QP (or, when the
    /// violation alone is stationary, a verdict of local infeasibility).
    fn step(&mut self, row: &mut IterationRow) -> Result<StepOutcome, ArgminError> {
        let st = self.settings.clone();
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let t = Instant::now();
        // Data the QP refuses (entries that overflowed from extreme magnitudes in the file) end
        // the solve with a status, never as an internal error.
        if wk.model.solve(wk.qp.as_mut()).is_err() {
            self.qp_time += t.elapsed();
            return Ok(StepOutcome::NoStep(QpStatus::NumericalFailure));
        }
        self.qp_time += t.elapsed();
        if let Some(r) = wk.riccati.as_mut().filter(|_| wk.chain_convexified) {
            if wk.model.sol.status.has_solution() {
                let sol = &mut wk.model.sol;
                r.correct_multipliers(
                    &wk.model.qp,
                    &wk.aug,
                    &sol.step,
                    &mut sol.row_multipliers,
                    &mut sol.bound_multipliers,
                );
            }
        }
        row.qp_solves += 1;
        row.qp_iterations += wk.model.sol.iterations;
        row.qp_status = Some(wk.model.sol.status);
        if wk.model.sol.status == QpStatus::TimeLimit {
            return Ok(StepOutcome::NoStep(QpStatus::TimeLimit));
        }
        let sol = &wk.model.sol;
        // Huge multipliers mean nearly inconsistent linearised constraints: the step would be
        // long and the penalty would explode, so the elastic step is taken instead.
        // Multipliers far above the penalty weight (a linearisation near inconsistency) would
        // drive the penalty and the Hessian's constraint curvature up by as much; the elastic
        // QP at the current weight caps them, as in the l1 penalty QP of R. Fletcher,
        // "Practical Methods of Optimization", 2nd ed., 1987, Section 14.4.
        let cap = st.elastic_multiplier_limit;
        let usable = sol.status.has_solution()
            && inf_norm(&sol.row_multipliers) <= cap
            && inf_norm(&sol.step).is_finite()
            && inf_norm(&sol.bound_multipliers).is_finite();
        if usable {
            wk.step.copy_from_slice(&sol.step);
            wk.step_lambda.copy_from_slice(&sol.row_multipliers);
            wk.step_nu.copy_from_slice(&sol.bound_multipliers);
            return Ok(StepOutcome::Regular);
        }
        if sol.status == QpStatus::Unbounded {
            // Cannot happen with a positive definite model; reported, not hidden.
            return Ok(StepOutcome::NoStep(QpStatus::Unbounded));
        }
        let violation = l1_violation(&wk.setup, &wk.point.c);
        self.elastic_model()?;
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let weight = wk.penalty;
        let t = Instant::now();
        let Ok(slacks) =
            wk.model.solve_elastic(ElasticKind::Penalised { weight }, wk.qp_elastic.as_mut())
        else {
            self.qp_time += t.elapsed();
            return Ok(StepOutcome::NoStep(QpStatus::NumericalFailure));
        };
        self.qp_time += t.elapsed();
        row.qp_solves += 1;
        row.qp_iterations += wk.model.sol.iterations;
        row.qp_status = Some(wk.model.sol.status);
        if wk.model.sol.status == QpStatus::TimeLimit {
            return Ok(StepOutcome::NoStep(QpStatus::TimeLimit));
        }
        let usable = wk.model.sol.status.has_solution();
        if usable {
            let sol = &wk.model.sol;
            wk.step.copy_from_slice(&sol.step);
            wk.step_lambda.copy_from_slice(&sol.row_multipliers);
            wk.step_nu.copy_from_slice(&sol.bound_multipliers);
        }
        // Steering (R. H. Byrd, J. Nocedal, R. A. Waltz, "Steering exact penalty methods for
        // nonlinear programming", Optim. Methods Softw. 23, 2008): the elastic step must win a
        // tenth of the reduction of the linearised violation that is possible at all. Only
        // when it wins less than a tenth of the violation itself is that possible reduction
        // asked of the feasibility QP, which also decides local infeasibility.
        if violation > 0.0 && (!usable || violation - slacks < 0.1 * violation) {
            if let Some(conflict) = self.violation_stationary(row)? {
                return Ok(StepOutcome::Infeasible(conflict));
            }
            let wk = self.work.as_mut().ok_or_else(uninit)?;
            let possible = (violation - wk.least_violation).max(0.0);
            if (!usable || violation - slacks < 0.1 * possible) && wk.penalty < st.penalty_max {
                wk.penalty = (10.0 * wk.penalty).min(st.penalty_max);
            }
        }
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        if !usable {
            return Ok(StepOutcome::NoStep(row.qp_status.unwrap_or(QpStatus::NumericalFailure)));
        }
        // The merit function weighs the violation like the elastic QP did.
        wk.penalty = wk.penalty.max(weight);
        Ok(StepOutcome::Elastic)
    }

    /// The proximal QP on the l1 violation alone (linearised at the current point): when its
    /// step is shorter than the infeasibility tolerance, no step reduces the violation to first
    /// order and the point is locally infeasible. Returns the conflict then, else `None`.
    fn violation_stationary(
        &mut self,
        row: &mut IterationRow,
    ) -> Result<Option<Vec<Conflict>>, ArgminError> {
        let tol = self.settings.infeasibility_tolerance;
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let t = Instant::now();
        let Ok(least) = wk.model.solve_elastic(ElasticKind::Feasibility, wk.qp_elastic.as_mut())
        else {
            // Data the QP refuses: no verdict on the violation from here.
            self.qp_time += t.elapsed();
            return Ok(None);
        };
        self.qp_time += t.elapsed();
        row.qp_solves += 1;
        let sol = &wk.model.sol;
        wk.least_violation = if sol.status.has_solution() { least } else { 0.0 };
        if !sol.status.has_solution() || inf_norm(&sol.step) > tol {
            return Ok(None);
        }
        let largest = inf_norm(&sol.row_multipliers).max(inf_norm(&sol.bound_multipliers));
        let mut conflict = Vec::new();
        if largest > 0.0 {
            let cut = 1e-6 * largest;
            for (i, &v) in sol.row_multipliers.iter().enumerate() {
                if v.abs() > cut {
                    conflict.push(Conflict {
                        item: ConflictItem::Row(i),
                        upper: v > 0.0,
                        weight: v.abs() / largest,
                    });
                }
            }
            for (j, &v) in sol.bound_multipliers.iter().enumerate() {
                if v.abs() > cut {
                    conflict.push(Conflict {
                        item: ConflictItem::Bound(j),
                        upper: v > 0.0,
                        weight: v.abs() / largest,
                    });
                }
            }
        }
        Ok(Some(conflict))
    }

    /// Step 3, the penalty: above the multipliers and large enough for a model decrease;
    /// returns the slope of the merit function along the step predicted by the QP model.
    fn update_penalty(&mut self, kind: StepKind) -> Result<f64, ArgminError> {
        let st = &self.settings;
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let s = &wk.setup;
        let d = &wk.step;
        wk.model.qp.mul_jacobian(d, &mut wk.cjd);
        for i in 0..s.m {
            wk.cjd[i] += wk.point.c[i];
        }
        let violation = l1_violation(s, &wk.point.c);
        let reduction = violation - l1_violation(s, &wk.cjd);
        crate::qp::stage::mul_blocks(&s.stages, &wk.hess_orig, d, &mut wk.hd);
        let dhd = dot(d, &wk.hd).max(0.0);
        let gd = dot(&wk.point.g, d);
        if kind == StepKind::Regular {
            let mut needed = inf_norm(&wk.step_lambda);
            if reduction > 1e-12 * violation.max(1.0) {
                // Nocedal & Wright eq. (18.36) with sigma = 1 and r = 0.1.
                needed = needed.max((gd + 0.5 * dhd) / (0.9 * reduction));
            }
            if wk.penalty < needed {
                wk.penalty = (1.5 * needed).min(st.penalty_max);
            } else if wk.penalty > 10.0 * needed && wk.penalty > st.penalty_start {
                // A weight far above what the multipliers need (left over from a poor early
                // linearisation) makes the merit blind to the objective and the line search
                // cut every step; let it come down gradually (after M. J. D. Powell, "A fast
                // algorithm for nonlinearly constrained optimization calculations", 1978, who
                // averages old and needed weights).
                wk.penalty = (0.5 * wk.penalty).max(1.5 * needed).max(st.penalty_start);
            }
        }
        Ok((gd - wk.penalty * reduction).min(0.0))
    }

    /// 5. Accept the trial point: derivatives there, the QP's multipliers, the BFGS update.
    fn accept<N: Nlp>(
        &mut self,
        problem: &mut Problem<N>,
        row: &mut IterationRow,
    ) -> Result<Result<(), EvalError>, ArgminError> {
        let st = self.settings.clone();
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let t = Instant::now();
        let out = wk.setup.derivatives(
            problem,
            &wk.trial.y,
            &mut wk.trial.g,
            &mut wk.trial.jac,
            &mut wk.buf,
        )?;
        self.eval_time += t.elapsed();
        if let Err(e) = out {
            return Ok(Err(e));
        }
        // Full step on the multipliers: the QP's are the least-squares-consistent estimate at
        // the linearisation, whatever the step length (a damped update would lag behind and
        // leave a stationarity floor).
        wk.lambda.copy_from_slice(&wk.step_lambda);
        let s = &wk.setup;
        for j in 0..s.n {
            wk.step[j] = wk.trial.y[j] - wk.point.y[j];
        }
        if let Some(bfgs) = &mut wk.bfgs {
            lagrangian_gradient(s, &wk.trial.g, &wk.trial.jac, &wk.lambda, &mut wk.lg);
            lagrangian_gradient(s, &wk.point.g, &wk.point.jac, &wk.lambda, &mut wk.lg_old);
            for j in 0..s.n {
                wk.lg_old[j] = wk.lg[j] - wk.lg_old[j];
            }
            row.bfgs = bfgs.update(&wk.step, &wk.lg_old, st.bfgs_damping);
        }
        std::mem::swap(&mut wk.point, &mut wk.trial);
        // Bound multipliers: the QP's (which see bounds the interior-point method stops a hair
        // short of) or the projected ones, whichever leaves the smaller stationarity residual.
        let s = &wk.setup;
        lagrangian_gradient(s, &wk.point.g, &wk.point.jac, &wk.lambda, &mut wk.lg);
        projected_bound_multipliers(s, &wk.point.y, &wk.lg, &mut wk.nu_proj);
        let worst =
            |nu: &[f64]| wk.lg.iter().zip(nu).fold(0.0_f64, |a, (l, v)| a.max((l + v).abs()));
        let qp_ok = wk.step_nu.iter().all(|v| v.is_finite());
        if qp_ok && worst(&wk.step_nu) < worst(&wk.nu_proj) {
            wk.nu.copy_from_slice(&wk.step_nu);
        } else {
            wk.nu.copy_from_slice(&wk.nu_proj);
        }
        Ok(Ok(()))
    }

    /// The outcome when the solver can go no further: reduced accuracy, local
    /// infeasibility, or stalled for `reason`.
    fn dead_end(
        &mut self,
        row: &mut IterationRow,
        reason: StallReason,
    ) -> Result<SqpStatus, ArgminError> {
        let st = self.settings.clone();
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let r = wk.residuals();
        if meets_reduced(&r, &st) {
            return Ok(SqpStatus::SolvedReducedAccuracy);
        }
        if r.violation > st.feasibility_tolerance {
            if let Some(conflict) = self.violation_stationary(row)? {
                let wk = self.work.as_ref().ok_or_else(uninit)?;
                let rows = violated_rows(&wk.setup, &wk.point.c, st.feasibility_tolerance);
                return Ok(SqpStatus::LocallyInfeasible { rows, conflict });
            }
        }
        Ok(SqpStatus::Stalled { reason })
    }

    /// End the iteration with the dead-end `status`, or, when a restart with block BFGS is
    /// still available (see [`StepKind::Restart`]), record the row and go on from the start.
    fn end_or_restart(
        &mut self,
        mut state: SqpState,
        mut row: IterationRow,
        status: SqpStatus,
    ) -> Result<(SqpState, Option<KV>), ArgminError> {
        if !self.restart(&status)? {
            return self.end_with(state, row, status);
        }
        row.step_kind = StepKind::Restart;
        self.record(&mut state, row);
        Ok((state, None))
    }

    /// Publish the point into `state` and log `row` with the values there.
    fn record(&mut self, state: &mut SqpState, mut row: IterationRow) {
        self.publish(state);
        row.objective = state.objective;
        row.residuals = state.residuals;
        row.penalty = state.penalty;
        row.merit = state.merit;
        state.history.push(row.clone());
        state.last_row = Some(row);
    }

    /// After the dead end `status`: back to the starting point with block BFGS; `false` when
    /// no restart is left or the status is already an answer (reduced accuracy).
    fn restart(&mut self, status: &SqpStatus) -> Result<bool, ArgminError> {
        if matches!(status, SqpStatus::SolvedReducedAccuracy) {
            return Ok(false);
        }
        let st = self.settings.clone();
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let Some((point, lambda, nu)) = wk.restart.take() else {
            return Ok(false);
        };
        wk.point = point;
        wk.lambda = lambda;
        wk.nu = nu;
        wk.bfgs = Some(BlockBfgs::new(&wk.setup.stages));
        wk.riccati = None;
        wk.chain_convexified = false;
        wk.penalty = st.penalty_start;
        wk.floor = st.convexity_floor;
        wk.failures = 0;
        wk.stagnant = 0;
        wk.least_violation = 0.0;
        let s = &wk.setup;
        lagrangian_gradient(s, &wk.point.g, &wk.point.jac, &wk.lambda, &mut wk.lg);
        projected_bound_multipliers(s, &wk.point.y, &wk.lg, &mut wk.nu);
        Ok(true)
    }

    /// End the iteration with `status`, publishing the point and the row.
    fn end_with(
        &mut self,
        mut state: SqpState,
        row: IterationRow,
        status: SqpStatus,
    ) -> Result<(SqpState, Option<KV>), ArgminError> {
        self.record(&mut state, row);
        Ok((self.finish(state, status), None))
    }
}

/// The highest relative eigenvalue floor the recoveries raise the convexification to.
const HIGHEST_FLOOR: f64 = 1e-2;

/// The largest raise of a free block's curvature (scaled variables, scaled objective) that
/// the chain convexification may make and still be used; beyond it the blocks are made convex
/// one by one. Measured on the reference fixtures: Goddard's rocket needs raises up to about
/// 20 on its singular arc to keep its 10 iterations at 100 intervals (block convexification:
/// stalled after 100); at 200 its first step needs a raise of 2.1, and the blocks taken there
/// instead leave it at the iteration limit (500) where the chain solves it in 40. The hang
/// glider's and robot arm's raises grow to 1e4-1e10 (11 and 37 iterations with the blocks
/// instead of 500). Over the reference, hard and example fixtures at 50 and 200 intervals, 3
/// against 1: Goddard at 200 from the limit to 40 and Rayleigh at 50 from 37 to 27, five
/// cases one or two iterations slower, none failing; 2 keeps Goddard at 200 at the limit, 10
/// sends Goddard at 50 there. A threshold found by measurement (common practice), not theory.
const CHAIN_RAISE_LIMIT: f64 = 3.0;

/// Weight of the augmented-Lagrangian term, relative to the largest Hessian entry (at least
/// 1): large against the problem's curvature, far from the limits of double precision
/// (common practice for a penalty standing in for a constraint, not a published constant).
const AUGMENTATION_FACTOR: f64 = 10.0;

/// The augmentation on the constraints expected to stay active at `p`: variables fixed or on a
/// bound their multiplier presses against, equality rows, and inequality rows within rounding
/// of a side their multiplier presses against (local rows only: the coupling rows are exact
/// in the convexification already).
fn estimate_active(
    s: &Setup,
    p: &Point,
    lambda: &[f64],
    nu: &[f64],
    hessian: &[f64],
    aug: &mut Augmentation,
) {
    let rho = AUGMENTATION_FACTOR * hessian.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
    for j in 0..s.n {
        let fixed = s.yl[j] == s.yu[j];
        let held = (p.y[j] == s.yl[j] && nu[j] < 0.0) || (p.y[j] == s.yu[j] && nu[j] > 0.0);
        aug.var[j] = if fixed || held { rho } else { 0.0 };
    }
    let near = |a: f64, b: f64| (a - b).abs() <= 1e-6 * b.abs().max(1.0);
    for i in 0..s.m {
        let (row, res) = if s.stages.stage_of_row(i).1 {
            (0.0, 0.0)
        } else if !s.inequality[i]
            || (lambda[i] > 0.0 && s.cu[i].is_finite() && near(p.c[i], s.cu[i]))
        {
            (rho, p.c[i] - s.cu[i])
        } else if lambda[i] < 0.0 && s.cl[i].is_finite() && near(p.c[i], s.cl[i]) {
            (rho, p.c[i] - s.cl[i])
        } else {
            (0.0, 0.0)
        };
        aug.row[i] = row;
        aug.residual[i] = res;
    }
}

/// What step 2 of an iteration produced.
enum StepOutcome {
    Regular,
    Elastic,
    /// The violation is stationary: local infeasibility, with its conflict.
    Infeasible(Vec<Conflict>),
    /// No QP had a usable solution.
    NoStep(QpStatus),
}

impl<N: Nlp> Solver<N, SqpState> for Sqp {
    fn name(&self) -> &str {
        "costate-sqp"
    }

    fn init(
        &mut self,
        problem: &mut Problem<N>,
        mut state: SqpState,
    ) -> Result<(SqpState, Option<KV>), ArgminError> {
        let nlp = setup::nlp_mut(problem)?;
        let mut s =
            setup::setup(&*nlp, &self.settings).map_err(|e| ArgminError::msg(e.to_string()))?;
        state.max_iters = self.settings.max_iterations;
        let mut w0 = vec![0.0; s.n];
        nlp.initial_point(&mut w0);
        if let Some(j) = w0.iter().position(|v| !v.is_finite()) {
            return Err(ArgminError::msg(format!("initial value of variable {j} is {}", w0[j])));
        }
        let mut warm_l = vec![0.0; s.m];
        let mut warm_n = vec![0.0; s.n];
        let warm = nlp.initial_multipliers(&mut warm_l, &mut warm_n);
        let bfgs = s.hess.is_none().then(|| BlockBfgs::new(&s.stages));
        let mut buf = EvalBuffers { w: vec![0.0; s.n], grad: vec![0.0; s.grad_pattern.len()] };
        let mut point = Point::new(&s);
        for j in 0..s.n {
            point.y[j] = (w0[j] / s.scaling.var[j]).clamp(s.yl[j], s.yu[j]);
        }
        let t = Instant::now();
        let values = s.values(problem, &point.y, &mut point.c, &mut buf)?;
        let derivs = match &values {
            Ok(_) => {
                Some(s.derivatives(problem, &point.y, &mut point.g, &mut point.jac, &mut buf)?)
            }
            Err(_) => None,
        };
        self.eval_time += t.elapsed();
        match (values, derivs) {
            (Ok(f), Some(Ok(()))) => point.f = f,
            (Err(error), _) | (_, Some(Err(error))) => {
                state.x = w0;
                return Ok((self.finish(state, SqpStatus::EvaluationFailed { error }), None));
            }
            (Ok(_), None) => return Err(ArgminError::msg("derivatives not evaluated")),
        }

        // Scale the objective so its gradient at the start has a standard size: the
        // tolerances are then relative to a number of order one, whether the cost is 1e-9 s
        // or 1e9 J. A zero gradient leaves the objective's own size to decide.
        let target = self.settings.objective_gradient_target;
        if target.is_finite() {
            let size = inf_norm(&point.g);
            let size = if size > 0.0 { size } else { point.f.abs() };
            if size > 0.0 && size.is_finite() {
                let shrink = (size / target).clamp(1e-30, 1e30);
                s.scaling.obj *= shrink;
                point.f /= shrink;
                point.g.iter_mut().for_each(|v| *v /= shrink);
            }
        }
        let (n, m) = (s.n, s.m);
        let mut lambda = vec![0.0; m];
        let mut nu = vec![0.0; n];
        if warm {
            let sc = &s.scaling;
            for i in 0..m {
                lambda[i] = warm_l[i] * sc.con[i] / sc.obj;
            }
            for j in 0..n {
                nu[j] = warm_n[j] * sc.var[j] / sc.obj;
            }
        }
        let hess_len = s.hess.as_ref().map_or(0, |h| h.pattern.len());
        let riccati = s.hess.as_ref().and_then(|_| RiccatiConvexifier::new(&s.stages, &s.jac));
        let hess_orig = vec![0.0; s.stages.hessian_len()];
        let model = QpModel::new(&s);
        let convexifier = Convexifier::new(&s.stages);
        let trial = Point::new(&s);
        self.work = Some(Work {
            point,
            trial,
            lambda,
            nu,
            penalty: self.settings.penalty_start,
            model,
            qp: self.deadline_qp(),
            qp_elastic: self.deadline_qp(),
            bfgs,
            riccati,
            chain_convexified: false,
            restart: None,
            convexifier,
            hess_orig,
            aug: Augmentation::new(n, m),
            floor: self.settings.convexity_floor,
            hess_mult: vec![0.0; m],
            hess_values: vec![0.0; hess_len],
            buf,
            step: vec![0.0; n],
            step_lambda: vec![0.0; m],
            step_nu: vec![0.0; n],
            cjd: vec![0.0; m],
            row_shift: vec![0.0; m],
            grad_shift: vec![0.0; n],
            hd: vec![0.0; n],
            lg: vec![0.0; n],
            lg_old: vec![0.0; n],
            nu_proj: vec![0.0; n],
            least_violation: 0.0,
            failures: 0,
            stagnant: 0,
            setup: s,
        });
        let exact = self.work.as_ref().is_some_and(|w| w.setup.hess.is_some());
        let auto = self.settings.hessian == HessianMode::Auto;
        if let Some(wk) = self.work.as_mut().filter(|_| exact && auto) {
            wk.restart = Some((wk.point.clone(), wk.lambda.clone(), wk.nu.clone()));
        }
        if !warm && exact {
            self.least_squares_multipliers();
        }
        if let Some(wk) = &mut self.work {
            let s = &wk.setup;
            lagrangian_gradient(s, &wk.point.g, &wk.point.jac, &wk.lambda, &mut wk.lg);
            if !warm {
                projected_bound_multipliers(s, &wk.point.y, &wk.lg, &mut wk.nu);
            }
        }
        self.publish(&mut state);
        let row = IterationRow {
            iteration: 0,
            objective: state.objective,
            residuals: state.residuals,
            step_length: 0.0,
            step_norm: 0.0,
            penalty: state.penalty,
            merit: state.merit,
            step_kind: StepKind::Start,
            qp_status: None,
            qp_iterations: 0,
            qp_time: Duration::ZERO,
            hessian_shift: 0.0,
            convexified_blocks: 0,
            augmented: 0,
            qp_solves: 0,
            bfgs: BfgsUpdate::default(),
            second_order_correction: false,
            backtracks: 0,
        };
        state.history.push(row.clone());
        state.last_row = Some(row);
        Ok((state, None))
    }

    /// One SQP iteration: the named steps of the module docs.
    fn next_iter(
        &mut self,
        problem: &mut Problem<N>,
        mut state: SqpState,
    ) -> Result<(SqpState, Option<KV>), ArgminError> {
        // An iteration that stops without a row of its own must not hand the observers the
        // previous row a second time.
        state.last_row = None;
        let qp_time_before = self.qp_time;
        let mut row = IterationRow {
            iteration: state.get_iter() + 1,
            objective: state.objective,
            residuals: state.residuals,
            step_length: 0.0,
            step_norm: 0.0,
            penalty: state.penalty,
            merit: state.merit,
            step_kind: StepKind::None,
            qp_status: None,
            qp_iterations: 0,
            qp_time: Duration::ZERO,
            hessian_shift: 0.0,
            convexified_blocks: 0,
            augmented: 0,
            qp_solves: 0,
            bfgs: BfgsUpdate::default(),
            second_order_correction: false,
            backtracks: 0,
        };

        // 1. Model, 2. step. An unbounded QP (curvature at the floor along a direction the
        // objective falls without end) is solved again at once with a higher floor, so that
        // every iteration moves (BFGS: after a reset to the scaled identity).
        let mut retried = false;
        let outcome = loop {
            if let Err(error) = self.model(problem, &mut row)? {
                return self.end_with(state, row, SqpStatus::EvaluationFailed { error });
            }
            let outcome = self.step(&mut row)?;
            let wk = self.work.as_mut().ok_or_else(uninit)?;
            if matches!(outcome, StepOutcome::NoStep(QpStatus::Unbounded)) {
                match &mut wk.bfgs {
                    Some(bfgs) if !retried => {
                        bfgs.reset();
                        retried = true;
                        continue;
                    }
                    None if wk.floor < HIGHEST_FLOOR => {
                        wk.floor = (wk.floor * 1e3).min(HIGHEST_FLOOR);
                        continue;
                    }
                    _ => {}
                }
            }
            break outcome;
        };
        let (kind, qp_failure) = match outcome {
            StepOutcome::Regular => (StepKind::Regular, None),
            StepOutcome::Elastic => (StepKind::Elastic, None),
            StepOutcome::Infeasible(conflict) => {
                let st = &self.settings;
                let wk = self.work.as_ref().ok_or_else(uninit)?;
                let rows = violated_rows(&wk.setup, &wk.point.c, st.feasibility_tolerance);
                row.qp_time = self.qp_time - qp_time_before;
                let status = SqpStatus::LocallyInfeasible { rows, conflict };
                return self.end_or_restart(state, row, status);
            }
            StepOutcome::NoStep(QpStatus::TimeLimit) => {
                row.qp_time = self.qp_time - qp_time_before;
                return self.end_with(state, row, SqpStatus::TimeLimit);
            }
            StepOutcome::NoStep(status) => (StepKind::None, Some(status)),
        };
        let accepted = if qp_failure.is_none() {
            // 3. Penalty, 4. line search.
            let slope = self.update_penalty(kind)?;
            let wk = self.work.as_mut().ok_or_else(uninit)?;
            let mut ls = LineSearch {
                settings: &self.settings,
                eval_time: &mut self.eval_time,
                qp_time: &mut self.qp_time,
            };
            match ls.search(problem, wk, slope, kind == StepKind::Regular, &mut row)? {
                Search::Accepted => true,
                Search::Failed { error: Some(error) } => {
                    row.qp_time = self.qp_time - qp_time_before;
                    return self.end_with(state, row, SqpStatus::EvaluationFailed { error });
                }
                Search::Failed { error: None } => false,
            }
        } else {
            false
        };

        if accepted {
            // 5. Multipliers and derivatives at the new point.
            let merit_before = {
                let wk = self.work.as_ref().ok_or_else(uninit)?;
                wk.merit(wk.point.f, &wk.point.c)
            };
            if let Err(error) = self.accept(problem, &mut row)? {
                row.qp_time = self.qp_time - qp_time_before;
                return self.end_with(state, row, SqpStatus::EvaluationFailed { error });
            }
            let wk = self.work.as_mut().ok_or_else(uninit)?;
            let moved = inf_norm(&wk.step);
            let size = 1.0 + inf_norm(&wk.point.y);
            let gained = merit_before - wk.merit(wk.point.f, &wk.point.c);
            let stagnant = moved <= 1e-10 * size
                || (row.step_length < 1.0 && gained <= 1e-9 * merit_before.abs().max(1.0));
            wk.stagnant = if stagnant { wk.stagnant + 1 } else { 0 };
            wk.failures = 0;
            wk.floor = self.settings.convexity_floor;
            row.step_norm = moved;
            row.step_kind = kind;
        } else {
            // No step: try once more with a more cautious Hessian model before giving up.
            let reason = qp_failure.map_or(StallReason::LineSearch, StallReason::Qp);
            let wk = self.work.as_mut().ok_or_else(uninit)?;
            wk.failures += 1;
            if wk.failures >= 3 {
                let status = self.dead_end(&mut row, reason)?;
                row.qp_time = self.qp_time - qp_time_before;
                return self.end_or_restart(state, row, status);
            }
            let wk = self.work.as_mut().ok_or_else(uninit)?;
            match &mut wk.bfgs {
                Some(bfgs) => bfgs.reset(),
                // A higher eigenvalue floor shortens the steps along weak curvature.
                None => wk.floor = (wk.floor * 1e3).min(HIGHEST_FLOOR),
            }
            row.step_kind = StepKind::None;
        }
        row.qp_time = self.qp_time - qp_time_before;
        self.record(&mut state, row.clone());
        // Stagnation: steps too short to change anything, several times in a row. Stop with
        // the most honest status instead of crawling to the iteration limit.
        let st = self.settings.clone();
        let wk = self.work.as_ref().ok_or_else(uninit)?;
        if wk.stagnant >= STAGNATION_ITERATIONS && !meets(&state.residuals, &st, 1.0) {
            let status = self.dead_end(&mut row, StallReason::NoProgress)?;
            if self.restart(&status)? {
                self.publish(&mut state);
                if let Some(last) = state.history.last_mut() {
                    last.step_kind = StepKind::Restart;
                }
                state.last_row = state.history.last().cloned();
                return Ok((state, None));
            }
            return Ok((self.finish(state, status), None));
        }
        Ok((state, None))
    }

    fn terminate(&mut self, state: &SqpState) -> TerminationStatus {
        if self.cancel.as_ref().is_some_and(|c| c.load(Ordering::SeqCst)) {
            return TerminationStatus::Terminated(TerminationReason::Interrupt);
        }
        if self.work.is_some() && meets(&state.residuals, &self.settings, 1.0) {
            return TerminationStatus::Terminated(TerminationReason::SolverConverged);
        }
        TerminationStatus::NotTerminated
    }
}

/// An argmin observer that hands every iteration row to a callback.
pub struct RowObserver<F: FnMut(&IterationRow)>(pub F);

impl<F: FnMut(&IterationRow)> Observe<SqpState> for RowObserver<F> {
    fn observe_init(&mut self, _name: &str, state: &SqpState, _kv: &KV) -> Result<(), ArgminError> {
        if let Some(r) = &state.last_row {
            (self.0)(r);
        }
        Ok(())
    }

    fn observe_iter(&mut self, state: &SqpState, _kv: &KV) -> Result<(), ArgminError> {
        if let Some(r) = &state.last_row {
            (self.0)(r);
        }
        Ok(())
    }
}

/// Solve `nlp` with `settings`. `cancel`, when set during the solve, stops it with
/// [`SqpStatus::Interrupted`]; `observer` receives every iteration row as it happens.
/// `Err` only for invalid settings or an inconsistent problem description.
pub fn solve_nlp<N: Nlp>(
    nlp: N,
    settings: &SqpSettings,
    cancel: Option<Arc<AtomicBool>>,
    observer: Option<Box<dyn FnMut(&IterationRow)>>,
) -> Result<SqpResult, SolveError> {
    let started = Instant::now();
    let mut sqp = Sqp::new(settings.clone()).map_err(SolveError::Settings)?;
    setup::setup(&nlp, settings)?;
    let mut w0 = vec![0.0; nlp.num_variables()];
    nlp.initial_point(&mut w0);
    if let Some(j) = w0.iter().position(|v| !v.is_finite()) {
        return Err(SolveError::Problem(format!("initial value of variable {j} is {}", w0[j])));
    }
    if let Some(flag) = cancel {
        sqp = sqp.with_cancel(flag);
    }
    // The executor checks the limit between iterations; the QPs also stop at it (a QP at
    // 20,000 intervals takes seconds).
    sqp.deadline = Duration::try_from_secs_f64(settings.time_limit)
        .ok()
        .and_then(|limit| started.checked_add(limit));
    let mut exec = Executor::new(nlp, sqp).ctrlc(false);
    if let Ok(limit) = Duration::try_from_secs_f64(settings.time_limit) {
        exec = exec.timeout(limit);
    }
    if let Some(obs) = observer {
        exec = exec.add_observer(RowObserver(obs), ObserverMode::Always);
    }
    let res = exec.run().map_err(|e| SolveError::Internal(e.to_string()))?;
    let state = res.state;
    let status = match (&state.status, state.get_termination_reason()) {
        (Some(s), _) => s.clone(),
        (None, Some(TerminationReason::SolverConverged)) => SqpStatus::Solved,
        (None, Some(TerminationReason::MaxItersReached)) => SqpStatus::IterationLimit,
        (None, Some(TerminationReason::Timeout)) => SqpStatus::TimeLimit,
        (None, Some(TerminationReason::Interrupt)) => SqpStatus::Interrupted,
        (None, _) => SqpStatus::Stalled { reason: StallReason::LineSearch },
    };
    // Defence in depth: "solved" must mean the tolerances hold at the returned point.
    let status = match status {
        SqpStatus::Solved if !meets(&state.residuals, settings, 1.0) => {
            SqpStatus::Stalled { reason: StallReason::LineSearch }
        }
        other => other,
    };
    let total = started.elapsed();
    let timing = Timing {
        evaluation: state.evaluation_time,
        qp: state.qp_time,
        other: total.saturating_sub(state.evaluation_time + state.qp_time),
        total,
    };
    let iterations = state.history.last().map_or(0, |r| r.iteration);
    Ok(SqpResult {
        status,
        x: state.x.clone(),
        constraint_multipliers: state.constraint_multipliers.clone(),
        bound_multipliers: state.bound_multipliers.clone(),
        objective: state.objective,
        constraints: state.constraints.clone(),
        residuals: state.residuals,
        iterations,
        timing,
        evaluations: state.get_func_counts().clone(),
        history: state.history,
    })
}

/// Column header of the iteration log.
pub fn log_header() -> String {
    format!(
        "{:>5}  {:>15}  {:>9}  {:>12}  {:>9}  {:>9}  {:>8}  {:>9}  {}",
        "iter",
        "objective",
        "violation",
        "stationarity",
        "step",
        "penalty",
        "qp_ms",
        "shift",
        "notes"
    )
}

/// One line of the iteration log for `row`.
pub fn log_line(row: &IterationRow) -> String {
    let mut notes = String::new();
    match row.step_kind {
        StepKind::Elastic => notes.push_str("elastic "),
        StepKind::None if row.iteration > 0 => notes.push_str("no-step "),
        StepKind::Restart => notes.push_str("restart:bfgs "),
        _ => {}
    }
    if row.qp_solves > 1 {
        let _ = write!(notes, "qps:{} ", row.qp_solves);
    }
    if row.second_order_correction {
        notes.push_str("soc ");
    }
    if let Some(q) = row.qp_status {
        if q != QpStatus::Solved {
            let _ = write!(notes, "qp:{} ", q.label());
        }
    }
    if row.bfgs.damped > 0 {
        let _ = write!(notes, "damped:{} ", row.bfgs.damped);
    }
    format!(
        "{:>5}  {:>15.8e}  {:>9.2e}  {:>12.2e}  {:>9.2e}  {:>9.2e}  {:>8.2}  {:>9.1e}  {}",
        row.iteration,
        row.objective,
        row.residuals.violation,
        row.residuals.stationarity,
        row.step_length,
        row.penalty,
        row.qp_time.as_secs_f64() * 1e3,
        row.hessian_shift,
        notes.trim_end()
    )
}
