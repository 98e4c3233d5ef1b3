//! The QP subproblems of one SQP iteration, built in place on the stage structure: the
//! regular QP, its elastic (l1-relaxed) form when the linearisation is inconsistent, and the
//! proximal QP on the violation alone that decides local infeasibility.
//!
//! Owns the QP data and its solutions, allocated once per solve (the elastic form on first
//! use). Must not evaluate the problem or accept steps.

use std::sync::Arc;

use crate::qp::{QpSolution, QpSolver, StageLayout, StageQp};

use super::setup::Setup;

/// The regular QP `min 1/2 d'Hd + g'd  subject to  cl <= c + J d <= cu,  yl <= y + d <= yu`.
pub(crate) struct QpModel {
    pub qp: StageQp,
    pub sol: QpSolution,
    elastic: Option<Elastic>,
}

/// The elastic form: each row `i` of stage `k` gets slacks `p_i, q_i >= 0` in stage `k`, with
/// `J_i d + p_i - q_i` in the row's bounds and cost `weight (p_i + q_i)`. Always feasible,
/// since the variable bounds contain `d = 0`.
struct Elastic {
    qp: StageQp,
    sol: QpSolution,
    /// Elastic index of each original variable.
    var: Vec<usize>,
    /// Elastic index of each row's first slack (the second follows it).
    slack: Vec<usize>,
}

/// Which elastic problem to build.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) enum ElasticKind {
    /// The regular QP's objective plus `weight` times the l1 violation.
    Penalised { weight: f64 },
    /// The l1 violation alone, with a unit proximal term: its step is short exactly when the
    /// violation is stationary.
    Feasibility,
}

impl QpModel {
    pub fn new(s: &Setup) -> QpModel {
        QpModel {
            qp: StageQp::zeros(s.stages.clone()),
            sol: QpSolution::new(s.n, s.m),
            elastic: None,
        }
    }

    /// Gradient, constraint matrix and bounds at the point `(y, c, g, jac)`; the Hessian
    /// blocks are the caller's.
    pub fn fill(&mut self, s: &Setup, y: &[f64], c: &[f64], g: &[f64], jac: &[f64]) {
        let qp = &mut self.qp;
        qp.gradient.copy_from_slice(g);
        qp.jacobian.fill(0.0);
        for (e, &p) in s.jac_pos.iter().enumerate() {
            qp.jacobian[p] += jac[e];
        }
        for i in 0..s.m {
            qp.row_lower[i] = s.cl[i] - c[i];
            qp.row_upper[i] = s.cu[i] - c[i];
        }
        for j in 0..s.n {
            qp.var_lower[j] = s.yl[j] - y[j];
            qp.var_upper[j] = s.yu[j] - y[j];
        }
    }

    /// Solve the regular QP into `self.sol`.
    pub fn solve(&mut self, solver: &mut dyn QpSolver) -> Result<(), String> {
        solver.solve(&self.qp, &mut self.sol).map_err(|e| e.to_string())
    }

    /// Build and solve an elastic problem from the regular QP as it stands; the step,
    /// row multipliers and bound multipliers of the original variables go into `self.sol`,
    /// and the sum of the slacks is returned (the linearised l1 violation at the step).
    pub fn solve_elastic(
        &mut self,
        kind: ElasticKind,
        solver: &mut dyn QpSolver,
    ) -> Result<f64, String> {
        let e = self.elastic.get_or_insert_with(|| Elastic::new(&self.qp.layout));
        e.fill(&self.qp, kind);
        solver.solve(&e.qp, &mut e.sol).map_err(|e| e.to_string())?;
        let sol = &mut self.sol;
        sol.status = e.sol.status;
        sol.iterations = e.sol.iterations;
        for (j, &k) in e.var.iter().enumerate() {
            sol.step[j] = e.sol.step[k];
            sol.bound_multipliers[j] = e.sol.bound_multipliers[k];
        }
        sol.row_multipliers.copy_from_slice(&e.sol.row_multipliers);
        Ok(e.slack.iter().map(|&k| e.sol.step[k] + e.sol.step[k + 1]).sum())
    }
}

impl Elastic {
    fn new(l: &StageLayout) -> Elastic {
        let s = l.stages();
        let mut vars = Vec::with_capacity(s);
        let mut local = Vec::with_capacity(s);
        let mut coupling = Vec::with_capacity(s);
        for k in 0..s {
            let rows = l.local_rows(k).len() + l.coupling_rows(k).len();
            vars.push(l.stage_size(k) + 2 * rows);
            local.push(l.local_rows(k).len());
            coupling.push(l.coupling_rows(k).len());
        }
        let el = Arc::new(StageLayout::new(&vars, &local, &coupling).expect("same chain as the QP"));
        let mut var = Vec::with_capacity(l.num_variables());
        let mut slack = vec![0; l.num_rows()];
        for k in 0..s {
            let start = el.vars(k).start;
            for j in l.vars(k) {
                var.push(start + (j - l.vars(k).start));
            }
            let first_row = l.local_rows(k).start;
            for i in l.local_rows(k).start..l.coupling_rows(k).end {
                slack[i] = start + l.stage_size(k) + 2 * (i - first_row);
            }
        }
        let (n, m) = (el.num_variables(), el.num_rows());
        Elastic { qp: StageQp::zeros(el), sol: QpSolution::new(n, m), var, slack }
    }

    fn fill(&mut self, qp: &StageQp, kind: ElasticKind) {
        let (l, el) = (&qp.layout, self.qp.layout.clone());
        let e = &mut self.qp;
        e.hessian.fill(0.0);
        for k in 0..l.stages() {
            let (n, ne) = (l.stage_size(k), el.stage_size(k));
            let src = qp.hessian_block(k);
            let dst = &mut e.hessian[el.hessian_block(k)];
            for j in 0..n {
                for i in 0..n {
                    dst[i + j * ne] = match kind {
                        ElasticKind::Penalised { .. } => src[i + j * n],
                        ElasticKind::Feasibility => f64::from(u8::from(i == j)),
                    };
                }
            }
        }
        let weight = match kind {
            ElasticKind::Penalised { weight } => weight,
            ElasticKind::Feasibility => 1.0,
        };
        e.gradient.fill(weight);
        e.var_lower.fill(0.0);
        e.var_upper.fill(f64::INFINITY);
        for (j, &k) in self.var.iter().enumerate() {
            e.gradient[k] = match kind {
                ElasticKind::Penalised { .. } => qp.gradient[j],
                ElasticKind::Feasibility => 0.0,
            };
            e.var_lower[k] = qp.var_lower[j];
            e.var_upper[k] = qp.var_upper[j];
        }
        e.row_lower.copy_from_slice(&qp.row_lower);
        e.row_upper.copy_from_slice(&qp.row_upper);
        e.jacobian.fill(0.0);
        for i in 0..l.num_rows() {
            let (k, coupling) = l.stage_of_row(i);
            let (n, ne) = (l.stage_size(k), el.stage_size(k));
            let (src, _) = qp.row(i);
            let dst = &mut e.jacobian[el.row_block(i)];
            dst[..n].copy_from_slice(&src[..n]);
            if coupling {
                dst[ne..ne + src.len() - n].copy_from_slice(&src[n..]);
            }
            let p = self.slack[i] - el.vars(k).start;
            dst[p] = 1.0;
            dst[p + 1] = -1.0;
        }
    }
}
