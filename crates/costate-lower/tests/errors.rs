//! What the lowering refuses: files the checker rejected (their errors come back unchanged) and
//! analyses it cannot translate (the codes of `costate_lower::codes`, reached here by editing a
//! clean analysis, since the checker stops such files first).

mod support;

use costate_check::{Endpoint, SymbolKind};
use costate_lower::codes;
use support::{analyse, span_of};

const CLEAN: &str = "problem tiny
const { gain [1/s] = 2 }
fn half(z) = z / 2
fn other(z) = half(z)
time t [s]: start 0, end 3
state { x [m]: start 1, guess 4 }
control { u [m/s]: in -1 .. 1 }
dynamics { x' = half(u) - gain * x }
cost { minimize integral(u^2) + 0.1 * end(x)^2 }
";

fn codes_of(
    r: Result<costate_lower::Lowered, Vec<costate_syntax::Diagnostic>>,
) -> Vec<(&'static str, costate_syntax::Span)> {
    match r {
        Ok(_) => panic!("expected the lowering to fail"),
        Err(d) => d.iter().map(|d| (d.code.id, d.primary.span)).collect(),
    }
}

#[test]
fn the_clean_file_lowers() {
    let (file, a) = analyse(CLEAN);
    assert!(costate_lower::lower(&file, &a).is_ok());
}

#[test]
fn checker_errors_are_returned_unchanged() {
    let text = CLEAN.replace("gain * x", "gian * x");
    let parse = costate_syntax::parse(&text);
    let a = costate_check::check(&parse.file);
    let errors: Vec<_> = a.diagnostics.iter().filter(|d| d.is_error()).cloned().collect();
    assert!(!errors.is_empty());
    assert_eq!(costate_lower::lower(&parse.file, &a).err(), Some(errors));
}

#[test]
fn an_unresolved_name_is_an_inconsistent_analysis() {
    let (file, mut a) = analyse(CLEAN);
    let use_of_x = span_of(CLEAN, "x }", 0);
    let use_of_x = costate_syntax::Span::new(use_of_x.start, use_of_x.start + 1);
    assert!(a.resolutions.remove(&use_of_x).is_some());
    assert_eq!(
        codes_of(costate_lower::lower(&file, &a)),
        vec![(codes::INCONSISTENT_ANALYSIS.id, use_of_x)]
    );
}

#[test]
fn a_missing_cost_is_an_inconsistent_analysis() {
    let (file, mut a) = analyse(CLEAN);
    a.cost = None;
    let header = span_of(CLEAN, "tiny", 0);
    assert_eq!(
        codes_of(costate_lower::lower(&file, &a)),
        vec![(codes::INCONSISTENT_ANALYSIS.id, header)]
    );
}

#[test]
fn a_non_finite_constant_or_guess_is_reported() {
    let (file, mut a) = analyse(CLEAN);
    let gain = a.symbols.iter().position(|s| s.name == "gain").unwrap_or(usize::MAX);
    a.symbols[gain].value = Some(f64::INFINITY);
    let use_of_gain = span_of(CLEAN, "gain", 1);
    assert_eq!(
        codes_of(costate_lower::lower(&file, &a)),
        vec![(codes::NON_FINITE_VALUE.id, use_of_gain)]
    );

    let (file, mut a) = analyse(CLEAN);
    let x = a.states[0].index();
    a.symbols[x].attrs.guess = Some(f64::NAN);
    let decl = a.symbols[x].decl_span;
    assert_eq!(codes_of(costate_lower::lower(&file, &a)), vec![(codes::NON_FINITE_VALUE.id, decl)]);
}

#[test]
fn a_start_time_that_is_not_fixed_is_reported() {
    let (file, mut a) = analyse(CLEAN);
    let t = a.time.map_or(usize::MAX, |t| t.index());
    a.symbols[t].attrs.start = Some(Endpoint::Free);
    let decl = a.symbols[t].decl_span;
    assert_eq!(
        codes_of(costate_lower::lower(&file, &a)),
        vec![(codes::START_TIME_NOT_FIXED.id, decl)]
    );
}

#[test]
fn runaway_recursion_stops_at_the_call_depth_limit() {
    // Make `half` call itself: its body becomes `other`'s body `half(z)`, with `other`'s
    // parameter (the name the body's `z` resolves to).
    let (file, mut a) = analyse(CLEAN);
    let find = |name: &str| {
        a.symbols.iter().position(|s| s.name == name && s.kind == SymbolKind::Function)
    };
    let (half, other) = (find("half").unwrap_or(usize::MAX), find("other").unwrap_or(usize::MAX));
    a.symbols[half].body = a.symbols[other].body.clone();
    a.symbols[half].params = a.symbols[other].params.clone();
    let got = codes_of(costate_lower::lower(&file, &a));
    assert_eq!(got, vec![(codes::CALL_TOO_DEEP.id, span_of(CLEAN, "half(z)", 1))]);
}
