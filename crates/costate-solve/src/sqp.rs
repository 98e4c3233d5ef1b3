//! Our SQP method for a sparse [`Nlp`], as an argmin [`Solver`] with its own [`SqpState`].
//!
//! Owns the algorithm, its state, statuses, results and the iteration log rows. Must not know
//! what the NLP stands for (no names, no time grids): locations of failures and violated rows
//! are plain indices and the problem's own [`EvalError`] codes.
//!
//! One iteration, in scaled variables `y = w / scale` (see [`Scaling`]):
//! 1. QP Hessian `B`: block BFGS, or the exact Lagrangian Hessian made convex: unchanged if
//!    positive definite, else with an augmented-Lagrangian term on the active rows, else (with
//!    variable blocks) each diagonal block projected onto the positive definite matrices, else
//!    a diagonal shift; so every QP is strictly convex. The first exact Hessian uses
//!    least-squares multipliers (zero ones would drop the constraints' curvature).
//! 2. QP `min 1/2 d'Bd + g'd  subject to  cl <= c + J d <= cu,  yl <= y + d <= yu`. If it is
//!    infeasible (inconsistent linearisation), the elastic QP relaxes every row with
//!    nonnegative slacks weighted by the penalty, so a step always exists; if the violation
//!    alone is stationary (a proximal QP on the l1 violation returns a tiny step), the point is
//!    reported locally infeasible.
//! 3. Penalty update from the QP multipliers (`rho > |lambda|_inf`) and the sufficient model
//!    decrease rule of J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., 2006,
//!    eq. (18.36).
//! 4. Backtracking line search on the l1 merit `f + rho * sum(violation)` (Nocedal & Wright,
//!    Algorithm 18.3), with one second-order correction (eq. (18.51)) when the full step is
//!    rejected; trial points where the problem cannot be evaluated (NaN/Inf) are backtracked
//!    from like rejected ones.
//! 5. Multipliers take the QP's (a full step, whatever the step length); bound multipliers
//!    are the QP's or the projected ones, whichever satisfies stationarity better; BFGS is
//!    updated from the Lagrangian gradient difference.
//! 6. Stagnation: after [`STAGNATION_ITERATIONS`] accepted steps in a row that change nothing
//!    (or are cut by the line search without lowering the merit), the solve ends "solved to
//!    reduced accuracy" if the loosened tolerances hold, "locally infeasible" if the violation
//!    is stationary, else stalled ([`StallReason::NoProgress`]).
//!
//! Termination on scaled KKT residuals ([`Residuals`]); "solved" is only ever reported when the
//! feasibility, stationarity and complementarity tolerances all hold.

use std::collections::HashMap;
use std::fmt::Write as _;
use std::ops::Range;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use argmin::core::observers::{Observe, ObserverMode};
use argmin::core::{
    Error as ArgminError, Executor, Problem, Solver, State, TerminationReason, TerminationStatus,
    KV,
};

use crate::hessian::{convexify, BfgsUpdate, BlockBfgs};
use crate::nlp::{finite_bound, EvalError, EvalPart, Nlp, Pattern};
use crate::qp_legacy::{
    ClarabelQp, ClarabelQpSettings, QpProblem, QpSolution, QpSolver, QpStatus, Triplets,
};
use crate::settings::{HessianMode, SettingsError, SqpSettings};

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
    /// No further progress possible, and the tolerances loosened by
    /// `reduced_accuracy_factor` are met.
    SolvedReducedAccuracy,
    /// The constraint violation is (locally) as small as it gets and still above the
    /// tolerance. `rows` are the most violated rows, largest first (at most 10).
    LocallyInfeasible {
        rows: Vec<ViolatedRow>,
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
    /// No step was taken (recovery: BFGS reset or larger Hessian shift).
    None,
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
    /// Diagonal shift added to the exact Hessian (0 for BFGS or when none was needed).
    pub hessian_shift: f64,
    /// Weight of the augmented-Lagrangian term that made the exact Hessian convex (0 if none).
    pub augmentation: f64,
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

/// Scale factors between the problem (`w`, `c`, `f`) and the solver (`y = w / var`,
/// `c / con`, `f / obj`).
#[derive(Clone, Debug, PartialEq)]
pub struct Scaling {
    pub var: Vec<f64>,
    pub con: Vec<f64>,
    pub obj: f64,
}

/// Everything about the problem that does not change during a solve, checked once.
struct Setup {
    n: usize,
    m: usize,
    scaling: Scaling,
    yl: Vec<f64>,
    yu: Vec<f64>,
    cl: Vec<f64>,
    cu: Vec<f64>,
    grad_pattern: Vec<usize>,
    jac: Pattern,
    /// Per Jacobian nonzero: `var[col] / con[row]`.
    jac_scale: Vec<f64>,
    /// Lower-triangle pattern and per-entry `var[r] * var[c]`, when the exact Hessian is used.
    hess: Option<(Pattern, Vec<f64>)>,
    blocks: Vec<Range<usize>>,
    /// Rows with `cl < cu` (complementarity applies).
    inequality: Vec<bool>,
}

/// Validate the problem description against `settings`; `Err` describes the first problem.
fn setup<N: Nlp + ?Sized>(nlp: &N, settings: &SqpSettings) -> Result<Setup, SolveError> {
    let n = nlp.num_variables();
    let m = nlp.num_constraints();
    let bad = |s: String| Err(SolveError::Problem(s));
    let mut wl = vec![0.0; n];
    let mut wu = vec![0.0; n];
    nlp.variable_bounds(&mut wl, &mut wu);
    let mut cl = vec![0.0; m];
    let mut cu = vec![0.0; m];
    nlp.constraint_bounds(&mut cl, &mut cu);
    for j in 0..n {
        if wl[j].is_nan()
            || wu[j].is_nan()
            || wl[j] > wu[j]
            || wl[j] == f64::INFINITY
            || wu[j] == f64::NEG_INFINITY
        {
            return bad(format!("variable {j} has bounds [{}, {}]", wl[j], wu[j]));
        }
    }
    for i in 0..m {
        if cl[i].is_nan()
            || cu[i].is_nan()
            || cl[i] > cu[i]
            || cl[i] == f64::INFINITY
            || cu[i] == f64::NEG_INFINITY
        {
            return bad(format!("constraint row {i} has bounds [{}, {}]", cl[i], cu[i]));
        }
    }
    let mut var = vec![1.0; n];
    let mut con = vec![1.0; m];
    let mut obj = 1.0;
    if settings.use_scaling {
        nlp.variable_scales(&mut var);
        nlp.constraint_scales(&mut con);
        obj = nlp.objective_scale();
    }
    if let Some(j) = var.iter().position(|s| !(s.is_finite() && *s > 0.0)) {
        return bad(format!("variable {j} has scale {}", var[j]));
    }
    if let Some(i) = con.iter().position(|s| !(s.is_finite() && *s > 0.0)) {
        return bad(format!("constraint row {i} has scale {}", con[i]));
    }
    if !(obj.is_finite() && obj > 0.0) {
        return bad(format!("objective scale is {obj}"));
    }
    let scale_bound =
        |v: f64, s: f64, sign: f64| if finite_bound(v) { v / s } else { sign * f64::INFINITY };
    let yl = (0..n).map(|j| scale_bound(wl[j], var[j], -1.0)).collect();
    let yu = (0..n).map(|j| scale_bound(wu[j], var[j], 1.0)).collect();
    let inequality = (0..m).map(|i| cl[i] != cu[i]).collect();
    let cl = (0..m).map(|i| scale_bound(cl[i], con[i], -1.0)).collect();
    let cu = (0..m).map(|i| scale_bound(cu[i], con[i], 1.0)).collect();

    let grad_pattern = nlp.gradient_pattern();
    if let Some(j) = grad_pattern.iter().find(|&&j| j >= n) {
        return bad(format!("gradient pattern names variable {j} of {n}"));
    }
    let jac = nlp.jacobian_pattern();
    if let Some((r, c)) = jac.first_out_of_range(m, n) {
        return bad(format!("jacobian pattern entry ({r}, {c}) outside {m}x{n}"));
    }
    let jac_scale = jac.rows.iter().zip(&jac.cols).map(|(&r, &c)| var[c] / con[r]).collect();
    let use_exact = match settings.hessian {
        HessianMode::Bfgs => false,
        HessianMode::Auto => nlp.hessian_pattern().is_some(),
        HessianMode::Exact => {
            if nlp.hessian_pattern().is_none() {
                return bad("exact Hessian requested but the problem provides none".into());
            }
            true
        }
    };
    let hess = if use_exact {
        let p = nlp.hessian_pattern().unwrap_or_default();
        if let Some((r, c)) = p.first_out_of_range(n, n) {
            return bad(format!("hessian pattern entry ({r}, {c}) outside {n}x{n}"));
        }
        if let Some(k) = (0..p.len()).find(|&k| p.rows[k] < p.cols[k]) {
            return bad(format!(
                "hessian pattern entry ({}, {}) above the diagonal",
                p.rows[k], p.cols[k]
            ));
        }
        let s = p.rows.iter().zip(&p.cols).map(|(&r, &c)| var[r] * var[c]).collect();
        Some((p, s))
    } else {
        None
    };
    let blocks = nlp.variable_blocks();
    let mut seen = vec![false; n];
    for b in &blocks {
        if b.end > n || b.start > b.end {
            return bad(format!("variable block {b:?} outside 0..{n}"));
        }
        for j in b.clone() {
            if seen[j] {
                return bad(format!("variable {j} is in two blocks"));
            }
            seen[j] = true;
        }
    }
    Ok(Setup {
        n,
        m,
        scaling: Scaling { var, con, obj },
        yl,
        yu,
        cl,
        cu,
        grad_pattern,
        jac,
        jac_scale,
        hess,
        blocks,
        inequality,
    })
}

/// The current point and the data evaluated there, all scaled.
struct Point {
    y: Vec<f64>,
    f: f64,
    c: Vec<f64>,
    g: Vec<f64>,
    jac: Vec<f64>,
}

/// Mutable solver data created by `init`.
struct Work {
    setup: Setup,
    point: Point,
    lambda: Vec<f64>,
    nu: Vec<f64>,
    penalty: f64,
    bfgs: Option<BlockBfgs>,
    last_shift: f64,
    /// Augmentation weight that made the last exact Hessian convex.
    last_weight: f64,
    /// Lower limit on the Hessian shift after a failed step (exact mode).
    shift_floor: f64,
    failures: u32,
    /// Consecutive accepted steps that changed (almost) nothing.
    stagnant: u32,
    grad_buf: Vec<f64>,
    w_buf: Vec<f64>,
}

/// The SQP solver. Build with [`Sqp::new`], optionally attach a cancel flag and a QP solver,
/// then drive it with argmin's [`Executor`] (or use [`solve_nlp`]).
pub struct Sqp {
    settings: SqpSettings,
    cancel: Option<Arc<AtomicBool>>,
    qp: Box<dyn QpSolver>,
    work: Option<Work>,
    eval_time: Duration,
    qp_time: Duration,
}

impl Sqp {
    /// `Err` when a setting is invalid. The QP solver defaults to [`ClarabelQp`] with the
    /// settings' QP tolerance and iteration limit.
    pub fn new(settings: SqpSettings) -> Result<Self, SettingsError> {
        settings.validate()?;
        let qp = ClarabelQp::new(ClarabelQpSettings {
            tolerance: settings.qp_tolerance,
            max_iterations: settings.qp_max_iterations,
            ..ClarabelQpSettings::default()
        });
        Ok(Sqp {
            settings,
            cancel: None,
            qp: Box::new(qp),
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

    #[must_use]
    pub fn with_qp_solver(mut self, qp: Box<dyn QpSolver>) -> Self {
        self.qp = qp;
        self
    }

    pub fn settings(&self) -> &SqpSettings {
        &self.settings
    }

    /// The scaling in use (after `init`).
    pub fn scaling(&self) -> Option<&Scaling> {
        self.work.as_ref().map(|w| &w.setup.scaling)
    }

    fn solve_qp(&mut self, qp: &QpProblem) -> Result<(QpSolution, Duration), ArgminError> {
        let t = Instant::now();
        let sol = self.qp.solve(qp).map_err(|e| ArgminError::msg(e.to_string()))?;
        let dt = t.elapsed();
        self.qp_time += dt;
        Ok((sol, dt))
    }
}

fn count<O>(problem: &mut Problem<O>, what: &'static str) {
    *problem.counts.entry(what).or_insert(0) += 1;
}

fn nlp_mut<O>(problem: &mut Problem<O>) -> Result<&mut O, ArgminError> {
    problem.problem.as_mut().ok_or_else(|| ArgminError::msg("the executor holds no problem"))
}

/// First non-finite entry of `v` as an error of `part`.
fn check_finite(part: EvalPart, v: &[f64]) -> Result<(), EvalError> {
    match v.iter().position(|x| !x.is_finite()) {
        Some(i) => Err(EvalError::non_finite(part, i, v[i])),
        None => Ok(()),
    }
}

/// Objective and constraints at scaled `y`, scaled.
fn eval_values<N: Nlp>(
    problem: &mut Problem<N>,
    s: &Setup,
    y: &[f64],
    w: &mut [f64],
    time: &mut Duration,
) -> Result<Result<(f64, Vec<f64>), EvalError>, ArgminError> {
    let t = Instant::now();
    for j in 0..s.n {
        w[j] = y[j] * s.scaling.var[j];
    }
    count(problem, "objective");
    count(problem, "constraints");
    let nlp = nlp_mut(problem)?;
    let out = (|| {
        let f = nlp.objective(w)?;
        check_finite(EvalPart::Objective, &[f])?;
        let mut c = vec![0.0; s.m];
        nlp.constraints(w, &mut c)?;
        check_finite(EvalPart::Constraints, &c)?;
        for i in 0..s.m {
            c[i] /= s.scaling.con[i];
        }
        Ok((f / s.scaling.obj, c))
    })();
    *time += t.elapsed();
    Ok(out)
}

/// Dense scaled gradient and scaled Jacobian values at scaled `y`.
fn eval_derivatives<N: Nlp>(
    problem: &mut Problem<N>,
    s: &Setup,
    y: &[f64],
    w: &mut [f64],
    gbuf: &mut [f64],
    time: &mut Duration,
) -> Result<Result<(Vec<f64>, Vec<f64>), EvalError>, ArgminError> {
    let t = Instant::now();
    for j in 0..s.n {
        w[j] = y[j] * s.scaling.var[j];
    }
    count(problem, "gradient");
    count(problem, "jacobian");
    let nlp = nlp_mut(problem)?;
    let out = (|| {
        nlp.gradient(w, gbuf)?;
        check_finite(EvalPart::Gradient, gbuf)?;
        let mut g = vec![0.0; s.n];
        for (k, &j) in s.grad_pattern.iter().enumerate() {
            g[j] += gbuf[k] * s.scaling.var[j] / s.scaling.obj;
        }
        let mut jac = vec![0.0; s.jac.len()];
        nlp.jacobian(w, &mut jac)?;
        check_finite(EvalPart::Jacobian, &jac)?;
        for (v, sc) in jac.iter_mut().zip(&s.jac_scale) {
            *v *= sc;
        }
        Ok((g, jac))
    })();
    *time += t.elapsed();
    Ok(out)
}

/// Upper triangle of the scaled exact Hessian of the scaled Lagrangian.
fn eval_hessian<N: Nlp>(
    problem: &mut Problem<N>,
    s: &Setup,
    y: &[f64],
    lambda: &[f64],
    w: &mut [f64],
    time: &mut Duration,
) -> Result<Result<Triplets, EvalError>, ArgminError> {
    let Some((pattern, scale)) = &s.hess else {
        return Err(ArgminError::msg("exact Hessian requested without a pattern"));
    };
    let t = Instant::now();
    for j in 0..s.n {
        w[j] = y[j] * s.scaling.var[j];
    }
    count(problem, "hessian");
    let nlp = nlp_mut(problem)?;
    // The scaled Lagrangian is f / obj + sum lambda_i c_i / con_i.
    let mult: Vec<f64> = lambda.iter().zip(&s.scaling.con).map(|(l, c)| l / c).collect();
    let mut vals = vec![0.0; pattern.len()];
    let out = nlp.hessian(w, 1.0 / s.scaling.obj, &mult, &mut vals).and_then(|()| {
        check_finite(EvalPart::Hessian, &vals)?;
        let mut t = Triplets::new(s.n, s.n);
        for k in 0..pattern.len() {
            // Lower-triangle entry (r, c) is stored at (c, r) in the upper triangle.
            t.push(pattern.cols[k], pattern.rows[k], vals[k] * scale[k]);
        }
        Ok(t)
    });
    *time += t.elapsed();
    Ok(out)
}

/// Violation of `v` outside `[lo, hi]`.
fn outside(v: f64, lo: f64, hi: f64) -> f64 {
    (lo - v).max(v - hi).max(0.0)
}

fn l1_violation(s: &Setup, c: &[f64]) -> f64 {
    (0..s.m).map(|i| outside(c[i], s.cl[i], s.cu[i])).sum()
}

fn inf_norm(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a, x| a.max(x.abs()))
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// `g + J' lambda`.
fn lagrangian_gradient(s: &Setup, g: &[f64], jac: &[f64], lambda: &[f64]) -> Vec<f64> {
    let mut r = g.to_vec();
    for k in 0..jac.len() {
        r[s.jac.cols[k]] += jac[k] * lambda[s.jac.rows[k]];
    }
    r
}

/// Bound multipliers that best satisfy stationarity given `lambda`: nonzero only for variables
/// at a bound, with the sign the bound allows.
fn bound_multipliers(s: &Setup, y: &[f64], lg: &[f64]) -> Vec<f64> {
    (0..s.n)
        .map(|j| {
            let want = -lg[j];
            let at_lo = y[j] == s.yl[j];
            let at_hi = y[j] == s.yu[j];
            if (at_lo && (at_hi || want < 0.0)) || (at_hi && want > 0.0) {
                want
            } else {
                0.0
            }
        })
        .collect()
}

/// Bound multipliers at `y` given the Lagrangian gradient `lg`: the QP's (`qp`, which see
/// bounds the interior-point method stops a hair short of) or those of
/// [`bound_multipliers`], whichever leaves the smaller stationarity residual.
fn best_bound_multipliers(s: &Setup, y: &[f64], lg: &[f64], qp: &[f64]) -> Vec<f64> {
    let projected = bound_multipliers(s, y, lg);
    let worst = |nu: &[f64]| lg.iter().zip(nu).fold(0.0_f64, |a, (l, v)| a.max((l + v).abs()));
    if qp.len() == s.n && qp.iter().all(|v| v.is_finite()) && worst(qp) < worst(&projected) {
        qp.to_vec()
    } else {
        projected
    }
}

fn residuals(s: &Setup, p: &Point, lambda: &[f64], nu: &[f64]) -> Residuals {
    let mut violation: f64 = 0.0;
    for i in 0..s.m {
        violation = violation.max(outside(p.c[i], s.cl[i], s.cu[i]));
    }
    for j in 0..s.n {
        violation = violation.max(outside(p.y[j], s.yl[j], s.yu[j]));
    }
    let lg = lagrangian_gradient(s, &p.g, &p.jac, lambda);
    let norm = inf_norm(&p.g).max(1.0);
    let stationarity = lg.iter().zip(nu).fold(0.0_f64, |a, (l, v)| a.max((l + v).abs())) / norm;
    let comp = |mult: f64, v: f64, lo: f64, hi: f64| {
        // A multiplier pushing against an absent side is itself the error.
        if mult > 0.0 {
            if hi.is_finite() {
                mult * (hi - v).max(0.0)
            } else {
                mult
            }
        } else if mult < 0.0 {
            if lo.is_finite() {
                -mult * (v - lo).max(0.0)
            } else {
                -mult
            }
        } else {
            0.0
        }
    };
    let mut complementarity: f64 = 0.0;
    for i in 0..s.m {
        if s.inequality[i] {
            complementarity = complementarity.max(comp(lambda[i], p.c[i], s.cl[i], s.cu[i]));
        }
    }
    for j in 0..s.n {
        if s.yl[j] != s.yu[j] {
            complementarity = complementarity.max(comp(nu[j], p.y[j], s.yl[j], s.yu[j]));
        }
    }
    Residuals { violation, stationarity, complementarity: complementarity / norm }
}

fn meets(r: &Residuals, st: &SqpSettings, factor: f64) -> bool {
    r.violation <= st.feasibility_tolerance * factor
        && r.stationarity <= st.stationarity_tolerance * factor
        && r.complementarity <= st.complementarity_tolerance * factor
}

/// The most violated rows (largest scaled violation first), in the problem's units.
fn violated_rows(s: &Setup, c: &[f64], tol: f64) -> Vec<ViolatedRow> {
    let mut rows: Vec<(usize, f64)> =
        (0..s.m).map(|i| (i, outside(c[i], s.cl[i], s.cu[i]))).filter(|&(_, v)| v > tol).collect();
    rows.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    rows.truncate(10);
    rows.into_iter()
        .map(|(row, v)| ViolatedRow { row, violation: v * s.scaling.con[row] })
        .collect()
}

/// Move `y` inside the bounds, and onto a bound it is within rounding distance of (an
/// interior-point QP stops a hair short of active bounds).
fn clamp_snap(s: &Setup, y: &mut [f64]) {
    for j in 0..s.n {
        let (lo, hi) = (s.yl[j], s.yu[j]);
        let mut v = y[j].clamp(lo, hi);
        if lo.is_finite() && v - lo <= 1e-9 * lo.abs().max(1.0) {
            v = lo;
        }
        if hi.is_finite() && hi - v <= 1e-9 * hi.abs().max(1.0) {
            v = hi;
        }
        y[j] = v;
    }
}

impl Work {
    fn merit(&self, f: f64, c: &[f64]) -> f64 {
        f + self.penalty * l1_violation(&self.setup, c)
    }

    /// The QP at the current point with Hessian `h`.
    fn qp(&self, h: Triplets) -> QpProblem {
        let s = &self.setup;
        let p = &self.point;
        QpProblem {
            hessian: h,
            gradient: p.g.clone(),
            jacobian: jacobian_triplets(s, &p.jac),
            row_lower: (0..s.m).map(|i| s.cl[i] - p.c[i]).collect(),
            row_upper: (0..s.m).map(|i| s.cu[i] - p.c[i]).collect(),
            var_lower: (0..s.n).map(|j| s.yl[j] - p.y[j]).collect(),
            var_upper: (0..s.n).map(|j| s.yu[j] - p.y[j]).collect(),
        }
    }
}

/// The scaled constraint Jacobian with values `jac` as QP triplets.
fn jacobian_triplets(s: &Setup, jac: &[f64]) -> Triplets {
    Triplets {
        nrows: s.m,
        ncols: s.n,
        rows: s.jac.rows.clone(),
        cols: s.jac.cols.clone(),
        values: jac.to_vec(),
    }
}

/// The l1-relaxed form of `qp`: each row gets slacks `p, q >= 0` with `A d + p - q` in the
/// row bounds and cost `weight * (p + q)`. Always feasible since the variable bounds contain
/// `d = 0`. Returns the QP; its first `n` variables are `d`.
fn elastic(qp: &QpProblem, weight: f64) -> QpProblem {
    let n = qp.num_variables();
    let m = qp.num_rows();
    let total = n + 2 * m;
    let mut hessian = qp.hessian.clone();
    hessian.nrows = total;
    hessian.ncols = total;
    let mut jacobian = qp.jacobian.clone();
    jacobian.ncols = total;
    for i in 0..m {
        jacobian.push(i, n + i, 1.0);
        jacobian.push(i, n + m + i, -1.0);
    }
    let mut gradient = qp.gradient.clone();
    gradient.extend(std::iter::repeat_n(weight, 2 * m));
    let mut var_lower = qp.var_lower.clone();
    var_lower.extend(std::iter::repeat_n(0.0, 2 * m));
    let mut var_upper = qp.var_upper.clone();
    var_upper.extend(std::iter::repeat_n(f64::INFINITY, 2 * m));
    QpProblem {
        hessian,
        gradient,
        jacobian,
        row_lower: qp.row_lower.clone(),
        row_upper: qp.row_upper.clone(),
        var_lower,
        var_upper,
    }
}

/// Identity Hessian on the `n` step variables.
fn identity(n: usize) -> Triplets {
    let mut t = Triplets::new(n, n);
    for j in 0..n {
        t.push(j, j, 1.0);
    }
    t
}

/// The rows of an augmented-Lagrangian term `rho/2 * sum_i (c_i + J_i d - t_i)^2` added to the
/// QP objective, `t_i` the bound the row is held at. It vanishes wherever those rows hold in the
/// linearisation, so with the right active set it changes neither the step nor (after
/// [`Augmentation::correct_multipliers`]) the multipliers, yet it makes the QP Hessian positive
/// definite whenever the Lagrangian Hessian is positive definite on the null space of the
/// active constraint gradients (Debreu's lemma; J. Nocedal, S. J. Wright, "Numerical
/// Optimization", 2nd ed., 2006, Section 17.3 and Theorem 12.6 for the null-space condition).
/// This keeps exact-Hessian SQP quadratically convergent on problems whose Lagrangian Hessian
/// is indefinite, where a plain diagonal shift would slow it to a crawl.
struct Augmentation {
    weight: f64,
    /// `(row, c_i - t_i)`.
    rows: Vec<(usize, f64)>,
}

impl Augmentation {
    /// Linear part `rho * J_A' (c_A - t_A)` of the term.
    fn add_gradient(&self, s: &Setup, jac: &[f64], g: &mut [f64]) {
        let r = self.residual_by_row(s);
        for k in 0..jac.len() {
            if let Some(v) = r[s.jac.rows[k]] {
                g[s.jac.cols[k]] += self.weight * jac[k] * v;
            }
        }
    }

    /// The QP's multipliers refer to the augmented objective; those of the plain QP model are
    /// `lambda + rho (c + J d - t)` on the augmented rows.
    fn correct_multipliers(&self, s: &Setup, jac: &[f64], d: &[f64], lambda: &mut [f64]) {
        let mut jd = vec![0.0; s.m];
        for k in 0..jac.len() {
            jd[s.jac.rows[k]] += jac[k] * d[s.jac.cols[k]];
        }
        for &(i, r) in &self.rows {
            lambda[i] += self.weight * (r + jd[i]);
        }
    }

    fn residual_by_row(&self, s: &Setup) -> Vec<Option<f64>> {
        let mut r = vec![None; s.m];
        for &(i, v) in &self.rows {
            r[i] = Some(v);
        }
        r
    }
}

/// A convex QP Hessian built from the exact one.
struct ConvexModel {
    hessian: Triplets,
    shift: f64,
    augmentation: Option<Augmentation>,
}

/// Make the exact Hessian `h` (upper triangle) convex for the QP: first without change, then
/// with a growing augmented-Lagrangian term on the equality rows and the inequality rows held
/// at a bound with a nonzero multiplier (and on fixed or bound-held variables), and only then
/// with a diagonal shift.
fn convex_model(wk: &mut Work, st: &SqpSettings, h: Triplets) -> ConvexModel {
    let s = &wk.setup;
    let p = &wk.point;
    let near = |a: f64, b: f64| (a - b).abs() <= 1e-6 * b.abs().max(1.0);
    let mut rows = Vec::new();
    for i in 0..s.m {
        let active_upper = wk.lambda[i] > 0.0 && s.cu[i].is_finite() && near(p.c[i], s.cu[i]);
        if !s.inequality[i] || active_upper {
            rows.push((i, p.c[i] - s.cu[i]));
        } else if wk.lambda[i] < 0.0 && s.cl[i].is_finite() && near(p.c[i], s.cl[i]) {
            rows.push((i, p.c[i] - s.cl[i]));
        }
    }
    let held: Vec<usize> = (0..s.n)
        .filter(|&j| {
            s.yl[j] == s.yu[j] || (wk.nu[j] != 0.0 && (p.y[j] == s.yl[j] || p.y[j] == s.yu[j]))
        })
        .collect();
    // J_A' J_A in the upper triangle: every pair of entries within one augmented row.
    let mut by_row: Vec<Vec<usize>> = vec![Vec::new(); s.m];
    for k in 0..s.jac.len() {
        by_row[s.jac.rows[k]].push(k);
    }
    let mut gram = Triplets::new(s.n, s.n);
    for &(i, _) in &rows {
        for &a in &by_row[i] {
            for &b in &by_row[i] {
                let (ca, cb) = (s.jac.cols[a], s.jac.cols[b]);
                if ca < cb || (ca == cb && a == b) {
                    gram.push(ca, cb, p.jac[a] * p.jac[b]);
                } else if ca == cb && a < b {
                    // Repeated pattern entries of one column: both cross products.
                    gram.push(ca, cb, 2.0 * p.jac[a] * p.jac[b]);
                }
            }
        }
    }
    for &j in &held {
        gram.push(j, j, 1.0);
    }
    let with_weight = |w: f64| {
        let mut t = h.clone();
        if w > 0.0 {
            for k in 0..gram.nnz() {
                t.push(gram.rows[k], gram.cols[k], w * gram.values[k]);
            }
        }
        t
    };
    // Weights tried: 0, then a ladder starting near the last successful one.
    const LADDER: [f64; 8] = [1e-2, 1e-1, 1.0, 1e1, 1e2, 1e3, 1e4, 1e5];
    let can_augment = wk.shift_floor == 0.0 && gram.nnz() > 0;
    let mut tries = vec![0.0];
    if can_augment {
        tries.extend(LADDER.iter().copied().filter(|&w| w >= wk.last_weight / 10.0));
    }
    if wk.shift_floor == 0.0 {
        for &w in &tries {
            let mut t = with_weight(w);
            if convexify(&mut t, 0.0, 2.0, 0.0, true).ok {
                wk.last_weight = w;
                wk.last_shift = 0.0;
                let augmentation =
                    (w > 0.0).then(|| Augmentation { weight: w, rows: rows.clone() });
                return ConvexModel { hessian: t, shift: 0.0, augmentation };
            }
        }
    }
    // Not convex on the null space either. With variable blocks (multiple shooting), project
    // each block onto the positive definite matrices: only the directions of negative
    // curvature change, where a uniform shift would also damp every good direction and slow
    // the iteration to a crawl.
    if wk.shift_floor == 0.0 && !s.blocks.is_empty() {
        if let Some(t) = project_blocks(&h, &s.blocks, s.n) {
            wk.last_shift = 0.0;
            wk.last_weight = 0.0;
            return ConvexModel { hessian: t, shift: 0.0, augmentation: None };
        }
    }
    // Otherwise (or a failed step asked for caution): shift, starting from a fraction of the
    // last shift since the needed one changes slowly.
    // No augmentation here: a large weight would only worsen the conditioning of a model that
    // is not convex on the null space anyway.
    let weight = 0.0;
    let mut t = with_weight(weight);
    let start =
        (wk.last_shift / st.hessian_shift_growth).max(st.hessian_shift_start).max(wk.shift_floor);
    let cv = convexify(&mut t, start, st.hessian_shift_growth, st.hessian_shift_max, false);
    wk.last_shift = cv.shift;
    wk.last_weight = weight;
    let augmentation = (weight > 0.0).then_some(Augmentation { weight, rows });
    ConvexModel { hessian: t, shift: cv.shift, augmentation }
}

/// The upper-triangle matrix `h` with every diagonal block of `blocks` replaced by its
/// projection onto the positive definite matrices (eigenvalues below `delta` raised to
/// `max(|value|, delta)`, the "absolute value" modification of J. Nocedal, S. J. Wright,
/// "Numerical Optimization", 2nd ed., 2006, Section 3.4) and entries outside the blocks
/// dropped, so the result is block diagonal and positive definite. Variables in no block form
/// singleton blocks. `None` when an eigenvalue is not finite.
fn project_blocks(h: &Triplets, blocks: &[Range<usize>], n: usize) -> Option<Triplets> {
    let mut block_of = vec![usize::MAX; n];
    let mut all: Vec<Range<usize>> = blocks.to_vec();
    for (b, r) in blocks.iter().enumerate() {
        for j in r.clone() {
            block_of[j] = b;
        }
    }
    for j in 0..n {
        if block_of[j] == usize::MAX {
            block_of[j] = all.len();
            all.push(j..j + 1);
        }
    }
    let mut dense: Vec<nalgebra::DMatrix<f64>> =
        all.iter().map(|r| nalgebra::DMatrix::zeros(r.len(), r.len())).collect();
    for k in 0..h.nnz() {
        let (r, c, v) = (h.rows[k], h.cols[k], h.values[k]);
        let b = block_of[r];
        if b != block_of[c] {
            continue;
        }
        let (i, j) = (r - all[b].start, c - all[b].start);
        dense[b][(i, j)] += v;
        if i != j {
            dense[b][(j, i)] += v;
        }
    }
    let scale = h.values.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
    let delta = 1e-8 * scale;
    let mut out = Triplets::new(n, n);
    for (b, r) in all.iter().enumerate() {
        let eig = nalgebra::SymmetricEigen::new(dense[b].clone());
        if !eig.eigenvalues.iter().all(|v| v.is_finite()) {
            return None;
        }
        let vals = eig.eigenvalues.map(|v| v.abs().max(delta));
        let m = &eig.eigenvectors
            * nalgebra::DMatrix::from_diagonal(&vals)
            * eig.eigenvectors.transpose();
        for c in 0..r.len() {
            for i in 0..=c {
                out.push(r.start + i, r.start + c, m[(i, c)]);
            }
        }
    }
    Some(out)
}

/// Outcome of the search along one QP step.
enum Search {
    Accepted {
        y: Vec<f64>,
        f: f64,
        c: Vec<f64>,
        alpha: f64,
        soc: bool,
        backtracks: u32,
    },
    /// No acceptable point; `error` when no trial point could be evaluated at all.
    Failed {
        error: Option<EvalError>,
        backtracks: u32,
    },
}

impl Sqp {
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
    fn publish(&self, state: &mut SqpState) {
        let Some(wk) = &self.work else { return };
        let s = &wk.setup;
        let sc = &s.scaling;
        state.x = (0..s.n).map(|j| wk.point.y[j] * sc.var[j]).collect();
        state.constraints = (0..s.m).map(|i| wk.point.c[i] * sc.con[i]).collect();
        state.constraint_multipliers =
            (0..s.m).map(|i| wk.lambda[i] * sc.obj / sc.con[i]).collect();
        state.bound_multipliers = (0..s.n).map(|j| wk.nu[j] * sc.obj / sc.var[j]).collect();
        state.objective = wk.point.f * sc.obj;
        state.penalty = wk.penalty;
        state.merit = wk.merit(wk.point.f, &wk.point.c);
        state.residuals = residuals(s, &wk.point, &wk.lambda, &wk.nu);
        state.evaluation_time = self.eval_time;
        state.qp_time = self.qp_time;
    }

    /// Multipliers of the equality rows that best satisfy stationarity at `p` in the least-
    /// squares sense (`min |g + J_E' lambda|`), from the QP `min 1/2 d'd + g'd, J_E d = 0`
    /// whose optimality conditions `d + g + J_E' lambda = 0` make `d` the residual; inequality
    /// rows get 0. Used for the first exact Hessian, which with zero multipliers would ignore
    /// the curvature of the constraints (for a minimum-time problem it would be zero, and the
    /// first step a jump to a bound). Zero multipliers when the QP has no solution.
    fn least_squares_multipliers(&mut self, s: &Setup, p: &Point) -> Result<Vec<f64>, ArgminError> {
        let qp = QpProblem {
            hessian: identity(s.n),
            gradient: p.g.clone(),
            jacobian: jacobian_triplets(s, &p.jac),
            row_lower: (0..s.m)
                .map(|i| if s.inequality[i] { f64::NEG_INFINITY } else { 0.0 })
                .collect(),
            row_upper: (0..s.m)
                .map(|i| if s.inequality[i] { f64::INFINITY } else { 0.0 })
                .collect(),
            var_lower: vec![f64::NEG_INFINITY; s.n],
            var_upper: vec![f64::INFINITY; s.n],
        };
        let (sol, _) = self.solve_qp(&qp)?;
        let ok = sol.status.has_solution() && sol.row_multipliers.iter().all(|v| v.is_finite());
        Ok(if ok { sol.row_multipliers } else { vec![0.0; s.m] })
    }

    /// Replace the multipliers by those that minimise the stationarity residual at the current
    /// point with the current active set (rows and bounds within `10 *
    /// feasibility_tolerance` of a side), if they leave a smaller residual. They come from the
    /// QP `min 1/2 d'd + g'd` with `J_i d = 0` on active equality rows, `J_i d <= 0` (`>= 0`)
    /// on rows at their upper (lower) side, and `d_j <= 0` (`>= 0`) on variables at their
    /// upper (lower) bound: its optimality conditions make `-d` the Lagrangian gradient with
    /// multipliers of the right signs, so `|d|_inf` is the smallest residual the active set
    /// allows. This removes the stationarity floor left by multipliers of the previous
    /// linearisation where the Lagrangian Hessian is nearly singular (singular arcs).
    fn least_squares_kkt(&mut self) -> Result<(), ArgminError> {
        let tol = 10.0 * self.settings.feasibility_tolerance;
        let Some(wk) = &self.work else { return Ok(()) };
        let s = &wk.setup;
        let p = &wk.point;
        let near = |v: f64, b: f64| b.is_finite() && (v - b).abs() <= tol * b.abs().max(1.0);
        let mut row_lower = vec![f64::NEG_INFINITY; s.m];
        let mut row_upper = vec![f64::INFINITY; s.m];
        for i in 0..s.m {
            if !s.inequality[i] {
                (row_lower[i], row_upper[i]) = (0.0, 0.0);
            } else if near(p.c[i], s.cu[i]) {
                row_upper[i] = 0.0;
            } else if near(p.c[i], s.cl[i]) {
                row_lower[i] = 0.0;
            }
        }
        let mut var_lower = vec![f64::NEG_INFINITY; s.n];
        let mut var_upper = vec![f64::INFINITY; s.n];
        for j in 0..s.n {
            if near(p.y[j], s.yu[j]) {
                var_upper[j] = 0.0;
            }
            if near(p.y[j], s.yl[j]) {
                var_lower[j] = 0.0;
            }
        }
        let qp = QpProblem {
            hessian: identity(s.n),
            gradient: p.g.clone(),
            jacobian: jacobian_triplets(s, &p.jac),
            row_lower,
            row_upper,
            var_lower,
            var_upper,
        };
        let (sol, _) = self.solve_qp(&qp)?;
        if !sol.status.has_solution() {
            return Ok(());
        }
        let Some(wk) = self.work.as_mut() else { return Ok(()) };
        let before = residuals(&wk.setup, &wk.point, &wk.lambda, &wk.nu);
        let after = residuals(&wk.setup, &wk.point, &sol.row_multipliers, &sol.bound_multipliers);
        let score = |r: &Residuals| r.stationarity.max(r.complementarity);
        if score(&after) < score(&before) {
            wk.lambda = sol.row_multipliers;
            wk.nu = sol.bound_multipliers;
        }
        Ok(())
    }

    /// Proximal QP on the l1 violation alone: a tiny step means the violation is stationary.
    fn violation_is_stationary(&mut self) -> Result<bool, ArgminError> {
        let Some(wk) = &self.work else { return Ok(false) };
        let mut qp = wk.qp(identity(wk.setup.n));
        qp.gradient.fill(0.0);
        let feas = elastic(&qp, 1.0);
        let n = wk.setup.n;
        let (sol, _) = self.solve_qp(&feas)?;
        Ok(sol.status.has_solution()
            && inf_norm(&sol.step[..n]) <= self.settings.infeasibility_tolerance)
    }

    fn search<N: Nlp>(
        &mut self,
        problem: &mut Problem<N>,
        qp: &QpProblem,
        d: &[f64],
        slope: f64,
        allow_soc: bool,
        qp_time: &mut Duration,
    ) -> Result<Search, ArgminError> {
        let st = self.settings.clone();
        let Some(wk) = self.work.as_mut() else {
            return Err(ArgminError::msg("solver not initialised"));
        };
        let phi0 = wk.merit(wk.point.f, &wk.point.c);
        // Merit changes below rounding (a few dozen ulps of the merit) count as no increase:
        // near a solution the predicted decrease is itself at rounding level, and demanding
        // it exactly would reject every step there and leave a stationarity floor.
        let noise = 64.0 * f64::EPSILON * phi0.abs().max(1.0);
        let mut alpha = 1.0;
        let mut backtracks = 0;
        let mut any_value = false;
        let mut last_error = None;
        loop {
            let wk =
                self.work.as_mut().ok_or_else(|| ArgminError::msg("solver not initialised"))?;
            let mut y: Vec<f64> = wk.point.y.iter().zip(d).map(|(y, d)| y + alpha * d).collect();
            clamp_snap(&wk.setup, &mut y);
            match eval_values(problem, &wk.setup, &y, &mut wk.w_buf, &mut self.eval_time)? {
                Ok((f, c)) => {
                    any_value = true;
                    let phi = wk.merit(f, &c);
                    if phi <= phi0 + st.sufficient_decrease * alpha * slope + noise {
                        return Ok(Search::Accepted { y, f, c, alpha, soc: false, backtracks });
                    }
                    if alpha == 1.0 && allow_soc && st.second_order_correction && wk.setup.m > 0 {
                        // Second-order correction: re-linearise the constraints at the trial
                        // point, keeping the step's own linear part.
                        let mut jd = vec![0.0; wk.setup.m];
                        qp.jacobian.mul_add(d, &mut jd);
                        let mut soc = qp.clone();
                        for i in 0..wk.setup.m {
                            soc.row_lower[i] = wk.setup.cl[i] - c[i] + jd[i];
                            soc.row_upper[i] = wk.setup.cu[i] - c[i] + jd[i];
                        }
                        let (sol, dt) = self.solve_qp(&soc)?;
                        *qp_time += dt;
                        let wk = self
                            .work
                            .as_mut()
                            .ok_or_else(|| ArgminError::msg("solver not initialised"))?;
                        if sol.status.has_solution() {
                            let mut y2: Vec<f64> =
                                wk.point.y.iter().zip(&sol.step).map(|(y, d)| y + d).collect();
                            clamp_snap(&wk.setup, &mut y2);
                            if let Ok((f2, c2)) = eval_values(
                                problem,
                                &wk.setup,
                                &y2,
                                &mut wk.w_buf,
                                &mut self.eval_time,
                            )? {
                                let wk = self
                                    .work
                                    .as_ref()
                                    .ok_or_else(|| ArgminError::msg("solver not initialised"))?;
                                if wk.merit(f2, &c2)
                                    <= phi0 + st.sufficient_decrease * slope + noise
                                {
                                    return Ok(Search::Accepted {
                                        y: y2,
                                        f: f2,
                                        c: c2,
                                        alpha: 1.0,
                                        soc: true,
                                        backtracks,
                                    });
                                }
                            }
                        }
                    }
                }
                Err(e) => last_error = Some(e),
            }
            backtracks += 1;
            alpha *= st.backtrack_factor;
            if alpha < st.min_step {
                return Ok(Search::Failed {
                    error: if any_value { None } else { last_error },
                    backtracks,
                });
            }
        }
    }
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
        let nlp = nlp_mut(problem)?;
        let mut s = setup(&*nlp, &self.settings).map_err(|e| ArgminError::msg(e.to_string()))?;
        state.max_iters = self.settings.max_iterations;
        let mut w0 = vec![0.0; s.n];
        nlp.initial_point(&mut w0);
        if let Some(j) = w0.iter().position(|v| !v.is_finite()) {
            return Err(ArgminError::msg(format!("initial value of variable {j} is {}", w0[j])));
        }
        let mut y: Vec<f64> = (0..s.n).map(|j| w0[j] / s.scaling.var[j]).collect();
        for j in 0..s.n {
            y[j] = y[j].clamp(s.yl[j], s.yu[j]);
        }
        let mut warm_l = vec![0.0; s.m];
        let mut warm_n = vec![0.0; s.n];
        let warm = nlp.initial_multipliers(&mut warm_l, &mut warm_n);
        let bfgs = if s.hess.is_none() { Some(BlockBfgs::new(s.n, &s.blocks)) } else { None };

        let mut w_buf = vec![0.0; s.n];
        let mut grad_buf = vec![0.0; s.grad_pattern.len()];
        let values = eval_values(problem, &s, &y, &mut w_buf, &mut self.eval_time)?;
        let derivs = match &values {
            Ok(_) => Some(eval_derivatives(
                problem,
                &s,
                &y,
                &mut w_buf,
                &mut grad_buf,
                &mut self.eval_time,
            )?),
            Err(_) => None,
        };
        let ((f, c), (g, jac)) = match (values, derivs) {
            (Ok(v), Some(Ok(d))) => (v, d),
            (Err(error), _) | (_, Some(Err(error))) => {
                state.x = w0;
                return Ok((self.finish(state, SqpStatus::EvaluationFailed { error }), None));
            }
            (Ok(_), None) => return Err(ArgminError::msg("derivatives not evaluated")),
        };

        // A large starting gradient would make every tolerance relative to a huge number and
        // the penalty start irrelevant; shrink the objective to a standard size instead.
        let gmax = inf_norm(&g);
        let mut shrink = 1.0;
        if gmax > self.settings.objective_gradient_limit {
            shrink = gmax / self.settings.objective_gradient_limit;
            s.scaling.obj *= shrink;
        }
        let point = Point { y, f: f / shrink, c, g: g.iter().map(|v| v / shrink).collect(), jac };
        let (lambda, nu) = if warm {
            let sc = &s.scaling;
            (
                (0..s.m).map(|i| warm_l[i] * sc.con[i] / sc.obj).collect(),
                (0..s.n).map(|j| warm_n[j] * sc.var[j] / sc.obj).collect(),
            )
        } else {
            let mut lambda = vec![0.0; s.m];
            if s.hess.is_some() {
                lambda = self.least_squares_multipliers(&s, &point)?;
            }
            let lg = lagrangian_gradient(&s, &point.g, &point.jac, &lambda);
            let nu = bound_multipliers(&s, &point.y, &lg);
            (lambda, nu)
        };
        self.work = Some(Work {
            setup: s,
            point,
            lambda,
            nu,
            penalty: self.settings.penalty_start,
            bfgs,
            last_shift: 0.0,
            last_weight: 0.0,
            shift_floor: 0.0,
            failures: 0,
            stagnant: 0,
            grad_buf,
            w_buf,
        });
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
            augmentation: 0.0,
            bfgs: BfgsUpdate::default(),
            second_order_correction: false,
            backtracks: 0,
        };
        state.history.push(row.clone());
        state.last_row = Some(row);
        Ok((state, None))
    }

    fn next_iter(
        &mut self,
        problem: &mut Problem<N>,
        mut state: SqpState,
    ) -> Result<(SqpState, Option<KV>), ArgminError> {
        let st = self.settings.clone();
        let uninit = || ArgminError::msg("solver not initialised");
        let mut qp_time = Duration::ZERO;
        let mut qp_iterations = 0;
        // An iteration that stops without a row of its own must not hand the observers the
        // previous row a second time.
        state.last_row = None;

        // 1. QP Hessian.
        let wk = self.work.as_mut().ok_or_else(uninit)?;
        let n = wk.setup.n;
        let mut hessian_shift = 0.0;
        let mut augmentation: Option<Augmentation> = None;
        let h = if let Some(bfgs) = &wk.bfgs {
            let mut h = Triplets::new(n, n);
            bfgs.push_upper(&mut h);
            h
        } else {
            let hv = eval_hessian(
                problem,
                &wk.setup,
                &wk.point.y,
                &wk.lambda,
                &mut wk.w_buf,
                &mut self.eval_time,
            )?;
            let h = match hv {
                Ok(h) => h,
                Err(error) => {
                    self.publish(&mut state);
                    return Ok((self.finish(state, SqpStatus::EvaluationFailed { error }), None));
                }
            };
            let model = convex_model(wk, &st, h);
            hessian_shift = model.shift;
            augmentation = model.augmentation;
            model.hessian
        };

        // 2. QP, and the elastic QP if the linearisation is inconsistent.
        let mut qp = wk.qp(h);
        if let Some(aug) = &augmentation {
            aug.add_gradient(&wk.setup, &wk.point.jac, &mut qp.gradient);
        }
        let (mut sol, dt) = self.solve_qp(&qp)?;
        qp_time += dt;
        qp_iterations += sol.iterations;
        let mut kind = StepKind::Regular;
        let wk = self.work.as_ref().ok_or_else(uninit)?;
        let violation_l1 = l1_violation(&wk.setup, &wk.point.c);
        // Huge multipliers mean nearly inconsistent linearised constraints: the step would be
        // long and the penalty would explode, so take the elastic step instead.
        let mut exploding = sol.status.has_solution()
            && inf_norm(&sol.row_multipliers) > st.elastic_multiplier_limit;
        let exact = wk.bfgs.is_none();
        if exact && (exploding || !sol.status.has_solution()) {
            // An exact Hessian with (nearly) zero curvature in some directions (singular arcs)
            // can leave the QP too degenerate for the interior-point method. A proximal term
            // restores its conditioning at the cost of a shorter step; try it before giving
            // up on the linearisation.
            let diag = (0..qp.hessian.nnz())
                .filter(|&k| qp.hessian.rows[k] == qp.hessian.cols[k])
                .fold(1.0_f64, |a, k| a.max(qp.hessian.values[k].abs()));
            let mut proximal = qp.clone();
            for j in 0..n {
                proximal.hessian.push(j, j, 1e-3 * diag);
            }
            let (psol, dt) = self.solve_qp(&proximal)?;
            qp_time += dt;
            qp_iterations += psol.iterations;
            let p_exploding = psol.status.has_solution()
                && inf_norm(&psol.row_multipliers) > st.elastic_multiplier_limit;
            if psol.status.has_solution() && !p_exploding {
                sol = psol;
                qp = proximal;
                exploding = false;
                hessian_shift = 1e-3 * diag;
            }
        }
        let wk = self.work.as_ref().ok_or_else(uninit)?;
        if exploding || (!sol.status.has_solution() && sol.status != QpStatus::Unbounded) {
            if wk.setup.m > 0 && violation_l1 > 0.0 && self.violation_is_stationary()? {
                let wk = self.work.as_ref().ok_or_else(uninit)?;
                let r = residuals(&wk.setup, &wk.point, &wk.lambda, &wk.nu);
                if r.violation > st.feasibility_tolerance {
                    let rows = violated_rows(&wk.setup, &wk.point.c, st.feasibility_tolerance);
                    self.publish(&mut state);
                    return Ok((self.finish(state, SqpStatus::LocallyInfeasible { rows }), None));
                }
            }
            let wk = self.work.as_ref().ok_or_else(uninit)?;
            let weight =
                wk.penalty.max(10.0 * inf_norm(&wk.lambda)).min(st.elastic_multiplier_limit);
            // The merit function must weigh the violation like the elastic QP did.
            self.work.as_mut().ok_or_else(uninit)?.penalty = weight;
            let (esol, dt) = self.solve_qp(&elastic(&qp, weight))?;
            qp_time += dt;
            qp_iterations += esol.iterations;
            kind = StepKind::Elastic;
            sol = QpSolution {
                status: esol.status,
                step: esol.step[..n].to_vec(),
                row_multipliers: esol.row_multipliers,
                bound_multipliers: esol.bound_multipliers[..n].to_vec(),
                iterations: esol.iterations,
            };
        }
        let qp_status = sol.status;
        if let (Some(aug), true) = (&augmentation, sol.status.has_solution()) {
            let wk = self.work.as_ref().ok_or_else(uninit)?;
            aug.correct_multipliers(&wk.setup, &wk.point.jac, &sol.step, &mut sol.row_multipliers);
        }

        let mut row = IterationRow {
            iteration: state.get_iter() + 1,
            objective: state.objective,
            residuals: state.residuals,
            step_length: 0.0,
            step_norm: 0.0,
            penalty: state.penalty,
            merit: state.merit,
            step_kind: StepKind::None,
            qp_status: Some(qp_status),
            qp_iterations,
            qp_time,
            hessian_shift,
            augmentation: augmentation.as_ref().map_or(0.0, |a| a.weight),
            bfgs: BfgsUpdate::default(),
            second_order_correction: false,
            backtracks: 0,
        };

        let outcome = if sol.status.has_solution() {
            // 3. Penalty: above the multipliers and large enough for a model decrease.
            let wk = self.work.as_mut().ok_or_else(uninit)?;
            let s = &wk.setup;
            let d = &sol.step;
            let mut cjd = wk.point.c.clone();
            qp.jacobian.mul_add(d, &mut cjd);
            let lin_violation = l1_violation(s, &cjd);
            let mut hd = vec![0.0; n];
            qp.hessian.sym_mul_add(d, &mut hd);
            let dhd = dot(d, &hd).max(0.0);
            let gd = dot(&wk.point.g, d);
            let reduction = violation_l1 - lin_violation;
            if kind == StepKind::Regular {
                let mut needed = inf_norm(&sol.row_multipliers);
                if reduction > 1e-12 * violation_l1.max(1.0) {
                    // Nocedal & Wright eq. (18.36) with sigma = 1 and r = 0.1.
                    needed = needed.max((gd + 0.5 * dhd) / (0.9 * reduction));
                }
                if wk.penalty < needed {
                    wk.penalty = (1.5 * needed).min(st.penalty_max);
                } else if wk.penalty > 10.0 * needed && wk.penalty > st.penalty_start {
                    // A weight far above what the multipliers need (left over from a poor
                    // early linearisation) makes the merit blind to the objective and the
                    // line search cut every step; let it come down gradually (after
                    // M. J. D. Powell, "A fast algorithm for nonlinearly constrained
                    // optimization calculations", 1978, who averages old and needed weights).
                    wk.penalty = (0.5 * wk.penalty).max(1.5 * needed).max(st.penalty_start);
                }
            } else if lin_violation > 0.99 * violation_l1 && wk.penalty < st.penalty_max {
                // The elastic step barely reduces the violation: weigh it more next time.
                wk.penalty = (10.0 * wk.penalty).min(st.penalty_max);
            }
            let slope = (gd - wk.penalty * reduction).min(0.0);
            // 4. Line search.
            let d = sol.step.clone();
            let search =
                self.search(problem, &qp, &d, slope, kind == StepKind::Regular, &mut qp_time)?;
            Some(search)
        } else {
            None
        };
        row.qp_time = qp_time;

        match outcome {
            Some(Search::Accepted { y, f, c, alpha, soc, backtracks }) => {
                let wk = self.work.as_mut().ok_or_else(uninit)?;
                let derivs = eval_derivatives(
                    problem,
                    &wk.setup,
                    &y,
                    &mut wk.w_buf,
                    &mut wk.grad_buf,
                    &mut self.eval_time,
                )?;
                let (g, jac) = match derivs {
                    Ok(v) => v,
                    Err(error) => {
                        self.publish(&mut state);
                        return Ok((
                            self.finish(state, SqpStatus::EvaluationFailed { error }),
                            None,
                        ));
                    }
                };
                let wk = self.work.as_mut().ok_or_else(uninit)?;
                let s = &wk.setup;
                // Full step on the multipliers: the QP's are the least-squares-consistent
                // estimate at the linearisation, whatever the step length (a damped update
                // would lag behind and leave a stationarity floor).
                wk.lambda.copy_from_slice(&sol.row_multipliers);
                let step: Vec<f64> = y.iter().zip(&wk.point.y).map(|(a, b)| a - b).collect();
                if let Some(bfgs) = &mut wk.bfgs {
                    let new_lg = lagrangian_gradient(s, &g, &jac, &wk.lambda);
                    let old_lg = lagrangian_gradient(s, &wk.point.g, &wk.point.jac, &wk.lambda);
                    let dy: Vec<f64> = new_lg.iter().zip(&old_lg).map(|(a, b)| a - b).collect();
                    row.bfgs = bfgs.update(&step, &dy, st.bfgs_damping);
                }
                let lg = lagrangian_gradient(s, &g, &jac, &wk.lambda);
                wk.nu = best_bound_multipliers(s, &y, &lg, &sol.bound_multipliers);
                let merit_before = wk.merit(wk.point.f, &wk.point.c);
                let merit_after = wk.merit(f, &c);
                let moved = alpha * inf_norm(&sol.step);
                let size = 1.0 + inf_norm(&y);
                let gained = merit_before - merit_after;
                let stagnant = moved <= 1e-10 * size
                    || (alpha < 1.0 && gained <= 1e-9 * merit_before.abs().max(1.0));
                wk.stagnant = if stagnant { wk.stagnant + 1 } else { 0 };
                wk.point = Point { y, f, c, g, jac };
                wk.failures = 0;
                wk.shift_floor = 0.0;
                row.step_length = alpha;
                row.step_norm = inf_norm(&step);
                row.step_kind = kind;
                row.second_order_correction = soc;
                row.backtracks = backtracks;
            }
            Some(Search::Failed { error: Some(error), .. }) => {
                self.publish(&mut state);
                return Ok((self.finish(state, SqpStatus::EvaluationFailed { error }), None));
            }
            other => {
                // No step: try once more with a fresh Hessian model before giving up.
                if let Some(Search::Failed { backtracks, .. }) = other {
                    row.backtracks = backtracks;
                }
                let reason = if qp_status.has_solution() {
                    StallReason::LineSearch
                } else {
                    StallReason::Qp(qp_status)
                };
                let wk = self.work.as_mut().ok_or_else(uninit)?;
                wk.failures += 1;
                let r = residuals(&wk.setup, &wk.point, &wk.lambda, &wk.nu);
                if wk.failures >= 3 {
                    let status = if meets(&r, &st, st.reduced_accuracy_factor) {
                        SqpStatus::SolvedReducedAccuracy
                    } else if r.violation > st.feasibility_tolerance
                        && self.violation_is_stationary()?
                    {
                        let wk = self.work.as_ref().ok_or_else(uninit)?;
                        SqpStatus::LocallyInfeasible {
                            rows: violated_rows(&wk.setup, &wk.point.c, st.feasibility_tolerance),
                        }
                    } else {
                        SqpStatus::Stalled { reason }
                    };
                    self.publish(&mut state);
                    state.history.push(row.clone());
                    state.last_row = Some(row);
                    return Ok((self.finish(state, status), None));
                }
                let wk = self.work.as_mut().ok_or_else(uninit)?;
                if let Some(bfgs) = &mut wk.bfgs {
                    bfgs.reset();
                } else {
                    wk.shift_floor = (wk.last_shift * st.hessian_shift_growth)
                        .max(st.hessian_shift_start * st.hessian_shift_growth)
                        .min(st.hessian_shift_max);
                }
                row.step_kind = StepKind::None;
            }
        }

        self.publish(&mut state);
        if state.residuals.violation <= st.feasibility_tolerance
            && state.residuals.stationarity > st.stationarity_tolerance
        {
            // Feasible but not yet stationary by the QP's multipliers, which belong to the
            // previous linearisation: try the multipliers that fit this point best.
            self.least_squares_kkt()?;
            self.publish(&mut state);
        }
        row.objective = state.objective;
        row.residuals = state.residuals;
        row.penalty = state.penalty;
        row.merit = state.merit;
        state.history.push(row.clone());
        state.last_row = Some(row);
        // Stagnation: steps too short to change anything, several times in a row. Stop with
        // the most honest status instead of crawling to the iteration limit.
        let wk = self.work.as_ref().ok_or_else(uninit)?;
        if wk.stagnant >= STAGNATION_ITERATIONS && !meets(&state.residuals, &st, 1.0) {
            let r = state.residuals;
            let status = if meets(&r, &st, st.reduced_accuracy_factor) {
                SqpStatus::SolvedReducedAccuracy
            } else if r.violation > st.feasibility_tolerance && self.violation_is_stationary()? {
                let wk = self.work.as_ref().ok_or_else(uninit)?;
                SqpStatus::LocallyInfeasible {
                    rows: violated_rows(&wk.setup, &wk.point.c, st.feasibility_tolerance),
                }
            } else {
                SqpStatus::Stalled { reason: StallReason::NoProgress }
            };
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
    setup(&nlp, settings)?;
    let mut w0 = vec![0.0; nlp.num_variables()];
    nlp.initial_point(&mut w0);
    if let Some(j) = w0.iter().position(|v| !v.is_finite()) {
        return Err(SolveError::Problem(format!("initial value of variable {j} is {}", w0[j])));
    }
    if let Some(flag) = cancel {
        sqp = sqp.with_cancel(flag);
    }
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
        _ => {}
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
