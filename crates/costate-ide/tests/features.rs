//! The IDE functions on small sources, without the protocol: `$0` marks the cursor. Answers are
//! expect-test snapshots (`UPDATE_EXPECT=1` rewrites them for review).

use std::collections::HashMap;

use costate_ide::{Analysis, SolveSummary, VariableResult};
use expect_test::{expect, Expect};

const SOURCE: &str = "/// A cart.
problem cart

const {
  /// gravity
  g = 9.81 [m/s^2]
  half = g / 2
}

/// a soft limit
fn soft(value, limit) = limit * tanh(value / limit)

time t [s]: start 0, end in 1 .. 10 guess 2

state {
  x [km]: start 0, end 1
  v [m/s]: start 0, end 0, in -20 .. 20
}

control {
  a [m/s^2]: in -2 .. 2
}

dynamics {
  x' = v
  v' = soft(a, 2)
}

cost {
  minimize end(t)
}

path {
  // a comment
  // on two lines
  speed: -20 <= v <= 20
}
";

/// The analysis of `text` with `$0` removed, and the cursor's byte offset.
fn at_cursor(text: &str) -> (Analysis, usize) {
    let offset = text.find("$0").expect("a `$0` cursor");
    (Analysis::new(text.replacen("$0", "", 1)), offset)
}

fn with_cursor(before: &str) -> String {
    SOURCE.replacen(before, &format!("$0{before}"), 1)
}

fn check_hover(marked: &str, solution: Option<&SolveSummary>, expected: Expect) {
    let (analysis, offset) = at_cursor(marked);
    let hover = costate_ide::hover(&analysis, offset, solution);
    expected.assert_eq(&hover.map(|h| h.markdown).unwrap_or_else(|| "(none)".into()));
}

#[test]
fn hover_on_declarations_and_uses() {
    check_hover(
        &with_cursor("half = "),
        None,
        expect![[r#"
        **constant** `half`

        value: `4.905 m/s^2`"#]],
    );
    // A dimensionless unit as written stays in the hover (it was `value: 0.08`).
    check_hover(
        &SOURCE.replacen("  half = g / 2\n", "  half = g / 2\n  $0tilt = 0.08 [rad]\n", 1),
        None,
        expect![[r#"
        **constant** `tilt`

        value: `0.08 rad`"#]],
    );
    check_hover(
        &with_cursor("soft(a, 2)"),
        None,
        expect![[r#"
        **function** `soft(value, limit)`

        a soft limit"#]],
    );
    check_hover(
        &SOURCE.replacen("limit * tanh", "$0limit * tanh", 1),
        None,
        expect!["**function parameter** `limit` of `soft`"],
    );
    check_hover(
        &with_cursor("tanh("),
        None,
        expect![[r#"
        **built-in** `tanh(x)`

        hyperbolic function"#]],
    );
    check_hover(
        &with_cursor("x [km]"),
        None,
        expect![[r#"
        **state** `x` [km]

        start 0 km · end 1 km"#]],
    );
    check_hover(
        &with_cursor("t [s]"),
        None,
        expect![[r#"
        **independent variable** `t` [s]

        start 0 s · end in 1 s .. 10 s · guess 2 s"#]],
    );
}

#[test]
fn hover_after_a_solve_says_which_bound_or_constraint_is_active() {
    let result = |start, end, min, max| VariableResult { start, end, min, max };
    let solution = SolveSummary {
        status: "solved".into(),
        solved: true,
        cost: 3.2,
        iterations: 12,
        seconds: 0.5,
        variables: HashMap::from([
            ("a".to_string(), result(2.0, -2.0, -2.0, 2.0)),
            ("v".to_string(), result(0.0, 0.0, 0.0, 4.0)),
        ]),
        constraints_active: HashMap::from([("speed".to_string(), false)]),
    };
    check_hover(
        &with_cursor("a [m/s^2]"),
        Some(&solution),
        expect![[r#"
        **control** `a` [m/s^2]

        in -2 m/s^2 .. 2 m/s^2

        solution: start 2 m/s^2 · end -2 m/s^2 · min -2 m/s^2 · max 2 m/s^2

        lower and upper bound active"#]],
    );
    check_hover(
        &with_cursor("v [m/s]"),
        Some(&solution),
        expect![[r#"
        **state** `v` [m/s]

        start 0 m/s · end 0 m/s · in -20 m/s .. 20 m/s

        solution: start 0 m/s · end 0 m/s · min 0 m/s · max 4 m/s"#]],
    );
    check_hover(
        &with_cursor("speed:"),
        Some(&solution),
        expect![[r#"
        **path constraint** `speed`

        solution: inactive"#]],
    );
}

fn labels(marked: &str) -> String {
    let (analysis, offset) = at_cursor(marked);
    let mut labels: Vec<String> =
        costate_ide::completions(&analysis, offset).into_iter().map(|c| c.label).collect();
    labels.sort();
    labels.join(" ")
}

#[test]
fn completion_in_each_context() {
    // After a declaration's colon: the attribute words, and the names a value may use.
    let after_colon = labels(&SOURCE.replacen("  a [m/s^2]: in -2 .. 2", "  a [m/s^2]: $0", 1));
    let words: Vec<&str> = after_colon.split(' ').collect();
    for expected in ["start", "end", "in", "guess", "scale", "free", "g", "half", "sin"] {
        assert!(words.contains(&expected), "`{expected}` missing: {after_colon}");
    }
    for once in ["start", "end"] {
        let count = words.iter().filter(|w| **w == once).count();
        assert_eq!(count, 1, "`{once}` offered {count} times: {after_colon}");
    }
    // A function's parameters are in scope inside it only.
    let inside = labels(&SOURCE.replacen("limit * tanh", "$0 limit * tanh", 1));
    assert!(inside.contains(" limit ") && inside.contains(" value "), "{inside}");
    let outside = labels(&SOURCE.replacen("v' = soft(a, 2)", "v' = $0", 1));
    assert!(!outside.contains(" limit ") && outside.contains(" soft "), "{outside}");
    // Dynamics and path rows hold at every instant: no endpoint values or integrals there.
    let path = labels(&SOURCE.replacen("speed: -20 <= v <= 20", "speed: $0", 1));
    for place in [&outside, &path] {
        for invalid in [" start ", " end ", " integral "] {
            assert!(!place.contains(invalid), "`{invalid}` offered: {place}");
        }
        assert!(place.contains(" sin "), "{place}");
    }
    let cost = labels(&SOURCE.replacen("  minimize end(t)", "  minimize $0", 1));
    assert!(cost.contains(" end ") && cost.contains(" integral "), "{cost}");
    // The cost block: the senses.
    let cost = labels(&SOURCE.replacen("  minimize end(t)", "  $0", 1));
    expect!["maximize minimize"].assert_eq(&cost);
}

#[test]
fn signature_help_tracks_the_argument() {
    let (analysis, offset) = at_cursor(&SOURCE.replacen("soft(a, 2)", "soft(a, $02)", 1));
    let help = costate_ide::signature_help(&analysis, offset).unwrap();
    expect!["soft(value, limit) 1 a soft limit"].assert_eq(&format!(
        "{} {} {}",
        help.label,
        help.active_parameter,
        help.documentation.unwrap_or_default()
    ));
    let (analysis, offset) = at_cursor(&SOURCE.replacen("soft(a, 2)", "max(a, 1, $02)", 1));
    let help = costate_ide::signature_help(&analysis, offset).unwrap();
    assert_eq!((help.label.as_str(), help.active_parameter), ("max(a, b, ...)", 1));
    let (analysis, offset) = at_cursor(&SOURCE.replacen("soft(a, 2)", "a$0", 1));
    assert_eq!(costate_ide::signature_help(&analysis, offset), None, "not in a call");
}

#[test]
fn rename_refuses_what_would_break_the_file() {
    let (analysis, offset) = at_cursor(&with_cursor("half = "));
    for (name, why) in [
        ("", "is not a valid name"),
        ("9lives", "is not a valid name"),
        ("end", "is not a valid name"),
        ("exp", "is not a valid name"),
        ("g", "is already declared"),
    ] {
        let refused = costate_ide::rename(&analysis, offset, name).unwrap_err().to_string();
        assert!(refused.contains(why), "`{name}`: {refused}");
    }
    assert_eq!(costate_ide::rename(&analysis, offset, "halved").unwrap().len(), 1);
}

#[test]
fn folds_blocks_and_comment_runs() {
    let analysis = Analysis::new(SOURCE.to_string());
    let folds: Vec<String> = costate_ide::folding_ranges(&analysis)
        .iter()
        .map(|f| format!("{}-{} {:?}", f.start_line, f.end_line, f.kind))
        .collect();
    expect![[r#"
        3-7 Region
        14-17 Region
        19-21 Region
        23-26 Region
        28-30 Region
        32-36 Region
        33-34 Comment"#]]
    .assert_eq(&folds.join("\n"));
}

#[test]
fn positions_from_a_hostile_client_never_panic() {
    let analysis = Analysis::new("problem p\nconst { θ𝑥 = 1 }\n".to_string());
    for offset in 0..analysis.source.len() + 10 {
        let _ = costate_ide::hover(&analysis, offset, None);
        let _ = costate_ide::completions(&analysis, offset);
        let _ = costate_ide::signature_help(&analysis, offset);
        let _ = costate_ide::definition(&analysis, offset);
        let _ = costate_ide::references(&analysis, offset, true);
    }
}
