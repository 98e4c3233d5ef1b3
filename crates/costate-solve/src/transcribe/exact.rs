//! Exact Lagrangian Hessian of the multiple-shooting NLP, for the explicit RK4 integrator.
//!
//! Owns the expression graph of one whole interval map (every RK4 stage of every substep,
//! built by replaying the compiled dynamics and integrands into one graph) and the scatter of
//! the second derivatives of that map, of the path rows and of the endpoint functions into the
//! NLP's lower-triangle Hessian pattern. Must not: evaluate first derivatives (the integrator
//! does), difference numerically, or know names.
//!
//! Why a graph of the whole step: the discrete map `F(x, u, p, T)` of RK4 is a composition of
//! dynamics evaluations, so its exact second derivatives are those of that composition. Built
//! as one graph, the model crate differentiates it symbolically (forward-over-reverse
//! Hessian tape) like any user function, and the Hessian is exact for the computed map, the
//! same map whose first derivatives the integrator's forward sensitivities give.
//!
//! Not covered (the transcription then offers no Hessian and the SQP uses block BFGS): the
//! Radau IIA integrator (second derivatives of an implicit map need second-order adjoint
//! sensitivities, not built). Endpoint functions may be nonlinear in the integrals: those
//! enter as the running sums at the last node (see `layout.rs`), so their second
//! derivatives stay in that node's block.

use std::collections::HashMap;

use costate_model::{BinaryOp, Function, Graph, NodeId, Ocp, Workspace};

use crate::integrate::{rk4_tableau, ControlShape, IntegratorSettings, Method};
use crate::nlp::Pattern;

use super::layout::Layout;
use super::shooting::{endpoint_var, running_var};

/// `(entry of a function's Hessian pattern, entry of the NLP pattern, factor)`.
type Scatter = Vec<(usize, usize, f64)>;

/// A compiled function's Hessian with its buffers.
#[derive(Clone, Debug)]
struct Part {
    fun: Function,
    ws: Workspace,
    input: Vec<f64>,
    weights: Vec<f64>,
    values: Vec<f64>,
}

impl Part {
    fn new(fun: &Function) -> Part {
        Part {
            ws: fun.workspace(),
            input: vec![0.0; fun.n_inputs()],
            weights: vec![0.0; fun.n_outputs()],
            values: vec![0.0; fun.hessian_pattern().len()],
            fun: fun.clone(),
        }
    }

    fn eval(&mut self) {
        self.fun.eval_hessian(&self.input, &self.weights, &mut self.values, &mut self.ws);
    }

    fn scatter(&self, map: &Scatter, out: &mut [f64]) {
        for &(e, k, f) in map {
            out[k] += f * self.values[e];
        }
    }
}

/// Everything needed to evaluate the exact Hessian of a [`super::MultipleShooting`].
#[derive(Clone, Debug)]
pub(crate) struct ExactHessian {
    pub(crate) pattern: Pattern,
    step: Part,
    path: Part,
    objective: Part,
    boundary: Part,
    /// Per interval and per node.
    step_maps: Vec<Scatter>,
    path_maps: Vec<Scatter>,
    /// Objective and boundary scatters for the evaluation at node 0 (`[0]`) and at the last
    /// node (`[1]`).
    objective_maps: [Scatter; 2],
    boundary_maps: [Scatter; 2],
}

/// Lower-triangle NLP pattern built entry by entry, repeated pairs sharing one position.
#[derive(Default)]
struct PatternBuilder {
    pattern: Pattern,
    index: HashMap<(usize, usize), usize>,
}

impl PatternBuilder {
    fn entry(&mut self, a: usize, b: usize) -> usize {
        let key = (a.max(b), a.min(b));
        let next = self.pattern.len();
        *self.index.entry(key).or_insert_with(|| {
            self.pattern.push(key.0, key.1);
            next
        })
    }

    /// Scatter of `fun`'s Hessian through `var`: input -> (variable, factor), `None` for an
    /// input that is no variable (a constant of this interval or node).
    fn map(&mut self, fun: &Function, var: &dyn Fn(usize) -> Option<(usize, f64)>) -> Scatter {
        let mut out = Vec::new();
        for (e, &(r, c)) in fun.hessian_pattern().iter().enumerate() {
            if let (Some((vr, fr)), Some((vc, fc))) = (var(r), var(c)) {
                // An off-diagonal entry landing on the diagonal stands for both mirror images.
                let twice = if r != c && vr == vc { 2.0 } else { 1.0 };
                out.push((e, self.entry(vr, vc), twice * fr * fc));
            }
        }
        out
    }
}

/// Inputs of the step function: `[x (nx), u_start (nu), u_end (nu, linear only), p (np), T,
/// s0, ds]` with `T = tf - t0` the horizon length, `s0` the interval's start fraction and `ds`
/// its length fraction, so `t_start = t0 + s0 T` and `h = ds T` as in the transcription.
fn step_inputs(nx: usize, nu: usize, np: usize, linear: bool) -> usize {
    nx + nu * if linear { 2 } else { 1 } + np + 3
}

/// The RK4 interval map `(x_end, q)` as one compiled function of [`step_inputs`].
fn rk4_step(ocp: &Ocp, t0: f64, substeps: usize, linear: bool) -> Option<Function> {
    let rl = ocp.running_layout();
    let (nx, nu, np, nq) = (rl.nx, rl.nu, rl.np, ocp.n_integrals);
    let n_in = step_inputs(nx, nu, np, linear);
    let (a_tab, b_tab, c_tab) = rk4_tableau();
    let mut g = Graph::new();
    let inp: Vec<NodeId> = (0..n_in).map(|j| g.input(j)).collect();
    let x = &inp[..nx];
    let us = &inp[nx..nx + nu];
    let ue_at = nx + nu;
    let ue = if linear { &inp[ue_at..ue_at + nu] } else { &inp[0..0] };
    let p_at = nx + nu * if linear { 2 } else { 1 };
    let p = &inp[p_at..p_at + np];
    let (span, s0, ds) = (inp[n_in - 3], inp[n_in - 2], inp[n_in - 1]);

    let m = substeps as f64;
    let h = g.binary(BinaryOp::Mul, ds, span);
    let mc = g.constant(m);
    let hs = g.binary(BinaryOp::Div, h, mc);
    let t0c = g.constant(t0);
    let off = g.binary(BinaryOp::Mul, s0, span);
    let t_start = g.binary(BinaryOp::Add, t0c, off);
    let zero = g.constant(0.0);
    let mut xc: Vec<NodeId> = x.to_vec();
    let mut qc: Vec<NodeId> = vec![zero; nq];
    let stages = b_tab.len();
    for step in 0..substeps {
        let mut ks: Vec<Vec<NodeId>> = Vec::with_capacity(stages);
        let mut ls: Vec<Vec<NodeId>> = Vec::with_capacity(stages);
        for i in 0..stages {
            let theta = (step as f64 + c_tab[i]) / m;
            let mut xs = xc.clone();
            for j in 0..i {
                let a = a_tab[i][j];
                if a != 0.0 {
                    let ac = g.constant(a);
                    let hsa = g.binary(BinaryOp::Mul, hs, ac);
                    for r in 0..nx {
                        let term = g.binary(BinaryOp::Mul, hsa, ks[j][r]);
                        xs[r] = g.binary(BinaryOp::Add, xs[r], term);
                    }
                }
            }
            let th = g.constant(theta);
            let dt = g.binary(BinaryOp::Mul, th, h);
            let t = g.binary(BinaryOp::Add, t_start, dt);
            let mut run = Vec::with_capacity(rl.len());
            run.push(t);
            run.extend_from_slice(&xs);
            for r in 0..nu {
                if linear {
                    let diff = g.binary(BinaryOp::Sub, ue[r], us[r]);
                    let part = g.binary(BinaryOp::Mul, th, diff);
                    run.push(g.binary(BinaryOp::Add, us[r], part));
                } else {
                    run.push(us[r]);
                }
            }
            run.extend_from_slice(p);
            ks.push(ocp.dynamics.replay(&mut g, &run));
            ls.push(if nq > 0 { ocp.integrands.replay(&mut g, &run) } else { Vec::new() });
        }
        for i in 0..stages {
            let bc = g.constant(b_tab[i]);
            let hsb = g.binary(BinaryOp::Mul, hs, bc);
            for r in 0..nx {
                let term = g.binary(BinaryOp::Mul, hsb, ks[i][r]);
                xc[r] = g.binary(BinaryOp::Add, xc[r], term);
            }
            for r in 0..nq {
                let term = g.binary(BinaryOp::Mul, hsb, ls[i][r]);
                qc[r] = g.binary(BinaryOp::Add, qc[r], term);
            }
        }
    }
    let mut outputs = xc;
    outputs.extend(qc);
    Function::try_compile(&mut g, n_in, &outputs).ok()
}

impl ExactHessian {
    /// `None` when the problem or integrator is outside what this module covers (see the
    /// module docs).
    pub(crate) fn new(
        ocp: &Ocp,
        layout: &Layout,
        mesh: &[f64],
        t0: f64,
        settings: &IntegratorSettings,
    ) -> Option<ExactHessian> {
        if settings.method != Method::Rk4 {
            return None;
        }
        let ep = ocp.endpoint_layout();
        let linear = settings.controls == ControlShape::Linear;
        let step = rk4_step(ocp, t0, settings.substeps.max(1), linear)?;
        let l = layout;
        let (nx, nu, np) = (l.nx, l.nu, l.np);
        let mut pb = PatternBuilder::default();

        let step_maps = (0..l.intervals)
            .map(|k| {
                let var = |j: usize| -> Option<(usize, f64)> {
                    if j < nx {
                        return Some((l.x(k, j), 1.0));
                    }
                    let mut j = j - nx;
                    if j < nu {
                        return Some((l.u_at(k, j), 1.0));
                    }
                    j -= nu;
                    if linear {
                        if j < nu {
                            return Some((l.v(k, j), 1.0));
                        }
                        j -= nu;
                    }
                    if j < np {
                        return Some((l.p_at(k, j), 1.0));
                    }
                    // T = tf - t0 moves one for one with the node's end-time copy.
                    if j == np {
                        return l.tf_at(k).map(|t| (t, 1.0));
                    }
                    None
                };
                pb.map(&step, &var)
            })
            .collect();

        let path_maps =
            (0..l.n_nodes()).map(|k| pb.map(&ocp.path, &|j| running_var(l, mesh, k, j))).collect();

        let endpoint = |pb: &mut PatternBuilder, f: &Function, at_start: bool| {
            pb.map(f, &|j| endpoint_var(l, &ep, at_start, j).map(|v| (v, 1.0)))
        };
        let objective_maps =
            [endpoint(&mut pb, &ocp.objective, true), endpoint(&mut pb, &ocp.objective, false)];
        let boundary_maps =
            [endpoint(&mut pb, &ocp.boundary, true), endpoint(&mut pb, &ocp.boundary, false)];
        Some(ExactHessian {
            pattern: pb.pattern,
            path: Part::new(&ocp.path),
            objective: Part::new(&ocp.objective),
            boundary: Part::new(&ocp.boundary),
            step: Part::new(&step),
            step_maps,
            path_maps,
            objective_maps,
            boundary_maps,
        })
    }

    /// Step inputs of interval `k` at `w`, given its horizon length `span`.
    pub(crate) fn set_step_input(
        &mut self,
        l: &Layout,
        w: &[f64],
        k: usize,
        span: f64,
        s0: f64,
        ds: f64,
    ) {
        let inp = &mut self.step.input;
        let mut at = 0;
        for i in 0..l.nx {
            inp[at] = w[l.x(k, i)];
            at += 1;
        }
        for i in 0..l.nu {
            inp[at] = w[l.u_at(k, i)];
            at += 1;
        }
        if l.linear_controls {
            for i in 0..l.nu {
                inp[at] = w[l.v(k, i)];
                at += 1;
            }
        }
        for i in 0..l.np {
            inp[at] = w[l.p_at(k, i)];
            at += 1;
        }
        inp[at] = span;
        inp[at + 1] = s0;
        inp[at + 2] = ds;
    }

    /// Hessian of interval `k`'s map weighted by `weights` (`nx` continuity then `nq`
    /// integral weights), added into `out`. Inputs must be set by [`Self::set_step_input`].
    pub(crate) fn add_step(&mut self, k: usize, weights: &[f64], out: &mut [f64]) {
        self.step.weights.copy_from_slice(weights);
        self.step.eval();
        self.step.scatter(&self.step_maps[k], out);
    }

    /// Path rows at node `k` with running input `input` and row weights `weights`.
    pub(crate) fn add_path(&mut self, k: usize, input: &[f64], weights: &[f64], out: &mut [f64]) {
        if self.path_maps[k].is_empty() {
            return;
        }
        self.path.input.copy_from_slice(input);
        self.path.weights.copy_from_slice(weights);
        self.path.eval();
        self.path.scatter(&self.path_maps[k], out);
    }

    /// Objective (weight `sigma`) and boundary rows (weights `weights`) evaluated at node 0
    /// (`at_start`) or the last node, with endpoint input `input`.
    pub(crate) fn add_endpoint(
        &mut self,
        at_start: bool,
        input: &[f64],
        sigma: f64,
        weights: &[f64],
        out: &mut [f64],
    ) {
        let side = usize::from(!at_start);
        if sigma != 0.0 && !self.objective_maps[side].is_empty() {
            self.objective.input.copy_from_slice(input);
            self.objective.weights[0] = sigma;
            self.objective.eval();
            self.objective.scatter(&self.objective_maps[side], out);
        }
        if weights.iter().any(|&v| v != 0.0) && !self.boundary_maps[side].is_empty() {
            self.boundary.input.copy_from_slice(input);
            self.boundary.weights.copy_from_slice(weights);
            self.boundary.eval();
            self.boundary.scatter(&self.boundary_maps[side], out);
        }
    }
}
