//! CONTRACT (to be implemented): compiled vector functions with exact first and second derivatives.

use crate::{Graph, NodeId};

/// Scratch memory for evaluating one [`Function`]; create it once with [`Function::workspace`]
/// and reuse it, so evaluation does not allocate.
#[derive(Clone, Debug)]
pub struct Workspace {}

/// A compiled function `R^n_inputs -> R^n_outputs` with its sparse Jacobian and the sparse
/// Hessian of the weighted sum of its outputs, all evaluated from flat tapes.
#[derive(Clone, Debug)]
pub struct Function {}

impl Function {
    /// Compile `outputs` (nodes of `graph` that use inputs `0..n_inputs` only). Symbolic
    /// derivative nodes are added to `graph`.
    pub fn compile(graph: &mut Graph, n_inputs: usize, outputs: &[NodeId]) -> Function { todo!() }
    pub fn n_inputs(&self) -> usize { todo!() }
    pub fn n_outputs(&self) -> usize { todo!() }
    pub fn workspace(&self) -> Workspace { todo!() }
    /// `outputs.len() == n_outputs`.
    pub fn eval(&self, inputs: &[f64], outputs: &mut [f64], ws: &mut Workspace) { todo!() }
    /// Structurally nonzero Jacobian entries `(output_row, input_col)`, sorted by row then col.
    pub fn jacobian_pattern(&self) -> &[(usize, usize)] { todo!() }
    /// Jacobian values in the order of `jacobian_pattern`.
    pub fn eval_jacobian(&self, inputs: &[f64], values: &mut [f64], ws: &mut Workspace) { todo!() }
    /// Structurally nonzero entries `(row, col)` with `row >= col` (lower triangle) of the Hessian
    /// of `sum_i w_i * output_i` with respect to the inputs, sorted.
    pub fn hessian_pattern(&self) -> &[(usize, usize)] { todo!() }
    /// Values in the order of `hessian_pattern` for weights `w` (`w.len() == n_outputs`).
    pub fn eval_hessian(&self, inputs: &[f64], weights: &[f64], values: &mut [f64], ws: &mut Workspace) { todo!() }
}
