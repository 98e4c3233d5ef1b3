//! Index bookkeeping of the multiple-shooting NLP: where each node's variables and each row
//! sit, the way back from an index to what it stands for, and the stage structure the QP
//! solver uses.
//!
//! Owns only arithmetic on indices; evaluates nothing.
//!
//! # Stages
//! Every node is one stage of the QP, and every row belongs to one node (a local row) or ties
//! one node to the next (a coupling row). Quantities that the problem shares across the whole
//! horizon are carried from node to node as extra states with trivial dynamics, so no row or
//! second derivative ever spans more than two neighbouring nodes:
//! - the parameters and a free end time: a copy per node (`p_{k+1} = p_k`, `tf_{k+1} = tf_k`;
//!   H. G. Bock, K. J. Plitt, "A multiple shooting algorithm for direct solution of optimal
//!   control problems", IFAC 1984);
//! - the integrals: running sums `q_{k+1} = q_k + Q_k(x_k, u_k, ..)` with `q_0 = 0` (no
//!   variable at node 0), so the endpoint functions read `q_N`;
//! - the start values the endpoint functions read together with end values (a periodic orbit,
//!   a start-end difference): copies `s_{k+1} = s_k` with `s_1 = x_0` (no variable at node 0);
//! - the control at the last node: for piecewise-constant controls a copy `u_N = u_{N-1}`, so
//!   the path rows at the last node see it locally; for piecewise-linear controls each
//!   interval's end value `v_k` is a variable of node `k` and `u_{k+1} = v_k`.
//!
//! Endpoint functions (objective, boundary rows) that read no end value and no integral are
//! evaluated at node 0, all others at node `N`.
//!
//! Bounds sit on the originals only (the node-0 parameters and end time, the free controls):
//! a bound repeated on every copy would make the multipliers of an active bound non-unique.

use costate_model::{EndpointLayout, Function, FunctionKind};

use crate::qp::StageLayout;

/// What a variable or constraint row of the transcription stands for.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ViolationSource {
    /// Row `row` of a problem function (path rows at a node, boundary rows, the integral rows
    /// of an interval, and the dynamics/integrand rows named by an evaluation failure).
    Function(FunctionKind, usize),
    /// The continuity row of a state across a shooting interval (`x_{k+1} - F(x_k, ..) = 0`).
    Continuity(usize),
    /// The bounds of a state at a node (whole-trajectory bounds intersected with the start or
    /// end bounds at the first and last node), and its carried start value.
    StateBound(usize),
    /// The bounds of a control, and the rows that carry its value to the next node.
    ControlBound(usize),
    /// The bounds of a parameter, and the rows that carry it along.
    ParamBound(usize),
    /// The bounds of a free final time, and the rows that carry it along.
    EndTime,
}

/// Which endpoint functions read only start values (evaluated at node 0) and which start
/// values are carried to the last node.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct EndpointPlacement {
    /// Boundary rows evaluated at node 0, then those at node `N`.
    pub start_rows: Vec<usize>,
    pub end_rows: Vec<usize>,
    pub objective_at_start: bool,
    /// States whose start value an endpoint function at node `N` reads (sorted).
    pub carried: Vec<usize>,
}

impl EndpointPlacement {
    /// From the Jacobian patterns of the objective and boundary functions.
    pub fn new(ep: &EndpointLayout, objective: &Function, boundary: &Function) -> Self {
        let reads_end = |col: usize| col >= ep.xf(0) && (col < ep.p(0) || col >= ep.q(0));
        let reads_start = |col: usize| col >= ep.x0(0) && col < ep.xf(0);
        let nb = boundary.n_outputs();
        let mut end = vec![false; nb];
        for &(r, c) in boundary.jacobian_pattern() {
            end[r] |= reads_end(c);
        }
        let objective_at_end = objective.jacobian_pattern().iter().any(|&(_, c)| reads_end(c));
        let mut carried = vec![false; ep.nx];
        for &(r, c) in boundary.jacobian_pattern() {
            if end[r] && reads_start(c) {
                carried[c - ep.x0(0)] = true;
            }
        }
        if objective_at_end {
            for &(_, c) in objective.jacobian_pattern() {
                if reads_start(c) {
                    carried[c - ep.x0(0)] = true;
                }
            }
        }
        EndpointPlacement {
            start_rows: (0..nb).filter(|&r| !end[r]).collect(),
            end_rows: (0..nb).filter(|&r| end[r]).collect(),
            objective_at_start: !objective_at_end,
            carried: (0..ep.nx).filter(|&i| carried[i]).collect(),
        }
    }
}

/// Variable and row layout; see the module docs. Variables, node by node: `x_k` (`nx`),
/// `u_k` (`nu`, every node), `v_k` (`nu`, piecewise-linear controls, `k < N`), `p_k` (`np`),
/// `tf_k` (a free end time), `q_k` (`nq`, `k >= 1`), `s_k` (carried starts, `k >= 1`). Rows,
/// node by node: the path rows, the boundary rows placed at the node, then (for `k < N`) the
/// coupling rows of interval `k`: continuity (`nx`), control copies, parameter copies, the
/// end-time copy, the integrals (`nq`) and the carried starts.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Layout {
    pub nx: usize,
    pub nu: usize,
    pub np: usize,
    pub nq: usize,
    /// Path rows per node.
    pub ng: usize,
    /// Boundary rows.
    pub nb: usize,
    /// Number of intervals `N`.
    pub intervals: usize,
    pub linear_controls: bool,
    pub free_end: bool,
    pub placement: EndpointPlacement,
    node_start: Vec<usize>,
    row_start: Vec<usize>,
    /// Position of boundary row `r` among the rows of its node's local block.
    boundary_slot: Vec<usize>,
}

impl Layout {
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        nx: usize,
        nu: usize,
        np: usize,
        nq: usize,
        ng: usize,
        intervals: usize,
        linear_controls: bool,
        free_end: bool,
        placement: EndpointPlacement,
    ) -> Layout {
        let nb = placement.start_rows.len() + placement.end_rows.len();
        let mut boundary_slot = vec![0; nb];
        for (p, &r) in placement.start_rows.iter().enumerate() {
            boundary_slot[r] = ng + p;
        }
        for (p, &r) in placement.end_rows.iter().enumerate() {
            boundary_slot[r] = ng + p;
        }
        let mut l = Layout {
            nx,
            nu,
            np,
            nq,
            ng,
            nb,
            intervals,
            linear_controls,
            free_end,
            placement,
            node_start: Vec::with_capacity(intervals + 2),
            row_start: Vec::with_capacity(intervals + 2),
            boundary_slot,
        };
        let (mut v, mut r) = (0, 0);
        for k in 0..=intervals {
            l.node_start.push(v);
            l.row_start.push(r);
            v += l.node_vars(k);
            r += l.local_rows(k) + l.coupling_rows(k);
        }
        l.node_start.push(v);
        l.row_start.push(r);
        l
    }

    pub fn n_vars(&self) -> usize {
        self.node_start[self.n_nodes()]
    }

    pub fn n_nodes(&self) -> usize {
        self.intervals + 1
    }

    pub fn n_constraints(&self) -> usize {
        self.row_start[self.n_nodes()]
    }

    /// Carried start values.
    pub fn ns(&self) -> usize {
        self.placement.carried.len()
    }

    fn has_v(&self, k: usize) -> bool {
        self.linear_controls && k < self.intervals
    }

    fn node_vars(&self, k: usize) -> usize {
        let later = if k > 0 { self.nq + self.ns() } else { 0 };
        self.nx
            + self.nu
            + if self.has_v(k) { self.nu } else { 0 }
            + self.np
            + usize::from(self.free_end)
            + later
    }

    /// Control copy rows of interval `k`.
    fn n_control_copies(&self, k: usize) -> usize {
        if self.linear_controls || k + 1 == self.intervals {
            self.nu
        } else {
            0
        }
    }

    fn local_rows(&self, k: usize) -> usize {
        let mut n = self.ng;
        if k == 0 {
            n += self.placement.start_rows.len();
        }
        if k == self.intervals {
            n += self.placement.end_rows.len();
        }
        n
    }

    fn coupling_rows(&self, k: usize) -> usize {
        if k == self.intervals {
            return 0;
        }
        self.nx
            + self.n_control_copies(k)
            + self.np
            + usize::from(self.free_end)
            + self.nq
            + self.ns()
    }

    /// The stage structure: one stage per node.
    pub fn stages(&self) -> StageLayout {
        let nodes = 0..self.n_nodes();
        let vars: Vec<usize> = nodes.clone().map(|k| self.node_vars(k)).collect();
        let local: Vec<usize> = nodes.clone().map(|k| self.local_rows(k)).collect();
        let coupling: Vec<usize> = nodes.map(|k| self.coupling_rows(k)).collect();
        StageLayout::new(&vars, &local, &coupling).expect("the node layout is a valid chain")
    }

    /// Variables of node `k`.
    pub fn node_range(&self, k: usize) -> std::ops::Range<usize> {
        self.node_start[k]..self.node_start[k + 1]
    }

    /// State `i` at node `k`.
    pub fn x(&self, k: usize, i: usize) -> usize {
        self.node_start[k] + i
    }

    /// The control `i` in force at the start of node `k` (for piecewise-constant controls:
    /// on interval `k`; at the last node the copy of the last interval's).
    pub fn u_at(&self, k: usize, i: usize) -> usize {
        self.node_start[k] + self.nx + i
    }

    /// Whether node `k`'s controls are free variables (not copies).
    pub fn controls_free(&self, k: usize) -> bool {
        if self.linear_controls {
            k == 0
        } else {
            k < self.intervals
        }
    }

    /// End value of control `i` on interval `k` (piecewise-linear controls, `k < N`).
    pub fn v(&self, k: usize, i: usize) -> usize {
        debug_assert!(self.has_v(k));
        self.node_start[k] + self.nx + self.nu + i
    }

    fn after_controls(&self, k: usize) -> usize {
        self.node_start[k] + self.nx + self.nu + if self.has_v(k) { self.nu } else { 0 }
    }

    /// Node `k`'s copy of parameter `i`.
    pub fn p_at(&self, k: usize, i: usize) -> usize {
        self.after_controls(k) + i
    }

    /// Node `k`'s copy of a free end time.
    pub fn tf_at(&self, k: usize) -> Option<usize> {
        self.free_end.then(|| self.after_controls(k) + self.np)
    }

    /// The running sum of integral `j` at node `k >= 1`.
    pub fn q(&self, k: usize, j: usize) -> usize {
        debug_assert!(k > 0);
        self.after_controls(k) + self.np + usize::from(self.free_end) + j
    }

    /// Node `k >= 1`'s copy of the `c`-th carried start value.
    pub fn s(&self, k: usize, c: usize) -> usize {
        debug_assert!(k > 0);
        self.after_controls(k) + self.np + usize::from(self.free_end) + self.nq + c
    }

    /// The copies the endpoint functions read: node 0's for those at the start, the last
    /// node's for those at the end.
    pub fn endpoint_node(&self, at_start: bool) -> usize {
        if at_start {
            0
        } else {
            self.intervals
        }
    }

    pub fn path_row(&self, k: usize, r: usize) -> usize {
        self.row_start[k] + r
    }

    /// Boundary row `r`, at node 0 or `N`.
    pub fn boundary_row(&self, r: usize) -> usize {
        let at_start = self.placement.start_rows.contains(&r);
        self.row_start[self.endpoint_node(at_start)] + self.boundary_slot[r]
    }

    fn coupling_start(&self, k: usize) -> usize {
        self.row_start[k] + self.local_rows(k)
    }

    pub fn continuity_row(&self, k: usize, i: usize) -> usize {
        self.coupling_start(k) + i
    }

    /// Row carrying control `i` into node `k + 1` (see [`Self::control_copy_rows`]).
    pub fn control_copy_row(&self, k: usize, i: usize) -> usize {
        self.coupling_start(k) + self.nx + i
    }

    /// Whether interval `k` has control copy rows.
    pub fn control_copy_rows(&self, k: usize) -> bool {
        self.n_control_copies(k) > 0
    }

    pub fn param_copy_row(&self, k: usize, i: usize) -> usize {
        self.coupling_start(k) + self.nx + self.n_control_copies(k) + i
    }

    pub fn tf_copy_row(&self, k: usize) -> Option<usize> {
        self.free_end.then(|| self.coupling_start(k) + self.nx + self.n_control_copies(k) + self.np)
    }

    /// Row `q_{k+1} = q_k + Q_k` of integral `j`.
    pub fn integral_row(&self, k: usize, j: usize) -> usize {
        self.coupling_start(k)
            + self.nx
            + self.n_control_copies(k)
            + self.np
            + usize::from(self.free_end)
            + j
    }

    /// Row carrying the `c`-th start value into node `k + 1`.
    pub fn start_copy_row(&self, k: usize, c: usize) -> usize {
        self.integral_row(k, self.nq) + c
    }

    /// Node of a variable.
    pub fn node_of_var(&self, j: usize) -> usize {
        self.node_start.partition_point(|&s| s <= j) - 1
    }

    /// What constraint row `row` stands for, and its node (local rows) or interval
    /// (coupling rows); `None` for boundary rows.
    pub fn decode_row(&self, row: usize) -> (ViolationSource, Option<usize>) {
        let k = self.row_start.partition_point(|&s| s <= row) - 1;
        let mut off = row - self.row_start[k];
        if off < self.local_rows(k) {
            if off < self.ng {
                return (ViolationSource::Function(FunctionKind::Path, off), Some(k));
            }
            off -= self.ng;
            let rows = if k == 0 { &self.placement.start_rows } else { &self.placement.end_rows };
            return (ViolationSource::Function(FunctionKind::Boundary, rows[off]), None);
        }
        off -= self.local_rows(k);
        let what = if off < self.nx {
            ViolationSource::Continuity(off)
        } else if off < self.nx + self.n_control_copies(k) {
            ViolationSource::ControlBound(off - self.nx)
        } else {
            let o = off - self.nx - self.n_control_copies(k);
            if o < self.np {
                ViolationSource::ParamBound(o)
            } else if self.free_end && o == self.np {
                ViolationSource::EndTime
            } else {
                let o = o - self.np - usize::from(self.free_end);
                if o < self.nq {
                    ViolationSource::Function(FunctionKind::Integrands, o)
                } else {
                    ViolationSource::StateBound(self.placement.carried[o - self.nq])
                }
            }
        };
        (what, Some(k))
    }

    /// What variable `j` stands for, and its node.
    pub fn decode_variable(&self, j: usize) -> (ViolationSource, Option<usize>) {
        let k = self.node_of_var(j);
        let off = j - self.node_start[k];
        let nv = if self.has_v(k) { self.nu } else { 0 };
        let what = if off < self.nx {
            ViolationSource::StateBound(off)
        } else if off < self.nx + self.nu + nv {
            ViolationSource::ControlBound((off - self.nx) % self.nu.max(1))
        } else {
            let o = off - self.nx - self.nu - nv;
            if o < self.np {
                ViolationSource::ParamBound(o)
            } else if self.free_end && o == self.np {
                ViolationSource::EndTime
            } else {
                let o = o - self.np - usize::from(self.free_end);
                if o < self.nq {
                    ViolationSource::Function(FunctionKind::Integrands, o)
                } else {
                    ViolationSource::StateBound(self.placement.carried[o - self.nq])
                }
            }
        };
        (what, Some(k))
    }
}

/// Tag of an [`crate::EvalError`] raised by the transcription: the function in the top byte,
/// the row below. The stage of such an error is the node (path) or interval (dynamics,
/// integrands) index.
pub fn function_tag(kind: FunctionKind, row: usize) -> u32 {
    let k: u32 = match kind {
        FunctionKind::Dynamics => 0,
        FunctionKind::Integrands => 1,
        FunctionKind::Path => 2,
        FunctionKind::Objective => 3,
        FunctionKind::Boundary => 4,
    };
    (k << 24) | (row.min(0x00ff_ffff) as u32)
}

/// Inverse of [`function_tag`]; `None` for tags it does not produce.
pub fn decode_tag(tag: u32) -> Option<(FunctionKind, usize)> {
    let kind = match tag >> 24 {
        0 => FunctionKind::Dynamics,
        1 => FunctionKind::Integrands,
        2 => FunctionKind::Path,
        3 => FunctionKind::Objective,
        4 => FunctionKind::Boundary,
        _ => return None,
    };
    Some((kind, (tag & 0x00ff_ffff) as usize))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn placement() -> EndpointPlacement {
        // Boundary rows 0 and 2 at the end, row 1 at the start; state 1 carried.
        EndpointPlacement {
            start_rows: vec![1],
            end_rows: vec![0, 2],
            objective_at_start: false,
            carried: vec![1],
        }
    }

    #[test]
    fn every_index_is_used_once_and_decodes_to_its_owner() {
        for linear in [false, true] {
            for free in [false, true] {
                let l = Layout::new(2, 1, 2, 1, 3, 4, linear, free, placement());
                let mut seen = vec![0; l.n_vars()];
                let mut mark = |j: usize| seen[j] += 1;
                for k in 0..l.n_nodes() {
                    for i in 0..2 {
                        mark(l.x(k, i));
                        assert_eq!(
                            l.decode_variable(l.x(k, i)),
                            (ViolationSource::StateBound(i), Some(k))
                        );
                        mark(l.p_at(k, i));
                        assert_eq!(
                            l.decode_variable(l.p_at(k, i)).0,
                            ViolationSource::ParamBound(i)
                        );
                    }
                    mark(l.u_at(k, 0));
                    assert_eq!(l.decode_variable(l.u_at(k, 0)).0, ViolationSource::ControlBound(0));
                    if linear && k < 4 {
                        mark(l.v(k, 0));
                        assert_eq!(
                            l.decode_variable(l.v(k, 0)).0,
                            ViolationSource::ControlBound(0)
                        );
                    }
                    if let Some(t) = l.tf_at(k) {
                        mark(t);
                        assert_eq!(l.decode_variable(t).0, ViolationSource::EndTime);
                    }
                    if k > 0 {
                        mark(l.q(k, 0));
                        mark(l.s(k, 0));
                        assert_eq!(l.decode_variable(l.s(k, 0)).0, ViolationSource::StateBound(1));
                    }
                    assert!(l.node_range(k).contains(&l.x(k, 0)));
                }
                assert!(seen.iter().all(|&s| s == 1), "{seen:?}");

                let mut rows = vec![0; l.n_constraints()];
                for k in 0..l.n_nodes() {
                    for r in 0..3 {
                        rows[l.path_row(k, r)] += 1;
                        assert_eq!(
                            l.decode_row(l.path_row(k, r)),
                            (ViolationSource::Function(FunctionKind::Path, r), Some(k))
                        );
                    }
                    if k == 4 {
                        continue;
                    }
                    for i in 0..2 {
                        rows[l.continuity_row(k, i)] += 1;
                        assert_eq!(
                            l.decode_row(l.continuity_row(k, i)),
                            (ViolationSource::Continuity(i), Some(k))
                        );
                        rows[l.param_copy_row(k, i)] += 1;
                    }
                    if l.control_copy_rows(k) {
                        rows[l.control_copy_row(k, 0)] += 1;
                    }
                    if let Some(r) = l.tf_copy_row(k) {
                        rows[r] += 1;
                        assert_eq!(l.decode_row(r).0, ViolationSource::EndTime);
                    }
                    rows[l.integral_row(k, 0)] += 1;
                    assert_eq!(
                        l.decode_row(l.integral_row(k, 0)).0,
                        ViolationSource::Function(FunctionKind::Integrands, 0)
                    );
                    rows[l.start_copy_row(k, 0)] += 1;
                }
                for r in 0..3 {
                    rows[l.boundary_row(r)] += 1;
                    assert_eq!(
                        l.decode_row(l.boundary_row(r)),
                        (ViolationSource::Function(FunctionKind::Boundary, r), None)
                    );
                }
                assert!(rows.iter().all(|&s| s == 1), "{rows:?}");
                // Boundary row 1 reads only start values: it sits at node 0.
                assert!(l.boundary_row(1) < l.path_row(1, 0));
                assert!(l.boundary_row(0) > l.path_row(4, 0));
                // The stage layout covers the same sizes.
                let st = l.stages();
                assert_eq!((st.num_variables(), st.num_rows()), (l.n_vars(), l.n_constraints()));
                assert_eq!(st.vars(2), l.node_range(2));
                assert_eq!(st.stage_of_row(l.continuity_row(1, 0)), (1, true));
                assert_eq!(st.stage_of_row(l.path_row(3, 2)), (3, false));
            }
        }
        for kind in [FunctionKind::Dynamics, FunctionKind::Path, FunctionKind::Boundary] {
            assert_eq!(decode_tag(function_tag(kind, 7)), Some((kind, 7)));
        }
        assert_eq!(decode_tag(u32::MAX), None);
    }
}
