//! Test support: diagnostics annotated inline in fixture files.
//!
//! Plain code with no test dependencies so every crate's tests (parser, checker) can share one
//! annotation format. Owns only the format; it never parses or checks anything itself.
//!
//! # Format
//!
//! An annotation is a `//` comment line that states one expected diagnostic on the nearest
//! line above it that is not itself an annotation (the *target line*):
//!
//! ```text
//! v' = a +
//! //     ^ E0114 expected an expression
//! ```
//!
//! - **Caret form** `//` then carets `^^^` placed under the primary span: the carets' byte
//!   columns in the annotation line are the span's byte columns in the target line. Carets
//!   cannot sit in columns 0 and 1 (the `//` is there); use the column form for those.
//! - **Column form** `//~ START..END CODE message`: `START..END` are byte columns relative to
//!   the start of the target line (END may run past the line, for spans over several lines;
//!   START == END is a zero-width span).
//!
//! After the carets or columns comes the code (`E0114`, `W0301`), then optionally a message
//! fragment that must occur in the diagnostic's message. Several annotation lines in a row all
//! refer to the same target line. Every diagnostic must be annotated and every annotation must
//! match exactly one diagnostic (same code and same primary span); comparison is a multiset
//! match, order does not matter. Annotation lines are ordinary comments to the parser.

use crate::{Diagnostic, LineIndex, Span};

/// One expected diagnostic read from a fixture.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Expected {
    pub code: String,
    pub span: Span,
    /// Must occur in the message; may be empty.
    pub message: String,
    /// One-based line of the annotation itself, for failure reports.
    pub line: usize,
}

/// Reads the annotations of `text`. Malformed annotations are errors, so a typo cannot
/// silently drop an expectation.
pub fn parse_annotations(text: &str) -> Result<Vec<Expected>, String> {
    let mut expected = Vec::new();
    let mut target_start: Option<usize> = None;
    let mut offset = 0;
    for (n, line) in text.split_inclusive('\n').enumerate() {
        let line_start = offset;
        offset += line.len();
        let body = line.trim_end_matches(['\n', '\r']);
        let trimmed = body.trim_start();
        let annotation = if let Some(rest) = trimmed.strip_prefix("//~") {
            Some(column_form(rest, n + 1)?)
        } else if let Some(rest) = trimmed.strip_prefix("//") {
            let after = rest.trim_start();
            if after.starts_with('^') {
                let first = body.find('^').unwrap_or(0);
                let carets = body[first..].chars().take_while(|&c| c == '^').count();
                let tail = &body[first + carets..];
                Some((first, first + carets, tail.to_string()))
            } else {
                None
            }
        } else {
            None
        };
        let Some((start, end, tail)) = annotation else {
            target_start = Some(line_start);
            continue;
        };
        let Some(base) = target_start else {
            return Err(format!("line {}: annotation without a line above it", n + 1));
        };
        let tail = tail.trim();
        let (code, message) = tail.split_once(char::is_whitespace).unwrap_or((tail, ""));
        let code_ok = code.len() == 5
            && code.starts_with(|c: char| c.is_ascii_uppercase())
            && code[1..].chars().all(|c| c.is_ascii_digit());
        if !code_ok {
            return Err(format!(
                "line {}: expected a code such as `E0104` after the span, found `{code}`",
                n + 1
            ));
        }
        expected.push(Expected {
            code: code.to_string(),
            span: Span::new(base + start, base + end),
            message: message.trim().to_string(),
            line: n + 1,
        });
    }
    Ok(expected)
}

fn column_form(rest: &str, line: usize) -> Result<(usize, usize, String), String> {
    let rest = rest.trim_start();
    let (range, tail) = rest.split_once(char::is_whitespace).unwrap_or((rest, ""));
    let parsed = range
        .split_once("..")
        .and_then(|(a, b)| Some((a.parse::<usize>().ok()?, b.parse::<usize>().ok()?)));
    match parsed {
        Some((start, end)) if start <= end => Ok((start, end, tail.to_string())),
        _ => {
            Err(format!("line {line}: expected `//~ START..END CODE message`, found `//~ {rest}`"))
        }
    }
}

/// Compares the annotations in `text` with `diagnostics`. `Ok` when they match one to one;
/// otherwise an error listing every missing and every unexpected diagnostic with its position.
pub fn check_annotations(text: &str, diagnostics: &[Diagnostic]) -> Result<(), String> {
    let expected = parse_annotations(text)?;
    let index = LineIndex::new(text);
    let mut unmatched: Vec<&Diagnostic> = diagnostics.iter().collect();
    let mut problems = Vec::new();
    for e in &expected {
        let found = unmatched.iter().position(|d| {
            d.code.id == e.code && d.primary.span == e.span && d.message.contains(&e.message)
        });
        match found {
            Some(i) => {
                unmatched.swap_remove(i);
            }
            None => problems.push(format!(
                "missing: {} at {} `{}` (annotation on line {}){}",
                e.code,
                position(&index, e.span),
                text.get(e.span.range()).unwrap_or("<out of range>"),
                e.line,
                if e.message.is_empty() {
                    String::new()
                } else {
                    format!(" with message containing {:?}", e.message)
                },
            )),
        }
    }
    unmatched.sort_by_key(|d| d.primary.span.start);
    for d in unmatched {
        problems.push(format!(
            "unexpected: {} at {} `{}`: {} [label: {}]",
            d.code.id,
            position(&index, d.primary.span),
            text.get(d.primary.span.range()).unwrap_or("<out of range>"),
            d.message,
            d.primary.message,
        ));
    }
    if problems.is_empty() {
        Ok(())
    } else {
        Err(problems.join("\n"))
    }
}

fn position(index: &LineIndex, span: Span) -> String {
    let lc = index.byte_line_col(span.start);
    format!("{}:{} ({}..{})", lc.line + 1, lc.col + 1, span.start, span.end)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::codes;

    #[test]
    fn caret_and_column_forms() {
        let text = "ab cd\n// ^^ E0104 unexpected\n//~ 0..2 E0109\n";
        let expected = parse_annotations(text).unwrap();
        assert_eq!(expected.len(), 2);
        assert_eq!(expected[0].span, Span::new(3, 5));
        assert_eq!(expected[0].message, "unexpected");
        assert_eq!(expected[1].span, Span::new(0, 2));
        assert_eq!(expected[1].code, "E0109");
    }

    #[test]
    fn mismatches_are_listed() {
        let text = "ab cd\n// ^^ E0104\n";
        let wrong_span =
            Diagnostic::new(codes::UNEXPECTED_TOKEN, "unexpected `ab`", Span::new(0, 2), "here");
        let err = check_annotations(text, &[wrong_span]).unwrap_err();
        assert!(err.contains("missing: E0104 at 1:4"), "{err}");
        assert!(err.contains("unexpected: E0104 at 1:1"), "{err}");
        let right =
            Diagnostic::new(codes::UNEXPECTED_TOKEN, "unexpected `cd`", Span::new(3, 5), "here");
        assert_eq!(check_annotations(text, &[right]), Ok(()));
    }

    #[test]
    fn malformed_annotations_are_errors() {
        assert!(parse_annotations("x\n//  ^^ oops\n").is_err());
        assert!(parse_annotations("//  ^^ E0104\n").is_err());
        assert!(parse_annotations("x\n//~ 3 E0104\n").is_err());
    }
}
