//! Shared helpers of the `integrate_*` tests: building running functions from closures over a
//! small expression builder, running one interval, and central differences of the integrator
//! itself (test-only: the library never differentiates numerically).

#![allow(dead_code)]

use costate_model::{BinaryOp, Function, Graph, NodeId, RunningLayout, UnaryOp};
use costate_solve::integrate::{
    ControlShape, IntegrationError, Integrator, IntegratorSettings, IntervalInput, IntervalOutput,
    Method,
};

/// Builds expressions over the running input `[t, x.., u.., p..]`.
pub struct B<'g> {
    pub g: &'g mut Graph,
    pub layout: RunningLayout,
}

impl B<'_> {
    pub fn t(&mut self) -> NodeId {
        self.g.input(RunningLayout::T)
    }
    pub fn x(&mut self, i: usize) -> NodeId {
        let k = self.layout.x(i);
        self.g.input(k)
    }
    pub fn u(&mut self, i: usize) -> NodeId {
        let k = self.layout.u(i);
        self.g.input(k)
    }
    pub fn p(&mut self, i: usize) -> NodeId {
        let k = self.layout.p(i);
        self.g.input(k)
    }
    pub fn c(&mut self, v: f64) -> NodeId {
        self.g.constant(v)
    }
    pub fn add(&mut self, a: NodeId, b: NodeId) -> NodeId {
        self.g.binary(BinaryOp::Add, a, b)
    }
    pub fn sub(&mut self, a: NodeId, b: NodeId) -> NodeId {
        self.g.binary(BinaryOp::Sub, a, b)
    }
    pub fn mul(&mut self, a: NodeId, b: NodeId) -> NodeId {
        self.g.binary(BinaryOp::Mul, a, b)
    }
    pub fn div(&mut self, a: NodeId, b: NodeId) -> NodeId {
        self.g.binary(BinaryOp::Div, a, b)
    }
    pub fn neg(&mut self, a: NodeId) -> NodeId {
        self.g.unary(UnaryOp::Neg, a)
    }
    pub fn un(&mut self, op: UnaryOp, a: NodeId) -> NodeId {
        self.g.unary(op, a)
    }
    pub fn scale(&mut self, k: f64, a: NodeId) -> NodeId {
        let k = self.c(k);
        self.mul(k, a)
    }
}

/// Compiles dynamics and integrands (both running functions) from one graph.
pub fn ode(
    nx: usize,
    nu: usize,
    np: usize,
    dynamics: impl FnOnce(&mut B) -> Vec<NodeId>,
    integrands: impl FnOnce(&mut B) -> Vec<NodeId>,
) -> (Function, Function, RunningLayout) {
    let layout = RunningLayout { nx, nu, np };
    let mut g = Graph::new();
    let (fo, lo) = {
        let mut b = B { g: &mut g, layout };
        let fo = dynamics(&mut b);
        let lo = integrands(&mut b);
        (fo, lo)
    };
    let f = Function::compile(&mut g, layout.len(), &fo);
    let l = Function::compile(&mut g, layout.len(), &lo);
    (f, l, layout)
}

pub fn settings(method: Method, substeps: usize, controls: ControlShape) -> IntegratorSettings {
    IntegratorSettings { method, substeps, controls, ..IntegratorSettings::default() }
}

/// Owned interval data, so tests can perturb single entries.
#[derive(Clone, Debug)]
pub struct Data {
    pub x0: Vec<f64>,
    pub u_start: Vec<f64>,
    pub u_end: Vec<f64>,
    pub p: Vec<f64>,
    pub t_start: f64,
    pub h: f64,
}

impl Data {
    pub fn input(&self) -> IntervalInput<'_> {
        IntervalInput {
            x0: &self.x0,
            u_start: &self.u_start,
            u_end: &self.u_end,
            p: &self.p,
            t_start: self.t_start,
            h: self.h,
        }
    }

    /// The sensitivity column `col` as a mutable entry, in the documented layout
    /// `[x0, u_start, u_end (linear only), p, t_s, h]`.
    pub fn entry(&mut self, col: usize, linear: bool) -> &mut f64 {
        let (nx, nu, np) = (self.x0.len(), self.u_start.len(), self.p.len());
        let nuc = if linear { 2 * nu } else { nu };
        if col < nx {
            &mut self.x0[col]
        } else if col < nx + nu {
            &mut self.u_start[col - nx]
        } else if col < nx + nuc {
            &mut self.u_end[col - nx - nu]
        } else if col < nx + nuc + np {
            &mut self.p[col - nx - nuc]
        } else if col == nx + nuc + np {
            &mut self.t_start
        } else {
            &mut self.h
        }
    }
}

pub fn run(
    integ: &mut Integrator,
    data: &Data,
    sens: bool,
) -> Result<IntervalOutput, IntegrationError> {
    let mut out = integ.new_output();
    integ.integrate(&data.input(), &mut out, sens)?;
    Ok(out)
}

/// `(x_end, q)` stacked.
pub fn values(out: &IntervalOutput) -> Vec<f64> {
    out.x_end.iter().chain(&out.q).copied().collect()
}

/// Central differences of the integrator map with step `delta * max(1, |w_c|)` per column,
/// as a row-major `(nx + nq) x n_cols` matrix.
/// An error when the integrator refuses the point or one of its perturbations.
pub fn central_differences(
    integ: &mut Integrator,
    data: &Data,
    delta: f64,
) -> Result<Vec<Vec<f64>>, IntegrationError> {
    let cols = integ.columns();
    let base = values(&run(integ, data, false)?);
    let mut jac = vec![vec![0.0; cols.len()]; base.len()];
    for c in 0..cols.len() {
        let mut plus = data.clone();
        let mut minus = data.clone();
        let w = *plus.entry(c, cols.linear);
        let step = delta * w.abs().max(1.0);
        *plus.entry(c, cols.linear) = w + step;
        *minus.entry(c, cols.linear) = w - step;
        let vp = values(&run(integ, &plus, false)?);
        let vm = values(&run(integ, &minus, false)?);
        for ((row, p), m) in jac.iter_mut().zip(&vp).zip(&vm) {
            row[c] = (p - m) / (2.0 * step);
        }
    }
    Ok(jac)
}
