//! Diagnostic codes of the checker: errors `E0201` upwards, warnings `W0201` upwards.
//!
//! Owns only the code table; the wording of each message lives beside the check that raises it.
//! Codes are stable: never renumber or reuse one. Syntax codes (`E01xx`) live in
//! `costate-syntax` and must not be added here. Every code is documented in docs/diagnostics.md.

use costate_syntax::{Code, Severity};

const fn error(id: &'static str, name: &'static str) -> Code {
    Code { id, name, severity: Severity::Error }
}

const fn warning(id: &'static str, name: &'static str) -> Code {
    Code { id, name, severity: Severity::Warning }
}

/// A name that is not declared (with "did you mean").
pub const UNKNOWN_NAME: Code = error("E0201", "unknown-name");
/// A name declared twice, a built-in name redeclared, a setting given twice.
pub const DUPLICATE_DEFINITION: Code = error("E0202", "duplicate-definition");
/// A state with no dynamics equation.
pub const MISSING_DYNAMICS: Code = error("E0203", "missing-dynamics");
/// A state with two dynamics equations.
pub const DUPLICATE_DYNAMICS: Code = error("E0204", "duplicate-dynamics");
/// A dynamics equation whose left side is a control, parameter, constant, ...
pub const DYNAMICS_FOR_NON_STATE: Code = error("E0205", "dynamics-for-non-state");
/// `start(..)` or `end(..)` where no endpoint exists: dynamics, path, inside `integral`,
/// constants, attributes, settings.
pub const MISPLACED_ENDPOINT: Code = error("E0206", "misplaced-endpoint");
/// `integral(..)` outside `cost` and `boundary`.
pub const MISPLACED_INTEGRAL: Code = error("E0207", "misplaced-integral");
/// `integral(..)` inside another `integral(..)`.
pub const NESTED_INTEGRAL: Code = error("E0208", "nested-integral");
/// No `cost` statement.
pub const MISSING_COST: Code = error("E0209", "missing-cost");
/// More than one `minimize`/`maximize`.
pub const DUPLICATE_COST: Code = error("E0210", "duplicate-cost");
/// No `time` declaration.
pub const MISSING_TIME: Code = error("E0211", "missing-time");
/// More than one `time` declaration.
pub const DUPLICATE_TIME: Code = error("E0212", "duplicate-time");
/// A range whose lower end exceeds its upper end (`in 5 .. 1`).
pub const EMPTY_BOUNDS: Code = error("E0213", "empty-bounds");
/// A `start`/`end` value (or range) outside the declaration's `in` bounds.
pub const VALUE_OUTSIDE_BOUNDS: Code = error("E0214", "value-outside-bounds");
/// A constant expression without a value: division by zero, `log` of a non-positive number,
/// `sqrt` of a negative number, `asin` outside [-1, 1], overflow.
pub const UNDEFINED_CONSTANT: Code = error("E0215", "undefined-constant");
/// A `solve` key that does not exist.
pub const UNKNOWN_SETTING: Code = error("E0216", "unknown-setting");
/// A `solve` value of the wrong kind or out of range.
pub const INVALID_SETTING: Code = error("E0217", "invalid-setting");
/// A call with the wrong number of arguments.
pub const WRONG_ARITY: Code = error("E0218", "wrong-arity");
/// A function that calls itself, directly or through others.
pub const RECURSIVE_FUNCTION: Code = error("E0219", "recursive-function");
/// A constant defined in terms of itself.
pub const CYCLIC_CONSTANT: Code = error("E0220", "cyclic-constant");
/// An attribute the declaration's kind does not take (`start` on a control).
pub const ATTRIBUTE_NOT_ALLOWED: Code = error("E0221", "attribute-not-allowed");
/// The same attribute twice on one declaration.
pub const DUPLICATE_ATTRIBUTE: Code = error("E0222", "duplicate-attribute");
/// A relation chain with mixed directions, `==` inside a chain, more than two relations, or no
/// relation at all.
pub const INVALID_CHAIN: Code = error("E0223", "invalid-chain");
/// A state, control or the independent variable used bare where only endpoint values exist
/// (cost, boundary, expect).
pub const VARIABLE_OUTSIDE_ENDPOINT: Code = error("E0224", "variable-outside-endpoint");
/// A relation or expectation target made only of constants.
pub const CONSTANT_RELATION: Code = error("E0225", "constant-relation");
/// A decision variable where a constant is required (const values, attributes, settings,
/// expected values).
pub const NOT_CONSTANT: Code = error("E0226", "not-constant");
/// Adding, subtracting, comparing or equating quantities of different dimensions.
pub const UNIT_MISMATCH: Code = error("E0227", "unit-mismatch");
/// A dynamics right-hand side whose dimension is not the state's per the independent variable's.
pub const DYNAMICS_UNIT: Code = error("E0228", "dynamics-unit");
/// A dimensioned argument where a dimensionless one is required (`sin`, `exp`, `log`, ...).
pub const DIMENSIONED_ARGUMENT: Code = error("E0229", "dimensioned-argument");
/// An exponent that is dimensioned, or not a constant simple fraction while the base has units.
pub const INVALID_EXPONENT: Code = error("E0230", "invalid-exponent");
/// A unit symbol that is not in the unit table.
pub const UNKNOWN_UNIT: Code = error("E0231", "unknown-unit");
/// `start(..)`/`end(..)` of something other than a state or the independent variable.
pub const INVALID_ENDPOINT_ARGUMENT: Code = error("E0232", "invalid-endpoint-argument");
/// A function body that uses a state, control, parameter or the independent variable.
pub const IMPURE_FUNCTION: Code = error("E0233", "impure-function");
/// An attribute value of the wrong form (`guess free`, `start in ..` on the time).
pub const INVALID_ATTRIBUTE_VALUE: Code = error("E0234", "invalid-attribute-value");
/// A `time` declaration without `end`.
pub const MISSING_END_TIME: Code = error("E0235", "missing-end-time");
/// A horizon whose end cannot come after its start.
pub const EMPTY_HORIZON: Code = error("E0236", "empty-horizon");
/// A `scale` that is not positive.
pub const INVALID_SCALE: Code = error("E0237", "invalid-scale");
/// Calling something that is not a function, or using a function as a value.
pub const NOT_A_FUNCTION: Code = error("E0238", "not-a-function");
/// A negative tolerance, or a unit on a percent tolerance.
pub const INVALID_TOLERANCE: Code = error("E0239", "invalid-tolerance");
/// Constants and functions whose definitions reach through each other (or whose expressions
/// nest) deeper than the checker follows.
pub const DEFINITIONS_TOO_DEEP: Code = error("E0240", "definitions-too-deep");

/// A control that influences neither dynamics, cost nor constraints.
pub const UNUSED_CONTROL: Code = warning("W0201", "unused-control");
/// `abs`, `min` or `max` of a decision variable where derivatives are needed.
pub const NON_SMOOTH: Code = warning("W0202", "non-smooth");
/// A free final time without an upper bound.
pub const UNBOUNDED_END_TIME: Code = warning("W0203", "unbounded-end-time");
/// A `guess` outside the declaration's bounds.
pub const GUESS_OUTSIDE_BOUNDS: Code = warning("W0204", "guess-outside-bounds");
/// A path constraint that involves no state, control or time: it constrains only parameters.
pub const PATH_WITHOUT_TRAJECTORY: Code = warning("W0205", "path-without-trajectory");

/// Every checker code, in id order.
pub const ALL: &[Code] = &[
    UNKNOWN_NAME,
    DUPLICATE_DEFINITION,
    MISSING_DYNAMICS,
    DUPLICATE_DYNAMICS,
    DYNAMICS_FOR_NON_STATE,
    MISPLACED_ENDPOINT,
    MISPLACED_INTEGRAL,
    NESTED_INTEGRAL,
    MISSING_COST,
    DUPLICATE_COST,
    MISSING_TIME,
    DUPLICATE_TIME,
    EMPTY_BOUNDS,
    VALUE_OUTSIDE_BOUNDS,
    UNDEFINED_CONSTANT,
    UNKNOWN_SETTING,
    INVALID_SETTING,
    WRONG_ARITY,
    RECURSIVE_FUNCTION,
    CYCLIC_CONSTANT,
    ATTRIBUTE_NOT_ALLOWED,
    DUPLICATE_ATTRIBUTE,
    INVALID_CHAIN,
    VARIABLE_OUTSIDE_ENDPOINT,
    CONSTANT_RELATION,
    NOT_CONSTANT,
    UNIT_MISMATCH,
    DYNAMICS_UNIT,
    DIMENSIONED_ARGUMENT,
    INVALID_EXPONENT,
    UNKNOWN_UNIT,
    INVALID_ENDPOINT_ARGUMENT,
    IMPURE_FUNCTION,
    INVALID_ATTRIBUTE_VALUE,
    MISSING_END_TIME,
    EMPTY_HORIZON,
    INVALID_SCALE,
    NOT_A_FUNCTION,
    INVALID_TOLERANCE,
    DEFINITIONS_TOO_DEEP,
    UNUSED_CONTROL,
    NON_SMOOTH,
    UNBOUNDED_END_TIME,
    GUESS_OUTSIDE_BOUNDS,
    PATH_WITHOUT_TRAJECTORY,
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_are_unique_ordered_and_prefixed_by_severity() {
        for w in ALL.windows(2) {
            assert!(w[0].id < w[1].id, "{} before {}", w[0].id, w[1].id);
        }
        for c in ALL {
            let prefix = if c.severity == Severity::Error { "E02" } else { "W02" };
            assert!(c.id.starts_with(prefix), "{}", c.id);
            assert!(c.name.chars().all(|ch| ch.is_ascii_lowercase() || ch == '-'), "{}", c.name);
        }
    }
}
