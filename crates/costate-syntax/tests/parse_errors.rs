//! Invalid-input fixtures: every `tests/fixtures/syntax_errors/*.costate` states its expected
//! diagnostics inline, in the format documented in `costate_syntax::testing`:
//!
//! ```text
//! v' = a +
//! //     ^ E0114 expected an expression
//! //~ 0..2 E0121 missing
//! ```
//!
//! Carets sit under the primary span on the nearest non-annotation line above (byte columns);
//! `//~ START..END` gives the columns explicitly (for spans at columns 0 and 1). Then the code,
//! then a fragment of the message. Every diagnostic must be annotated, every annotation matched.

use std::path::Path;

#[test]
fn syntax_error_fixtures_report_exactly_their_annotations() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/syntax_errors");
    let mut paths: Vec<_> = std::fs::read_dir(&dir)
        .expect("fixture directory exists")
        .map(|e| e.expect("readable directory entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "costate"))
        .collect();
    paths.sort();
    assert!(paths.len() >= 15, "expected at least 15 invalid fixtures, found {}", paths.len());
    let mut failures = Vec::new();
    for path in &paths {
        let text = std::fs::read_to_string(path).expect("readable fixture");
        let parse = costate_syntax::parse(&text);
        let name = path.file_name().and_then(|s| s.to_str()).unwrap_or("?");
        if parse.diagnostics.is_empty() {
            failures.push(format!("{name}: no diagnostics at all"));
        }
        if let Err(e) = costate_syntax::testing::check_annotations(&text, &parse.diagnostics) {
            failures.push(format!("{name}:\n{e}"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}

#[test]
fn every_syntax_code_is_exercised_by_a_fixture() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/syntax_errors");
    let mut all = String::new();
    for entry in std::fs::read_dir(&dir).expect("fixture directory exists") {
        all += &std::fs::read_to_string(entry.expect("entry").path()).unwrap_or_default();
    }
    let missing: Vec<_> =
        costate_syntax::codes::ALL.iter().filter(|c| !all.contains(c.id)).map(|c| c.id).collect();
    assert!(missing.is_empty(), "codes without a fixture: {missing:?}");
}
