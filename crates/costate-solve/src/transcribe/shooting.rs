//! [`MultipleShooting`]: an [`Ocp`] on a mesh of shooting intervals as a sparse [`Nlp`].
//!
//! Owns the evaluation of the NLP functions from the integrator's interval maps and the
//! compiled path, boundary and objective functions, with their exact first derivatives (the
//! integrator's discrete sensitivities chained through the time scaling and the integrals).
//! Must not: difference numerically or know names or source locations (failures carry
//! [`function_tag`] codes). Second derivatives come from [`super::exact`] (RK4 only).
//!
//! Time scaling: node `k` sits at the fraction `s_k` of the horizon, `t_k = t0 + s_k (tf - t0)`,
//! and interval `k` has length `h_k = (s_{k+1} - s_k)(tf - t0)`, so with a free end time
//! `dF/dtf = dF/dt_start * s_k + dF/dh * (s_{k+1} - s_k)`.

use std::ops::Range;

use costate_model::{
    representative, Bounds, EndTime, EndpointLayout, Function, FunctionKind, Ocp, Workspace,
};

use crate::integrate::{
    ControlShape, IntegrationError, Integrator, IntegratorSettings, IntervalInput, IntervalOutput,
    NewtonFailure, NonFinitePart, OdeFunction,
};
use crate::nlp::{EvalError, EvalFailure, EvalPart, Nlp, Pattern};

use super::exact::ExactHessian;
use super::layout::{function_tag, Layout};
use super::Trajectory;

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

    /// The first non-finite output, or derivative (reported on its row).
    fn first_bad(&self, with_jacobian: bool) -> Option<(usize, f64)> {
        if let Some(r) = self.out.iter().position(|v| !v.is_finite()) {
            return Some((r, self.out[r]));
        }
        if with_jacobian {
            if let Some(e) = self.jac.iter().position(|v| !v.is_finite()) {
                return Some((self.fun.jacobian_pattern()[e].0, self.jac[e]));
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
    /// Sum of the interval integrals.
    q: Vec<f64>,
    /// `nq x n` row-major derivative of `q` with respect to the variables.
    dq: Vec<f64>,
}

/// A failure remembered with its full text, for the report.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct FailureNote {
    pub tag: u32,
    pub stage: Option<usize>,
    pub message: String,
}

/// The multiple-shooting NLP of an [`Ocp`]. See the module docs of [`crate::transcribe`] for
/// the variable and row order ([`Layout`]).
#[derive(Clone, Debug)]
pub struct MultipleShooting {
    layout: Layout,
    /// Normalised node positions `s_0 = 0 < s_1 < .. < s_N = 1`.
    mesh: Vec<f64>,
    t0: f64,
    end: EndTime,
    integrator: Integrator,
    path: Eval,
    boundary: Eval,
    objective: Eval,
    ep: EndpointLayout,
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
    /// Columns every integral may depend on (sorted).
    q_vars: Vec<usize>,
    /// Per boundary row: its Jacobian columns (sorted).
    boundary_cols: Vec<Vec<usize>>,
    cache: Cache,
    scratch: Vec<f64>,
    pub(crate) last_failure: Option<FailureNote>,
    /// Exact Lagrangian Hessian, when the integrator and functions allow one.
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
        let layout = Layout::new(
            nx,
            nu,
            np,
            nq,
            ocp.path_bounds.len(),
            ocp.boundary_bounds.len(),
            intervals,
            linear,
            free_end,
        );
        for (r, b) in ocp.path_bounds.iter().enumerate() {
            check_bounds(&format!("path row {r}"), b)?;
        }
        for (r, b) in ocp.boundary_bounds.iter().enumerate() {
            check_bounds(&format!("boundary row {r}"), b)?;
        }

        // Variable bounds, scales and the default starting point.
        let n = layout.n_vars();
        let mut var_lo = vec![f64::NEG_INFINITY; n];
        let mut var_hi = vec![f64::INFINITY; n];
        let mut var_scale = vec![1.0; n];
        let mut start = vec![0.0; n];
        let positive = |s: f64| if s.is_finite() && s > 0.0 { s } else { 1.0 };
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
            if layout.has_control(k) {
                for (i, info) in ocp.controls.iter().enumerate() {
                    check_bounds(&format!("control {i}"), &info.bounds)?;
                    let j = layout.u_at(k, i);
                    (var_lo[j], var_hi[j]) = (info.bounds.lo, info.bounds.hi);
                    var_scale[j] = positive(info.scale);
                    start[j] = clamp(
                        info.guess.unwrap_or_else(|| representative(&info.bounds)),
                        &info.bounds,
                    );
                }
            }
        }
        for k in 0..layout.n_nodes() {
            for (i, info) in ocp.params.iter().enumerate() {
                check_bounds(&format!("parameter {i}"), &info.bounds)?;
                let j = layout.p_at(k, i);
                (var_lo[j], var_hi[j]) = (info.bounds.lo, info.bounds.hi);
                var_scale[j] = positive(info.scale);
                start[j] =
                    clamp(info.guess.unwrap_or_else(|| representative(&info.bounds)), &info.bounds);
            }
            if let (Some(j), EndTime::Free { bounds, guess }) = (layout.tf_at(k), ocp.horizon.end) {
                // A horizon that ends before it starts has no meaning; the lower side keeps
                // the interval lengths nonnegative.
                let b = bounds.intersect(&Bounds { lo: t0, hi: f64::INFINITY });
                (var_lo[j], var_hi[j]) = (b.lo, b.hi);
                start[j] = clamp(guess, &b);
                var_scale[j] = positive((start[j] - t0).abs());
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
        }

        // Dependencies of each interval map, by sensitivity column.
        let cols = integ.columns();
        let mut interval_vars = Vec::with_capacity(intervals);
        for k in 0..intervals {
            let mut v = Vec::new();
            for i in 0..nx {
                v.push((cols.x0(i), layout.x(k, i)));
            }
            for i in 0..nu {
                v.push((cols.u_start(i), layout.u_at(k, i)));
                if let Some(c) = cols.u_end(i) {
                    v.push((c, layout.u_at(k + 1, i)));
                }
            }
            for i in 0..np {
                v.push((cols.p(i), layout.p_at(k, i)));
            }
            interval_vars.push(v);
        }
        let mut q_vars: Vec<usize> = interval_vars.iter().flatten().map(|&(_, j)| j).collect();
        q_vars.extend((0..intervals).filter_map(|k| layout.tf_at(k)));
        q_vars.sort_unstable();
        q_vars.dedup();

        let mut s = MultipleShooting {
            layout,
            mesh: fractions.to_vec(),
            t0,
            end: ocp.horizon.end,
            integrator: integ,
            path: Eval::new(&ocp.path),
            boundary: Eval::new(&ocp.boundary),
            objective: Eval::new(&ocp.objective),
            ep,
            path_bounds: ocp.path_bounds.clone(),
            boundary_bounds: ocp.boundary_bounds.clone(),
            var_lo,
            var_hi,
            var_scale,
            con_scale,
            start,
            interval_vars,
            q_vars,
            boundary_cols: Vec::new(),
            cache: Cache {
                w: vec![0.0; n],
                valid: false,
                with_sensitivities: false,
                outputs: Vec::new(),
                q: vec![0.0; nq],
                dq: vec![0.0; nq * n],
            },
            scratch: vec![0.0; n],
            last_failure: None,
            exact: None,
            offer_exact: true,
        };
        s.exact = ExactHessian::new(ocp, &s.layout, &s.mesh, t0, &integrator);
        s.cache.outputs = (0..intervals).map(|_| s.integrator.new_output()).collect();
        s.boundary_cols = (0..s.layout.nb)
            .map(|r| {
                let mut c = Vec::new();
                for &(row, col) in ocp.boundary.jacobian_pattern() {
                    if row == r {
                        s.endpoint_columns(col, &mut c);
                    }
                }
                c.sort_unstable();
                c.dedup();
                c
            })
            .collect();
        Ok(s)
    }

    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    /// Whether the NLP offers its exact Lagrangian Hessian (RK4 with endpoint functions linear
    /// in the integrals; see `exact.rs`).
    pub fn has_exact_hessian(&self) -> bool {
        self.exact.is_some() && self.offer_exact
    }

    /// Hide the exact Hessian from the solver, which then uses block BFGS.
    pub fn without_exact_hessian(mut self) -> Self {
        self.offer_exact = false;
        self
    }

    /// Fill the Hessian of `sigma f + lambda' c` (pattern of `exact.pattern`).
    fn fill_hessian(
        &mut self,
        ex: &mut ExactHessian,
        w: &[f64],
        sigma: f64,
        lambda: &[f64],
        values: &mut [f64],
    ) -> Result<(), EvalError> {
        let l = self.layout.clone();
        let (nx, nq) = (l.nx, l.nq);
        values.fill(0.0);
        if nq > 0 {
            self.integrate(w, false, EvalPart::Hessian)?;
        }
        let mut input = vec![0.0; self.objective.input.len()];
        self.endpoint_input(w, &mut input);
        // The integrals enter the endpoint functions linearly (checked when `ex` was built),
        // so each interval's integral weights are the endpoint functions' first derivatives.
        let mut wq = vec![0.0; nq];
        if nq > 0 {
            let q0 = self.ep.q(0);
            self.objective.input.copy_from_slice(&input);
            self.objective.value_and_jacobian();
            for (e, &(_, c)) in self.objective.fun.jacobian_pattern().iter().enumerate() {
                if c >= q0 {
                    wq[c - q0] += sigma * self.objective.jac[e];
                }
            }
            if l.nb > 0 {
                self.boundary.input.copy_from_slice(&input);
                self.boundary.value_and_jacobian();
                for (e, &(r, c)) in self.boundary.fun.jacobian_pattern().iter().enumerate() {
                    if c >= q0 {
                        wq[c - q0] += lambda[l.boundary_row(r)] * self.boundary.jac[e];
                    }
                }
            }
        }
        let mut weights = vec![0.0; nx + nq];
        weights[nx..].copy_from_slice(&wq);
        for k in 0..l.intervals {
            // Continuity rows are `x_{k+1} - F_k`.
            for i in 0..nx {
                weights[i] = -lambda[l.continuity_row(k, i)];
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
        let bw: Vec<f64> = (0..l.nb).map(|r| lambda[l.boundary_row(r)]).collect();
        ex.add_endpoint(&input, sigma, &bw, values);
        Ok(())
    }

    /// Normalised node positions.
    pub fn mesh(&self) -> &[f64] {
        &self.mesh
    }

    pub fn start_time(&self) -> f64 {
        self.t0
    }

    /// The end time at `w`.
    pub fn end_time(&self, w: &[f64]) -> f64 {
        match (self.layout.tf(), self.end) {
            (Some(j), _) => w[j],
            (None, EndTime::Fixed(t)) => t,
            (None, EndTime::Free { guess, .. }) => guess,
        }
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

    /// Start from a previous solution instead of the guesses: each node takes the trajectory's
    /// values interpolated linearly at the same fraction of its horizon (so the meshes need not
    /// match), clamped into the bounds.
    pub fn warm_start(&mut self, warm: &Trajectory) -> Result<(), String> {
        let l = &self.layout;
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
            if l.has_control(k) {
                for i in 0..l.nu {
                    w[l.u_at(k, i)] = interp(&warm.controls[i], s);
                }
            }
        }
        for k in 0..l.n_nodes() {
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
        self.start = w;
        Ok(())
    }

    /// The integrals at `w` (sums over the intervals), integrating if needed.
    pub fn integrals(&mut self, w: &[f64]) -> Result<Vec<f64>, EvalError> {
        self.integrate(w, false, EvalPart::Objective)?;
        Ok(self.cache.q.clone())
    }

    /// Push the variables endpoint input column `col` depends on.
    fn endpoint_columns(&self, col: usize, out: &mut Vec<usize>) {
        let (ep, l) = (&self.ep, &self.layout);
        if col == EndpointLayout::T0 {
        } else if col == EndpointLayout::TF {
            out.extend(l.tf());
        } else if col < ep.xf(0) {
            out.push(l.x(0, col - ep.x0(0)));
        } else if col < ep.p(0) {
            out.push(l.x(l.intervals, col - ep.xf(0)));
        } else if col < ep.q(0) {
            out.push(l.p(col - ep.p(0)));
        } else {
            out.extend_from_slice(&self.q_vars);
        }
    }

    fn note(&mut self, err: EvalError, message: String) -> EvalError {
        self.last_failure = Some(FailureNote { tag: err.tag, stage: err.stage, message });
        err
    }

    /// Integrate every interval at `w` unless the cache already holds that point.
    fn integrate(&mut self, w: &[f64], sens: bool, part: EvalPart) -> Result<(), EvalError> {
        if self.cache.valid && (self.cache.with_sensitivities || !sens) && self.cache.w == w {
            return Ok(());
        }
        self.cache.valid = false;
        let l = &self.layout;
        let (nx, nu, np, nq) = (l.nx, l.nu, l.np, l.nq);
        for k in 0..l.intervals {
            let span = self.span_at(w, k);
            let p = &w[l.p_at(k, 0)..l.p_at(k, 0) + np];
            let x0 = &w[l.x(k, 0)..l.x(k, 0) + nx];
            let us = l.u_at(k, 0);
            let u_start = &w[us..us + nu];
            let u_end: &[f64] = if l.linear_controls {
                let ue = l.u_at(k + 1, 0);
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
        }
        self.cache.q.fill(0.0);
        for out in &self.cache.outputs {
            for (a, b) in self.cache.q.iter_mut().zip(&out.q) {
                *a += b;
            }
        }
        if sens && nq > 0 {
            let n = l.n_vars();
            self.cache.dq.fill(0.0);
            let cols = self.integrator.columns();
            for (k, out) in self.cache.outputs.iter().enumerate() {
                let s = &out.sensitivities;
                for j in 0..nq {
                    let row = &mut self.cache.dq[j * n..(j + 1) * n];
                    for &(c, v) in &self.interval_vars[k] {
                        row[v] += s[(nx + j, c)];
                    }
                    if let Some(t) = l.tf_at(k) {
                        let dm = self.mesh[k + 1] - self.mesh[k];
                        row[t] +=
                            s[(nx + j, cols.t_start())] * self.mesh[k] + s[(nx + j, cols.h())] * dm;
                    }
                }
            }
        }
        self.cache.w.copy_from_slice(w);
        self.cache.with_sensitivities = sens;
        self.cache.valid = true;
        Ok(())
    }

    /// Variables of copy row `j` of interval `k`: `(node k's copy, node k+1's copy)`.
    fn copy_pair(&self, k: usize, j: usize) -> (usize, usize) {
        let l = &self.layout;
        if j < l.np {
            (l.p_at(k, j), l.p_at(k + 1, j))
        } else {
            (l.tf_at(k).unwrap_or(0), l.tf_at(k + 1).unwrap_or(0))
        }
    }

    /// Fill an endpoint function's input `[t0, tf, x0, xN, p, q]` (integrals from the cache).
    fn endpoint_input(&self, w: &[f64], input: &mut [f64]) {
        let (ep, l) = (&self.ep, &self.layout);
        input[EndpointLayout::T0] = self.t0;
        input[EndpointLayout::TF] = self.end_time(w);
        for i in 0..l.nx {
            input[ep.x0(i)] = w[l.x(0, i)];
            input[ep.xf(i)] = w[l.x(l.intervals, i)];
        }
        for i in 0..l.np {
            input[ep.p(i)] = w[l.p(i)];
        }
        input[ep.q(0)..ep.q(0) + l.nq].copy_from_slice(&self.cache.q);
    }

    /// Add `value * d(endpoint input col)/dw` into `acc` (dense, length n).
    fn chain_endpoint(&self, col: usize, value: f64, acc: &mut [f64]) {
        let (ep, l) = (&self.ep, &self.layout);
        let n = l.n_vars();
        if col == EndpointLayout::T0 {
        } else if col == EndpointLayout::TF {
            if let Some(t) = l.tf() {
                acc[t] += value;
            }
        } else if col < ep.xf(0) {
            acc[l.x(0, col - ep.x0(0))] += value;
        } else if col < ep.p(0) {
            acc[l.x(l.intervals, col - ep.xf(0))] += value;
        } else if col < ep.q(0) {
            acc[l.p(col - ep.p(0))] += value;
        } else {
            let j = col - ep.q(0);
            let row = &self.cache.dq[j * n..(j + 1) * n];
            for &v in &self.q_vars {
                acc[v] += value * row[v];
            }
        }
    }

    /// Fill the path function's input at node `k`.
    fn path_input(&mut self, w: &[f64], k: usize) {
        let span = self.span_at(w, k);
        let l = &self.layout;
        let inp = &mut self.path.input;
        inp[0] = self.t0 + self.mesh[k] * span;
        inp[1..1 + l.nx].copy_from_slice(&w[l.x(k, 0)..l.x(k, 0) + l.nx]);
        let u = if l.nu > 0 { l.u_at(k, 0) } else { 0 };
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
        index: usize,
        value: f64,
    ) -> EvalError {
        let err = EvalError::non_finite(part, index, value).with_tag(function_tag(kind, row));
        let name = if kind == FunctionKind::Objective { "objective" } else { "boundary row" };
        let msg = if kind == FunctionKind::Objective {
            format!("{name} is {value}")
        } else {
            format!("{name} {row} is {value}")
        };
        self.note(err, msg)
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
        lower[..l.intervals * l.nx].fill(0.0);
        upper[..l.intervals * l.nx].fill(0.0);
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

    fn objective(&mut self, w: &[f64]) -> Result<f64, EvalError> {
        if self.layout.nq > 0 {
            self.integrate(w, false, EvalPart::Objective)?;
        }
        let mut input = std::mem::take(&mut self.objective.input);
        self.endpoint_input(w, &mut input);
        self.objective.input = input;
        self.objective.value();
        if let Some((_, v)) = self.objective.first_bad(false) {
            return Err(self.endpoint_failure(
                EvalPart::Objective,
                FunctionKind::Objective,
                0,
                0,
                v,
            ));
        }
        Ok(self.objective.out[0])
    }

    fn gradient(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        if self.layout.nq > 0 {
            self.integrate(w, true, EvalPart::Gradient)?;
        }
        let mut input = std::mem::take(&mut self.objective.input);
        self.endpoint_input(w, &mut input);
        self.objective.input = input;
        self.objective.value_and_jacobian();
        if let Some((_, v)) = self.objective.first_bad(true) {
            return Err(self.endpoint_failure(
                EvalPart::Gradient,
                FunctionKind::Objective,
                0,
                0,
                v,
            ));
        }
        values.fill(0.0);
        for (e, &(_, c)) in self.objective.fun.jacobian_pattern().iter().enumerate() {
            self.chain_endpoint(c, self.objective.jac[e], values);
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
            for j in 0..l.n_copies() {
                let (a, b) = self.copy_pair(k, j);
                values[l.copy_row(k, j)] = w[b] - w[a];
            }
        }

        for k in 0..l.n_nodes() {
            if l.ng == 0 {
                break;
            }
            self.path_input(w, k);
            self.path.value();
            if let Some((r, v)) = self.path.first_bad(false) {
                return Err(self.path_failure(EvalPart::Constraints, k, r, v));
            }
            for r in 0..l.ng {
                values[l.path_row(k, r)] = self.path.out[r];
            }
        }
        if l.nb > 0 {
            let mut input = std::mem::take(&mut self.boundary.input);
            self.endpoint_input(w, &mut input);
            self.boundary.input = input;
            self.boundary.value();
            if let Some((r, v)) = self.boundary.first_bad(false) {
                let row = l.boundary_row(r);
                return Err(self.endpoint_failure(
                    EvalPart::Constraints,
                    FunctionKind::Boundary,
                    r,
                    row,
                    v,
                ));
            }
            for r in 0..l.nb {
                values[l.boundary_row(r)] = self.boundary.out[r];
            }
        }
        Ok(())
    }

    fn jacobian_pattern(&self) -> Pattern {
        let l = &self.layout;
        let mut p = Pattern::new();
        for k in 0..l.intervals {
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
            for j in 0..l.n_copies() {
                let (a, b) = self.copy_pair(k, j);
                p.push(l.copy_row(k, j), a);
                p.push(l.copy_row(k, j), b);
            }
        }
        let rl = costate_model::RunningLayout { nx: l.nx, nu: l.nu, np: l.np };
        for k in 0..l.n_nodes() {
            for &(r, c) in self.path.fun.jacobian_pattern() {
                let row = l.path_row(k, r);
                if c == costate_model::RunningLayout::T {
                    // t_k = t0 + s_k (tf - t0) depends on a variable only when tf is free.
                    if let Some(t) = l.tf_at(k) {
                        p.push(row, t);
                    }
                } else if c < rl.u(0) {
                    p.push(row, l.x(k, c - rl.x(0)));
                } else if c < rl.p(0) {
                    p.push(row, l.u_at(k, c - rl.u(0)));
                } else {
                    p.push(row, l.p_at(k, c - rl.p(0)));
                }
            }
        }
        for (r, cols) in self.boundary_cols.iter().enumerate() {
            for &c in cols {
                p.push(l.boundary_row(r), c);
            }
        }
        p
    }

    fn jacobian(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        self.integrate(w, true, EvalPart::Jacobian)?;
        let l = self.layout.clone();
        let cols = self.integrator.columns();
        let mut e = 0;
        for k in 0..l.intervals {
            let s = &self.cache.outputs[k].sensitivities;
            let dm = self.mesh[k + 1] - self.mesh[k];
            for i in 0..l.nx {
                values[e] = 1.0;
                e += 1;
                for &(c, _) in &self.interval_vars[k] {
                    values[e] = -s[(i, c)];
                    e += 1;
                }
                if l.free_end {
                    values[e] = -(s[(i, cols.t_start())] * self.mesh[k] + s[(i, cols.h())] * dm);
                    e += 1;
                }
            }
            for _ in 0..l.n_copies() {
                values[e] = -1.0;
                values[e + 1] = 1.0;
                e += 2;
            }
        }

        let pattern_len = self.path.fun.jacobian_pattern().len();
        for k in 0..l.n_nodes() {
            if pattern_len == 0 {
                break;
            }
            self.path_input(w, k);
            self.path.value_and_jacobian();
            if let Some((r, v)) = self.path.first_bad(true) {
                return Err(self.path_failure(EvalPart::Jacobian, k, r, v));
            }
            for (a, &(_, c)) in self.path.fun.jacobian_pattern().iter().enumerate() {
                if c == costate_model::RunningLayout::T {
                    if l.free_end {
                        values[e] = self.path.jac[a] * self.mesh[k];
                        e += 1;
                    }
                } else {
                    values[e] = self.path.jac[a];
                    e += 1;
                }
            }
        }
        if l.nb > 0 {
            let mut input = std::mem::take(&mut self.boundary.input);
            self.endpoint_input(w, &mut input);
            self.boundary.input = input;
            self.boundary.value_and_jacobian();
            if let Some((r, v)) = self.boundary.first_bad(true) {
                let row = l.boundary_row(r);
                return Err(self.endpoint_failure(
                    EvalPart::Jacobian,
                    FunctionKind::Boundary,
                    r,
                    row,
                    v,
                ));
            }
            let mut acc = std::mem::take(&mut self.scratch);
            for r in 0..l.nb {
                for (a, &(row, c)) in self.boundary.fun.jacobian_pattern().iter().enumerate() {
                    if row == r {
                        self.chain_endpoint(c, self.boundary.jac[a], &mut acc);
                    }
                }
                for &c in &self.boundary_cols[r] {
                    values[e] = acc[c];
                    acc[c] = 0.0;
                    e += 1;
                }
            }
            self.scratch = acc;
        }
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
        let out = self.fill_hessian(&mut ex, w, objective_factor, multipliers, values);
        self.exact = Some(ex);
        out
    }

    fn variable_blocks(&self) -> Vec<Range<usize>> {
        (0..self.layout.n_nodes())
            .map(|k| self.layout.node_range(k))
            .filter(|r| !r.is_empty())
            .collect()
    }

    fn variable_scales(&self, scales: &mut [f64]) {
        scales.copy_from_slice(&self.var_scale);
    }

    fn constraint_scales(&self, scales: &mut [f64]) {
        scales.copy_from_slice(&self.con_scale);
    }
}
