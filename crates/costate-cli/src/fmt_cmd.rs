//! `costate fmt`: rewrite files in the canonical layout, or report those that differ.

use std::path::PathBuf;

use crate::{exit, files};

pub fn run(paths: &[PathBuf], check_only: bool) -> u8 {
    let (mut status, mut unformatted) = (exit::OK, 0usize);
    for path in paths {
        let shown = path.display();
        let source = match files::read_source(path) {
            Ok(s) => s,
            Err(e) => {
                eprintln!("error: {e}");
                status = exit::USAGE;
                continue;
            }
        };
        let formatted = match costate_syntax::fmt::format_source(&source) {
            Ok(f) => f,
            Err(diagnostics) => {
                eprintln!(
                    "error: `{shown}` has {} syntax error{}; run `costate check {shown}` and fix them before formatting",
                    diagnostics.len(),
                    if diagnostics.len() == 1 { "" } else { "s" }
                );
                status = status.max(exit::FAILED);
                continue;
            }
        };
        if formatted == source {
            continue;
        }
        unformatted += 1;
        if check_only {
            println!("{shown}: not formatted");
            status = status.max(exit::FAILED);
        } else if let Err(e) = files::write_atomic(path, formatted.as_bytes()) {
            eprintln!("error: {e}");
            status = exit::USAGE;
        } else {
            println!("{shown}: formatted");
        }
    }
    if check_only && unformatted == 0 && status == exit::OK {
        println!(
            "{} file{} already formatted",
            paths.len(),
            if paths.len() == 1 { "" } else { "s" }
        );
    }
    status
}
