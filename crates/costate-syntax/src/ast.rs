//! The syntax tree of one `.costate` file.
//!
//! The parser never fails: where input is malformed it records a diagnostic and leaves an
//! `Error` node (or drops the broken entry), so later stages and the editor always get a tree.
//! Every node carries its byte span. Plain `//` comments are kept in `File::comments` (for the
//! formatter); `///` doc comments are attached to the declaration that follows them.

use crate::Span;

#[derive(Clone, Debug, PartialEq)]
pub struct Ident {
    pub name: String,
    pub span: Span,
}

/// The text of consecutive `///` lines, without the slashes and one leading space, joined by
/// `\n`, and the span covering them.
#[derive(Clone, Debug, PartialEq)]
pub struct Doc {
    pub text: String,
    pub span: Span,
}

/// A plain `//` comment; `text` excludes the slashes. `own_line` is false for a comment that
/// follows code on the same line.
#[derive(Clone, Debug, PartialEq)]
pub struct Comment {
    pub text: String,
    pub span: Span,
    pub own_line: bool,
}

#[derive(Clone, Debug, PartialEq)]
pub struct File {
    /// Doc comment before `problem`.
    pub doc: Option<Doc>,
    /// `problem NAME`; `None` when missing (a diagnostic says so).
    pub name: Option<Ident>,
    pub items: Vec<Item>,
    pub comments: Vec<Comment>,
    pub span: Span,
}

#[derive(Clone, Debug, PartialEq)]
pub enum Item {
    Const(Block<ConstDecl>),
    Fn(FnDecl),
    Time(VarDecl),
    Param(Block<VarDecl>),
    State(Block<VarDecl>),
    Control(Block<VarDecl>),
    Dynamics(Block<Equation>),
    Cost(Block<CostStmt>),
    Path(Block<Constraint>),
    Boundary(Block<Constraint>),
    Solve(Block<Setting>),
    Expect(Block<Expectation>),
}

impl Item {
    pub fn span(&self) -> Span {
        match self {
            Item::Const(b) => b.span,
            Item::Fn(f) => f.span,
            Item::Time(t) => t.span,
            Item::Param(b) | Item::State(b) | Item::Control(b) => b.span,
            Item::Dynamics(b) => b.span,
            Item::Cost(b) => b.span,
            Item::Path(b) | Item::Boundary(b) => b.span,
            Item::Solve(b) => b.span,
            Item::Expect(b) => b.span,
        }
    }
}

/// `keyword { entry ... }`: entries are separated by newlines (or `;`).
#[derive(Clone, Debug, PartialEq)]
pub struct Block<T> {
    pub doc: Option<Doc>,
    pub keyword: Span,
    pub entries: Vec<T>,
    pub span: Span,
}

/// `name [unit] = expr` inside `const { }`.
#[derive(Clone, Debug, PartialEq)]
pub struct ConstDecl {
    pub doc: Option<Doc>,
    pub name: Ident,
    pub unit: Option<UnitExpr>,
    pub value: Expr,
    pub span: Span,
}

/// `fn name(a, b) = expr`.
#[derive(Clone, Debug, PartialEq)]
pub struct FnDecl {
    pub doc: Option<Doc>,
    pub name: Ident,
    pub params: Vec<Ident>,
    pub body: Expr,
    pub span: Span,
}

/// A declared quantity with attributes: the independent variable (`time t [s]: start 0, end 12`),
/// a state, a control or a parameter. Which attributes are allowed is the checker's business.
#[derive(Clone, Debug, PartialEq)]
pub struct VarDecl {
    pub doc: Option<Doc>,
    pub name: Ident,
    pub unit: Option<UnitExpr>,
    pub attrs: Vec<Attr>,
    pub span: Span,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum AttrKind {
    Start,
    End,
    In,
    Guess,
    Scale,
}

impl AttrKind {
    pub fn keyword(self) -> &'static str {
        match self {
            AttrKind::Start => "start",
            AttrKind::End => "end",
            AttrKind::In => "in",
            AttrKind::Guess => "guess",
            AttrKind::Scale => "scale",
        }
    }
}

/// One attribute: `start 0`, `end free`, `end in 1 .. 60`, `in -2 .. 2`, `guess 8`, `scale 10`.
/// For `in` the value is always a `Range`.
#[derive(Clone, Debug, PartialEq)]
pub struct Attr {
    pub kind: AttrKind,
    pub kind_span: Span,
    pub value: AttrValue,
    pub span: Span,
}

#[derive(Clone, Debug, PartialEq)]
pub enum AttrValue {
    Expr(Expr),
    /// `free`
    Free(Span),
    /// `in LO .. HI` (after `start`/`end`) or the range of an `in` attribute.
    Range(Range),
}

/// `LO .. HI` where either side may be left open (`0 ..`, `.. 5`).
#[derive(Clone, Debug, PartialEq)]
pub struct Range {
    pub lo: Option<Expr>,
    pub hi: Option<Expr>,
    pub span: Span,
}

/// `name' = expr` inside `dynamics { }`.
#[derive(Clone, Debug, PartialEq)]
pub struct Equation {
    pub doc: Option<Doc>,
    /// The differentiated name, without the prime.
    pub state: Ident,
    /// Span of `name'` including the prime.
    pub lhs_span: Span,
    pub rhs: Expr,
    pub span: Span,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Sense {
    Minimize,
    Maximize,
}

/// `minimize expr` or `maximize expr` inside `cost { }`.
#[derive(Clone, Debug, PartialEq)]
pub struct CostStmt {
    pub doc: Option<Doc>,
    pub sense: Sense,
    pub sense_span: Span,
    pub expr: Expr,
    pub span: Span,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum RelOp {
    Le,
    Ge,
    Eq,
}

impl RelOp {
    pub fn symbol(self) -> &'static str {
        match self {
            RelOp::Le => "<=",
            RelOp::Ge => ">=",
            RelOp::Eq => "==",
        }
    }
}

/// `[label:] e0 op1 e1 [op2 e2]` inside `path { }` or `boundary { }`. The parser accepts any
/// chain length; the checker says which shapes are meaningful.
#[derive(Clone, Debug, PartialEq)]
pub struct Constraint {
    pub doc: Option<Doc>,
    pub label: Option<Ident>,
    pub first: Expr,
    pub rest: Vec<(RelOp, Span, Expr)>,
    pub span: Span,
}

/// `key = value` inside `solve { }`. Enumerated values are written as names (`integrator = radau`).
#[derive(Clone, Debug, PartialEq)]
pub struct Setting {
    pub doc: Option<Doc>,
    pub key: Ident,
    pub value: Expr,
    pub span: Span,
}

/// `target == value within tol` or `... within tol%` inside `expect { }`.
#[derive(Clone, Debug, PartialEq)]
pub struct Expectation {
    pub doc: Option<Doc>,
    pub target: Expr,
    pub value: Expr,
    pub tolerance: Expr,
    /// True when the tolerance is written with `%` (relative).
    pub percent: bool,
    pub span: Span,
}

/// A unit in brackets: `[m/s^2]`, `[kg*m^2]`, `[1/s]`, `[1]` (dimensionless, no factors).
#[derive(Clone, Debug, PartialEq)]
pub struct UnitExpr {
    /// Factors in source order; division is folded into a negative exponent.
    pub factors: Vec<UnitFactor>,
    pub span: Span,
}

#[derive(Clone, Debug, PartialEq)]
pub struct UnitFactor {
    /// A unit symbol such as `m`, `km`, `s`, `deg`, `kN`.
    pub name: Ident,
    pub exponent: i32,
    pub span: Span,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum BinOp {
    Add,
    Sub,
    Mul,
    Div,
    Pow,
}

impl BinOp {
    pub fn symbol(self) -> &'static str {
        match self {
            BinOp::Add => "+",
            BinOp::Sub => "-",
            BinOp::Mul => "*",
            BinOp::Div => "/",
            BinOp::Pow => "^",
        }
    }

    /// Binding power: higher binds tighter. `^` is right-associative, the others left.
    pub fn precedence(self) -> u8 {
        match self {
            BinOp::Add | BinOp::Sub => 1,
            BinOp::Mul | BinOp::Div => 2,
            BinOp::Pow => 4,
        }
    }
}

/// Unary minus binds tighter than `*` but looser than `^`: `-x^2` is `-(x^2)`.
pub const NEG_PRECEDENCE: u8 = 3;

#[derive(Clone, Debug, PartialEq)]
pub struct Expr {
    pub kind: ExprKind,
    pub span: Span,
}

#[derive(Clone, Debug, PartialEq)]
pub enum ExprKind {
    /// A numeric literal, its source text kept for the formatter, with an optional unit.
    Number {
        value: f64,
        text: String,
        unit: Option<UnitExpr>,
    },
    /// A name: a constant, state, control, parameter, the independent variable, a function
    /// parameter, `pi`, or an enumerated setting value.
    Name(Ident),
    Neg(Box<Expr>),
    Binary {
        op: BinOp,
        lhs: Box<Expr>,
        rhs: Box<Expr>,
    },
    /// A call of a built-in (`sin`, `start`, `end`, `integral`, ...) or a user function.
    Call {
        callee: Ident,
        args: Vec<Expr>,
    },
    /// Parentheses as written, kept so the formatter preserves the author's grouping.
    Paren(Box<Expr>),
    /// Placeholder where an expression could not be parsed.
    Error,
}

impl Expr {
    /// Calls `f` on this expression and every sub-expression, parents first.
    pub fn walk<'a>(&'a self, f: &mut impl FnMut(&'a Expr)) {
        f(self);
        match &self.kind {
            ExprKind::Neg(e) | ExprKind::Paren(e) => e.walk(f),
            ExprKind::Binary { lhs, rhs, .. } => {
                lhs.walk(f);
                rhs.walk(f);
            }
            ExprKind::Call { args, .. } => args.iter().for_each(|a| a.walk(f)),
            ExprKind::Number { .. } | ExprKind::Name(_) | ExprKind::Error => {}
        }
    }
}
