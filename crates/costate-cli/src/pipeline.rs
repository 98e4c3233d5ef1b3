//! From a path to a lowered problem: read, parse, check, lower. Diagnostics are rendered here
//! once, so `solve` and `test` report bad input exactly as `check` does.

use std::path::Path;

use costate_lower::Lowered;
use costate_syntax::Diagnostic;

use crate::{files, render};

/// A problem ready to solve, with its source kept for locating solver findings.
pub struct Loaded {
    pub path: String,
    pub source: String,
    pub lowered: Lowered,
    /// Warnings found on the way (errors stop the pipeline).
    pub warnings: Vec<Diagnostic>,
}

pub enum LoadError {
    /// Cannot read the file: exit 2.
    Io(files::FileError),
    /// The file has errors, already rendered: exit 1.
    Invalid { rendered: String, errors: usize },
}

pub fn load(path: &Path, color: bool) -> Result<Loaded, LoadError> {
    let shown = path.display().to_string();
    let source = files::read_source(path).map_err(LoadError::Io)?;
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
        Ok(lowered) => Ok(Loaded { path: shown, source, lowered, warnings: diagnostics }),
        Err(more) => {
            diagnostics.extend(more);
            diagnostics.sort_by_key(|d| (d.primary.span.start, d.primary.span.end));
            diagnostics.dedup();
            let errors: Vec<&Diagnostic> = diagnostics.iter().filter(|d| d.is_error()).collect();
            let rendered =
                errors.iter().map(|d| render::terminal(&shown, &source, d, color)).collect();
            Err(LoadError::Invalid { rendered, errors: errors.len() })
        }
    }
}
