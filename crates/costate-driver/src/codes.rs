//! Diagnostic codes raised for solver findings (by the CLI and the language server alike), documented in docs/diagnostics.md.

use costate_syntax::{Code, Severity};

/// A function of the problem produced NaN or infinity during the solve.
pub const EVALUATION_FAILED: Code =
    Code { id: "E1001", name: "evaluation-failed", severity: Severity::Error };
/// The solver stopped at a point where a constraint is still violated (locally infeasible).
pub const CONSTRAINT_VIOLATED: Code =
    Code { id: "E1002", name: "constraint-violated", severity: Severity::Error };
/// A solve that did not converge ended with a variable far beyond its scale in a direction
/// without a bound: the cost is probably unbounded.
pub const COST_MAY_BE_UNBOUNDED: Code =
    Code { id: "E1003", name: "cost-may-be-unbounded", severity: Severity::Error };

#[cfg(test)]
mod tests {
    use super::*;

    /// Every code the CLI raises has its section in the user's reference of diagnostics.
    #[test]
    fn every_cli_code_is_documented() {
        let doc = include_str!("../../../docs/diagnostics.md");
        for code in [EVALUATION_FAILED, CONSTRAINT_VIOLATED, COST_MAY_BE_UNBOUNDED] {
            let heading = format!("{} {}", code.id, code.name);
            assert!(doc.contains(&heading), "docs/diagnostics.md lacks a section `{heading}`");
        }
    }
}
