//! From a path to a lowered problem: read the file, then let the driver parse, check and lower
//! it. Diagnostics are rendered here once, so `solve` and `test` report bad input exactly as
//! `check` does.

use std::path::Path;

pub use costate_driver::Loaded;

use crate::{files, render};

pub enum LoadError {
    /// Cannot read the file: exit 2.
    Io(files::FileError),
    /// The file has errors, already rendered: exit 1.
    Invalid { rendered: String, errors: usize },
}

pub fn load(path: &Path, color: bool) -> Result<Loaded, LoadError> {
    let shown = path.display().to_string();
    let source = files::read_source(path).map_err(LoadError::Io)?;
    costate_driver::load(shown.clone(), source.clone()).map_err(|diagnostics| {
        let errors: Vec<_> = diagnostics.into_iter().filter(|d| d.is_error()).collect();
        let renderer = render::Renderer::new(&shown, &source, color);
        let (listed, omitted) = costate_syntax::shown_diagnostics(&errors);
        let mut rendered: String = listed.iter().map(|d| renderer.render(d)).collect();
        if omitted > 0 {
            rendered.push_str(&format!("... and {omitted} more errors in {shown}\n"));
        }
        LoadError::Invalid { rendered, errors: errors.len() }
    })
}
