//! Property tests: `parse` never panics and always returns a tree, on arbitrary text and on
//! random mutations of the fixtures (valid and invalid). Bounded to 256 cases per property.

use proptest::prelude::*;
use std::path::Path;

fn fixtures() -> Vec<String> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures");
    let mut texts = Vec::new();
    for dir in ["parse", "syntax_errors"] {
        for entry in std::fs::read_dir(root.join(dir)).expect("fixture directory exists") {
            texts.push(
                std::fs::read_to_string(entry.expect("entry").path()).expect("readable fixture"),
            );
        }
    }
    texts.sort();
    texts
}

/// Spans must lie inside the text and on character boundaries, or renderers would panic.
fn assert_spans_valid(text: &str, parse: &costate_syntax::Parse) {
    for d in &parse.diagnostics {
        for span in std::iter::once(d.primary.span).chain(d.labels.iter().map(|l| l.span)) {
            assert!(
                span.start <= span.end && span.end <= text.len(),
                "span {span:?} out of {}",
                text.len()
            );
            assert!(
                text.is_char_boundary(span.start) && text.is_char_boundary(span.end),
                "span {span:?} splits a character"
            );
        }
        assert!(!d.message.is_empty());
    }
}

/// A piece of source that is likely to meet the grammar half-way.
fn fragment() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("problem p\n".to_string()),
        Just("state {".to_string()),
        Just("}".to_string()),
        Just("x' = ".to_string()),
        Just("(".to_string()),
        Just(")".to_string()),
        Just("[m/s^2]".to_string()),
        Just(" .. ".to_string()),
        Just("\n".to_string()),
        Just("/// doc\n".to_string()),
        Just("// c\n".to_string()),
        Just("-".to_string()),
        Just("^".to_string()),
        Just("start 0, end in 1 .. 2".to_string()),
        Just("within 5%".to_string()),
        Just("<=".to_string()),
        "[a-z]{1,6}",
        "[0-9.eE+-]{1,5}",
        "[ -~θ≤\u{0}\t\r]{1,4}",
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn parse_never_panics_on_arbitrary_text(text in "\\PC{0,400}") {
        let parse = costate_syntax::parse(&text);
        assert_spans_valid(&text, &parse);
    }

    #[test]
    fn parse_never_panics_on_grammar_soup(parts in proptest::collection::vec(fragment(), 0..60)) {
        let text = parts.concat();
        let parse = costate_syntax::parse(&text);
        assert_spans_valid(&text, &parse);
    }

    #[test]
    fn parse_never_panics_on_mutated_fixtures(
        which in any::<prop::sample::Index>(),
        edits in proptest::collection::vec((any::<prop::sample::Index>(), 0usize..4, fragment()), 1..8),
    ) {
        let all = fixtures();
        let mut text = which.get(&all).clone();
        for (at, kind, insert) in edits {
            let mut cut = at.index(text.len() + 1);
            while !text.is_char_boundary(cut) {
                cut -= 1;
            }
            match kind {
                // delete a few bytes
                0 => {
                    let mut end = (cut + 3).min(text.len());
                    while !text.is_char_boundary(end) {
                        end += 1;
                    }
                    text.replace_range(cut..end, "");
                }
                // truncate
                1 => text.truncate(cut),
                // insert a fragment
                _ => text.insert_str(cut, &insert),
            }
        }
        let parse = costate_syntax::parse(&text);
        assert_spans_valid(&text, &parse);
    }
}

#[test]
fn an_empty_file_reports_the_missing_header_only() {
    let parse = costate_syntax::parse("");
    assert_eq!(parse.diagnostics.len(), 1);
    assert_eq!(parse.diagnostics[0].code, costate_syntax::codes::MISSING_PROBLEM_HEADER);
    assert!(parse.file.items.is_empty());
}

#[test]
fn the_deepest_accepted_nesting_parses_within_a_test_thread_stack() {
    // The accepted limit must parse (and the tree drop) within the 2 MiB stack of a test
    // thread in a debug build.
    let nested = format!("problem p\nconst {{ a = {}1{} }}\n", "(".repeat(16), ")".repeat(16));
    let parse = costate_syntax::parse(&nested);
    assert!(parse.diagnostics.is_empty(), "{:?}", parse.diagnostics);
}

#[test]
fn the_longest_accepted_entry_parses_within_a_test_thread_stack() {
    let long = format!("problem p\nconst {{ a = 1{} }}\n", " + -x ^ 2".repeat(666));
    let parse = costate_syntax::parse(&long);
    assert!(parse.diagnostics.is_empty(), "{:?}", parse.diagnostics);
    let too_long = format!("problem p\nconst {{ a = 1{} }}\n", " + 1".repeat(2001));
    let parse = costate_syntax::parse(&too_long);
    assert_eq!(parse.diagnostics.len(), 1);
    assert_eq!(parse.diagnostics[0].code, costate_syntax::codes::NESTING_TOO_DEEP);
}

#[test]
fn a_run_of_stray_bytes_is_one_finding() {
    // Found by fuzzing: a megabyte of NUL bytes made a million diagnostics.
    let text = format!("problem p\n{}\n", "\0".repeat(100_000));
    let parse = costate_syntax::parse(&text);
    let stray: Vec<_> =
        parse.diagnostics.iter().filter(|d| d.message.contains("unexpected character")).collect();
    assert_eq!(stray.len(), 1, "{:?}", parse.diagnostics.len());
    assert!(stray[0].message.contains("100000 in a row"), "{}", stray[0].message);
    assert_eq!(stray[0].primary.span.end - stray[0].primary.span.start, 100_000);
}

#[test]
fn blank_lines_inside_an_expression_are_skipped_in_one_pass() {
    // 200,000 line breaks inside parentheses: each used to search ahead over all the others
    // (quadratic: 400,000 took 43 s). Correctness is what is checked here; the time is the
    // same run without the search.
    let text = format!("problem p\nconst {{\n  a = (1 +{}2)\n}}\n", "\n".repeat(200_000));
    let parse = costate_syntax::parse(&text);
    assert!(
        parse.diagnostics.iter().all(|d| !d.is_error() || d.message.contains("missing")),
        "{:?}",
        parse.diagnostics.iter().map(|d| &d.message).collect::<Vec<_>>()
    );
}

#[test]
fn a_half_typed_equation_is_reported_on_its_own_line() {
    // `v' =` used to swallow the next equation: the error showed on the line after it, and
    // `x` lost its dynamics.
    let text = "problem half\ndynamics {\n  v' =\n  x' = v\n}\n";
    let parse = costate_syntax::parse(text);
    let line_of = |offset: usize| text[..offset].matches('\n').count() + 1;
    let errors: Vec<_> = parse.diagnostics.iter().filter(|d| d.is_error()).collect();
    assert_eq!(errors.len(), 1, "{errors:?}");
    assert_eq!(line_of(errors[0].primary.span.start), 3, "{:?}", errors[0]);
    let equations = parse
        .file
        .items
        .iter()
        .find_map(|item| match item {
            costate_syntax::ast::Item::Dynamics(b) => Some(b.entries.len()),
            _ => None,
        })
        .unwrap();
    assert_eq!(equations, 1, "`x' = v` is kept as an equation of its own");
}
