//! The typed view of `solve { key = value }`.
//!
//! Owns the setting keys (names of our own), their defaults and valid ranges. The checker reads
//! the block, validates each entry against [`KEYS`] and fills [`SolveSettings`]; the lowering and
//! the solver read the struct and never the raw block.
//!
//! | key | value | default | meaning |
//! | --- | --- | --- | --- |
//! | `intervals` | integer >= 1 | 50 | shooting intervals over the horizon |
//! | `integrator` | `rk4` or `radau` | `rk4` | integration scheme inside an interval |
//! | `substeps` | integer >= 1 | 1 | integrator steps per interval |
//! | `control_shape` | `constant` or `linear` | `constant` | control parametrisation per interval |
//! | `tolerance` | 1e-12 ..= 1e-2 | 1e-6 | optimality and feasibility tolerance of the SQP (relative, on scaled conditions) |
//! | `iteration_limit` | integer >= 1 | 200 | SQP iterations before giving up |
//! | `time_limit` | time > 0 (bare: seconds) | none | wall-clock budget of the solve, in s |
//! | `hessian` | `bfgs` or `exact` | `exact` | Hessian of the Lagrangian: quasi-Newton or exact |

/// Integration scheme inside one shooting interval.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Integrator {
    /// Classical explicit Runge-Kutta of order 4.
    Rk4,
    /// Implicit Radau IIA (for stiff dynamics).
    Radau,
}

/// How a control varies within one interval.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ControlShape {
    /// Piecewise constant.
    Constant,
    /// Piecewise linear and continuous.
    Linear,
}

/// Which Hessian of the Lagrangian the SQP uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum HessianMode {
    /// Damped BFGS updates.
    Bfgs,
    /// Exact second derivatives.
    Exact,
}

/// Validated `solve` settings; every field holds its default unless the file set it.
#[derive(Clone, Debug, PartialEq)]
pub struct SolveSettings {
    /// Number of shooting intervals (>= 1). Default 50.
    pub intervals: usize,
    /// Default [`Integrator::Rk4`].
    pub integrator: Integrator,
    /// Integrator steps per interval (>= 1). Default 1.
    pub substeps: usize,
    /// Default [`ControlShape::Constant`].
    pub control_shape: ControlShape,
    /// SQP tolerance (> 0). Default 1e-6.
    pub tolerance: f64,
    /// SQP iteration limit (>= 1). Default 200.
    pub iteration_limit: usize,
    /// Wall-clock limit in seconds (> 0); `None` for no limit. Default `None`.
    pub time_limit: Option<f64>,
    /// Default [`HessianMode::Exact`].
    pub hessian: HessianMode,
}

impl Default for SolveSettings {
    fn default() -> Self {
        SolveSettings {
            intervals: 50,
            integrator: Integrator::Rk4,
            substeps: 1,
            control_shape: ControlShape::Constant,
            tolerance: 1e-6,
            iteration_limit: 200,
            time_limit: None,
            hessian: HessianMode::Exact,
        }
    }
}

/// What a key accepts.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ValueKind {
    /// An integer at least this large.
    Integer { min: i64 },
    /// A number in `lo ..= hi` (`lo > 0`): outside it the setting has no sensible meaning
    /// (a tolerance of 1 calls any point optimal).
    Between { lo: f64, hi: f64 },
    /// A positive duration; bare numbers are seconds.
    Duration,
    /// One of these names.
    Choice(&'static [&'static str]),
}

/// One documented key.
#[derive(Clone, Copy, Debug)]
pub struct KeyDef {
    pub key: &'static str,
    pub kind: ValueKind,
    /// Default as shown to the user.
    pub default: &'static str,
    pub doc: &'static str,
}

/// Every `solve` key; see the module docs.
pub const KEYS: &[KeyDef] = &[
    KeyDef {
        key: "intervals",
        kind: ValueKind::Integer { min: 1 },
        default: "50",
        doc: "shooting intervals over the horizon",
    },
    KeyDef {
        key: "integrator",
        kind: ValueKind::Choice(&["rk4", "radau"]),
        default: "rk4",
        doc: "integration scheme inside an interval",
    },
    KeyDef {
        key: "substeps",
        kind: ValueKind::Integer { min: 1 },
        default: "1",
        doc: "integrator steps per interval",
    },
    KeyDef {
        key: "control_shape",
        kind: ValueKind::Choice(&["constant", "linear"]),
        default: "constant",
        doc: "control parametrisation per interval",
    },
    KeyDef {
        key: "tolerance",
        kind: ValueKind::Between { lo: 1e-12, hi: 1e-2 },
        default: "1e-6",
        doc: "optimality and feasibility tolerance of the SQP",
    },
    KeyDef {
        key: "iteration_limit",
        kind: ValueKind::Integer { min: 1 },
        default: "200",
        doc: "SQP iterations before giving up",
    },
    KeyDef {
        key: "time_limit",
        kind: ValueKind::Duration,
        default: "none",
        doc: "wall-clock budget of the solve (bare numbers are seconds)",
    },
    KeyDef {
        key: "hessian",
        kind: ValueKind::Choice(&["bfgs", "exact"]),
        default: "exact",
        doc: "Hessian of the Lagrangian: quasi-Newton updates or exact second derivatives",
    },
];

/// The definition of `key`, if it exists.
pub fn key_def(key: &str) -> Option<&'static KeyDef> {
    KEYS.iter().find(|k| k.key == key)
}

/// A validated value, ready to store with [`SolveSettings::set`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Value<'a> {
    Number(f64),
    Choice(&'a str),
}

impl SolveSettings {
    /// Stores an already validated value under `key`; ignores keys or values it does not know
    /// (validation is the checker's job, so that cannot happen for checked input).
    pub fn set(&mut self, key: &str, value: Value<'_>) {
        match (key, value) {
            ("intervals", Value::Number(n)) => self.intervals = n as usize,
            ("substeps", Value::Number(n)) => self.substeps = n as usize,
            ("iteration_limit", Value::Number(n)) => self.iteration_limit = n as usize,
            ("tolerance", Value::Number(n)) => self.tolerance = n,
            ("time_limit", Value::Number(n)) => self.time_limit = Some(n),
            ("integrator", Value::Choice("rk4")) => self.integrator = Integrator::Rk4,
            ("integrator", Value::Choice("radau")) => self.integrator = Integrator::Radau,
            ("control_shape", Value::Choice("constant")) => {
                self.control_shape = ControlShape::Constant
            }
            ("control_shape", Value::Choice("linear")) => self.control_shape = ControlShape::Linear,
            ("hessian", Value::Choice("bfgs")) => self.hessian = HessianMode::Bfgs,
            ("hessian", Value::Choice("exact")) => self.hessian = HessianMode::Exact,
            _ => {}
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_choice_key_can_be_set_to_each_of_its_values() {
        for k in KEYS {
            if let ValueKind::Choice(options) = k.kind {
                for o in options {
                    let mut s = SolveSettings::default();
                    s.set(k.key, Value::Choice(o));
                    let shown = format!("{s:?}").to_lowercase();
                    assert!(shown.contains(o), "{}={} not stored: {shown}", k.key, o);
                }
            }
        }
    }
}
