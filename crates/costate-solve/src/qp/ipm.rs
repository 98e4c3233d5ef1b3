//! [`StageIpm`]: a primal-dual interior-point method for [`StageQp`], the crate's default QP
//! solver, whose Newton systems are solved stage by stage ([`BlockKkt`]).
//!
//! Owns the method and its workspace. Must not allocate once the workspace fits the QP's
//! structure (the first solve of a structure sets it up; later solves of QPs with the same
//! layout and the same kinds of bounds reuse it), nor know what the QP stands for.
//!
//! # The method
//! Fixed variables (`dl == du`) are taken out: their values move into the gradient and the
//! row bounds, their unknowns are kept at zero. What remains is
//!
//! ```text
//! minimise 1/2 x'Px + q'x   subject to   A x = b  (equality and coupling rows),
//!                                        G x + s = h, s >= 0  (each finite side of an
//!                                        inequality row or bound, one row of G each)
//! ```
//!
//! solved by the infeasible primal-dual interior-point method with Mehrotra's predictor and
//! corrector (S. Mehrotra, "On the implementation of a primal-dual interior point method",
//! SIAM J. Optim. 2, 1992; for QPs as in E. M. Gertz, S. J. Wright, "Object-oriented software
//! for quadratic programming", ACM TOMS 29, 2003), the method C. V. Rao, S. J. Wright and
//! J. B. Rawlings apply to model predictive control. Equality rows keep their multipliers
//! in the Newton system: they are exact, never two inequalities. Each Newton step condenses
//! the inequalities into the stage blocks (`P + G' (z/s) G`), factorises once and solves
//! twice. Steps keep every complementarity product above a fraction of the average (the
//! wide neighbourhood of S. J. Wright, "Primal-Dual Interior-Point Methods", SIAM, 1997,
//! ch. 5). The starting point is that of L. Vandenberghe, "The CVXOPT linear and quadratic
//! cone program solvers", 2010, sec. 5.3: one solve with unit barrier weights, then a shift
//! into the positive orthant.
//!
//! Infeasibility is read off the iterates by the theorem of the alternative: multipliers
//! `w = (y, z)` with `z >= 0`, `A'y + G'z = 0` and `b'y + h'z < 0` prove that no point is
//! feasible (for a feasible `x0`, `b'y + h'z = x0'(A'y + G'z) + s0'z >= 0`); on an infeasible
//! QP the multipliers grow without bound along such a direction, and the test is made on
//! their normalised direction. Likewise a direction `x` with `Px = 0`, `Ax = 0`, `Gx <= 0`
//! and `q'x < 0` proves the objective unbounded.

use std::sync::Arc;

use super::kkt::{BlockKkt, Regularisation};
use super::scaling::Equilibration;
use super::stage::{StageLayout, StageQp};
use super::{QpError, QpSolution, QpSolver, QpStatus};
use crate::nlp::finite_bound;

/// Settings of [`StageIpm`]; every tolerance is relative to the size of the QP data.
#[derive(Clone, Debug, PartialEq)]
pub struct StageIpmSettings {
    /// Feasibility, stationarity and duality-gap tolerance for "solved". Default `1e-10`.
    pub tolerance: f64,
    /// The same for "solved to reduced accuracy", used when the method stops early.
    /// Default `1e-6`.
    pub reduced_tolerance: f64,
    /// Tolerance of the infeasibility certificates: with `w` the multipliers scaled to
    /// `|w|_inf = 1`, `|A'w|_inf <= tol` and `b'w <= -sqrt(tol)` (likewise for an unbounded
    /// direction). Default `1e-8`.
    pub infeasibility_tolerance: f64,
    /// Iteration limit. Default 100.
    pub max_iterations: u32,
    /// Fraction of the step to the boundary of the positive orthant taken. Default `0.99`.
    pub step_fraction: f64,
    /// Static regularisation of the Newton systems. Default `1e-8`.
    pub regularisation: f64,
    /// Most steps of iterative refinement per solve. Default 8.
    pub refinement_steps: usize,
    /// Equilibrate the QP's rows and columns before solving (see `scaling.rs`).
    /// Default `true`.
    pub equilibrate: bool,
    /// Stop with [`QpStatus::TimeLimit`] once this instant has passed. Default none.
    pub deadline: Option<std::time::Instant>,
}

impl Default for StageIpmSettings {
    fn default() -> Self {
        StageIpmSettings {
            tolerance: 1e-10,
            reduced_tolerance: 1e-6,
            infeasibility_tolerance: 1e-8,
            max_iterations: 100,
            step_fraction: 0.99,
            regularisation: 1e-11,
            refinement_steps: 8,
            equilibrate: true,
            deadline: None,
        }
    }
}

/// Relative optimality error below which the corrector's direction is refined.
const REFINE_BELOW: f64 = 1e-4;

/// Iterations after which infeasibility certificates are accepted at the reduced tolerance.
const EARLY_CERTIFICATE_ITERATIONS: u32 = 5;

/// Iterations without a better iterate after which the method stops.
const STALL_ITERATIONS: u32 = 20;

/// Fraction of the average complementarity product every product must keep after a step.
const NEIGHBOURHOOD: f64 = 1e-3;

/// One finite side of an inequality: `sign * a'x <= rhs` with `a` a local row or a unit vector.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Side {
    /// `(row, sign)`.
    Row(usize, f64),
    /// `(variable, sign)`.
    Var(usize, f64),
}

/// How a row or a variable enters: no finite side, equality, or its finite sides.
fn kind(lo: f64, hi: f64) -> u8 {
    let (l, h) = (finite_bound(lo), finite_bound(hi));
    if l && h && lo == hi {
        1
    } else {
        2 * u8::from(l) + 4 * u8::from(h)
    }
}

/// [`kind`] of row `i`, with [`PENALISED`] set for a penalised row that has a finite side.
fn row_kind(qp: &StageQp, i: usize) -> u8 {
    let k = kind(qp.row_lower[i], qp.row_upper[i]);
    if k != 0 && qp.is_penalised(i) {
        k | PENALISED
    } else {
        k
    }
}

const PENALISED: u8 = 8;

/// A column the method adds for a penalised row: the row `a'x + p - n (- r)` with `p, n >= 0`
/// costing the penalty each, and for an inequality row its value `r` within the row's bounds
/// (the row itself then an equality with right-hand side 0).
#[derive(Clone, Copy, Debug, PartialEq)]
enum Slack {
    Up,
    Down,
    Value,
}

/// Everything sized by the QP's structure.
struct Workspace {
    layout: Arc<StageLayout>,
    /// Kind of every row, then of every variable (see [`kind`]), to recognise the structure.
    kinds: Vec<u8>,
    kkt: BlockKkt,
    /// QP row of every equality multiplier, in block order (per stage: local equality rows,
    /// then coupling rows).
    eq_rows: Vec<usize>,
    /// Stage `k`'s multipliers are `eq_start[k]..eq_start[k + 1]`.
    eq_start: Vec<usize>,
    /// Per variable (the QP's, then the slack columns): fixed by its bounds.
    fixed: Vec<bool>,
    /// Inequality sides grouped by stage: stage `k`'s are `side_start[k]..side_start[k + 1]`;
    /// the sides of slack columns follow all stages'.
    sides: Vec<Side>,
    side_start: Vec<usize>,
    /// Number of the QP's variables; slack column `t` is variable `n + t`.
    n: usize,
    /// Per slack column: its QP row, its equality multiplier, its coefficient, its kind.
    slack_row: Vec<usize>,
    slack_eq: Vec<usize>,
    slack_coef: Vec<f64>,
    slack_kind: Vec<Slack>,
    /// Bounds of the slack columns for the QP being solved.
    slack_lower: Vec<f64>,
    slack_upper: Vec<f64>,
    /// Per slack column the diagonal of the Newton system (barrier weights plus
    /// regularisation), and per equality multiplier what the eliminated slacks add to its
    /// diagonal (with the sign reversed).
    slack_diag: Vec<f64>,
    eq_extra: Vec<f64>,
    // Data of the reduced QP.
    q: Vec<f64>,
    b: Vec<f64>,
    h: Vec<f64>,
    fixed_values: Vec<f64>,
    // Iterate.
    x: Vec<f64>,
    y: Vec<f64>,
    z: Vec<f64>,
    s: Vec<f64>,
    // Residuals: r_x = Px + q + A'y + G'z, r_y = Ax - b, r_z = Gx + s - h.
    rx: Vec<f64>,
    ry: Vec<f64>,
    rz: Vec<f64>,
    px: Vec<f64>,
    // Direction.
    dx: Vec<f64>,
    dy: Vec<f64>,
    dz: Vec<f64>,
    ds: Vec<f64>,
    /// Affine-scaling `ds o dz` for the corrector.
    cross: Vec<f64>,
    /// Barrier weights `z / s`.
    sigma: Vec<f64>,
    gx: Vec<f64>,
    rhs: Vec<f64>,
    sol: Vec<f64>,
    tmp_n: Vec<f64>,
    // Right-hand side and correction of the refinement against the full system.
    rho_x: Vec<f64>,
    rho_y: Vec<f64>,
    rho_z: Vec<f64>,
    cx: Vec<f64>,
    cy: Vec<f64>,
    cz: Vec<f64>,
    /// Equilibration of the QP being solved (ones when there is none): the error is measured
    /// on the original.
    col_scale: Vec<f64>,
    row_scale: Vec<f64>,
    cost_scale: f64,
    /// Whether the last run ended with a solution (its factorisation then serves
    /// [`QpSolver::shifted_step`]).
    last_solved: bool,
    // The iterate closest to optimality so far.
    best_x: Vec<f64>,
    best_y: Vec<f64>,
    best_z: Vec<f64>,
    best_s: Vec<f64>,
}

/// The interior-point method with its workspace.
#[derive(Default)]
pub struct StageIpm {
    pub settings: StageIpmSettings,
    ws: Option<Box<Workspace>>,
    scaling: Option<Box<(Equilibration, QpSolution)>>,
}

impl StageIpm {
    pub fn new(settings: StageIpmSettings) -> StageIpm {
        StageIpm { settings, ws: None, scaling: None }
    }
}

impl QpSolver for StageIpm {
    fn solve(&mut self, qp: &StageQp, out: &mut QpSolution) -> Result<(), QpError> {
        qp.validate()?;
        out.resize(qp.num_variables(), qp.num_rows());
        let fits = self.ws.as_ref().is_some_and(|w| w.fits(qp));
        if !fits {
            self.ws = Some(Box::new(Workspace::new(qp)));
        }
        let ws = self.ws.as_mut().expect("workspace set up above");
        if !self.settings.equilibrate {
            ws.col_scale.fill(1.0);
            ws.row_scale.fill(1.0);
            ws.cost_scale = 1.0;
            ws.run(qp, &self.settings, out);
            return Ok(());
        }
        if !self.scaling.as_ref().is_some_and(|s| s.0.fits(qp)) {
            let sol = QpSolution::new(qp.num_variables(), qp.num_rows());
            self.scaling = Some(Box::new((Equilibration::new(qp), sol)));
        }
        let (eq, scaled_out) = &mut **self.scaling.as_mut().expect("scaling set up above");
        eq.apply(qp);
        let n = qp.num_variables();
        eq.copy_scales(&mut ws.col_scale[..n], &mut ws.row_scale, &mut ws.cost_scale);
        // A slack column is in its row's (scaled) units.
        for (c, &i) in ws.slack_row.iter().enumerate() {
            ws.col_scale[n + c] = 1.0 / ws.row_scale[i];
        }
        ws.run(&eq.scaled, &self.settings, scaled_out);
        eq.unscale(scaled_out, out);
        Ok(())
    }

    fn set_deadline(&mut self, deadline: Option<std::time::Instant>) {
        self.settings.deadline = deadline;
    }

    fn shifted_step(&mut self, row_shift: &[f64], gradient_shift: &[f64], out: &mut [f64]) -> bool {
        let (Some(ws), Some(scaling)) = (self.ws.as_mut(), self.scaling.as_ref()) else {
            return false;
        };
        // Shifted bounds of a penalised row would move its slacks' bounds: not done here.
        if !self.settings.equilibrate || !ws.last_solved || !ws.slack_row.is_empty() {
            return false;
        }
        ws.shifted_step(&scaling.0.scaled, row_shift, gradient_shift, &self.settings, out);
        true
    }
}

/// The largest magnitude, NaN when any entry is NaN (`f64::max` would skip it, and a NaN
/// iterate would look converged).
fn inf_norm(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a: f64, x| if x.abs() > a || x.is_nan() { x.abs() } else { a })
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// Largest `alpha <= 1` keeping `v + alpha dv >= 0`.
fn max_step(v: &[f64], dv: &[f64]) -> f64 {
    max_step_up_to(v, dv, 1.0)
}

/// Largest `alpha <= limit` keeping `v + alpha dv >= 0`.
fn max_step_up_to(v: &[f64], dv: &[f64], limit: f64) -> f64 {
    let mut a: f64 = limit;
    for (vi, di) in v.iter().zip(dv) {
        if *di < 0.0 {
            a = a.min(-vi / di);
        }
    }
    a
}

impl Workspace {
    fn new(qp: &StageQp) -> Workspace {
        let layout = qp.layout.clone();
        let (n, m) = (layout.num_variables(), layout.num_rows());
        let kinds: Vec<u8> = (0..m)
            .map(|i| row_kind(qp, i))
            .chain((0..n).map(|j| kind(qp.var_lower[j], qp.var_upper[j])))
            .collect();
        let s = layout.stages();
        let mut eq_rows = Vec::new();
        let mut eq_start = Vec::with_capacity(s + 1);
        let mut sides = Vec::new();
        let mut side_start = Vec::with_capacity(s + 1);
        let (mut nn, mut ee, mut cc) = (Vec::new(), Vec::new(), Vec::new());
        let mut fixed: Vec<bool> = (0..n).map(|j| kinds[m + j] == 1).collect();
        let (mut slack_row, mut slack_eq, mut slack_coef, mut slack_kind) =
            (Vec::new(), Vec::new(), Vec::new(), Vec::new());
        let mut add_slacks = |i: usize, t: usize, equality: bool| {
            let mut push = |kind: Slack, coef: f64| {
                slack_row.push(i);
                slack_eq.push(t);
                slack_coef.push(coef);
                slack_kind.push(kind);
            };
            push(Slack::Up, 1.0);
            push(Slack::Down, -1.0);
            if !equality {
                push(Slack::Value, -1.0);
            }
        };
        for k in 0..s {
            eq_start.push(eq_rows.len());
            side_start.push(sides.len());
            let mut e = 0;
            for i in layout.local_rows(k) {
                match kinds[i] {
                    1 => {
                        eq_rows.push(i);
                        e += 1;
                    }
                    t if t & PENALISED != 0 => {
                        add_slacks(i, eq_rows.len(), t & 1 != 0);
                        eq_rows.push(i);
                        e += 1;
                    }
                    t => {
                        if t & 4 != 0 {
                            sides.push(Side::Row(i, 1.0));
                        }
                        if t & 2 != 0 {
                            sides.push(Side::Row(i, -1.0));
                        }
                    }
                }
            }
            for i in layout.coupling_rows(k) {
                if kinds[i] & PENALISED != 0 {
                    add_slacks(i, eq_rows.len(), true);
                }
                eq_rows.push(i);
            }
            for j in layout.vars(k) {
                let t = kinds[m + j];
                if t != 1 {
                    if t & 4 != 0 {
                        sides.push(Side::Var(j, 1.0));
                    }
                    if t & 2 != 0 {
                        sides.push(Side::Var(j, -1.0));
                    }
                }
            }
            nn.push(layout.stage_size(k));
            ee.push(e);
            cc.push(layout.coupling_rows(k).len());
        }
        eq_start.push(eq_rows.len());
        side_start.push(sides.len());
        let ns = slack_row.len();
        for (t, &kind) in slack_kind.iter().enumerate() {
            let i = slack_row[t];
            let (j, k) = (n + t, kinds[i]);
            // p and n have their lower bound 0 only; r has the row's finite sides.
            if kind == Slack::Value && k & 4 != 0 {
                sides.push(Side::Var(j, 1.0));
            }
            if kind != Slack::Value || k & 2 != 0 {
                sides.push(Side::Var(j, -1.0));
            }
        }
        fixed.resize(n + ns, false);
        let kkt = BlockKkt::new(&nn, &ee, &cc);
        let (me, ms, len) = (eq_rows.len(), sides.len(), kkt.len());
        let zeros = |k: usize| vec![0.0; k];
        let n_all = n + ns;
        Workspace {
            layout,
            kinds,
            kkt,
            eq_rows,
            eq_start,
            fixed,
            sides,
            side_start,
            n,
            slack_row,
            slack_eq,
            slack_coef,
            slack_kind,
            slack_lower: zeros(ns),
            slack_upper: zeros(ns),
            slack_diag: zeros(ns),
            eq_extra: zeros(me),
            q: zeros(n_all),
            b: zeros(me),
            h: zeros(ms),
            fixed_values: zeros(n_all),
            x: zeros(n_all),
            y: zeros(me),
            z: zeros(ms),
            s: zeros(ms),
            rx: zeros(n_all),
            ry: zeros(me),
            rz: zeros(ms),
            px: zeros(n_all),
            dx: zeros(n_all),
            dy: zeros(me),
            dz: zeros(ms),
            ds: zeros(ms),
            cross: zeros(ms),
            sigma: zeros(ms),
            gx: zeros(ms),
            rhs: zeros(len),
            sol: zeros(len),
            tmp_n: zeros(n_all),
            rho_x: zeros(n_all),
            rho_y: zeros(me),
            rho_z: zeros(ms),
            cx: zeros(n_all),
            cy: zeros(me),
            cz: zeros(ms),
            col_scale: vec![1.0; n_all],
            row_scale: vec![1.0; m],
            cost_scale: 1.0,
            last_solved: false,
            best_x: zeros(n_all),
            best_y: zeros(me),
            best_z: zeros(ms),
            best_s: zeros(ms),
        }
    }

    /// Whether this workspace was set up for `qp`'s layout and kinds of bounds.
    fn fits(&self, qp: &StageQp) -> bool {
        let l = &qp.layout;
        if !(Arc::ptr_eq(&self.layout, l) || *self.layout == **l) {
            return false;
        }
        let m = l.num_rows();
        (0..m).all(|i| self.kinds[i] == row_kind(qp, i))
            && (0..l.num_variables())
                .all(|j| self.kinds[m + j] == kind(qp.var_lower[j], qp.var_upper[j]))
    }

    /// `sign * a'x` of a side.
    fn side_value(qp: &StageQp, side: Side, x: &[f64]) -> f64 {
        match side {
            Side::Var(j, sign) => sign * x[j],
            Side::Row(i, sign) => {
                let (row, first) = qp.row(i);
                sign * dot(row, &x[first..first + row.len()])
            }
        }
    }

    /// `out += G' v`.
    fn add_sides_transpose(&self, qp: &StageQp, v: &[f64], out: &mut [f64]) {
        for (t, side) in self.sides.iter().enumerate() {
            let vt = v[t];
            if vt == 0.0 {
                continue;
            }
            match *side {
                Side::Var(j, sign) => out[j] += sign * vt,
                Side::Row(i, sign) => {
                    let (row, first) = qp.row(i);
                    for (o, a) in out[first..first + row.len()].iter_mut().zip(row) {
                        *o += sign * vt * a;
                    }
                }
            }
        }
    }

    /// `out = G x`.
    fn sides_times(&self, qp: &StageQp, x: &[f64], out: &mut [f64]) {
        for (t, side) in self.sides.iter().enumerate() {
            out[t] = Self::side_value(qp, *side, x);
        }
    }

    /// `out = A x` over the equality multipliers (with the slack columns).
    fn eq_times(&self, qp: &StageQp, x: &[f64], out: &mut [f64]) {
        for (t, &i) in self.eq_rows.iter().enumerate() {
            let (row, first) = qp.row(i);
            out[t] = dot(row, &x[first..first + row.len()]);
        }
        for (c, (&t, &a)) in self.slack_eq.iter().zip(&self.slack_coef).enumerate() {
            out[t] += a * x[self.n + c];
        }
    }

    /// `out += A' y` over the equality multipliers.
    fn add_eq_transpose(&self, qp: &StageQp, y: &[f64], out: &mut [f64]) {
        for (t, &i) in self.eq_rows.iter().enumerate() {
            let yt = y[t];
            if yt == 0.0 {
                continue;
            }
            let (row, first) = qp.row(i);
            for (o, a) in out[first..first + row.len()].iter_mut().zip(row) {
                *o += yt * a;
            }
        }
        for (c, (&t, &a)) in self.slack_eq.iter().zip(&self.slack_coef).enumerate() {
            out[self.n + c] += a * y[t];
        }
    }

    /// `out = P x` (zero on the slack columns).
    fn mul_hessian(&self, qp: &StageQp, x: &[f64], out: &mut [f64]) {
        let n = self.n;
        qp.mul_hessian(&x[..n], &mut out[..n]);
        out[n..].fill(0.0);
    }

    /// Reduced data: fixed variables' values moved into `q`, `b` and `h`.
    fn reduce(&mut self, qp: &StageQp) {
        let n = qp.num_variables();
        for j in 0..n {
            self.fixed_values[j] = if self.fixed[j] { qp.var_lower[j] } else { 0.0 };
        }
        let v = std::mem::take(&mut self.fixed_values);
        let any_fixed = self.fixed.iter().any(|&f| f);
        qp.mul_hessian(&v[..n], &mut self.q[..n]);
        for j in 0..n {
            self.q[j] = if self.fixed[j] { 0.0 } else { self.q[j] + qp.gradient[j] };
        }
        for (c, &kind) in self.slack_kind.iter().enumerate() {
            let i = self.slack_row[c];
            let (lo, hi, cost) = match kind {
                Slack::Value => (qp.row_lower[i], qp.row_upper[i], 0.0),
                Slack::Up | Slack::Down => (0.0, f64::INFINITY, qp.row_penalty[i]),
            };
            self.slack_lower[c] = lo;
            self.slack_upper[c] = hi;
            self.q[n + c] = cost;
        }
        for (t, &i) in self.eq_rows.iter().enumerate() {
            let shift = if any_fixed {
                let (row, first) = qp.row(i);
                dot(row, &v[first..first + row.len()])
            } else {
                0.0
            };
            // A penalised inequality row is `a'x + p - n - r = 0`.
            let rhs = if self.kinds[i] & PENALISED != 0 && self.kinds[i] & 1 == 0 {
                0.0
            } else {
                qp.row_lower[i]
            };
            self.b[t] = rhs - shift;
        }
        for (t, side) in self.sides.iter().enumerate() {
            let shift = if any_fixed { Self::side_value(qp, *side, &v) } else { 0.0 };
            let bound = match *side {
                Side::Row(i, sign) if sign > 0.0 => qp.row_upper[i],
                Side::Row(i, _) => -qp.row_lower[i],
                Side::Var(j, sign) if j >= n && sign > 0.0 => self.slack_upper[j - n],
                Side::Var(j, _) if j >= n => -self.slack_lower[j - n],
                Side::Var(j, sign) if sign > 0.0 => qp.var_upper[j],
                Side::Var(j, _) => -qp.var_lower[j],
            };
            self.h[t] = bound - shift;
        }
        self.fixed_values = v;
    }

    /// Assemble the condensed Newton matrix with barrier weights `sigma` and `dual` on the
    /// diagonal of the equality multipliers (0, or -1 for the least-squares start), and
    /// factorise it.
    fn factorise(&mut self, qp: &StageQp, settings: &StageIpmSettings, dual: f64) {
        let l = self.layout.clone();
        let s = l.stages();
        // Slack columns are eliminated before the factorisation: each appears in one
        // equality row only, with a diagonal block of its own.
        self.slack_diag.fill(settings.regularisation);
        for t in self.side_start[s]..self.sides.len() {
            if let Side::Var(j, _) = self.sides[t] {
                self.slack_diag[j - self.n] += self.sigma[t];
            }
        }
        self.eq_extra.fill(0.0);
        for c in 0..self.slack_diag.len() {
            let a = self.slack_coef[c];
            self.eq_extra[self.slack_eq[c]] += a * a / self.slack_diag[c];
        }
        for k in 0..s {
            let vars = l.vars(k);
            let (nk, ek, ck) = self.kkt.sizes(k);
            let b = nk + ek + ck;
            let v0 = vars.start;
            let hk = qp.hessian_block(k);
            let blk = self.kkt.block_mut(k);
            blk.fill(0.0);
            for j in 0..nk {
                blk[j * b..j * b + nk].copy_from_slice(&hk[j * nk..(j + 1) * nk]);
            }
            for t in self.side_start[k]..self.side_start[k + 1] {
                let w = self.sigma[t];
                match self.sides[t] {
                    Side::Var(j, _) => {
                        let jj = j - v0;
                        blk[jj + jj * b] += w;
                    }
                    Side::Row(i, _) => {
                        let (row, _) = qp.row(i);
                        for c in 0..nk {
                            let wc = w * row[c];
                            if wc == 0.0 {
                                continue;
                            }
                            for r in 0..nk {
                                blk[r + c * b] += row[r] * wc;
                            }
                        }
                    }
                }
            }
            for (p, t) in (self.eq_start[k]..self.eq_start[k + 1]).enumerate() {
                let (row, _) = qp.row(self.eq_rows[t]);
                let r = nk + p;
                for c in 0..nk {
                    blk[r + c * b] = row[c];
                    blk[c + r * b] = row[c];
                }
            }
            for r in nk..b {
                blk[r + r * b] = dual - self.eq_extra[self.eq_start[k] + r - nk];
            }
            // Fixed variables: identity rows, so their unknowns stay zero.
            for j in vars.clone() {
                if self.fixed[j] {
                    let jj = j - v0;
                    for i in 0..b {
                        blk[i + jj * b] = 0.0;
                        blk[jj + i * b] = 0.0;
                    }
                    blk[jj + jj * b] = 1.0;
                }
            }
            if k + 1 < s {
                let n1 = l.stage_size(k + 1);
                let next_vars = l.vars(k + 1);
                let first_c = self.eq_start[k] + ek;
                let nxt = self.kkt.next_mut(k);
                for p in 0..ck {
                    let (row, _) = qp.row(self.eq_rows[first_c + p]);
                    for j in 0..n1 {
                        nxt[p * n1 + j] =
                            if self.fixed[next_vars.start + j] { 0.0 } else { row[nk + j] };
                    }
                }
            }
        }
        self.kkt.factorise(Regularisation {
            delta: settings.regularisation,
            threshold: 1e-13,
            dynamic: 2e-7,
        });
    }

    /// Solve the Newton system `[P A' G'; A 0 0; G 0 -S/Z] (dx, dy, dz) = (rx, ry, rz)`
    /// through its condensed form: right-hand side in `dx, dy, dz` on entry, solution there
    /// on return.
    fn newton_solve(&mut self, qp: &StageQp) {
        // Condensed right-hand side: rx + G' (sigma o rz).
        for t in 0..self.dz.len() {
            self.gx[t] = self.sigma[t] * self.dz[t];
        }
        let (gx, mut dx) = (std::mem::take(&mut self.gx), std::mem::take(&mut self.dx));
        self.add_sides_transpose(qp, &gx, &mut dx);
        self.gx = gx;
        let n = self.n;
        for c in 0..self.slack_diag.len() {
            self.dy[self.slack_eq[c]] -= self.slack_coef[c] * dx[n + c] / self.slack_diag[c];
        }
        let l = &self.layout;
        for k in 0..l.stages() {
            let r = self.kkt.block_range(k);
            let vars = l.vars(k);
            let nk = vars.len();
            let blk = &mut self.rhs[r];
            for (p, j) in vars.enumerate() {
                blk[p] = if self.fixed[j] { 0.0 } else { dx[j] };
            }
            blk[nk..].copy_from_slice(&self.dy[self.eq_start[k]..self.eq_start[k + 1]]);
        }
        let rhs = std::mem::take(&mut self.rhs);
        let mut sol = std::mem::take(&mut self.sol);
        // No refinement here: the caller refines against the full system, which also removes
        // this solve's error.
        sol.copy_from_slice(&rhs);
        self.kkt.solve_in_place(&mut sol);
        self.rhs = rhs;
        for k in 0..self.layout.stages() {
            let r = self.kkt.block_range(k);
            let vars = self.layout.vars(k);
            let nk = vars.len();
            let blk = &sol[r];
            dx[vars].copy_from_slice(&blk[..nk]);
            self.dy[self.eq_start[k]..self.eq_start[k + 1]].copy_from_slice(&blk[nk..]);
        }
        self.sol = sol;
        for c in 0..self.slack_diag.len() {
            let a = self.slack_coef[c];
            dx[n + c] = (dx[n + c] - a * self.dy[self.slack_eq[c]]) / self.slack_diag[c];
        }
        // dz = sigma o (G dx - rz).
        let mut gx = std::mem::take(&mut self.gx);
        self.sides_times(qp, &dx, &mut gx);
        for t in 0..self.dz.len() {
            self.dz[t] = self.sigma[t] * (gx[t] - self.dz[t]);
        }
        self.gx = gx;
        self.dx = dx;
    }

    /// [`Self::newton_solve`] refined against the full (uncondensed) system. Condensing
    /// multiplies by `z/s`, which spans twenty orders of magnitude near the end: recovering
    /// `dz = (z/s)(G dx - rz)` then loses the digits that the dual residual `Px + q + A'y + G'z`
    /// needs, and without refinement it stalls around `1e-9` or grows.
    fn refined_newton_solve(&mut self, qp: &StageQp, settings: &StageIpmSettings) {
        let ms = self.sides.len();
        self.rho_x.copy_from_slice(&self.dx);
        self.rho_y.copy_from_slice(&self.dy);
        self.rho_z.copy_from_slice(&self.dz);
        self.newton_solve(qp);
        let scale =
            1.0 + inf_norm(&self.rho_x).max(inf_norm(&self.rho_y)).max(inf_norm(&self.rho_z));
        let mut last = f64::INFINITY;
        for _ in 0..settings.refinement_steps {
            // Residual of the full system at (dx, dy, dz), into the correction buffers.
            let mut cx = std::mem::take(&mut self.cx);
            self.mul_hessian(qp, &self.dx, &mut cx);
            self.cx = cx;
            let (dy, dz) = (std::mem::take(&mut self.dy), std::mem::take(&mut self.dz));
            let mut cx = std::mem::take(&mut self.cx);
            self.add_eq_transpose(qp, &dy, &mut cx);
            self.add_sides_transpose(qp, &dz, &mut cx);
            for j in 0..cx.len() {
                cx[j] = if self.fixed[j] { 0.0 } else { self.rho_x[j] - cx[j] };
            }
            self.cx = cx;
            let mut cy = std::mem::take(&mut self.cy);
            self.eq_times(qp, &self.dx, &mut cy);
            for t in 0..cy.len() {
                cy[t] = self.rho_y[t] - cy[t];
            }
            self.cy = cy;
            let mut cz = std::mem::take(&mut self.cz);
            self.sides_times(qp, &self.dx, &mut cz);
            for t in 0..ms {
                cz[t] = self.rho_z[t] - (cz[t] - dz[t] / self.sigma[t]);
            }
            self.cz = cz;
            self.dy = dy;
            self.dz = dz;
            let norm = inf_norm(&self.cx).max(inf_norm(&self.cy)).max(inf_norm(&self.cz));
            if norm <= 1e-13 * scale || norm > 0.5 * last {
                break;
            }
            last = norm;
            // Solve for the correction with the same factorisation and add it.
            std::mem::swap(&mut self.dx, &mut self.cx);
            std::mem::swap(&mut self.dy, &mut self.cy);
            std::mem::swap(&mut self.dz, &mut self.cz);
            // (The previous solution now sits in the correction buffers.)
            self.newton_solve(qp);
            for j in 0..self.dx.len() {
                self.dx[j] += self.cx[j];
            }
            for t in 0..self.dy.len() {
                self.dy[t] += self.cy[t];
            }
            for t in 0..ms {
                self.dz[t] += self.cz[t];
            }
        }
    }

    /// Residuals at the iterate; returns `x'Px`.
    fn residuals(&mut self, qp: &StageQp) -> f64 {
        let mut px = std::mem::take(&mut self.px);
        self.mul_hessian(qp, &self.x, &mut px);
        self.px = px;
        for j in 0..self.x.len() {
            if self.fixed[j] {
                self.px[j] = 0.0;
            }
        }
        let xpx = dot(&self.x, &self.px);
        let (y, z) = (std::mem::take(&mut self.y), std::mem::take(&mut self.z));
        let mut rx = std::mem::take(&mut self.rx);
        rx.copy_from_slice(&self.px);
        self.add_eq_transpose(qp, &y, &mut rx);
        self.add_sides_transpose(qp, &z, &mut rx);
        for j in 0..rx.len() {
            rx[j] = if self.fixed[j] { 0.0 } else { rx[j] + self.q[j] };
        }
        self.rx = rx;
        self.y = y;
        self.z = z;
        let mut ry = std::mem::take(&mut self.ry);
        self.eq_times(qp, &self.x, &mut ry);
        for t in 0..ry.len() {
            ry[t] -= self.b[t];
        }
        self.ry = ry;
        let mut rz = std::mem::take(&mut self.rz);
        self.sides_times(qp, &self.x, &mut rz);
        for t in 0..rz.len() {
            rz[t] += self.s[t] - self.h[t];
        }
        self.rz = rz;
        xpx
    }

    /// Largest relative residual or duality gap at the iterate (with `x'Px`).
    fn optimality_error(&self, xpx: f64) -> f64 {
        let broken = |v: &[f64]| v.iter().any(|e| !e.is_finite());
        if broken(&self.x) || broken(&self.y) || broken(&self.z) || broken(&self.s) {
            return f64::NAN;
        }
        // Measured on the QP as given, not as equilibrated: x = D x~, rows e a'x, cost c f.
        let (d, e, c) = (&self.col_scale, &self.row_scale, self.cost_scale);
        let side_scale = |t: usize| match self.sides[t] {
            Side::Row(i, _) => 1.0 / e[i],
            Side::Var(j, _) => d[j],
        };
        let mut norm_b: f64 = 0.0;
        let mut pres: f64 = 0.0;
        let mut norm_w: f64 = 0.0;
        for (t, &i) in self.eq_rows.iter().enumerate() {
            norm_b = norm_b.max((self.b[t] / e[i]).abs());
            pres = pres.max((self.ry[t] / e[i]).abs());
            norm_w = norm_w.max((self.y[t] * e[i] / c).abs());
        }
        let mut norm_s: f64 = 0.0;
        for t in 0..self.sides.len() {
            let k = side_scale(t);
            norm_b = norm_b.max((self.h[t] * k).abs());
            pres = pres.max((self.rz[t] * k).abs());
            norm_s = norm_s.max((self.s[t] * k).abs());
            norm_w = norm_w.max((self.z[t] / (k * c)).abs());
        }
        let (mut norm_q, mut norm_x, mut dres): (f64, f64, f64) = (0.0, 0.0, 0.0);
        for j in 0..self.x.len() {
            norm_q = norm_q.max((self.q[j] / (d[j] * c)).abs());
            norm_x = norm_x.max((self.x[j] * d[j]).abs());
            dres = dres.max((self.rx[j] / (d[j] * c)).abs());
        }
        let bw = dot(&self.b, &self.y) + dot(&self.h, &self.z);
        let pobj = (0.5 * xpx + dot(&self.q, &self.x)) / c;
        let dobj = (-0.5 * xpx - bw) / c;
        let gap = (pobj - dobj).abs();
        (pres / (1.0 + norm_b + norm_x + norm_s))
            .max(dres / (1.0 + norm_q + norm_x + norm_w))
            .max(gap / (1.0 + pobj.abs().min(dobj.abs())))
    }

    /// An infeasibility or unboundedness certificate at the iterate, to tolerance `eps`.
    fn certificate(&self, eps: f64) -> Option<QpStatus> {
        // Read off the residuals at the iterate, which hold every product needed:
        // A'y + G'z = r_x - Px - q, Ax = r_y + b, Gx = r_z - s + h.
        let norm_b = inf_norm(&self.b).max(inf_norm(&self.h));
        let norm_q = inf_norm(&self.q);
        let norm_x = inf_norm(&self.x);
        let norm_w = inf_norm(&self.y).max(inf_norm(&self.z));
        let bw = dot(&self.b, &self.y) + dot(&self.h, &self.z);
        // Primal infeasibility: the multipliers' direction w / |w| nearly satisfies
        // A'w = 0, z >= 0 and b'w < 0.
        if norm_w > 1.0 && bw < 0.0 && bw <= -eps.sqrt() * norm_w * (1.0 + norm_b) {
            let mut worst: f64 = 0.0;
            for j in 0..self.x.len() {
                if !self.fixed[j] {
                    worst = worst.max((self.rx[j] - self.px[j] - self.q[j]).abs());
                }
            }
            if worst <= eps * norm_w {
                return Some(QpStatus::Infeasible);
            }
        }
        // Unboundedness: x / |x| nearly satisfies Px = 0, Ax = 0, Gx <= 0 and q'x < 0.
        let qx = dot(&self.q, &self.x);
        if norm_x > 1.0 && qx < 0.0 && qx <= -eps.sqrt() * norm_x * (1.0 + norm_q) {
            let mut worst = inf_norm(&self.px);
            for t in 0..self.ry.len() {
                worst = worst.max((self.ry[t] + self.b[t]).abs());
            }
            for t in 0..self.rz.len() {
                worst = worst.max(self.rz[t] - self.s[t] + self.h[t]);
            }
            if worst <= eps * norm_x {
                return Some(QpStatus::Unbounded);
            }
        }
        None
    }

    /// Starting point: one solve with unit barrier weights (CVXOPT's initialisation), then
    /// slacks and duals shifted into the positive orthant.
    fn initial_point(&mut self, qp: &StageQp, settings: &StageIpmSettings) {
        let ms = self.sides.len();
        self.sigma.fill(1.0);
        self.factorise(qp, settings, 0.0);
        for j in 0..self.q.len() {
            self.dx[j] = -self.q[j];
        }
        self.dy.copy_from_slice(&self.b);
        self.dz.copy_from_slice(&self.h);
        self.newton_solve(qp);
        self.x.copy_from_slice(&self.dx);
        self.y.copy_from_slice(&self.dy);
        // dz = G x - h: the primal slack is its negative, the dual start the vector itself.
        for t in 0..ms {
            self.s[t] = -self.dz[t];
            self.z[t] = self.dz[t];
        }
        // Shifted so the smallest entry reaches a margin of at least one (or a tenth of the
        // average positive entry): a pair starting near zero would pin every later step to
        // the boundary (the margin rule of Goulart and Chen's Clarabel paper, sec. 5).
        for v in [&mut self.s, &mut self.z] {
            let lowest = v.iter().fold(f64::INFINITY, |a, &x| a.min(x));
            let positive: f64 = v.iter().filter(|&&x| x > 0.0).sum();
            let target = (0.1 * positive / v.len().max(1) as f64).max(1.0);
            if lowest < target {
                let shift = target - lowest;
                v.iter_mut().for_each(|x| *x += shift);
            }
        }
    }

    /// The direction for centring target `target` (`sigma mu`), with Mehrotra's second-order
    /// term when `corrector`, refined against the full system when `refine`; fills
    /// `dx, dy, dz, ds`.
    fn direction(
        &mut self,
        qp: &StageQp,
        settings: &StageIpmSettings,
        target: f64,
        corrector: bool,
        refine: bool,
    ) {
        // The predictor only sets the centring weight and the corrector term: it needs no
        // refinement; the step itself (the corrector) gets it.
        for j in 0..self.q.len() {
            self.dx[j] = -self.rx[j];
        }
        for t in 0..self.dy.len() {
            self.dy[t] = -self.ry[t];
        }
        for t in 0..self.sides.len() {
            let mut ds_t = self.s[t] * self.z[t] - target;
            if corrector {
                ds_t += self.cross[t];
            }
            // The z rows of the condensed system: -r_z + d_s / z.
            self.dz[t] = -self.rz[t] + ds_t / self.z[t];
            self.ds[t] = ds_t;
        }
        if refine {
            self.refined_newton_solve(qp, settings);
        } else {
            self.newton_solve(qp);
        }
        for t in 0..self.sides.len() {
            // ds = -(d_s + s o dz) / z.
            self.ds[t] = -(self.ds[t] + self.s[t] * self.dz[t]) / self.z[t];
        }
    }

    /// Largest step in (0, 1] along the direction keeping `s` and `z` nonnegative.
    fn step_to_boundary(&self) -> f64 {
        max_step(&self.s, &self.ds).min(max_step(&self.z, &self.dz))
    }

    /// The step taken: `fraction` of the way to the boundary, but the full step when the
    /// boundary lies beyond `1 / fraction` (else the last iterations gain only a factor
    /// `1 / (1 - fraction)` each where Newton's method would converge in one).
    fn damped_step(&self, fraction: f64) -> f64 {
        let limit = 1.0 / fraction;
        let reach =
            max_step_up_to(&self.s, &self.ds, limit).min(max_step_up_to(&self.z, &self.dz, limit));
        (fraction * reach).min(1.0)
    }

    /// Average complementarity product after a step of `alpha`.
    fn mu_after(&self, alpha: f64) -> f64 {
        let ms = self.sides.len();
        let mut total = 0.0;
        for t in 0..ms {
            total += (self.s[t] + alpha * self.ds[t]) * (self.z[t] + alpha * self.dz[t]);
        }
        total / ms.max(1) as f64
    }

    /// Shorten `alpha` until no complementarity product falls below a fraction of the new
    /// average. Without it Mehrotra's corrector can drive one pair far off centre, and the
    /// next steps then alternate between the two sides of a two-sided row with the average
    /// barely moving.
    fn keep_centred(&self, mut alpha: f64) -> f64 {
        let ms = self.sides.len();
        for _ in 0..30 {
            let mut lowest = f64::INFINITY;
            for t in 0..ms {
                let p = (self.s[t] + alpha * self.ds[t]) * (self.z[t] + alpha * self.dz[t]);
                lowest = lowest.min(p);
            }
            if ms == 0 || lowest >= NEIGHBOURHOOD * self.mu_after(alpha) {
                break;
            }
            alpha *= 0.8;
        }
        alpha
    }

    fn save_best(&mut self) {
        self.best_x.copy_from_slice(&self.x);
        self.best_y.copy_from_slice(&self.y);
        self.best_z.copy_from_slice(&self.z);
        self.best_s.copy_from_slice(&self.s);
    }

    fn restore_best(&mut self) {
        self.x.copy_from_slice(&self.best_x);
        self.y.copy_from_slice(&self.best_y);
        self.z.copy_from_slice(&self.best_z);
        self.s.copy_from_slice(&self.best_s);
    }

    /// The solution's change for shifted row bounds and gradient (see
    /// [`QpSolver::shifted_step`]), with the Newton matrix of the last iterate: its barrier
    /// weights hold the active set.
    fn shifted_step(
        &mut self,
        qp: &StageQp,
        row_shift: &[f64],
        gradient_shift: &[f64],
        settings: &StageIpmSettings,
        out: &mut [f64],
    ) {
        let d = std::mem::take(&mut self.col_scale);
        let e = std::mem::take(&mut self.row_scale);
        let c = self.cost_scale;
        for j in 0..self.dx.len() {
            self.dx[j] = if self.fixed[j] { 0.0 } else { -c * d[j] * gradient_shift[j] };
        }
        for (t, &i) in self.eq_rows.iter().enumerate() {
            self.dy[t] = e[i] * row_shift[i];
        }
        for t in 0..self.sides.len() {
            self.dz[t] = match self.sides[t] {
                Side::Row(i, sign) => sign * e[i] * row_shift[i],
                Side::Var(..) => 0.0,
            };
        }
        self.col_scale = d;
        self.row_scale = e;
        self.refined_newton_solve(qp, settings);
        for j in 0..out.len() {
            out[j] = if self.fixed[j] { 0.0 } else { self.col_scale[j] * self.dx[j] };
        }
    }

    fn run(&mut self, qp: &StageQp, settings: &StageIpmSettings, out: &mut QpSolution) {
        self.last_solved = false;
        self.reduce(qp);
        self.initial_point(qp, settings);
        let ms = self.sides.len();
        let mut iterations = 0;
        let mut slow = 0;
        let mut best = f64::INFINITY;
        let mut best_at = 0;
        let status = loop {
            let xpx = self.residuals(qp);
            let error = self.optimality_error(xpx);
            if error <= settings.tolerance {
                break QpStatus::Solved;
            }
            // After a few iterations a certificate to the reduced tolerance is accepted too:
            // on an infeasible QP the multipliers grow by a factor of a few per iteration and
            // the strict test would wait for them to reach 1e8 times the data.
            let eps = if iterations >= EARLY_CERTIFICATE_ITERATIONS {
                settings.reduced_tolerance.max(settings.infeasibility_tolerance)
            } else {
                settings.infeasibility_tolerance
            };
            if let Some(st) = self.certificate(eps) {
                break st;
            }
            if error < best {
                best = error;
                best_at = iterations;
                self.save_best();
            }
            // Near the end the Newton systems are close to singular; an iterate that walks
            // away from a nearly optimal one is not followed further.
            // No better iterate for a long while (the multipliers of a nearly inconsistent QP
            // grow without end), or one that is no number at all: give up early.
            let diverging = (best <= settings.reduced_tolerance && error > 1e3 * best)
                || iterations > best_at + STALL_ITERATIONS
                || error.is_nan();
            if iterations >= settings.max_iterations || slow >= 5 || diverging {
                // Certificates at the iterate reached (they lie at its end), then optimality
                // at the best iterate seen, both to the reduced tolerance.
                let tol = settings.reduced_tolerance;
                if let Some(st) = self.certificate(tol) {
                    break st;
                }
                if error.is_nan() || error > best {
                    self.restore_best();
                }
                let xpx = self.residuals(qp);
                break if self.optimality_error(xpx) <= tol {
                    QpStatus::SolvedReducedAccuracy
                } else if iterations >= settings.max_iterations {
                    QpStatus::IterationLimit
                } else {
                    QpStatus::NumericalFailure
                };
            }
            if settings.deadline.is_some_and(|d| std::time::Instant::now() >= d) {
                break QpStatus::TimeLimit;
            }
            iterations += 1;
            let mu = if ms > 0 { dot(&self.s, &self.z) / ms as f64 } else { 0.0 };
            for t in 0..ms {
                self.sigma[t] = self.z[t] / self.s[t];
            }
            self.factorise(qp, settings, 0.0);
            // Predictor (affine scaling), then Mehrotra's corrector with the centring weight
            // (mu_aff / mu)^3.
            self.direction(qp, settings, 0.0, false, false);
            let alpha_aff = self.step_to_boundary();
            for t in 0..ms {
                self.cross[t] = self.ds[t] * self.dz[t];
            }
            let sigma = if mu > 0.0 {
                (self.mu_after(alpha_aff) / mu).clamp(0.0, 1.0).powi(3)
            } else {
                0.0
            };
            // Far from the solution the condensed solve is accurate enough (its error is
            // relative to barrier weights that are still of one size); near it refinement
            // recovers what condensing loses.
            self.direction(qp, settings, sigma * mu, true, error < REFINE_BELOW);
            let alpha0 = self.damped_step(settings.step_fraction);
            let alpha = self.keep_centred(alpha0);
            slow = if alpha < 1e-8 { slow + 1 } else { 0 };
            for j in 0..self.x.len() {
                self.x[j] += alpha * self.dx[j];
            }
            for t in 0..self.y.len() {
                self.y[t] += alpha * self.dy[t];
            }
            for t in 0..ms {
                self.z[t] += alpha * self.dz[t];
                self.s[t] += alpha * self.ds[t];
            }
        };
        self.last_solved = status.has_solution();
        self.write_solution(qp, status, iterations, out);
    }

    fn write_solution(
        &mut self,
        qp: &StageQp,
        status: QpStatus,
        iterations: u32,
        out: &mut QpSolution,
    ) {
        out.status = status;
        out.iterations = iterations;
        out.row_multipliers.fill(0.0);
        out.bound_multipliers.fill(0.0);
        if !status.has_solution() {
            out.step.fill(0.0);
            return;
        }
        let n = qp.num_variables();
        for j in 0..n {
            out.step[j] = if self.fixed[j] { self.fixed_values[j] } else { self.x[j] };
        }
        for (t, &i) in self.eq_rows.iter().enumerate() {
            out.row_multipliers[i] = self.y[t];
        }
        for (t, side) in self.sides.iter().enumerate() {
            let v = self.z[t];
            match *side {
                Side::Row(i, sign) => out.row_multipliers[i] += sign * v,
                Side::Var(j, sign) if j < n => out.bound_multipliers[j] += sign * v,
                Side::Var(..) => {}
            }
        }
        // Fixed variables take the multiplier that closes stationarity.
        if self.fixed.iter().any(|&f| f) {
            let mut r = std::mem::take(&mut self.tmp_n);
            qp.mul_hessian(&out.step, &mut r);
            for j in 0..n {
                r[j] += qp.gradient[j];
            }
            qp.mul_jacobian_transpose_add(&out.row_multipliers, &mut r);
            for j in 0..n {
                if self.fixed[j] {
                    out.bound_multipliers[j] = -r[j];
                }
            }
            self.tmp_n = r;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::{DMatrix, DVector};

    /// Two stages, a coupling row, two-sided and one-sided local rows, bounds and a fixed
    /// variable.
    fn small_qp() -> StageQp {
        let layout = Arc::new(StageLayout::new(&[3, 2], &[2, 1], &[1, 0]).unwrap());
        let mut qp = StageQp::zeros(layout);
        let h = [(0, 0, 2.0), (1, 0, 0.5), (1, 1, 1.5), (2, 2, 1.0), (3, 3, 3.0), (4, 3, -0.7)];
        for (r, c, v) in h {
            qp.add_hessian(r, c, v).unwrap();
        }
        qp.add_hessian(4, 4, 1.0).unwrap();
        qp.gradient = vec![0.3, -1.0, 0.5, 0.2, -0.4];
        let rows = [(0, 0, 1.0), (0, 1, -2.0), (1, 1, 1.0), (1, 2, 1.0), (2, 0, 1.0)];
        for (i, j, v) in rows {
            qp.set_jacobian(i, j, v).unwrap();
        }
        qp.set_jacobian(2, 3, -1.0).unwrap();
        qp.set_jacobian(2, 4, 0.5).unwrap();
        qp.set_jacobian(3, 3, 1.0).unwrap();
        qp.set_jacobian(3, 4, 1.0).unwrap();
        qp.row_lower = vec![-1.0, f64::NEG_INFINITY, 0.2, -0.5];
        qp.row_upper = vec![1.0, 0.7, 0.2, f64::INFINITY];
        qp.var_lower = vec![-1.0, f64::NEG_INFINITY, 0.4, -2.0, f64::NEG_INFINITY];
        qp.var_upper = vec![1.0, 2.0, 0.4, f64::INFINITY, f64::INFINITY];
        qp
    }

    /// The direction of [`Workspace::direction`] solves the full linearised optimality
    /// conditions, written out densely here and solved by LU.
    #[test]
    fn newton_direction_solves_the_full_system() {
        let qp = small_qp();
        let settings = StageIpmSettings::default();
        let mut ws = Workspace::new(&qp);
        ws.reduce(&qp);
        let (n, me, ms) = (ws.x.len(), ws.y.len(), ws.s.len());
        let mut seed = 99_u64;
        let mut rand = || {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for j in 0..n {
            ws.x[j] = if ws.fixed[j] { 0.0 } else { rand() - 0.5 };
        }
        for t in 0..me {
            ws.y[t] = rand() - 0.5;
        }
        for t in 0..ms {
            // Barrier weights spread over several orders of magnitude, as near the end.
            ws.s[t] = 10f64.powf(-4.0 * rand());
            ws.z[t] = 10f64.powf(-4.0 * rand());
        }
        ws.residuals(&qp);
        for t in 0..ms {
            ws.sigma[t] = ws.z[t] / ws.s[t];
        }
        ws.factorise(&qp, &settings, 0.0);
        let target = 0.05;
        ws.direction(&qp, &settings, target, false, true);

        // Dense P, A (rows of the equality multipliers) and G (sides).
        let p = DMatrix::from_fn(n, n, |r, c| {
            let mut e = vec![0.0; n];
            e[c] = 1.0;
            let mut out = vec![0.0; n];
            qp.mul_hessian(&e, &mut out);
            out[r]
        });
        let row = |i: usize| {
            let mut d = vec![0.0; n];
            let (v, first) = qp.row(i);
            d[first..first + v.len()].copy_from_slice(v);
            d
        };
        let a = DMatrix::from_fn(me, n, |t, c| row(ws.eq_rows[t])[c]);
        let g = DMatrix::from_fn(ms, n, |t, c| match ws.sides[t] {
            Side::Row(i, sign) => sign * row(i)[c],
            Side::Var(j, sign) => {
                if j == c {
                    sign
                } else {
                    0.0
                }
            }
        });
        // Unknowns (dx, dy, dz, ds); rows: stationarity, equalities, sides, complementarity.
        let dim = n + me + 2 * ms;
        let (oy, oz, os) = (n, n + me, n + me + ms);
        let mut m = DMatrix::zeros(dim, dim);
        let mut rhs = DVector::zeros(dim);
        for j in 0..n {
            if ws.fixed[j] {
                m[(j, j)] = 1.0;
                continue;
            }
            for c in 0..n {
                m[(j, c)] = p[(j, c)];
            }
            for t in 0..me {
                m[(j, oy + t)] = a[(t, j)];
            }
            for t in 0..ms {
                m[(j, oz + t)] = g[(t, j)];
            }
            rhs[j] = -ws.rx[j];
        }
        for t in 0..me {
            for c in 0..n {
                m[(oy + t, c)] = a[(t, c)];
            }
            rhs[oy + t] = -ws.ry[t];
        }
        for t in 0..ms {
            for c in 0..n {
                m[(oz + t, c)] = g[(t, c)];
            }
            m[(oz + t, os + t)] = 1.0;
            rhs[oz + t] = -ws.rz[t];
            m[(os + t, os + t)] = ws.z[t];
            m[(os + t, oz + t)] = ws.s[t];
            rhs[os + t] = -(ws.s[t] * ws.z[t] - target);
        }
        let sol = m.lu().solve(&rhs).expect("the full system is nonsingular");
        // LU on a system with weights over eight orders of magnitude: 1e-8 relative.
        let close = |a: f64, b: f64| (a - b).abs() <= 1e-8 * (1.0 + b.abs());
        for j in 0..n {
            assert!(close(ws.dx[j], sol[j]), "dx[{j}] {} vs {}", ws.dx[j], sol[j]);
        }
        for t in 0..me {
            assert!(close(ws.dy[t], sol[oy + t]), "dy[{t}]");
        }
        for t in 0..ms {
            assert!(close(ws.dz[t], sol[oz + t]), "dz[{t}] {} vs {}", ws.dz[t], sol[oz + t]);
            assert!(close(ws.ds[t], sol[os + t]), "ds[{t}]");
        }
    }

    #[test]
    fn a_passed_deadline_stops_the_method_with_the_time_limit_status() {
        let qp = small_qp();
        let mut ipm = StageIpm::new(StageIpmSettings::default());
        let mut out = QpSolution::new(0, 0);
        ipm.solve(&qp, &mut out).unwrap();
        assert_eq!(out.status, QpStatus::Solved, "the QP itself solves");
        ipm.set_deadline(Some(std::time::Instant::now()));
        ipm.solve(&qp, &mut out).unwrap();
        assert_eq!(out.status, QpStatus::TimeLimit);
        assert_eq!(out.iterations, 0);
        ipm.set_deadline(None);
        ipm.solve(&qp, &mut out).unwrap();
        assert_eq!(out.status, QpStatus::Solved);
    }
}
