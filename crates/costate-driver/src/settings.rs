//! The file's `solve` block plus the caller's overrides, as the solver's settings.

use costate_check::settings::{ControlShape, HessianMode, Integrator};
use costate_solve::integrate::{ControlShape as Shape, Method};
use costate_solve::transcribe::OcpSettings;
use costate_solve::HessianMode as SqpHessian;

use crate::Loaded;

/// Settings that override the file's `solve` block (the CLI's `--intervals`, the editor's
/// `solveIntervals`).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Overrides {
    pub intervals: Option<usize>,
}

pub fn ocp_settings(loaded: &Loaded, overrides: &Overrides) -> OcpSettings {
    let s = &loaded.lowered.settings;
    let mut settings = OcpSettings {
        intervals: overrides.intervals.unwrap_or(s.intervals),
        ..OcpSettings::default()
    };
    settings.integrator.method = match s.integrator {
        Integrator::Rk4 => Method::Rk4,
        Integrator::Radau => Method::RadauIIA,
    };
    settings.integrator.substeps = s.substeps;
    settings.integrator.controls = match s.control_shape {
        ControlShape::Constant => Shape::Constant,
        ControlShape::Linear => Shape::Linear,
    };
    settings.sqp.stationarity_tolerance = s.tolerance;
    settings.sqp.feasibility_tolerance = s.tolerance;
    settings.sqp.complementarity_tolerance = s.tolerance;
    settings.sqp.max_iterations = s.iteration_limit as u64;
    settings.sqp.time_limit = s.time_limit.unwrap_or(f64::INFINITY);
    settings.sqp.hessian = match s.hessian {
        HessianMode::Bfgs => SqpHessian::Bfgs,
        HessianMode::Exact => SqpHessian::Auto,
    };
    settings
}
