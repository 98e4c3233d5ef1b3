//! The optimality conditions the SQP stops on, measured in scaled quantities: the residuals,
//! the tolerance test, the most violated rows, and the bound multipliers that fit a point.
//!
//! Must not take steps or evaluate the problem.

use crate::settings::SqpSettings;

use super::setup::Setup;
use super::{Residuals, ViolatedRow};

/// Distance of `v` outside `[lo, hi]`.
pub(crate) fn outside(v: f64, lo: f64, hi: f64) -> f64 {
    (lo - v).max(v - hi).max(0.0)
}

/// The largest magnitude, NaN when any entry is NaN.
pub(crate) fn inf_norm(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a: f64, x| if x.abs() > a || x.is_nan() { x.abs() } else { a })
}

pub(crate) fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// `out = g + J' lambda`.
pub(crate) fn lagrangian_gradient(
    s: &Setup,
    g: &[f64],
    jac: &[f64],
    lambda: &[f64],
    out: &mut [f64],
) {
    out.copy_from_slice(g);
    for k in 0..jac.len() {
        out[s.jac.cols[k]] += jac[k] * lambda[s.jac.rows[k]];
    }
}

/// Bound multipliers that best satisfy stationarity given the Lagrangian gradient `lg`:
/// nonzero only for variables at a bound, with the sign the bound allows.
pub(crate) fn projected_bound_multipliers(s: &Setup, y: &[f64], lg: &[f64], out: &mut [f64]) {
    for j in 0..s.n {
        let want = -lg[j];
        let at_lo = y[j] == s.yl[j];
        let at_hi = y[j] == s.yu[j];
        out[j] = if (at_lo && (at_hi || want < 0.0)) || (at_hi && want > 0.0) { want } else { 0.0 };
    }
}

/// Scaled residuals at `(y, c)` with Lagrangian gradient `lg = g + J' lambda`, the gradient
/// `g` and the multipliers.
pub(crate) fn residuals(
    s: &Setup,
    y: &[f64],
    c: &[f64],
    g: &[f64],
    lg: &[f64],
    lambda: &[f64],
    nu: &[f64],
) -> Residuals {
    let mut violation: f64 = 0.0;
    for i in 0..s.m {
        violation = violation.max(outside(c[i], s.cl[i], s.cu[i]));
    }
    for j in 0..s.n {
        violation = violation.max(outside(y[j], s.yl[j], s.yu[j]));
    }
    let norm = inf_norm(g).max(1.0);
    let stationarity = lg.iter().zip(nu).fold(0.0_f64, |a, (l, v)| a.max((l + v).abs())) / norm;
    let comp = |mult: f64, v: f64, lo: f64, hi: f64| {
        // A multiplier pushing against an absent side is itself the error.
        if mult > 0.0 {
            if hi.is_finite() {
                mult * (hi - v).max(0.0)
            } else {
                mult
            }
        } else if mult < 0.0 {
            if lo.is_finite() {
                -mult * (v - lo).max(0.0)
            } else {
                -mult
            }
        } else {
            0.0
        }
    };
    let mut complementarity: f64 = 0.0;
    for i in 0..s.m {
        if s.inequality[i] {
            complementarity = complementarity.max(comp(lambda[i], c[i], s.cl[i], s.cu[i]));
        }
    }
    for j in 0..s.n {
        if s.yl[j] != s.yu[j] {
            complementarity = complementarity.max(comp(nu[j], y[j], s.yl[j], s.yu[j]));
        }
    }
    Residuals { violation, stationarity, complementarity: complementarity / norm }
}

/// "Solved to reduced accuracy": stationarity and complementarity loosened by
/// `reduced_accuracy_factor`, feasibility by at most [`REDUCED_FEASIBILITY_FACTOR`]. A point
/// that misses its constraints by a thousand times the tolerance is no solution at any
/// accuracy (an infeasible lander stuck in elastic mode once ended so, violation 0.39 kg).
pub(crate) fn meets_reduced(r: &Residuals, st: &SqpSettings) -> bool {
    let loose = st.reduced_accuracy_factor;
    r.violation <= st.feasibility_tolerance * loose.min(REDUCED_FEASIBILITY_FACTOR)
        && r.stationarity <= st.stationarity_tolerance * loose
        && r.complementarity <= st.complementarity_tolerance * loose
}

/// The most the feasibility tolerance is loosened for "solved to reduced accuracy".
pub(crate) const REDUCED_FEASIBILITY_FACTOR: f64 = 10.0;

pub(crate) fn meets(r: &Residuals, st: &SqpSettings, factor: f64) -> bool {
    r.violation <= st.feasibility_tolerance * factor
        && r.stationarity <= st.stationarity_tolerance * factor
        && r.complementarity <= st.complementarity_tolerance * factor
}

/// The most violated rows (largest scaled violation first, at most 10), in the problem's
/// units.
pub(crate) fn violated_rows(s: &Setup, c: &[f64], tol: f64) -> Vec<ViolatedRow> {
    let mut rows: Vec<(usize, f64)> =
        (0..s.m).map(|i| (i, outside(c[i], s.cl[i], s.cu[i]))).filter(|&(_, v)| v > tol).collect();
    rows.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    rows.truncate(10);
    rows.into_iter()
        .map(|(row, v)| ViolatedRow { row, violation: v * s.scaling.con[row] })
        .collect()
}

/// Sum of the scaled row violations.
pub(crate) fn l1_violation(s: &Setup, c: &[f64]) -> f64 {
    (0..s.m).map(|i| outside(c[i], s.cl[i], s.cu[i])).sum()
}
