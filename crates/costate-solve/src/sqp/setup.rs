//! What the SQP knows about a problem before its first step: sizes, bounds and scales, the
//! sparsity patterns and where each of their entries goes in the stage QP, all checked once;
//! and the scaled evaluations of the problem functions into preallocated buffers.
//!
//! Scaled quantities: variables `y = w / var`, constraint rows `c / con`, the objective
//! `f / obj`. Must not decide anything about steps.

use std::sync::Arc;

use argmin::core::{Error as ArgminError, Problem};

use crate::nlp::{finite_bound, EvalError, EvalPart, Nlp, Pattern};
use crate::qp::StageLayout;
use crate::settings::{HessianMode, SqpSettings};

use super::SolveError;

/// Scale factors between the problem (`w`, `c`, `f`) and the solver (`y = w / var`,
/// `c / con`, `f / obj`).
#[derive(Clone, Debug, PartialEq)]
pub struct Scaling {
    pub var: Vec<f64>,
    pub con: Vec<f64>,
    pub obj: f64,
}

/// Everything about the problem that does not change during a solve, checked once.
pub(crate) struct Setup {
    pub n: usize,
    pub m: usize,
    pub scaling: Scaling,
    pub yl: Vec<f64>,
    pub yu: Vec<f64>,
    pub cl: Vec<f64>,
    pub cu: Vec<f64>,
    /// Rows with `cl < cu` (complementarity applies).
    pub inequality: Vec<bool>,
    pub grad_pattern: Vec<usize>,
    pub jac: Pattern,
    /// Per Jacobian nonzero: `var[col] / con[row]`, and its place in the QP's row storage.
    pub jac_scale: Vec<f64>,
    pub jac_pos: Vec<usize>,
    /// Lower-triangle pattern of the exact Hessian, per entry `var[r] * var[c]` and its two
    /// places in the QP's Hessian blocks, when the exact Hessian is used.
    pub hess: Option<HessianPattern>,
    pub stages: Arc<StageLayout>,
}

pub(crate) struct HessianPattern {
    pub pattern: Pattern,
    pub scale: Vec<f64>,
    pub pos: Vec<(usize, usize)>,
}

fn bad<T>(s: String) -> Result<T, SolveError> {
    Err(SolveError::Problem(s))
}

/// Validate the problem description against `settings`; `Err` describes the first problem.
pub(crate) fn setup<N: Nlp + ?Sized>(nlp: &N, settings: &SqpSettings) -> Result<Setup, SolveError> {
    let n = nlp.num_variables();
    let m = nlp.num_constraints();
    let mut wl = vec![0.0; n];
    let mut wu = vec![0.0; n];
    nlp.variable_bounds(&mut wl, &mut wu);
    let mut cl = vec![0.0; m];
    let mut cu = vec![0.0; m];
    nlp.constraint_bounds(&mut cl, &mut cu);
    let broken = |lo: f64, hi: f64| {
        lo.is_nan() || hi.is_nan() || lo > hi || lo == f64::INFINITY || hi == f64::NEG_INFINITY
    };
    if let Some(j) = (0..n).find(|&j| broken(wl[j], wu[j])) {
        return bad(format!("variable {j} has bounds [{}, {}]", wl[j], wu[j]));
    }
    if let Some(i) = (0..m).find(|&i| broken(cl[i], cu[i])) {
        return bad(format!("constraint row {i} has bounds [{}, {}]", cl[i], cu[i]));
    }
    let mut var = vec![1.0; n];
    let mut con = vec![1.0; m];
    let mut obj = 1.0;
    if settings.use_scaling {
        nlp.variable_scales(&mut var);
        nlp.constraint_scales(&mut con);
        obj = nlp.objective_scale();
    }
    if let Some(j) = var.iter().position(|s| !(s.is_finite() && *s > 0.0)) {
        return bad(format!("variable {j} has scale {}", var[j]));
    }
    if let Some(i) = con.iter().position(|s| !(s.is_finite() && *s > 0.0)) {
        return bad(format!("constraint row {i} has scale {}", con[i]));
    }
    if !(obj.is_finite() && obj > 0.0) {
        return bad(format!("objective scale is {obj}"));
    }
    let scale_bound =
        |v: f64, s: f64, sign: f64| if finite_bound(v) { v / s } else { sign * f64::INFINITY };
    let yl = (0..n).map(|j| scale_bound(wl[j], var[j], -1.0)).collect();
    let yu = (0..n).map(|j| scale_bound(wu[j], var[j], 1.0)).collect();
    let inequality = (0..m).map(|i| cl[i] != cu[i]).collect();
    let cl_s = (0..m).map(|i| scale_bound(cl[i], con[i], -1.0)).collect();
    let cu_s = (0..m).map(|i| scale_bound(cu[i], con[i], 1.0)).collect();

    let stages = match nlp.stages() {
        Some(s) => {
            if s.num_variables() != n || s.num_rows() != m {
                return bad(format!(
                    "stage structure has {} variables and {} rows, the problem {n} and {m}",
                    s.num_variables(),
                    s.num_rows()
                ));
            }
            for i in 0..m {
                if s.stage_of_row(i).1 && cl[i] != cu[i] {
                    return bad(format!("coupling row {i} is not an equality"));
                }
            }
            s
        }
        None => StageLayout::single(n, m),
    };
    let grad_pattern = nlp.gradient_pattern();
    if let Some(j) = grad_pattern.iter().find(|&&j| j >= n) {
        return bad(format!("gradient pattern names variable {j} of {n}"));
    }
    let jac = nlp.jacobian_pattern();
    if let Some((r, c)) = jac.first_out_of_range(m, n) {
        return bad(format!("jacobian pattern entry ({r}, {c}) outside {m}x{n}"));
    }
    let jac_scale = jac.rows.iter().zip(&jac.cols).map(|(&r, &c)| var[c] / con[r]).collect();
    let mut jac_pos = Vec::with_capacity(jac.len());
    for (&r, &c) in jac.rows.iter().zip(&jac.cols) {
        match stages.jacobian_position(r, c) {
            Some(p) => jac_pos.push(p),
            None => {
                return bad(format!("jacobian entry ({r}, {c}) lies outside the stages of its row"))
            }
        }
    }
    let use_exact = match settings.hessian {
        HessianMode::Bfgs => false,
        HessianMode::Auto => nlp.hessian_pattern().is_some(),
        HessianMode::Exact => {
            if nlp.hessian_pattern().is_none() {
                return bad("exact Hessian requested but the problem provides none".into());
            }
            true
        }
    };
    let hess = if use_exact {
        let p = nlp.hessian_pattern().unwrap_or_default();
        if let Some((r, c)) = p.first_out_of_range(n, n) {
            return bad(format!("hessian pattern entry ({r}, {c}) outside {n}x{n}"));
        }
        if let Some(k) = (0..p.len()).find(|&k| p.rows[k] < p.cols[k]) {
            return bad(format!(
                "hessian pattern entry ({}, {}) above the diagonal",
                p.rows[k], p.cols[k]
            ));
        }
        let mut pos = Vec::with_capacity(p.len());
        for (&r, &c) in p.rows.iter().zip(&p.cols) {
            match stages.hessian_positions(r, c) {
                Some(ab) => pos.push(ab),
                None => return bad(format!("hessian entry ({r}, {c}) couples two stages")),
            }
        }
        let scale = p.rows.iter().zip(&p.cols).map(|(&r, &c)| var[r] * var[c]).collect();
        Some(HessianPattern { pattern: p, scale, pos })
    } else {
        None
    };
    Ok(Setup {
        n,
        m,
        scaling: Scaling { var, con, obj },
        yl,
        yu,
        cl: cl_s,
        cu: cu_s,
        inequality,
        grad_pattern,
        jac,
        jac_scale,
        jac_pos,
        hess,
        stages: Arc::new(stages),
    })
}

pub(crate) fn count<O>(problem: &mut Problem<O>, what: &'static str) {
    *problem.counts.entry(what).or_insert(0) += 1;
}

pub(crate) fn nlp_mut<O>(problem: &mut Problem<O>) -> Result<&mut O, ArgminError> {
    problem.problem.as_mut().ok_or_else(|| ArgminError::msg("the executor holds no problem"))
}

/// First non-finite entry of `v` as an error of `part`.
fn check_finite(part: EvalPart, v: &[f64]) -> Result<(), EvalError> {
    match v.iter().position(|x| !x.is_finite()) {
        Some(i) => Err(EvalError::non_finite(part, i, v[i])),
        None => Ok(()),
    }
}

/// Buffers of the unscaled point and gradient handed to the problem.
pub(crate) struct EvalBuffers {
    pub w: Vec<f64>,
    pub grad: Vec<f64>,
}

impl Setup {
    fn unscale(&self, y: &[f64], w: &mut [f64]) {
        for j in 0..self.n {
            w[j] = y[j] * self.scaling.var[j];
        }
    }

    /// Complete the trial point `y` (see [`Nlp::complete`]), then its scaled objective and
    /// constraints, into `c`.
    pub(crate) fn trial_values<N: Nlp>(
        &self,
        problem: &mut Problem<N>,
        y: &mut [f64],
        c: &mut [f64],
        buf: &mut EvalBuffers,
    ) -> Result<Result<f64, EvalError>, ArgminError> {
        self.unscale(y, &mut buf.w);
        nlp_mut(problem)?.complete(&mut buf.w);
        for j in 0..self.n {
            y[j] = buf.w[j] / self.scaling.var[j];
        }
        self.values(problem, y, c, buf)
    }

    /// Scaled objective and constraints at scaled `y`, into `c`.
    pub(crate) fn values<N: Nlp>(
        &self,
        problem: &mut Problem<N>,
        y: &[f64],
        c: &mut [f64],
        buf: &mut EvalBuffers,
    ) -> Result<Result<f64, EvalError>, ArgminError> {
        self.unscale(y, &mut buf.w);
        count(problem, "objective");
        count(problem, "constraints");
        let nlp = nlp_mut(problem)?;
        Ok((|| {
            let f = nlp.objective(&buf.w)?;
            check_finite(EvalPart::Objective, &[f])?;
            nlp.constraints(&buf.w, c)?;
            check_finite(EvalPart::Constraints, c)?;
            for i in 0..self.m {
                c[i] /= self.scaling.con[i];
            }
            Ok(f / self.scaling.obj)
        })())
    }

    /// Dense scaled gradient into `g` and scaled Jacobian values into `jac` at scaled `y`.
    pub(crate) fn derivatives<N: Nlp>(
        &self,
        problem: &mut Problem<N>,
        y: &[f64],
        g: &mut [f64],
        jac: &mut [f64],
        buf: &mut EvalBuffers,
    ) -> Result<Result<(), EvalError>, ArgminError> {
        self.unscale(y, &mut buf.w);
        count(problem, "gradient");
        count(problem, "jacobian");
        let nlp = nlp_mut(problem)?;
        Ok((|| {
            nlp.gradient(&buf.w, &mut buf.grad)?;
            check_finite(EvalPart::Gradient, &buf.grad)?;
            g.fill(0.0);
            for (k, &j) in self.grad_pattern.iter().enumerate() {
                g[j] += buf.grad[k] * self.scaling.var[j] / self.scaling.obj;
            }
            nlp.jacobian(&buf.w, jac)?;
            check_finite(EvalPart::Jacobian, jac)?;
            for (v, sc) in jac.iter_mut().zip(&self.jac_scale) {
                *v *= sc;
            }
            Ok(())
        })())
    }

    /// The scaled exact Hessian of the scaled Lagrangian `f / obj + sum lambda_i c_i / con_i`
    /// at scaled `y`, added into the QP's Hessian blocks `blocks` (zeroed first). `mult` and
    /// `values` are scratch of length `m` and of the Hessian pattern.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn hessian<N: Nlp>(
        &self,
        problem: &mut Problem<N>,
        y: &[f64],
        lambda: &[f64],
        mult: &mut [f64],
        values: &mut [f64],
        blocks: &mut [f64],
        buf: &mut EvalBuffers,
    ) -> Result<Result<(), EvalError>, ArgminError> {
        let Some(h) = &self.hess else {
            return Err(ArgminError::msg("exact Hessian requested without a pattern"));
        };
        self.unscale(y, &mut buf.w);
        count(problem, "hessian");
        for i in 0..self.m {
            mult[i] = lambda[i] / self.scaling.con[i];
        }
        let nlp = nlp_mut(problem)?;
        Ok((|| {
            nlp.hessian(&buf.w, 1.0 / self.scaling.obj, mult, values)?;
            check_finite(EvalPart::Hessian, values)?;
            blocks.fill(0.0);
            for (k, &(a, b)) in h.pos.iter().enumerate() {
                let v = values[k] * h.scale[k];
                blocks[a] += v;
                if a != b {
                    blocks[b] += v;
                }
            }
            Ok(())
        })())
    }
}
