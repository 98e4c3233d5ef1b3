//! Settings of the SQP solver: one flat struct, every field documented with its unit and
//! default, checked by [`SqpSettings::validate`].
//!
//! Owns nothing else. Tolerances apply to *scaled* quantities (see `sqp.rs`): variables
//! divided by their scale, constraint rows by theirs, the objective by its scale (and further
//! reduced when its gradient at the start is large).

use std::fmt;

/// Where the QP Hessian comes from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum HessianMode {
    /// The exact Lagrangian Hessian when the problem provides one (the multiple-shooting
    /// transcription does with RK4), else block BFGS (Radau IIA).
    Auto,
    /// The exact Lagrangian Hessian, each stage block made positive definite on its own
    /// (see `hessian.rs`). A problem without one is an input error.
    Exact,
    /// Damped block-diagonal BFGS built from gradient differences.
    Bfgs,
}

/// Solver settings. `SqpSettings::default()` is a sensible start for every problem.
#[derive(Clone, Debug, PartialEq)]
pub struct SqpSettings {
    /// Largest accepted stationarity residual `|grad L|_inf / max(1, |grad f|_inf)` in scaled
    /// units (dimensionless). Default `1e-8`.
    pub stationarity_tolerance: f64,
    /// Largest accepted violation of any scaled constraint row (dimensionless). Default `1e-8`.
    pub feasibility_tolerance: f64,
    /// Largest accepted product of an inequality multiplier and its row's slack, scaled
    /// (dimensionless). Default `1e-8`.
    pub complementarity_tolerance: f64,
    /// Factor by which the stationarity and complementarity tolerances are loosened for
    /// "solved to reduced accuracy", used only when the solver can make no further progress;
    /// the feasibility tolerance is loosened by at most 10. Default `1e3`.
    pub reduced_accuracy_factor: f64,
    /// Largest number of SQP iterations (QP solves with their line search). Default 500.
    pub max_iterations: u64,
    /// Wall-clock limit in seconds; checked after each iteration. Default: none (`inf`).
    pub time_limit: f64,
    /// Where the QP Hessian comes from. Default [`HessianMode::Auto`].
    pub hessian: HessianMode,
    /// Powell damping threshold of the BFGS update: the damped curvature `s'r` is at least
    /// this fraction of `s'Bs` (dimensionless, in (0, 1)). Default `0.2`.
    pub bfgs_damping: f64,
    /// Eigenvalues of an exact Hessian block below this fraction of the block's largest
    /// (at least 1) are raised to it (dimensionless, in (0, 1)). Default `1e-8`.
    pub convexity_floor: f64,
    /// Sufficient-decrease fraction of the line search on the merit function (in (0, 0.5)).
    /// Default `1e-4`.
    pub sufficient_decrease: f64,
    /// Step-length reduction factor when a trial point is rejected (in (0, 1)). Default `0.5`.
    pub backtrack_factor: f64,
    /// Smallest step length tried before the line search gives up (in (0, 1)). Default `1e-10`.
    pub min_step: f64,
    /// Try a second-order correction step when the full step is rejected (against the
    /// Maratos effect). Default `true`.
    pub second_order_correction: bool,
    /// Initial weight of the constraint violation in the l1 merit function (scaled units,
    /// > 0). Default `1`.
    pub penalty_start: f64,
    /// Largest penalty weight (> `penalty_start`). Default `1e10`.
    pub penalty_max: f64,
    /// A point whose constraint violation is above `feasibility_tolerance` is reported
    /// locally infeasible when the steepest-descent-like step for the violation alone (a
    /// proximal QP on the l1 violation) is shorter than this (scaled, inf-norm). Default `1e-7`.
    pub infeasibility_tolerance: f64,
    /// When a QP multiplier exceeds this (scaled, inf-norm) the linearised constraints are
    /// taken as nearly inconsistent and the step comes from the elastic QP. Default `1e6`.
    pub elastic_multiplier_limit: f64,
    /// Use the problem's variable, constraint and objective scales. Default `true`.
    pub use_scaling: bool,
    /// Scale the objective so its gradient at the start has this size (inf-norm, after the
    /// problem's own variable and objective scales): a cost of 1e-9 s or of 1e9 J is then
    /// solved like one of order one. `inf` keeps the problem's own objective scale.
    /// Default `1`.
    pub objective_gradient_target: f64,
    /// Feasibility and gap tolerance of the QP solver (relative). Default `1e-10`.
    pub qp_tolerance: f64,
    /// Iteration limit passed to the QP solver. Default 200.
    pub qp_max_iterations: u32,
}

impl Default for SqpSettings {
    fn default() -> Self {
        SqpSettings {
            stationarity_tolerance: 1e-8,
            feasibility_tolerance: 1e-8,
            complementarity_tolerance: 1e-8,
            reduced_accuracy_factor: 1e3,
            max_iterations: 500,
            time_limit: f64::INFINITY,
            hessian: HessianMode::Auto,
            bfgs_damping: 0.2,
            convexity_floor: 1e-8,
            sufficient_decrease: 1e-4,
            backtrack_factor: 0.5,
            min_step: 1e-10,
            second_order_correction: true,
            penalty_start: 1.0,
            penalty_max: 1e10,
            infeasibility_tolerance: 1e-7,
            elastic_multiplier_limit: 1e6,
            use_scaling: true,
            objective_gradient_target: 1.0,
            qp_tolerance: 1e-10,
            qp_max_iterations: 200,
        }
    }
}

/// An invalid setting: which field and why.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SettingsError {
    pub field: &'static str,
    pub reason: &'static str,
}

impl fmt::Display for SettingsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "invalid setting `{}`: {}", self.field, self.reason)
    }
}

impl std::error::Error for SettingsError {}

impl SqpSettings {
    /// Every field inside its documented range.
    pub fn validate(&self) -> Result<(), SettingsError> {
        let err = |field, reason| Err(SettingsError { field, reason });
        let positive = [
            ("stationarity_tolerance", self.stationarity_tolerance),
            ("feasibility_tolerance", self.feasibility_tolerance),
            ("complementarity_tolerance", self.complementarity_tolerance),
            ("penalty_start", self.penalty_start),
            ("penalty_max", self.penalty_max),
            ("infeasibility_tolerance", self.infeasibility_tolerance),
            ("elastic_multiplier_limit", self.elastic_multiplier_limit),
            ("qp_tolerance", self.qp_tolerance),
        ];
        for (field, v) in positive {
            if !(v.is_finite() && v > 0.0) {
                return err(field, "must be positive and finite");
            }
        }
        let unit_open = [
            ("bfgs_damping", self.bfgs_damping),
            ("backtrack_factor", self.backtrack_factor),
            ("min_step", self.min_step),
            ("convexity_floor", self.convexity_floor),
        ];
        for (field, v) in unit_open {
            if !(v > 0.0 && v < 1.0) {
                return err(field, "must lie strictly between 0 and 1");
            }
        }
        if !(self.sufficient_decrease > 0.0 && self.sufficient_decrease < 0.5) {
            return err("sufficient_decrease", "must lie strictly between 0 and 0.5");
        }
        if !(self.reduced_accuracy_factor.is_finite() && self.reduced_accuracy_factor >= 1.0) {
            return err("reduced_accuracy_factor", "must be finite and at least 1");
        }
        if self.penalty_max <= self.penalty_start {
            return err("penalty_max", "must exceed penalty_start");
        }
        if self.time_limit.is_nan() || self.time_limit <= 0.0 {
            return err("time_limit", "must be positive (inf for none)");
        }
        if self.objective_gradient_target.is_nan() || self.objective_gradient_target <= 0.0 {
            return err("objective_gradient_target", "must be positive (inf to disable)");
        }
        if self.max_iterations == 0 {
            return err("max_iterations", "must be at least 1");
        }
        if self.qp_max_iterations == 0 {
            return err("qp_max_iterations", "must be at least 1");
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_valid_and_bad_values_are_named() {
        assert_eq!(SqpSettings::default().validate(), Ok(()));
        let s = SqpSettings { backtrack_factor: 1.0, ..SqpSettings::default() };
        assert_eq!(s.validate().unwrap_err().field, "backtrack_factor");
        let s = SqpSettings { feasibility_tolerance: f64::NAN, ..SqpSettings::default() };
        assert_eq!(s.validate().unwrap_err().field, "feasibility_tolerance");
        let s = SqpSettings { time_limit: 0.0, ..SqpSettings::default() };
        assert_eq!(s.validate().unwrap_err().field, "time_limit");
    }
}
