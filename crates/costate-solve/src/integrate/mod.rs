//! Integrators over one shooting interval, with the exact derivatives of the discrete map.
//!
//! Owns: the fixed-step schemes used by the multiple-shooting transcription (explicit RK4 with
//! substeps, and the 3-stage Radau IIA collocation method of order 5 for stiff dynamics), the
//! quadrature of the integrands alongside the states, forward sensitivities of the *discrete*
//! scheme built from the symbolic Jacobians of the compiled functions, and the error values for
//! non-finite evaluations and failed Newton solves.
//!
//! Must not: know the NLP layout (the transcription scatters the results), use finite
//! differences, allocate in the stepping loop, or panic on bad numbers.
//!
//! # The map
//!
//! On the interval `[t_s, t_s + h]`, split into `M = substeps` equal steps of length `h / M`,
//! the integrator advances `x' = f(t, x, u(t), p)` and `q' = l(t, x, u(t), p)` from `x(t_s) = x0`,
//! `q(t_s) = 0`. The control is either constant (`u(t) = u_start`) or linear in time between
//! `u_start` at `t_s` and `u_end` at `t_s + h`. A stage at fraction `θ = (k + c_i) / M` of the
//! interval is evaluated at `t = t_s + θ h` with `u = u_start + θ (u_end - u_start)`, so `θ` does
//! not depend on `t_s` or `h` and the time derivatives stay exact.
//!
//! # Sensitivity layout
//!
//! [`IntervalOutput::sensitivities`] is the dense `(nx + nq) x n_cols` Jacobian of
//! `(x_end, q)` (rows `0..nx` then `nx..nx+nq`) with respect to the columns described by
//! [`SensitivityColumns`]: `[x0 (nx), u_start (nu), u_end (nu, linear controls only), p (np),
//! t_s, h]`.

mod dense;
mod explicit;
mod radau;

use std::fmt;

use costate_model::{Function, NodeId, Ocp, RunningLayout, Workspace};
use nalgebra::DMatrix;

use dense::DenseLu;
pub(crate) use explicit::tableau as rk4_tableau;

/// The integration scheme used on every step of an interval.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Method {
    /// The classical explicit Runge-Kutta method of order 4.
    #[default]
    Rk4,
    /// The 3-stage Radau IIA collocation method: implicit, L-stable, order 5 at step ends.
    /// Stage equations are solved by Newton's method.
    RadauIIA,
}

/// How the control varies inside a shooting interval.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum ControlShape {
    /// `u(t) = u_start` on the whole interval.
    #[default]
    Constant,
    /// `u` interpolated linearly in time from `u_start` to `u_end`.
    Linear,
}

/// Settings of the interval integrator. Check them with [`IntegratorSettings::validate`]
/// ([`Integrator::new`] does).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct IntegratorSettings {
    /// Integration scheme. Default: [`Method::Rk4`].
    pub method: Method,
    /// Number of equal steps per shooting interval, at least 1. Default: 4.
    pub substeps: usize,
    /// Control shape inside an interval. Default: [`ControlShape::Constant`].
    pub controls: ControlShape,
    /// Radau IIA only: Newton stops when the estimated error of the stage values, measured
    /// component-wise relative to `1 + |x|` at the step start (dimensionless), is below this.
    /// Must be positive and finite. Default: 1e-12 (near round-off, so the sensitivities, which
    /// are exact for converged stages, match the computed map).
    pub newton_tolerance: f64,
    /// Radau IIA only: iterations allowed per Newton attempt (a simplified Newton attempt with
    /// the Jacobian at the step start, then, if that fails, one with a fresh Jacobian at every
    /// iteration), at least 1. Default: 12.
    pub newton_max_iterations: usize,
}

impl Default for IntegratorSettings {
    fn default() -> Self {
        IntegratorSettings {
            method: Method::Rk4,
            substeps: 4,
            controls: ControlShape::Constant,
            newton_tolerance: 1e-12,
            newton_max_iterations: 12,
        }
    }
}

impl IntegratorSettings {
    pub fn validate(&self) -> Result<(), SetupError> {
        if self.substeps == 0 {
            return Err(SetupError::InvalidSetting {
                name: "substeps",
                reason: "must be at least 1",
            });
        }
        if !(self.newton_tolerance.is_finite() && self.newton_tolerance > 0.0) {
            return Err(SetupError::InvalidSetting {
                name: "newton_tolerance",
                reason: "must be positive and finite",
            });
        }
        if self.newton_max_iterations == 0 {
            return Err(SetupError::InvalidSetting {
                name: "newton_max_iterations",
                reason: "must be at least 1",
            });
        }
        Ok(())
    }
}

/// Which of the two integrated functions an error refers to.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum OdeFunction {
    /// The dynamics `f(t, x, u, p)`; rows are state indices.
    Dynamics,
    /// The integrands `l(t, x, u, p)`; rows are integral indices.
    Integrands,
}

impl fmt::Display for OdeFunction {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            OdeFunction::Dynamics => "dynamics",
            OdeFunction::Integrands => "integrand",
        })
    }
}

/// What was not finite.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum NonFinitePart {
    /// The function value.
    Value,
    /// Its derivative with respect to running input `input` (`[t, x.., u.., p..]`).
    Derivative { input: usize },
    /// The integrated value at the interval end (overflow while accumulating).
    Integrated,
    /// A sensitivity of the integrated value (overflow while accumulating).
    Sensitivity,
}

/// Why a Radau IIA Newton solve failed.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum NewtonFailure {
    /// Neither attempt met the tolerance within the iteration limit; `increment` is the last
    /// scaled stage increment of the second attempt.
    NotConverged { iterations: usize, increment: f64 },
    /// The stage matrix `I - h (A ⊗ J)` was singular (zero or non-finite pivot).
    SingularMatrix,
    /// A Newton iterate left the domain of a function.
    NotFinite { function: OdeFunction, row: usize },
}

/// A failure while integrating one interval. Never a panic: the transcription turns these
/// into a "function evaluation failure" status naming the function, row, interval and time.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum IntegrationError {
    /// `function` produced a NaN or infinity in output `row` at time `time`. For a
    /// non-finite value, `origin` is the graph node of the operation that first produced a
    /// non-finite result from finite operands (e.g. the `sqrt` of a negative number).
    NotFinite {
        function: OdeFunction,
        row: usize,
        time: f64,
        part: NonFinitePart,
        origin: Option<NodeId>,
    },
    /// The Radau IIA stage equations of the step starting at `time` could not be solved.
    Newton { time: f64, failure: NewtonFailure },
    /// An argument slice has the wrong length.
    Dimension { argument: &'static str, expected: usize, found: usize },
    /// `t_start` or `h` is not finite.
    NonFiniteInterval { t_start: f64, h: f64 },
}

impl fmt::Display for IntegrationError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            IntegrationError::NotFinite { function, row, time, part, .. } => {
                write!(f, "{function} row {row} is not finite at t = {time}")?;
                match part {
                    NonFinitePart::Value => Ok(()),
                    NonFinitePart::Derivative { input } => {
                        write!(f, " (derivative with respect to input {input})")
                    }
                    NonFinitePart::Integrated => f.write_str(" (integrated value overflowed)"),
                    NonFinitePart::Sensitivity => f.write_str(" (sensitivity overflowed)"),
                }
            }
            IntegrationError::Newton { time, failure } => {
                write!(f, "implicit stage equations unsolved in the step at t = {time}: ")?;
                match failure {
                    NewtonFailure::NotConverged { iterations, increment } => write!(
                        f,
                        "no convergence after {iterations} iterations (last increment {increment:e})"
                    ),
                    NewtonFailure::SingularMatrix => f.write_str("singular stage matrix"),
                    NewtonFailure::NotFinite { function, row } => {
                        write!(f, "{function} row {row} not finite at an iterate")
                    }
                }
            }
            IntegrationError::Dimension { argument, expected, found } => {
                write!(f, "`{argument}` has {found} values, expected {expected}")
            }
            IntegrationError::NonFiniteInterval { t_start, h } => {
                write!(f, "interval start {t_start} or length {h} is not finite")
            }
        }
    }
}

impl std::error::Error for IntegrationError {}

/// Invalid settings or functions of the wrong shape, found by [`Integrator::new`].
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum SetupError {
    InvalidSetting {
        name: &'static str,
        reason: &'static str,
    },
    FunctionShape {
        function: OdeFunction,
        expected_inputs: usize,
        found_inputs: usize,
        expected_outputs: Option<usize>,
        found_outputs: usize,
    },
}

impl fmt::Display for SetupError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            SetupError::InvalidSetting { name, reason } => write!(f, "setting `{name}` {reason}"),
            SetupError::FunctionShape {
                function,
                expected_inputs,
                found_inputs,
                expected_outputs,
                found_outputs,
            } => {
                write!(
                    f,
                    "{function} function has {found_inputs} inputs and {found_outputs} outputs, \
                     expected {expected_inputs} inputs"
                )?;
                if let Some(n) = expected_outputs {
                    write!(f, " and {n} outputs")?;
                }
                Ok(())
            }
        }
    }
}

impl std::error::Error for SetupError {}

/// Column offsets of the sensitivity matrix: `[x0, u_start, u_end (linear only), p, t_s, h]`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SensitivityColumns {
    pub nx: usize,
    pub nu: usize,
    pub np: usize,
    /// Whether the `u_end` block is present ([`ControlShape::Linear`]).
    pub linear: bool,
}

impl SensitivityColumns {
    pub fn x0(&self, i: usize) -> usize {
        i
    }
    pub fn u_start(&self, i: usize) -> usize {
        self.nx + i
    }
    /// `None` for piecewise-constant controls.
    pub fn u_end(&self, i: usize) -> Option<usize> {
        self.linear.then(|| self.nx + self.nu + i)
    }
    pub fn p(&self, i: usize) -> usize {
        self.nx + self.n_controls() + i
    }
    pub fn t_start(&self) -> usize {
        self.nx + self.n_controls() + self.np
    }
    pub fn h(&self) -> usize {
        self.t_start() + 1
    }
    /// Number of columns.
    pub fn len(&self) -> usize {
        self.h() + 1
    }
    pub fn is_empty(&self) -> bool {
        false
    }
    /// Control columns: `nu`, or `2 nu` for linear controls.
    fn n_controls(&self) -> usize {
        if self.linear {
            2 * self.nu
        } else {
            self.nu
        }
    }
}

/// The data of one interval.
#[derive(Clone, Copy, Debug)]
pub struct IntervalInput<'a> {
    /// State at the interval start, `nx` values.
    pub x0: &'a [f64],
    /// Control at the interval start (the constant value for piecewise-constant controls).
    pub u_start: &'a [f64],
    /// Control at the interval end; read only for [`ControlShape::Linear`] (pass `&[]`
    /// otherwise).
    pub u_end: &'a [f64],
    /// Parameters, `np` values.
    pub p: &'a [f64],
    /// Interval start time.
    pub t_start: f64,
    /// Interval length (any finite value; negative integrates backwards).
    pub h: f64,
}

/// Results of one interval; create with [`Integrator::new_output`] and reuse.
#[derive(Clone, Debug, PartialEq)]
pub struct IntervalOutput {
    /// `x(t_s + h)`.
    pub x_end: Vec<f64>,
    /// The integrals of the integrands over the interval.
    pub q: Vec<f64>,
    /// `(nx + nq) x n_cols` Jacobian of `(x_end, q)`, columns as in [`SensitivityColumns`].
    /// Written only by calls that ask for sensitivities.
    pub sensitivities: DMatrix<f64>,
}

/// A compiled function with its scratch memory and Jacobian pattern, checked for non-finite
/// results at every evaluation.
#[derive(Clone, Debug)]
pub(crate) struct Evaluator {
    which: OdeFunction,
    fun: Function,
    ws: Workspace,
    pattern: Vec<(usize, usize)>,
}

impl Evaluator {
    fn new(which: OdeFunction, fun: &Function) -> Self {
        Evaluator {
            which,
            ws: fun.workspace(),
            pattern: fun.jacobian_pattern().to_vec(),
            fun: fun.clone(),
        }
    }

    pub(crate) fn nnz(&self) -> usize {
        self.pattern.len()
    }

    pub(crate) fn pattern(&self) -> &[(usize, usize)] {
        &self.pattern
    }

    pub(crate) fn value(
        &mut self,
        input: &[f64],
        out: &mut [f64],
        time: f64,
    ) -> Result<(), IntegrationError> {
        self.fun.eval(input, out, &mut self.ws);
        self.check_value(input, out, time)
    }

    /// Value and Jacobian from one pass of the Jacobian tape.
    pub(crate) fn value_and_jacobian(
        &mut self,
        input: &[f64],
        out: &mut [f64],
        values: &mut [f64],
        time: f64,
    ) -> Result<(), IntegrationError> {
        self.fun.eval_with_jacobian(input, out, values, &mut self.ws);
        // A non-finite value usually makes its derivatives non-finite too; the value is the
        // more useful report, so it is checked first.
        self.check_value(input, out, time)?;
        match values.iter().position(|v| !v.is_finite()) {
            None => Ok(()),
            Some(k) => {
                let (row, col) = self.pattern[k];
                Err(IntegrationError::NotFinite {
                    function: self.which,
                    row,
                    time,
                    part: NonFinitePart::Derivative { input: col },
                    origin: None,
                })
            }
        }
    }

    fn check_value(
        &mut self,
        input: &[f64],
        out: &[f64],
        time: f64,
    ) -> Result<(), IntegrationError> {
        let Some(row) = out.iter().position(|v| !v.is_finite()) else {
            return Ok(());
        };
        // Off the hot path: one more evaluation to find the operation that failed.
        let origin = self.fun.first_non_finite(input, &mut self.ws).map(|nf| nf.origin);
        Err(IntegrationError::NotFinite {
            function: self.which,
            row,
            time,
            part: NonFinitePart::Value,
            origin,
        })
    }
}

/// Dimensions and sensitivity columns shared by the schemes.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Dims {
    pub(crate) nx: usize,
    pub(crate) nu: usize,
    pub(crate) np: usize,
    pub(crate) nq: usize,
    /// Number of sensitivity columns.
    pub(crate) nw: usize,
    pub(crate) cols: SensitivityColumns,
    pub(crate) layout: RunningLayout,
}

/// One interval's fixed data as seen by a step.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Interval<'a> {
    pub(crate) input: IntervalInput<'a>,
    pub(crate) substeps: usize,
    pub(crate) linear: bool,
    pub(crate) sens: bool,
}

impl Interval<'_> {
    /// Fraction of the interval at stage abscissa `c` of step `k`.
    pub(crate) fn theta(&self, k: usize, c: f64) -> f64 {
        (k as f64 + c) / self.substeps as f64
    }

    /// Write the running input `[t, x, u(θ), p]` for fraction `theta` with state `x`.
    pub(crate) fn running_input(&self, theta: f64, x: &[f64], out: &mut [f64]) -> f64 {
        let IntervalInput { u_start, u_end, p, t_start, h, .. } = self.input;
        let t = t_start + theta * h;
        let nx = x.len();
        let nu = u_start.len();
        out[0] = t;
        out[1..1 + nx].copy_from_slice(x);
        let u = &mut out[1 + nx..1 + nx + nu];
        if self.linear {
            for ((ui, a), b) in u.iter_mut().zip(u_start).zip(u_end) {
                *ui = a + theta * (b - a);
            }
        } else {
            u.copy_from_slice(u_start);
        }
        out[1 + nx + nu..].copy_from_slice(p);
        t
    }
}

/// `out (rows x nw) = J · D`, where `J` is a running-function Jacobian (`values` in the order
/// of `pattern`) and `D` the derivative of the running input `[t, x, u(θ), p]` with respect to
/// the sensitivity columns: `dt = e_ts + θ e_h`, `dx = dx` (row-major `nx x nw`),
/// `du = e_us` (constant) or `(1-θ) e_us + θ e_ue` (linear), `dp = e_p`. `out` is overwritten.
pub(crate) fn apply_jacobian(
    dims: &Dims,
    pattern: &[(usize, usize)],
    values: &[f64],
    theta: f64,
    dx: &[f64],
    out: &mut [f64],
) {
    let nw = dims.nw;
    let cols = &dims.cols;
    let (nx, nu) = (dims.nx, dims.nu);
    out.fill(0.0);
    for (&(r, c), &v) in pattern.iter().zip(values) {
        let row = &mut out[r * nw..(r + 1) * nw];
        if c == RunningLayout::T {
            row[cols.t_start()] += v;
            row[cols.h()] += v * theta;
        } else if c <= nx {
            let src = &dx[(c - 1) * nw..c * nw];
            for (o, s) in row.iter_mut().zip(src) {
                *o += v * s;
            }
        } else if c <= nx + nu {
            let i = c - 1 - nx;
            match cols.u_end(i) {
                Some(ue) => {
                    row[cols.u_start(i)] += v * (1.0 - theta);
                    row[ue] += v * theta;
                }
                None => row[cols.u_start(i)] += v,
            }
        } else {
            row[cols.p(c - 1 - nx - nu)] += v;
        }
    }
}

/// The dense `nx x nx` state block of a running-function Jacobian, row-major, into `out`.
pub(crate) fn state_block(
    dims: &Dims,
    pattern: &[(usize, usize)],
    values: &[f64],
    out: &mut [f64],
) {
    let nx = dims.nx;
    out.fill(0.0);
    for (&(r, c), &v) in pattern.iter().zip(values) {
        if (1..=nx).contains(&c) && r < nx {
            out[r * nx + (c - 1)] = v;
        }
    }
}

/// Integrates one shooting interval at a time. Holds copies of the dynamics and integrand
/// functions and every work array, so repeated calls do not allocate.
#[derive(Clone, Debug)]
pub struct Integrator {
    settings: IntegratorSettings,
    dims: Dims,
    f: Evaluator,
    l: Evaluator,
    /// Current state and integrals.
    x: Vec<f64>,
    q: Vec<f64>,
    /// Sensitivities of `x` (`nx x nw`) and `q` (`nq x nw`), row-major.
    sx: Vec<f64>,
    sq: Vec<f64>,
    scheme: Scheme,
}

#[derive(Clone, Debug)]
enum Scheme {
    // Boxed: the work structs differ in size and an integrator lives long, so the indirection
    // costs nothing measurable.
    Explicit(Box<explicit::Work>),
    Radau(Box<radau::Work>),
}

impl Integrator {
    /// `dynamics`: running -> `layout.nx` outputs; `integrands`: running -> any number of
    /// outputs (the quadrature states). Both take the running input `[t, x.., u.., p..]`.
    pub fn new(
        dynamics: &Function,
        integrands: &Function,
        layout: RunningLayout,
        settings: IntegratorSettings,
    ) -> Result<Integrator, SetupError> {
        settings.validate()?;
        let n_in = layout.len();
        if dynamics.n_inputs() != n_in || dynamics.n_outputs() != layout.nx {
            return Err(SetupError::FunctionShape {
                function: OdeFunction::Dynamics,
                expected_inputs: n_in,
                found_inputs: dynamics.n_inputs(),
                expected_outputs: Some(layout.nx),
                found_outputs: dynamics.n_outputs(),
            });
        }
        if integrands.n_inputs() != n_in {
            return Err(SetupError::FunctionShape {
                function: OdeFunction::Integrands,
                expected_inputs: n_in,
                found_inputs: integrands.n_inputs(),
                expected_outputs: None,
                found_outputs: integrands.n_outputs(),
            });
        }
        let cols = SensitivityColumns {
            nx: layout.nx,
            nu: layout.nu,
            np: layout.np,
            linear: settings.controls == ControlShape::Linear,
        };
        let nq = integrands.n_outputs();
        let dims =
            Dims { nx: layout.nx, nu: layout.nu, np: layout.np, nq, nw: cols.len(), cols, layout };
        let f = Evaluator::new(OdeFunction::Dynamics, dynamics);
        let l = Evaluator::new(OdeFunction::Integrands, integrands);
        let scheme = match settings.method {
            Method::Rk4 => Scheme::Explicit(Box::new(explicit::Work::new(&dims, &f, &l))),
            Method::RadauIIA => Scheme::Radau(Box::new(radau::Work::new(&dims, &f, &l))),
        };
        Ok(Integrator {
            settings,
            dims,
            f,
            l,
            x: vec![0.0; dims.nx],
            q: vec![0.0; nq],
            sx: vec![0.0; dims.nx * dims.nw],
            sq: vec![0.0; nq * dims.nw],
            scheme,
        })
    }

    /// [`Integrator::new`] with the problem's dynamics and integrands.
    pub fn for_ocp(ocp: &Ocp, settings: IntegratorSettings) -> Result<Integrator, SetupError> {
        Integrator::new(&ocp.dynamics, &ocp.integrands, ocp.running_layout(), settings)
    }

    pub fn settings(&self) -> &IntegratorSettings {
        &self.settings
    }

    /// Column layout of [`IntervalOutput::sensitivities`].
    pub fn columns(&self) -> SensitivityColumns {
        self.dims.cols
    }

    /// Number of integrals (rows `nx..nx+nq` of the sensitivities).
    pub fn n_integrals(&self) -> usize {
        self.dims.nq
    }

    /// An output buffer of the right sizes, zero-filled.
    pub fn new_output(&self) -> IntervalOutput {
        let Dims { nx, nq, nw, .. } = self.dims;
        IntervalOutput {
            x_end: vec![0.0; nx],
            q: vec![0.0; nq],
            sensitivities: DMatrix::zeros(nx + nq, nw),
        }
    }

    /// Integrate one interval into `out` (sized by [`Integrator::new_output`]). With
    /// `sensitivities == false` only `x_end` and `q` are written, which is cheaper (line
    /// searches); with `true` the Jacobian is written too.
    pub fn integrate(
        &mut self,
        input: &IntervalInput<'_>,
        out: &mut IntervalOutput,
        sensitivities: bool,
    ) -> Result<(), IntegrationError> {
        self.check_input(input, out)?;
        let dims = self.dims;
        let interval = Interval {
            input: *input,
            substeps: self.settings.substeps,
            linear: dims.cols.linear,
            sens: sensitivities,
        };
        self.x.copy_from_slice(input.x0);
        self.q.fill(0.0);
        if sensitivities {
            self.sx.fill(0.0);
            for i in 0..dims.nx {
                self.sx[i * dims.nw + dims.cols.x0(i)] = 1.0;
            }
            self.sq.fill(0.0);
        }
        let mut state =
            StepState { x: &mut self.x, q: &mut self.q, sx: &mut self.sx, sq: &mut self.sq };
        for k in 0..self.settings.substeps {
            match &mut self.scheme {
                Scheme::Explicit(w) => {
                    explicit::step(&dims, &interval, k, &mut self.f, &mut self.l, w, &mut state)?
                }
                Scheme::Radau(w) => radau::step(
                    &dims,
                    &interval,
                    &self.settings,
                    k,
                    &mut self.f,
                    &mut self.l,
                    w,
                    &mut state,
                )?,
            }
        }
        let t_end = input.t_start + input.h;
        check_finite(&self.x, OdeFunction::Dynamics, t_end, NonFinitePart::Integrated, 1)?;
        check_finite(&self.q, OdeFunction::Integrands, t_end, NonFinitePart::Integrated, 1)?;
        out.x_end.copy_from_slice(&self.x);
        out.q.copy_from_slice(&self.q);
        if sensitivities {
            let nw = dims.nw;
            check_finite(&self.sx, OdeFunction::Dynamics, t_end, NonFinitePart::Sensitivity, nw)?;
            check_finite(&self.sq, OdeFunction::Integrands, t_end, NonFinitePart::Sensitivity, nw)?;
            for (r, row) in self.sx.chunks_exact(nw).chain(self.sq.chunks_exact(nw)).enumerate() {
                for (c, v) in row.iter().enumerate() {
                    out.sensitivities[(r, c)] = *v;
                }
            }
        }
        Ok(())
    }

    fn check_input(
        &self,
        input: &IntervalInput<'_>,
        out: &IntervalOutput,
    ) -> Result<(), IntegrationError> {
        let d = &self.dims;
        let u_end_len = if d.cols.linear { d.nu } else { input.u_end.len() };
        let nw = d.nw;
        let checks: [(&'static str, usize, usize); 8] = [
            ("x0", d.nx, input.x0.len()),
            ("u_start", d.nu, input.u_start.len()),
            ("u_end", u_end_len, input.u_end.len()),
            ("p", d.np, input.p.len()),
            ("out.x_end", d.nx, out.x_end.len()),
            ("out.q", d.nq, out.q.len()),
            ("out.sensitivities rows", d.nx + d.nq, out.sensitivities.nrows()),
            ("out.sensitivities columns", nw, out.sensitivities.ncols()),
        ];
        for (argument, expected, found) in checks {
            if expected != found {
                return Err(IntegrationError::Dimension { argument, expected, found });
            }
        }
        if !(input.t_start.is_finite() && input.h.is_finite()) {
            return Err(IntegrationError::NonFiniteInterval { t_start: input.t_start, h: input.h });
        }
        Ok(())
    }
}

/// The integrated quantities a step advances in place.
pub(crate) struct StepState<'a> {
    pub(crate) x: &'a mut [f64],
    pub(crate) q: &'a mut [f64],
    pub(crate) sx: &'a mut [f64],
    pub(crate) sq: &'a mut [f64],
}

fn check_finite(
    values: &[f64],
    function: OdeFunction,
    time: f64,
    part: NonFinitePart,
    row_len: usize,
) -> Result<(), IntegrationError> {
    match values.iter().position(|v| !v.is_finite()) {
        None => Ok(()),
        Some(k) => Err(IntegrationError::NotFinite {
            function,
            row: k / row_len,
            time,
            part,
            origin: None,
        }),
    }
}
