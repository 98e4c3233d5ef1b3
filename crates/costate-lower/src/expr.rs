//! Expressions of the checked file -> nodes of the expression graphs, in SI.
//!
//! Owns the translation of one expression in one of two contexts: *running* (dynamics,
//! integrands, path rows; inputs `[t, x, u, p]`) or *endpoint* (objective, boundary rows,
//! expectation targets; inputs `[t0, tf, x0, xf, p, q]`). Each context has its own graph. It also
//! owns the integrals met in endpoint expressions (their integrands live in the running graph)
//! and the inlining of user functions. It does not decide what is a row, a bound or a scale
//! (that is `lib.rs` and `vars.rs`) and never re-checks what the checker judged: where the
//! analysis does not say what a name means it reports [`codes::INCONSISTENT_ANALYSIS`].
//!
//! Units: every value that reaches the graph is SI. A literal with a unit is multiplied by its
//! unit's scale, a constant contributes its folded SI value, a variable input is SI by
//! construction, and any sub-expression whose span carries a bare scale in the analysis is
//! multiplied by it (the checker records that factor only on maximal bare sub-expressions).

use std::collections::HashMap;

use costate_check::units;
use costate_check::{Analysis, Builtin, SymbolId, SymbolKind};
use costate_model::{BinaryOp, EndpointLayout, Graph, NodeId, RunningLayout, UnaryOp};
use costate_syntax::ast::{BinOp, Expr, ExprKind, Ident, NEG_PRECEDENCE};
use costate_syntax::{Diagnostic, Span};

use crate::codes;

/// Deepest nesting of user-function calls the lowering inlines. The checker rejects recursion,
/// so only a checker bug (or a hand-made analysis) reaches this; it keeps the stack bounded.
pub const MAX_CALL_DEPTH: usize = 64;

/// Which inputs names stand for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Cx {
    Running,
    /// `integrals`: whether `integral(..)` may occur (cost and boundary, not expectations).
    Endpoint {
        integrals: bool,
    },
}

impl Cx {
    fn is_endpoint(self) -> bool {
        matches!(self, Cx::Endpoint { .. })
    }
}

/// Function parameters -> the nodes of their arguments (in the graph of the current context).
type Env = HashMap<SymbolId, NodeId>;

/// One `q`: an integrand node of the running graph and the occurrences that share it.
#[derive(Clone, Debug)]
pub(crate) struct IntegralSlot {
    pub node: NodeId,
    pub occurrences: Vec<Span>,
    /// Source text of the first occurrence.
    pub text: String,
}

pub(crate) struct Lowerer<'a> {
    pub a: &'a Analysis,
    pub running: Graph,
    pub endpoint: Graph,
    pub rl: RunningLayout,
    /// `nq` is 0 while integrals are being collected; the `q` offsets do not depend on it.
    pub el: EndpointLayout,
    state_index: HashMap<SymbolId, usize>,
    control_index: HashMap<SymbolId, usize>,
    param_index: HashMap<SymbolId, usize>,
    pub integrals: Vec<IntegralSlot>,
    /// Inlined calls: `(endpoint graph?, function, argument nodes) -> result`. The graph is
    /// hash-consed, so a call with the same argument nodes has the same result; memoising keeps
    /// nested helpers from being expanded exponentially often.
    calls: HashMap<(bool, SymbolId, Vec<NodeId>), NodeId>,
    pub diags: Vec<Diagnostic>,
}

impl<'a> Lowerer<'a> {
    pub fn new(a: &'a Analysis) -> Self {
        let index = |ids: &[SymbolId]| ids.iter().enumerate().map(|(i, id)| (*id, i)).collect();
        let rl = RunningLayout { nx: a.states.len(), nu: a.controls.len(), np: a.params.len() };
        Lowerer {
            a,
            running: Graph::new(),
            endpoint: Graph::new(),
            rl,
            el: EndpointLayout { nx: rl.nx, np: rl.np, nq: 0 },
            state_index: index(&a.states),
            control_index: index(&a.controls),
            param_index: index(&a.params),
            integrals: Vec::new(),
            calls: HashMap::new(),
            diags: Vec::new(),
        }
    }

    fn graph(&mut self, cx: Cx) -> &mut Graph {
        if cx.is_endpoint() {
            &mut self.endpoint
        } else {
            &mut self.running
        }
    }

    /// Reports that the analysis does not support lowering `e`; see [`codes::INCONSISTENT_ANALYSIS`].
    pub fn inconsistent(&mut self, span: Span, what: impl Into<String>, label: &str) {
        let d = Diagnostic::new(codes::INCONSISTENT_ANALYSIS, what, span, label).with_help(
            "the checker accepted this but the lowering cannot translate it; this is a bug in costate, please report it with the file",
        );
        self.diags.push(d);
    }

    /// A constant node, or [`codes::NON_FINITE_VALUE`] when `v` is not finite.
    fn finite_constant(&mut self, cx: Cx, v: f64, span: Span, what: &str) -> Option<NodeId> {
        if v.is_finite() {
            return Some(self.graph(cx).constant(v));
        }
        let d = Diagnostic::new(
            codes::NON_FINITE_VALUE,
            format!("{what} is not a finite number in SI units"),
            span,
            format!("evaluates to {v}"),
        )
        .with_help("write the value in a larger unit or with fewer digits");
        self.diags.push(d);
        None
    }

    /// Lowers a top-level expression (no function parameters in scope).
    pub fn lower(&mut self, e: &Expr, cx: Cx) -> Option<NodeId> {
        self.expr(e, cx, &Env::new(), 0)
    }

    fn expr(&mut self, e: &Expr, cx: Cx, env: &Env, depth: usize) -> Option<NodeId> {
        let node = match &e.kind {
            ExprKind::Number { value, unit, text } => {
                let scale = match unit {
                    None => 1.0,
                    Some(u) => match units::parse_unit(u) {
                        Ok(u) => u.scale,
                        Err(_) => {
                            self.inconsistent(
                                u.span,
                                "cannot lower a number with an unknown unit",
                                "unknown unit",
                            );
                            return None;
                        }
                    },
                };
                self.finite_constant(cx, value * scale, e.span, &format!("the number `{text}`"))?
            }
            ExprKind::Name(id) => self.name(id, cx, env)?,
            ExprKind::Paren(x) => self.expr(x, cx, env, depth)?,
            ExprKind::Neg(x) => {
                let a = self.expr(x, cx, env, depth)?;
                self.graph(cx).unary(UnaryOp::Neg, a)
            }
            ExprKind::Binary { op, lhs, rhs } => {
                let l = self.expr(lhs, cx, env, depth);
                let r = self.expr(rhs, cx, env, depth);
                let op = match op {
                    BinOp::Add => BinaryOp::Add,
                    BinOp::Sub => BinaryOp::Sub,
                    BinOp::Mul => BinaryOp::Mul,
                    BinOp::Div => BinaryOp::Div,
                    BinOp::Pow => BinaryOp::Pow,
                };
                let (l, r) = (l?, r?);
                self.graph(cx).binary(op, l, r)
            }
            ExprKind::Call { callee, args } => self.call(e, callee, args, cx, env, depth)?,
            ExprKind::Error => {
                self.inconsistent(
                    e.span,
                    "cannot lower an expression that did not parse",
                    "malformed",
                );
                return None;
            }
        };
        let s = self.a.bare_scale(e.span);
        if s == 1.0 {
            return Some(node);
        }
        let c = self.finite_constant(cx, s, e.span, "the unit factor of this number")?;
        Some(self.graph(cx).binary(BinaryOp::Mul, node, c))
    }

    fn name(&mut self, id: &Ident, cx: Cx, env: &Env) -> Option<NodeId> {
        let Some(sym) = self.a.resolve(id.span) else {
            self.inconsistent(
                id.span,
                format!("cannot lower `{}`: the analysis does not resolve it", id.name),
                "unresolved",
            );
            return None;
        };
        let input = match (sym.kind, cx) {
            (SymbolKind::Const, _) => {
                return match sym.value {
                    Some(v) => {
                        self.finite_constant(cx, v, id.span, &format!("the constant `{}`", id.name))
                    }
                    None => {
                        self.inconsistent(
                            id.span,
                            format!("cannot lower `{}`: the constant has no value", id.name),
                            "no value",
                        );
                        None
                    }
                };
            }
            (SymbolKind::Builtin, _) if sym.builtin == Some(Builtin::Pi) => {
                return Some(self.graph(cx).constant(std::f64::consts::PI));
            }
            (SymbolKind::FnParam, _) => {
                let node = env.get(&sym.id).copied();
                if node.is_none() {
                    self.inconsistent(
                        id.span,
                        format!("cannot lower `{}` outside a call of its function", id.name),
                        "no argument",
                    );
                }
                return node;
            }
            (SymbolKind::Param, Cx::Running) => {
                self.param_index.get(&sym.id).map(|&i| self.rl.p(i))
            }
            (SymbolKind::Param, Cx::Endpoint { .. }) => {
                self.param_index.get(&sym.id).map(|&i| self.el.p(i))
            }
            (SymbolKind::Time, Cx::Running) => Some(RunningLayout::T),
            (SymbolKind::State, Cx::Running) => {
                self.state_index.get(&sym.id).map(|&i| self.rl.x(i))
            }
            (SymbolKind::Control, Cx::Running) => {
                self.control_index.get(&sym.id).map(|&i| self.rl.u(i))
            }
            _ => None,
        };
        match input {
            Some(i) => Some(self.graph(cx).input(i)),
            None => {
                let place =
                    if cx.is_endpoint() { "at the endpoints" } else { "along the trajectory" };
                self.inconsistent(
                    id.span,
                    format!("cannot lower the {} `{}` {place}", sym.kind.describe(), id.name),
                    "no value here",
                );
                None
            }
        }
    }

    fn call(
        &mut self,
        e: &Expr,
        callee: &Ident,
        args: &[Expr],
        cx: Cx,
        env: &Env,
        depth: usize,
    ) -> Option<NodeId> {
        let Some(sym) = self.a.resolve(callee.span) else {
            self.inconsistent(
                callee.span,
                format!("cannot lower a call of `{}`: unresolved", callee.name),
                "unresolved",
            );
            return None;
        };
        match (sym.kind, sym.builtin) {
            (SymbolKind::Builtin, Some(Builtin::Start | Builtin::End)) => {
                self.endpoint_value(e, callee, args, cx)
            }
            (SymbolKind::Builtin, Some(Builtin::Integral)) => self.integral(e, args, cx, env),
            (SymbolKind::Builtin, Some(b)) if b != Builtin::Pi => {
                self.math(e, b, args, cx, env, depth)
            }
            (SymbolKind::Function, _) => {
                let (f, params, body) = (sym.id, sym.params.clone(), sym.body.clone());
                let nodes: Vec<Option<NodeId>> =
                    args.iter().map(|a| self.expr(a, cx, env, depth)).collect();
                let nodes: Vec<NodeId> = nodes.into_iter().collect::<Option<_>>()?;
                let Some(body) = body.filter(|_| params.len() == nodes.len()) else {
                    self.inconsistent(
                        e.span,
                        format!("cannot inline the call of `{}`", callee.name),
                        "no matching body",
                    );
                    return None;
                };
                if depth >= MAX_CALL_DEPTH {
                    let d = Diagnostic::new(
                        codes::CALL_TOO_DEEP,
                        format!(
                            "calls nest more than {MAX_CALL_DEPTH} deep when inlining `{}`",
                            callee.name
                        ),
                        e.span,
                        "call too deep",
                    )
                    .with_help("functions must not call themselves, directly or through others");
                    self.diags.push(d);
                    return None;
                }
                let key = (cx.is_endpoint(), f, nodes.clone());
                if let Some(&done) = self.calls.get(&key) {
                    return Some(done);
                }
                let inner: Env = params.into_iter().zip(nodes).collect();
                let out = self.expr(&body, cx, &inner, depth + 1)?;
                self.calls.insert(key, out);
                Some(out)
            }
            _ => {
                self.inconsistent(
                    callee.span,
                    format!("cannot lower a call of `{}`", callee.name),
                    "not a function",
                );
                None
            }
        }
    }

    fn math(
        &mut self,
        e: &Expr,
        b: Builtin,
        args: &[Expr],
        cx: Cx,
        env: &Env,
        depth: usize,
    ) -> Option<NodeId> {
        let nodes: Vec<Option<NodeId>> =
            args.iter().map(|a| self.expr(a, cx, env, depth)).collect();
        let nodes: Vec<NodeId> = nodes.into_iter().collect::<Option<_>>()?;
        let unary = match b {
            Builtin::Sin => Some(UnaryOp::Sin),
            Builtin::Cos => Some(UnaryOp::Cos),
            Builtin::Tan => Some(UnaryOp::Tan),
            Builtin::Asin => Some(UnaryOp::Asin),
            Builtin::Acos => Some(UnaryOp::Acos),
            Builtin::Atan => Some(UnaryOp::Atan),
            Builtin::Sinh => Some(UnaryOp::Sinh),
            Builtin::Cosh => Some(UnaryOp::Cosh),
            Builtin::Tanh => Some(UnaryOp::Tanh),
            Builtin::Exp => Some(UnaryOp::Exp),
            Builtin::Log => Some(UnaryOp::Log),
            Builtin::Sqrt => Some(UnaryOp::Sqrt),
            Builtin::Abs => Some(UnaryOp::Abs),
            _ => None,
        };
        let g = self.graph(cx);
        match (unary, b, nodes.as_slice()) {
            (Some(op), _, [a]) => Some(g.unary(op, *a)),
            (None, Builtin::Atan2, [y, x]) => Some(g.binary(BinaryOp::Atan2, *y, *x)),
            (None, Builtin::Min | Builtin::Max, [first, rest @ ..]) if !rest.is_empty() => {
                let op = if b == Builtin::Min { BinaryOp::Min } else { BinaryOp::Max };
                Some(rest.iter().fold(*first, |acc, n| g.binary(op, acc, *n)))
            }
            _ => {
                self.inconsistent(
                    e.span,
                    format!("cannot lower `{}` with {} argument(s)", b.name(), nodes.len()),
                    "wrong number of arguments",
                );
                None
            }
        }
    }

    /// `start(x)`, `end(x)`, `start(t)`, `end(t)`: inputs of the endpoint functions.
    fn endpoint_value(
        &mut self,
        e: &Expr,
        callee: &Ident,
        args: &[Expr],
        cx: Cx,
    ) -> Option<NodeId> {
        let at_end = callee.name == "end";
        let target = match args {
            [arg] => match &arg.kind {
                ExprKind::Name(id) => self.a.resolve(id.span),
                _ => None,
            },
            _ => None,
        };
        let input = match (cx, target.map(|s| (s.kind, s.id))) {
            (Cx::Endpoint { .. }, Some((SymbolKind::Time, _))) => {
                Some(if at_end { EndpointLayout::TF } else { EndpointLayout::T0 })
            }
            (Cx::Endpoint { .. }, Some((SymbolKind::State, id))) => self
                .state_index
                .get(&id)
                .map(|&i| if at_end { self.el.xf(i) } else { self.el.x0(i) }),
            _ => None,
        };
        match input {
            Some(i) => Some(self.endpoint.input(i)),
            None => {
                self.inconsistent(
                    e.span,
                    format!("cannot lower `{}(..)` here", callee.name),
                    "no endpoint value",
                );
                None
            }
        }
    }

    /// `integral(f)` in an endpoint expression: `f` becomes an integrand (shared with an earlier
    /// identical one) and the call the matching `q` input.
    fn integral(&mut self, e: &Expr, args: &[Expr], cx: Cx, env: &Env) -> Option<NodeId> {
        let ([arg], Cx::Endpoint { integrals: true }, true) = (args, cx, env.is_empty()) else {
            self.inconsistent(e.span, "cannot lower `integral(..)` here", "no integral here");
            return None;
        };
        let node = self.expr(arg, Cx::Running, &Env::new(), 0)?;
        let k = match self.integrals.iter().position(|q| q.node == node) {
            Some(k) => {
                self.integrals[k].occurrences.push(e.span);
                k
            }
            None => {
                self.integrals.push(IntegralSlot {
                    node,
                    occurrences: vec![e.span],
                    text: show(e),
                });
                self.integrals.len() - 1
            }
        };
        let q = self.el.q(k);
        Some(self.endpoint.input(q))
    }
}

/// Source-like text of an expression, for descriptions and tables: literals as written (with
/// their unit), user parentheses kept, parentheses added only where precedence needs them.
pub fn show(e: &Expr) -> String {
    let mut s = String::new();
    write_expr(e, &mut s);
    s
}

/// Binding power of an expression as an operand; atoms bind tightest.
fn precedence(e: &Expr) -> u8 {
    match &e.kind {
        ExprKind::Binary { op, .. } => op.precedence(),
        ExprKind::Neg(_) => NEG_PRECEDENCE,
        _ => u8::MAX,
    }
}

fn write_operand(e: &Expr, parens: bool, s: &mut String) {
    if parens {
        s.push('(');
        write_expr(e, s);
        s.push(')');
    } else {
        write_expr(e, s);
    }
}

fn write_expr(e: &Expr, s: &mut String) {
    match &e.kind {
        ExprKind::Number { text, unit, .. } => {
            s.push_str(text);
            if let Some(u) = unit {
                s.push_str(" [");
                s.push_str(&units::display(u));
                s.push(']');
            }
        }
        ExprKind::Name(id) => s.push_str(&id.name),
        ExprKind::Paren(x) => write_operand(x, true, s),
        ExprKind::Neg(x) => {
            s.push('-');
            write_operand(x, precedence(x) <= NEG_PRECEDENCE, s);
        }
        ExprKind::Binary { op, lhs, rhs } => {
            let p = op.precedence();
            let right_assoc = *op == BinOp::Pow;
            let (pl, pr) = (precedence(lhs), precedence(rhs));
            write_operand(lhs, pl < p || (right_assoc && pl == p), s);
            if right_assoc {
                s.push('^');
            } else {
                s.push(' ');
                s.push_str(op.symbol());
                s.push(' ');
            }
            write_operand(rhs, pr < p || (!right_assoc && pr == p), s);
        }
        ExprKind::Call { callee, args } => {
            s.push_str(&callee.name);
            s.push('(');
            for (i, a) in args.iter().enumerate() {
                if i > 0 {
                    s.push_str(", ");
                }
                write_expr(a, s);
            }
            s.push(')');
        }
        ExprKind::Error => s.push('?'),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sp() -> Span {
        Span::new(0, 0)
    }
    fn name(n: &str) -> Expr {
        Expr { kind: ExprKind::Name(Ident { name: n.into(), span: sp() }), span: sp() }
    }
    fn bin(op: BinOp, l: Expr, r: Expr) -> Expr {
        Expr { kind: ExprKind::Binary { op, lhs: Box::new(l), rhs: Box::new(r) }, span: sp() }
    }
    fn neg(x: Expr) -> Expr {
        Expr { kind: ExprKind::Neg(Box::new(x)), span: sp() }
    }

    #[test]
    fn show_adds_parentheses_only_where_precedence_needs_them() {
        let (a, b, c) = (name("a"), name("b"), name("c"));
        assert_eq!(
            show(&bin(BinOp::Sub, a.clone(), bin(BinOp::Add, b.clone(), c.clone()))),
            "a - (b + c)"
        );
        assert_eq!(
            show(&bin(BinOp::Sub, bin(BinOp::Sub, a.clone(), b.clone()), c.clone())),
            "a - b - c"
        );
        assert_eq!(
            show(&bin(BinOp::Pow, a.clone(), bin(BinOp::Pow, b.clone(), c.clone()))),
            "a^b^c"
        );
        assert_eq!(
            show(&bin(BinOp::Pow, bin(BinOp::Pow, a.clone(), b.clone()), c.clone())),
            "(a^b)^c"
        );
        assert_eq!(show(&neg(bin(BinOp::Pow, a.clone(), b.clone()))), "-a^b");
        assert_eq!(show(&bin(BinOp::Pow, neg(a.clone()), b.clone())), "(-a)^b");
        assert_eq!(show(&neg(bin(BinOp::Mul, a.clone(), b.clone()))), "-(a * b)");
        assert_eq!(show(&neg(neg(a.clone()))), "-(-a)");
        assert_eq!(show(&bin(BinOp::Mul, neg(a), b)), "-a * b");
    }
}
