//! Direct multiple shooting: an [`Ocp`] becomes a sparse [`crate::Nlp`] ([`MultipleShooting`])
//! that the crate's SQP solves; [`solve_ocp`] runs the whole thing and reports the result in
//! the problem's terms ([`OcpSolution`]).
//!
//! Owns the variable and row layout ([`Layout`]), the evaluation of the NLP from the interval
//! integrator and the compiled functions, the starting point (guesses or a warm start), and the
//! translation of solver outcomes back to functions, rows, states and nodes. Must not: change
//! the SQP, integrators or model; know names or source spans (a [`Finding`] or [`Violation`] is
//! what `costate-lower`'s source map turns into a diagnostic); do IO.
//!
//! # The NLP
//! Nodes `k = 0..=N` sit at fractions `s_k` of the horizon (uniform by default, any strictly
//! increasing mesh from 0 to 1 allowed). Each node is one stage of the QP: its state, its
//! control, and copies of everything the whole horizon shares (parameters, a free end time,
//! running sums of the integrals, start values read at the end), tied to the next node by
//! coupling rows (continuity `x_{k+1} - F_k(x_k, u_k, [v_k], p_k, t_k, h_k) = 0` and the copy
//! and running-sum rows); path rows at every node; boundary rows at node 0 when they read only
//! start values, else at the last node. See [`Layout`] for why every shared quantity is
//! carried along. State, start, end, control, parameter and end-time bounds are variable
//! bounds. The objective `phi(t0, tf, x_0, x_N, p, Q)` has an exact gradient. With the RK4
//! integrator the NLP also has an exact Lagrangian Hessian (see `exact.rs`: the whole interval
//! map is one expression graph differentiated symbolically); with Radau IIA it has none and
//! the SQP uses its damped block BFGS with one block per node.

mod exact;
mod layout;
mod shooting;

use std::sync::atomic::AtomicBool;
use std::sync::{mpsc, Arc};

use costate_model::{FunctionKind, Ocp};

use crate::integrate::IntegratorSettings;
use crate::nlp::{EvalError, EvalPart, Nlp};
use crate::settings::SqpSettings;
use crate::sqp::{solve_nlp, IterationRow, SqpResult, SqpStatus, StallReason, Timing};

pub use layout::{decode_tag, function_tag, EndpointPlacement, Layout, ViolationSource};
pub use shooting::MultipleShooting;

/// Settings of [`solve_ocp`].
#[derive(Clone, Debug, PartialEq)]
pub struct OcpSettings {
    /// Number of shooting intervals `N` (uniform mesh), at least 1. Default 50.
    pub intervals: usize,
    /// Interval integrator. Default: RK4 with 2 substeps and piecewise-constant controls
    /// (2 substeps keep the integration error well below the control discretisation error at
    /// common interval counts, at twice the cost of one).
    pub integrator: IntegratorSettings,
    /// The SQP's settings. Default: [`SqpSettings::default`].
    pub sqp: SqpSettings,
    /// Largest memory, in bytes, the solve may need by the estimate of [`estimate_memory`]
    /// (made before anything of the problem's size is allocated); a larger problem is refused
    /// with an error naming its size. Default [`DEFAULT_MEMORY_LIMIT`] (4 GiB).
    pub memory_limit: u64,
}

/// Default of [`OcpSettings::memory_limit`]: 4 GiB.
pub const DEFAULT_MEMORY_LIMIT: u64 = 4 << 30;

/// Size of the multiple-shooting NLP of a problem on a number of intervals, and the memory
/// its solve needs, estimated from the dimensions alone (nothing is built).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MemoryEstimate {
    pub intervals: usize,
    pub variables: f64,
    pub constraints: f64,
    /// Constraint Jacobian nonzeros.
    pub jacobian_nonzeros: f64,
    /// Lagrangian Hessian (or block BFGS) nonzeros, lower triangle.
    pub hessian_nonzeros: f64,
    /// Nonzeros of the sparse LDL' factor of the QP's KKT system (banded fill estimate).
    pub factor_nonzeros: f64,
    /// Bytes, all of the above with the copies the SQP and the QP solver keep.
    pub bytes: f64,
}

impl std::fmt::Display for MemoryEstimate {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{} intervals give {:.3e} variables, {:.3e} constraints, {:.3e} Jacobian and {:.3e} \
             Hessian nonzeros and about {:.3e} nonzeros in the QP factorisation: about {:.2} GiB",
            self.intervals,
            self.variables,
            self.constraints,
            self.jacobian_nonzeros,
            self.hessian_nonzeros,
            self.factor_nonzeros,
            self.bytes / f64::from(1u32 << 30)
        )
    }
}

/// Estimate the size and memory of the solve of `ocp` on `intervals` intervals, in floating
/// point so that absurd interval counts cannot overflow. Counts follow [`Layout`] (upper
/// bounds per node: every node counted with all its possible variables and rows); the QP's
/// factorisation is one dense block per node ([`crate::qp`]).
pub fn estimate_memory(
    ocp: &Ocp,
    intervals: usize,
    integrator: &IntegratorSettings,
) -> MemoryEstimate {
    let nx = ocp.states.len() as f64;
    let nu = ocp.controls.len() as f64;
    let np = ocp.params.len() as f64;
    let nq = ocp.n_integrals as f64;
    let ng = ocp.path_bounds.len() as f64;
    let nb = ocp.boundary_bounds.len() as f64;
    let free =
        if matches!(ocp.horizon.end, costate_model::EndTime::Free { .. }) { 1.0 } else { 0.0 };
    let linear = integrator.controls == crate::integrate::ControlShape::Linear;
    let nuc = if linear { 2.0 * nu } else { nu };
    // Carried start values: at most every state.
    let ns = nx;
    let big_n = intervals as f64;
    let nodes = big_n + 1.0;
    let block = nx + nuc + np + free + nq + ns;
    let coupling = nx + nu + np + free + nq + ns;
    let variables = nodes * block;
    let constraints = big_n * coupling + nodes * ng + nb;
    let cols = nx + nuc + np + 2.0;
    let jacobian_nonzeros = big_n * (nx + nq) * (2.0 + nx + nuc + np + free)
        + big_n * 2.0 * (nu + np + free + ns)
        + nodes * ng * (1.0 + nx + nu + np)
        + nb * (1.0 + 2.0 * nx + np + nq);
    let hessian_nonzeros = nodes * block * (block + 1.0) / 2.0;
    // Dense storage of the QP: Hessian blocks, rows over one or two nodes, and the Newton
    // matrix and its factor, one block per node.
    let kkt = block + ng + nb + coupling;
    let factor_nonzeros = nodes * kkt * kkt;
    let dense = nodes * (block * block + (ng + nb) * block + coupling * 2.0 * block);
    // The NLP keeps its Jacobian and Hessian values and patterns (two indices each) and the
    // SQP its scatter maps; the QP is built twice (regular and elastic); vectors of length
    // n or m appear a few dozen times; integration keeps sensitivities per interval.
    let bytes = 8.0 * 3.0 * (jacobian_nonzeros + hessian_nonzeros) * 2.0
        + 8.0 * 2.0 * dense
        + 8.0 * 2.0 * 2.0 * factor_nonzeros
        + 8.0 * 40.0 * (variables + constraints)
        + 8.0 * big_n * (nx + nq) * (cols + 1.0) * 2.0;
    MemoryEstimate {
        intervals,
        variables,
        constraints,
        jacobian_nonzeros,
        hessian_nonzeros,
        factor_nonzeros,
        bytes,
    }
}

impl Default for OcpSettings {
    fn default() -> Self {
        OcpSettings {
            intervals: 50,
            integrator: IntegratorSettings { substeps: 2, ..IntegratorSettings::default() },
            sqp: SqpSettings::default(),
            memory_limit: DEFAULT_MEMORY_LIMIT,
        }
    }
}

/// A trajectory on the nodes: the solution's, or a warm start.
#[derive(Clone, Debug, PartialEq)]
pub struct Trajectory {
    /// Node times, `N + 1` values.
    pub times: Vec<f64>,
    /// `[state][node]`.
    pub states: Vec<Vec<f64>>,
    /// `[control][node]`, `N + 1` values; for piecewise-constant controls the last node repeats
    /// the last interval's value.
    pub controls: Vec<Vec<f64>>,
    pub params: Vec<f64>,
    pub end_time: f64,
}

/// Where an evaluation failed: the function and output row, and the node (path) or interval
/// (dynamics, integrands) index; `None` for endpoint functions.
#[derive(Clone, Debug, PartialEq)]
pub struct Finding {
    pub kind: FunctionKind,
    pub row: usize,
    pub node: Option<usize>,
    pub message: String,
}

/// A constraint or bound left violated: what, where (node, or interval for continuity rows),
/// and by how much in the problem's units.
#[derive(Clone, Debug, PartialEq)]
pub struct Violation {
    pub what: ViolationSource,
    pub node: Option<usize>,
    pub amount: f64,
}

/// A bound or constraint in the conflict of a locally infeasible point: what it stands for,
/// the side it presses against and that side's value (SI units), at which nodes.
#[derive(Clone, Debug, PartialEq)]
pub struct Conflicting {
    pub what: ViolationSource,
    pub upper: bool,
    pub bound: f64,
    /// Nodes where it takes part (empty for boundary rows and parameters).
    pub nodes: Vec<usize>,
    /// Largest relative multiplier among its nodes (in (0, 1]).
    pub weight: f64,
}

/// The solver's conflict in the problem's terms: grouped by what each item stands for and
/// its side, strongest first.
fn conflicting(
    l: &Layout,
    conflict: &[crate::Conflict],
    (cl, cu): (&[f64], &[f64]),
    (wl, wu): (&[f64], &[f64]),
) -> Vec<Conflicting> {
    let mut out: Vec<Conflicting> = Vec::new();
    for c in conflict {
        let (what, node, bound) = match c.item {
            crate::ConflictItem::Row(i) => {
                let (what, node) = l.decode_row(i);
                let coupling = l.stages().stage_of_row(i).1;
                if coupling {
                    continue;
                }
                (what, node, if c.upper { cu[i] } else { cl[i] })
            }
            crate::ConflictItem::Bound(j) => {
                let (what, node) = l.decode_variable(j);
                (what, node, if c.upper { wu[j] } else { wl[j] })
            }
        };
        let node = match what {
            ViolationSource::ParamBound(_) | ViolationSource::EndTime => None,
            _ => node,
        };
        match out.iter_mut().find(|o| o.what == what && o.upper == c.upper && o.bound == bound) {
            Some(o) => {
                o.nodes.extend(node);
                o.weight = o.weight.max(c.weight);
            }
            None => out.push(Conflicting {
                what,
                upper: c.upper,
                bound,
                nodes: node.into_iter().collect(),
                weight: c.weight,
            }),
        }
    }
    for o in &mut out {
        o.nodes.sort_unstable();
        o.nodes.dedup();
    }
    out.sort_by(|a, b| b.weight.total_cmp(&a.weight));
    out
}

/// How a solve ended.
#[derive(Clone, Debug, PartialEq)]
pub enum OcpStatus {
    Solved,
    SolvedReducedAccuracy,
    /// The violation cannot be reduced further; every row and bound violated by more than
    /// the feasibility tolerance (and every row the SQP named), largest first.
    LocallyInfeasible {
        violations: Vec<Violation>,
        /// The bounds and constraints that hold the violation up, strongest first: no step
        /// reduces the violation without breaking one of them further (see
        /// [`crate::Conflict`]). Continuity and copy rows are left out: they are where the
        /// violation shows, not its cause.
        conflict: Vec<Conflicting>,
    },
    IterationLimit,
    TimeLimit,
    EvaluationFailed(Finding),
    Interrupted,
    /// The SQP could make no further progress and even its loosened tolerances do not hold
    /// (not named in the original sketch of this API; the SQP has this outcome and no other
    /// status describes it honestly).
    Stalled(StallReason),
    /// The SQP's scaled conditions held, but in the problem's own units rows or bounds are
    /// still violated far beyond the tolerance: the scales (from the declared magnitudes and
    /// guesses) hid them. The violations, largest first.
    ViolatedUnscaled {
        violations: Vec<Violation>,
    },
}

impl OcpStatus {
    pub fn is_solved(&self) -> bool {
        matches!(self, OcpStatus::Solved | OcpStatus::SolvedReducedAccuracy)
    }
}

/// Everything [`solve_ocp`] returns.
#[derive(Clone, Debug, PartialEq)]
pub struct OcpSolution {
    pub status: OcpStatus,
    /// The objective as minimised (the negated user objective when `ocp.maximize`).
    pub objective: f64,
    pub trajectory: Trajectory,
    /// The integrals `Q` at the returned point (NaN when they cannot be evaluated there).
    pub integrals: Vec<f64>,
    /// Costate estimates `[state][node]`, the derivative of the optimal (discretised) cost with
    /// respect to the state at a node: node `k >= 1` is `-lambda` of the continuity row of
    /// interval `k - 1` (with the Lagrangian `f + lambda' c` of `nlp.rs`), node 0 is `-nu`, the
    /// negated bound multiplier of `x_0` (0 for a free, inactive start, as transversality
    /// requires). For `J = integral(L) + phi`, they approximate `p(t)` of `H = L + p' f`.
    pub costates: Vec<Vec<f64>>,
    /// Path constraint multipliers `[row][node]` (sign convention of `nlp.rs`).
    pub path_multipliers: Vec<Vec<f64>>,
    pub boundary_multipliers: Vec<f64>,
    /// Largest absolute violation of a constraint row or variable bound at the returned point
    /// (NaN when the constraints cannot be evaluated there).
    pub max_violation: f64,
    pub iterations: usize,
    pub timing: Timing,
    pub history: Vec<IterationRow>,
}

/// Transcribe `ocp` on `settings.intervals` uniform intervals and solve it. `warm` starts from
/// a previous trajectory (any mesh) instead of the guesses; `cancel`, when raised, stops the
/// solve with [`OcpStatus::Interrupted`]; `observer` sees every iteration row as it happens
/// (on the calling thread). `Err` only for invalid settings or an inconsistent problem.
pub fn solve_ocp(
    ocp: &Ocp,
    settings: &OcpSettings,
    warm: Option<&Trajectory>,
    cancel: Option<Arc<AtomicBool>>,
    observer: &mut dyn FnMut(&IterationRow),
) -> Result<OcpSolution, String> {
    settings.integrator.validate().map_err(|e| e.to_string())?;
    settings.sqp.validate().map_err(|e| e.to_string())?;
    let need = estimate_memory(ocp, settings.intervals, &settings.integrator);
    if need.bytes > settings.memory_limit as f64 {
        return Err(format!(
            "problem too large for the memory limit: {need}, over the limit of {:.2} GiB \
             (setting `memory_limit`); use fewer intervals",
            settings.memory_limit as f64 / f64::from(1u32 << 30)
        ));
    }
    let mut nlp = MultipleShooting::new(ocp, settings.intervals, settings.integrator)?;
    if let Some(t) = warm {
        nlp.warm_start(t)?;
    }
    let result = run(&mut nlp, &settings.sqp, cancel, observer)?;
    Ok(report(&mut nlp, result, settings.sqp.feasibility_tolerance))
}

/// One SQP solve of `nlp`. The SQP's observers must be 'static, the caller's is not: the
/// solve runs on a scoped thread and its rows come back over a channel, so the caller still
/// sees them live.
fn run(
    nlp: &mut MultipleShooting,
    settings: &SqpSettings,
    cancel: Option<Arc<AtomicBool>>,
    observer: &mut dyn FnMut(&IterationRow),
) -> Result<SqpResult, String> {
    let outcome = std::thread::scope(|scope| {
        let (tx, rx) = mpsc::channel::<IterationRow>();
        let handle = scope.spawn(move || {
            let obs: Box<dyn FnMut(&IterationRow)> = Box::new(move |row: &IterationRow| {
                // A closed receiver only means nobody listens any more.
                let _ = tx.send(row.clone());
            });
            solve_nlp(nlp, settings, cancel, Some(obs))
        });
        for row in rx {
            observer(&row);
        }
        handle.join()
    });
    match outcome {
        Ok(Ok(r)) => Ok(r),
        Ok(Err(e)) => Err(e.to_string()),
        Err(_) => Err("internal error: the solver thread panicked".into()),
    }
}

/// How far beyond the feasibility tolerance a row or bound of a "solved" point may miss,
/// relative to the size of what it compares, before the verdict is withdrawn (the factor by
/// which "solved to reduced accuracy" loosens feasibility).
const UNSCALED_VIOLATION_FACTOR: f64 = 10.0;

/// The solution in the problem's terms. Rows and bounds count as violated when they are off
/// by more than `tolerance` (rounding-level residuals of satisfied rows are not findings).
fn report(nlp: &mut MultipleShooting, r: SqpResult, tolerance: f64) -> OcpSolution {
    let l = nlp.layout().clone();
    let n = l.n_vars();
    let m = l.n_constraints();
    let mut w = r.x.clone();
    if w.len() != n {
        w = vec![0.0; n];
        nlp.initial_point(&mut w);
    }
    let times = nlp.times(&w);
    let trajectory = Trajectory {
        states: (0..l.nx).map(|i| (0..l.n_nodes()).map(|k| w[l.x(k, i)]).collect()).collect(),
        controls: (0..l.nu).map(|i| (0..l.n_nodes()).map(|k| w[l.u_at(k, i)]).collect()).collect(),
        params: (0..l.np).map(|i| w[l.p_at(0, i)]).collect(),
        end_time: nlp.end_time(&w),
        times,
    };
    let integrals = nlp.integrals(&w).unwrap_or_else(|_| vec![f64::NAN; l.nq]);

    let lam = if r.constraint_multipliers.len() == m {
        r.constraint_multipliers.clone()
    } else {
        vec![0.0; m]
    };
    let nu =
        if r.bound_multipliers.len() == n { r.bound_multipliers.clone() } else { vec![0.0; n] };
    let costates = (0..l.nx)
        .map(|i| {
            (0..l.n_nodes())
                .map(|k| if k == 0 { -nu[l.x(0, i)] } else { -lam[l.continuity_row(k - 1, i)] })
                .collect()
        })
        .collect();
    let path_multipliers =
        (0..l.ng).map(|g| (0..l.n_nodes()).map(|k| lam[l.path_row(k, g)]).collect()).collect();
    let boundary_multipliers = (0..l.nb).map(|b| lam[l.boundary_row(b)]).collect();

    // Violations at the returned point, in the problem's units.
    let (mut cl, mut cu) = (vec![0.0; m], vec![0.0; m]);
    nlp.constraint_bounds(&mut cl, &mut cu);
    let (mut wl, mut wu) = (vec![0.0; n], vec![0.0; n]);
    nlp.variable_bounds(&mut wl, &mut wu);
    let mut c = r.constraints.clone();
    if c.len() != m || c.iter().any(|v| !v.is_finite()) {
        c = vec![f64::NAN; m];
        let _ = nlp.constraints(&w, &mut c);
    }
    let outside = |v: f64, lo: f64, hi: f64| {
        if v.is_nan() {
            f64::NAN
        } else {
            (lo - v).max(v - hi).max(0.0)
        }
    };
    let mut violations: Vec<Violation> = Vec::new();
    let mut max_violation: f64 = 0.0;
    for i in 0..m {
        let a = outside(c[i], cl[i], cu[i]);
        max_violation =
            if a.is_nan() || max_violation.is_nan() { f64::NAN } else { max_violation.max(a) };
        if a > tolerance {
            let (what, node) = l.decode_row(i);
            violations.push(Violation { what, node, amount: a });
        }
    }
    for j in 0..n {
        let a = outside(w[j], wl[j], wu[j]);
        if !max_violation.is_nan() {
            max_violation = max_violation.max(a);
        }
        if a > tolerance {
            let (what, node) = l.decode_variable(j);
            violations.push(Violation { what, node, amount: a });
        }
    }

    // "Solved" is a promise about the problem as stated, not about its scaled image: a row
    // or bound may not miss by more than a few tolerances relative to the size of what it
    // compares (an absurd guess of 1e300 made the scale of a state 1e300 and an end missed by
    // 12 m looked like 1e-299).
    let finite = |b: f64| if b.is_finite() { b.abs() } else { 0.0 };
    let relative = |i: usize, a: f64| {
        let (what, node) = l.decode_row(i);
        let size = |j: usize| w.get(j).map_or(0.0, |v: &f64| v.abs());
        let reference = match (what, node) {
            (ViolationSource::Continuity(x), Some(k)) if k < l.intervals => {
                size(l.x(k, x)).max(size(l.x(k + 1, x)))
            }
            (ViolationSource::Function(FunctionKind::Integrands, q), Some(k))
                if k < l.intervals =>
            {
                let before = if k > 0 { size(l.q(k, q)) } else { 0.0 };
                before.max(size(l.q(k + 1, q)))
            }
            _ => c[i].abs().max(finite(cl[i])).max(finite(cu[i])),
        };
        a / (1.0 + reference)
    };
    let unscaled_limit = UNSCALED_VIOLATION_FACTOR * tolerance;
    let missed_unscaled = (0..m).any(|i| relative(i, outside(c[i], cl[i], cu[i])) > unscaled_limit)
        || (0..n).any(|j| {
            let a = outside(w[j], wl[j], wu[j]);
            a / (1.0 + w[j].abs().max(finite(wl[j])).max(finite(wu[j]))) > unscaled_limit
        });
    let solved_status = |st: OcpStatus, violations: &mut Vec<Violation>| {
        if missed_unscaled {
            violations.sort_by(|a, b| b.amount.total_cmp(&a.amount));
            OcpStatus::ViolatedUnscaled { violations: std::mem::take(violations) }
        } else {
            st
        }
    };
    let status = match r.status {
        SqpStatus::Solved => solved_status(OcpStatus::Solved, &mut violations),
        SqpStatus::SolvedReducedAccuracy => {
            solved_status(OcpStatus::SolvedReducedAccuracy, &mut violations)
        }
        SqpStatus::IterationLimit => OcpStatus::IterationLimit,
        SqpStatus::TimeLimit => OcpStatus::TimeLimit,
        SqpStatus::Interrupted => OcpStatus::Interrupted,
        SqpStatus::Stalled { reason } => OcpStatus::Stalled(reason),
        SqpStatus::EvaluationFailed { error } => {
            OcpStatus::EvaluationFailed(finding(nlp, &l, &error))
        }
        SqpStatus::LocallyInfeasible { rows, conflict } => {
            // The solver's rows are measured after scaling; sort ours (unscaled, bounds
            // included) but make sure every row it named is there.
            for v in &rows {
                let (what, node) = l.decode_row(v.row);
                if !violations.iter().any(|x| x.what == what && x.node == node) {
                    violations.push(Violation { what, node, amount: v.violation });
                }
            }
            violations.sort_by(|a, b| b.amount.total_cmp(&a.amount));
            let conflict = conflicting(&l, &conflict, (&cl, &cu), (&wl, &wu));
            OcpStatus::LocallyInfeasible { violations, conflict }
        }
    };
    OcpSolution {
        status,
        objective: r.objective,
        trajectory,
        integrals,
        costates,
        path_multipliers,
        boundary_multipliers,
        max_violation,
        iterations: usize::try_from(r.iterations).unwrap_or(usize::MAX),
        timing: r.timing,
        history: r.history,
    }
}

/// The function, row and node an evaluation failure names.
fn finding(nlp: &MultipleShooting, l: &Layout, e: &EvalError) -> Finding {
    let note = nlp.last_failure.as_ref().filter(|n| n.tag == e.tag && n.stage == e.stage);
    let message = note.map_or_else(|| e.to_string(), |n| n.message.clone());
    if let Some((kind, row)) = decode_tag(e.tag) {
        return Finding { kind, row, node: e.stage, message };
    }
    // Untagged: the solver found the bad value itself; the output index says where.
    let (kind, row, node) = match (e.part, e.index) {
        (EvalPart::Constraints, Some(i)) if i < l.n_constraints() => match l.decode_row(i) {
            (ViolationSource::Continuity(s), k) => (FunctionKind::Dynamics, s, k),
            (ViolationSource::Function(kind, r), k) => (kind, r, k),
            (_, k) => (FunctionKind::Dynamics, 0, k),
        },
        (EvalPart::Constraints | EvalPart::Jacobian, _) => (FunctionKind::Dynamics, 0, e.stage),
        _ => (FunctionKind::Objective, 0, None),
    };
    Finding { kind, row, node, message }
}
