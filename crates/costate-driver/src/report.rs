//! What a solve reports: the summary for people, the solution file (JSON, schema in
//! docs/solution-format.md) and the node table (CSV). Values are converted back to the units
//! the user declared.

use costate_lower::{SourceMap, VarSource};
use costate_solve::transcribe::{OcpSolution, OcpStatus};
use costate_solve::StallReason;
use costate_syntax::{Diagnostic, LineIndex, Severity};
use serde_json::{json, Value};

use crate::Loaded;

/// `value` to `digits` significant digits, without trailing zeros noise for plain numbers.
pub fn sig(value: f64, digits: usize) -> String {
    if !value.is_finite() {
        return value.to_string();
    }
    if value == 0.0 {
        return "0".into();
    }
    let magnitude = value.abs().log10().floor() as i32;
    if !(-4..=6).contains(&magnitude) {
        return format!("{:.*e}", digits.saturating_sub(1), value);
    }
    let decimals = (digits as i32 - 1 - magnitude).max(0) as usize;
    let s = format!("{value:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

pub fn with_unit(value: f64, unit: Option<&str>) -> String {
    match unit {
        Some(u) => format!("{} {u}", sig(value, 6)),
        None => sig(value, 6),
    }
}

pub fn status_label(status: &OcpStatus) -> &'static str {
    match status {
        OcpStatus::Solved => "solved",
        OcpStatus::SolvedReducedAccuracy => "solved to reduced accuracy",
        OcpStatus::LocallyInfeasible { .. } => "locally infeasible",
        OcpStatus::IterationLimit => "iteration limit reached",
        OcpStatus::TimeLimit => "time limit reached",
        OcpStatus::EvaluationFailed(_) => "function evaluation failed",
        OcpStatus::Interrupted => "interrupted",
        OcpStatus::Stalled(StallReason::LineSearch) => {
            "stalled: no step length lowers the merit function"
        }
        OcpStatus::Stalled(StallReason::Qp(_)) => {
            "stalled: the QP subproblem has no usable solution"
        }
        OcpStatus::Stalled(StallReason::NoProgress) => "stalled: steps no longer make progress",
        OcpStatus::ViolatedUnscaled { .. } => {
            "not solved: constraints met only in the solver's scaling"
        }
    }
}

pub fn is_solved(status: &OcpStatus) -> bool {
    matches!(status, OcpStatus::Solved | OcpStatus::SolvedReducedAccuracy)
}

/// The cost with the user's sign (the solver minimises the negated cost of a `maximize`).
pub fn user_cost(loaded: &Loaded, solution: &OcpSolution) -> f64 {
    if loaded.lowered.ocp.maximize {
        -solution.objective
    } else {
        solution.objective
    }
}

pub fn sense(map: &SourceMap) -> &'static str {
    match map.cost.sense {
        costate_syntax::ast::Sense::Minimize => "minimize",
        costate_syntax::ast::Sense::Maximize => "maximize",
    }
}

/// The human summary printed after the iteration log.
pub fn summary(
    loaded: &Loaded,
    solution: &OcpSolution,
    intervals: usize,
    written: &[String],
) -> String {
    let map = &loaded.lowered.source_map;
    let t = &solution.timing;
    let secs = |d: std::time::Duration| format!("{:.3} s", d.as_secs_f64());
    let mut lines = vec![
        format!("problem     {} ({})", map.problem_name, loaded.path),
        format!("status      {}", status_label(&solution.status)),
        format!("cost        {} ({})", sig(user_cost(loaded, solution), 8), sense(map)),
        format!(
            "{:<11} {}",
            format!("end {}", map.time.name),
            with_unit(map.time.to_user(solution.trajectory.end_time), map.time.unit.as_deref())
        ),
        format!("violation   {}", sig(solution.max_violation, 3)),
        format!("iterations  {}", solution.iterations),
        format!("intervals   {intervals}"),
        format!(
            "time        {} (evaluation {}, QP {}, other {})",
            secs(t.total),
            secs(t.evaluation),
            secs(t.qp),
            secs(t.other)
        ),
    ];
    if !written.is_empty() {
        lines.push(format!("wrote       {}", written.join(", ")));
    }
    lines.join("\n")
}

fn series(var: &VarSource, values: &[f64]) -> Value {
    json!({
        "name": var.name,
        "unit": var.unit,
        "values": values.iter().map(|v| var.to_user(*v)).collect::<Vec<_>>(),
    })
}

/// The solution file. Trajectories are in the declared units; multipliers (costates) in SI.
pub fn solution_json(loaded: &Loaded, solution: &OcpSolution, intervals: usize) -> Value {
    let map = &loaded.lowered.source_map;
    let tr = &solution.trajectory;
    let states: Vec<Value> = map
        .states
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let mut v = series(s, &tr.states[i]);
            v["costate"] = json!(solution.costates.get(i));
            v
        })
        .collect();
    let controls: Vec<Value> =
        map.controls.iter().enumerate().map(|(i, c)| series(c, &tr.controls[i])).collect();
    let params: Vec<Value> = map
        .params
        .iter()
        .enumerate()
        .map(|(i, p)| json!({ "name": p.name, "unit": p.unit, "value": p.to_user(tr.params[i]) }))
        .collect();
    let path: Vec<Value> = map
        .path
        .iter()
        .enumerate()
        .map(|(i, row)| {
            json!({ "label": row.label, "description": row.description, "multipliers": solution.path_multipliers.get(i) })
        })
        .collect();
    let boundary: Vec<Value> = map
        .boundary
        .iter()
        .enumerate()
        .map(|(i, row)| {
            json!({ "label": row.label, "description": row.description, "multiplier": solution.boundary_multipliers.get(i) })
        })
        .collect();
    let settings = &loaded.lowered.settings;
    json!({
        "format": "costate-solution",
        "version": 1,
        "problem": map.problem_name,
        "source": loaded.path,
        "status": status_label(&solution.status),
        "solved": is_solved(&solution.status),
        "cost": user_cost(loaded, solution),
        "sense": sense(map),
        "max_violation": solution.max_violation,
        "iterations": solution.iterations,
        "intervals": intervals,
        "settings": {
            "integrator": format!("{:?}", settings.integrator).to_lowercase(),
            "substeps": settings.substeps,
            "control_shape": format!("{:?}", settings.control_shape).to_lowercase(),
            "tolerance": settings.tolerance,
        },
        "timing_seconds": {
            "total": solution.timing.total.as_secs_f64(),
            "evaluation": solution.timing.evaluation.as_secs_f64(),
            "qp": solution.timing.qp.as_secs_f64(),
            "other": solution.timing.other.as_secs_f64(),
        },
        "time": series(&map.time, &tr.times),
        "end_time": map.time.to_user(tr.end_time),
        "states": states,
        "controls": controls,
        "params": params,
        "integrals": solution.integrals,
        "path_constraints": path,
        "boundary_constraints": boundary,
        "history": solution.history.iter().map(|r| json!({
            "iteration": r.iteration,
            "objective": r.objective,
            "violation": r.residuals.violation,
            "stationarity": r.residuals.stationarity,
            "step": r.step_length,
            "penalty": r.penalty,
            "qp_solves": r.qp_solves,
            "qp_iterations": r.qp_iterations,
        })).collect::<Vec<_>>(),
    })
}

/// The files a solve of problem `NAME` leaves in its output folder.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct OutputNames {
    /// `NAME.solution.json` and `NAME.csv`: written together, and only for a solved status.
    pub solution: String,
    pub table: String,
    /// `NAME.failed.json`: the record of a solve that did not succeed (last iterate, status,
    /// findings). It never replaces the solution files, so an earlier good result stays.
    pub failed: String,
}

pub fn output_names(problem: &str) -> OutputNames {
    OutputNames {
        solution: format!("{problem}.solution.json"),
        table: format!("{problem}.csv"),
        failed: format!("{problem}.failed.json"),
    }
}

/// The record of a failed solve: the solution document of the iterate it stopped at
/// (`solved: false`) plus the findings that explain the ending, on their source lines.
pub fn failed_json(
    loaded: &Loaded,
    solution: &OcpSolution,
    intervals: usize,
    findings: &[Diagnostic],
) -> Value {
    let mut doc = solution_json(loaded, solution, intervals);
    let index = LineIndex::new(&loaded.source);
    doc["findings"] = findings.iter().map(|d| diagnostic_json(&loaded.source, &index, d)).collect();
    doc
}

/// One diagnostic as JSON: byte span plus 1-based line and column (columns count characters).
pub fn diagnostic_json(source: &str, index: &LineIndex, diagnostic: &Diagnostic) -> Value {
    let position = |offset: usize| {
        let offset = offset.min(source.len());
        let line = index.line_of(offset);
        let start = index.line_start(line);
        let column = source.get(start..offset).map(|s| s.chars().count()).unwrap_or(0);
        json!({ "line": line + 1, "column": column + 1 })
    };
    let span = |s: costate_syntax::Span| json!({ "start": s.start, "end": s.end, "from": position(s.start), "to": position(s.end) });
    json!({
        "code": diagnostic.code.id,
        "name": diagnostic.code.name,
        "severity": match diagnostic.severity { Severity::Error => "error", Severity::Warning => "warning" },
        "message": diagnostic.message,
        "span": span(diagnostic.primary.span),
        "label": diagnostic.primary.message,
        "labels": diagnostic.labels.iter().map(|l| json!({ "span": span(l.span), "message": l.message })).collect::<Vec<_>>(),
        "notes": diagnostic.notes,
        "help": diagnostic.help,
    })
}

/// One row per node: the independent variable, the states, then the controls.
pub fn solution_csv(loaded: &Loaded, solution: &OcpSolution) -> String {
    let map = &loaded.lowered.source_map;
    let tr = &solution.trajectory;
    let head = |v: &VarSource| match &v.unit {
        Some(u) => format!("{} [{u}]", v.name),
        None => v.name.clone(),
    };
    let mut out = String::new();
    let columns: Vec<String> = std::iter::once(head(&map.time))
        .chain(map.states.iter().map(head))
        .chain(map.controls.iter().map(head))
        .collect();
    out.push_str(&columns.join(","));
    out.push('\n');
    for (k, t) in tr.times.iter().enumerate() {
        let mut row = vec![format!("{}", map.time.to_user(*t))];
        row.extend(
            map.states.iter().enumerate().map(|(i, s)| format!("{}", s.to_user(tr.states[i][k]))),
        );
        row.extend(
            map.controls
                .iter()
                .enumerate()
                .map(|(i, c)| format!("{}", c.to_user(tr.controls[i][k]))),
        );
        out.push_str(&row.join(","));
        out.push('\n');
    }
    out
}

#[cfg(test)]
mod tests {
    use super::sig;

    #[test]
    fn significant_digits() {
        assert_eq!(sig(8.912345678, 4), "8.912");
        assert_eq!(sig(12.0, 6), "12");
        assert_eq!(sig(-0.0480556635, 6), "-0.0480557");
        assert_eq!(sig(1.5e-9, 3), "1.50e-9");
        assert_eq!(sig(0.0, 3), "0");
    }
}
