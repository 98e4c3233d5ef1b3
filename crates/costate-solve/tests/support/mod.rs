//! Small dense test NLPs built from closures, for the SQP tests. Dense patterns are fine at
//! these sizes; the closures' derivatives are checked against central differences before use
//! so a wrong test derivative fails loudly instead of blaming the solver.

#![allow(dead_code)]

use costate_solve::{EvalError, Nlp, Pattern};

pub type Scalar = Box<dyn Fn(&[f64]) -> f64>;
pub type Vector = Box<dyn Fn(&[f64], &mut [f64])>;
/// `(x, objective_factor, multipliers, dense row-major n x n out)`.
pub type Hess = Box<dyn Fn(&[f64], f64, &[f64], &mut [f64])>;

pub struct TestNlp {
    pub x0: Vec<f64>,
    pub xl: Vec<f64>,
    pub xu: Vec<f64>,
    pub cl: Vec<f64>,
    pub cu: Vec<f64>,
    pub f: Scalar,
    pub grad: Vector,
    pub c: Vector,
    /// Dense row-major `m x n`.
    pub jac: Vector,
    pub hess: Option<Hess>,
    pub warm: Option<(Vec<f64>, Vec<f64>)>,
    pub var_scale: Option<Vec<f64>>,
    pub con_scale: Option<Vec<f64>>,
    /// Error returned by the objective at points where it is NaN, to test location data.
    pub tagged_error: Option<EvalError>,
}

pub const INF: f64 = f64::INFINITY;

impl TestNlp {
    pub fn new(x0: Vec<f64>, f: Scalar, grad: Vector) -> Self {
        let n = x0.len();
        TestNlp {
            xl: vec![-INF; n],
            xu: vec![INF; n],
            x0,
            cl: vec![],
            cu: vec![],
            f,
            grad,
            c: Box::new(|_, _| {}),
            jac: Box::new(|_, _| {}),
            hess: None,
            warm: None,
            var_scale: None,
            con_scale: None,
            tagged_error: None,
        }
    }

    pub fn constraints(mut self, cl: Vec<f64>, cu: Vec<f64>, c: Vector, jac: Vector) -> Self {
        self.cl = cl;
        self.cu = cu;
        self.c = c;
        self.jac = jac;
        self
    }

    pub fn bounds(mut self, xl: Vec<f64>, xu: Vec<f64>) -> Self {
        self.xl = xl;
        self.xu = xu;
        self
    }

    pub fn hessian(mut self, h: Hess) -> Self {
        self.hess = Some(h);
        self
    }

    fn n(&self) -> usize {
        self.x0.len()
    }

    fn m(&self) -> usize {
        self.cl.len()
    }

    /// Central-difference check of gradient, Jacobian and (if given) Hessian at `x`.
    /// Relative tolerance 1e-5: central differences with step 1e-6 are accurate to about
    /// 1e-9 * third derivative, far inside it for these smooth problems.
    pub fn check_derivatives(&self, x: &[f64]) {
        let (n, m) = (self.n(), self.m());
        let h = 1e-6;
        let close = |a: f64, b: f64, what: &str| {
            assert!((a - b).abs() <= 1e-5 * (1.0 + a.abs().max(b.abs())), "{what}: {a} vs {b}");
        };
        let mut g = vec![0.0; n];
        (self.grad)(x, &mut g);
        let mut jac = vec![0.0; m * n];
        (self.jac)(x, &mut jac);
        let lambda: Vec<f64> = (0..m).map(|i| 0.3 + 0.7 * i as f64).collect();
        let lag_grad = |x: &[f64]| {
            let mut g = vec![0.0; n];
            (self.grad)(x, &mut g);
            let mut j = vec![0.0; m * n];
            (self.jac)(x, &mut j);
            (0..n)
                .map(|k| 0.5 * g[k] + (0..m).map(|i| lambda[i] * j[i * n + k]).sum::<f64>())
                .collect::<Vec<f64>>()
        };
        let mut hd = vec![0.0; n * n];
        if let Some(hess) = &self.hess {
            hess(x, 0.5, &lambda, &mut hd);
        }
        for k in 0..n {
            let mut xp = x.to_vec();
            let mut xm = x.to_vec();
            xp[k] += h;
            xm[k] -= h;
            close(g[k], ((self.f)(&xp) - (self.f)(&xm)) / (2.0 * h), "gradient");
            let mut cp = vec![0.0; m];
            let mut cm = vec![0.0; m];
            (self.c)(&xp, &mut cp);
            (self.c)(&xm, &mut cm);
            for i in 0..m {
                close(jac[i * n + k], (cp[i] - cm[i]) / (2.0 * h), "jacobian");
            }
            if self.hess.is_some() {
                let (lp, lm) = (lag_grad(&xp), lag_grad(&xm));
                for r in 0..n {
                    close(hd[r * n + k], (lp[r] - lm[r]) / (2.0 * h), "hessian");
                }
            }
        }
    }
}

impl Nlp for TestNlp {
    fn num_variables(&self) -> usize {
        self.n()
    }
    fn num_constraints(&self) -> usize {
        self.m()
    }
    fn variable_bounds(&self, lower: &mut [f64], upper: &mut [f64]) {
        lower.copy_from_slice(&self.xl);
        upper.copy_from_slice(&self.xu);
    }
    fn constraint_bounds(&self, lower: &mut [f64], upper: &mut [f64]) {
        lower.copy_from_slice(&self.cl);
        upper.copy_from_slice(&self.cu);
    }
    fn initial_point(&self, w: &mut [f64]) {
        w.copy_from_slice(&self.x0);
    }
    fn initial_multipliers(&self, constraint: &mut [f64], bound: &mut [f64]) -> bool {
        match &self.warm {
            Some((l, b)) => {
                constraint.copy_from_slice(l);
                bound.copy_from_slice(b);
                true
            }
            None => false,
        }
    }
    fn objective(&mut self, w: &[f64]) -> Result<f64, EvalError> {
        let v = (self.f)(w);
        match self.tagged_error {
            Some(e) if !v.is_finite() => Err(e),
            _ => Ok(v),
        }
    }
    fn gradient(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        (self.grad)(w, values);
        Ok(())
    }
    fn constraints(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        (self.c)(w, values);
        Ok(())
    }
    fn jacobian_pattern(&self) -> Pattern {
        let mut p = Pattern::new();
        for i in 0..self.m() {
            for j in 0..self.n() {
                p.push(i, j);
            }
        }
        p
    }
    fn jacobian(&mut self, w: &[f64], values: &mut [f64]) -> Result<(), EvalError> {
        (self.jac)(w, values);
        Ok(())
    }
    fn hessian_pattern(&self) -> Option<Pattern> {
        self.hess.as_ref()?;
        let mut p = Pattern::new();
        for r in 0..self.n() {
            for c in 0..=r {
                p.push(r, c);
            }
        }
        Some(p)
    }
    fn hessian(
        &mut self,
        w: &[f64],
        sigma: f64,
        lambda: &[f64],
        values: &mut [f64],
    ) -> Result<(), EvalError> {
        let n = self.n();
        let mut dense = vec![0.0; n * n];
        if let Some(h) = &self.hess {
            h(w, sigma, lambda, &mut dense);
        }
        let mut k = 0;
        for r in 0..n {
            for c in 0..=r {
                values[k] = dense[r * n + c];
                k += 1;
            }
        }
        Ok(())
    }
    fn variable_scales(&self, scales: &mut [f64]) {
        match &self.var_scale {
            Some(s) => scales.copy_from_slice(s),
            None => scales.fill(1.0),
        }
    }
    fn constraint_scales(&self, scales: &mut [f64]) {
        match &self.con_scale {
            Some(s) => scales.copy_from_slice(s),
            None => scales.fill(1.0),
        }
    }
}
