//! Solve-on-save, the blocking part: from the saved text to the solution documents and the
//! findings, on a worker thread. The async side (progress, cancellation, publishing) is in
//! `server.rs`; the settings, findings and documents come from `costate-driver`, exactly as the
//! CLI makes them.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use costate_driver::{report, Overrides};
use costate_solve::transcribe::OcpStatus;
use costate_solve::IterationRow;
use costate_syntax::Diagnostic;
use serde_json::Value;

/// What a solve came to.
pub enum Outcome {
    /// The file has errors (already shown as diagnostics): nothing was solved.
    Invalid,
    /// The solver rejected the settings.
    Rejected(String),
    /// A newer save (or closing the file) cancelled it.
    Cancelled,
    Done(Box<Solved>),
}

pub struct Solved {
    /// `problem NAME`: the files are `NAME.solution.json` and `NAME.csv` when solved,
    /// `NAME.failed.json` otherwise.
    pub problem: String,
    /// The solution document (docs/solution-format.md), as the CLI writes it (with the
    /// findings when the solve failed).
    pub document: Value,
    pub csv: String,
    /// Why the solve failed, on the source lines (empty when solved).
    pub findings: Vec<Diagnostic>,
}

/// Runs on a blocking thread. `progress` receives one line per iteration.
pub fn solve(
    shown_path: String,
    text: String,
    overrides: &Overrides,
    cancel: Arc<AtomicBool>,
    progress: &mut dyn FnMut(String),
) -> Outcome {
    let Ok(loaded) = costate_driver::load(shown_path, text) else {
        return Outcome::Invalid;
    };
    let mut observer = |row: &IterationRow| {
        progress(format!(
            "iteration {} · objective {} · violation {}",
            row.iteration,
            report::sig(row.objective, 6),
            report::sig(row.residuals.violation, 2)
        ));
    };
    let solution =
        match costate_driver::solve(&loaded, overrides, None, cancel.clone(), &mut observer) {
            Ok(s) => s,
            Err(e) => return Outcome::Rejected(e),
        };
    if matches!(solution.status, OcpStatus::Interrupted) || cancel.load(Ordering::Relaxed) {
        return Outcome::Cancelled;
    }
    let intervals = costate_driver::ocp_settings(&loaded, overrides).intervals;
    let findings = costate_driver::findings(&loaded, &solution);
    let document = if report::is_solved(&solution.status) {
        report::solution_json(&loaded, &solution, intervals)
    } else {
        report::failed_json(&loaded, &solution, intervals, &findings)
    };
    Outcome::Done(Box::new(Solved {
        problem: loaded.lowered.source_map.problem_name.clone(),
        document,
        csv: report::solution_csv(&loaded, &solution),
        findings,
    }))
}
