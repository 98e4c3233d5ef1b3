//! Shared helpers: parse, check and lower a text; evaluate a compiled function; find spans.

#![allow(dead_code)]

use costate_check::Analysis;
use costate_lower::Lowered;
use costate_model::Function;
use costate_syntax::ast::File;
use costate_syntax::Span;

/// Parses and checks `text`, asserting that it has no syntax or checker error.
pub fn analyse(text: &str) -> (File, Analysis) {
    let parse = costate_syntax::parse(text);
    assert!(parse.diagnostics.is_empty(), "syntax errors: {:#?}", parse.diagnostics);
    let analysis = costate_check::check(&parse.file);
    let errors: Vec<String> = analysis
        .diagnostics
        .iter()
        .filter(|d| d.is_error())
        .map(|d| format!("{} {}", d.code.id, d.message))
        .collect();
    assert!(errors.is_empty(), "checker errors: {errors:#?}");
    (parse.file, analysis)
}

/// Parses, checks and lowers `text`, asserting success.
pub fn lower(text: &str) -> Lowered {
    let (file, analysis) = analyse(text);
    match costate_lower::lower(&file, &analysis) {
        Ok(l) => l,
        Err(d) => panic!(
            "lowering failed: {:#?}",
            d.iter().map(|d| format!("{} {}", d.code.id, d.message)).collect::<Vec<_>>()
        ),
    }
}

pub fn example(name: &str) -> String {
    let path = format!("{}/../../examples/{name}.costate", env!("CARGO_MANIFEST_DIR"));
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"))
}

/// All outputs of `f` at `inputs`.
pub fn eval(f: &Function, inputs: &[f64]) -> Vec<f64> {
    let mut ws = f.workspace();
    let mut out = vec![0.0; f.n_outputs()];
    f.eval(inputs, &mut out, &mut ws);
    out
}

/// Span of the `n`-th occurrence (0-based) of `needle` in `text`.
pub fn span_of(text: &str, needle: &str, n: usize) -> Span {
    let start = text
        .match_indices(needle)
        .nth(n)
        .unwrap_or_else(|| panic!("`{needle}` #{n} not in text"))
        .0;
    Span::new(start, start + needle.len())
}

/// `a` and `b` agree to a relative 1e-12 (values built from a few decimal unit factors and
/// elementary functions; the tape evaluates the same operations as the hand formula, so only
/// rounding in a different order separates them).
#[track_caller]
pub fn assert_close(a: f64, b: f64) {
    assert!((a - b).abs() <= 1e-12 * b.abs().max(1.0), "{a} != {b}");
}
