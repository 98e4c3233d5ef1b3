//! Running the solver on a loaded problem, with the iteration log on stderr. Settings mapping
//! and solver findings live in `costate-driver`, shared with the language server.

use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use costate_driver::Overrides;
use costate_solve::transcribe::{OcpSolution, Trajectory};
use costate_solve::{log_header, log_line, IterationRow};

use crate::pipeline::Loaded;

/// Solve, printing the iteration log to stderr unless `quiet`.
pub fn solve(
    loaded: &Loaded,
    overrides: &Overrides,
    warm: Option<&Trajectory>,
    quiet: bool,
) -> Result<OcpSolution, String> {
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
    // The CLI is stopped with Ctrl-C, which ends the process; nothing raises this flag.
    let cancel = Arc::new(AtomicBool::new(false));
    costate_driver::solve(loaded, overrides, warm, cancel, &mut observer)
}
