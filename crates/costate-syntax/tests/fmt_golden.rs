//! Golden tests of the formatter: every `tests/fixtures/fmt/*.costate` input is formatted and
//! its output snapshotted (in `tests/fixtures/fmt/snapshots`, each naming its input file); each
//! output must be a fixed point and parse back to the input's tree.

use std::path::{Path, PathBuf};

use costate_syntax::fmt::{format_source, strip_layout};

fn fixtures() -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/fmt");
    let mut paths: Vec<PathBuf> = std::fs::read_dir(&dir)
        .expect("fixture directory exists")
        .map(|entry| entry.expect("readable directory entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "costate"))
        .collect();
    paths.sort();
    paths
}

/// Formats `source`, checks that the result is a fixed point with the same tree and comments,
/// and returns it.
fn format_checked(name: &str, source: &str) -> String {
    let formatted = match format_source(source) {
        Ok(f) => f,
        Err(diagnostics) => panic!("{name}: input has syntax errors: {diagnostics:#?}"),
    };
    let again = format_source(&formatted)
        .unwrap_or_else(|d| panic!("{name}: formatted text has syntax errors: {d:#?}"));
    assert_eq!(again, formatted, "{name}: formatting is not idempotent");
    let before = costate_syntax::parse(source).file;
    let after = costate_syntax::parse(&formatted).file;
    assert_eq!(strip_layout(&after), strip_layout(&before), "{name}: formatting changed the tree");
    formatted
}

#[test]
fn fixtures_format_to_their_snapshots() {
    let paths = fixtures();
    assert!(paths.len() >= 6, "expected at least 6 formatter fixtures, found {}", paths.len());
    for path in paths {
        let name = path.file_stem().and_then(|s| s.to_str()).expect("utf-8 fixture name");
        let source = std::fs::read_to_string(&path).expect("readable fixture");
        let formatted = format_checked(name, &source);
        let mut settings = insta::Settings::clone_current();
        settings.set_snapshot_path("fixtures/fmt/snapshots");
        settings.set_prepend_module_to_snapshot(false);
        settings.set_input_file(&path);
        settings.set_omit_expression(true);
        settings.bind(|| insta::assert_snapshot!(name, formatted));
    }
}

/// Formats a small snippet and compares with the expected text exactly.
fn check(source: &str, expected: &str) {
    let formatted = format_checked("snippet", source);
    assert_eq!(formatted, expected, "\n--- got ---\n{formatted}--- expected ---\n{expected}");
}

#[test]
fn refuses_text_with_syntax_errors() {
    let errors = format_source("problem p\nstate {\n  x [m]: start\n").unwrap_err();
    assert!(!errors.is_empty());
    assert!(errors.iter().all(|d| d.is_error()));
}

#[test]
fn negation_and_powers_keep_their_grouping() {
    // Each of these is a different tree; the formatter must keep each one exactly.
    check(
        "problem p\nconst {\n  a = -(x)^2\n  b = (-x)^2\n  c = -x^2\n  d = -(x^2)\n}\n",
        "problem p\n\nconst {\n  a = -(x)^2\n  b = (-x)^2\n  c = -x^2\n  d = -(x^2)\n}\n",
    );
    check(
        "problem p\nconst {\n  a = 2^3^2\n  b = (2^3)^2\n  c = 2^(3^2)\n  d = -2^-2\n}\n",
        "problem p\n\nconst {\n  a = 2^3^2\n  b = (2^3)^2\n  c = 2^(3^2)\n  d = -2^-2\n}\n",
    );
    check(
        "problem p\nconst {\n  a = a-(b-c)\n  b = a-b-c\n  c = a/(b/c)\n  d = (a/b)/c\n}\n",
        "problem p\n\nconst {\n  a = a - (b - c)\n  b = a - b - c\n  c = a / (b / c)\n  d = (a / b) / c\n}\n",
    );
}

#[test]
fn units_are_written_from_their_factors() {
    check(
        "problem p\nconst {\n  a = 1 [ kg*m^2 / s^2 ]\n  b = 1 [1/s]\n  c = 1 [1]\n  d = 1 [m / s / s]\n}\n",
        "problem p\n\nconst {\n  a = 1 [kg*m^2/s^2]\n  b = 1 [1/s]\n  c = 1 [1]\n  d = 1 [m/s/s]\n}\n",
    );
}

#[test]
fn trailing_comments_use_two_spaces() {
    check(
        "problem p // head\nstate {x // c1\n}// after\n",
        "problem p  // head\n\nstate {\n  x  // c1\n}  // after\n",
    );
}

#[test]
fn empty_blocks_and_bare_entries() {
    check(
        "problem p\ncontrol {   }\ncontrol { u }\n",
        "problem p\n\ncontrol {}\n\ncontrol {\n  u\n}\n",
    );
}

#[test]
fn header_only_file() {
    check("problem   p", "problem p\n");
}
