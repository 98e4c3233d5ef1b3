//! [`MultipleShooting`]: an [`Ocp`] on a mesh of shooting intervals as a sparse [`Nlp`] with
//! a stage structure (one stage per node; see [`Layout`]).
//!
//! Owns the evaluation of the NLP functions from the integrator's interval maps and the
//! compiled path, boundary and objective functions, with their exact first derivatives (the
//! integrator's discrete sensitivities chained through the time scaling). Must not:
//! difference numerically or know names or source locations (failures carry
//! [`function_tag`] codes). Second derivatives come from [`super::exact`] (RK4 only).
//!
//! Time scaling: node `k` sits at the fraction `s_k` of the horizon, `t_k = t0 + s_k (tf - t0)`,
//! and interval `k` has length `h_k = (s_{k+1} - s_k)(tf - t0)`, so with a free end time
//! `dF/dtf = dF/dt_start * s_k + dF/dh * (s_{k+1} - s_k)`.

use costate_model::{
    representative, Bounds, EndTime, EndpointLayout, Function, FunctionKind, Ocp, RunningLayout,
    Workspace,
};

use crate::integrate::{
    ControlShape, IntegrationError, Integrator, IntegratorSettings, IntervalInput, IntervalOutput,
    NewtonFailure, NonFinitePart, OdeFunction,
};
use crate::nlp::{EvalError, EvalFailure, EvalPart, Nlp, Pattern};
use crate::qp::StageLayout;

use super::exact::ExactHessian;
use super::layout::{function_tag, EndpointPlacement, Layout};
use super::Trajectory;

/// Sizes below this are taken for zero when scales are read off the starting point.
const SCALE_FLOOR: f64 = 1e-300;

/// A compiled endpoint or running function with its workspace and scratch buffers.
#[derive(Clone, Debug)]
struct Eval {
    fun: Function,
    ws: Workspace,
    input: Vec<f64>,
    out: Vec<f64>,
    jac: Vec<f64>,
}

impl Eval {
    fn new(fun: &Function) -> Eval {
        Eval {
            ws: fun.workspace(),
            input: vec![0.0; fun.n_inputs()],
            out: vec![0.0; fun.n_outputs()],
            jac: vec![0.0; fun.jacobian_pattern().len()],
            fun: fun.clone(),
        }
    }

    fn value(&mut self) {
        self.fun.eval(&self.input, &mut self.out, &mut self.ws);
    }

    fn value_and_jacobian(&mut self) {
        self.fun.eval_with_jacobian(&self.input, &mut self.out, &mut self.jac, &mut self.ws);
    }

    /// The first non-finite output among `rows` (all when `None`), or derivative (reported
    /// on its row).
    fn first_bad(&self, with_jacobian: bool, rows: Option<&[bool]>) -> Option<(usize, f64)> {
        let wanted = |r: usize| rows.is_none_or(|m| m[r]);
        if let Some(r) = (0..self.out.len()).find(|&r| wanted(r) && !self.out[r].is_finite()) {
            return Some((r, self.out[r]));
        }
        if with_jacobian {
            let pattern = self.fun.jacobian_pattern();
            if let Some(e) =
                (0..self.jac.len()).find(|&e| wanted(pattern[e].0) && !self.jac[e].is_finite())
            {
                return Some((pattern[e].0, self.jac[e]));
            }
        }
        None
    }
}

/// Integration results at one point `w`, reused by every evaluation at that point.
#[derive(Clone, Debug)]
struct Cache {
    w: Vec<f64>,
    valid: bool,
    with_sensitivities: bool,
    outputs: Vec<IntervalOutput>,
}

/// A failure remembered with its full text, for the report.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct FailureNote {
    pub tag: u32,
    pub stage: Option<usize>,
    pub message: String,
}

/// The multiple-shooting NLP of an [`Ocp`]. See [`Layout`] for the variable and row order.
#[derive(Clone, Debug)]
pub struct MultipleShooting {
    layout: Layout,
    stages: StageLayout,
    /// Normalised node positions `s_0 = 0 < s_1 < .. < s_N = 1`.
    mesh: Vec<f64>,
    t0: f64,
    end: EndTime,
    integrator: Integrator,
    path: Eval,
    boundary: Eval,
    objective: Eval,
    ep: EndpointLayout,
    /// Boundary rows evaluated at node 0 (`true`) or `N`.
    boundary_at_start: Vec<bool>,
    path_bounds: Vec<Bounds>,
    boundary_bounds: Vec<Bounds>,
    var_lo: Vec<f64>,
    var_hi: Vec<f64>,
    var_scale: Vec<f64>,
    con_scale: Vec<f64>,
    start: Vec<f64>,
    /// Per interval: the variables its map depends on, as (sensitivity column, variable).
    /// The time columns are handled separately through `tf`.
    interval_vars: Vec<Vec<(usize, usize)>>,
    cache: Cache,
    pub(crate) last_failure: Option<FailureNote>,
    /// Exact Lagrangian Hessian, when the integrator allows one.
    exact: Option<ExactHessian>,
    /// Offer the exact Hessian to the solver (`true` by default).
    offer_exact: bool,
}

fn check_shape(name: &str, f: &Function, inputs: usize, outputs: usize) -> Result<(), String> {
    if f.n_inputs() != inputs || f.n_outputs() != outputs {
        return Err(format!(
            "{name} function has {} inputs and {} outputs, expected {inputs} and {outputs}",
            f.n_inputs(),
            f.n_outputs()
        ));
    }
    Ok(())
}

fn check_bounds(what: &str, b: &Bounds) -> Result<(), String> {
    if b.lo.is_nan()
        || b.hi.is_nan()
        || b.lo > b.hi
        || b.lo == f64::INFINITY
        || b.hi == f64::NEG_INFINITY
    {
        return Err(format!("{what} has empty or invalid bounds [{}, {}]", b.lo, b.hi));
    }
    Ok(())
}

fn clamp(v: f64, b: &Bounds) -> f64 {
    v.max(b.lo).min(b.hi)
}

fn positive(s: f64) -> f64 {
    if s.is_finite() && s > 0.0 {
        s
    } else {
        1.0
    }
}

/// Where an endpoint input column lives at the node the function is evaluated at: the
/// variable, or `None` (a constant, or an input the function does not read there).
pub(crate) fn endpoint_var(
    l: &Layout,
    ep: &EndpointLayout,
    at_start: bool,
    col: usize,
) -> Option<usize> {
    let k = l.endpoint_node(at_start);
    if col == EndpointLayout::T0 {
        None
    } else if col == EndpointLayout::TF {
        l.tf_at(k)
    } else if col < ep.xf(0) {
        let i = col - ep.x0(0);
        if at_start {
            Some(l.x(0, i))
        } else {
            l.placement.carried.iter().position(|&c| c == i).map(|c| l.s(k, c))
        }
    } else if col < ep.p(0) {
        (!at_start).then(|| l.x(k, col - ep.xf(0)))
    } else if col < ep.q(0) {
        Some(l.p_at(k, col - ep.p(0)))
    } else {
        (!at_start).then(|| l.q(k, col - ep.q(0)))
    }
}

/// Where a running input column lives at node `k`, with its factor (`t` moves with `tf`).
pub(crate) fn running_var(l: &Layout, mesh: &[f64], k: usize, col: usize) -> Option<(usize, f64)> {
    let rl = RunningLayout { nx: l.nx, nu: l.nu, np: l.np };
    if col == RunningLayout::T {
        l.tf_at(k).map(|t| (t, mesh[k]))
    } else if col < rl.u(0) {
        Some((l.x(k, col - rl.x(0)), 1.0))
    } else if col < rl.p(0) {
        Some((l.u_at(k, col - rl.u(0)), 1.0))
    } else {
        Some((l.p_at(k, col - rl.p(0)), 1.0))
    }
}

impl MultipleShooting {
    /// A uniform mesh of `intervals` intervals.
    pub fn new(
        ocp: &Ocp,
        intervals: usize,
        integrator: IntegratorSettings,
    ) -> Result<MultipleShooting, String> {
        if intervals == 0 {
            return Err("the number of intervals must be at least 1".into());
        }
        let mesh: Vec<f64> = (0..=intervals).map(|k| k as f64 / intervals as f64).collect();
        MultipleShooting::with_mesh(ocp, &mesh, integrator)
    }

    /// Any mesh: `fractions` are the node positions as fractions of the horizon, strictly
    /// increasing from 0 to 1 (at least two).
    pub fn with_mesh(
        ocp: &Ocp,
        fractions: &[f64],
        integrator: IntegratorSettings,
    ) -> Result<MultipleShooting, String> {
        if fractions.len() < 2
            || fractions[0] != 0.0
            || fractions[fractions.len() - 1] != 1.0
            || fractions
                .windows(2)
                .any(|w| w[1].partial_cmp(&w[0]) != Some(std::cmp::Ordering::Greater))
        {
            return Err("mesh fractions must increase strictly from 0 to 1".into());
        }
        let intervals = fractions.len() - 1;
        let rl = ocp.running_layout();
        let ep = ocp.endpoint_layout();
        let (nx, nu, np, nq) = (rl.nx, rl.nu, rl.np, ocp.n_integrals);
        check_shape("dynamics", &ocp.dynamics, rl.len(), nx)?;
        check_shape("integrand", &ocp.integrands, rl.len(), nq)?;
        check_shape("path", &ocp.path, rl.len(), ocp.path_bounds.len())?;
        check_shape("objective", &ocp.objective, ep.len(), 1)?;
        check_shape("boundary", &ocp.boundary, ep.len(), ocp.boundary_bounds.len())?;
        let t0 = ocp.horizon.start;
        if !t0.is_finite() {
            return Err(format!("start time {t0} is not finite"));
        }
        let free_end = match ocp.horizon.end {
            EndTime::Fixed(tf) => {
                if !(tf.is_finite() && tf > t0) {
                    return Err(format!(
                        "end time {tf} must be finite and after the start time {t0}"
                    ));
                }
                false
            }
            EndTime::Free { bounds, guess } => {
                check_bounds(
                    "the end time",
                    &bounds.intersect(&Bounds { lo: t0, hi: f64::INFINITY }),
                )?;
                if !guess.is_finite() {
                    return Err(format!("end time guess {guess} is not finite"));
                }
                true
            }
        };
        let linear = integrator.controls == ControlShape::Linear;
        let integ = Integrator::for_ocp(ocp, integrator).map_err(|e| e.to_string())?;
        let placement = EndpointPlacement::new(&ep, &ocp.objective, &ocp.boundary);
        let mut boundary_at_start = vec![false; ocp.boundary_bounds.len()];
        for &r in &placement.start_rows {
            boundary_at_start[r] = true;
        }
        let layout = Layout::new(
            nx,
            nu,
            np,
            nq,
            ocp.path_bounds.len(),
            intervals,
            linear,
            free_end,
            placement,
        );
        for (r, b) in ocp.path_bounds.iter().enumerate() {
            check_bounds(&format!("path row {r}"), b)?;
        }
        for (r, b) in ocp.boundary_bounds.iter().enumerate() {
            check_bounds(&format!("boundary row {r}"), b)?;
        }

        // Variable bounds (on the originals only: see `Layout`), scales and start values.
        let n = layout.n_vars();
        let mut var_lo = vec![f64::NEG_INFINITY; n];
        let mut var_hi = vec![f64::INFINITY; n];
        let mut var_scale = vec![1.0; n];
        let mut start = vec![0.0; n];
        for (k, &frac) in fractions.iter().enumerate() {
            for (i, info) in ocp.states.iter().enumerate() {
                let mut b = info.bounds;
                if k == 0 {
                    b = b.intersect(&info.start);
                }
                if k == intervals {
                    b = b.intersect(&info.end);
                }
                check_bounds(&format!("state {i} at node {k}"), &b)?;
                let j = layout.x(k, i);
                (var_lo[j], var_hi[j]) = (b.lo, b.hi);
                var_scale[j] = positive(info.scale);
                start[j] = clamp(info.guess_at(frac), &b);
            }
            for (i, info) in ocp.controls.iter().enumerate() {
                check_bounds(&format!("control {i}"), &info.bounds)?;
                let guess =
                    clamp(info.guess.unwrap_or_else(|| representative(&info.bounds)), &info.bounds);
                let mut set = |j: usize, bounded: bool| {
                    if bounded {
                        (var_lo[j], var_hi[j]) = (info.bounds.lo, info.bounds.hi);
                    }
                    var_scale[j] = positive(info.scale);
                    start[j] = guess;
                };
                set(layout.u_at(k, i), layout.controls_free(k));
                if linear && k < intervals {
                    set(layout.v(k, i), true);
                }
            }
            for (i, info) in ocp.params.iter().enumerate() {
                check_bounds(&format!("parameter {i}"), &info.bounds)?;
                let j = layout.p_at(k, i);
                if k == 0 {
                    (var_lo[j], var_hi[j]) = (info.bounds.lo, info.bounds.hi);
                }
                var_scale[j] = positive(info.scale);
                start[j] =
                    clamp(info.guess.unwrap_or_else(|| representative(&info.bounds)), &info.bounds);
            }
            if let (Some(j), EndTime::Free { bounds, guess }) = (layout.tf_at(k), ocp.horizon.end) {
                let b = bounds.intersect(&Bounds { lo: t0, hi: f64::INFINITY });
                if k == 0 {
                    (var_lo[j], var_hi[j]) = (b.lo, b.hi);
                } else {
                    // A horizon that ends before it starts has no meaning; the copies keep the
                    // interval lengths nonnegative without repeating the user's bound.
                    var_lo[j] = t0;
                }
                start[j] = clamp(guess, &b);
                var_scale[j] = positive((start[j] - t0).abs());
            }
            if k > 0 {
                for (c, &i) in layout.placement.carried.iter().enumerate() {
                    let j = layout.s(k, c);
                    var_scale[j] = positive(ocp.states[i].scale);
                }
            }
        }
        if let Some(j) = start.iter().position(|v| !v.is_finite()) {
            return Err(format!("the starting value of variable {j} is {}", start[j]));
        }

        let mut con_scale = vec![1.0; layout.n_constraints()];
        for k in 0..intervals {
            for (i, info) in ocp.states.iter().enumerate() {
                con_scale[layout.continuity_row(k, i)] = positive(info.scale);
            }
            if layout.control_copy_rows(k) {
                for (i, info) in ocp.controls.iter().enumerate() {
                    con_scale[layout.control_copy_row(k, i)] = positive(info.scale);
                }
            }
            for (i, info) in ocp.params.iter().enumerate() {
                con_scale[layout.param_copy_row(k, i)] = positive(info.scale);
            }
            if let (Some(r), Some(t)) = (layout.tf_copy_row(k), layout.tf_at(0)) {
                con_scale[r] = var_scale[t];
            }
            for (c, &i) in layout.placement.carried.iter().enumerate() {
                con_scale[layout.start_copy_row(k, c)] = positive(ocp.states[i].scale);
            }
        }

        // Dependencies of each interval map, by sensitivity column.
        let cols = integ.columns();
        let interval_vars = (0..intervals)
            .map(|k| {
                let mut v = Vec::new();
                for i in 0..nx {
                    v.push((cols.x0(i), layout.x(k, i)));
                }
                for i in 0..nu {
                    v.push((cols.u_start(i), layout.u_at(k, i)));
                    if let Some(c) = cols.u_end(i) {
                        v.push((c, layout.v(k, i)));
                    }
                }
                for i in 0..np {
                    v.push((cols.p(i), layout.p_at(k, i)));
                }
                v
            })
            .collect();

        let stages = layout.stages();
        let mut s = MultipleShooting {
            stages,
            mesh: fractions.to_vec(),
            t0,
            end: ocp.horizon.end,
            integrator: integ,
            path: Eval::new(&ocp.path),
            boundary: Eval::new(&ocp.boundary),
            objective: Eval::new(&ocp.objective),
            ep,
            boundary_at_start,
            path_bounds: ocp.path_bounds.clone(),
            boundary_bounds: ocp.boundary_bounds.clone(),
            var_lo,
            var_hi,
            var_scale,
            con_scale,
            start,
            interval_vars,
            cache: Cache {
                w: vec![0.0; n],
                valid: false,
                with_sensitivities: false,
                outputs: Vec::new(),
            },
            last_failure: None,
            exact: None,
            offer_exact: true,
            layout,
        };
        s.exact = ExactHessian::new(ocp, &s.layout, &s.mesh, t0, &integrator);
        s.cache.outputs = (0..intervals).map(|_| s.integrator.new_output()).collect();
        let mut w = std::mem::take(&mut s.start);
        s.complete_carried(&mut w);
        s.start = w;
        s.scale_from_start();
        Ok(s)
    }

    /// Each running sum's scale, which only the starting point can tell (an integral has no
    /// declared unit of its own): the largest value it takes there. Without it an energy of
    /// 6e5 J is a variable of size 6e5 among ones of size 1 (the shuttle example: a QP step
    /// of 4e5 and no usable solution by iteration 5; with it, 4 iterations). The objective
    /// is scaled by the SQP from its gradient at the start.
    fn scale_from_start(&mut self) {
        let l = self.layout.clone();
        for j in 0..l.nq {
            let size = (1..l.n_nodes()).fold(0.0_f64, |a, k| a.max(self.start[l.q(k, j)].abs()));
            if size.is_finite() && size > SCALE_FLOOR {
                for k in 1..l.n_nodes() {
                    self.var_scale[l.q(k, j)] = size;
                }
                for k in 0..l.intervals {
                    self.con_scale[l.integral_row(k, j)] = size;
                }
            }
        }
    }

    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    /// Whether the NLP offers its exact Lagrangian Hessian (RK4; see `exact.rs`).
    pub fn has_exact_hessian(&self) -> bool {
        self.exact.is_some() && self.offer_exact
    }

    /// Hide the exact Hessian from the solver, which then uses block BFGS.
    pub fn without_exact_hessian(mut self) -> Self {
        self.offer_exact = false;
        self
    }

    /// Normalised node positions.
    pub fn mesh(&self) -> &[f64] {
        &self.mesh
    }

    pub fn start_time(&self) -> f64 {
        self.t0
    }

    /// The end time at `w` (node 0's copy, the one that carries the bounds).
    pub fn end_time(&self, w: &[f64]) -> f64 {
        self.span_at(w, 0) + self.t0
    }

    /// `tf - t0` as seen by node `k` (its own copy of a free end time).
    fn span_at(&self, w: &[f64], k: usize) -> f64 {
        match (self.layout.tf_at(k), self.end) {
            (Some(j), _) => w[j] - self.t0,
            (None, EndTime::Fixed(t)) => t - self.t0,
            (None, EndTime::Free { guess, .. }) => guess - self.t0,
        }
    }

    /// Node times at `w`.
    pub fn times(&self, w: &[f64]) -> Vec<f64> {
        (0..self.layout.n_nodes()).map(|k| self.t0 + self.mesh[k] * self.span_at(w, k)).collect()
    }

    /// Give the running integrals and carried start values of `w` the values its other
    /// variables imply (integrating once), so a starting point satisfies those rows. Left as
    /// they are when the integration fails (the solver reports the failure at the start).
    fn complete_carried(&mut self, w: &mut [f64]) {
        let l = self.layout.clone();
        for k in 1..l.n_nodes() {
            for (c, &i) in l.placement.carried.iter().enumerate() {
                w[l.s(k, c)] = w[l.x(0, i)];
            }
        }
        if l.nq == 0 {
            return;
        }
        let mut sums = vec![0.0; l.nq];
        for k in 0..l.intervals {
            if self.integrate_interval(w, k, false, EvalPart::Constraints).is_err() {
                return;
            }
            for j in 0..l.nq {
                sums[j] += self.cache.outputs[k].q[j];
                w[l.q(k + 1, j)] = sums[j];
            }
        }
        self.cache.valid = false;
    }

    /// Start from a previous solution instead of the guesses: each node takes the trajectory's
    /// values interpolated linearly at the same fraction of its horizon (so the meshes need not
    /// match), clamped into the bounds.
    pub fn warm_start(&mut self, warm: &Trajectory) -> Result<(), String> {
        let l = self.layout.clone();
        let nt = warm.times.len();
        let bad = |what: &str| Err(format!("warm start: {what}"));
        if nt < 2 {
            return bad("needs at least two nodes");
        }
        if warm.states.len() != l.nx || warm.states.iter().any(|s| s.len() != nt) {
            return bad("state arrays do not match the problem");
        }
        if warm.controls.len() != l.nu || warm.controls.iter().any(|s| s.len() != nt) {
            return bad("control arrays do not match the problem");
        }
        if warm.params.len() != l.np {
            return bad("parameter count does not match the problem");
        }
        let (a, b) = (warm.times[0], warm.times[nt - 1]);
        if !(a.is_finite() && b.is_finite() && b > a)
            || warm.times.windows(2).any(|w| w[1] < w[0] || w[1].is_nan())
        {
            return bad("times must increase");
        }
        let frac: Vec<f64> = warm.times.iter().map(|t| (t - a) / (b - a)).collect();
        let interp = |values: &[f64], s: f64| -> f64 {
            let i = frac.partition_point(|&f| f <= s).clamp(1, nt - 1);
            let (f0, f1) = (frac[i - 1], frac[i]);
            let th = if f1 > f0 { ((s - f0) / (f1 - f0)).clamp(0.0, 1.0) } else { 1.0 };
            values[i - 1] + th * (values[i] - values[i - 1])
        };
        let mut w = self.start.clone();
        for k in 0..l.n_nodes() {
            let s = self.mesh[k];
            for i in 0..l.nx {
                w[l.x(k, i)] = interp(&warm.states[i], s);
            }
            for i in 0..l.nu {
                w[l.u_at(k, i)] = interp(&warm.controls[i], s);
                if l.linear_controls && k < l.intervals {
                    w[l.v(k, i)] = interp(&warm.controls[i], self.mesh[k + 1]);
                }
            }
            if !l.linear_controls && k == l.intervals && k > 0 {
                for i in 0..l.nu {
                    w[l.u_at(k, i)] = w[l.u_at(k - 1, i)];
                }
            }
            for i in 0..l.np {
                w[l.p_at(k, i)] = warm.params[i];
            }
            if let Some(j) = l.tf_at(k) {
                w[j] = warm.end_time;
            }
        }
        for (j, v) in w.iter_mut().enumerate() {
            if !v.is_finite() {
                return bad("contains values that are not finite");
            }
            *v = v.max(self.var_lo[j]).min(self.var_hi[j]);
        }
        self.complete_carried(&mut w);
        self.start = w;
        Ok(())
    }

    /// The integrals at `w` (sums over the intervals), integrating if needed.
    pub fn integrals(&mut self, w: &[f64]) -> Result<Vec<f64>, EvalError> {
        self.integrate(w, false, EvalPart::Objective)?;
        let mut q = vec![0.0; self.layout.nq];
        for out in &self.cache.outputs {
            for (a, b) in q.iter_mut().zip(&out.q) {
                *a += b;
            }
        }
        Ok(q)
    }

    fn note(&mut self, err: EvalError, message: String) -> EvalError {
        self.last_failure = Some(FailureNote { tag: err.tag, stage: err.stage, message });
        err
    }

    /// Integrate interval `k` at `w` into the cache.
    fn integrate_interval(
        &mut self,
        w: &[f64],
        k: usize,
        sens: bool,
        part: EvalPart,
    ) -> Result<(), EvalError> {
        let l = &self.layout;
        let (nx, nu, np) = (l.nx, l.nu, l.np);
        let span = self.span_at(w, k);
        let p = &w[l.p_at(k, 0)..l.p_at(k, 0) + np];
        let x0 = &w[l.x(k, 0)..l.x(k, 0) + nx];
        let us = l.u_at(k, 0);
        let u_start = &w[us..us + nu];
        let u_end: &[f64] = if l.linear_controls && nu > 0 {
            let ue = l.v(k, 0);
            &w[ue..ue + nu]
        } else {
            &[]
        };
        let input = IntervalInput {
            x0,
            u_start,
            u_end,
            p,
            t_start: self.t0 + self.mesh[k] * span,
            h: (self.mesh[k + 1] - self.mesh[k]) * span,
        };
        if let Err(e) = self.integrator.integrate(&input, &mut self.cache.outputs[k], sens) {
            let err = integration_error(&e, part, k);
            return Err(self.note(err, format!("{e} (interval {k})")));
        }
        Ok(())
    }

    /// Integrate every interval at `w` unless the cache already holds that point.
    fn integrate(&mut self, w: &[f64], sens: bool, part: EvalPart) -> Result<(), EvalError> {
        if self.cache.valid && (self.cache.with_sensitivities || !sens) && self.cache.w == w {
            return Ok(());
        }
        self.cache.valid = false;
        for k in 0..self.layout.intervals {
            self.integrate_interval(w, k, sens, part)?;
        }
        self.cache.w.copy_from_slice(w);
        self.cache.with_sensitivities = sens;
        self.cache.valid = true;
        Ok(())
    }

    /// Fill an endpoint function's input `[t0, tf, x0, xN, p, q]` as seen at node 0
    /// (`at_start`) or at the last node. Inputs a function there does not read are 0.
    fn endpoint_input(&self, w: &[f64], at_start: bool, input: &mut [f64]) {
        let (ep, l) = (&self.ep, &self.layout);
        let k = l.endpoint_node(at_start);
        input[EndpointLayout::T0] = self.t0;
        input[EndpointLayout::TF] = self.t0 + self.span_at(w, k);
        for col in 2..ep.len() {
            input[col] = endpoint_var(l, ep, at_start, col).map_or(0.0, |j| w[j]);
        }
    }

    /// Fill the path function's input at node `k`.
    fn path_input(&mut self, w: &[f64], k: usize) {
        let span = self.span_at(w, k);
        let l = &self.layout;
        let inp = &mut self.path.input;
        inp[0] = self.t0 + self.mesh[k] * span;
        inp[1..1 + l.nx].copy_from_slice(&w[l.x(k, 0)..l.x(k, 0) + l.nx]);
        let u = l.u_at(k, 0);
        inp[1 + l.nx..1 + l.nx + l.nu].copy_from_slice(&w[u..u + l.nu]);
        inp[1 + l.nx + l.nu..].copy_from_slice(&w[l.p_at(k, 0)..l.p_at(k, 0) + l.np]);
    }

    fn path_failure(&mut self, part: EvalPart, k: usize, row: usize, value: f64) -> EvalError {
        let err = EvalError::non_finite(part, self.layout.path_row(k, row), value)
            .with_tag(function_tag(FunctionKind::Path, row))
            .with_stage(k);
        let t = self.path.input[0];
        self.note(err, format!("path row {row} is {value} at node {k} (t = {t})"))
    }

    fn endpoint_failure(
        &mut self,
        part: EvalPart,
        kind: FunctionKind,
        row: usize,
        value: f64,
    ) -> EvalError {
        let index = if kind == FunctionKind::Boundary { self.layout.boundary_row(row) } else { 0 };
        let err = EvalError::non_finite(part, index, value).with_tag(function_tag(kind, row));
        let msg = if kind == FunctionKind::Objective {
            format!("objective is {value}")
        } else {
            format!("boundary row {row} is {value}")
        };
        self.note(err, msg)
    }

    /// Evaluate the boundary function at the node of `at_start` (with its Jacobian when
    /// `jacobian`), checking the rows placed there.
    fn eval_boundary(
        &mut self,
        w: &[f64],
        at_start: bool,
        jacobian: bool,
        part: EvalPart,
    ) -> Result<(), EvalError> {
        let mut input = std::mem::take(&mut self.boundary.input);
        self.endpoint_input(w, at_start, &mut input);
        self.boundary.input = input;
        if jacobian {
            self.boundary.value_and_jacobian();
        } else {
            self.boundary.value();
        }
        let here: Vec<bool> = self.boundary_at_start.iter().map(|&s| s == at_start).collect();
        if let Some((r, v)) = self.boundary.first_bad(jacobian, Some(&here)) {
            return Err(self.endpoint_failure(part, FunctionKind::Boundary, r, v));
        }
        Ok(())
    }

    fn eval_objective(
        &mut self,
        w: &[f64],
        jacobian: bool,
        part: EvalPart,
    ) -> Result<(), EvalError> {
        let at_start = self.layout.placement.objective_at_start;
        let mut input = std::mem::take(&mut self.objective.input);
        self.endpoint_input(w, at_start, &mut input);
        self.objective.input = input;
        if jacobian {
            self.objective.value_and_jacobian();
        } else {
            self.objective.value();
        }
        if let Some((_, v)) = self.objective.first_bad(jacobian, None) {
            return Err(self.endpoint_failure(part, FunctionKind::Objective, 0, v));
        }
        Ok(())
    }

    /// `d(node k's interval map)/d tf` for output row `r`.
    fn time_derivative(&self, k: usize, r: usize) -> f64 {
        let cols = self.integrator.columns();
        let s = &self.cache.outputs[k].sensitivities;
        let dm = self.mesh[k + 1] - self.mesh[k];
        s[(r, cols.t_start())] * self.mesh[k] + s[(r, cols.h())] * dm
    }

    /// Fill the Hessian of `sigma f + lambda' c` (pattern of `exact.pattern`).
    fn fill_hessian(
        &mut self,
        ex: &mut ExactHessian,
        w: &[f64],
        sigma: f64,
        lambda: &[f64],
        values: &mut [f64],
    ) {
        let l = self.layout.clone();
        let (nx, nq) = (l.nx, l.nq);
        values.fill(0.0);
        let mut weights = vec![0.0; nx + nq];
        for k in 0..l.intervals {
            // Continuity rows are `x_{k+1} - F_k`, integral rows `q_{k+1} - q_k - Q_k`.
            for i in 0..nx {
                weights[i] = -lambda[l.continuity_row(k, i)];
            }
            for j in 0..nq {
                weights[nx + j] = -lambda[l.integral_row(k, j)];
            }
            let span = self.span_at(w, k);
            ex.set_step_input(&l, w, k, span, self.mesh[k], self.mesh[k + 1] - self.mesh[k]);
            ex.add_step(k, &weights, values);
        }
        if l.ng > 0 {
            let mut pw = vec![0.0; l.ng];
            for k in 0..l.n_nodes() {
                self.path_input(w, k);
                for (r, v) in pw.iter_mut().enumerate() {
                    *v = lambda[l.path_row(k, r)];
                }
                ex.add_path(k, &self.path.input, &pw, values);
            }
        }
        let mut input = vec![0.0; self.ep.len()];
        let mut bw = vec![0.0; l.nb];
        for at_start in [true, false] {
            for r in 0..l.nb {
                bw[r] = if self.boundary_at_start[r] == at_start {
                    lambda[l.boundary_row(r)]
                } else {
                    0.0
                };
            }
            self.endpoint_input(w, at_start, &mut input);
            let s = if l.placement.objective_at_start == at_start { sigma } else { 0.0 };
            ex.add_endpoint(at_start, &input, s, &bw, values);
        }
    }
}

/// The NLP error for an integration failure on interval `k`.
fn integration_error(e: &IntegrationError, part: EvalPart, k: usize) -> EvalError {
    let kind_of = |f: OdeFunction| match f {
        OdeFunction::Dynamics => FunctionKind::Dynamics,
        OdeFunction::Integrands => FunctionKind::Integrands,
    };
    let (kind, row, failure) = match *e {
        IntegrationError::NotFinite { function, row, part: p, .. } => {
            let value = if p == NonFinitePart::Value { f64::NAN } else { f64::INFINITY };
            (kind_of(function), row, EvalFailure::NonFinite { value })
        }
        IntegrationError::Newton {
            failure: NewtonFailure::NotFinite { function, row }, ..
        } => (kind_of(function), row, EvalFailure::NonFinite { value: f64::NAN }),
        _ => (FunctionKind::Dynamics, 0, EvalFailure::Failed),
    };
    EvalError { part, index: None, failure, tag: function_tag(kind, row), stage: Some(k) }
}

impl Nlp for MultipleShooting {
    fn num_variables(&self) -> usize {
        self.layout.n_vars()
    }

    fn num_constraints(&self) -> usize {
        self.layout.n_constraints()
    }

    fn variable_bounds(&self, lower: &mut [f64], upper: &mut [f64]) {
        lower.copy_from_slice(&self.var_lo);
        upper.copy_from_slice(&self.var_hi);
    }

    fn constraint_bounds(&self, lower: &mut [f64], upper: &mut [f64]) {
        let l = &self.layout;
        // Coupling rows are equalities at 0.
        lower.fill(0.0);
        upper.fill(0.0);
        for k in 0..l.n_nodes() {
            for (r, b) in self.path_bounds.iter().enumerate() {
                (lower[l.path_row(k, r)], upper[l.path_row(k, r)]) = (b.lo, b.hi);
            }
        }
        for (r, b) in self.boundary_bounds.iter().enumerate() {
            (lower[l.boundary_row(r)], upper[l.boundary_row(r)]) = (b.lo, b.hi);
        }
    }

    fn initial_point(&self, w: &mut [f64]) {
        w.copy_from_slice(&self.start);
    }

    fn complete(&mut self, w: &mut [f64]) {
        if self.layout.nq == 0 {
            return;
        }
        // The running sums follow from the integration of the point, which they do not
        // affect: integrate once (cached), set them, and keep the cache valid for `w`.
        if self.integrate(w, false, EvalPart::Constraints).is_err() {
            return;
        }
        let l = &self.layout;
        for j in 0..l.nq {
            let mut sum = 0.0;
            for k in 0..l.intervals {
                sum += self.cache.outputs[k].q[j];
                w[l.q(k + 1, j)] = sum;
            }
        }
        self.cache.w.copy_from_slice(w);
    }

    fn objective(&mut self, w: &[f64]) -> Result<f64, EvalError> {
        self.eval_objective(w, false, EvalPart::Objective)?;
        Ok(self.objective.out[0])
    }

    fn gradient(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        self.eval_objective(w, true, EvalPart::Gradient)?;
        values.fill(0.0);
        let at_start = self.layout.placement.objective_at_start;
        for (e, &(_, c)) in self.objective.fun.jacobian_pattern().iter().enumerate() {
            if let Some(j) = endpoint_var(&self.layout, &self.ep, at_start, c) {
                values[j] += self.objective.jac[e];
            }
        }
        Ok(())
    }

    fn constraints(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        self.integrate(w, false, EvalPart::Constraints)?;
        let l = self.layout.clone();
        for k in 0..l.intervals {
            let out = &self.cache.outputs[k];
            for i in 0..l.nx {
                values[l.continuity_row(k, i)] = w[l.x(k + 1, i)] - out.x_end[i];
            }
            if l.control_copy_rows(k) {
                for i in 0..l.nu {
                    let from = if l.linear_controls { l.v(k, i) } else { l.u_at(k, i) };
                    values[l.control_copy_row(k, i)] = w[l.u_at(k + 1, i)] - w[from];
                }
            }
            for i in 0..l.np {
                values[l.param_copy_row(k, i)] = w[l.p_at(k + 1, i)] - w[l.p_at(k, i)];
            }
            if let (Some(r), Some(a), Some(b)) = (l.tf_copy_row(k), l.tf_at(k), l.tf_at(k + 1)) {
                values[r] = w[b] - w[a];
            }
            for j in 0..l.nq {
                let before = if k > 0 { w[l.q(k, j)] } else { 0.0 };
                values[l.integral_row(k, j)] = w[l.q(k + 1, j)] - before - out.q[j];
            }
            for (c, &i) in l.placement.carried.iter().enumerate() {
                let before = if k > 0 { w[l.s(k, c)] } else { w[l.x(0, i)] };
                values[l.start_copy_row(k, c)] = w[l.s(k + 1, c)] - before;
            }
        }
        if l.ng > 0 {
            for k in 0..l.n_nodes() {
                self.path_input(w, k);
                self.path.value();
                if let Some((r, v)) = self.path.first_bad(false, None) {
                    return Err(self.path_failure(EvalPart::Constraints, k, r, v));
                }
                for r in 0..l.ng {
                    values[l.path_row(k, r)] = self.path.out[r];
                }
            }
        }
        for at_start in [true, false] {
            if !self.boundary_at_start.contains(&at_start) {
                continue;
            }
            self.eval_boundary(w, at_start, false, EvalPart::Constraints)?;
            for r in 0..l.nb {
                if self.boundary_at_start[r] == at_start {
                    values[l.boundary_row(r)] = self.boundary.out[r];
                }
            }
        }
        Ok(())
    }

    fn jacobian_pattern(&self) -> Pattern {
        let l = &self.layout;
        let mut p = Pattern::new();
        for k in 0..l.n_nodes() {
            for &(r, c) in self.path.fun.jacobian_pattern() {
                if let Some((j, _)) = running_var(l, &self.mesh, k, c) {
                    p.push(l.path_row(k, r), j);
                }
            }
            for &(r, c) in self.boundary.fun.jacobian_pattern() {
                let at_start = self.boundary_at_start[r];
                if l.endpoint_node(at_start) == k {
                    if let Some(j) = endpoint_var(l, &self.ep, at_start, c) {
                        p.push(l.boundary_row(r), j);
                    }
                }
            }
            if k == l.intervals {
                continue;
            }
            for i in 0..l.nx {
                let row = l.continuity_row(k, i);
                p.push(row, l.x(k + 1, i));
                for &(_, v) in &self.interval_vars[k] {
                    p.push(row, v);
                }
                if let Some(t) = l.tf_at(k) {
                    p.push(row, t);
                }
            }
            if l.control_copy_rows(k) {
                for i in 0..l.nu {
                    let row = l.control_copy_row(k, i);
                    p.push(row, l.u_at(k + 1, i));
                    p.push(row, if l.linear_controls { l.v(k, i) } else { l.u_at(k, i) });
                }
            }
            for i in 0..l.np {
                let row = l.param_copy_row(k, i);
                p.push(row, l.p_at(k + 1, i));
                p.push(row, l.p_at(k, i));
            }
            if let (Some(r), Some(a), Some(b)) = (l.tf_copy_row(k), l.tf_at(k), l.tf_at(k + 1)) {
                p.push(r, b);
                p.push(r, a);
            }
            for j in 0..l.nq {
                let row = l.integral_row(k, j);
                p.push(row, l.q(k + 1, j));
                if k > 0 {
                    p.push(row, l.q(k, j));
                }
                for &(_, v) in &self.interval_vars[k] {
                    p.push(row, v);
                }
                if let Some(t) = l.tf_at(k) {
                    p.push(row, t);
                }
            }
            for (c, &i) in l.placement.carried.iter().enumerate() {
                let row = l.start_copy_row(k, c);
                p.push(row, l.s(k + 1, c));
                p.push(row, if k > 0 { l.s(k, c) } else { l.x(0, i) });
            }
        }
        p
    }

    fn jacobian(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        self.integrate(w, true, EvalPart::Jacobian)?;
        let l = self.layout.clone();
        let mut e = 0;
        for k in 0..l.n_nodes() {
            if !self.path.fun.jacobian_pattern().is_empty() {
                self.path_input(w, k);
                self.path.value_and_jacobian();
                if let Some((r, v)) = self.path.first_bad(true, None) {
                    return Err(self.path_failure(EvalPart::Jacobian, k, r, v));
                }
                for (a, &(_, c)) in self.path.fun.jacobian_pattern().iter().enumerate() {
                    if let Some((_, factor)) = running_var(&l, &self.mesh, k, c) {
                        values[e] = self.path.jac[a] * factor;
                        e += 1;
                    }
                }
            }
            // Node 0 holds the boundary rows that read only start values, the last node the
            // others (there is always at least one interval, so they differ).
            let at_start = k == 0;
            let here = (k == 0 || k == l.intervals) && self.boundary_at_start.contains(&at_start);
            if here {
                self.eval_boundary(w, at_start, true, EvalPart::Jacobian)?;
                for (a, &(r, c)) in self.boundary.fun.jacobian_pattern().iter().enumerate() {
                    if self.boundary_at_start[r] == at_start
                        && endpoint_var(&l, &self.ep, at_start, c).is_some()
                    {
                        values[e] = self.boundary.jac[a];
                        e += 1;
                    }
                }
            }
            if k == l.intervals {
                continue;
            }
            let s = &self.cache.outputs[k].sensitivities;
            for i in 0..l.nx {
                values[e] = 1.0;
                e += 1;
                for &(c, _) in &self.interval_vars[k] {
                    values[e] = -s[(i, c)];
                    e += 1;
                }
                if l.free_end {
                    values[e] = -self.time_derivative(k, i);
                    e += 1;
                }
            }
            let copies =
                if l.control_copy_rows(k) { l.nu } else { 0 } + l.np + usize::from(l.free_end);
            for _ in 0..copies {
                values[e] = 1.0;
                values[e + 1] = -1.0;
                e += 2;
            }
            let s = &self.cache.outputs[k].sensitivities;
            for j in 0..l.nq {
                values[e] = 1.0;
                e += 1;
                if k > 0 {
                    values[e] = -1.0;
                    e += 1;
                }
                for &(c, _) in &self.interval_vars[k] {
                    values[e] = -s[(l.nx + j, c)];
                    e += 1;
                }
                if l.free_end {
                    values[e] = -self.time_derivative(k, l.nx + j);
                    e += 1;
                }
            }
            for _ in 0..l.ns() {
                values[e] = 1.0;
                values[e + 1] = -1.0;
                e += 2;
            }
        }
        debug_assert_eq!(e, values.len());
        Ok(())
    }

    fn hessian_pattern(&self) -> Option<Pattern> {
        self.exact.as_ref().filter(|_| self.offer_exact).map(|e| e.pattern.clone())
    }

    fn hessian(
        &mut self,
        w: &[f64],
        objective_factor: f64,
        multipliers: &[f64],
        values: &mut [f64],
    ) -> Result<(), EvalError> {
        let Some(mut ex) = self.exact.take() else {
            return Err(EvalError::unavailable(EvalPart::Hessian));
        };
        if !self.offer_exact {
            self.exact = Some(ex);
            return Err(EvalError::unavailable(EvalPart::Hessian));
        }
        self.fill_hessian(&mut ex, w, objective_factor, multipliers, values);
        self.exact = Some(ex);
        Ok(())
    }

    fn stages(&self) -> Option<StageLayout> {
        Some(self.stages.clone())
    }

    fn variable_scales(&self, scales: &mut [f64]) {
        scales.copy_from_slice(&self.var_scale);
    }

    fn constraint_scales(&self, scales: &mut [f64]) {
        scales.copy_from_slice(&self.con_scale);
    }
}
