//! The analysis as the lowering and the IDE see it: symbols, resolutions, types, bare-number
//! scales, folded attributes, normalised constraints, settings and expectations.

use costate_check::settings::{ControlShape, HessianMode, Integrator};
use costate_check::{check, Analysis, Endpoint, ExpectTarget, Interval, SymbolKind, Tolerance, Ty};
use costate_syntax::ast::{Expr, ExprKind};
use costate_syntax::Span;

fn analyse(text: &str) -> Analysis {
    let parse = costate_syntax::parse(text);
    assert!(parse.diagnostics.is_empty(), "syntax errors: {:?}", parse.diagnostics);
    check(&parse.file)
}

fn clean(text: &str) -> Analysis {
    let a = analyse(text);
    let list: Vec<String> =
        a.diagnostics.iter().map(|d| format!("{} {}", d.code.id, d.message)).collect();
    assert!(a.diagnostics.is_empty(), "unexpected diagnostics: {list:#?}");
    a
}

/// Span of the `n`-th occurrence (0-based) of `needle` in `text`.
fn span_of(text: &str, needle: &str, n: usize) -> Span {
    let start = text
        .match_indices(needle)
        .nth(n)
        .unwrap_or_else(|| panic!("`{needle}` #{n} not in text"))
        .0;
    Span::new(start, start + needle.len())
}

fn first_char(s: Span) -> Span {
    Span::new(s.start, s.start + 1)
}

// Relative tolerance for values that are products of a few decimal conversion factors.
fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-12 * b.abs().max(1.0)
}

const TEMPLATE: &str = "problem p
time t [h]: start 0, end 2
state {
  x [km]: start 0, end 12, in 0 .. 20
}
control {
  u [km/h]: in -30 .. 30, guess 5
}
dynamics {
  x' = u
}
cost {
  minimize integral(u^2)
}
path {
  x <= 15
  u + 1 <= 2 * x / 1 [h]
}
";

#[test]
fn attributes_are_folded_in_si_from_the_declared_unit() {
    let a = clean(TEMPLATE);
    let x = a.lookup("x").unwrap();
    assert_eq!(x.kind, SymbolKind::State);
    assert_eq!(x.index, 0);
    assert_eq!(x.attrs.start, Some(Endpoint::Fixed(0.0)));
    assert_eq!(x.attrs.end, Some(Endpoint::Fixed(12_000.0)));
    assert_eq!(x.attrs.bounds, Some(Interval { lo: 0.0, hi: 20_000.0 }));
    let u = a.lookup("u").unwrap();
    let b = u.attrs.bounds.unwrap();
    assert!(close(b.lo, -30.0 / 3.6) && close(b.hi, 30.0 / 3.6));
    assert!(close(u.attrs.guess.unwrap(), 5.0 / 3.6));
    let t = a.lookup("t").unwrap();
    assert_eq!(t.attrs.end, Some(Endpoint::Fixed(7200.0)));
    assert_eq!(a.time, Some(t.id));
}

#[test]
fn bare_literals_take_the_unit_of_their_partner() {
    let a = clean(TEMPLATE);
    // `x <= 15`: 15 km.
    assert!(close(a.bare_scale(span_of(TEMPLATE, "15", 0)), 1000.0));
    // `u + 1`: 1 km/h.
    let one = span_of(TEMPLATE, "u + 1", 0);
    let one = Span::new(one.end - 1, one.end);
    assert!(close(a.bare_scale(one), 1.0 / 3.6));
    // The weight `2` in `2 * x / 1 [h]` is not scaled.
    assert_eq!(a.bare_scale(first_char(span_of(TEMPLATE, "2 * x", 0))), 1.0);
    let row = &a.constraints[0].rows[0];
    assert_eq!(row.hi, 15_000.0);
    assert_eq!(row.lo, f64::NEG_INFINITY);
}

#[test]
fn constraint_rows_are_normalised() {
    let a = clean(TEMPLATE);
    assert_eq!(a.constraints.len(), 2);
    let row = &a.constraints[1].rows[0];
    // Neither side is constant: the row is `lhs - rhs <= 0`.
    assert!(matches!(row.expr.kind, ExprKind::Binary { .. }));
    assert_eq!((row.lo, row.hi), (f64::NEG_INFINITY, 0.0));
    let text = "problem p
time t [s]: start 0, end 1
state {
  x [m]: start 0, end 1
}
control {
  u: in -1 .. 1
}
dynamics {
  x' = u
}
cost {
  minimize integral(u^2)
}
path {
  band: -0.5 <= x <= 2 [km]
  3 >= u
  x >= u
}
";
    let a = clean(text);
    let band = &a.constraints[0];
    assert_eq!(band.label.as_deref(), Some("band"));
    assert_eq!((band.rows[0].lo, band.rows[0].hi), (-0.5, 2000.0));
    assert_eq!(&text[band.rows[0].expr.span.range()], "x");
    let r = &a.constraints[1].rows[0];
    assert_eq!((r.lo, r.hi), (f64::NEG_INFINITY, 3.0));
    let r = &a.constraints[2].rows[0];
    assert_eq!((r.lo, r.hi), (0.0, f64::INFINITY));
}

#[test]
fn names_resolve_and_references_are_listed() {
    let a = clean(TEMPLATE);
    let u = a.lookup("u").unwrap().id;
    let refs = a.references(u);
    // `x' = u`, `integral(u^2)`, `u + 1`
    assert_eq!(refs.len(), 3);
    for r in &refs {
        assert_eq!(&TEMPLATE[r.range()], "u");
        assert_eq!(a.resolve(*r).map(|s| s.id), Some(u));
    }
    let at = a.symbol_at(refs[0].start).unwrap();
    assert_eq!(at.name, "u");
    // The declaration's name is found too.
    let decl = a.lookup("x").unwrap().name_span;
    assert_eq!(a.symbol_at(decl.start).unwrap().name, "x");
    // `integral` resolves to the built-in.
    let integral = a.resolve(span_of(TEMPLATE, "integral", 0)).unwrap();
    assert_eq!(integral.kind, SymbolKind::Builtin);
    // The dynamics equation's state name counts as a use of `x`.
    let lhs = span_of(TEMPLATE, "x'", 0);
    assert_eq!(a.resolve(Span::new(lhs.start, lhs.start + 1)).unwrap().name, "x");
}

#[test]
fn types_are_recorded_for_hover() {
    let a = clean(TEMPLATE);
    let u_use = a.references(a.lookup("u").unwrap().id)[0];
    let ty = a.type_of(u_use).unwrap();
    assert_eq!(ty.dimension().unwrap().to_string(), "m/s");
    assert!(close(ty.scale(), 1.0 / 3.6));
    let integral_span = span_of(TEMPLATE, "integral(u^2)", 0);
    assert_eq!(a.type_of(integral_span).unwrap().dimension().unwrap().to_string(), "m^2/s");
}

#[test]
fn constants_fold_to_si_and_functions_are_unit_generic() {
    let text = "problem p
const {
  g = 9.81 [m/s^2]
  len [km] = 2
  ratio = len / 500 [m]
  half = sqrt(16 [m^2])
  n = 3
}
fn sq(a) = a * a
time t [s]: start 0, end 10
state {
  x [m]: start 0, end len
}
control {
  u [m/s]: in -1 .. 1
}
dynamics {
  x' = u + sq(u) / 1 [m/s] + n
}
cost {
  minimize integral(u^2)
}
";
    let a = clean(text);
    assert_eq!(a.lookup("g").unwrap().value, Some(9.81));
    assert_eq!(a.lookup("len").unwrap().value, Some(2000.0));
    assert_eq!(a.lookup("ratio").unwrap().value, Some(4.0));
    assert!(a.lookup("ratio").unwrap().dimension.unwrap().is_dimensionless());
    assert_eq!(a.lookup("half").unwrap().value, Some(4.0));
    assert_eq!(a.lookup("half").unwrap().dimension.unwrap().to_string(), "m");
    assert_eq!(a.lookup("x").unwrap().attrs.end, Some(Endpoint::Fixed(2000.0)));
    let sq = a.lookup("sq").unwrap();
    assert_eq!(sq.kind, SymbolKind::Function);
    assert_eq!(sq.params.len(), 1);
    // `n` is a named bare number; next to `m/s` it stays 3 (scale 1).
    let call = span_of(text, "sq(u)", 0);
    let e = Expr { kind: ExprKind::Error, span: call };
    assert_eq!(a.const_value(&e), None);
    assert!(matches!(a.type_of(call), Some(Ty::Known { .. })));
}

#[test]
fn const_value_applies_literal_units_and_bare_scales() {
    let a = clean(TEMPLATE);
    let x = a.lookup("x").unwrap();
    assert_eq!(x.unit.as_ref().unwrap().display, "km");
    let parse = costate_syntax::parse(TEMPLATE);
    // Find the `15` literal in the path block and fold it as the lowering would.
    let mut found = None;
    for item in &parse.file.items {
        if let costate_syntax::ast::Item::Path(b) = item {
            found = Some(b.entries[0].rest[0].2.clone());
        }
    }
    assert_eq!(a.const_value(&found.unwrap()), Some(15_000.0));
}

#[test]
fn settings_and_expectations_are_typed() {
    let text = "problem p
time t [min]: start 0, end in 1 .. 10 guess 3
state {
  x [km]: start 0, end 1
}
control {
  u [km/h]: in 0 .. 60
}
dynamics {
  x' = u
}
cost {
  minimize end(t)
}
solve {
  intervals = 20
  integrator = radau
  substeps = 4
  control_shape = linear
  tolerance = 1e-8
  iteration_limit = 50
  time_limit = 1.5 [min]
  hessian = bfgs
}
expect {
  end(t) == 2 within 0.1
  cost == 120 within 1%
  end(x) == 1000 [m] within 5 [m]
}
";
    let a = clean(text);
    let s = &a.settings;
    assert_eq!(s.intervals, 20);
    assert_eq!(s.integrator, Integrator::Radau);
    assert_eq!(s.substeps, 4);
    assert_eq!(s.control_shape, ControlShape::Linear);
    assert_eq!(s.tolerance, 1e-8);
    assert_eq!(s.iteration_limit, 50);
    assert_eq!(s.time_limit, Some(90.0));
    assert_eq!(s.hessian, HessianMode::Bfgs);
    let e = &a.expectations;
    assert_eq!(e.len(), 3);
    // `end(t) == 2 within 0.1`: minutes.
    assert!(matches!(e[0].target, ExpectTarget::Expr(_)));
    assert_eq!(e[0].value, 120.0);
    assert_eq!(e[0].tolerance, Tolerance::Absolute(6.0));
    assert_eq!(e[0].display_scale, 60.0);
    assert_eq!(e[1].target, ExpectTarget::Cost);
    assert_eq!(e[1].value, 120.0);
    assert_eq!(e[1].tolerance, Tolerance::Percent(1.0));
    assert_eq!(e[2].value, 1000.0);
    assert_eq!(e[2].tolerance, Tolerance::Absolute(5.0));
    let t = a.lookup("t").unwrap();
    assert_eq!(t.attrs.end, Some(Endpoint::Range(Interval { lo: 60.0, hi: 600.0 })));
    assert_eq!(t.attrs.guess, Some(180.0));
}

#[test]
fn dynamics_are_ordered_by_state_and_rates_adapt() {
    let text = "problem p
time t [h]: start 0, end 1
state {
  y [km]: start 0
  x [km]: start 0
}
control {
  u: in 0 .. 1
}
dynamics {
  x' = 5 + u
  y' = 5
}
cost {
  minimize integral(u)
}
";
    let a = clean(text);
    assert_eq!(a.dynamics.len(), 2);
    assert_eq!(a.symbol(a.dynamics[0].state).name, "y");
    assert_eq!(a.dynamics[1].state_index, 1);
    // `y' = 5`: 5 km/h.
    let five = a.dynamics[0].rhs.span;
    assert!(close(a.bare_scale(five), 1.0 / 3.6));
    assert!(close(a.const_value(&a.dynamics[0].rhs).unwrap(), 5.0 / 3.6));
    // `x' = 5 + u` with unchecked `u`: 5 stays an SI number.
    assert_eq!(a.bare_scale(first_char(span_of(text, "5 + u", 0))), 1.0);
}

#[test]
fn broken_input_never_panics() {
    let inputs = [
        "",
        "problem",
        "problem p\nstate { x [m]: start 1 / 0, end in .. }\ndynamics { x' = x ^ x ^ x }",
        "problem p\nconst { a = a }\nfn f(a, a) = f(a)\ncost { minimize f(1, 2, 3) }",
        "problem p\ntime t: end free\nstate { x: in 5 .. 1, start 7 }\ndynamics { x' = end(end(x)) + integral(integral(1)) }",
        "problem p\npath { 1 <= 2 <= 3 <= 4 == 5 }\nexpect { cost == cost within cost% }",
        "problem p\nconst { big = 10 ^ 400 \n tiny = (1 [m]) ^ 1000000 ^ 1000000 }",
    ];
    for text in inputs {
        let parse = costate_syntax::parse(text);
        let a = check(&parse.file);
        let _ = a.has_errors();
    }
}

/// A problem around generated definitions `defs`, with `uses` on the right of `x' = u + ...`.
fn around(defs: &str, uses: &str) -> String {
    format!(
        "problem generated\n{defs}\ntime t [s]: start 0, end 1\nstate {{\n  x [1]: start 0\n}}\n\
         control {{\n  u [1/s]: in -1 .. 1\n}}\ndynamics {{\n  x' = u + {uses}\n}}\n\
         cost {{\n  minimize end(x)\n}}\n"
    )
}

#[test]
fn a_long_chain_of_constants_folds_without_nesting() {
    // Found by fuzzing: 3,000 constants each defined by the next overflowed the stack.
    let n = 3000;
    let mut defs = String::from("const {\n");
    for i in 0..n {
        defs.push_str(&format!("  c{i} [1/s] = c{} + 1 [1/s]\n", i + 1));
    }
    defs.push_str(&format!("  c{n} [1/s] = 0.5\n}}"));
    let a = clean(&around(&defs, "c0"));
    let c0 = a.symbols.iter().find(|s| s.name == "c0").expect("c0 is a symbol");
    assert_eq!(c0.value, Some(n as f64 + 0.5));
}

#[test]
fn functions_nested_past_the_limit_are_reported_not_followed() {
    let n = 3000;
    let mut defs = String::new();
    for i in 0..n {
        defs.push_str(&format!("fn f{i}(a) = f{}(a) + a\n", i + 1));
    }
    defs.push_str(&format!("fn f{n}(a) = a"));
    let a = analyse(&around(&defs, "f0(u)"));
    let deep: Vec<_> = a.diagnostics.iter().filter(|d| d.code.id == "E0240").collect();
    assert_eq!(deep.len(), 1, "{:#?}", a.diagnostics);
    assert!(deep[0].primary.message.contains("more than 64 definitions"), "{:?}", deep[0]);
}

#[test]
fn expressions_open_across_definitions_are_bounded() {
    // Each body nests 1,990 levels; through six functions that passes the 10,000 allowed.
    let mut defs = String::new();
    for i in 0..6 {
        defs.push_str(&format!("fn f{i}(a) = f{}(a){}\n", i + 1, " + a".repeat(1990)));
    }
    defs.push_str("fn f6(a) = a");
    let text = around(&defs, "f0(u)");
    // Deeper than a test thread's default stack on purpose: the shells give analysis this.
    let analysis = std::thread::Builder::new()
        .stack_size(costate_check::STACK_FOR_ANALYSIS)
        .spawn(move || analyse(&text))
        .expect("thread starts")
        .join()
        .expect("no panic");
    let deep: Vec<_> = analysis.diagnostics.iter().filter(|d| d.code.id == "E0240").collect();
    assert_eq!(deep.len(), 1, "{:#?}", analysis.diagnostics);
    assert!(deep[0].primary.message.contains("10000 levels"), "{:?}", deep[0]);
}
