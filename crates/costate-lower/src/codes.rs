//! Diagnostic codes of the lowering, `E0901` upwards.
//!
//! Owns only the code table; the wording lives beside the place that raises each code. The
//! lowering runs only on files the checker accepted, so these codes mark what the checker does
//! not judge (or a disagreement between the two crates), never ordinary user mistakes. Codes are
//! stable: never renumber or reuse one. Syntax (`E01xx`) and checker (`E02xx`, `W02xx`) codes
//! live in their own crates.

use costate_syntax::{Code, Severity};

const fn error(id: &'static str, name: &'static str) -> Code {
    Code { id, name, severity: Severity::Error }
}

/// The analysis lacks something the lowering needs although it reports no error: an unresolved
/// name, a missing independent variable, cost or dynamics equation, an expression kind the
/// checker should have rejected where it stands. A bug in costate, not in the file.
pub const INCONSISTENT_ANALYSIS: Code = error("E0901", "inconsistent-analysis");
/// A number that is infinite or NaN once converted to SI (a literal, a constant, an attribute).
pub const NON_FINITE_VALUE: Code = error("E0902", "non-finite-value");
/// The independent variable's `start` is not a fixed value; the numeric model needs one.
pub const START_TIME_NOT_FIXED: Code = error("E0903", "start-time-not-fixed");
/// User functions nested deeper than [`crate::MAX_CALL_DEPTH`] calls (a recursion the checker
/// did not stop).
pub const CALL_TOO_DEEP: Code = error("E0904", "call-too-deep");

/// Every lowering code, in id order.
pub const ALL: &[Code] =
    &[INCONSISTENT_ANALYSIS, NON_FINITE_VALUE, START_TIME_NOT_FIXED, CALL_TOO_DEEP];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_are_unique_ordered_errors_in_the_lowering_range() {
        for w in ALL.windows(2) {
            assert!(w[0].id < w[1].id, "{} before {}", w[0].id, w[1].id);
        }
        for c in ALL {
            assert!(c.id.starts_with("E09") && c.id.len() == 5, "{}", c.id);
            assert_eq!(c.severity, Severity::Error);
            assert!(c.name.chars().all(|ch| ch.is_ascii_lowercase() || ch == '-'), "{}", c.name);
        }
    }
}
