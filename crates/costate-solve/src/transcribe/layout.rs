//! Index bookkeeping of the multiple-shooting NLP: where each node's state and control, the
//! parameters and the free end time sit in the variable vector, where each constraint row sits,
//! and the way back from an index to what it stands for.
//!
//! Owns only arithmetic on indices; evaluates nothing.

use costate_model::FunctionKind;

/// What a variable or constraint row of the transcription stands for.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ViolationSource {
    /// Row `row` of a problem function (path rows at a node, boundary rows, and the
    /// dynamics/integrand rows named by an evaluation failure).
    Function(FunctionKind, usize),
    /// The continuity row of a state across a shooting interval (`x_{k+1} - F(x_k, ..) = 0`).
    Continuity(usize),
    /// The bounds of a state at a node (whole-trajectory bounds intersected with the start or
    /// end bounds at the first and last node).
    StateBound(usize),
    ControlBound(usize),
    ParamBound(usize),
    /// The bounds of a free final time.
    EndTime,
}

/// Variable and constraint layout. Variables, node by node: `x_k` (`nx`), `u_k` (`nu`, for
/// every node with its own control: `k < N` for piecewise-constant controls, all nodes for
/// piecewise-linear ones), then a copy `p_k` of the parameters (`np`) and, when the end time is
/// free, a copy `tf_k` of it. Constraint rows: continuity `N * nx` (interval by interval), copy
/// rows `N * (np + 1 if free)` (`p_{k+1} - p_k = 0`, `tf_{k+1} - tf_k = 0`), path
/// `(N + 1) * ng` (node by node), then the `nb` boundary rows.
///
/// Why copies: interval `k` then depends only on node `k`'s block (and linearly on `x_{k+1}`),
/// so the Lagrangian Hessian is block diagonal by node (H. G. Bock, K. J. Plitt, "A multiple
/// shooting algorithm for direct solution of optimal control problems", IFAC 1984) and the
/// SQP's block BFGS loses nothing; with one shared `tf` every block's curvature pairs would be
/// polluted by the cross terms in `tf`, which in a test stalled a minimum-time problem.
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
    node_start: Vec<usize>,
    n_vars: usize,
}

impl Layout {
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        nx: usize,
        nu: usize,
        np: usize,
        nq: usize,
        ng: usize,
        nb: usize,
        intervals: usize,
        linear_controls: bool,
        free_end: bool,
    ) -> Layout {
        let mut node_start = Vec::with_capacity(intervals + 1);
        let mut at = 0;
        for k in 0..=intervals {
            node_start.push(at);
            at += nx + if linear_controls || k < intervals { nu } else { 0 };
            at += np + usize::from(free_end);
        }
        let n_vars = at;
        Layout { nx, nu, np, nq, ng, nb, intervals, linear_controls, free_end, node_start, n_vars }
    }

    pub fn n_vars(&self) -> usize {
        self.n_vars
    }

    pub fn n_nodes(&self) -> usize {
        self.intervals + 1
    }

    /// Copy rows per interval: `np`, plus one for a free end time.
    pub fn n_copies(&self) -> usize {
        self.np + usize::from(self.free_end)
    }

    pub fn n_constraints(&self) -> usize {
        self.intervals * (self.nx + self.n_copies()) + self.n_nodes() * self.ng + self.nb
    }

    /// Variable index of state `i` at node `k`.
    pub fn x(&self, k: usize, i: usize) -> usize {
        self.node_start[k] + i
    }

    /// Whether node `k` has its own control variables.
    pub fn has_control(&self, k: usize) -> bool {
        self.nu > 0 && (self.linear_controls || k < self.intervals)
    }

    /// Variable index of the control `i` in force at node `k`: the node's own, or for
    /// piecewise-constant controls at the last node, that of the last interval.
    pub fn u_at(&self, k: usize, i: usize) -> usize {
        let k = if self.linear_controls { k } else { k.min(self.intervals - 1) };
        self.node_start[k] + self.nx + i
    }

    /// Controls held by node `k`.
    fn nu_at(&self, k: usize) -> usize {
        if self.linear_controls || k < self.intervals {
            self.nu
        } else {
            0
        }
    }

    /// Variable index of node `k`'s copy of parameter `i`.
    pub fn p_at(&self, k: usize, i: usize) -> usize {
        self.node_start[k] + self.nx + self.nu_at(k) + i
    }

    /// Variable index of node `k`'s copy of a free end time.
    pub fn tf_at(&self, k: usize) -> Option<usize> {
        self.free_end.then(|| self.node_start[k] + self.nx + self.nu_at(k) + self.np)
    }

    /// The copy of parameter `i` the endpoint functions read (node 0's).
    pub fn p(&self, i: usize) -> usize {
        self.p_at(0, i)
    }

    /// The copy of a free end time the endpoint functions read (the last node's).
    pub fn tf(&self) -> Option<usize> {
        self.tf_at(self.intervals)
    }

    /// Variables of node `k`: its state, its own control if any, its parameter and end-time
    /// copies.
    pub fn node_range(&self, k: usize) -> std::ops::Range<usize> {
        let end = if k < self.intervals { self.node_start[k + 1] } else { self.n_vars };
        self.node_start[k]..end
    }

    pub fn continuity_row(&self, k: usize, i: usize) -> usize {
        k * self.nx + i
    }

    /// Copy row `j` of interval `k`: parameter `j < np`, or the end time for `j == np`.
    pub fn copy_row(&self, k: usize, j: usize) -> usize {
        self.intervals * self.nx + k * self.n_copies() + j
    }

    pub fn path_row(&self, k: usize, r: usize) -> usize {
        self.intervals * (self.nx + self.n_copies()) + k * self.ng + r
    }

    pub fn boundary_row(&self, r: usize) -> usize {
        self.path_row(0, 0) + self.n_nodes() * self.ng + r
    }

    /// What constraint row `row` stands for, and its interval (continuity) or node (path).
    pub fn decode_row(&self, row: usize) -> (ViolationSource, Option<usize>) {
        let n_cont = self.intervals * self.nx;
        let n_copy = self.intervals * self.n_copies();
        let n_path = self.n_nodes() * self.ng;
        if row < n_cont {
            (ViolationSource::Continuity(row % self.nx), Some(row / self.nx))
        } else if row < n_cont + n_copy {
            let r = row - n_cont;
            let (k, j) = (r / self.n_copies(), r % self.n_copies());
            let what =
                if j < self.np { ViolationSource::ParamBound(j) } else { ViolationSource::EndTime };
            (what, Some(k))
        } else if row < n_cont + n_copy + n_path {
            let r = row - n_cont - n_copy;
            (ViolationSource::Function(FunctionKind::Path, r % self.ng), Some(r / self.ng))
        } else {
            (
                ViolationSource::Function(FunctionKind::Boundary, row - n_cont - n_copy - n_path),
                None,
            )
        }
    }

    /// What variable `j` stands for, and its node.
    pub fn decode_variable(&self, j: usize) -> (ViolationSource, Option<usize>) {
        // The last node start at or before `j`.
        let k = self.node_start.partition_point(|&s| s <= j) - 1;
        let off = j - self.node_start[k];
        let nu = self.nu_at(k);
        if off < self.nx {
            (ViolationSource::StateBound(off), Some(k))
        } else if off < self.nx + nu {
            (ViolationSource::ControlBound(off - self.nx), Some(k))
        } else if off < self.nx + nu + self.np {
            (ViolationSource::ParamBound(off - self.nx - nu), Some(k))
        } else {
            (ViolationSource::EndTime, Some(k))
        }
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

    #[test]
    fn indices_round_trip() {
        for linear in [false, true] {
            for free in [false, true] {
                let l = Layout::new(2, 1, 2, 1, 3, 2, 4, linear, free);
                let mut seen = vec![false; l.n_vars()];
                for k in 0..l.n_nodes() {
                    for i in 0..2 {
                        let j = l.x(k, i);
                        assert_eq!(l.decode_variable(j), (ViolationSource::StateBound(i), Some(k)));
                        seen[j] = true;
                    }
                    if l.has_control(k) {
                        let j = l.u_at(k, 0);
                        assert_eq!(
                            l.decode_variable(j),
                            (ViolationSource::ControlBound(0), Some(k))
                        );
                        seen[j] = true;
                    }
                }
                for k in 0..l.n_nodes() {
                    for i in 0..2 {
                        let j = l.p_at(k, i);
                        assert_eq!(l.decode_variable(j), (ViolationSource::ParamBound(i), Some(k)));
                        seen[j] = true;
                    }
                    if let Some(t) = l.tf_at(k) {
                        assert_eq!(l.decode_variable(t), (ViolationSource::EndTime, Some(k)));
                        seen[t] = true;
                    }
                    assert!(l.node_range(k).contains(&l.x(k, 0)));
                    assert!(l.node_range(k).contains(&l.p_at(k, 1)));
                }
                assert!(seen.iter().all(|&s| s));
                assert_eq!(
                    l.decode_row(l.continuity_row(3, 1)),
                    (ViolationSource::Continuity(1), Some(3))
                );
                assert_eq!(
                    l.decode_row(l.path_row(4, 2)),
                    (ViolationSource::Function(FunctionKind::Path, 2), Some(4))
                );
                assert_eq!(
                    l.decode_row(l.boundary_row(1)),
                    (ViolationSource::Function(FunctionKind::Boundary, 1), None)
                );
                assert_eq!(l.boundary_row(1) + 1, l.n_constraints());
            }
        }
        for kind in [FunctionKind::Dynamics, FunctionKind::Path, FunctionKind::Boundary] {
            assert_eq!(decode_tag(function_tag(kind, 7)), Some((kind, 7)));
        }
        assert_eq!(decode_tag(u32::MAX), None);
    }
}
