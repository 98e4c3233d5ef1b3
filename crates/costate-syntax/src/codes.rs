//! Diagnostic codes of the syntax layer (lexer and parser), `E0101` upwards.
//!
//! Owns only the code table; the wording of each message lives beside the place that detects
//! the problem (lexer.rs, parser/). Codes are stable: never renumber or reuse one. Checker codes
//! live in `costate-check` and must not be added here.

use crate::{Code, Severity};

const fn error(id: &'static str, name: &'static str) -> Code {
    Code { id, name, severity: Severity::Error }
}

/// A character that cannot start any token (`@`, `#`, `≤`, a lone `.`).
pub const UNEXPECTED_CHARACTER: Code = error("E0101", "unexpected-character");
/// A malformed number: `1.2.3`, `.5`, `1.`, `1e`, `2x`, or one too large for a float.
pub const INVALID_NUMBER: Code = error("E0102", "invalid-number");
/// A name containing non-ASCII letters (`θ`, `größe`).
pub const NON_ASCII_NAME: Code = error("E0103", "non-ascii-name");
/// A token the grammar does not allow at this place.
pub const UNEXPECTED_TOKEN: Code = error("E0104", "unexpected-token");
/// An opening `(`, `[` or `{` that is never closed.
pub const UNCLOSED_DELIMITER: Code = error("E0105", "unclosed-delimiter");
/// A closing `)`, `]` or `}` without an opening partner, or of the wrong kind.
pub const UNMATCHED_DELIMITER: Code = error("E0106", "unmatched-delimiter");
/// The file does not begin with `problem NAME`.
pub const MISSING_PROBLEM_HEADER: Code = error("E0107", "missing-problem-header");
/// A second `problem NAME` header in one file.
pub const DUPLICATE_PROBLEM_HEADER: Code = error("E0108", "duplicate-problem-header");
/// A top-level word that is not an item keyword (`stat {` instead of `state {`).
pub const UNKNOWN_ITEM: Code = error("E0109", "unknown-item");
/// A prime `'` anywhere but directly after the state name on the left of a dynamics equation.
pub const MISPLACED_DERIVATIVE: Code = error("E0110", "misplaced-derivative");
/// `<`, `>` or `=` where a relation `<=`, `>=` or `==` is required.
pub const INVALID_RELATION: Code = error("E0111", "invalid-relation");
/// A definition, equation or setting without its `=`.
pub const MISSING_EQUALS: Code = error("E0112", "missing-equals");
/// A malformed unit in brackets (`[m/]`, `[m^2.5]`, `[]`).
pub const INVALID_UNIT: Code = error("E0113", "invalid-unit");
/// An expression is required but missing.
pub const EXPECTED_EXPRESSION: Code = error("E0114", "expected-expression");
/// A declaration attribute other than `start`, `end`, `in`, `guess`, `scale`.
pub const UNKNOWN_ATTRIBUTE: Code = error("E0115", "unknown-attribute");
/// A `cost` entry that does not begin with `minimize` or `maximize`.
pub const MISSING_COST_SENSE: Code = error("E0116", "missing-cost-sense");
/// A block item keyword (`state`, `dynamics`, ...) not followed by `{`.
pub const MISSING_BLOCK: Code = error("E0117", "missing-block");
/// An expression nested more deeply than the parser accepts.
pub const NESTING_TOO_DEEP: Code = error("E0118", "nesting-too-deep");
/// A `path`/`boundary` constraint without `<=`, `>=` or `==`, or an expectation without `==`.
pub const MISSING_RELATION: Code = error("E0119", "missing-relation");
/// An expectation without its `within` tolerance.
pub const MISSING_TOLERANCE: Code = error("E0120", "missing-tolerance");
/// A dynamics equation whose left side lacks the prime (`x = v` instead of `x' = v`).
pub const MISSING_PRIME: Code = error("E0121", "missing-prime");

/// Every syntax code, in id order.
pub const ALL: &[Code] = &[
    UNEXPECTED_CHARACTER,
    INVALID_NUMBER,
    NON_ASCII_NAME,
    UNEXPECTED_TOKEN,
    UNCLOSED_DELIMITER,
    UNMATCHED_DELIMITER,
    MISSING_PROBLEM_HEADER,
    DUPLICATE_PROBLEM_HEADER,
    UNKNOWN_ITEM,
    MISPLACED_DERIVATIVE,
    INVALID_RELATION,
    MISSING_EQUALS,
    INVALID_UNIT,
    EXPECTED_EXPRESSION,
    UNKNOWN_ATTRIBUTE,
    MISSING_COST_SENSE,
    MISSING_BLOCK,
    NESTING_TOO_DEEP,
    MISSING_RELATION,
    MISSING_TOLERANCE,
    MISSING_PRIME,
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_are_unique_sorted_and_in_the_syntax_range() {
        for pair in ALL.windows(2) {
            assert!(pair[0].id < pair[1].id, "{} before {}", pair[0].id, pair[1].id);
        }
        for code in ALL {
            assert!(code.id.starts_with("E01") && code.id.len() == 5, "{}", code.id);
            assert!(code.name.chars().all(|c| c.is_ascii_lowercase() || c == '-'), "{}", code.name);
        }
    }
}
