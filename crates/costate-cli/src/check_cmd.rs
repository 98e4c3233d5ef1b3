//! `costate check`: diagnostics for each file, rendered for people or machines.

use std::path::PathBuf;

use costate_syntax::{shown_diagnostics, Diagnostic, LineIndex};
use serde_json::json;

use crate::{exit, files, render, Format};

/// Every diagnostic of one source text, syntax first, in source order.
pub fn diagnostics(source: &str) -> Vec<Diagnostic> {
    let parse = costate_syntax::parse(source);
    let analysis = costate_check::check(&parse.file);
    let mut all = parse.diagnostics;
    all.extend(analysis.diagnostics);
    all.sort_by_key(|d| (d.primary.span.start, d.primary.span.end));
    all
}

pub fn run(paths: &[PathBuf], format: Format, color: bool) -> u8 {
    let (mut errors, mut warnings, mut unreadable) = (0usize, 0usize, 0usize);
    let mut json_files = Vec::new();
    for path in paths {
        let shown = path.display().to_string();
        let source = match files::read_source(path) {
            Ok(s) => s,
            Err(e) => {
                eprintln!("error: {e}");
                unreadable += 1;
                if format == Format::Json {
                    json_files.push(json!({ "path": shown, "error": e.to_string() }));
                }
                continue;
            }
        };
        let found = diagnostics(&source);
        errors += found.iter().filter(|d| d.is_error()).count();
        warnings += found.iter().filter(|d| !d.is_error()).count();
        let (listed, omitted) = shown_diagnostics(&found);
        match format {
            Format::Text => {
                let renderer = render::Renderer::new(&shown, &source, color);
                for d in &listed {
                    print!("{}", renderer.render(d));
                }
                if omitted > 0 {
                    println!(
                        "... and {omitted} more in {shown} (the first {} shown)",
                        listed.len()
                    );
                }
            }
            Format::Json => {
                let index = LineIndex::new(&source);
                json_files.push(json!({
                    "path": shown,
                    "diagnostics": listed.iter().map(|d| render::json(&source, &index, d)).collect::<Vec<_>>(),
                    "omitted": omitted,
                }));
            }
        }
    }
    match format {
        Format::Text => {
            let checked = paths.len() - unreadable;
            let plural =
                |n: usize, word: &str| format!("{n} {word}{}", if n == 1 { "" } else { "s" });
            // A file that could not be read was not checked: the summary never reads clean.
            let not_read = if unreadable > 0 {
                format!("; {} could not be read", plural(unreadable, "file"))
            } else {
                String::new()
            };
            println!(
                "{}, {} in {}{not_read}",
                plural(errors, "error"),
                plural(warnings, "warning"),
                plural(checked, "file")
            );
        }
        Format::Json => println!(
            "{}",
            serde_json::to_string_pretty(&json!({
                "files": json_files,
                "errors": errors,
                "warnings": warnings,
                "unreadable": unreadable
            }))
            .expect("JSON values serialise")
        ),
    }
    if unreadable > 0 {
        exit::USAGE
    } else if errors > 0 {
        exit::FAILED
    } else {
        exit::OK
    }
}
