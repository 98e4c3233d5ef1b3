//! costate-driver: what the command-line tool and the language server both do around a solve,
//! as pure functions.
//!
//! Owns the way from source text to a lowered problem ([`load`]), the mapping of the file's
//! `solve` settings (plus overrides) to the solver's settings ([`settings`]), running the
//! solver with a cancel flag and an observer ([`solve`]), turning a failed solve into
//! diagnostics on the source line ([`findings`]) and the solution documents (JSON and CSV,
//! docs/solution-format.md) and summary values ([`report`]).
//!
//! Architecture invariant: no IO (no files, no terminal, no environment), no async. Reading the
//! problem file and writing the solution files atomically belong to the shells (`costate-cli`,
//! `costate-lsp`); so does printing the iteration log.

pub mod codes;
pub mod findings;
pub mod report;
pub mod settings;

use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use costate_lower::Lowered;
use costate_solve::transcribe::{solve_ocp, OcpSolution, Trajectory};
use costate_solve::IterationRow;
use costate_syntax::Diagnostic;

pub use findings::findings;
pub use settings::{ocp_settings, Overrides};

/// A problem ready to solve, with its source kept for locating solver findings.
#[derive(Clone, Debug)]
pub struct Loaded {
    /// How the problem's origin is shown (a path for the CLI, a file path or URI for the editor);
    /// it becomes the `source` field of the solution document.
    pub path: String,
    pub source: String,
    pub lowered: Lowered,
    /// Warnings found on the way (errors stop the pipeline).
    pub warnings: Vec<Diagnostic>,
}

/// Parse, check and lower `source`. On failure: every diagnostic found (errors and warnings),
/// in source order, without duplicates.
pub fn load(path: String, source: String) -> Result<Loaded, Vec<Diagnostic>> {
    let parse = costate_syntax::parse(&source);
    let analysis = costate_check::check(&parse.file);
    let mut diagnostics = parse.diagnostics;
    diagnostics.extend(analysis.diagnostics.iter().cloned());
    let lowered = if diagnostics.iter().any(Diagnostic::is_error) {
        Err(Vec::new())
    } else {
        costate_lower::lower(&parse.file, &analysis)
    };
    match lowered {
        Ok(lowered) => Ok(Loaded { path, source, lowered, warnings: diagnostics }),
        Err(more) => {
            diagnostics.extend(more);
            diagnostics.sort_by_key(|d| (d.primary.span.start, d.primary.span.end));
            diagnostics.dedup();
            Err(diagnostics)
        }
    }
}

/// Solve `loaded` with the file's settings and `overrides`. `cancel`, when raised, stops the
/// solve with the status `interrupted`; `observer` sees every iteration as it happens. `Err`
/// only for settings the solver rejects.
pub fn solve(
    loaded: &Loaded,
    overrides: &Overrides,
    warm: Option<&Trajectory>,
    cancel: Arc<AtomicBool>,
    observer: &mut dyn FnMut(&IterationRow),
) -> Result<OcpSolution, String> {
    let settings = ocp_settings(loaded, overrides);
    solve_ocp(&loaded.lowered.ocp, &settings, warm, Some(cancel), observer)
}
