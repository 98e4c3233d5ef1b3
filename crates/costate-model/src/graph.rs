//! CONTRACT (to be implemented): the expression graph.

/// Index of a node in a [`Graph`].
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct NodeId(pub u32);

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum UnaryOp {
    Neg, Sin, Cos, Tan, Asin, Acos, Atan, Sinh, Cosh, Tanh, Exp, Log, Sqrt, Abs,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum BinaryOp {
    Add, Sub, Mul, Div, Pow, Atan2, Min, Max,
}

/// Hash-consed expression DAG. Building the same operation on the same operands twice returns
/// the same node; operations on constants are folded.
#[derive(Clone, Debug, Default)]
pub struct Graph {}

impl Graph {
    pub fn new() -> Self { todo!() }
    pub fn constant(&mut self, value: f64) -> NodeId { todo!() }
    /// The input with this index (0-based) in the input vector of the functions compiled from it.
    pub fn input(&mut self, index: usize) -> NodeId { todo!() }
    pub fn unary(&mut self, op: UnaryOp, a: NodeId) -> NodeId { todo!() }
    pub fn binary(&mut self, op: BinaryOp, a: NodeId, b: NodeId) -> NodeId { todo!() }
    /// d(node)/d(input `index`), as a node of this graph.
    pub fn derivative(&mut self, node: NodeId, index: usize) -> NodeId { todo!() }
    /// The value if the node is a constant.
    pub fn as_constant(&self, node: NodeId) -> Option<f64> { todo!() }
    pub fn len(&self) -> usize { todo!() }
}
