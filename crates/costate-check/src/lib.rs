//! costate-check: names, units and well-posedness of a parsed problem file.
//!
//! [`check`] turns a syntax tree into an [`Analysis`]: the symbol table, the symbol every name
//! use denotes, the type (dimension) of every expression, folded constants and attributes in
//! SI, the normalised problem (dynamics, cost, constraint rows, expectations, `solve` settings)
//! and the diagnostics (codes in [`codes`]). The lowering and the IDE read the analysis and
//! never re-derive any of it.
//!
//! Architecture invariant: pure (no IO, no async); never solves; knows nothing of the numeric
//! model. Depends only on `costate-syntax`. Never panics and never stops at the first problem.
//!
//! # Units are gradual
//!
//! A quantity declared with a unit (`x [km]`) is checked: sums, differences, comparisons,
//! `min`/`max`/`atan2` need equal dimensions; products multiply them; `sqrt` halves them; `^`
//! needs a dimensionless exponent that folds to a simple fraction when the base has a unit;
//! `sin`, `exp`, `log`, ... need a dimensionless argument; a dynamics right-hand side must have
//! the state's dimension per the independent variable's. A quantity without a declared unit is
//! unchecked and compatible with everything; whatever it touches becomes unchecked too, except
//! in sums and comparisons, where the checked side's dimension carries on.
//!
//! # Bare numbers adapt to their context
//!
//! A *bare* number is a literal without unit, or an expression made only of such literals,
//! `pi`-free math functions of them, and constants declared without a unit whose value is bare
//! (a named bare number). Its meaning depends on where it stands:
//!
//! - **added to, subtracted from or compared with** a quantity written in a unit, it is taken in
//!   that unit: with `x [km]`, `x <= 5` means 5 km and `x + 1` adds 1 km. The same holds for
//!   the other arguments of `min`, `max` and `atan2`, and for a chain's ends (`0 <= x <= 5`).
//! - as the **value of a declaration's attribute** (`start`, `end`, `in`, `guess`, `scale`) or
//!   of a constant with a declared unit, it is in the declared unit (`end 12` of `x [km]` is
//!   12 km; `rope [km] = 6` is 6 km);
//! - as the **right-hand side of a dynamics equation**, it is in the state's unit per the
//!   independent variable's (`x' = 5` with `x [km]`, `time t [h]` is 5 km/h);
//! - an **expected value or absolute tolerance** is in the unit of the expectation's target;
//! - as a **factor** in a product or quotient it is a *weight*: its own unit adapts to make the
//!   expression consistent, and its value is used as written (SI scale 1). The product is then
//!   accepted wherever any dimension is expected (`Ty::Weighted`); this is what makes
//!   `minimize end(t) + 0.05 * integral(a^2)` check clean;
//! - as an **argument of a user function**, an **exponent**, the argument of `integral`, a
//!   `solve` value or anywhere else without a partner, it is a plain SI number; `time_limit`
//!   takes seconds;
//! - inside a **function body**, only partners with a declared unit (constants) give a bare
//!   number a unit: the parameters are unit-generic and arrive in SI.
//!
//! A literal with its own unit (`12 [km]`) is converted by that unit and never adapts.
//! The checker records each adaptation as a factor on the span of the maximal bare
//! sub-expression ([`Analysis::bare_scale`]); the lowering multiplies the value of the node
//! with that span by it, so that every number reaches the numeric model in SI.

mod analysis;
mod checker;
pub mod codes;
pub mod settings;
pub mod units;

pub use analysis::{
    Analysis, Builtin, Constraint, ConstraintKind, Cost, DynamicsEq, Endpoint, ExpectTarget,
    Expectation, Interval, Row, Symbol, SymbolId, SymbolKind, Tolerance, Ty, VarAttrs,
};
pub use checker::check;

/// Stack a thread needs to check, lower and format any file the limits accept (the parser's
/// nesting and length limits, the checker's definition and expression depth): about 2.4 KiB per
/// expression level measured in an optimised build, several times that unoptimised, for up to
/// 10,000 levels. The shells run analysis on threads of this size; only the pages touched are
/// committed.
pub const STACK_FOR_ANALYSIS: usize = 256 << 20;
pub use settings::SolveSettings;
