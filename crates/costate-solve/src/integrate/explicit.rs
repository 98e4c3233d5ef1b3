//! Explicit Runge-Kutta steps (the classical RK4 tableau) with forward sensitivities of the
//! discrete step.
//!
//! Owns the explicit stage loop and its work arrays; knows nothing of Newton solves.
//!
//! For stage `i`: `X_i = x + hs Σ_{j<i} a_ij K_j`, `K_i = f(t_s + θ_i h, X_i, u(θ_i), p)`,
//! `x+ = x + hs Σ b_i K_i`, `q+ = q + hs Σ b_i L_i` with `hs = h / M`. Differentiating each
//! line with respect to the sensitivity columns `w` (with `d hs / dw = e_h / M`) gives the
//! recursions below; they are the exact derivatives of the computed map.

// Index loops mirror the tableau formulas `Σ_j a_ij K_j` term by term.
#![allow(clippy::needless_range_loop)]

use super::{apply_jacobian, Dims, Evaluator, IntegrationError, Interval, StepState};

/// The classical fourth-order tableau (J. C. Butcher, "Numerical Methods for Ordinary
/// Differential Equations", 2nd ed., 2008, sec. 32: the method of Kutta).
const STAGES: usize = 4;
const A: [[f64; STAGES]; STAGES] =
    [[0.0, 0.0, 0.0, 0.0], [0.5, 0.0, 0.0, 0.0], [0.0, 0.5, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0]];
const B: [f64; STAGES] = [1.0 / 6.0, 1.0 / 3.0, 1.0 / 3.0, 1.0 / 6.0];
const C: [f64; STAGES] = [0.0, 0.5, 0.5, 1.0];

/// The tableau `(A, b, c)` used by [`step`], for code that rebuilds the same step symbolically.
pub(crate) fn tableau() -> ([[f64; STAGES]; STAGES], [f64; STAGES], [f64; STAGES]) {
    (A, B, C)
}

#[derive(Clone, Debug)]
pub(crate) struct Work {
    /// Running input `[t, X, u, p]`.
    input: Vec<f64>,
    /// Stage state `X_i`.
    xs: Vec<f64>,
    /// Stage derivatives `K` (`STAGES x nx`) and integrands `L` (`STAGES x nq`).
    k: Vec<f64>,
    l: Vec<f64>,
    /// Jacobian values of `f` and `l` at the current stage.
    jf: Vec<f64>,
    jl: Vec<f64>,
    /// `dX_i / dw` (`nx x nw`) and `dK` for every stage (`STAGES x nx x nw`).
    dxs: Vec<f64>,
    dk: Vec<f64>,
    /// `dL_i / dw` for the current stage (`nq x nw`).
    dl: Vec<f64>,
}

impl Work {
    pub(crate) fn new(dims: &Dims, f: &Evaluator, l: &Evaluator) -> Self {
        let Dims { nx, nq, nw, layout, .. } = *dims;
        Work {
            input: vec![0.0; layout.len()],
            xs: vec![0.0; nx],
            k: vec![0.0; STAGES * nx],
            l: vec![0.0; STAGES * nq],
            jf: vec![0.0; f.nnz()],
            jl: vec![0.0; l.nnz()],
            dxs: vec![0.0; nx * nw],
            dk: vec![0.0; STAGES * nx * nw],
            dl: vec![0.0; nq * nw],
        }
    }
}

pub(crate) fn step(
    dims: &Dims,
    iv: &Interval<'_>,
    k_step: usize,
    f: &mut Evaluator,
    l: &mut Evaluator,
    w: &mut Work,
    st: &mut StepState<'_>,
) -> Result<(), IntegrationError> {
    let Dims { nx, nq, nw, cols, .. } = *dims;
    let m = iv.substeps as f64;
    let hs = iv.input.h / m;
    let col_h = cols.h();
    let block = nx * nw;
    for i in 0..STAGES {
        let theta = iv.theta(k_step, C[i]);
        w.xs.copy_from_slice(st.x);
        for j in 0..i {
            let a = A[i][j];
            if a != 0.0 {
                for (xs, kj) in w.xs.iter_mut().zip(&w.k[j * nx..(j + 1) * nx]) {
                    *xs += hs * a * kj;
                }
            }
        }
        let t = iv.running_input(theta, &w.xs, &mut w.input);
        let ki = &mut w.k[i * nx..(i + 1) * nx];
        let li = &mut w.l[i * nq..(i + 1) * nq];
        if !iv.sens {
            f.value(&w.input, ki, t)?;
            if nq > 0 {
                l.value(&w.input, li, t)?;
            }
            continue;
        }
        f.value_and_jacobian(&w.input, ki, &mut w.jf, t)?;
        if nq > 0 {
            l.value_and_jacobian(&w.input, li, &mut w.jl, t)?;
        }
        // dX_i = S_x + hs Σ a_ij dK_j + (e_h / M) Σ a_ij K_j
        w.dxs.copy_from_slice(st.sx);
        for j in 0..i {
            let a = A[i][j];
            if a != 0.0 {
                let dkj = &w.dk[j * block..(j + 1) * block];
                for (d, s) in w.dxs.iter_mut().zip(dkj) {
                    *d += hs * a * s;
                }
                for r in 0..nx {
                    w.dxs[r * nw + col_h] += a * w.k[j * nx + r] / m;
                }
            }
        }
        apply_jacobian(
            dims,
            f.pattern(),
            &w.jf,
            theta,
            &w.dxs,
            &mut w.dk[i * block..(i + 1) * block],
        );
        if nq > 0 {
            apply_jacobian(dims, l.pattern(), &w.jl, theta, &w.dxs, &mut w.dl);
            // S_q += hs b_i dL_i + (e_h / M) b_i L_i
            for (s, d) in st.sq.iter_mut().zip(&w.dl) {
                *s += hs * B[i] * d;
            }
            for r in 0..nq {
                st.sq[r * nw + col_h] += B[i] * w.l[i * nq + r] / m;
            }
        }
    }
    if iv.sens {
        for i in 0..STAGES {
            let dki = &w.dk[i * block..(i + 1) * block];
            for (s, d) in st.sx.iter_mut().zip(dki) {
                *s += hs * B[i] * d;
            }
            for r in 0..nx {
                st.sx[r * nw + col_h] += B[i] * w.k[i * nx + r] / m;
            }
        }
    }
    for i in 0..STAGES {
        for (x, ki) in st.x.iter_mut().zip(&w.k[i * nx..(i + 1) * nx]) {
            *x += hs * B[i] * ki;
        }
        for (q, li) in st.q.iter_mut().zip(&w.l[i * nq..(i + 1) * nq]) {
            *q += hs * B[i] * li;
        }
    }
    Ok(())
}
