//! Solver findings as diagnostics on the source lines that caused them: the function that
//! could not be evaluated, or the constraints that stayed violated.

use costate_model::FunctionKind;
use costate_solve::transcribe::{OcpSolution, OcpStatus, ViolationSource};
use costate_syntax::Diagnostic;

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
