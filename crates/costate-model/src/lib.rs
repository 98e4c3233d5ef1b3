//! costate-model: the numeric optimal-control problem and the expression machinery behind it.
//!
//! Owns the expression graph (hash-consed, constant-folded, shared subexpressions), symbolic
//! differentiation, and compilation of outputs, their Jacobians and Lagrangian Hessians to flat
//! evaluation tapes that run without heap allocation.
//!
//! Architecture invariant: this crate knows nothing of syntax, names, units or spans, and does
//! no IO. It depends on no other costate crate.

pub mod function;
pub mod graph;
pub mod ocp;

pub use function::{CompileError, Function, NonFinite, TapeStats, Workspace};
pub use graph::{select_value, BinaryOp, Graph, Node, NodeId, UnaryOp};
pub use ocp::*;
