//! Solver findings as diagnostics on the source lines that caused them: the function that
//! could not be evaluated, or the constraints that stayed violated.

use costate_lower::{SourceMap, VarSource};
use costate_model::Bounds;
use costate_model::FunctionKind;
use costate_solve::transcribe::{OcpSolution, OcpStatus, Violation, ViolationSource};
use costate_syntax::Diagnostic;
use costate_syntax::Span;

use crate::Loaded;

/// Diagnostics on the source lines behind a failed solve: the function that could not be
/// evaluated, or the constraints that stayed violated.
pub fn findings(loaded: &Loaded, solution: &OcpSolution) -> Vec<Diagnostic> {
    let map = &loaded.lowered.source_map;
    let node_time = |node: Option<usize>| {
        node.and_then(|k| solution.trajectory.times.get(k).map(|t| (k, *t))).map(|(k, t)| {
            let time = &map.time;
            format!(
                " at node {k} ({} = {})",
                time.name,
                crate::report::with_unit(time.to_user(t), time.unit.as_deref())
            )
        })
    };
    let mut out = Vec::new();
    match &solution.status {
        OcpStatus::EvaluationFailed(finding) => {
            let (span, what) = map
                .locate(finding.kind, finding.row)
                .unwrap_or((map.problem_span, describe_kind(finding.kind).to_string()));
            out.push(
                Diagnostic::new(
                    crate::codes::EVALUATION_FAILED,
                    format!("{what} could not be evaluated{}", node_time(finding.node).unwrap_or_default()),
                    span,
                    finding.message.clone(),
                )
                .with_help("keep the arguments of `sqrt`, `log`, divisions and powers in their domain with bounds, or give a better `guess`"),
            );
        }
        OcpStatus::LocallyInfeasible { violations, conflict } => {
            let mut found = violated_constraints(loaded, solution, violations);
            // The bounds that hold the violation up go on the worst finding as labels, each
            // with its value in the declared unit: they, not the rows where the violation
            // shows, are what the user has to change.
            let last = solution.trajectory.times.len().saturating_sub(1);
            if let Some(first) = found.first_mut() {
                for c in conflict.iter().take(MAX_CONFLICT_LABELS) {
                    let (span, what) = describe_violation(loaded, c.what);
                    let value = conflict_value(loaded, c.what, c.bound);
                    let state = matches!(c.what, ViolationSource::StateBound(_));
                    let which = match c.nodes.as_slice() {
                        [0] if state => "start value",
                        [k] if state && *k == last => "end value",
                        [0, k] if state && *k == last => "start and end value",
                        _ if c.upper => "upper bound",
                        _ => "lower bound",
                    };
                    let label = format!("in conflict: the {which} {value} of {what}");
                    *first = first.clone().with_label(span, label);
                }
            }
            out.extend(found);
        }
        OcpStatus::ViolatedUnscaled { violations } => {
            let mut found = violated_constraints(loaded, solution, violations);
            if let Some(first) = found.first_mut() {
                *first = first.clone().with_help(
                    "the solver's scaled conditions hold but this does not: the scales come from \
                     the magnitudes the file states (bounds, start and end values, guesses); give \
                     guesses of the size the solution will have, or a `scale` attribute",
                );
            }
            out.extend(found);
        }
        OcpStatus::IterationLimit | OcpStatus::TimeLimit | OcpStatus::Stalled(_) => {
            out.extend(runaway_variables(loaded, solution));
        }
        _ => {}
    }
    out
}

fn describe_kind(kind: FunctionKind) -> &'static str {
    match kind {
        FunctionKind::Dynamics => "the dynamics",
        FunctionKind::Integrands => "an integral",
        FunctionKind::Path => "a path constraint",
        FunctionKind::Objective => "the cost",
        FunctionKind::Boundary => "a boundary constraint",
    }
}

/// At most this many bounds of a locally infeasible point's conflict are shown, the strongest
/// first (its multipliers spread over more items than the cause; ten keep the cause in view).
const MAX_CONFLICT_LABELS: usize = 10;

/// At most this many violated constraints are reported, the worst first.
const MAX_REPORTED_CONSTRAINTS: usize = 5;

/// One diagnostic per violated constraint or bound of the source (not per node), with the
/// largest amount and the nodes where it is violated.
fn violated_constraints(
    loaded: &Loaded,
    solution: &OcpSolution,
    violations: &[Violation],
) -> Vec<Diagnostic> {
    let map = &loaded.lowered.source_map;
    // (span, description, largest amount, nodes) in order of first appearance, worst first.
    let mut groups: Vec<(Span, String, f64, Vec<usize>, ViolationSource)> = Vec::new();
    // The solver lists them largest first, so the first of each group is its worst.
    for v in violations {
        let (span, what) = describe_violation(loaded, v.what);
        match groups.iter_mut().find(|g| g.0 == span && g.1 == what) {
            Some(group) => group.3.extend(v.node),
            None => groups.push((span, what, v.amount, v.node.into_iter().collect(), v.what)),
        }
    }
    let time = &map.time;
    let at_time = |k: usize| {
        let t = solution.trajectory.times.get(k).copied().unwrap_or(f64::NAN);
        crate::report::with_unit(time.to_user(t), time.unit.as_deref())
    };
    groups
        .into_iter()
        .take(MAX_REPORTED_CONSTRAINTS)
        .map(|(span, what, amount, mut nodes, source)| {
            nodes.sort_unstable();
            nodes.dedup();
            let place = match nodes.as_slice() {
                [] => String::new(),
                [k] => format!(" at node {k} ({} = {})", time.name, at_time(*k)),
                [first, .., last] => format!(
                    " at {} nodes ({} from {} to {})",
                    nodes.len(),
                    time.name,
                    at_time(*first),
                    at_time(*last)
                ),
            };
            Diagnostic::new(
                crate::codes::CONSTRAINT_VIOLATED,
                format!("{what} stays violated by up to {}{place}", amount_text(loaded, source, amount)),
                span,
                "cannot be met together with the other constraints",
            )
            .with_help("the problem looks infeasible here: check that bounds, start and end values and constraints can hold at once")
        })
        .collect()
}

fn describe_violation(loaded: &Loaded, source: ViolationSource) -> (Span, String) {
    let map = &loaded.lowered.source_map;
    match source {
        ViolationSource::Function(kind, row) => {
            map.locate(kind, row).unwrap_or((map.problem_span, describe_kind(kind).to_string()))
        }
        ViolationSource::Continuity(i) => {
            let s = &map.states[i];
            (s.decl_span, format!("the dynamics of `{}` (continuity between intervals)", s.name))
        }
        ViolationSource::StateBound(i) => {
            let s = &map.states[i];
            (s.decl_span, format!("the bounds of state `{}`", s.name))
        }
        ViolationSource::ControlBound(i) => {
            let s = &map.controls[i];
            (s.decl_span, format!("the bounds of control `{}`", s.name))
        }
        ViolationSource::ParamBound(i) => {
            let s = &map.params[i];
            (s.decl_span, format!("the bounds of parameter `{}`", s.name))
        }
        ViolationSource::EndTime => (map.time.decl_span, format!("the end of `{}`", map.time.name)),
    }
}

/// The declared quantity a violation or bound is measured on; rows of problem functions have
/// none (their values are shown as the solver sees them).
fn measured_on(map: &SourceMap, source: ViolationSource) -> Option<&VarSource> {
    match source {
        ViolationSource::StateBound(i) | ViolationSource::Continuity(i) => map.states.get(i),
        ViolationSource::ControlBound(i) => map.controls.get(i),
        ViolationSource::ParamBound(i) => map.params.get(i),
        ViolationSource::EndTime => Some(&map.time),
        ViolationSource::Function(..) => None,
    }
}

/// A violation (an SI difference) in the declared unit of the quantity it is measured on.
fn amount_text(loaded: &Loaded, source: ViolationSource, amount: f64) -> String {
    match measured_on(&loaded.lowered.source_map, source) {
        Some(s) => {
            let value = crate::report::sig((s.to_user(amount) - s.to_user(0.0)).abs(), 3);
            match s.unit.as_deref() {
                Some(u) => format!("{value} {u}"),
                None => value,
            }
        }
        None => crate::report::sig(amount, 3),
    }
}

/// A bound's value in the declared unit of what it bounds (rows: as the solver sees them).
fn conflict_value(loaded: &Loaded, source: ViolationSource, bound: f64) -> String {
    match measured_on(&loaded.lowered.source_map, source) {
        Some(s) => crate::report::with_unit(s.to_user(bound), s.unit.as_deref()),
        None => crate::report::sig(bound, 4),
    }
}

/// A variable this many times its typical magnitude (its scale) with no bound in that
/// direction is taken as running away: the sign of a cost that improves without limit.
/// Common practice for divergence checks, not a published constant.
const RUNAWAY_FACTOR: f64 = 1e6;

/// After a solve that did not converge: the variables that grew far beyond their scale in a
/// direction with no bound, which usually means the cost is unbounded.
fn runaway_variables(loaded: &Loaded, solution: &OcpSolution) -> Vec<Diagnostic> {
    let map = &loaded.lowered.source_map;
    let ocp = &loaded.lowered.ocp;
    let traj = &solution.trajectory;
    let mut out = Vec::new();
    let mut check = |kind: &str,
                     source: &VarSource,
                     bounds: &Bounds,
                     scale: f64,
                     values: &[f64]| {
        let Some(extreme) = values
            .iter()
            .copied()
            .filter(|v| v.is_finite())
            .max_by(|a, b| a.abs().total_cmp(&b.abs()))
        else {
            return;
        };
        let unbounded_that_way =
            if extreme > 0.0 { bounds.hi == f64::INFINITY } else { bounds.lo == f64::NEG_INFINITY };
        if !unbounded_that_way || extreme.abs() <= RUNAWAY_FACTOR * scale.abs().max(1.0) {
            return;
        }
        let side = if extreme > 0.0 { "upper" } else { "lower" };
        out.push(
            Diagnostic::new(
                crate::codes::COST_MAY_BE_UNBOUNDED,
                format!(
                    "{kind} `{}` grew to {} with no {side} bound: the cost may improve without limit",
                    source.name,
                    crate::report::with_unit(source.to_user(extreme), source.unit.as_deref())
                ),
                source.decl_span,
                format!("no {side} bound"),
            )
            .with_help(format!(
                "bound `{}` (`in LO .. HI`), or make the cost penalise it (e.g. a term in `integral(..)` that grows with it)",
                source.name
            )),
        );
    };
    for (i, info) in ocp.states.iter().enumerate() {
        if let (Some(source), Some(values)) = (map.states.get(i), traj.states.get(i)) {
            check("state", source, &info.bounds, info.scale, values);
        }
    }
    for (i, info) in ocp.controls.iter().enumerate() {
        if let (Some(source), Some(values)) = (map.controls.get(i), traj.controls.get(i)) {
            check("control", source, &info.bounds, info.scale, values);
        }
    }
    for (i, info) in ocp.params.iter().enumerate() {
        if let (Some(source), Some(value)) = (map.params.get(i), traj.params.get(i)) {
            check("parameter", source, &info.bounds, info.scale, std::slice::from_ref(value));
        }
    }
    out
}
