//! Compiled vector functions with exact first and second derivatives.
//!
//! This module owns the step from graph nodes to flat evaluation tapes: the Jacobian sparsity
//! pattern and its derivative nodes, the lower-triangle pattern and second-derivative nodes of
//! the weighted Hessian, and three tapes (values; values and Jacobian; Hessian) of instructions
//! over one slot vector. It must not change the meaning of graph nodes (derivative rules and
//! folding live in [`crate::graph`]) and knows nothing of the optimal-control layout.
//!
//! Design notes:
//! - Every node used by any tape owns one slot for the life of the [`Function`]; there is no
//!   register reuse. That keeps the workspace small enough in practice (one `f64` per node) and
//!   lets [`Function::first_non_finite`] trace a NaN back to the node that produced it.
//! - Constants sit in their slots from [`Function::workspace`] on; inputs are copied in at the
//!   start of each tape; instructions run in increasing node id, which is topological.
//! - The Hessian of `sum_i w_i f_i` is built forward over reverse: one symbolic reverse sweep
//!   seeded with the weights gives the gradient `G_j`, and each `G_j` is differentiated only
//!   with respect to the inputs `k <= j` it depends on. That costs about `n_inputs` times the
//!   expression size, where differentiating each Jacobian entry again would cost its square.
//!   The weights enter the graph as inputs `n_inputs + i`; only the Hessian tape reads them
//!   (from the `weights` argument), so they never clash with another function's inputs.

use std::sync::atomic::{AtomicU64, Ordering};

use crate::graph::{select_value, BinaryOp, Graph, Node, NodeId, UnaryOp};

/// Scratch memory for evaluating one [`Function`]; create it once with [`Function::workspace`]
/// and reuse it, so evaluation does not allocate.
#[derive(Clone, Debug)]
pub struct Workspace {
    /// Which compiled function the slots are laid out for.
    owner: u64,
    slots: Vec<f64>,
}

/// Why [`Function::try_compile`] refused its arguments.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum CompileError {
    /// An output id is not a node of the graph.
    UnknownNode(NodeId),
    /// An output uses an input at or beyond `n_inputs`.
    InputOutOfRange { input: usize, n_inputs: usize },
}

impl std::fmt::Display for CompileError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            CompileError::UnknownNode(id) => write!(f, "node {} is not in the graph", id.0),
            CompileError::InputOutOfRange { input, n_inputs } => {
                write!(f, "input {input} used by a function of {n_inputs} inputs")
            }
        }
    }
}

impl std::error::Error for CompileError {}

/// Where a non-finite output came from: see [`Function::first_non_finite`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NonFinite {
    /// The first output (lowest index) that is NaN or infinite.
    pub output: usize,
    /// Its value.
    pub value: f64,
    /// The earliest node on a chain of non-finite values leading to that output whose own
    /// operands are all finite: the operation that failed (e.g. `log` of a negative number).
    pub origin: NodeId,
}

/// Sizes of the compiled tapes, for tests and diagnostics.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TapeStats {
    pub slots: usize,
    pub values: usize,
    pub jacobian: usize,
    pub hessian: usize,
}

#[derive(Clone, Copy, Debug)]
enum Instr {
    Unary {
        op: UnaryOp,
        a: u32,
        dst: u32,
    },
    Binary {
        op: BinaryOp,
        a: u32,
        b: u32,
        dst: u32,
    },
    /// `a^2` as one multiplication.
    Square {
        a: u32,
        dst: u32,
    },
    /// `a^n` for a constant integer exponent.
    PowInt {
        a: u32,
        n: i32,
        dst: u32,
    },
    /// `a^c` for a constant non-integer exponent.
    PowConst {
        a: u32,
        c: f64,
        dst: u32,
    },
    Select {
        cond: u32,
        pos: u32,
        neg: u32,
        dst: u32,
    },
}

impl Instr {
    fn dst(&self) -> u32 {
        match *self {
            Instr::Unary { dst, .. }
            | Instr::Binary { dst, .. }
            | Instr::Square { dst, .. }
            | Instr::PowInt { dst, .. }
            | Instr::PowConst { dst, .. }
            | Instr::Select { dst, .. } => dst,
        }
    }
}

#[derive(Clone, Debug, Default)]
struct Tape {
    /// `(source, slot)` copies done before the instructions; `source` indexes the inputs
    /// followed by the weights.
    inputs: Vec<(u32, u32)>,
    instrs: Vec<Instr>,
}

impl Tape {
    #[inline]
    fn run(&self, inputs: &[f64], weights: &[f64], slots: &mut [f64]) {
        for &(j, s) in &self.inputs {
            let j = j as usize;
            slots[s as usize] =
                if j < inputs.len() { inputs[j] } else { weights[j - inputs.len()] };
        }
        for ins in &self.instrs {
            let (dst, v) = match *ins {
                Instr::Unary { op, a, dst } => (dst, op.apply(slots[a as usize])),
                Instr::Binary { op, a, b, dst } => {
                    (dst, op.apply(slots[a as usize], slots[b as usize]))
                }
                Instr::Square { a, dst } => {
                    let x = slots[a as usize];
                    (dst, x * x)
                }
                Instr::PowInt { a, n, dst } => (dst, slots[a as usize].powi(n)),
                Instr::PowConst { a, c, dst } => (dst, slots[a as usize].powf(c)),
                Instr::Select { cond, pos, neg, dst } => (
                    dst,
                    select_value(slots[cond as usize], slots[pos as usize], slots[neg as usize]),
                ),
            };
            slots[dst as usize] = v;
        }
    }
}

/// Source of the ids that tie a [`Workspace`] to the [`Function`] it was made for.
static NEXT_FUNCTION_ID: AtomicU64 = AtomicU64::new(1);

/// A compiled function `R^n_inputs -> R^n_outputs` with its sparse Jacobian and the sparse
/// Hessian of the weighted sum of its outputs, all evaluated from flat tapes.
#[derive(Clone, Debug)]
pub struct Function {
    id: u64,
    n_inputs: usize,
    outputs: Vec<NodeId>,
    /// Initial slot contents: constants in place, NaN elsewhere.
    init_slots: Vec<f64>,
    /// The node computed in each slot.
    slot_nodes: Vec<NodeId>,
    /// For each slot, the index of its instruction in the values tape (`u32::MAX` if none).
    value_producer: Vec<u32>,
    values: Tape,
    output_slots: Vec<u32>,
    jacobian: Tape,
    jacobian_pattern: Vec<(usize, usize)>,
    jacobian_slots: Vec<u32>,
    hessian: Tape,
    hessian_pattern: Vec<(usize, usize)>,
    hessian_slots: Vec<u32>,
}

/// Assigns slots and builds tapes; lives only during compilation.
struct Builder<'g> {
    graph: &'g Graph,
    n_inputs: usize,
    /// Inputs `n_inputs..n_inputs + n_weights` are the Hessian weights.
    n_weights: usize,
    slot_of: Vec<u32>,
    /// Tape generation that last visited each node.
    visited: Vec<u32>,
    generation: u32,
    slot_nodes: Vec<NodeId>,
    init_slots: Vec<f64>,
}

const NO_SLOT: u32 = u32::MAX;

impl<'g> Builder<'g> {
    fn new(graph: &'g Graph, n_inputs: usize, n_weights: usize) -> Self {
        Builder {
            graph,
            n_inputs,
            n_weights,
            slot_of: vec![NO_SLOT; graph.len()],
            visited: vec![0; graph.len()],
            generation: 0,
            slot_nodes: Vec::new(),
            init_slots: Vec::new(),
        }
    }

    fn slot(&mut self, id: NodeId) -> u32 {
        let s = &mut self.slot_of[id.index()];
        if *s == NO_SLOT {
            *s = u32::try_from(self.slot_nodes.len()).expect("more than u32::MAX slots");
            self.slot_nodes.push(id);
            self.init_slots.push(self.graph.as_constant(id).unwrap_or(f64::NAN));
        }
        *s
    }

    /// The tape computing `roots` and everything they need; only with `weights` may it read
    /// the weight inputs.
    fn tape(&mut self, roots: &[NodeId], weights: bool) -> Result<Tape, CompileError> {
        let limit = self.n_inputs + if weights { self.n_weights } else { 0 };
        self.generation += 1;
        let generation = self.generation;
        let mut order = Vec::new();
        let mut stack = roots.to_vec();
        while let Some(n) = stack.pop() {
            let seen = &mut self.visited[n.index()];
            if *seen == generation {
                continue;
            }
            *seen = generation;
            order.push(n);
            let node = self.graph.node(n);
            // A constant exponent is folded into the instruction and needs no slot.
            if let Node::Binary(BinaryOp::Pow, a, b) = node {
                if self.graph.as_constant(b).is_some() {
                    stack.push(a);
                    continue;
                }
            }
            stack.extend(node.operands().into_iter().flatten());
        }
        order.sort_unstable();
        let mut tape = Tape::default();
        for n in order {
            let dst = self.slot(n);
            let ins = match self.graph.node(n) {
                Node::Constant(_) => continue,
                Node::Input(j) => {
                    if j as usize >= limit {
                        return Err(CompileError::InputOutOfRange {
                            input: j as usize,
                            n_inputs: self.n_inputs,
                        });
                    }
                    tape.inputs.push((j, dst));
                    continue;
                }
                Node::Unary(op, a) => Instr::Unary { op, a: self.slot(a), dst },
                Node::Binary(BinaryOp::Pow, a, b) if self.graph.as_constant(b).is_some() => {
                    let c = self.graph.as_constant(b).unwrap_or(f64::NAN);
                    let a = self.slot(a);
                    pow_instr(a, c, dst)
                }
                Node::Binary(op, a, b) => {
                    Instr::Binary { op, a: self.slot(a), b: self.slot(b), dst }
                }
                Node::Select { cond, pos, neg } => Instr::Select {
                    cond: self.slot(cond),
                    pos: self.slot(pos),
                    neg: self.slot(neg),
                    dst,
                },
            };
            tape.instrs.push(ins);
        }
        Ok(tape)
    }
}

/// The fastest exact-enough instruction for `a^c` with constant `c`.
fn pow_instr(a: u32, c: f64, dst: u32) -> Instr {
    if c == 2.0 {
        Instr::Square { a, dst }
    } else if c == 0.5 {
        Instr::Unary { op: UnaryOp::Sqrt, a, dst }
    } else if c.fract() == 0.0 && c.abs() <= 64.0 {
        // Repeated squaring is exact to a few ulps for moderate exponents and far cheaper than
        // powf; the bound keeps rounding growth small. `c` is integral, so the cast is exact.
        Instr::PowInt { a, n: c as i32, dst }
    } else {
        Instr::PowConst { a, c, dst }
    }
}

impl Function {
    /// Compile `outputs` (nodes of `graph` that use inputs `0..n_inputs` only). Symbolic
    /// derivative nodes are added to `graph`.
    ///
    /// Panics when `outputs` break that precondition; use [`Function::try_compile`] to get a
    /// [`CompileError`] instead.
    pub fn compile(graph: &mut Graph, n_inputs: usize, outputs: &[NodeId]) -> Function {
        match Function::try_compile(graph, n_inputs, outputs) {
            Ok(f) => f,
            Err(e) => panic!("Function::compile: {e}"),
        }
    }

    /// [`Function::compile`] that reports a broken precondition instead of panicking.
    pub fn try_compile(
        graph: &mut Graph,
        n_inputs: usize,
        outputs: &[NodeId],
    ) -> Result<Function, CompileError> {
        for &o in outputs {
            if o.index() >= graph.len() {
                return Err(CompileError::UnknownNode(o));
            }
            if let Some(&j) = graph.dependencies(o).last() {
                if j as usize >= n_inputs {
                    return Err(CompileError::InputOutOfRange { input: j as usize, n_inputs });
                }
            }
        }

        // Jacobian: one derivative per (output, input it depends on), rows then columns sorted.
        let mut jac_entries: Vec<(usize, usize, NodeId)> = Vec::new();
        for (i, &o) in outputs.iter().enumerate() {
            let deps = graph.dependencies(o).to_vec();
            for j in deps {
                let d = graph.derivative(o, j as usize);
                if graph.as_constant(d) != Some(0.0) {
                    jac_entries.push((i, j as usize, d));
                }
            }
        }

        // Hessian of sum_i w_i f_i, lower triangle, forward over reverse (see module docs).
        let weights: Vec<NodeId> = (0..outputs.len()).map(|i| graph.input(n_inputs + i)).collect();
        let mut hess_entries: Vec<(usize, usize, NodeId)> = Vec::new();
        for (j, gj) in graph.gradient(outputs, &weights) {
            let deps = graph.dependencies(gj).to_vec();
            for k in deps.into_iter().map(|k| k as usize).take_while(|&k| k <= j) {
                let h = graph.derivative(gj, k);
                if graph.as_constant(h) != Some(0.0) {
                    hess_entries.push((j, k, h));
                }
            }
        }

        let graph: &Graph = graph;
        let mut b = Builder::new(graph, n_inputs, outputs.len());

        let values = b.tape(outputs, false)?;
        let value_tape_slots = b.slot_nodes.len();
        let output_slots: Vec<u32> = outputs.iter().map(|&o| b.slot(o)).collect();

        let mut jac_roots: Vec<NodeId> = outputs.to_vec();
        jac_roots.extend(jac_entries.iter().map(|e| e.2));
        let jacobian = b.tape(&jac_roots, false)?;
        let jacobian_slots = jac_entries.iter().map(|e| b.slot(e.2)).collect();
        let jacobian_pattern = jac_entries.iter().map(|e| (e.0, e.1)).collect();

        let hess_roots: Vec<NodeId> = hess_entries.iter().map(|e| e.2).collect();
        let hessian = b.tape(&hess_roots, true)?;
        let hessian_slots = hess_roots.iter().map(|&h| b.slot(h)).collect();
        let hessian_pattern = hess_entries.iter().map(|e| (e.0, e.1)).collect();

        let mut value_producer = vec![u32::MAX; value_tape_slots];
        for (k, ins) in values.instrs.iter().enumerate() {
            value_producer[ins.dst() as usize] = k as u32;
        }

        Ok(Function {
            id: NEXT_FUNCTION_ID.fetch_add(1, Ordering::Relaxed),
            n_inputs,
            outputs: outputs.to_vec(),
            init_slots: b.init_slots,
            slot_nodes: b.slot_nodes,
            value_producer,
            values,
            output_slots,
            jacobian,
            jacobian_pattern,
            jacobian_slots,
            hessian,
            hessian_pattern,
            hessian_slots,
        })
    }

    pub fn n_inputs(&self) -> usize {
        self.n_inputs
    }

    pub fn n_outputs(&self) -> usize {
        self.outputs.len()
    }

    /// The graph nodes this function computes, in output order.
    pub fn outputs(&self) -> &[NodeId] {
        &self.outputs
    }

    pub fn workspace(&self) -> Workspace {
        Workspace { owner: self.id, slots: self.init_slots.clone() }
    }

    /// The slots of `ws`, re-initialised first if `ws` was made for another function (a cheap
    /// guard that turns a mix-up into one allocation instead of wrong numbers).
    fn slots<'w>(&self, ws: &'w mut Workspace) -> &'w mut [f64] {
        if ws.owner != self.id {
            *ws = self.workspace();
        }
        &mut ws.slots
    }

    fn check_inputs(&self, inputs: &[f64]) {
        assert_eq!(inputs.len(), self.n_inputs, "wrong number of inputs");
    }

    /// Rebuild this function's outputs as nodes of `graph`, with input `j` replaced by the node
    /// `inputs[j]` (`inputs.len() == n_inputs`). The result computes the same values by the
    /// same operations, so a composition (for example an integrator step made of several
    /// evaluations) can be compiled as one function and differentiated symbolically as a whole.
    pub fn replay(&self, graph: &mut Graph, inputs: &[NodeId]) -> Vec<NodeId> {
        assert_eq!(inputs.len(), self.n_inputs, "wrong number of inputs");
        let mut node: Vec<Option<NodeId>> = vec![None; self.init_slots.len()];
        for &(j, s) in &self.values.inputs {
            node[s as usize] = Some(inputs[j as usize]);
        }
        let at = |graph: &mut Graph, node: &[Option<NodeId>], s: u32| -> NodeId {
            // Slots never written by the tape hold constants (NaN included).
            node[s as usize].unwrap_or_else(|| graph.constant(self.init_slots[s as usize]))
        };
        for ins in &self.values.instrs {
            let id = match *ins {
                Instr::Unary { op, a, .. } => {
                    let a = at(graph, &node, a);
                    graph.unary(op, a)
                }
                Instr::Binary { op, a, b, .. } => {
                    let (a, b) = (at(graph, &node, a), at(graph, &node, b));
                    graph.binary(op, a, b)
                }
                Instr::Square { a, .. } => {
                    let (a, c) = (at(graph, &node, a), graph.constant(2.0));
                    graph.binary(BinaryOp::Pow, a, c)
                }
                Instr::PowInt { a, n, .. } => {
                    let (a, c) = (at(graph, &node, a), graph.constant(f64::from(n)));
                    graph.binary(BinaryOp::Pow, a, c)
                }
                Instr::PowConst { a, c, .. } => {
                    let (a, c) = (at(graph, &node, a), graph.constant(c));
                    graph.binary(BinaryOp::Pow, a, c)
                }
                Instr::Select { cond, pos, neg, .. } => {
                    let c = at(graph, &node, cond);
                    let (p, n) = (at(graph, &node, pos), at(graph, &node, neg));
                    graph.select(c, p, n)
                }
            };
            node[ins.dst() as usize] = Some(id);
        }
        self.output_slots.iter().map(|&s| at(graph, &node, s)).collect()
    }

    /// `outputs.len() == n_outputs`.
    pub fn eval(&self, inputs: &[f64], outputs: &mut [f64], ws: &mut Workspace) {
        self.check_inputs(inputs);
        assert_eq!(outputs.len(), self.n_outputs(), "wrong number of outputs");
        let slots = self.slots(ws);
        self.values.run(inputs, &[], slots);
        for (o, &s) in outputs.iter_mut().zip(&self.output_slots) {
            *o = slots[s as usize];
        }
    }

    /// Structurally nonzero Jacobian entries `(output_row, input_col)`, sorted by row then col.
    pub fn jacobian_pattern(&self) -> &[(usize, usize)] {
        &self.jacobian_pattern
    }

    /// Jacobian values in the order of `jacobian_pattern`.
    pub fn eval_jacobian(&self, inputs: &[f64], values: &mut [f64], ws: &mut Workspace) {
        self.check_inputs(inputs);
        assert_eq!(values.len(), self.jacobian_pattern.len(), "wrong Jacobian length");
        let slots = self.slots(ws);
        self.jacobian.run(inputs, &[], slots);
        for (v, &s) in values.iter_mut().zip(&self.jacobian_slots) {
            *v = slots[s as usize];
        }
    }

    /// Outputs and Jacobian values from one pass of the Jacobian tape (which computes the
    /// outputs anyway): cheaper than [`Function::eval`] followed by
    /// [`Function::eval_jacobian`].
    pub fn eval_with_jacobian(
        &self,
        inputs: &[f64],
        outputs: &mut [f64],
        jacobian: &mut [f64],
        ws: &mut Workspace,
    ) {
        self.eval_jacobian(inputs, jacobian, ws);
        assert_eq!(outputs.len(), self.n_outputs(), "wrong number of outputs");
        for (o, &s) in outputs.iter_mut().zip(&self.output_slots) {
            *o = ws.slots[s as usize];
        }
    }

    /// Structurally nonzero entries `(row, col)` with `row >= col` (lower triangle) of the Hessian
    /// of `sum_i w_i * output_i` with respect to the inputs, sorted.
    ///
    /// An entry is present when some output has a structurally nonzero second derivative
    /// there, whatever the weights; the upper triangle is the mirror image and not stored.
    pub fn hessian_pattern(&self) -> &[(usize, usize)] {
        &self.hessian_pattern
    }

    /// Values in the order of `hessian_pattern` for weights `w` (`w.len() == n_outputs`).
    pub fn eval_hessian(
        &self,
        inputs: &[f64],
        weights: &[f64],
        values: &mut [f64],
        ws: &mut Workspace,
    ) {
        self.check_inputs(inputs);
        assert_eq!(weights.len(), self.n_outputs(), "wrong number of weights");
        assert_eq!(values.len(), self.hessian_pattern.len(), "wrong Hessian length");
        let slots = self.slots(ws);
        self.hessian.run(inputs, weights, slots);
        for (v, &s) in values.iter_mut().zip(&self.hessian_slots) {
            *v = slots[s as usize];
        }
    }

    /// Evaluates the outputs and, if one is NaN or infinite, traces it back to the operation
    /// that first produced a non-finite value from finite operands. `None` when every output
    /// is finite. Meant for error reports, not the hot path (it is one extra evaluation).
    pub fn first_non_finite(&self, inputs: &[f64], ws: &mut Workspace) -> Option<NonFinite> {
        self.check_inputs(inputs);
        let slots = self.slots(ws);
        self.values.run(inputs, &[], slots);
        let (output, &start) =
            self.output_slots.iter().enumerate().find(|(_, &s)| !slots[s as usize].is_finite())?;
        let value = slots[start as usize];
        let mut s = start;
        loop {
            let k = self.value_producer.get(s as usize).copied().unwrap_or(u32::MAX);
            let Some(ins) = self.values.instrs.get(k as usize) else { break };
            let bad = |x: u32| !slots[x as usize].is_finite();
            // A NaN result is followed into a NaN operand rather than an infinite one (inf - inf
            // aside, the NaN is the older failure).
            let nan = slots[s as usize].is_nan();
            let pick = |xs: [u32; 2]| {
                xs.into_iter()
                    .find(|&x| nan && slots[x as usize].is_nan())
                    .or_else(|| xs.into_iter().find(|&x| bad(x)))
            };
            let next = match *ins {
                Instr::Unary { a, .. }
                | Instr::Square { a, .. }
                | Instr::PowInt { a, .. }
                | Instr::PowConst { a, .. } => Some(a).filter(|&a| bad(a)),
                Instr::Binary { a, b, .. } => pick([a, b]),
                Instr::Select { cond, pos, neg, .. } => {
                    let c = slots[cond as usize];
                    // Follow only the branch that was taken (both at a tie).
                    let cands = if c.is_nan() {
                        [Some(cond), None]
                    } else if c > 0.0 {
                        [Some(pos), None]
                    } else if c < 0.0 {
                        [Some(neg), None]
                    } else {
                        [Some(pos), Some(neg)]
                    };
                    cands.into_iter().flatten().find(|&x| bad(x))
                }
            };
            match next {
                Some(n) => s = n,
                None => break,
            }
        }
        Some(NonFinite { output, value, origin: self.slot_nodes[s as usize] })
    }

    /// Sizes of the compiled tapes.
    pub fn stats(&self) -> TapeStats {
        TapeStats {
            slots: self.init_slots.len(),
            values: self.values.instrs.len(),
            jacobian: self.jacobian.instrs.len(),
            hessian: self.hessian.instrs.len(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use BinaryOp::*;
    use UnaryOp::*;

    fn assert_send_sync<T: Send + Sync + Clone>() {}

    #[test]
    fn function_is_send_sync_clone_and_workspace_is_send() {
        assert_send_sync::<Function>();
        fn send<T: Send>() {}
        send::<Workspace>();
    }

    #[test]
    fn small_function_values_jacobian_and_hessian() {
        // f0 = x0 * x1 + sin(x2), f1 = x1^2, f2 = 4 (constant output).
        let mut g = Graph::new();
        let x0 = g.input(0);
        let x1 = g.input(1);
        let x2 = g.input(2);
        let p = g.binary(Mul, x0, x1);
        let s = g.unary(Sin, x2);
        let f0 = g.binary(Add, p, s);
        let two = g.constant(2.0);
        let f1 = g.binary(Pow, x1, two);
        let f2 = g.constant(4.0);
        let f = Function::compile(&mut g, 3, &[f0, f1, f2]);
        assert_eq!(f.jacobian_pattern(), &[(0, 0), (0, 1), (0, 2), (1, 1)]);
        assert_eq!(f.hessian_pattern(), &[(1, 0), (1, 1), (2, 2)]);
        let mut ws = f.workspace();
        let x = [2.0, 3.0, 0.5];
        let mut out = [0.0; 3];
        f.eval(&x, &mut out, &mut ws);
        assert_eq!(out, [6.0 + 0.5f64.sin(), 9.0, 4.0]);
        let mut jac = [0.0; 4];
        f.eval_jacobian(&x, &mut jac, &mut ws);
        assert_eq!(jac, [3.0, 2.0, 0.5f64.cos(), 6.0]);
        let mut h = [0.0; 3];
        f.eval_hessian(&x, &[10.0, 100.0, 1000.0], &mut h, &mut ws);
        assert_eq!(h, [10.0, 200.0, -10.0 * 0.5f64.sin()]);
    }

    #[test]
    fn repeated_outputs_add_their_weights() {
        let mut g = Graph::new();
        let x = g.input(0);
        let c = g.unary(Cos, x);
        let f = Function::compile(&mut g, 1, &[c, c]);
        let mut ws = f.workspace();
        let mut h = [0.0];
        f.eval_hessian(&[0.3], &[2.0, 5.0], &mut h, &mut ws);
        assert_eq!(f.hessian_pattern(), &[(0, 0)]);
        assert!((h[0] + 7.0 * 0.3f64.cos()).abs() <= 1e-15, "{}", h[0]);
    }

    #[test]
    fn functions_of_different_widths_share_one_graph() {
        // f_a has one input, so its Hessian weight is graph input 1, which f_b uses as x1.
        let mut g = Graph::new();
        let x0 = g.input(0);
        let x1 = g.input(1);
        let x2 = g.input(2);
        let sq = g.binary(Mul, x0, x0);
        let p = g.binary(Mul, x0, x1);
        let fb_out = g.binary(Mul, p, x2);
        let fa = Function::compile(&mut g, 1, &[sq]);
        let fb = Function::compile(&mut g, 3, &[fb_out, sq]);
        let mut ws = fa.workspace();
        let mut h = [0.0];
        fa.eval_hessian(&[4.0], &[5.0], &mut h, &mut ws);
        assert_eq!(h, [10.0]);
        let mut ws = fb.workspace();
        assert_eq!(fb.hessian_pattern(), &[(0, 0), (1, 0), (2, 0), (2, 1)]);
        let mut h = [0.0; 4];
        let (a, b, c) = (2.0, 3.0, 7.0);
        fb.eval_hessian(&[a, b, c], &[1.5, -2.0], &mut h, &mut ws);
        assert_eq!(h, [-4.0, 1.5 * c, 1.5 * b, 1.5 * a]);
    }

    #[test]
    fn structural_zeros_are_never_emitted() {
        let mut g = Graph::new();
        let x0 = g.input(0);
        let x1 = g.input(1);
        // Linear in everything: empty Hessian; x1 enters only through a product with zero.
        let zero = g.constant(0.0);
        let dead = g.binary(Mul, x1, zero);
        let three = g.constant(3.0);
        let lin = g.binary(Mul, three, x0);
        let f0 = g.binary(Add, lin, dead);
        let f = Function::compile(&mut g, 2, &[f0]);
        assert_eq!(f.jacobian_pattern(), &[(0, 0)]);
        assert!(f.hessian_pattern().is_empty());
        let mut ws = f.workspace();
        let mut h: [f64; 0] = [];
        f.eval_hessian(&[1.0, 2.0], &[1.0], &mut h, &mut ws);
    }

    #[test]
    fn non_finite_values_are_traced_to_their_origin() {
        let mut g = Graph::new();
        let x = g.input(0);
        let y = g.input(1);
        let l = g.unary(Log, x);
        let e = g.unary(Exp, l);
        let f0 = g.binary(Add, e, y);
        let f1 = g.unary(Sin, y);
        let f = Function::compile(&mut g, 2, &[f1, f0]);
        let mut ws = f.workspace();
        let mut out = [0.0; 2];
        f.eval(&[-1.0, 0.5], &mut out, &mut ws);
        assert!(out[1].is_nan(), "log of a negative number is NaN, not a panic");
        let found = f.first_non_finite(&[-1.0, 0.5], &mut ws).expect("a NaN output");
        assert_eq!(found.output, 1);
        assert_eq!(found.origin, l);
        assert_eq!(f.first_non_finite(&[1.0, 0.5], &mut ws), None);
        // The NaN in the unused branch of max does not reach the output.
        let m = g.binary(Max, l, y);
        let big = g.constant(1e300);
        let sq = g.binary(Mul, big, big);
        let h = g.binary(Add, m, sq);
        let f = Function::compile(&mut g, 2, &[h]);
        let mut ws = f.workspace();
        let found = f.first_non_finite(&[-1.0, 0.5], &mut ws).expect("NaN from max");
        assert_eq!(found.origin, l, "max propagates NaN and the trace follows it");
        let found = f.first_non_finite(&[2.0, 0.5], &mut ws).expect("overflow");
        assert_eq!(g.as_constant(found.origin), Some(f64::INFINITY), "1e300^2 folded to inf");
    }

    #[test]
    fn compile_rejects_inputs_beyond_n_inputs() {
        let mut g = Graph::new();
        let x3 = g.input(3);
        assert_eq!(
            Function::try_compile(&mut g, 2, &[x3]).err(),
            Some(CompileError::InputOutOfRange { input: 3, n_inputs: 2 })
        );
        assert_eq!(
            Function::try_compile(&mut g, 2, &[NodeId(99)]).err(),
            Some(CompileError::UnknownNode(NodeId(99)))
        );
    }

    #[test]
    fn a_workspace_from_another_function_is_reinitialised() {
        let mut g = Graph::new();
        let x = g.input(0);
        let c = g.constant(5.0);
        let f_add = g.binary(Add, x, c);
        let k = g.constant(7.0);
        let f_mul = g.binary(Mul, x, k);
        let fa = Function::compile(&mut g, 1, &[f_add]);
        let fm = Function::compile(&mut g, 1, &[f_mul]);
        let mut ws = fa.workspace();
        let mut out = [0.0];
        fm.eval(&[2.0], &mut out, &mut ws);
        assert_eq!(out, [14.0]);
        fa.eval(&[2.0], &mut out, &mut ws);
        assert_eq!(out, [7.0]);
    }

    #[test]
    fn constant_exponents_use_fast_paths() {
        let mut g = Graph::new();
        let x = g.input(0);
        let exps = [2.0, 3.0, -2.0, 0.5, 1.5, -0.25, 7.0];
        let outs: Vec<NodeId> = exps
            .iter()
            .map(|&c| {
                let c = g.constant(c);
                g.binary(Pow, x, c)
            })
            .collect();
        let f = Function::compile(&mut g, 1, &outs);
        let mut ws = f.workspace();
        let mut out = vec![0.0; exps.len()];
        let x0 = 1.7f64;
        f.eval(&[x0], &mut out, &mut ws);
        for (c, v) in exps.iter().zip(&out) {
            // powi and powf differ by a few ulps at most (common practice bound: 1e-14 rel).
            let want = x0.powf(*c);
            assert!((v - want).abs() <= 1e-14 * want.abs(), "x^{c}: {v} vs {want}");
        }
        // Negative base, integer exponent: defined (no log involved).
        f.eval(&[-2.0], &mut out, &mut ws);
        assert_eq!(out[1], -8.0);
        assert!(out[3].is_nan());
    }
}
