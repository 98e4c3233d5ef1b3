//! The result of checking one file: symbols, resolutions, types, folded values and the
//! normalised problem (dynamics, cost, constraints, expectations, settings).
//!
//! Owns the plain-data shape that the lowering and the IDE read, and the queries on it
//! (`resolve`, `symbol_at`, `references`, `type_of`, `bare_scale`, `const_value`). It must not
//! re-check anything: all judgement happens in `checker`.

use std::collections::HashMap;
use std::fmt;

use costate_syntax::ast::{BinOp, Expr, ExprKind, RelOp, Sense};
use costate_syntax::{Diagnostic, Span};

use crate::settings::SolveSettings;
use crate::units::{self, Dimension, Unit};

/// Index into [`Analysis::symbols`].
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct SymbolId(pub u32);

impl SymbolId {
    pub fn index(self) -> usize {
        self.0 as usize
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum SymbolKind {
    Const,
    Function,
    /// The independent variable (`time t [s]`), whatever it measures.
    Time,
    Param,
    State,
    Control,
    /// A parameter of a user function; visible only in that function's body.
    FnParam,
    Builtin,
}

impl SymbolKind {
    /// How the kind is named in messages and hovers.
    pub fn describe(self) -> &'static str {
        match self {
            SymbolKind::Const => "constant",
            SymbolKind::Function => "function",
            SymbolKind::Time => "independent variable",
            SymbolKind::Param => "parameter",
            SymbolKind::State => "state",
            SymbolKind::Control => "control",
            SymbolKind::FnParam => "function parameter",
            SymbolKind::Builtin => "built-in",
        }
    }
}

/// The built-in names.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Builtin {
    Sin,
    Cos,
    Tan,
    Asin,
    Acos,
    Atan,
    Atan2,
    Sinh,
    Cosh,
    Tanh,
    Exp,
    Log,
    Sqrt,
    Abs,
    Min,
    Max,
    Start,
    End,
    Integral,
    Pi,
}

impl Builtin {
    pub const ALL: [Builtin; 20] = [
        Builtin::Sin,
        Builtin::Cos,
        Builtin::Tan,
        Builtin::Asin,
        Builtin::Acos,
        Builtin::Atan,
        Builtin::Atan2,
        Builtin::Sinh,
        Builtin::Cosh,
        Builtin::Tanh,
        Builtin::Exp,
        Builtin::Log,
        Builtin::Sqrt,
        Builtin::Abs,
        Builtin::Min,
        Builtin::Max,
        Builtin::Start,
        Builtin::End,
        Builtin::Integral,
        Builtin::Pi,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Builtin::Sin => "sin",
            Builtin::Cos => "cos",
            Builtin::Tan => "tan",
            Builtin::Asin => "asin",
            Builtin::Acos => "acos",
            Builtin::Atan => "atan",
            Builtin::Atan2 => "atan2",
            Builtin::Sinh => "sinh",
            Builtin::Cosh => "cosh",
            Builtin::Tanh => "tanh",
            Builtin::Exp => "exp",
            Builtin::Log => "log",
            Builtin::Sqrt => "sqrt",
            Builtin::Abs => "abs",
            Builtin::Min => "min",
            Builtin::Max => "max",
            Builtin::Start => "start",
            Builtin::End => "end",
            Builtin::Integral => "integral",
            Builtin::Pi => "pi",
        }
    }

    /// Number of arguments: `(min, max)`; `pi` is a value, not a function: `None`.
    /// `min` and `max` take two or more.
    pub fn arity(self) -> Option<(usize, usize)> {
        match self {
            Builtin::Pi => None,
            Builtin::Atan2 => Some((2, 2)),
            Builtin::Min | Builtin::Max => Some((2, usize::MAX)),
            _ => Some((1, 1)),
        }
    }

    /// One-line description for hovers and docs.
    pub fn doc(self) -> &'static str {
        match self {
            Builtin::Sin | Builtin::Cos | Builtin::Tan => {
                "trigonometric function of an angle in radians"
            }
            Builtin::Asin | Builtin::Acos | Builtin::Atan => {
                "inverse trigonometric function, in radians"
            }
            Builtin::Atan2 => "angle of the point (x, y) as `atan2(y, x)`, in radians",
            Builtin::Sinh | Builtin::Cosh | Builtin::Tanh => "hyperbolic function",
            Builtin::Exp => "exponential function",
            Builtin::Log => "natural logarithm",
            Builtin::Sqrt => "square root; halves the exponents of the dimension",
            Builtin::Abs => "absolute value (not smooth at 0)",
            Builtin::Min => "smallest argument (not smooth where arguments tie)",
            Builtin::Max => "largest argument (not smooth where arguments tie)",
            Builtin::Start => "value of a state or of the independent variable at the start",
            Builtin::End => "value of a state or of the independent variable at the end",
            Builtin::Integral => "integral of the argument over the horizon",
            Builtin::Pi => "the number pi",
        }
    }

    /// Evaluates a built-in math function; `None` for `start`, `end`, `integral` and `pi`.
    pub fn eval(self, args: &[f64]) -> Option<f64> {
        let a = *args.first()?;
        Some(match self {
            Builtin::Sin => a.sin(),
            Builtin::Cos => a.cos(),
            Builtin::Tan => a.tan(),
            Builtin::Asin => a.asin(),
            Builtin::Acos => a.acos(),
            Builtin::Atan => a.atan(),
            Builtin::Atan2 => a.atan2(*args.get(1)?),
            Builtin::Sinh => a.sinh(),
            Builtin::Cosh => a.cosh(),
            Builtin::Tanh => a.tanh(),
            Builtin::Exp => a.exp(),
            Builtin::Log => a.ln(),
            Builtin::Sqrt => a.sqrt(),
            Builtin::Abs => a.abs(),
            Builtin::Min => args.iter().copied().fold(f64::INFINITY, f64::min),
            Builtin::Max => args.iter().copied().fold(f64::NEG_INFINITY, f64::max),
            Builtin::Start | Builtin::End | Builtin::Integral | Builtin::Pi => return None,
        })
    }

    pub fn from_name(name: &str) -> Option<Builtin> {
        Builtin::ALL.into_iter().find(|b| b.name() == name)
    }
}

/// A closed interval in SI; an open side is infinite.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Interval {
    pub lo: f64,
    pub hi: f64,
}

impl Interval {
    pub const ALL: Interval = Interval { lo: f64::NEG_INFINITY, hi: f64::INFINITY };

    pub fn contains(&self, x: f64) -> bool {
        self.lo <= x && x <= self.hi
    }
}

/// A folded `start` or `end` attribute, in SI.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Endpoint {
    /// `end 12`
    Fixed(f64),
    /// `end free`
    Free,
    /// `end in 1 .. 60`
    Range(Interval),
}

/// Folded attributes of the independent variable, a parameter, a state or a control, in SI.
/// `None` means "not written": a state without `start` has a free start, the independent
/// variable without `start` starts at 0, a declaration without `scale` has scale 1.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct VarAttrs {
    /// `in LO .. HI`
    pub bounds: Option<Interval>,
    pub start: Option<Endpoint>,
    pub end: Option<Endpoint>,
    pub guess: Option<f64>,
    pub scale: Option<f64>,
}

/// One declared (or built-in) name.
#[derive(Clone, Debug, PartialEq)]
pub struct Symbol {
    pub id: SymbolId,
    pub name: String,
    pub kind: SymbolKind,
    /// Span of the name at its declaration; empty (`0..0`) for built-ins.
    pub name_span: Span,
    /// Span of the whole declaration; empty for built-ins.
    pub decl_span: Span,
    /// Text of the `///` doc comment (or the built-in's description).
    pub doc: Option<String>,
    /// The declared unit, if one was written and is valid.
    pub unit: Option<Unit>,
    /// The dimension of the symbol's values: the declared unit's, or for constants without a
    /// unit the one inferred from the value; `None` when unchecked.
    pub dimension: Option<Dimension>,
    /// Constants: the folded value in SI (for a constant without unit whose value is a bare
    /// number, the number as written: it adapts like a literal, see the crate docs).
    pub value: Option<f64>,
    /// Position among the symbols of the same kind in declaration order (state #0, #1, ...).
    pub index: usize,
    /// Time, params, states and controls: folded attributes.
    pub attrs: VarAttrs,
    pub builtin: Option<Builtin>,
    /// Functions: their parameters in order.
    pub params: Vec<SymbolId>,
    /// Functions: the body (for inlining by the lowering).
    pub body: Option<Expr>,
    /// Function parameters: the function they belong to.
    pub owner: Option<SymbolId>,
}

/// The type of an expression: its dimension as far as it is known.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Ty {
    /// Involves a quantity without declared unit: compatible with everything.
    Unknown,
    /// A bare number (literals and constants without unit): adapts to its context.
    Bare,
    /// A checked quantity; `scale` is the SI factor of the unit it is written in (what a bare
    /// partner in a sum or comparison is taken in).
    Known { dim: Dimension, scale: f64 },
    /// A quantity multiplied by a bare weight, whose unit adapts: `dim` is its dimension if the
    /// weight is dimensionless, but it is accepted wherever any dimension is expected.
    Weighted { dim: Dimension, scale: f64 },
}

impl Ty {
    pub fn dimension(&self) -> Option<Dimension> {
        match self {
            Ty::Known { dim, .. } | Ty::Weighted { dim, .. } => Some(*dim),
            Ty::Unknown | Ty::Bare => None,
        }
    }

    /// The unit scale a bare partner adapts to; 1 (SI) when there is none.
    pub fn scale(&self) -> f64 {
        match self {
            Ty::Known { scale, .. } | Ty::Weighted { scale, .. } => *scale,
            Ty::Unknown | Ty::Bare => 1.0,
        }
    }

    pub fn known(unit: &Unit) -> Ty {
        Ty::Known { dim: unit.dimension, scale: unit.scale }
    }
}

impl fmt::Display for Ty {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Ty::Unknown => write!(f, "unchecked"),
            Ty::Bare => write!(f, "bare number (takes the unit of its context)"),
            Ty::Known { dim, .. } => write!(f, "{dim}"),
            Ty::Weighted { dim, .. } => write!(f, "{dim} times a weight"),
        }
    }
}

/// `state' = rhs`, for the state with index `state_index`.
#[derive(Clone, Debug, PartialEq)]
pub struct DynamicsEq {
    pub state: SymbolId,
    pub state_index: usize,
    pub rhs: Expr,
    pub span: Span,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Cost {
    pub sense: Sense,
    pub expr: Expr,
    pub span: Span,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ConstraintKind {
    Path,
    Boundary,
}

/// One row `lo <= expr <= hi` of a normalised constraint, bounds in SI.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    /// A sub-expression of the source, or `lhs - rhs` built from two (its span then covers
    /// both sides; no bare scale is recorded for it).
    pub expr: Expr,
    pub lo: f64,
    pub hi: f64,
}

/// A `path` or `boundary` entry, normalised to one or two rows.
///
/// `lo <= e <= hi` with constant `lo` and `hi` becomes one row `(e, lo, hi)`; `a <= b` with a
/// constant side becomes `(other side, bounds)`; otherwise the row is `a - b` against 0.
/// A chain with a non-constant end becomes two rows.
#[derive(Clone, Debug, PartialEq)]
pub struct Constraint {
    pub kind: ConstraintKind,
    pub label: Option<String>,
    pub span: Span,
    pub rows: Vec<Row>,
}

#[derive(Clone, Debug, PartialEq)]
pub enum ExpectTarget {
    /// `cost`: the optimal objective value, as the user's sense states it.
    Cost,
    /// An expression of `start(..)`, `end(..)` and parameters.
    Expr(Expr),
}

#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Tolerance {
    /// In SI, in the target's dimension.
    Absolute(f64),
    /// `within 5%`: the number 5.
    Percent(f64),
}

#[derive(Clone, Debug, PartialEq)]
pub struct Expectation {
    pub target: ExpectTarget,
    pub target_span: Span,
    /// Expected value in SI.
    pub value: f64,
    pub tolerance: Tolerance,
    /// The target's unit scale (what a bare value was taken in), to report back in user units.
    pub display_scale: f64,
    pub span: Span,
}

/// Everything the checker found out about one file.
#[derive(Clone, Debug, Default)]
pub struct Analysis {
    pub diagnostics: Vec<Diagnostic>,
    /// Built-ins first, then declarations in source order. `symbols[id.index()].id == id`.
    pub symbols: Vec<Symbol>,
    /// The symbol each name use denotes, keyed by the use's span: `ExprKind::Name`, call
    /// callees, the arguments of `start`/`end`, and the state names of dynamics equations.
    pub resolutions: HashMap<Span, SymbolId>,
    /// The type of every checked expression, keyed by its span.
    pub types: HashMap<Span, Ty>,
    /// Scale factors of bare sub-expressions that adapted to a unit; see [`Analysis::bare_scale`].
    pub bare_scales: HashMap<Span, f64>,
    pub time: Option<SymbolId>,
    pub params: Vec<SymbolId>,
    pub states: Vec<SymbolId>,
    pub controls: Vec<SymbolId>,
    /// One entry per state that has an equation, ordered by state index.
    pub dynamics: Vec<DynamicsEq>,
    pub cost: Option<Cost>,
    /// Path and boundary constraints in source order.
    pub constraints: Vec<Constraint>,
    pub settings: SolveSettings,
    pub expectations: Vec<Expectation>,
}

impl Analysis {
    pub fn symbol(&self, id: SymbolId) -> &Symbol {
        &self.symbols[id.index()]
    }

    pub fn has_errors(&self) -> bool {
        self.diagnostics.iter().any(Diagnostic::is_error)
    }

    /// The symbol a name use at exactly `span` denotes.
    pub fn resolve(&self, span: Span) -> Option<&Symbol> {
        self.resolutions.get(&span).map(|id| self.symbol(*id))
    }

    /// The symbol at a byte offset: a use or a declaration's name.
    pub fn symbol_at(&self, offset: usize) -> Option<&Symbol> {
        self.resolutions
            .iter()
            .find(|(span, _)| span.contains(offset))
            .map(|(_, id)| self.symbol(*id))
            .or_else(|| {
                self.symbols
                    .iter()
                    .find(|s| s.kind != SymbolKind::Builtin && s.name_span.contains(offset))
            })
    }

    /// Spans of every use of `id`, sorted; the declaration's name span is not included.
    pub fn references(&self, id: SymbolId) -> Vec<Span> {
        let mut v: Vec<Span> =
            self.resolutions.iter().filter(|(_, s)| **s == id).map(|(span, _)| *span).collect();
        v.sort();
        v
    }

    /// Looks a global name up (not function parameters).
    pub fn lookup(&self, name: &str) -> Option<&Symbol> {
        self.symbols.iter().find(|s| s.name == name && s.kind != SymbolKind::FnParam)
    }

    pub fn type_of(&self, span: Span) -> Option<Ty> {
        self.types.get(&span).copied()
    }

    /// The factor by which the value of the sub-expression at exactly `span` must be multiplied
    /// to be in SI, because it is a bare number that adapted to a unit (`x <= 5` with
    /// `x [km]`: 1000 at the span of `5`). 1 for every other span. Recorded only on maximal
    /// bare sub-expressions, so applying it wherever a span matches never double-counts.
    pub fn bare_scale(&self, span: Span) -> f64 {
        self.bare_scales.get(&span).copied().unwrap_or(1.0)
    }

    /// The SI value of a constant expression: literals (with their own unit and bare scale),
    /// constants, `pi`, math built-ins and user functions. `None` when the expression involves a
    /// decision variable or is undefined (division by zero, ...).
    pub fn const_value(&self, e: &Expr) -> Option<f64> {
        self.eval(e, &HashMap::new(), 0)
    }

    fn eval(&self, e: &Expr, env: &HashMap<SymbolId, f64>, depth: usize) -> Option<f64> {
        if depth > 200 {
            return None;
        }
        let raw = match &e.kind {
            ExprKind::Number { value, unit, .. } => match unit {
                Some(u) => value * units::parse_unit(u).ok()?.scale,
                None => *value,
            },
            ExprKind::Name(_) => {
                let s = self.resolve(e.span)?;
                match s.kind {
                    SymbolKind::Const => s.value?,
                    SymbolKind::FnParam => *env.get(&s.id)?,
                    SymbolKind::Builtin if s.builtin == Some(Builtin::Pi) => std::f64::consts::PI,
                    _ => return None,
                }
            }
            ExprKind::Neg(x) => -self.eval(x, env, depth + 1)?,
            ExprKind::Paren(x) => self.eval(x, env, depth + 1)?,
            ExprKind::Binary { op, lhs, rhs } => {
                let (a, b) = (self.eval(lhs, env, depth + 1)?, self.eval(rhs, env, depth + 1)?);
                match op {
                    BinOp::Add => a + b,
                    BinOp::Sub => a - b,
                    BinOp::Mul => a * b,
                    BinOp::Div => a / b,
                    BinOp::Pow => a.powf(b),
                }
            }
            ExprKind::Call { callee, args } => {
                let s = self.resolve(callee.span)?;
                let vals: Option<Vec<f64>> =
                    args.iter().map(|a| self.eval(a, env, depth + 1)).collect();
                let vals = vals?;
                match s.kind {
                    SymbolKind::Builtin => s.builtin?.eval(&vals)?,
                    SymbolKind::Function if s.params.len() == vals.len() => {
                        let inner: HashMap<SymbolId, f64> =
                            s.params.iter().copied().zip(vals).collect();
                        self.eval(s.body.as_ref()?, &inner, depth + 1)?
                    }
                    _ => return None,
                }
            }
            ExprKind::Error => return None,
        };
        let v = raw * self.bare_scale(e.span);
        v.is_finite().then_some(v)
    }
}

/// Bounds `(lo, hi)` for `e op c` with constant `c`, or for `c op e` when `flipped`.
pub(crate) fn bounds_for(op: RelOp, c: f64, flipped: bool) -> (f64, f64) {
    match (op, flipped) {
        (RelOp::Eq, _) => (c, c),
        (RelOp::Le, false) | (RelOp::Ge, true) => (f64::NEG_INFINITY, c),
        (RelOp::Ge, false) | (RelOp::Le, true) => (c, f64::INFINITY),
    }
}
