//! What the last solve found, as plain data in the units the user declared. The language
//! server builds it from the solution document (docs/solution-format.md); this crate only reads
//! it, so it never depends on the solver.

use std::collections::HashMap;

/// One declared quantity over the solution: values in its declared unit.
#[derive(Clone, Debug, PartialEq)]
pub struct VariableResult {
    pub start: f64,
    pub end: f64,
    pub min: f64,
    pub max: f64,
}

/// The outcome of the latest solve of a file.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct SolveSummary {
    /// `solved`, `locally infeasible`, ... (the solution document's `status`).
    pub status: String,
    pub solved: bool,
    pub cost: f64,
    pub iterations: u64,
    pub seconds: f64,
    /// States, controls, the independent variable and parameters by name.
    pub variables: HashMap<String, VariableResult>,
    /// Labelled path and boundary constraints: whether a multiplier is nonzero (active).
    pub constraints_active: HashMap<String, bool>,
}
