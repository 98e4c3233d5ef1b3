//! Shared test helpers: a forward-mode dual number, a test-side expression tree with its own
//! recursive evaluator, finite differences and dense views of the compiled sparse results.
//!
//! Everything here is written independently of the crate's derivative rules (for instance
//! `tan' = 1 / cos^2` here versus `1 + tan^2` in the graph), so agreement is evidence.

#![allow(dead_code)]

use costate_model::{BinaryOp, Function, Graph, NodeId, UnaryOp};

/// Forward-mode dual number `v + d * eps`, `eps^2 = 0`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Dual {
    pub v: f64,
    pub d: f64,
}

impl Dual {
    pub fn new(v: f64, d: f64) -> Self {
        Dual { v, d }
    }
    pub fn constant(v: f64) -> Self {
        Dual { v, d: 0.0 }
    }
}

/// Numbers the recursive evaluator runs on.
pub trait Scalar: Copy {
    fn from_f64(c: f64) -> Self;
    fn value(self) -> f64;
    fn unary(op: UnaryOp, a: Self) -> Self;
    fn binary(op: BinaryOp, a: Self, b: Self) -> Self;
}

impl Scalar for f64 {
    fn from_f64(c: f64) -> Self {
        c
    }
    fn value(self) -> f64 {
        self
    }
    fn unary(op: UnaryOp, x: f64) -> f64 {
        match op {
            UnaryOp::Neg => -x,
            UnaryOp::Sin => x.sin(),
            UnaryOp::Cos => x.cos(),
            UnaryOp::Tan => x.tan(),
            UnaryOp::Asin => x.asin(),
            UnaryOp::Acos => x.acos(),
            UnaryOp::Atan => x.atan(),
            UnaryOp::Sinh => x.sinh(),
            UnaryOp::Cosh => x.cosh(),
            UnaryOp::Tanh => x.tanh(),
            UnaryOp::Exp => x.exp(),
            UnaryOp::Log => x.ln(),
            UnaryOp::Sqrt => x.sqrt(),
            UnaryOp::Abs => x.abs(),
        }
    }
    fn binary(op: BinaryOp, a: f64, b: f64) -> f64 {
        match op {
            BinaryOp::Add => a + b,
            BinaryOp::Sub => a - b,
            BinaryOp::Mul => a * b,
            BinaryOp::Div => a / b,
            BinaryOp::Pow => a.powf(b),
            BinaryOp::Atan2 => a.atan2(b),
            BinaryOp::Min => a.min(b),
            BinaryOp::Max => a.max(b),
        }
    }
}

impl Scalar for Dual {
    fn from_f64(c: f64) -> Self {
        Dual::constant(c)
    }
    fn value(self) -> f64 {
        self.v
    }
    fn unary(op: UnaryOp, a: Dual) -> Dual {
        let x = a.v;
        // f'(x), written from textbook tables (independent of the graph's rule forms).
        let slope = match op {
            UnaryOp::Neg => -1.0,
            UnaryOp::Sin => x.cos(),
            UnaryOp::Cos => -x.sin(),
            UnaryOp::Tan => 1.0 / (x.cos() * x.cos()),
            UnaryOp::Asin => 1.0 / (1.0 - x * x).sqrt(),
            UnaryOp::Acos => -1.0 / (1.0 - x * x).sqrt(),
            UnaryOp::Atan => 1.0 / (1.0 + x * x),
            UnaryOp::Sinh => x.cosh(),
            UnaryOp::Cosh => x.sinh(),
            UnaryOp::Tanh => 1.0 / (x.cosh() * x.cosh()),
            UnaryOp::Exp => x.exp(),
            UnaryOp::Log => 1.0 / x,
            UnaryOp::Sqrt => 0.5 / x.sqrt(),
            UnaryOp::Abs => x.signum(),
        };
        Dual::new(f64::unary(op, x), slope * a.d)
    }
    fn binary(op: BinaryOp, a: Dual, b: Dual) -> Dual {
        let v = f64::binary(op, a.v, b.v);
        let d = match op {
            BinaryOp::Add => a.d + b.d,
            BinaryOp::Sub => a.d - b.d,
            BinaryOp::Mul => a.d * b.v + a.v * b.d,
            BinaryOp::Div => (a.d * b.v - a.v * b.d) / (b.v * b.v),
            BinaryOp::Pow => {
                if b.d == 0.0 {
                    b.v * a.v.powf(b.v - 1.0) * a.d
                } else {
                    v * (b.d * a.v.ln() + b.v * a.d / a.v)
                }
            }
            BinaryOp::Atan2 => (b.v * a.d - a.v * b.d) / (a.v * a.v + b.v * b.v),
            BinaryOp::Min => {
                if a.v <= b.v {
                    a.d
                } else {
                    b.d
                }
            }
            BinaryOp::Max => {
                if a.v >= b.v {
                    a.d
                } else {
                    b.d
                }
            }
        };
        Dual::new(v, d)
    }
}

/// A test-side expression tree.
#[derive(Clone, Debug)]
pub enum Expr {
    X(usize),
    C(f64),
    U(UnaryOp, Box<Expr>),
    B(BinaryOp, Box<Expr>, Box<Expr>),
}

impl Expr {
    pub fn u(op: UnaryOp, a: Expr) -> Expr {
        Expr::U(op, Box::new(a))
    }
    pub fn b(op: BinaryOp, a: Expr, b: Expr) -> Expr {
        Expr::B(op, Box::new(a), Box::new(b))
    }

    /// Adds the tree to `g` node by node (hash-consing merges repeated subtrees).
    pub fn build(&self, g: &mut Graph) -> NodeId {
        match self {
            Expr::X(i) => g.input(*i),
            Expr::C(c) => g.constant(*c),
            Expr::U(op, a) => {
                let a = a.build(g);
                g.unary(*op, a)
            }
            Expr::B(op, a, b) => {
                let a = a.build(g);
                let b = b.build(g);
                g.binary(*op, a, b)
            }
        }
    }
}

/// What the recursive evaluator saw along the way, to decide whether a point is safe for
/// finite differences.
#[derive(Clone, Copy, Debug)]
pub struct Watch {
    /// Largest |value| of any subexpression.
    pub max_abs: f64,
    /// Smallest `|distance to a kink| / (|speed of that distance| + 1e-300)` over abs, min, max
    /// and the branch cut of atan2: how far (in units of input change) the point is from a
    /// place where the derivative jumps.
    pub kink_margin: f64,
}

impl Default for Watch {
    fn default() -> Self {
        Watch { max_abs: 0.0, kink_margin: f64::INFINITY }
    }
}

/// Plain recursive evaluation, no sharing, no simplification.
pub fn eval<T: Scalar>(e: &Expr, x: &[T]) -> T {
    match e {
        Expr::X(i) => x[*i],
        Expr::C(c) => T::from_f64(*c),
        Expr::U(op, a) => T::unary(*op, eval(a, x)),
        Expr::B(op, a, b) => T::binary(*op, eval(a, x), eval(b, x)),
    }
}

fn margin(dist: f64, speed: f64) -> f64 {
    dist.abs() / (speed.abs() + 1e-300)
}

/// Recursive dual evaluation that also records the [`Watch`] data; kink distances are measured
/// against their speed along the seeded direction.
pub fn eval_watch_dual(e: &Expr, x: &[Dual], w: &mut Watch) -> Dual {
    fn go(e: &Expr, x: &[Dual], w: &mut Watch) -> Dual {
        let r = match e {
            Expr::X(i) => x[*i],
            Expr::C(c) => Dual::constant(*c),
            Expr::U(op, a) => {
                let a = go(a, x, w);
                if *op == UnaryOp::Abs {
                    w.kink_margin = w.kink_margin.min(margin(a.v, a.d));
                }
                Dual::unary(*op, a)
            }
            Expr::B(op, a, b) => {
                let a = go(a, x, w);
                let b = go(b, x, w);
                match op {
                    BinaryOp::Min | BinaryOp::Max => {
                        w.kink_margin = w.kink_margin.min(margin(a.v - b.v, a.d - b.d));
                    }
                    BinaryOp::Atan2 => {
                        // Singular at the origin; jumps across the negative x axis.
                        let r = a.v.hypot(b.v);
                        w.kink_margin = w.kink_margin.min(margin(r, a.d.abs() + b.d.abs()));
                        if b.v < 0.0 {
                            w.kink_margin = w.kink_margin.min(margin(a.v, a.d));
                        }
                    }
                    _ => {}
                }
                Dual::binary(*op, a, b)
            }
        };
        w.max_abs = w.max_abs.max(r.v.abs());
        r
    }
    go(e, x, w)
}

/// Dense `n_outputs x n_inputs` Jacobian from the compiled sparse one.
pub fn dense_jacobian(f: &Function, x: &[f64]) -> Vec<Vec<f64>> {
    let mut ws = f.workspace();
    let mut vals = vec![0.0; f.jacobian_pattern().len()];
    f.eval_jacobian(x, &mut vals, &mut ws);
    let mut j = vec![vec![0.0; f.n_inputs()]; f.n_outputs()];
    for (&(r, c), v) in f.jacobian_pattern().iter().zip(vals) {
        j[r][c] = v;
    }
    j
}

/// Dense symmetric Hessian of `sum w_i f_i` from the compiled lower triangle.
pub fn dense_hessian(f: &Function, x: &[f64], w: &[f64]) -> Vec<Vec<f64>> {
    let mut ws = f.workspace();
    let mut vals = vec![0.0; f.hessian_pattern().len()];
    f.eval_hessian(x, w, &mut vals, &mut ws);
    let n = f.n_inputs();
    let mut h = vec![vec![0.0; n]; n];
    for (&(r, c), v) in f.hessian_pattern().iter().zip(vals) {
        h[r][c] = v;
        h[c][r] = v;
    }
    h
}

pub fn eval_outputs(f: &Function, x: &[f64]) -> Vec<f64> {
    let mut ws = f.workspace();
    let mut out = vec![0.0; f.n_outputs()];
    f.eval(x, &mut out, &mut ws);
    out
}

/// Step for central differences at `x`: `h_rel * max(1, |x|)`.
pub fn step(x: f64, h_rel: f64) -> f64 {
    h_rel * x.abs().max(1.0)
}

/// Central-difference Jacobian of the compiled outputs.
pub fn fd_jacobian(f: &Function, x: &[f64], h_rel: f64) -> Vec<Vec<f64>> {
    let mut j = vec![vec![0.0; f.n_inputs()]; f.n_outputs()];
    for k in 0..x.len() {
        let h = step(x[k], h_rel);
        let (mut xp, mut xm) = (x.to_vec(), x.to_vec());
        xp[k] += h;
        xm[k] -= h;
        let (fp, fm) = (eval_outputs(f, &xp), eval_outputs(f, &xm));
        for i in 0..f.n_outputs() {
            j[i][k] = (fp[i] - fm[i]) / (xp[k] - xm[k]);
        }
    }
    j
}

/// Central differences of the compiled (symbolic) Jacobian, weighted: an independent estimate
/// of the Hessian of `sum w_i f_i`, dense.
pub fn fd_hessian(f: &Function, x: &[f64], w: &[f64], h_rel: f64) -> Vec<Vec<f64>> {
    let n = f.n_inputs();
    let mut h = vec![vec![0.0; n]; n];
    for k in 0..n {
        let hk = step(x[k], h_rel);
        let (mut xp, mut xm) = (x.to_vec(), x.to_vec());
        xp[k] += hk;
        xm[k] -= hk;
        let (jp, jm) = (dense_jacobian(f, &xp), dense_jacobian(f, &xm));
        for j in 0..n {
            h[j][k] =
                (0..f.n_outputs()).map(|i| w[i] * (jp[i][j] - jm[i][j]) / (xp[k] - xm[k])).sum();
        }
    }
    h
}

/// `|a - b| <= abs + rel * max(|a|, |b|)`.
pub fn close(a: f64, b: f64, abs: f64, rel: f64) -> bool {
    (a - b).abs() <= abs + rel * a.abs().max(b.abs())
}

/// Tolerances of [`check_function`], each `(abs, rel)` for [`close`]; `abs` is multiplied by
/// `1 + scale`, where `scale` is the largest magnitude seen among values and derivatives.
#[derive(Clone, Copy, Debug)]
pub struct Tolerances {
    /// Compiled values against the recursive evaluator.
    pub values: (f64, f64),
    /// Compiled Jacobian against dual numbers (both exact up to rounding).
    pub dual: (f64, f64),
    /// Compiled Jacobian against central differences, and compiled Hessian against central
    /// differences of the compiled Jacobian.
    pub finite_difference: (f64, f64),
    /// Compiled Hessian against the graph's own evaluation of the same derivative nodes.
    pub graph: (f64, f64),
    /// Relative step of the central differences.
    pub h_rel: f64,
}

/// Largest magnitude among values, Jacobian and Hessian entries: the scale of the check.
pub fn scale_of(f: &Function, x: &[f64], w: &[f64]) -> f64 {
    let v = eval_outputs(f, x).into_iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let j = dense_jacobian(f, x).into_iter().flatten().fold(0.0f64, |m, v| m.max(v.abs()));
    let h = dense_hessian(f, x, w).into_iter().flatten().fold(0.0f64, |m, v| m.max(v.abs()));
    v.max(j).max(h)
}

/// Checks a compiled function of `exprs` at `x` with weights `w` against every reference:
/// the recursive evaluator, dual numbers, central differences (first and second order) and
/// the graph's direct evaluation of its derivative nodes. Returns a description of the first
/// disagreement.
pub fn check_function(
    exprs: &[Expr],
    x: &[f64],
    w: &[f64],
    tol: &Tolerances,
    scale: f64,
) -> Result<(), String> {
    let mut g = Graph::new();
    let outs: Vec<NodeId> = exprs.iter().map(|e| e.build(&mut g)).collect();
    let f = Function::compile(&mut g, x.len(), &outs);
    let n = x.len();
    let s = 1.0 + scale;
    let show = |i: usize| format!("output {i} = {}", g.display(outs[i]));

    let vals = eval_outputs(&f, x);
    for (i, e) in exprs.iter().enumerate() {
        let want = eval::<f64>(e, x);
        if !close(vals[i], want, tol.values.0 * s, tol.values.1) {
            return Err(format!("{}: value {} vs recursive {}", show(i), vals[i], want));
        }
    }

    let jac = dense_jacobian(&f, x);
    let fd = fd_jacobian(&f, x, tol.h_rel);
    for k in 0..n {
        let seeded: Vec<Dual> =
            (0..n).map(|i| Dual::new(x[i], if i == k { 1.0 } else { 0.0 })).collect();
        for (i, e) in exprs.iter().enumerate() {
            let d = eval::<Dual>(e, &seeded).d;
            let in_pattern = f.jacobian_pattern().contains(&(i, k));
            if !in_pattern && d.abs() > 1e-12 * s {
                return Err(format!("{}: d/dx{k} = {d} but not in the pattern", show(i)));
            }
            if !close(jac[i][k], d, tol.dual.0 * s, tol.dual.1) {
                return Err(format!("{}: d/dx{k} = {} vs dual {d}", show(i), jac[i][k]));
            }
            let (a, r) = tol.finite_difference;
            if !close(jac[i][k], fd[i][k], a * s, r) {
                return Err(format!("{}: d/dx{k} = {} vs fd {}", show(i), jac[i][k], fd[i][k]));
            }
        }
    }

    let hess = dense_hessian(&f, x, w);
    let fdh = fd_hessian(&f, x, w, tol.h_rel);
    for j in 0..n {
        for k in 0..n {
            let (a, r) = tol.finite_difference;
            if !close(hess[j][k], fdh[j][k], a * s, r) {
                return Err(format!("H[{j}][{k}] = {} vs fd {}", hess[j][k], fdh[j][k]));
            }
        }
    }
    let mut hvals = vec![0.0; f.hessian_pattern().len()];
    f.eval_hessian(x, w, &mut hvals, &mut f.workspace());
    for (&(j, k), &v) in f.hessian_pattern().iter().zip(&hvals) {
        if j < k {
            return Err(format!("Hessian entry ({j}, {k}) above the diagonal"));
        }
        let mut want = 0.0;
        for (i, &o) in outs.iter().enumerate() {
            let dj = g.derivative(o, j);
            let djk = g.derivative(dj, k);
            want += w[i] * g.evaluate(&[djk], x)[0];
        }
        if !close(v, want, tol.graph.0 * s, tol.graph.1) {
            return Err(format!("H[{j}][{k}] = {v} vs graph {want}"));
        }
    }
    let mut sorted = f.hessian_pattern().to_vec();
    sorted.sort_unstable();
    sorted.dedup();
    if sorted != f.hessian_pattern() {
        return Err("Hessian pattern not sorted and unique".into());
    }
    let mut sorted = f.jacobian_pattern().to_vec();
    sorted.sort_unstable();
    sorted.dedup();
    if sorted != f.jacobian_pattern() {
        return Err("Jacobian pattern not sorted and unique".into());
    }
    Ok(())
}
