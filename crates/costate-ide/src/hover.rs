//! Hover: what the name under the cursor is (kind, unit, bounds, start and end values, doc
//! comment, folded value of a constant, signature of a function) and, after a solve, what the
//! solution did with it.

use costate_check::{Endpoint, Interval, Symbol, SymbolKind, VarAttrs};
use costate_syntax::ast::{ExprKind, Item};
use costate_syntax::Span;

use crate::signature::{builtin_signature, user_signature};
use crate::{Analysis, SolveSummary};

#[derive(Clone, Debug, PartialEq)]
pub struct Hover {
    /// The name hovered.
    pub range: Span,
    /// Markdown.
    pub markdown: String,
}

/// Relative closeness, in units of the bound's magnitude, at which a bound counts as active.
const ACTIVE_TOLERANCE: f64 = 1e-6;

pub fn hover(analysis: &Analysis, offset: usize, solution: Option<&SolveSummary>) -> Option<Hover> {
    let word = analysis.word_at(offset)?;
    if let Some(symbol) = analysis.check.resolve(word).or_else(|| declared_at(analysis, word)) {
        return Some(Hover { range: word, markdown: describe(analysis, symbol, solution) });
    }
    if let Some(symbol) = analysis.check.symbol_at(word.start) {
        return Some(Hover { range: word, markdown: describe(analysis, symbol, solution) });
    }
    let text = analysis.text(word);
    if let Some(markdown) = constraint_label(analysis, word, solution) {
        return Some(Hover { range: word, markdown });
    }
    if let Some(def) = costate_check::settings::key_def(text) {
        let markdown =
            format!("**solve setting** `{}`\n\n{} (default `{}`)", def.key, def.doc, def.default);
        return Some(Hover { range: word, markdown });
    }
    None
}

fn declared_at(analysis: &Analysis, word: Span) -> Option<&Symbol> {
    analysis.check.symbols.iter().find(|s| s.kind != SymbolKind::Builtin && s.name_span == word)
}

/// A number for people: six significant digits, no noise.
pub(crate) fn number(value: f64) -> String {
    if !value.is_finite() {
        return value.to_string();
    }
    if value == 0.0 {
        return "0".into();
    }
    let magnitude = value.abs().log10().floor() as i32;
    if !(-4..=6).contains(&magnitude) {
        return format!("{value:.5e}");
    }
    let decimals = (5 - magnitude).max(0) as usize;
    let s = format!("{value:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

/// `value` (SI) in the symbol's declared unit, with the unit; without a declared unit but with
/// a known dimension (a constant `g = 9.81 [m/s^2]`), in SI base units.
fn in_unit(symbol: &Symbol, si: f64) -> String {
    match (&symbol.unit, &symbol.dimension) {
        (Some(u), _) => format!("{} {}", number(si / u.scale), u.display),
        (None, Some(d)) if !d.is_dimensionless() => format!("{} {d}", number(si)),
        (None, _) => number(si),
    }
}

/// A constant's value as its declaration writes it, when that is one number with a unit and
/// the constant declares none (`sway_max = 0.08 [rad]`): in SI a dimensionless unit such as
/// `rad` would be lost from the hover.
fn written_value(analysis: &Analysis, symbol: &Symbol) -> Option<String> {
    let decl = analysis.parse.file.items.iter().find_map(|item| match item {
        Item::Const(block) => block.entries.iter().find(|d| d.name.span == symbol.name_span),
        _ => None,
    })?;
    let ExprKind::Number { text, unit: Some(unit), .. } = &decl.value.kind else { return None };
    let unit = analysis.text(unit.span).trim_matches(|c| c == '[' || c == ']').trim();
    Some(format!("{text} {unit}"))
}

fn describe(analysis: &Analysis, symbol: &Symbol, solution: Option<&SolveSummary>) -> String {
    let mut parts = Vec::new();
    let unit = symbol.unit.as_ref().map(|u| format!(" [{}]", u.display)).unwrap_or_default();
    let head = match symbol.kind {
        SymbolKind::Builtin => match symbol.builtin {
            Some(b) => format!("**built-in** `{}`", builtin_signature(b).label),
            None => format!("**built-in** `{}`", symbol.name),
        },
        SymbolKind::Function => {
            format!("**function** `{}`", user_signature(analysis, symbol).label)
        }
        SymbolKind::FnParam => {
            let owner = symbol.owner.map(|o| analysis.check.symbol(o).name.as_str()).unwrap_or("?");
            format!("**function parameter** `{}` of `{owner}`", symbol.name)
        }
        kind => format!("**{}** `{}`{unit}", kind.describe(), symbol.name),
    };
    parts.push(head);
    if symbol.kind == SymbolKind::Const {
        let shown = match (&symbol.unit, written_value(analysis, symbol)) {
            (None, Some(written)) => Some(written),
            _ => symbol.value.map(|v| in_unit(symbol, v)),
        };
        if let Some(v) = shown {
            parts.push(format!("value: `{v}`"));
        }
    }
    let attrs = attributes(symbol, &symbol.attrs);
    if !attrs.is_empty() {
        parts.push(attrs.join(" · "));
    }
    if let Some(doc) = &symbol.doc {
        parts.push(doc.clone());
    }
    if let Some(result) = solution.and_then(|s| s.variables.get(&symbol.name)) {
        if matches!(
            symbol.kind,
            SymbolKind::State | SymbolKind::Control | SymbolKind::Param | SymbolKind::Time
        ) {
            let u = symbol.unit.as_ref().map(|u| format!(" {}", u.display)).unwrap_or_default();
            let what = match solution {
                Some(s) if !s.solved => format!("last iterate ({}, not a solution)", s.status),
                _ => "solution".to_string(),
            };
            let mut line = format!(
                "{what}: start {}{u} · end {}{u} · min {}{u} · max {}{u}",
                number(result.start),
                number(result.end),
                number(result.min),
                number(result.max)
            );
            if let Some(which) = active_bound(symbol, result.min, result.max) {
                line.push_str(&format!("\n\n{which} bound active"));
            }
            parts.push(line);
        }
    }
    parts.join("\n\n")
}

fn attributes(symbol: &Symbol, attrs: &VarAttrs) -> Vec<String> {
    let mut out = Vec::new();
    let endpoint = |e: &Endpoint| match e {
        Endpoint::Fixed(v) => in_unit(symbol, *v),
        Endpoint::Free => "free".into(),
        Endpoint::Range(i) => format!("in {}", interval(symbol, i)),
    };
    if let Some(s) = &attrs.start {
        out.push(format!("start {}", endpoint(s)));
    }
    if let Some(e) = &attrs.end {
        out.push(format!("end {}", endpoint(e)));
    }
    if let Some(b) = &attrs.bounds {
        out.push(format!("in {}", interval(symbol, b)));
    }
    if let Some(g) = attrs.guess {
        out.push(format!("guess {}", in_unit(symbol, g)));
    }
    if let Some(s) = attrs.scale {
        out.push(format!("scale {}", in_unit(symbol, s)));
    }
    out
}

fn interval(symbol: &Symbol, i: &Interval) -> String {
    let side = |v: f64| if v.is_finite() { in_unit(symbol, v) } else { String::new() };
    format!("{} .. {}", side(i.lo), side(i.hi)).trim().to_string()
}

/// Which declared bound the solution touches, if any (`min`/`max` in the declared unit).
fn active_bound(symbol: &Symbol, min: f64, max: f64) -> Option<&'static str> {
    let bounds = symbol.attrs.bounds?;
    let scale = symbol.unit.as_ref().map(|u| u.scale).unwrap_or(1.0);
    let touches = |bound: f64, value: f64| {
        bound.is_finite()
            && (value - bound / scale).abs() <= ACTIVE_TOLERANCE * (bound / scale).abs().max(1.0)
    };
    match (touches(bounds.lo, min), touches(bounds.hi, max)) {
        (true, true) => Some("lower and upper"),
        (true, false) => Some("lower"),
        (false, true) => Some("upper"),
        (false, false) => None,
    }
}

/// A constraint's label: which block it is in and, after a solve, whether it is active.
fn constraint_label(
    analysis: &Analysis,
    word: Span,
    solution: Option<&SolveSummary>,
) -> Option<String> {
    let c =
        analysis.check.constraints.iter().find(|c| {
            c.label.as_deref() == Some(analysis.text(word)) && c.span.start == word.start
        })?;
    let kind = match c.kind {
        costate_check::ConstraintKind::Path => "path constraint",
        costate_check::ConstraintKind::Boundary => "boundary constraint",
    };
    let mut markdown = format!("**{kind}** `{}`", analysis.text(word));
    if let Some(s) = solution {
        if let Some(active) = s.constraints_active.get(analysis.text(word)) {
            let what = if s.solved { "solution" } else { "last iterate (not solved)" };
            let state = if *active { "active (nonzero multiplier)" } else { "inactive" };
            markdown.push_str(&format!("\n\n{what}: {state}"));
        }
    }
    Some(markdown)
}
