//! The QP subproblems of one SQP iteration, built in place on the stage structure: the
//! regular QP, its elastic (l1-relaxed) form when the linearisation is inconsistent, and the
//! proximal QP on the violation alone that decides local infeasibility.
//!
//! Owns the QP data and its solutions, allocated once per solve (the elastic form on first
//! use). Must not evaluate the problem or accept steps.

use crate::qp::{QpSolution, QpSolver, StageQp};

use super::setup::Setup;

/// The regular QP `min 1/2 d'Hd + g'd  subject to  cl <= c + J d <= cu,  yl <= y + d <= yu`.
pub(crate) struct QpModel {
    pub qp: StageQp,
    pub sol: QpSolution,
    elastic: Option<Elastic>,
}

/// The elastic form: the regular QP with every row penalised (see [`StageQp::row_penalty`]):
/// its violation costs `weight` per unit instead of being forbidden. Always feasible, since the
/// variable bounds contain `d = 0`. Same layout as the regular QP, so the QP solver eliminates
/// the violations' slacks row by row and the stage blocks keep their size.
struct Elastic {
    qp: StageQp,
    sol: QpSolution,
    /// `J d` at the elastic step.
    jd: Vec<f64>,
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
    /// row multipliers and bound multipliers go into `self.sol`, and the linearised l1
    /// violation at the step is returned.
    pub fn solve_elastic(
        &mut self,
        kind: ElasticKind,
        solver: &mut dyn QpSolver,
    ) -> Result<f64, String> {
        let e = self.elastic.get_or_insert_with(|| Elastic::new(&self.qp));
        e.fill(&self.qp, kind);
        solver.solve(&e.qp, &mut e.sol).map_err(|e| e.to_string())?;
        let sol = &mut self.sol;
        sol.status = e.sol.status;
        sol.iterations = e.sol.iterations;
        sol.step.copy_from_slice(&e.sol.step);
        sol.bound_multipliers.copy_from_slice(&e.sol.bound_multipliers);
        sol.row_multipliers.copy_from_slice(&e.sol.row_multipliers);
        e.qp.mul_jacobian(&e.sol.step, &mut e.jd);
        let q = &e.qp;
        Ok((0..q.num_rows())
            .map(|i| (q.row_lower[i] - e.jd[i]).max(e.jd[i] - q.row_upper[i]).max(0.0))
            .sum())
    }
}

impl Elastic {
    fn new(qp: &StageQp) -> Elastic {
        let (n, m) = (qp.num_variables(), qp.num_rows());
        Elastic { qp: qp.clone(), sol: QpSolution::new(n, m), jd: vec![0.0; m] }
    }

    fn fill(&mut self, qp: &StageQp, kind: ElasticKind) {
        let e = &mut self.qp;
        let l = &qp.layout;
        match kind {
            ElasticKind::Penalised { .. } => {
                e.hessian.copy_from_slice(&qp.hessian);
                e.gradient.copy_from_slice(&qp.gradient);
            }
            ElasticKind::Feasibility => {
                e.hessian.fill(0.0);
                for k in 0..l.stages() {
                    let n = l.stage_size(k);
                    let block = &mut e.hessian[l.hessian_block(k)];
                    for j in 0..n {
                        block[j + j * n] = 1.0;
                    }
                }
                e.gradient.fill(0.0);
            }
        }
        let weight = match kind {
            ElasticKind::Penalised { weight } => weight,
            ElasticKind::Feasibility => 1.0,
        };
        e.row_penalty.fill(weight);
        e.jacobian.copy_from_slice(&qp.jacobian);
        e.row_lower.copy_from_slice(&qp.row_lower);
        e.row_upper.copy_from_slice(&qp.row_upper);
        e.var_lower.copy_from_slice(&qp.var_lower);
        e.var_upper.copy_from_slice(&qp.var_upper);
    }
}
