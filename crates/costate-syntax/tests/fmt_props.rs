//! Property test of the formatter: for random valid problem files, the formatted text parses
//! without diagnostics, has the same tree and comments as the input (modulo layout, see
//! `strip_layout`), and is a fixed point of formatting.
//!
//! The generator is grammar-based and deliberately messy: random spacing around every token,
//! optional `;` separators, blank lines, own-line and trailing comments, doc comments, all
//! operators, parentheses, unary minus, calls and units.

use costate_syntax::fmt::{format_file, strip_layout};
use proptest::prelude::*;

/// Optional whitespace between tokens.
fn ws() -> impl Strategy<Value = &'static str> {
    prop_oneof![4 => Just(""), 4 => Just(" "), 1 => Just("  "), 1 => Just("\t")]
}

fn name() -> impl Strategy<Value = String> {
    prop::sample::select(vec!["x", "v", "theta", "u", "mass", "k1", "g_0", "rope_len", "t"])
        .prop_map(String::from)
}

fn number() -> impl Strategy<Value = String> {
    prop::sample::select(vec!["0", "1", "2.5", "12", "0.05", "1e-3", "3.0E+2", "100"])
        .prop_map(String::from)
}

fn unit_factor() -> impl Strategy<Value = String> {
    let symbol = prop::sample::select(vec!["m", "s", "kg", "rad", "N", "km", "deg"]);
    (
        symbol,
        prop::option::of(prop_oneof![Just("1"), Just("2"), Just("3"), Just("-1"), Just("0")]),
        ws(),
    )
        .prop_map(|(s, e, w)| match e {
            Some(e) => format!("{s}{w}^{w}{e}"),
            None => s.to_string(),
        })
}

fn unit() -> impl Strategy<Value = String> {
    (prop::collection::vec(unit_factor(), 0..3), prop::collection::vec(unit_factor(), 0..3), ws())
        .prop_map(|(num, den, w)| {
            let mut text = String::from("[");
            text.push_str(w);
            if num.is_empty() {
                text.push('1');
            } else {
                text.push_str(&num.join(&format!("{w}*{w}")));
            }
            for d in den {
                text.push_str(&format!("{w}/{w}{d}"));
            }
            text.push_str(w);
            text.push(']');
            text
        })
}

fn literal() -> impl Strategy<Value = String> {
    (number(), prop::option::weighted(0.3, (ws(), unit()))).prop_map(|(n, u)| match u {
        Some((w, u)) => format!("{n}{w}{u}"),
        None => n,
    })
}

fn expr() -> BoxedStrategy<String> {
    let leaf = prop_oneof![name(), literal()];
    leaf.prop_recursive(5, 40, 3, |inner| {
        let op = prop::sample::select(vec!["+", "-", "*", "/", "^"]);
        let callee = prop::sample::select(vec!["sin", "atan2", "max", "end", "integral", "f"]);
        prop_oneof![
            3 => (inner.clone(), ws(), op, line_break(), inner.clone())
                .prop_map(|(a, w1, op, w2, b)| format!("{a}{w1}{op}{w2}{b}")),
            1 => (ws(), inner.clone()).prop_map(|(w, a)| format!("-{w}{a}")),
            1 => (ws(), inner.clone(), ws()).prop_map(|(w1, a, w2)| format!("({w1}{a}{w2})")),
            1 => (callee, prop::collection::vec(inner, 0..3), ws()).prop_map(|(f, args, w)| {
                format!("{f}({w}{}{w})", args.join(&format!("{w},{w}")))
            }),
        ]
    })
    .boxed()
}

/// Whitespace after an operator or a comma: mostly spaces, sometimes a line break (the entry
/// continues on the next line), sometimes a comment and a line break.
fn line_break() -> impl Strategy<Value = String> {
    prop_oneof![
        8 => ws().prop_map(String::from),
        1 => Just("\n    ".to_string()),
        1 => comment_text().prop_map(|t| format!("  //{t}\n    ")),
    ]
}

fn comment_text() -> impl Strategy<Value = &'static str> {
    prop::sample::select(vec![" note", "", " x = 1 // nested", "no space", " trailing spaces   "])
}

fn doc() -> impl Strategy<Value = String> {
    let line = prop::sample::select(vec![" what it is", "", "  indented", " with `code`"]);
    prop::option::weighted(0.2, prop::collection::vec(line, 1..3)).prop_map(|lines| {
        lines.map_or(String::new(), |lines| lines.iter().map(|l| format!("///{l}\n")).collect())
    })
}

/// Text placed between two entries (or items): newlines, optional blank lines and own-line
/// comments, or a `;` on the same line.
fn separator(indent: &'static str) -> impl Strategy<Value = String> {
    let comment = (ws(), comment_text()).prop_map(move |(w, t)| format!("{indent}{w}//{t}\n"));
    prop_oneof![
        1 => (ws(), ws()).prop_map(|(a, b)| format!("{a};{b}")),
        6 => (prop::collection::vec((prop::bool::weighted(0.2), prop::option::weighted(0.3, comment)), 1..3))
            .prop_map(|lines| {
                let mut s = String::from("\n");
                for (blank, c) in lines {
                    if blank {
                        s.push('\n');
                    }
                    if let Some(c) = c {
                        s.push_str(&c);
                    }
                }
                s
            }),
    ]
}

/// An optional comment at the end of a line.
fn trailing() -> impl Strategy<Value = String> {
    prop::option::weighted(0.25, (ws(), comment_text()))
        .prop_map(|c| c.map_or(String::new(), |(w, t)| format!("{w}//{t}")))
}

fn range() -> BoxedStrategy<String> {
    (prop::option::of(expr()), ws(), ws(), prop::option::of(expr()))
        .prop_map(|(lo, w1, w2, hi)| {
            format!("{}{w1}..{w2}{}", lo.unwrap_or_default(), hi.unwrap_or_default())
        })
        .boxed()
}

fn attr() -> BoxedStrategy<String> {
    let boundary =
        prop_oneof![expr(), Just("free".to_string()), range().prop_map(|r| format!("in {r}")),];
    prop_oneof![
        (prop::sample::select(vec!["start", "end"]), boundary)
            .prop_map(|(k, v)| format!("{k} {v}")),
        range().prop_map(|r| format!("in {r}")),
        (prop::sample::select(vec!["guess", "scale"]), expr())
            .prop_map(|(k, v)| format!("{k} {v}")),
    ]
    .boxed()
}

fn var_decl() -> BoxedStrategy<String> {
    (name(), prop::option::of((ws(), unit())), prop::collection::vec((attr(), line_break()), 0..4))
        .prop_map(|(n, u, attrs)| {
            let mut s = n;
            if let Some((w, u)) = u {
                s.push(' ');
                s.push_str(w);
                s.push_str(&u);
            }
            for (i, (a, w)) in attrs.iter().enumerate() {
                s.push_str(if i == 0 { ":" } else { "," });
                s.push_str(w);
                s.push_str(a);
            }
            s
        })
        .boxed()
}

fn relation() -> BoxedStrategy<String> {
    let op = prop::sample::select(vec!["<=", ">=", "=="]);
    (
        prop::option::weighted(0.4, name()),
        expr(),
        prop::collection::vec((ws(), op, ws(), expr()), 1..3),
    )
        .prop_map(|(label, first, rest)| {
            let mut s = label.map_or(String::new(), |l| format!("{l}: "));
            s.push_str(&first);
            for (w1, op, w2, e) in rest {
                s.push_str(&format!("{w1}{op}{w2}{e}"));
            }
            s
        })
        .boxed()
}

/// A block item: the keyword and a generator for its entries.
fn block(keyword: &'static str, entry: BoxedStrategy<String>) -> BoxedStrategy<String> {
    (
        doc(),
        ws(),
        trailing(),
        prop::collection::vec((doc(), entry, trailing(), separator("  ")), 0..4),
        trailing(),
    )
        .prop_map(move |(doc, w, head_comment, entries, close_comment)| {
            let mut s = format!("{doc}{keyword}{w}{{{head_comment}\n");
            for (i, (doc, e, t, sep)) in entries.iter().enumerate() {
                // A `;` keeps the next entry on this line, so it cannot follow a trailing
                // comment, come last, or precede a doc comment (which must start its line).
                let next_has_doc = entries.get(i + 1).is_none_or(|n| !n.0.is_empty());
                let sep = if sep.contains(';') && (!t.is_empty() || next_has_doc) {
                    "\n"
                } else {
                    sep.as_str()
                };
                let doc: String = doc.lines().map(|l| format!("  {l}\n")).collect();
                let indent = if s.ends_with('\n') { "  " } else { " " };
                s.push_str(&format!("{doc}{indent}{e}{t}{sep}"));
            }
            s.push('}');
            s.push_str(&close_comment);
            s
        })
        .boxed()
}

fn item() -> BoxedStrategy<String> {
    let const_entry = (name(), prop::option::of(unit()), ws(), expr())
        .prop_map(|(n, u, w, e)| {
            format!("{n}{}{w}={w}{e}", u.map_or(String::new(), |u| format!(" {u}")))
        })
        .boxed();
    let equation = (name(), ws(), expr()).prop_map(|(n, w, e)| format!("{n}'{w}={w}{e}")).boxed();
    let cost = (prop::sample::select(vec!["minimize", "maximize"]), expr())
        .prop_map(|(k, e)| format!("{k} {e}"))
        .boxed();
    let setting = (name(), ws(), expr()).prop_map(|(n, w, e)| format!("{n}{w}={w}{e}")).boxed();
    let expectation = (expr(), expr(), expr(), prop::option::of(ws()))
        .prop_map(|(t, v, tol, pct)| match pct {
            Some(w) => format!("{t} == {v} within {tol}{w}%"),
            None => format!("{t} == {v} within {tol}"),
        })
        .boxed();
    let fn_decl = (doc(), name(), prop::collection::vec(name(), 0..3), ws(), expr(), trailing())
        .prop_map(|(doc, n, params, w, e, t)| {
            format!("{doc}fn {n}({}){w}={w}{e}{t}", params.join(&format!(",{w}")))
        });
    let time = (doc(), var_decl(), trailing()).prop_map(|(doc, v, t)| format!("{doc}time {v}{t}"));
    prop_oneof![
        block("const", const_entry),
        fn_decl,
        time,
        block("param", var_decl()),
        block("state", var_decl()),
        block("control", var_decl()),
        block("dynamics", equation),
        block("cost", cost),
        block("path", relation()),
        block("boundary", relation()),
        block("solve", setting),
        block("expect", expectation),
    ]
    .boxed()
}

fn problem_file() -> impl Strategy<Value = String> {
    (
        separator(""),
        doc(),
        name(),
        trailing(),
        prop::collection::vec((separator(""), item()), 0..6),
        separator(""),
    )
        .prop_map(|(lead, doc, n, t, items, tail)| {
            let lead = lead.trim_start_matches([';', ' ', '\t']);
            let mut s = format!("{lead}{doc}problem {n}{t}\n");
            for (sep, item) in items {
                let sep = if sep.contains(';') { "\n".to_string() } else { sep };
                s.push_str(&sep);
                s.push_str(&item);
                s.push('\n');
            }
            if !tail.contains(';') {
                s.push_str(&tail);
            }
            s
        })
}

/// The property for one generated file.
fn check_file(source: &str) -> Result<(), TestCaseError> {
    let original = costate_syntax::parse(source);
    prop_assert!(
        original.diagnostics.is_empty(),
        "generator produced invalid text:\n{source}\n{:#?}",
        original.diagnostics
    );

    let formatted = format_file(&original.file, source);
    let reparsed = costate_syntax::parse(&formatted);
    prop_assert!(
        reparsed.diagnostics.is_empty(),
        "formatted text has diagnostics:\n{formatted}\n{:#?}",
        reparsed.diagnostics
    );
    prop_assert_eq!(
        strip_layout(&reparsed.file),
        strip_layout(&original.file),
        "formatting changed the tree:\n--- input ---\n{}\n--- formatted ---\n{}",
        source,
        formatted
    );

    let again = format_file(&reparsed.file, &formatted);
    prop_assert_eq!(again, formatted);
    Ok(())
}

#[test]
fn formatting_is_idempotent_and_preserves_the_parse() {
    // Generating nested strategies in an unoptimised build needs more than the 2 MiB stack of
    // a test thread, so the runner gets a thread of its own.
    let runner = std::thread::Builder::new()
        .stack_size(64 << 20)
        .spawn(|| {
            let config = ProptestConfig {
                cases: 200,
                failure_persistence: None,
                ..ProptestConfig::default()
            };
            let mut runner = proptest::test_runner::TestRunner::new(config);
            runner.run(&problem_file(), |source| check_file(&source))
        })
        .expect("spawn the property-test thread");
    match runner.join().expect("property-test thread panicked") {
        Ok(()) => {}
        Err(e) => panic!("{e}"),
    }
}
