//! The expression graph: a hash-consed DAG of scalar operations with constant folding,
//! algebraic identities and memoised symbolic differentiation.
//!
//! This module owns node construction ([`Graph::constant`], [`Graph::input`], [`Graph::unary`],
//! [`Graph::binary`], [`Graph::select`]), the per-node dependency sets that make derivative
//! sparsity exact, the derivative rules (forward: [`Graph::derivative`]; reverse:
//! [`Graph::gradient`]), a slow reference evaluator ([`Graph::evaluate`]) and a debugging
//! printer ([`Graph::display`]). It does not compile or evaluate tapes (that is
//! [`crate::function`]) and knows nothing of names, units or source spans.
//!
//! Invariants the rest of the crate relies on:
//! - operands are always created before their users, so increasing [`NodeId`] order is a
//!   topological order (compilation and differentiation sort by id instead of searching);
//! - a node's dependency set lists exactly the inputs whose derivative of that node is not
//!   structurally zero: a Jacobian built from it never holds a structural zero;
//! - folding assumes finite operands, as any computer-algebra simplifier does: `x * 0` folds to
//!   `0` and `x - x` to `0` even though at run time `x` could be infinite or NaN; combining
//!   constant factors (`2 * (3 * x)` to `6 * x`) may change the last bit of a result.

use std::collections::{HashMap, HashSet};
use std::fmt::Write as _;
use std::sync::Arc;

/// Index of a node in a [`Graph`].
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct NodeId(pub u32);

impl NodeId {
    /// The node's position in its graph.
    pub fn index(self) -> usize {
        self.0 as usize
    }
}

/// Built-in functions of one argument.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum UnaryOp {
    Neg,
    Sin,
    Cos,
    Tan,
    Asin,
    Acos,
    Atan,
    Sinh,
    Cosh,
    Tanh,
    Exp,
    Log,
    Sqrt,
    Abs,
}

impl UnaryOp {
    /// Every unary operation, for tests and tables.
    pub const ALL: [UnaryOp; 14] = [
        UnaryOp::Neg,
        UnaryOp::Sin,
        UnaryOp::Cos,
        UnaryOp::Tan,
        UnaryOp::Asin,
        UnaryOp::Acos,
        UnaryOp::Atan,
        UnaryOp::Sinh,
        UnaryOp::Cosh,
        UnaryOp::Tanh,
        UnaryOp::Exp,
        UnaryOp::Log,
        UnaryOp::Sqrt,
        UnaryOp::Abs,
    ];

    /// The function name used by [`Graph::display`] (`"-"` for negation).
    pub fn name(self) -> &'static str {
        match self {
            UnaryOp::Neg => "-",
            UnaryOp::Sin => "sin",
            UnaryOp::Cos => "cos",
            UnaryOp::Tan => "tan",
            UnaryOp::Asin => "asin",
            UnaryOp::Acos => "acos",
            UnaryOp::Atan => "atan",
            UnaryOp::Sinh => "sinh",
            UnaryOp::Cosh => "cosh",
            UnaryOp::Tanh => "tanh",
            UnaryOp::Exp => "exp",
            UnaryOp::Log => "log",
            UnaryOp::Sqrt => "sqrt",
            UnaryOp::Abs => "abs",
        }
    }

    /// The value of the operation; outside the domain this is NaN (or +-inf), never a panic.
    #[inline]
    pub fn apply(self, x: f64) -> f64 {
        match self {
            UnaryOp::Neg => -x,
            UnaryOp::Sin => x.sin(),
            UnaryOp::Cos => x.cos(),
            UnaryOp::Tan => x.tan(),
            UnaryOp::Asin => x.asin(),
            UnaryOp::Acos => x.acos(),
            UnaryOp::Atan => x.atan(),
            UnaryOp::Sinh => x.sinh(),
            UnaryOp::Cosh => x.cosh(),
            UnaryOp::Tanh => x.tanh(),
            UnaryOp::Exp => x.exp(),
            UnaryOp::Log => x.ln(),
            UnaryOp::Sqrt => x.sqrt(),
            UnaryOp::Abs => x.abs(),
        }
    }
}

/// Built-in operations of two arguments.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum BinaryOp {
    Add,
    Sub,
    Mul,
    Div,
    Pow,
    Atan2,
    Min,
    Max,
}

impl BinaryOp {
    /// Every binary operation, for tests and tables.
    pub const ALL: [BinaryOp; 8] = [
        BinaryOp::Add,
        BinaryOp::Sub,
        BinaryOp::Mul,
        BinaryOp::Div,
        BinaryOp::Pow,
        BinaryOp::Atan2,
        BinaryOp::Min,
        BinaryOp::Max,
    ];

    /// The operator or function name used by [`Graph::display`].
    pub fn name(self) -> &'static str {
        match self {
            BinaryOp::Add => "+",
            BinaryOp::Sub => "-",
            BinaryOp::Mul => "*",
            BinaryOp::Div => "/",
            BinaryOp::Pow => "^",
            BinaryOp::Atan2 => "atan2",
            BinaryOp::Min => "min",
            BinaryOp::Max => "max",
        }
    }

    /// Whether swapping the operands never changes the value (used to canonicalise operands so
    /// that `a + b` and `b + a` are one node).
    pub fn is_commutative(self) -> bool {
        matches!(self, BinaryOp::Add | BinaryOp::Mul | BinaryOp::Min | BinaryOp::Max)
    }

    /// The value of the operation. `Atan2(y, x)` is `y.atan2(x)`. `Min` and `Max` propagate NaN
    /// (unlike `f64::min`) so that a failed evaluation is never hidden behind a selection.
    #[inline]
    pub fn apply(self, a: f64, b: f64) -> f64 {
        match self {
            BinaryOp::Add => a + b,
            BinaryOp::Sub => a - b,
            BinaryOp::Mul => a * b,
            BinaryOp::Div => a / b,
            BinaryOp::Pow => a.powf(b),
            BinaryOp::Atan2 => a.atan2(b),
            BinaryOp::Min => {
                if a.is_nan() || b.is_nan() {
                    f64::NAN
                } else {
                    a.min(b)
                }
            }
            BinaryOp::Max => {
                if a.is_nan() || b.is_nan() {
                    f64::NAN
                } else {
                    a.max(b)
                }
            }
        }
    }
}

/// The value of a [`Node::Select`]: `pos` where `cond > 0`, `neg` where `cond < 0`, their mean
/// where `cond == 0` (a tie), NaN where `cond` is NaN.
#[inline]
pub fn select_value(cond: f64, pos: f64, neg: f64) -> f64 {
    if cond > 0.0 {
        pos
    } else if cond < 0.0 {
        neg
    } else if cond == 0.0 {
        0.5 * (pos + neg)
    } else {
        f64::NAN
    }
}

/// One node of a [`Graph`], as returned by [`Graph::node`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Node {
    Constant(f64),
    /// The input with this index.
    Input(u32),
    Unary(UnaryOp, NodeId),
    Binary(BinaryOp, NodeId, NodeId),
    /// A branch on the sign of `cond`, see [`select_value`]. The derivative rules of `abs`,
    /// `min` and `max` produce it; `cond` is treated as locally constant when differentiating.
    Select {
        cond: NodeId,
        pos: NodeId,
        neg: NodeId,
    },
}

impl Node {
    /// The operands, in order (at most three; unused places are `None`).
    pub fn operands(&self) -> [Option<NodeId>; 3] {
        match *self {
            Node::Constant(_) | Node::Input(_) => [None, None, None],
            Node::Unary(_, a) => [Some(a), None, None],
            Node::Binary(_, a, b) => [Some(a), Some(b), None],
            Node::Select { cond, pos, neg } => [Some(cond), Some(pos), Some(neg)],
        }
    }
}

/// Hash key of a node. Constants are keyed by their bit pattern after normalising `-0.0` to
/// `0.0` and every NaN to one NaN, so equal-looking constants are one node.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
enum Key {
    Constant(u64),
    Input(u32),
    Unary(UnaryOp, NodeId),
    Binary(BinaryOp, NodeId, NodeId),
    Select(NodeId, NodeId, NodeId),
}

/// Hash-consed expression DAG. Building the same operation on the same operands twice returns
/// the same node; operations on constants are folded.
///
/// Methods taking a [`NodeId`] expect one created by this graph; a foreign id out of range
/// panics like an out-of-bounds index.
#[derive(Clone, Debug)]
pub struct Graph {
    nodes: Vec<Node>,
    /// Sorted input indices with a structurally nonzero derivative, shared between nodes with
    /// equal sets (most unary nodes reuse their operand's set).
    deps: Vec<Arc<[u32]>>,
    interned: HashMap<Key, NodeId>,
    derivatives: HashMap<(NodeId, u32), NodeId>,
    no_deps: Arc<[u32]>,
}

impl Default for Graph {
    fn default() -> Self {
        Graph::new()
    }
}

impl Graph {
    pub fn new() -> Self {
        Graph {
            nodes: Vec::new(),
            deps: Vec::new(),
            interned: HashMap::new(),
            derivatives: HashMap::new(),
            no_deps: Arc::from(Vec::new()),
        }
    }

    pub fn constant(&mut self, value: f64) -> NodeId {
        let value = if value == 0.0 {
            0.0
        } else if value.is_nan() {
            f64::NAN
        } else {
            value
        };
        let deps = self.no_deps.clone();
        self.intern(Key::Constant(value.to_bits()), Node::Constant(value), deps)
    }

    /// The input with this index (0-based) in the input vector of the functions compiled from it.
    ///
    /// Panics if `index` does not fit in a `u32` (no real problem has four billion inputs).
    pub fn input(&mut self, index: usize) -> NodeId {
        let i = u32::try_from(index).expect("input index exceeds u32::MAX");
        let key = Key::Input(i);
        if let Some(&id) = self.interned.get(&key) {
            return id;
        }
        self.intern(key, Node::Input(i), Arc::from(vec![i]))
    }

    pub fn unary(&mut self, op: UnaryOp, a: NodeId) -> NodeId {
        if let Some(c) = self.as_constant(a) {
            return self.constant(op.apply(c));
        }
        match (op, self.node(a)) {
            (UnaryOp::Neg, Node::Unary(UnaryOp::Neg, x)) => return x,
            // -(x - y) is exactly y - x in IEEE arithmetic (up to the sign of a zero).
            (UnaryOp::Neg, Node::Binary(BinaryOp::Sub, x, y)) => {
                return self.binary(BinaryOp::Sub, y, x)
            }
            (UnaryOp::Neg, Node::Binary(BinaryOp::Mul, x, y)) => {
                // -(c * y) -> (-c) * y: negating a constant is exact.
                if let Some(c) = self.as_constant(x) {
                    let k = self.constant(-c);
                    return self.binary(BinaryOp::Mul, k, y);
                }
                if let Some(c) = self.as_constant(y) {
                    let k = self.constant(-c);
                    return self.binary(BinaryOp::Mul, k, x);
                }
            }
            (UnaryOp::Abs, Node::Unary(UnaryOp::Neg, x)) => return self.unary(UnaryOp::Abs, x),
            (UnaryOp::Abs, Node::Unary(UnaryOp::Abs, _)) => return a,
            _ => {}
        }
        let deps = self.deps[a.index()].clone();
        self.intern(Key::Unary(op, a), Node::Unary(op, a), deps)
    }

    pub fn binary(&mut self, op: BinaryOp, a: NodeId, b: NodeId) -> NodeId {
        let ca = self.as_constant(a);
        let cb = self.as_constant(b);
        if let (Some(x), Some(y)) = (ca, cb) {
            return self.constant(op.apply(x, y));
        }
        if let Some(id) = self.simplify_binary(op, a, b, ca, cb) {
            return id;
        }
        // Canonical operand order for commutative operations: a constant first (so products
        // read `3 * x`), otherwise the older node first.
        let rank = |id: NodeId, c: Option<f64>| (c.is_none(), id);
        let (a, b) = if op.is_commutative() && rank(b, cb) < rank(a, ca) { (b, a) } else { (a, b) };
        let key = Key::Binary(op, a, b);
        if let Some(&id) = self.interned.get(&key) {
            return id;
        }
        let deps = self.union_deps(a, b);
        self.intern(key, Node::Binary(op, a, b), deps)
    }

    /// Algebraic identities; `None` when none applies. At most one operand is constant here.
    fn simplify_binary(
        &mut self,
        op: BinaryOp,
        a: NodeId,
        b: NodeId,
        ca: Option<f64>,
        cb: Option<f64>,
    ) -> Option<NodeId> {
        let is = |c: Option<f64>, v: f64| c == Some(v);
        Some(match op {
            BinaryOp::Add => {
                if is(ca, 0.0) {
                    b
                } else if is(cb, 0.0) {
                    a
                } else if let Node::Unary(UnaryOp::Neg, y) = self.node(b) {
                    self.binary(BinaryOp::Sub, a, y)
                } else if let Node::Unary(UnaryOp::Neg, x) = self.node(a) {
                    self.binary(BinaryOp::Sub, b, x)
                } else {
                    return None;
                }
            }
            BinaryOp::Sub => {
                if is(cb, 0.0) {
                    a
                } else if is(ca, 0.0) {
                    self.unary(UnaryOp::Neg, b)
                } else if a == b {
                    self.constant(0.0)
                } else if let Node::Unary(UnaryOp::Neg, y) = self.node(b) {
                    self.binary(BinaryOp::Add, a, y)
                } else {
                    return None;
                }
            }
            BinaryOp::Mul => {
                if is(ca, 0.0) || is(cb, 0.0) {
                    self.constant(0.0)
                } else if is(ca, 1.0) {
                    b
                } else if is(cb, 1.0) {
                    a
                } else if is(ca, -1.0) {
                    self.unary(UnaryOp::Neg, b)
                } else if is(cb, -1.0) {
                    self.unary(UnaryOp::Neg, a)
                } else if let (Node::Unary(UnaryOp::Neg, x), Node::Unary(UnaryOp::Neg, y)) =
                    (self.node(a), self.node(b))
                {
                    self.binary(BinaryOp::Mul, x, y)
                } else if let Some((c, other)) = ca.map(|c| (c, b)).or(cb.map(|c| (c, a))) {
                    // Combine constant factors: c * (k * y) -> (c k) * y and c * (-y) -> (-c) * y,
                    // which keeps derivatives of powers and polynomials short.
                    match self.node(other) {
                        Node::Unary(UnaryOp::Neg, y) => {
                            let k = self.constant(-c);
                            self.binary(BinaryOp::Mul, k, y)
                        }
                        Node::Binary(BinaryOp::Mul, p, q) => {
                            let (k, y) = match (self.as_constant(p), self.as_constant(q)) {
                                (Some(k), _) => (k, q),
                                (_, Some(k)) => (k, p),
                                _ => return None,
                            };
                            let ck = self.constant(c * k);
                            self.binary(BinaryOp::Mul, ck, y)
                        }
                        _ => return None,
                    }
                } else {
                    return None;
                }
            }
            BinaryOp::Div => {
                if is(cb, 1.0) {
                    a
                } else if is(cb, -1.0) {
                    self.unary(UnaryOp::Neg, a)
                } else if is(ca, 0.0) {
                    self.constant(0.0)
                } else {
                    return None;
                }
            }
            BinaryOp::Pow => {
                if is(cb, 1.0) {
                    a
                } else if is(cb, 0.0) || is(ca, 1.0) {
                    // IEEE pow gives 1 for x^0 and 1^y for every x and y, NaN included.
                    self.constant(1.0)
                } else {
                    return None;
                }
            }
            BinaryOp::Atan2 => return None,
            BinaryOp::Min | BinaryOp::Max => {
                if a == b {
                    a
                } else {
                    return None;
                }
            }
        })
    }

    /// A branch on the sign of `cond`: see [`Node::Select`] and [`select_value`]. Folds when
    /// `cond` is constant or both branches are the same node.
    pub fn select(&mut self, cond: NodeId, pos: NodeId, neg: NodeId) -> NodeId {
        if pos == neg {
            return pos;
        }
        if let Some(c) = self.as_constant(cond) {
            return if c > 0.0 {
                pos
            } else if c < 0.0 {
                neg
            } else if c == 0.0 {
                let half = self.constant(0.5);
                let sum = self.binary(BinaryOp::Add, pos, neg);
                self.binary(BinaryOp::Mul, half, sum)
            } else {
                self.constant(f64::NAN)
            };
        }
        let key = Key::Select(cond, pos, neg);
        if let Some(&id) = self.interned.get(&key) {
            return id;
        }
        // The condition is piecewise constant, so it adds no derivative dependency.
        let deps = self.union_deps(pos, neg);
        self.intern(key, Node::Select { cond, pos, neg }, deps)
    }

    fn intern(&mut self, key: Key, node: Node, deps: Arc<[u32]>) -> NodeId {
        if let Some(&id) = self.interned.get(&key) {
            return id;
        }
        let id = NodeId(u32::try_from(self.nodes.len()).expect("graph exceeds u32::MAX nodes"));
        self.nodes.push(node);
        self.deps.push(deps);
        self.interned.insert(key, id);
        id
    }

    fn union_deps(&self, a: NodeId, b: NodeId) -> Arc<[u32]> {
        let (da, db) = (&self.deps[a.index()], &self.deps[b.index()]);
        if db.is_empty() || Arc::ptr_eq(da, db) || da[..] == db[..] {
            return da.clone();
        }
        if da.is_empty() {
            return db.clone();
        }
        let mut out = Vec::with_capacity(da.len() + db.len());
        let (mut i, mut j) = (0, 0);
        while i < da.len() && j < db.len() {
            match da[i].cmp(&db[j]) {
                std::cmp::Ordering::Less => {
                    out.push(da[i]);
                    i += 1;
                }
                std::cmp::Ordering::Greater => {
                    out.push(db[j]);
                    j += 1;
                }
                std::cmp::Ordering::Equal => {
                    out.push(da[i]);
                    i += 1;
                    j += 1;
                }
            }
        }
        out.extend_from_slice(&da[i..]);
        out.extend_from_slice(&db[j..]);
        if out.len() == da.len() {
            return da.clone();
        }
        if out.len() == db.len() {
            return db.clone();
        }
        Arc::from(out)
    }

    /// The node behind an id.
    pub fn node(&self, id: NodeId) -> Node {
        self.nodes[id.index()]
    }

    /// Sorted indices of the inputs with a structurally nonzero derivative of `id`.
    pub fn dependencies(&self, id: NodeId) -> &[u32] {
        &self.deps[id.index()]
    }

    /// Whether `d(id)/d(input index)` is structurally nonzero.
    pub fn depends_on(&self, id: NodeId, index: usize) -> bool {
        u32::try_from(index).is_ok_and(|i| self.deps[id.index()].binary_search(&i).is_ok())
    }

    /// d(node)/d(input `index`), as a node of this graph.
    ///
    /// Memoised per `(node, index)`: asking again, or for a node sharing subexpressions with one
    /// already differentiated, only builds what is new. Runs without recursion, so arbitrarily
    /// deep expressions are fine. Derivatives are ordinary nodes, so differentiating one again
    /// gives second derivatives.
    ///
    /// Non-smooth points use one documented subgradient: `abs'(0) = 0`; at a tie `min(a, b)`
    /// and `max(a, b)` take the mean of the two operand derivatives (see [`select_value`]).
    pub fn derivative(&mut self, node: NodeId, index: usize) -> NodeId {
        let Ok(i) = u32::try_from(index) else {
            return self.constant(0.0);
        };
        if !self.depends_on(node, index) {
            return self.constant(0.0);
        }
        if let Some(&d) = self.derivatives.get(&(node, i)) {
            return d;
        }
        let mut pending = Vec::new();
        let mut seen = HashSet::new();
        let mut stack = vec![node];
        while let Some(n) = stack.pop() {
            if !self.depends_on(n, index) || self.derivatives.contains_key(&(n, i)) {
                continue;
            }
            if !seen.insert(n) {
                continue;
            }
            pending.push(n);
            match self.node(n) {
                Node::Unary(_, a) => stack.push(a),
                Node::Binary(_, a, b) => stack.extend([a, b]),
                Node::Select { pos, neg, .. } => stack.extend([pos, neg]),
                Node::Constant(_) | Node::Input(_) => {}
            }
        }
        // Increasing id is a topological order: operands get their derivative first.
        pending.sort_unstable();
        for n in pending {
            let d = self.derivative_rule(n, i);
            self.derivatives.insert((n, i), d);
        }
        self.derivatives[&(node, i)]
    }

    /// The derivative of an operand that [`Graph::derivative`] has already memoised (or zero).
    fn known(&mut self, n: NodeId, i: u32) -> NodeId {
        match self.derivatives.get(&(n, i)) {
            Some(&d) => d,
            None => {
                debug_assert!(!self.depends_on(n, i as usize), "operand derivative missing");
                self.constant(0.0)
            }
        }
    }

    fn derivative_rule(&mut self, n: NodeId, i: u32) -> NodeId {
        use BinaryOp::*;
        use UnaryOp::*;
        match self.node(n) {
            Node::Constant(_) => self.constant(0.0),
            Node::Input(j) => self.constant(if j == i { 1.0 } else { 0.0 }),
            Node::Select { cond, pos, neg } => {
                let (dp, dn) = (self.known(pos, i), self.known(neg, i));
                self.select(cond, dp, dn)
            }
            Node::Unary(op, a) => {
                let da = self.known(a, i);
                let one = self.constant(1.0);
                // Each arm gives the factor f'(a); Neg and Abs build the result directly.
                let factor = match op {
                    Neg => return self.unary(Neg, da),
                    Abs => {
                        let nda = self.unary(Neg, da);
                        return self.select(a, da, nda);
                    }
                    Sin => self.unary(Cos, a),
                    Cos => {
                        let s = self.unary(Sin, a);
                        self.unary(Neg, s)
                    }
                    // 1 + tan^2 reuses the node itself instead of building 1/cos^2.
                    Tan => {
                        let t2 = self.binary(Mul, n, n);
                        self.binary(Add, one, t2)
                    }
                    Asin | Acos => {
                        let a2 = self.binary(Mul, a, a);
                        let r = self.binary(Sub, one, a2);
                        let s = self.unary(Sqrt, r);
                        let f = self.binary(Div, da, s);
                        return if op == Asin { f } else { self.unary(Neg, f) };
                    }
                    Atan => {
                        let a2 = self.binary(Mul, a, a);
                        let d = self.binary(Add, one, a2);
                        return self.binary(Div, da, d);
                    }
                    Sinh => self.unary(Cosh, a),
                    Cosh => self.unary(Sinh, a),
                    Tanh => {
                        let t2 = self.binary(Mul, n, n);
                        self.binary(Sub, one, t2)
                    }
                    Exp => n,
                    Log => return self.binary(Div, da, a),
                    Sqrt => {
                        let two = self.constant(2.0);
                        let d = self.binary(Mul, two, n);
                        return self.binary(Div, da, d);
                    }
                };
                self.binary(Mul, factor, da)
            }
            Node::Binary(op, a, b) => {
                let (da, db) = (self.known(a, i), self.known(b, i));
                match op {
                    Add => self.binary(Add, da, db),
                    Sub => self.binary(Sub, da, db),
                    Mul => {
                        let l = self.binary(Mul, da, b);
                        let r = self.binary(Mul, a, db);
                        self.binary(Add, l, r)
                    }
                    // (da - (a/b) db) / b reuses the quotient node.
                    Div => {
                        let q = self.binary(Mul, n, db);
                        let num = self.binary(Sub, da, q);
                        self.binary(Div, num, b)
                    }
                    Pow => self.pow_derivative(n, a, b, da, db, i),
                    Atan2 => {
                        // d atan2(y, x) = (x dy - y dx) / (x^2 + y^2)
                        let l = self.binary(Mul, b, da);
                        let r = self.binary(Mul, a, db);
                        let num = self.binary(Sub, l, r);
                        let a2 = self.binary(Mul, a, a);
                        let b2 = self.binary(Mul, b, b);
                        let den = self.binary(Add, a2, b2);
                        self.binary(Div, num, den)
                    }
                    Min => {
                        let c = self.binary(Sub, b, a);
                        self.select(c, da, db)
                    }
                    Max => {
                        let c = self.binary(Sub, a, b);
                        self.select(c, da, db)
                    }
                }
            }
        }
    }

    fn pow_derivative(
        &mut self,
        n: NodeId,
        a: NodeId,
        b: NodeId,
        da: NodeId,
        db: NodeId,
        i: u32,
    ) -> NodeId {
        use BinaryOp::*;
        if !self.depends_on(b, i as usize) {
            // Exponent locally constant: b * a^(b - 1) * da. With a constant exponent `b - 1`
            // folds, so x^3 differentiates to 3 * x^2 with no log anywhere (valid for a < 0).
            let one = self.constant(1.0);
            let bm1 = self.binary(Sub, b, one);
            let p = self.binary(Pow, a, bm1);
            let f = self.binary(Mul, b, p);
            return self.binary(Mul, f, da);
        }
        // a^b = exp(b log a): d = a^b (db log a + b da / a).
        let la = self.unary(UnaryOp::Log, a);
        let t1 = self.binary(Mul, db, la);
        let bda = self.binary(Mul, b, da);
        let t2 = self.binary(Div, bda, a);
        let s = self.binary(Add, t1, t2);
        self.binary(Mul, n, s)
    }

    /// Reverse-mode symbolic gradient of `sum_i seeds[i] * outputs[i]`: the nonzero entries
    /// `(input index, node)`, sorted by input index.
    ///
    /// One sweep over the nodes the outputs use, in decreasing id (every user of a node has a
    /// larger id, so its adjoint is complete when reached), so the result costs a constant
    /// number of nodes per edge of the expression, however many inputs there are. Seeds are
    /// ordinary nodes: [`crate::Function`] passes fresh inputs standing for the weights, so
    /// differentiating the result once more gives the weighted Hessian (forward over reverse).
    /// Non-smooth points follow the same conventions as [`Graph::derivative`].
    pub fn gradient(&mut self, outputs: &[NodeId], seeds: &[NodeId]) -> Vec<(usize, NodeId)> {
        use BinaryOp::*;
        use UnaryOp::*;
        let mut adjoint: HashMap<NodeId, NodeId> = HashMap::new();
        for (&o, &s) in outputs.iter().zip(seeds) {
            self.accumulate(&mut adjoint, o, s);
        }
        // Every node the outputs reach that has a derivative at all, latest first.
        let mut order = Vec::new();
        let mut seen = HashSet::new();
        let mut stack: Vec<NodeId> = outputs.to_vec();
        while let Some(n) = stack.pop() {
            if self.deps[n.index()].is_empty() || !seen.insert(n) {
                continue;
            }
            order.push(n);
            match self.node(n) {
                Node::Unary(_, a) => stack.push(a),
                Node::Binary(_, a, b) => stack.extend([a, b]),
                Node::Select { pos, neg, .. } => stack.extend([pos, neg]),
                Node::Constant(_) | Node::Input(_) => {}
            }
        }
        order.sort_unstable_by(|a, b| b.cmp(a));
        let mut gradient = Vec::new();
        for n in order {
            let Some(&adj) = adjoint.get(&n) else { continue };
            let one = self.constant(1.0);
            let zero = self.constant(0.0);
            match self.node(n) {
                Node::Constant(_) => {}
                Node::Input(j) => gradient.push((j as usize, adj)),
                Node::Select { cond, pos, neg } => {
                    let to_pos = self.select(cond, adj, zero);
                    let to_neg = self.select(cond, zero, adj);
                    self.accumulate(&mut adjoint, pos, to_pos);
                    self.accumulate(&mut adjoint, neg, to_neg);
                }
                Node::Unary(op, a) => {
                    let v = match op {
                        Neg => self.unary(Neg, adj),
                        Abs => {
                            let nadj = self.unary(Neg, adj);
                            self.select(a, adj, nadj)
                        }
                        Sin => {
                            let c = self.unary(Cos, a);
                            self.binary(Mul, adj, c)
                        }
                        Cos => {
                            let s = self.unary(Sin, a);
                            let p = self.binary(Mul, adj, s);
                            self.unary(Neg, p)
                        }
                        Tan => {
                            let t2 = self.binary(Mul, n, n);
                            let f = self.binary(Add, one, t2);
                            self.binary(Mul, adj, f)
                        }
                        Asin | Acos => {
                            let a2 = self.binary(Mul, a, a);
                            let r = self.binary(Sub, one, a2);
                            let s = self.unary(Sqrt, r);
                            let q = self.binary(Div, adj, s);
                            if op == Asin {
                                q
                            } else {
                                self.unary(Neg, q)
                            }
                        }
                        Atan => {
                            let a2 = self.binary(Mul, a, a);
                            let d = self.binary(Add, one, a2);
                            self.binary(Div, adj, d)
                        }
                        Sinh => {
                            let c = self.unary(Cosh, a);
                            self.binary(Mul, adj, c)
                        }
                        Cosh => {
                            let s = self.unary(Sinh, a);
                            self.binary(Mul, adj, s)
                        }
                        Tanh => {
                            let t2 = self.binary(Mul, n, n);
                            let f = self.binary(Sub, one, t2);
                            self.binary(Mul, adj, f)
                        }
                        Exp => self.binary(Mul, adj, n),
                        Log => self.binary(Div, adj, a),
                        Sqrt => {
                            let two = self.constant(2.0);
                            let d = self.binary(Mul, two, n);
                            self.binary(Div, adj, d)
                        }
                    };
                    self.accumulate(&mut adjoint, a, v);
                }
                Node::Binary(op, a, b) => {
                    // Operands without inputs get no adjoint; skip building their partials.
                    let (need_a, need_b) =
                        (!self.deps[a.index()].is_empty(), !self.deps[b.index()].is_empty());
                    let (va, vb) = match op {
                        Add => (adj, adj),
                        Sub => (adj, if need_b { self.unary(Neg, adj) } else { zero }),
                        Mul => {
                            let va = if need_a { self.binary(Mul, adj, b) } else { zero };
                            let vb = if need_b { self.binary(Mul, adj, a) } else { zero };
                            (va, vb)
                        }
                        Div => {
                            let va = self.binary(Div, adj, b);
                            let vb = if need_b {
                                // d(a/b)/db = -(a/b)/b, reusing the quotient node.
                                let q = self.binary(Mul, va, n);
                                self.unary(Neg, q)
                            } else {
                                zero
                            };
                            (va, vb)
                        }
                        Pow => {
                            // d/da = b a^(b-1) (valid for negative a with integer b; with a
                            // constant exponent b - 1 folds); d/db = a^b log a.
                            let va = if need_a {
                                let bm1 = self.binary(Sub, b, one);
                                let p = self.binary(Pow, a, bm1);
                                let f = self.binary(Mul, b, p);
                                self.binary(Mul, adj, f)
                            } else {
                                zero
                            };
                            let vb = if need_b {
                                let la = self.unary(Log, a);
                                let f = self.binary(Mul, n, la);
                                self.binary(Mul, adj, f)
                            } else {
                                zero
                            };
                            (va, vb)
                        }
                        Atan2 => {
                            // atan2(y, x): d/dy = x / r2, d/dx = -y / r2.
                            let a2 = self.binary(Mul, a, a);
                            let b2 = self.binary(Mul, b, b);
                            let r2 = self.binary(Add, a2, b2);
                            let s = self.binary(Div, adj, r2);
                            let va = if need_a { self.binary(Mul, s, b) } else { zero };
                            let vb = if need_b {
                                let p = self.binary(Mul, s, a);
                                self.unary(Neg, p)
                            } else {
                                zero
                            };
                            (va, vb)
                        }
                        Min | Max => {
                            // The selected operand takes the adjoint; at a tie each takes half,
                            // matching the forward rule's mean.
                            let c = if op == Min {
                                self.binary(Sub, b, a)
                            } else {
                                self.binary(Sub, a, b)
                            };
                            (self.select(c, adj, zero), self.select(c, zero, adj))
                        }
                    };
                    self.accumulate(&mut adjoint, a, va);
                    self.accumulate(&mut adjoint, b, vb);
                }
            }
        }
        gradient.sort_unstable_by_key(|e| e.0);
        gradient
    }

    /// Adds `v` to the adjoint of `n` (nodes without inputs and zero contributions are skipped).
    fn accumulate(&mut self, adjoint: &mut HashMap<NodeId, NodeId>, n: NodeId, v: NodeId) {
        if self.deps[n.index()].is_empty() || self.as_constant(v) == Some(0.0) {
            return;
        }
        let sum = match adjoint.get(&n) {
            Some(&old) => self.binary(BinaryOp::Add, old, v),
            None => v,
        };
        adjoint.insert(n, sum);
    }

    /// The value if the node is a constant.
    pub fn as_constant(&self, node: NodeId) -> Option<f64> {
        match self.nodes[node.index()] {
            Node::Constant(c) => Some(c),
            _ => None,
        }
    }

    pub fn len(&self) -> usize {
        self.nodes.len()
    }

    pub fn is_empty(&self) -> bool {
        self.nodes.is_empty()
    }

    /// Evaluates `nodes` at `inputs` by walking the graph: a slow reference evaluator for tests
    /// and one-off constant checks (compile a [`crate::Function`] for anything repeated). An
    /// input index beyond `inputs.len()` reads as NaN.
    pub fn evaluate(&self, nodes: &[NodeId], inputs: &[f64]) -> Vec<f64> {
        let mut needed = vec![false; self.nodes.len()];
        let mut stack: Vec<NodeId> = nodes.to_vec();
        while let Some(n) = stack.pop() {
            if std::mem::replace(&mut needed[n.index()], true) {
                continue;
            }
            stack.extend(self.node(n).operands().into_iter().flatten());
        }
        let mut values = vec![f64::NAN; self.nodes.len()];
        for (k, node) in self.nodes.iter().enumerate() {
            if !needed[k] {
                continue;
            }
            let v = |id: NodeId| values[id.index()];
            values[k] = match *node {
                Node::Constant(c) => c,
                Node::Input(j) => inputs.get(j as usize).copied().unwrap_or(f64::NAN),
                Node::Unary(op, a) => op.apply(v(a)),
                Node::Binary(op, a, b) => op.apply(v(a), v(b)),
                Node::Select { cond, pos, neg } => select_value(v(cond), v(pos), v(neg)),
            };
        }
        nodes.iter().map(|n| values[n.index()]).collect()
    }

    /// The node as an infix expression, inputs written `x0, x1, ..`, for debugging and tests.
    /// Shared subexpressions are written out at every use, so keep it to small expressions.
    pub fn display(&self, node: NodeId) -> String {
        let mut out = String::new();
        self.write_node(node, &mut out);
        out
    }

    /// Binding strength of a node's outermost operator (higher binds tighter).
    fn precedence(&self, id: NodeId) -> u8 {
        match self.node(id) {
            Node::Constant(c) if c < 0.0 => PREC_NEG,
            Node::Constant(_) | Node::Input(_) | Node::Select { .. } => PREC_ATOM,
            Node::Unary(UnaryOp::Neg, _) => PREC_NEG,
            Node::Unary(..) => PREC_ATOM,
            Node::Binary(op, ..) => match op {
                BinaryOp::Add | BinaryOp::Sub => PREC_SUM,
                BinaryOp::Mul | BinaryOp::Div => PREC_PRODUCT,
                BinaryOp::Pow => PREC_POW,
                BinaryOp::Atan2 | BinaryOp::Min | BinaryOp::Max => PREC_ATOM,
            },
        }
    }

    /// Writes `id`, in parentheses unless it binds at least as tightly as `min`.
    fn write_operand(&self, id: NodeId, min: u8, out: &mut String) {
        if self.precedence(id) >= min {
            self.write_node(id, out);
        } else {
            out.push('(');
            self.write_node(id, out);
            out.push(')');
        }
    }

    fn write_node(&self, id: NodeId, out: &mut String) {
        match self.node(id) {
            Node::Constant(c) => {
                let _ = write!(out, "{c}");
            }
            Node::Input(j) => {
                let _ = write!(out, "x{j}");
            }
            Node::Unary(UnaryOp::Neg, a) => {
                out.push('-');
                self.write_operand(a, PREC_POW, out);
            }
            Node::Unary(op, a) => {
                out.push_str(op.name());
                out.push('(');
                self.write_node(a, out);
                out.push(')');
            }
            Node::Binary(op @ (BinaryOp::Atan2 | BinaryOp::Min | BinaryOp::Max), a, b) => {
                out.push_str(op.name());
                out.push('(');
                self.write_node(a, out);
                out.push_str(", ");
                self.write_node(b, out);
                out.push(')');
            }
            Node::Binary(op, a, b) => {
                // Left-associative operators need parentheses on the right at equal
                // precedence (a - (b - c)); `^` is parenthesised on both sides at equal
                // precedence so that its associativity never matters to the reader.
                let (left, right) = match op {
                    BinaryOp::Add => (PREC_SUM, PREC_SUM),
                    BinaryOp::Sub => (PREC_SUM, PREC_SUM + 1),
                    BinaryOp::Mul => (PREC_PRODUCT, PREC_PRODUCT),
                    BinaryOp::Div => (PREC_PRODUCT, PREC_PRODUCT + 1),
                    _ => (PREC_POW + 1, PREC_POW + 1),
                };
                self.write_operand(a, left, out);
                let _ = write!(out, " {} ", op.name());
                self.write_operand(b, right, out);
            }
            Node::Select { cond, pos, neg } => {
                out.push_str("select(");
                self.write_node(cond, out);
                out.push_str(", ");
                self.write_node(pos, out);
                out.push_str(", ");
                self.write_node(neg, out);
                out.push(')');
            }
        }
    }
}

const PREC_SUM: u8 = 1;
const PREC_PRODUCT: u8 = 2;
const PREC_NEG: u8 = 3;
const PREC_POW: u8 = 4;
const PREC_ATOM: u8 = 6;

#[cfg(test)]
mod tests {
    use super::*;
    use BinaryOp::*;
    use UnaryOp::*;

    #[test]
    fn same_operation_on_same_operands_is_one_node() {
        let mut g = Graph::new();
        let x = g.input(0);
        let y = g.input(1);
        assert_eq!(g.input(0), x);
        let s1 = g.unary(Sin, x);
        let s2 = g.unary(Sin, x);
        assert_eq!(s1, s2);
        let p1 = g.binary(Mul, s1, y);
        let p2 = g.binary(Mul, y, s2);
        assert_eq!(p1, p2, "commutative operands are canonicalised");
        let d1 = g.binary(Div, x, y);
        let d2 = g.binary(Div, y, x);
        assert_ne!(d1, d2, "division is not commutative");
        let before = g.len();
        let again = g.binary(Mul, s1, y);
        assert_eq!(again, p1);
        assert_eq!(g.len(), before, "no node is added for a repeated expression");
        let c1 = g.constant(2.5);
        let c2 = g.constant(2.5);
        assert_eq!(c1, c2);
        assert_eq!(g.constant(-0.0), g.constant(0.0));
        assert_eq!(g.constant(f64::NAN), g.constant(-f64::NAN));
    }

    #[test]
    fn operations_on_constants_are_folded() {
        let mut g = Graph::new();
        let two = g.constant(2.0);
        let three = g.constant(3.0);
        let cases = [
            (g.binary(Add, two, three), 5.0),
            (g.binary(Sub, two, three), -1.0),
            (g.binary(Mul, two, three), 6.0),
            (g.binary(Div, three, two), 1.5),
            (g.binary(Pow, two, three), 8.0),
            (g.binary(Min, two, three), 2.0),
            (g.binary(Max, two, three), 3.0),
            (g.binary(Atan2, two, three), 2f64.atan2(3.0)),
            (g.unary(Sqrt, two), 2f64.sqrt()),
            (g.unary(Neg, three), -3.0),
            (g.unary(Exp, two), 2f64.exp()),
        ];
        for (node, want) in cases {
            assert_eq!(g.as_constant(node), Some(want), "{}", g.display(node));
        }
        let minus_one = g.constant(-1.0);
        let bad = g.unary(Log, minus_one);
        assert!(g.as_constant(bad).unwrap().is_nan(), "log(-1) folds to NaN, no panic");
        let zero = g.constant(0.0);
        let inf = g.binary(Div, two, zero);
        assert_eq!(g.as_constant(inf), Some(f64::INFINITY));
    }

    #[test]
    fn identities_simplify() {
        let mut g = Graph::new();
        let x = g.input(0);
        let y = g.input(1);
        let zero = g.constant(0.0);
        let one = g.constant(1.0);
        let m1 = g.constant(-1.0);
        let nx = g.unary(Neg, x);
        assert_eq!(g.binary(Add, x, zero), x);
        assert_eq!(g.binary(Add, zero, x), x);
        assert_eq!(g.binary(Sub, x, zero), x);
        assert_eq!(g.binary(Sub, zero, x), nx);
        assert_eq!(g.binary(Sub, x, x), zero);
        assert_eq!(g.binary(Mul, x, one), x);
        assert_eq!(g.binary(Mul, one, x), x);
        assert_eq!(g.binary(Mul, x, zero), zero);
        assert_eq!(g.binary(Mul, zero, x), zero);
        assert_eq!(g.binary(Mul, m1, x), nx);
        assert_eq!(g.binary(Div, x, one), x);
        assert_eq!(g.binary(Div, x, m1), nx);
        assert_eq!(g.binary(Div, zero, x), zero);
        assert_eq!(g.binary(Pow, x, one), x);
        assert_eq!(g.binary(Pow, x, zero), one);
        assert_eq!(g.binary(Pow, one, x), one);
        assert_eq!(g.unary(Neg, nx), x);
        assert_eq!(g.binary(Min, x, x), x);
        assert_eq!(g.binary(Max, y, y), y);
        let ny = g.unary(Neg, y);
        let x_minus_y = g.binary(Sub, x, y);
        assert_eq!(g.binary(Add, x, ny), x_minus_y);
        assert_eq!(g.binary(Add, ny, x), x_minus_y);
        let x_plus_y = g.binary(Add, x, y);
        assert_eq!(g.binary(Sub, x, ny), x_plus_y);
        let y_minus_x = g.binary(Sub, y, x);
        assert_eq!(g.unary(Neg, x_minus_y), y_minus_x);
        let xy = g.binary(Mul, x, y);
        assert_eq!(g.binary(Mul, nx, ny), xy);
        let ax = g.unary(Abs, x);
        assert_eq!(g.unary(Abs, nx), ax);
        assert_eq!(g.unary(Abs, ax), ax);
        assert_eq!(g.select(y, x, x), x);
        let two = g.constant(2.0);
        assert_eq!(g.select(two, x, y), x);
        let m2 = g.constant(-2.0);
        assert_eq!(g.select(m2, x, y), y);
    }

    #[test]
    fn dependency_sets_are_exact_and_sorted() {
        let mut g = Graph::new();
        let x0 = g.input(0);
        let x2 = g.input(2);
        let x5 = g.input(5);
        let a = g.binary(Mul, x5, x0);
        let b = g.unary(Sin, a);
        let c = g.binary(Add, b, x2);
        assert_eq!(g.dependencies(c), &[0, 2, 5]);
        let zero = g.constant(0.0);
        let gone = g.binary(Mul, x2, zero);
        assert_eq!(g.dependencies(gone), &[] as &[u32]);
        // The sign of x2 selects between branches but has zero derivative almost everywhere.
        let s = g.select(x2, x0, x5);
        assert_eq!(g.dependencies(s), &[0, 5]);
        assert!(g.depends_on(c, 5));
        assert!(!g.depends_on(c, 1));
    }

    #[test]
    fn derivatives_are_memoised_and_simplified() {
        let mut g = Graph::new();
        let x = g.input(0);
        let y = g.input(1);
        let xy = g.binary(Mul, x, y);
        let f = g.unary(Sin, xy);
        let d = g.derivative(f, 0);
        // Commutative operands are ordered by id, so the older node `x1` comes first.
        assert_eq!(g.display(d), "x1 * cos(x0 * x1)");
        let len = g.len();
        assert_eq!(g.derivative(f, 0), d);
        assert_eq!(g.len(), len, "a repeated derivative builds nothing");
        let unrelated = g.derivative(f, 7);
        assert_eq!(g.as_constant(unrelated), Some(0.0));
        let three = g.constant(3.0);
        let cube = g.binary(Pow, x, three);
        let dc = g.derivative(cube, 0);
        assert_eq!(g.display(dc), "3 * x0 ^ 2");
        let ddc = g.derivative(dc, 0);
        assert_eq!(g.display(ddc), "6 * x0", "constant factors are combined");
        let dx = g.derivative(x, 0);
        assert_eq!(g.as_constant(dx), Some(1.0));
    }

    #[test]
    fn reverse_gradient_agrees_with_forward_derivatives() {
        let mut g = Graph::new();
        let x = g.input(0);
        let y = g.input(1);
        let z = g.input(2);
        let xy = g.binary(Mul, x, y);
        let s = g.unary(Sin, xy);
        let q = g.binary(Div, s, z);
        let m = g.binary(Max, q, y);
        let p = g.binary(Pow, m, x);
        let f0 = g.binary(Atan2, p, z);
        let f1 = g.unary(Abs, q);
        let w0 = g.input(3);
        let w1 = g.input(4);
        let grad = g.gradient(&[f0, f1], &[w0, w1]);
        let cols: Vec<usize> = grad.iter().map(|e| e.0).collect();
        assert_eq!(cols, [0, 1, 2]);
        let point = [0.7, 1.3, -0.4, 2.0, -3.0];
        for (j, gj) in grad {
            let d0 = g.derivative(f0, j);
            let d1 = g.derivative(f1, j);
            let v = g.evaluate(&[gj, d0, d1], &point);
            let want = point[3] * v[1] + point[4] * v[2];
            // Same derivative rules in another order: agreement to rounding.
            assert!((v[0] - want).abs() <= 1e-13 * (1.0 + want.abs()), "{j}: {} vs {want}", v[0]);
        }
        let c = g.constant(3.0);
        assert!(g.gradient(&[c], &[w0]).is_empty());
    }

    #[test]
    fn deep_chains_differentiate_without_recursion() {
        let mut g = Graph::new();
        let x = g.input(0);
        let mut e = x;
        for k in 0..100_000 {
            let c = g.constant(1.0 + 1e-6 * f64::from(k % 7));
            let p = g.binary(Mul, e, c);
            e = g.unary(Sin, p);
        }
        let d = g.derivative(e, 0);
        let v = g.evaluate(&[d], &[0.3])[0];
        assert!(v.is_finite());
    }

    #[test]
    fn display_parenthesises_by_precedence() {
        let mut g = Graph::new();
        let x = g.input(0);
        let y = g.input(1);
        let z = g.input(2);
        let s = g.binary(Sub, y, z);
        let d = g.binary(Sub, x, s);
        assert_eq!(g.display(d), "x0 - (x1 - x2)");
        let sum = g.binary(Add, x, y);
        let p = g.binary(Mul, sum, z);
        assert_eq!(g.display(p), "x2 * (x0 + x1)");
        let q = g.binary(Div, x, p);
        assert_eq!(g.display(q), "x0 / (x2 * (x0 + x1))");
        let two = g.constant(2.0);
        let sq = g.binary(Pow, x, two);
        let n = g.unary(Neg, sq);
        assert_eq!(g.display(n), "-x0 ^ 2");
        let nx = g.unary(Neg, x);
        let sqn = g.binary(Pow, nx, two);
        assert_eq!(g.display(sqn), "(-x0) ^ 2");
        let m = g.binary(Max, x, n);
        let a = g.binary(Atan2, m, y);
        assert_eq!(g.display(a), "atan2(max(x0, -x0 ^ 2), x1)");
        let half = g.constant(-0.5);
        let h = g.binary(Mul, half, x);
        assert_eq!(g.display(h), "-0.5 * x0");
        let hp = g.binary(Pow, x, half);
        assert_eq!(g.display(hp), "x0 ^ (-0.5)");
    }
}
