//! Diagnostic codes raised by the CLI for solver findings, documented in docs/diagnostics.md.

use costate_syntax::{Code, Severity};

/// A function of the problem produced NaN or infinity during the solve.
pub const EVALUATION_FAILED: Code =
    Code { id: "E1001", name: "evaluation-failed", severity: Severity::Error };
/// The solver stopped at a point where a constraint is still violated (locally infeasible).
pub const CONSTRAINT_VIOLATED: Code =
    Code { id: "E1002", name: "constraint-violated", severity: Severity::Error };

pub const ALL: &[Code] = &[EVALUATION_FAILED, CONSTRAINT_VIOLATED];
