//! The numeric optimal-control problem handed to the solver.
//!
//! Everything is in SI units and plain indices: no names, no spans. `costate-lower` builds it
//! from a checked file and keeps the source map; `costate-solve` transcribes and solves it.
//!
//! Input layouts of the compiled functions:
//! - *running* functions (dynamics, integrands, path): `[t, x_0..x_nx, u_0..u_nu, p_0..p_np]`;
//! - *endpoint* functions (objective, boundary): `[t0, tf, x(t0).., x(tf).., p.., q..]` where
//!   `q` are the values of the integrals (one per `integral(..)` occurrence, in integrand order).
//!
//! Use [`RunningLayout`] and [`EndpointLayout`] rather than computing offsets by hand.

use crate::Function;

/// Lower and upper bound; an open side is `-inf` / `+inf`. `lo == hi` fixes the value.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Bounds {
    pub lo: f64,
    pub hi: f64,
}

impl Bounds {
    pub const FREE: Bounds = Bounds { lo: f64::NEG_INFINITY, hi: f64::INFINITY };

    pub fn fixed(value: f64) -> Self {
        Bounds { lo: value, hi: value }
    }

    pub fn is_fixed(&self) -> bool {
        self.lo == self.hi
    }

    pub fn is_free(&self) -> bool {
        self.lo == f64::NEG_INFINITY && self.hi == f64::INFINITY
    }

    /// The smallest and largest values allowed by both.
    pub fn intersect(&self, other: &Bounds) -> Bounds {
        Bounds { lo: self.lo.max(other.lo), hi: self.hi.min(other.hi) }
    }
}

/// The end of the horizon: fixed, or chosen by the optimiser within bounds.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum EndTime {
    Fixed(f64),
    Free { bounds: Bounds, guess: f64 },
}

#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Horizon {
    pub start: f64,
    pub end: EndTime,
}

impl Horizon {
    /// The end time to start from: the fixed value or the guess.
    pub fn end_guess(&self) -> f64 {
        match self.end {
            EndTime::Fixed(t) => t,
            EndTime::Free { guess, .. } => guess,
        }
    }
}

#[derive(Clone, Debug, PartialEq)]
pub struct StateInfo {
    /// Bounds on the whole trajectory.
    pub bounds: Bounds,
    /// Bounds on the value at the start (fixed start: `lo == hi`).
    pub start: Bounds,
    /// Bounds on the value at the end.
    pub end: Bounds,
    /// Initial guess: a constant, if given; otherwise the solver interpolates between start and
    /// end (see [`StateInfo::guess_at`]).
    pub guess: Option<f64>,
    /// Typical magnitude, used for scaling (1 when nothing better is known).
    pub scale: f64,
}

impl StateInfo {
    /// Initial guess at the fraction `s` in [0, 1] of the horizon: the user's guess, else a
    /// linear interpolation between representative start and end values.
    pub fn guess_at(&self, s: f64) -> f64 {
        if let Some(g) = self.guess {
            return g;
        }
        let a = representative(&self.start.intersect(&self.bounds));
        let b = representative(&self.end.intersect(&self.bounds));
        a + s * (b - a)
    }
}

/// A value inside `b`: its midpoint when both sides are finite, else its finite side, else 0.
pub fn representative(b: &Bounds) -> f64 {
    match (b.lo.is_finite(), b.hi.is_finite()) {
        (true, true) => 0.5 * (b.lo + b.hi),
        (true, false) => b.lo.max(0.0),
        (false, true) => b.hi.min(0.0),
        (false, false) => 0.0,
    }
}

#[derive(Clone, Debug, PartialEq)]
pub struct ControlInfo {
    pub bounds: Bounds,
    pub guess: Option<f64>,
    pub scale: f64,
}

#[derive(Clone, Debug, PartialEq)]
pub struct ParamInfo {
    pub bounds: Bounds,
    pub guess: Option<f64>,
    pub scale: f64,
}

/// A whole optimal-control problem, in SI units. The objective is always minimised: a
/// `maximize` in the source is lowered as the negated expression with `maximize = true`, so
/// reports can show the user's sign.
#[derive(Clone, Debug)]
pub struct Ocp {
    pub horizon: Horizon,
    pub states: Vec<StateInfo>,
    pub controls: Vec<ControlInfo>,
    pub params: Vec<ParamInfo>,
    /// Number of integrals `q` (quadrature states).
    pub n_integrals: usize,
    /// Running -> `nx` outputs: time derivatives of the states.
    pub dynamics: Function,
    /// Running -> `n_integrals` outputs: the integrands.
    pub integrands: Function,
    /// Running -> path constraint rows, enforced at every node, with `path_bounds`.
    pub path: Function,
    pub path_bounds: Vec<Bounds>,
    /// Endpoint -> 1 output, minimised.
    pub objective: Function,
    pub maximize: bool,
    /// Endpoint -> boundary constraint rows with `boundary_bounds`.
    pub boundary: Function,
    pub boundary_bounds: Vec<Bounds>,
}

impl Ocp {
    pub fn running_layout(&self) -> RunningLayout {
        RunningLayout { nx: self.states.len(), nu: self.controls.len(), np: self.params.len() }
    }

    pub fn endpoint_layout(&self) -> EndpointLayout {
        EndpointLayout { nx: self.states.len(), np: self.params.len(), nq: self.n_integrals }
    }
}

/// Offsets into the input vector of running functions: `[t, x.., u.., p..]`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct RunningLayout {
    pub nx: usize,
    pub nu: usize,
    pub np: usize,
}

impl RunningLayout {
    pub const T: usize = 0;
    pub fn x(&self, i: usize) -> usize {
        1 + i
    }
    pub fn u(&self, i: usize) -> usize {
        1 + self.nx + i
    }
    pub fn p(&self, i: usize) -> usize {
        1 + self.nx + self.nu + i
    }
    pub fn len(&self) -> usize {
        1 + self.nx + self.nu + self.np
    }
    pub fn is_empty(&self) -> bool {
        false
    }
}

/// Offsets into the input vector of endpoint functions: `[t0, tf, x0.., xf.., p.., q..]`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct EndpointLayout {
    pub nx: usize,
    pub np: usize,
    pub nq: usize,
}

impl EndpointLayout {
    pub const T0: usize = 0;
    pub const TF: usize = 1;
    pub fn x0(&self, i: usize) -> usize {
        2 + i
    }
    pub fn xf(&self, i: usize) -> usize {
        2 + self.nx + i
    }
    pub fn p(&self, i: usize) -> usize {
        2 + 2 * self.nx + i
    }
    pub fn q(&self, i: usize) -> usize {
        2 + 2 * self.nx + self.np + i
    }
    pub fn len(&self) -> usize {
        2 + 2 * self.nx + self.np + self.nq
    }
    pub fn is_empty(&self) -> bool {
        false
    }
}

/// Which of the problem's functions a finding (a NaN, a violated row) comes from; with a row
/// index it is enough for the lowering's source map to point at the source line.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum FunctionKind {
    Dynamics,
    Integrands,
    Path,
    Objective,
    Boundary,
}
