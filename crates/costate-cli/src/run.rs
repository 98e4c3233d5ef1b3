//! Running the solver on a loaded problem: settings from the file and the command line, the
//! iteration log, and solver findings turned into diagnostics on the source line.

use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use costate_check::settings::{ControlShape, HessianMode, Integrator};
use costate_model::FunctionKind;
use costate_solve::integrate::{ControlShape as Shape, Method};
use costate_solve::transcribe::{
    solve_ocp, OcpSettings, OcpSolution, OcpStatus, Trajectory, ViolationSource,
};
use costate_solve::{log_header, log_line, HessianMode as SqpHessian, IterationRow};
use costate_syntax::Diagnostic;

use crate::pipeline::Loaded;

/// Command-line settings that override the file's `solve` block.
#[derive(Clone, Debug, Default)]
pub struct Overrides {
    pub intervals: Option<usize>,
}

pub fn ocp_settings(loaded: &Loaded, overrides: &Overrides) -> OcpSettings {
    let s = &loaded.lowered.settings;
    let mut settings = OcpSettings {
        intervals: overrides.intervals.unwrap_or(s.intervals),
        ..OcpSettings::default()
    };
    settings.integrator.method = match s.integrator {
        Integrator::Rk4 => Method::Rk4,
        Integrator::Radau => Method::RadauIIA,
    };
    settings.integrator.substeps = s.substeps;
    settings.integrator.controls = match s.control_shape {
        ControlShape::Constant => Shape::Constant,
        ControlShape::Linear => Shape::Linear,
    };
    settings.sqp.stationarity_tolerance = s.tolerance;
    settings.sqp.feasibility_tolerance = s.tolerance;
    settings.sqp.complementarity_tolerance = s.tolerance;
    settings.sqp.max_iterations = s.iteration_limit as u64;
    settings.sqp.time_limit = s.time_limit.unwrap_or(f64::INFINITY);
    settings.sqp.hessian = match s.hessian {
        HessianMode::Bfgs => SqpHessian::Bfgs,
        HessianMode::Exact => SqpHessian::Auto,
    };
    settings
}

/// Solve, printing the iteration log to stderr unless `quiet`.
pub fn solve(
    loaded: &Loaded,
    overrides: &Overrides,
    warm: Option<&Trajectory>,
    quiet: bool,
) -> Result<OcpSolution, String> {
    let settings = ocp_settings(loaded, overrides);
    let mut printed_header = false;
    let mut observer = |row: &IterationRow| {
        if quiet {
            return;
        }
        if !printed_header {
            eprintln!("{}", log_header());
            printed_header = true;
        }
        eprintln!("{}", log_line(row));
    };
    let cancel = Arc::new(AtomicBool::new(false));
    solve_ocp(&loaded.lowered.ocp, &settings, warm, Some(cancel), &mut observer)
}

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
        OcpStatus::LocallyInfeasible { violations } => {
            for v in violations.iter().take(5) {
                let (span, what) = match v.what {
                    ViolationSource::Function(kind, row) => map
                        .locate(kind, row)
                        .unwrap_or((map.problem_span, describe_kind(kind).to_string())),
                    ViolationSource::Continuity(i) => {
                        let s = &map.states[i];
                        (
                            s.name_span,
                            format!("the dynamics of `{}` (continuity between intervals)", s.name),
                        )
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
                    ViolationSource::EndTime => {
                        (map.time.decl_span, format!("the end of `{}`", map.time.name))
                    }
                };
                out.push(
                    Diagnostic::new(
                        crate::codes::CONSTRAINT_VIOLATED,
                        format!(
                            "{what} stays violated by {}{}",
                            crate::report::sig(v.amount, 3),
                            node_time(v.node).unwrap_or_default()
                        ),
                        span,
                        "cannot be met together with the other constraints",
                    )
                    .with_help("the problem looks infeasible here: check that bounds, start and end values and constraints can hold at once"),
                );
            }
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
