//! Data-driven checker tests.
//!
//! `fixtures/errors/*.costate`: every diagnostic (syntax and checker) is annotated inline with
//! the shared format of `costate_syntax::testing` (carets under the primary span, the code and
//! a fragment of the message); unannotated or missing diagnostics fail the test.
//! `fixtures/ok/*.costate`: realistic problems that must check without any diagnostic.
//! All failures are collected and reported together.

use std::fs;
use std::path::{Path, PathBuf};

use costate_syntax::testing::check_annotations;
use costate_syntax::Diagnostic;

fn fixtures(dir: &str) -> Vec<PathBuf> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures").join(dir);
    let mut files: Vec<PathBuf> = fs::read_dir(&root)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", root.display()))
        .map(|e| e.expect("directory entry").path())
        .filter(|p| p.extension().is_some_and(|x| x == "costate"))
        .collect();
    files.sort();
    files
}

fn diagnostics(text: &str) -> Vec<Diagnostic> {
    let parse = costate_syntax::parse(text);
    let analysis = costate_check::check(&parse.file);
    let mut all = parse.diagnostics;
    all.extend(analysis.diagnostics);
    all
}

fn describe(d: &Diagnostic) -> String {
    format!("{} {:?} {}", d.code.id, d.primary.span, d.message)
}

#[test]
fn error_fixtures_report_exactly_the_annotated_diagnostics() {
    let files = fixtures("errors");
    assert!(files.len() >= 30, "expected at least 30 error fixtures, found {}", files.len());
    let mut failures = Vec::new();
    for path in &files {
        let text = fs::read_to_string(path).expect("fixture is readable");
        let diags = diagnostics(&text);
        if let Err(msg) = check_annotations(&text, &diags) {
            failures.push(format!("{}:\n{msg}", path.display()));
        }
    }
    assert!(
        failures.is_empty(),
        "{} fixture(s) failed:\n\n{}",
        failures.len(),
        failures.join("\n\n")
    );
}

#[test]
fn every_checker_code_has_an_error_fixture() {
    let mut all_text = String::new();
    for path in fixtures("errors") {
        all_text.push_str(&fs::read_to_string(path).expect("fixture is readable"));
    }
    let missing: Vec<&str> = costate_check::codes::ALL
        .iter()
        .map(|c| c.id)
        .filter(|id| !all_text.contains(&format!(" {id} ")))
        .collect();
    assert!(missing.is_empty(), "codes without a fixture: {missing:?}");
}

#[test]
fn ok_fixtures_check_without_any_diagnostic() {
    let files = fixtures("ok");
    assert!(files.len() >= 3);
    let mut failures = Vec::new();
    for path in &files {
        let text = fs::read_to_string(path).expect("fixture is readable");
        let diags = diagnostics(&text);
        if !diags.is_empty() {
            let list: Vec<String> = diags.iter().map(describe).collect();
            failures.push(format!("{}:\n  {}", path.display(), list.join("\n  ")));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn examples_check_clean() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../examples");
    let entries =
        fs::read_dir(&root).unwrap_or_else(|e| panic!("cannot read {}: {e}", root.display()));
    for e in entries {
        let p = e.expect("directory entry").path();
        if p.extension().is_some_and(|x| x == "costate") {
            let text = fs::read_to_string(&p).expect("example is readable");
            let diags = diagnostics(&text);
            let list: Vec<String> = diags.iter().map(describe).collect();
            assert!(diags.is_empty(), "{}:\n  {}", p.display(), list.join("\n  "));
        }
    }
}
