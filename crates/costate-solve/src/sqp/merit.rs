//! Step acceptance: a backtracking line search on the l1 exact-penalty merit function
//! `f + rho * sum(violation)` along the QP step, with one second-order correction when the
//! full step is rejected (J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., 2006,
//! Algorithm 18.3 and eq. (18.51)).
//!
//! Owns the search and the correction. Must not change the Hessian model or the penalty.

use std::time::{Duration, Instant};

use argmin::core::{Error as ArgminError, Problem};

use crate::nlp::{EvalError, Nlp};
use crate::settings::SqpSettings;

use super::termination::inf_norm;
use super::{IterationRow, Work};

/// Outcome of the search along one QP step.
pub(crate) enum Search {
    /// The trial point (in `Work::trial`, values only) is accepted; `Work::step`,
    /// `Work::step_lambda` and `Work::step_nu` hold the step taken and its multipliers.
    Accepted,
    /// No acceptable point; `error` when no trial point could be evaluated at all.
    Failed { error: Option<EvalError> },
}

/// The search, with the time accounts it adds to.
pub(crate) struct LineSearch<'a> {
    pub settings: &'a SqpSettings,
    pub eval_time: &'a mut Duration,
    pub qp_time: &'a mut Duration,
}

/// Move `y` inside the bounds, and onto a bound it is within rounding distance of (an
/// interior-point QP stops a hair short of active bounds).
fn clamp_snap(yl: &[f64], yu: &[f64], y: &mut [f64]) {
    for j in 0..y.len() {
        let (lo, hi) = (yl[j], yu[j]);
        let mut v = y[j].clamp(lo, hi);
        if lo.is_finite() && v - lo <= 1e-9 * lo.abs().max(1.0) {
            v = lo;
        }
        if hi.is_finite() && hi - v <= 1e-9 * hi.abs().max(1.0) {
            v = hi;
        }
        y[j] = v;
    }
}

impl LineSearch<'_> {
    /// Evaluate the trial point `y + alpha d` (into `wk.trial`); its merit, or the error.
    fn trial<N: Nlp>(
        &mut self,
        problem: &mut Problem<N>,
        wk: &mut Work,
        alpha: f64,
    ) -> Result<Result<f64, EvalError>, ArgminError> {
        let s = &wk.setup;
        for j in 0..s.n {
            wk.trial.y[j] = wk.point.y[j] + alpha * wk.step[j];
        }
        clamp_snap(&s.yl, &s.yu, &mut wk.trial.y);
        let t = Instant::now();
        let out = s.trial_values(problem, &mut wk.trial.y, &mut wk.trial.c, &mut wk.buf)?;
        *self.eval_time += t.elapsed();
        Ok(out.map(|f| {
            wk.trial.f = f;
            wk.merit(f, &wk.trial.c)
        }))
    }

    /// Search along `wk.step` with the merit's predicted `slope` (<= 0); a second-order
    /// correction is tried when `allow_soc` and the full step fails.
    pub(crate) fn search<N: Nlp>(
        &mut self,
        problem: &mut Problem<N>,
        wk: &mut Work,
        slope: f64,
        allow_soc: bool,
        row: &mut IterationRow,
    ) -> Result<Search, ArgminError> {
        let st = self.settings;
        let phi0 = wk.merit(wk.point.f, &wk.point.c);
        // Merit changes below rounding (a few dozen ulps of the merit) count as no increase:
        // near a solution the predicted decrease is itself at rounding level, and demanding
        // it exactly would reject every step there and leave a stationarity floor.
        let noise = 64.0 * f64::EPSILON * phi0.abs().max(1.0);
        let mut alpha = 1.0;
        let mut any_value = false;
        let mut last_error = None;
        loop {
            match self.trial(problem, wk, alpha)? {
                Ok(phi) => {
                    any_value = true;
                    if phi <= phi0 + st.sufficient_decrease * alpha * slope + noise {
                        row.step_length = alpha;
                        return Ok(Search::Accepted);
                    }
                    let soc =
                        alpha == 1.0 && allow_soc && st.second_order_correction && wk.setup.m > 0;
                    let accept = phi0 + st.sufficient_decrease * slope + noise;
                    if soc && self.correction(problem, wk, accept, row)? {
                        row.step_length = 1.0;
                        row.second_order_correction = true;
                        return Ok(Search::Accepted);
                    }
                }
                Err(e) => last_error = Some(e),
            }
            row.backtracks += 1;
            alpha *= st.backtrack_factor;
            if alpha < st.min_step {
                return Ok(Search::Failed { error: if any_value { None } else { last_error } });
            }
        }
    }

    /// Second-order correction: re-linearise the constraints at the rejected full step,
    /// keeping the step's own linear part, and solve the QP again. Accepts the corrected
    /// point (replacing the step and its multipliers) when its merit is below `accept`.
    fn correction<N: Nlp>(
        &mut self,
        problem: &mut Problem<N>,
        wk: &mut Work,
        accept: f64,
        row: &mut IterationRow,
    ) -> Result<bool, ArgminError> {
        let s = &wk.setup;
        // cjd = c + J d from the penalty update; the new bounds are the old ones shifted by
        // c + J d - c(y + d).
        for i in 0..s.m {
            wk.row_shift[i] = wk.cjd[i] - wk.trial.c[i];
        }
        // The chain convexification's gradient depends on the coupling rows' bounds.
        wk.grad_shift.fill(0.0);
        if let Some(r) = wk.riccati.as_mut().filter(|_| wk.chain_convexified) {
            wk.grad_shift.copy_from_slice(&wk.model.qp.gradient);
            for i in 0..s.m {
                wk.model.qp.row_lower[i] += wk.row_shift[i];
            }
            r.gradient(&mut wk.model.qp, &wk.point.g, &wk.aug);
            for i in 0..s.m {
                wk.model.qp.row_lower[i] -= wk.row_shift[i];
            }
            for j in 0..s.n {
                let shifted = wk.model.qp.gradient[j];
                wk.model.qp.gradient[j] = wk.grad_shift[j];
                wk.grad_shift[j] = shifted - wk.grad_shift[j];
            }
        }
        // One solve with the last Newton matrix of the QP (its active set), else the
        // shifted QP solved anew.
        let t = Instant::now();
        let cheap = wk.qp.shifted_step(&wk.row_shift, &wk.grad_shift, &mut wk.model.sol.step);
        if cheap {
            for j in 0..s.n {
                wk.model.sol.step[j] += wk.step[j];
            }
            wk.model.sol.row_multipliers.copy_from_slice(&wk.step_lambda);
            wk.model.sol.bound_multipliers.copy_from_slice(&wk.step_nu);
            wk.model.sol.status = crate::qp::QpStatus::Solved;
            *self.qp_time += t.elapsed();
        } else {
            let qp = &mut wk.model.qp;
            for i in 0..s.m {
                qp.row_lower[i] += wk.row_shift[i];
                qp.row_upper[i] += wk.row_shift[i];
            }
            for j in 0..s.n {
                qp.gradient[j] += wk.grad_shift[j];
            }
            let solved = wk.model.solve(wk.qp.as_mut());
            *self.qp_time += t.elapsed();
            row.qp_solves += 1;
            row.qp_iterations += wk.model.sol.iterations;
            if let Some(r) = wk.riccati.as_mut().filter(|_| wk.chain_convexified) {
                if wk.model.sol.status.has_solution() {
                    let sol = &mut wk.model.sol;
                    r.correct_multipliers(
                        &wk.model.qp,
                        &wk.aug,
                        &sol.step,
                        &mut sol.row_multipliers,
                        &mut sol.bound_multipliers,
                    );
                }
            }
            // The regular QP again, for whatever uses it next.
            let qp = &mut wk.model.qp;
            for i in 0..s.m {
                qp.row_lower[i] -= wk.row_shift[i];
                qp.row_upper[i] -= wk.row_shift[i];
            }
            for j in 0..s.n {
                qp.gradient[j] -= wk.grad_shift[j];
            }
            solved.map_err(ArgminError::msg)?;
        }
        // The correction keeps the variable bounds only when the QP enforced them.
        if !wk.model.sol.status.has_solution()
            || wk.model.sol.step.iter().any(|v| !v.is_finite())
            || inf_norm(&wk.model.sol.step) > 1e3 * inf_norm(&wk.step).max(1e-300)
        {
            return Ok(false);
        }
        let s = &wk.setup;
        for j in 0..s.n {
            wk.trial.y[j] = wk.point.y[j] + wk.model.sol.step[j];
        }
        clamp_snap(&s.yl, &s.yu, &mut wk.trial.y);
        let t = Instant::now();
        let out = s.trial_values(problem, &mut wk.trial.y, &mut wk.trial.c, &mut wk.buf)?;
        *self.eval_time += t.elapsed();
        let Ok(f) = out else { return Ok(false) };
        if wk.merit(f, &wk.trial.c) > accept {
            return Ok(false);
        }
        wk.trial.f = f;
        wk.step.copy_from_slice(&wk.model.sol.step);
        wk.step_lambda.copy_from_slice(&wk.model.sol.row_multipliers);
        wk.step_nu.copy_from_slice(&wk.model.sol.bound_multipliers);
        Ok(true)
    }
}
