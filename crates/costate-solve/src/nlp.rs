//! The sparse nonlinear program the SQP solves:
//!
//! ```text
//! minimise f(w)  over w in R^n
//! subject to cl <= c(w) <= cu   (row i is an equality when cl[i] == cu[i])
//!            wl <= w    <= wu
//! ```
//!
//! Owns the [`Nlp`] trait, the sparsity description [`Pattern`] and the evaluation failure
//! [`EvalError`]. Must not know how a problem was built: no names, no time grid, no
//! integrators. A transcription implements [`Nlp`] and fills [`EvalError::tag`] /
//! [`EvalError::stage`] with its own location codes so it can map a failure back to a source.
//!
//! Conventions shared by the whole crate:
//! - infinite bounds are `f64::INFINITY` / `f64::NEG_INFINITY` (magnitudes >= 1e20 are treated
//!   as infinite too);
//! - the Lagrangian is `L = sigma f(w) + lambda' c(w) + nu' w`; at a solution `lambda[i] >= 0`
//!   when the upper side `cu[i]` is active and `<= 0` when the lower side is active (same for
//!   `nu` and the variable bounds);
//! - sparse matrices are given as a fixed [`Pattern`] of `(row, col)` entries and a value
//!   array in that order; repeated entries are summed.

use std::fmt;

use crate::qp::StageLayout;

/// Bounds with a magnitude at or above this are treated as absent.
pub const INFINITE_BOUND: f64 = 1e20;

/// Positions of the structurally nonzero entries of a sparse matrix, in value order.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Pattern {
    pub rows: Vec<usize>,
    pub cols: Vec<usize>,
}

impl Pattern {
    pub fn new() -> Self {
        Self::default()
    }

    pub fn with_capacity(nnz: usize) -> Self {
        Pattern { rows: Vec::with_capacity(nnz), cols: Vec::with_capacity(nnz) }
    }

    /// Append entry `(row, col)`; its value is the next one in the value array.
    pub fn push(&mut self, row: usize, col: usize) {
        self.rows.push(row);
        self.cols.push(col);
    }

    pub fn len(&self) -> usize {
        self.rows.len()
    }

    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// The first entry outside an `nrows x ncols` matrix, if any.
    pub fn first_out_of_range(&self, nrows: usize, ncols: usize) -> Option<(usize, usize)> {
        if self.rows.len() != self.cols.len() {
            return Some((usize::MAX, usize::MAX));
        }
        self.rows
            .iter()
            .zip(&self.cols)
            .map(|(&r, &c)| (r, c))
            .find(|&(r, c)| r >= nrows || c >= ncols)
    }
}

/// Which evaluation failed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum EvalPart {
    Objective,
    Gradient,
    Constraints,
    Jacobian,
    Hessian,
}

impl fmt::Display for EvalPart {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            EvalPart::Objective => "objective",
            EvalPart::Gradient => "objective gradient",
            EvalPart::Constraints => "constraints",
            EvalPart::Jacobian => "constraint jacobian",
            EvalPart::Hessian => "lagrangian hessian",
        })
    }
}

/// How an evaluation failed.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum EvalFailure {
    /// A NaN or infinite value came out.
    NonFinite { value: f64 },
    /// The evaluation could not be completed (e.g. an implicit integrator's Newton iteration
    /// did not converge).
    Failed,
    /// The problem does not provide this evaluation (e.g. an exact Hessian).
    Unavailable,
}

/// An evaluation that produced no usable value. The solver fills `part`, `index` and
/// `failure` when it detects a non-finite output itself; a problem may fill `tag` and
/// `stage` with its own codes (e.g. "dynamics" and the shooting interval), which the solver
/// carries through unchanged.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EvalError {
    pub part: EvalPart,
    /// Output index within `part`: constraint row, gradient entry or nonzero position.
    pub index: Option<usize>,
    pub failure: EvalFailure,
    /// Problem-defined code for the function that failed; [`EvalError::UNTAGGED`] if none.
    pub tag: u32,
    /// Problem-defined stage (e.g. shooting interval), if any.
    pub stage: Option<usize>,
}

impl EvalError {
    pub const UNTAGGED: u32 = u32::MAX;

    /// A non-finite `value` at output `index` of `part`.
    pub fn non_finite(part: EvalPart, index: usize, value: f64) -> Self {
        EvalError {
            part,
            index: Some(index),
            failure: EvalFailure::NonFinite { value },
            tag: Self::UNTAGGED,
            stage: None,
        }
    }

    pub fn failed(part: EvalPart) -> Self {
        EvalError {
            part,
            index: None,
            failure: EvalFailure::Failed,
            tag: Self::UNTAGGED,
            stage: None,
        }
    }

    pub fn unavailable(part: EvalPart) -> Self {
        EvalError {
            part,
            index: None,
            failure: EvalFailure::Unavailable,
            tag: Self::UNTAGGED,
            stage: None,
        }
    }

    #[must_use]
    pub fn with_tag(mut self, tag: u32) -> Self {
        self.tag = tag;
        self
    }

    #[must_use]
    pub fn with_stage(mut self, stage: usize) -> Self {
        self.stage = Some(stage);
        self
    }
}

impl fmt::Display for EvalError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.failure {
            EvalFailure::NonFinite { value } => write!(f, "{} produced {value}", self.part)?,
            EvalFailure::Failed => write!(f, "{} could not be evaluated", self.part)?,
            EvalFailure::Unavailable => write!(f, "{} is not available", self.part)?,
        }
        if let Some(i) = self.index {
            write!(f, " at output {i}")?;
        }
        if let Some(s) = self.stage {
            write!(f, " in stage {s}")?;
        }
        Ok(())
    }
}

impl std::error::Error for EvalError {}

/// A sparse NLP. Sizes and patterns must not change between calls. Evaluation methods take
/// `&mut self` so an implementation can keep evaluation workspaces without interior mutability.
///
/// An implementation need not check its outputs for NaN/Inf: the solver does, and reports the
/// offending output index. It returns `Err` itself only to add location data (`tag`, `stage`)
/// or to report a failure that is not a value (`EvalFailure::Failed`).
pub trait Nlp {
    /// Number of variables `n`.
    fn num_variables(&self) -> usize;

    /// Number of constraint rows `m`.
    fn num_constraints(&self) -> usize;

    /// Fill `lower` and `upper` (length `n`) with the variable bounds.
    fn variable_bounds(&self, lower: &mut [f64], upper: &mut [f64]);

    /// Fill `lower` and `upper` (length `m`) with the constraint bounds.
    fn constraint_bounds(&self, lower: &mut [f64], upper: &mut [f64]);

    /// Fill `w` (length `n`) with the starting point. The solver moves it inside the bounds.
    fn initial_point(&self, w: &mut [f64]);

    /// Warm start: fill the constraint multipliers (length `m`) and bound multipliers (length
    /// `n`) and return `true`, or return `false` to start from zero multipliers.
    fn initial_multipliers(&self, _constraint: &mut [f64], _bound: &mut [f64]) -> bool {
        false
    }

    /// Give the variables of `w` that are defined by others (running sums of a lifted
    /// integral, say) the values those others imply, so their rows hold exactly. The solver
    /// calls it on every trial point before evaluating it: a merit function would otherwise
    /// see such bookkeeping rows violated by the curvature the linearisation left out, and
    /// reject good steps. Default: nothing.
    fn complete(&mut self, _w: &mut [f64]) {}

    /// `f(w)`.
    fn objective(&mut self, w: &[f64]) -> Result<f64, EvalError>;

    /// Variable indices where the objective gradient may be nonzero. Default: all of them.
    fn gradient_pattern(&self) -> Vec<usize> {
        (0..self.num_variables()).collect()
    }

    /// Gradient entries in the order of [`Nlp::gradient_pattern`].
    fn gradient(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError>;

    /// `c(w)` into `values` (length `m`).
    fn constraints(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError>;

    /// Structurally nonzero entries `(row, variable)` of the constraint Jacobian.
    fn jacobian_pattern(&self) -> Pattern;

    /// Jacobian values in the order of [`Nlp::jacobian_pattern`].
    fn jacobian(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError>;

    /// Lower triangle (`row >= col`) of the Hessian of the Lagrangian, or `None` when the
    /// problem provides no exact second derivatives (the solver then uses BFGS).
    fn hessian_pattern(&self) -> Option<Pattern> {
        None
    }

    /// Values, in the order of [`Nlp::hessian_pattern`], of the Hessian of
    /// `objective_factor * f(w) + sum_i multipliers[i] * c_i(w)`.
    fn hessian(
        &mut self,
        _w: &[f64],
        _objective_factor: f64,
        _multipliers: &[f64],
        _values: &mut [f64],
    ) -> Result<(), EvalError> {
        Err(EvalError::unavailable(EvalPart::Hessian))
    }

    /// The stage structure of the variables and rows, when they are ordered stage by stage
    /// (see [`StageLayout`]): the SQP's QPs then have it too, its Hessian models are built
    /// block by block and solved stage by stage. The Hessian must not couple two stages.
    /// Default `None`: one stage holding everything (a small dense problem).
    fn stages(&self) -> Option<StageLayout> {
        None
    }

    /// Typical magnitudes of the variables (length `n`, positive); the solver works with
    /// `w[j] / scale[j]`. Default: 1.
    fn variable_scales(&self, scales: &mut [f64]) {
        scales.fill(1.0);
    }

    /// Typical magnitudes of the constraint rows (length `m`, positive); feasibility is
    /// measured on `c[i] / scale[i]`. Default: 1.
    fn constraint_scales(&self, scales: &mut [f64]) {
        scales.fill(1.0);
    }

    /// Typical magnitude of the objective; stationarity is measured on `f / scale`. Default: 1.
    fn objective_scale(&self) -> f64 {
        1.0
    }
}

impl<T: Nlp + ?Sized> Nlp for &mut T {
    fn num_variables(&self) -> usize {
        (**self).num_variables()
    }
    fn num_constraints(&self) -> usize {
        (**self).num_constraints()
    }
    fn variable_bounds(&self, lower: &mut [f64], upper: &mut [f64]) {
        (**self).variable_bounds(lower, upper)
    }
    fn constraint_bounds(&self, lower: &mut [f64], upper: &mut [f64]) {
        (**self).constraint_bounds(lower, upper)
    }
    fn initial_point(&self, w: &mut [f64]) {
        (**self).initial_point(w)
    }
    fn initial_multipliers(&self, constraint: &mut [f64], bound: &mut [f64]) -> bool {
        (**self).initial_multipliers(constraint, bound)
    }
    fn complete(&mut self, w: &mut [f64]) {
        (**self).complete(w)
    }
    fn objective(&mut self, w: &[f64]) -> Result<f64, EvalError> {
        (**self).objective(w)
    }
    fn gradient_pattern(&self) -> Vec<usize> {
        (**self).gradient_pattern()
    }
    fn gradient(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        (**self).gradient(w, values)
    }
    fn constraints(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        (**self).constraints(w, values)
    }
    fn jacobian_pattern(&self) -> Pattern {
        (**self).jacobian_pattern()
    }
    fn jacobian(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        (**self).jacobian(w, values)
    }
    fn hessian_pattern(&self) -> Option<Pattern> {
        (**self).hessian_pattern()
    }
    fn hessian(
        &mut self,
        w: &[f64],
        objective_factor: f64,
        multipliers: &[f64],
        values: &mut [f64],
    ) -> Result<(), EvalError> {
        (**self).hessian(w, objective_factor, multipliers, values)
    }
    fn stages(&self) -> Option<StageLayout> {
        (**self).stages()
    }
    fn variable_scales(&self, scales: &mut [f64]) {
        (**self).variable_scales(scales)
    }
    fn constraint_scales(&self, scales: &mut [f64]) {
        (**self).constraint_scales(scales)
    }
    fn objective_scale(&self) -> f64 {
        (**self).objective_scale()
    }
}

/// Whether `v` counts as a present bound.
pub(crate) fn finite_bound(v: f64) -> bool {
    v.is_finite() && v.abs() < INFINITE_BOUND
}
