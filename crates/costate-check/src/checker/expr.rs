//! Expressions: what each name may denote at each place, how units combine, how bare numbers
//! adapt, constant folding with its undefined cases, and calls (built-in and user functions).
//!
//! User functions are unit-generic: the body is checked once with unchecked parameters (names,
//! arity, purity) and again for every call whose arguments carry units, with nothing recorded
//! during that expansion except unit findings, which are re-worded at the call.

use std::collections::HashMap;
use std::rc::Rc;

use costate_syntax::ast::{BinOp, Expr, ExprKind, Ident};
use costate_syntax::{Diagnostic, Span};

use super::decls::{did_you_mean, unknown_unit};
use super::Checker;
use crate::analysis::{Builtin, SymbolId, SymbolKind, Ty};
use crate::codes;
use crate::units::{self, Dimension, Ratio};

/// Upper bound on function-body expansions per file, so that deeply nested helpers cannot
/// make checking exponential; past it calls are left unchecked.
const EXPANSION_BUDGET: usize = 20_000;

/// Most definitions open at once: a constant whose value calls a function whose body reads
/// another constant... The checker follows definitions by recursion, so the input must not
/// choose its depth; chains of constants alone are folded in dependency order and never nest.
pub(crate) const MAX_DEFINITION_NESTING: usize = 64;
/// Most expression levels open at once, summed over the open definitions. One entry nests at
/// most about 2,000 levels (the parser's limits), so this leaves room for a few such entries
/// reached through one another.
pub(crate) const MAX_EXPRESSION_DEPTH: usize = 10_000;

/// Where an expression stands; decides which names and built-ins are meaningful.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Place {
    /// The value of a `const`.
    Const,
    /// An attribute value (`start`, `end`, `in`, `guess`, `scale`).
    Attr,
    /// The body of a function.
    Fn(SymbolId),
    Dynamics,
    Path,
    Cost,
    Boundary,
    /// The left side of an expectation.
    ExpectTarget,
    /// The expected value or tolerance.
    ExpectValue,
    /// A `solve` value.
    Setting,
}

impl Place {
    fn describe(self) -> &'static str {
        match self {
            Place::Const => "a constant",
            Place::Attr => "an attribute value",
            Place::Fn(_) => "a function body",
            Place::Dynamics => "dynamics",
            Place::Path => "a path constraint",
            Place::Cost => "the cost",
            Place::Boundary => "a boundary constraint",
            Place::ExpectTarget => "an expectation",
            Place::ExpectValue => "an expected value",
            Place::Setting => "a setting",
        }
    }

    fn needs_constant(self) -> bool {
        matches!(self, Place::Const | Place::Attr | Place::ExpectValue | Place::Setting)
    }

    /// Places whose expressions become part of the optimisation problem.
    fn is_model(self) -> bool {
        matches!(self, Place::Dynamics | Place::Path | Place::Cost | Place::Boundary)
    }

    fn has_endpoints(self) -> bool {
        matches!(self, Place::Cost | Place::Boundary | Place::ExpectTarget)
    }
}

#[derive(Clone, Debug)]
pub(crate) struct Cx {
    pub place: Place,
    pub in_integral: bool,
    /// During a call expansion: what each parameter of the function stands for.
    call: Option<Rc<HashMap<SymbolId, Info>>>,
}

impl Cx {
    pub fn new(place: Place) -> Cx {
        Cx { place, in_integral: false, call: None }
    }
}

/// What checking an expression found.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Info {
    pub ty: Ty,
    /// Folded value: SI, except for a `Ty::Bare` expression, whose value is as written.
    pub value: Option<f64>,
    /// Involves no decision variable (a failed fold is still constant).
    pub constant: bool,
    /// Involves a state, a control or the independent variable (or something unresolved).
    pub trajectory: bool,
}

impl Info {
    fn constant(ty: Ty, value: Option<f64>) -> Info {
        Info { ty, value, constant: true, trajectory: false }
    }

    /// After an error: compatible with everything, and not "only constants" (no follow-ups).
    fn poisoned() -> Info {
        Info { ty: Ty::Unknown, value: None, constant: false, trajectory: true }
    }

    fn variable(ty: Ty, trajectory: bool) -> Info {
        Info { ty, value: None, constant: false, trajectory }
    }

    fn join(a: &Info, b: &Info, ty: Ty, value: Option<f64>) -> Info {
        Info {
            ty,
            value,
            constant: a.constant && b.constant,
            trajectory: a.trajectory || b.trajectory,
        }
    }
}

pub(crate) fn non_smooth_diagnostic(name: &str, span: Span) -> Diagnostic {
    let help = match name {
        "abs" => "for a smooth approximation write `sqrt(x^2 + eps^2)` with a small constant `eps`",
        "min" => "for a smooth approximation write `0.5 * (a + b - sqrt((a - b)^2 + eps^2))`",
        _ => "for a smooth approximation write `0.5 * (a + b + sqrt((a - b)^2 + eps^2))`",
    };
    Diagnostic::new(
        codes::NON_SMOOTH,
        format!("`{name}` is not smooth"),
        span,
        "its derivative jumps",
    )
    .with_note("the solver follows derivatives; a kink can slow it down or stall it")
    .with_help(help)
}

impl<'a> Checker<'a> {
    fn record_type(&mut self, span: Span, ty: Ty) {
        if self.recording {
            self.a.types.insert(span, ty);
        }
    }

    fn record_resolution(&mut self, span: Span, id: SymbolId) {
        if self.recording {
            self.a.resolutions.insert(span, id);
        }
    }

    /// Looks a name up: the function's own parameters first, then the globals.
    fn lookup(&self, name: &str, cx: &Cx) -> Option<SymbolId> {
        if let Place::Fn(f) = cx.place {
            if let Some(&p) = self.fn_scopes.get(&f).and_then(|s| s.get(name)) {
                return Some(p);
            }
        }
        self.globals.get(name).copied()
    }

    fn visible_names(&self, cx: &Cx, callable: bool) -> Vec<&str> {
        let mut v: Vec<&str> = Vec::new();
        if let Place::Fn(f) = cx.place {
            if !callable {
                v.extend(
                    self.fn_scopes.get(&f).into_iter().flat_map(|s| s.keys().map(String::as_str)),
                );
            }
        }
        for (name, id) in &self.globals {
            let s = self.sym(*id);
            let is_fn = s.kind == SymbolKind::Function
                || (s.kind == SymbolKind::Builtin && s.builtin != Some(Builtin::Pi));
            if is_fn == callable {
                v.push(name.as_str());
            }
        }
        v.sort_unstable();
        v
    }

    fn unknown_name(&mut self, id: &Ident, cx: &Cx, callable: bool) {
        let (msg, label) = if callable {
            (format!("unknown function `{}`", id.name), "no function of this name")
        } else {
            (format!("unknown name `{}`", id.name), "not declared")
        };
        let mut d = Diagnostic::new(codes::UNKNOWN_NAME, msg, id.span, label);
        if let Some(h) = did_you_mean(&id.name, self.visible_names(cx, callable)) {
            d = d.with_help(h);
        }
        self.push(d);
    }

    /// Gives a bare expression the unit of `target` (SI when the target has none), recording
    /// the scale for the lowering. No-op for non-bare expressions.
    pub(crate) fn settle(&mut self, e: &Expr, info: &mut Info, target: Ty) {
        if info.ty != Ty::Bare {
            return;
        }
        let scale = target.scale();
        if self.recording && scale != 1.0 {
            self.a.bare_scales.insert(e.span, scale);
        }
        info.value = info.value.map(|v| v * scale);
        info.ty = match target {
            Ty::Known { .. } | Ty::Weighted { .. } => target,
            Ty::Unknown | Ty::Bare => Ty::Unknown,
        };
        self.record_type(e.span, info.ty);
    }

    /// The common type of two operands that must agree in dimension (sums, comparisons,
    /// `min`/`max`/`atan2`); reports a mismatch with `what` ("add", "compare", ...).
    pub(crate) fn unify(
        &mut self,
        le: &Expr,
        l: &mut Info,
        re: &Expr,
        r: &mut Info,
        what: &str,
    ) -> Ty {
        match (l.ty, r.ty) {
            (Ty::Bare, Ty::Bare) => Ty::Bare,
            (Ty::Bare, t) => {
                self.settle(le, l, t);
                l.ty
            }
            (t, Ty::Bare) => {
                self.settle(re, r, t);
                r.ty
            }
            (Ty::Known { dim: a, .. }, Ty::Known { dim: b, .. }) => {
                if a == b {
                    l.ty
                } else {
                    self.mismatch(what, le.span, a, re.span, b);
                    Ty::Unknown
                }
            }
            (Ty::Known { .. }, _) => l.ty,
            (_, Ty::Known { .. }) => r.ty,
            (Ty::Weighted { .. }, _) => l.ty,
            (_, Ty::Weighted { .. }) => r.ty,
            _ => Ty::Unknown,
        }
    }

    fn mismatch(&mut self, what: &str, ls: Span, a: Dimension, rs: Span, b: Dimension) {
        let mut d = Diagnostic::new(
            codes::UNIT_MISMATCH,
            format!("cannot {what} `{a}` and `{b}`"),
            rs,
            format!("this is `{b}`"),
        )
        .with_label(ls, format!("this is `{a}`"));
        if let Some(ratio) = a.checked_div(&b) {
            d = d.with_note(format!("the two sides differ by a factor in `{ratio}`"));
        }
        d = d.with_help(
            "both sides need the same dimension; check the units of the declarations involved",
        );
        self.push(d);
    }

    fn undefined(&mut self, span: Span, msg: String, label: &str) {
        let d = Diagnostic::new(codes::UNDEFINED_CONSTANT, msg, span, label)
            .with_help("constant expressions must have a finite value");
        self.push(d);
    }

    /// Checks `e` at the place `cx` and returns what it found. Records resolutions and types.
    pub(crate) fn expr(&mut self, e: &'a Expr, cx: &Cx) -> Info {
        if self.expr_depth >= MAX_EXPRESSION_DEPTH {
            self.too_deep(
                e.span,
                format!("more than {MAX_EXPRESSION_DEPTH} levels of expressions open here"),
            );
            return Info::poisoned();
        }
        self.expr_depth += 1;
        let info = self.expr_inner(e, cx);
        self.expr_depth -= 1;
        self.record_type(e.span, info.ty);
        info
    }

    /// Reports (once per file) a definition or expression the checker does not follow
    /// further, so that the input cannot exhaust the stack.
    pub(crate) fn too_deep(&mut self, span: Span, label: String) {
        if std::mem::replace(&mut self.too_deep_reported, true) {
            return;
        }
        let d = Diagnostic::new(
            codes::DEFINITIONS_TOO_DEEP,
            "definitions reach through one another too deeply to check",
            span,
            label,
        )
        .with_help(
            "constants and functions defined through long chains of others: give some of them \
             plain values, or write the expressions out",
        );
        // Kept even when raised inside a call expansion (which records only unit findings).
        self.deferred.push(d);
    }

    fn expr_inner(&mut self, e: &'a Expr, cx: &Cx) -> Info {
        match &e.kind {
            ExprKind::Number { value, unit, .. } => match unit {
                None => Info::constant(Ty::Bare, Some(*value)),
                Some(u) => match units::parse_unit(u) {
                    Ok(unit) => Info::constant(Ty::known(&unit), Some(value * unit.scale)),
                    Err(unknown) => {
                        for x in unknown {
                            self.push(unknown_unit(&x));
                        }
                        Info::constant(Ty::Unknown, None)
                    }
                },
            },
            ExprKind::Name(id) => self.name(id, cx),
            ExprKind::Neg(x) => {
                let i = self.expr(x, cx);
                Info { value: i.value.map(|v| -v), ..i }
            }
            ExprKind::Paren(x) => self.expr(x, cx),
            ExprKind::Binary { op, lhs, rhs } => self.binary(*op, lhs, rhs, cx),
            ExprKind::Call { callee, args } => self.call(e, callee, args, cx),
            ExprKind::Error => Info::poisoned(),
        }
    }

    fn name(&mut self, id: &Ident, cx: &Cx) -> Info {
        let Some(sid) = self.lookup(&id.name, cx) else {
            self.unknown_name(id, cx, false);
            return Info::poisoned();
        };
        self.record_resolution(id.span, sid);
        let s = self.sym(sid);
        let kind = s.kind;
        let sname = s.name.clone();
        match kind {
            SymbolKind::Builtin if s.builtin == Some(Builtin::Pi) => Info::constant(
                Ty::Known { dim: Dimension::NONE, scale: 1.0 },
                Some(std::f64::consts::PI),
            ),
            SymbolKind::Builtin | SymbolKind::Function => {
                let what =
                    if kind == SymbolKind::Builtin { "a built-in function" } else { "a function" };
                let d = Diagnostic::new(
                    codes::NOT_A_FUNCTION,
                    format!("`{sname}` is {what}, not a value"),
                    id.span,
                    "used without arguments",
                )
                .with_help(format!("call it: `{sname}(...)`"));
                self.push(d);
                Info::poisoned()
            }
            SymbolKind::Const => {
                let (ty, value) = self.const_info(sid, Some(id.span));
                Info::constant(ty, value)
            }
            SymbolKind::FnParam => match &cx.call {
                Some(env) => env.get(&sid).copied().unwrap_or_else(Info::poisoned),
                None => Info::variable(Ty::Unknown, false),
            },
            SymbolKind::State | SymbolKind::Control | SymbolKind::Time | SymbolKind::Param => {
                let ty = self.var_ty(sid);
                let is_param = kind == SymbolKind::Param;
                if let Place::Fn(_) = cx.place {
                    let d = Diagnostic::new(
                        codes::IMPURE_FUNCTION,
                        format!("a function body cannot use the {} `{sname}`", kind.describe()),
                        id.span,
                        "not a parameter of this function",
                    )
                    .with_help(format!(
                        "add `{sname}` to the function's parameters and pass it at each call"
                    ));
                    self.push(d);
                    return Info::poisoned();
                }
                if cx.place.needs_constant() {
                    let d = Diagnostic::new(
                        codes::NOT_CONSTANT,
                        format!(
                            "{} needs a constant, but `{sname}` is a {}",
                            cx.place.describe(),
                            kind.describe()
                        ),
                        id.span,
                        "chosen by the optimiser",
                    )
                    .with_help("use a number or a `const`");
                    self.push(d);
                    return Info::poisoned();
                }
                if !is_param && cx.place.has_endpoints() && !cx.in_integral {
                    let help = match kind {
                        SymbolKind::Control => {
                            if cx.place == Place::ExpectTarget {
                                "a control has no endpoint value; expectations may use `cost`, `start(..)`, `end(..)` and parameters".to_string()
                            } else {
                                format!("use it inside `integral(..)`, e.g. `integral({sname}^2)`")
                            }
                        }
                        _ => format!("write `end({sname})` or `start({sname})`"),
                    };
                    let d = Diagnostic::new(
                        codes::VARIABLE_OUTSIDE_ENDPOINT,
                        format!(
                            "{} `{sname}` has no single value in {}",
                            kind.describe(),
                            cx.place.describe()
                        ),
                        id.span,
                        "varies over the horizon",
                    )
                    .with_help(help);
                    self.push(d);
                    return Info::poisoned();
                }
                if kind == SymbolKind::Control && self.recording && (cx.place.is_model()) {
                    self.used_controls.insert(sid);
                }
                Info::variable(ty, !is_param)
            }
        }
    }

    fn binary(&mut self, op: BinOp, lhs: &'a Expr, rhs: &'a Expr, cx: &Cx) -> Info {
        let mut l = self.expr(lhs, cx);
        let mut r = self.expr(rhs, cx);
        match op {
            BinOp::Add | BinOp::Sub => {
                let what = if op == BinOp::Add { "add" } else { "subtract" };
                let ty = self.unify(lhs, &mut l, rhs, &mut r, what);
                let v = match (l.value, r.value) {
                    (Some(a), Some(b)) => Some(if op == BinOp::Add { a + b } else { a - b }),
                    _ => None,
                };
                self.finite(lhs.span.to(rhs.span), Info::join(&l, &r, ty, v))
            }
            BinOp::Mul | BinOp::Div => {
                let div = op == BinOp::Div;
                let ty = product(l.ty, r.ty, div);
                let v = match (l.value, r.value) {
                    (_, Some(b)) if div && b == 0.0 => {
                        self.undefined(rhs.span, "division by zero".to_string(), "this is zero");
                        None
                    }
                    (Some(a), Some(b)) => Some(if div { a / b } else { a * b }),
                    _ => None,
                };
                self.finite(lhs.span.to(rhs.span), Info::join(&l, &r, ty, v))
            }
            BinOp::Pow => self.power(lhs, l, rhs, r),
        }
    }

    /// Reports an overflow of a folded value and drops it.
    fn finite(&mut self, span: Span, mut info: Info) -> Info {
        if let Some(v) = info.value {
            if !v.is_finite() {
                self.undefined(
                    span,
                    "constant expression overflows".to_string(),
                    "too large for a number",
                );
                info.value = None;
            }
        }
        info
    }

    fn power(&mut self, lhs: &Expr, base: Info, rhs: &Expr, mut ex: Info) -> Info {
        if let Ty::Known { dim, .. } = ex.ty {
            if !dim.is_dimensionless() {
                let d = Diagnostic::new(
                    codes::INVALID_EXPONENT,
                    format!("an exponent must be dimensionless, found `{dim}`"),
                    rhs.span,
                    format!("this is `{dim}`"),
                )
                .with_help("divide the exponent by a reference quantity of the same unit");
                self.push(d);
                return Info::join(&base, &ex, Ty::Unknown, None);
            }
        }
        self.settle(rhs, &mut ex, Ty::Known { dim: Dimension::NONE, scale: 1.0 });
        let exp_ratio = ex.value.and_then(Ratio::from_f64);
        let ty = match base.ty {
            Ty::Known { dim, scale } | Ty::Weighted { dim, scale } if !dim.is_dimensionless() => {
                let weighted = matches!(base.ty, Ty::Weighted { .. });
                match (ex.value, exp_ratio) {
                    (Some(v), Some(r)) => match dim.checked_pow(r) {
                        Some(d) if weighted => Ty::Weighted { dim: d, scale: scale.powf(v) },
                        Some(d) => Ty::Known { dim: d, scale: scale.powf(v) },
                        None => Ty::Unknown,
                    },
                    (Some(v), None) => {
                        let d = Diagnostic::new(
                            codes::INVALID_EXPONENT,
                            format!("the exponent {v} is not a simple fraction, so `{dim}` cannot be raised to it"),
                            rhs.span,
                            "not a fraction with a small denominator",
                        )
                        .with_help("use an exponent such as 2, 1/2 or 1/3, or make the base dimensionless");
                        self.push(d);
                        Ty::Unknown
                    }
                    (None, _) => {
                        let d = Diagnostic::new(
                            codes::INVALID_EXPONENT,
                            format!("a quantity in `{dim}` needs a constant exponent"),
                            rhs.span,
                            "not a constant",
                        )
                        .with_label(lhs.span, format!("this is `{dim}`"))
                        .with_help("make the base dimensionless first, e.g. divide it by a reference value");
                        if ex.constant {
                            // the exponent's own fold failed and was reported
                        } else {
                            self.push(d);
                        }
                        Ty::Unknown
                    }
                }
            }
            Ty::Known { scale, .. } => {
                Ty::Known { dim: Dimension::NONE, scale: ex.value.map_or(1.0, |v| scale.powf(v)) }
            }
            other => other,
        };
        let value = match (base.value, ex.value) {
            (Some(b), Some(x)) => {
                if b == 0.0 && x < 0.0 {
                    self.undefined(
                        lhs.span.to(rhs.span),
                        "zero raised to a negative power".to_string(),
                        "division by zero",
                    );
                    None
                } else if b < 0.0 && x.fract() != 0.0 {
                    self.undefined(
                        lhs.span.to(rhs.span),
                        format!("negative number {b} raised to the fractional power {x}"),
                        "not a real number",
                    );
                    None
                } else {
                    Some(b.powf(x))
                }
            }
            _ => None,
        };
        self.finite(lhs.span.to(rhs.span), Info::join(&base, &ex, ty, value))
    }

    fn call(&mut self, e: &'a Expr, callee: &Ident, args: &'a [Expr], cx: &Cx) -> Info {
        let Some(sid) = self.lookup(&callee.name, cx) else {
            self.unknown_name(callee, cx, true);
            for a in args {
                self.expr(a, cx);
            }
            return Info::poisoned();
        };
        self.record_resolution(callee.span, sid);
        let s = self.sym(sid);
        let (kind, builtin, name) = (s.kind, s.builtin, s.name.clone());
        match (kind, builtin) {
            (SymbolKind::Builtin, Some(b)) if b != Builtin::Pi => {
                let (lo, hi) = b.arity().unwrap_or((0, 0));
                if args.len() < lo || args.len() > hi {
                    let takes = if hi == usize::MAX {
                        format!("at least {lo} arguments")
                    } else {
                        plural(lo, "argument")
                    };
                    let d = Diagnostic::new(
                        codes::WRONG_ARITY,
                        format!("`{name}` takes {takes} but {} given", given(args.len())),
                        e.span,
                        format!("expected {takes}"),
                    );
                    self.push(d);
                    for a in args {
                        self.expr(
                            a,
                            &Cx {
                                in_integral: cx.in_integral || b == Builtin::Integral,
                                ..cx.clone()
                            },
                        );
                    }
                    return Info::poisoned();
                }
                match b {
                    Builtin::Start | Builtin::End => self.endpoint(e, b, &args[0], cx),
                    Builtin::Integral => self.integral(e, &args[0], cx),
                    _ => self.math(e, b, args, cx),
                }
            }
            (SymbolKind::Function, _) => self.user_call(e, sid, args, cx),
            _ => {
                let what = self.sym(sid).kind.describe();
                let d = Diagnostic::new(
                    codes::NOT_A_FUNCTION,
                    format!("`{name}` is a {what}, not a function"),
                    callee.span,
                    "called here",
                )
                .with_help("only functions and built-ins can be called");
                self.push(d);
                for a in args {
                    self.expr(a, cx);
                }
                Info::poisoned()
            }
        }
    }

    fn endpoint(&mut self, e: &Expr, b: Builtin, arg: &'a Expr, cx: &Cx) -> Info {
        let name = b.name();
        if !cx.place.has_endpoints() || cx.in_integral {
            let (where_, help) = if cx.in_integral {
                (
                    "inside `integral(..)`".to_string(),
                    format!("move `{name}(..)` out of the integral"),
                )
            } else {
                let help = match cx.place {
                    Place::Dynamics | Place::Path => {
                        "use the variable itself: it stands for its value at each instant"
                    }
                    Place::Fn(_) => "pass the value as an argument instead",
                    _ => "constants cannot depend on the solution",
                };
                (format!("in {}", cx.place.describe()), help.to_string())
            };
            let d = Diagnostic::new(
                codes::MISPLACED_ENDPOINT,
                format!("`{name}(..)` has no meaning {where_}"),
                e.span,
                format!("no single {name} value here"),
            )
            .with_help(help);
            self.push(d);
            self.endpoint_arg(b, arg, cx, false);
            return Info::poisoned();
        }
        let ty = self.endpoint_arg(b, arg, cx, true);
        match ty {
            Some(ty) => Info::variable(ty, false),
            None => Info::poisoned(),
        }
    }

    /// Resolves the argument of `start`/`end`: the name of a state or the independent variable.
    fn endpoint_arg(&mut self, b: Builtin, arg: &Expr, cx: &Cx, report: bool) -> Option<Ty> {
        let name = b.name();
        let ExprKind::Name(id) = &arg.kind else {
            if report {
                let d = Diagnostic::new(
                    codes::INVALID_ENDPOINT_ARGUMENT,
                    format!(
                        "`{name}(..)` takes the name of a state or of the independent variable"
                    ),
                    arg.span,
                    "an expression, not a name",
                )
                .with_help(format!("apply `{name}` to each state, e.g. `{name}(x) - {name}(y)`"));
                self.push(d);
            }
            return None;
        };
        let Some(sid) = self.lookup(&id.name, cx) else {
            self.unknown_name(id, cx, false);
            return None;
        };
        self.record_resolution(id.span, sid);
        let kind = self.sym(sid).kind;
        if matches!(kind, SymbolKind::State | SymbolKind::Time) {
            let ty = self.var_ty(sid);
            self.record_type(arg.span, ty);
            return Some(ty);
        }
        if report {
            let mut d = Diagnostic::new(
                codes::INVALID_ENDPOINT_ARGUMENT,
                format!("`{name}(..)` of a {} has no meaning", kind.describe()),
                arg.span,
                format!("`{}` is a {}", id.name, kind.describe()),
            );
            d = match kind {
                SymbolKind::Control => d.with_help("a control has no endpoint value; use it inside `integral(..)` or constrain it in `path`"),
                SymbolKind::Param | SymbolKind::Const => d.with_help(format!("use `{}` directly: it has one value", id.name)),
                _ => d.with_help("use a state or the independent variable"),
            };
            self.push(d);
        }
        None
    }

    fn integral(&mut self, e: &Expr, arg: &'a Expr, cx: &Cx) -> Info {
        let inner = Cx { in_integral: true, ..cx.clone() };
        if cx.in_integral {
            let d = Diagnostic::new(
                codes::NESTED_INTEGRAL,
                "integrals cannot be nested",
                e.span,
                "inside another integral",
            )
            .with_help("introduce a state `q` with `q' = ...` for the inner integral");
            self.push(d);
            self.expr(arg, &inner);
            return Info::poisoned();
        }
        if !matches!(cx.place, Place::Cost | Place::Boundary) {
            let help = match cx.place {
                Place::Dynamics | Place::Path => "for a running integral add a state `q` with `q' = ...`".to_string(),
                Place::ExpectTarget => "expectations may use `cost`, `start(..)`, `end(..)` and parameters; integrate into a state and expect its `end(..)`".to_string(),
                _ => "`integral(..)` belongs in the cost or a boundary constraint".to_string(),
            };
            let d = Diagnostic::new(
                codes::MISPLACED_INTEGRAL,
                format!("`integral(..)` has no meaning in {}", cx.place.describe()),
                e.span,
                "not allowed here",
            )
            .with_help(help);
            self.push(d);
            self.expr(arg, &inner);
            return Info::poisoned();
        }
        let mut a = self.expr(arg, &inner);
        if a.ty == Ty::Bare {
            let t = self.time_ty();
            self.settle(arg, &mut a, Ty::Unknown);
            let ty = match t {
                Ty::Known { dim, scale } => Ty::Weighted { dim, scale },
                _ => Ty::Unknown,
            };
            return Info::variable(ty, false);
        }
        let ty = product(a.ty, self.time_ty(), false);
        Info::variable(ty, false)
    }

    fn math(&mut self, e: &Expr, b: Builtin, args: &'a [Expr], cx: &Cx) -> Info {
        let mut infos: Vec<Info> = args.iter().map(|a| self.expr(a, cx)).collect();
        let all_constant = infos.iter().all(|i| i.constant);
        if matches!(b, Builtin::Abs | Builtin::Min | Builtin::Max) && !all_constant {
            if cx.place.is_model() && self.recording {
                self.push(non_smooth_diagnostic(b.name(), e.span));
            } else if let (Place::Fn(f), true) = (cx.place, self.recording) {
                self.fn_nonsmooth.push((f, e.span, b.name()));
            }
        }
        let ty = match b {
            Builtin::Sqrt => match infos[0].ty {
                Ty::Known { dim, scale } | Ty::Weighted { dim, scale } => {
                    let half = Ratio::new(1, 2).and_then(|h| dim.checked_pow(h));
                    match (half, infos[0].ty) {
                        (Some(d), Ty::Weighted { .. }) => {
                            Ty::Weighted { dim: d, scale: scale.sqrt() }
                        }
                        (Some(d), _) => Ty::Known { dim: d, scale: scale.sqrt() },
                        (None, _) => Ty::Unknown,
                    }
                }
                other => other,
            },
            Builtin::Abs => infos[0].ty,
            Builtin::Min | Builtin::Max | Builtin::Atan2 => {
                let what = format!("take the {} of", b.name());
                let (first, rest) = infos.split_at_mut(1);
                let mut acc = first[0];
                for (i, info) in rest.iter_mut().enumerate() {
                    let ty = self.unify(&args[0], &mut acc, &args[i + 1], info, &what);
                    acc.ty = ty;
                }
                infos[0] = acc;
                if b == Builtin::Atan2 {
                    if acc.ty == Ty::Bare {
                        Ty::Bare
                    } else {
                        Ty::Known { dim: Dimension::NONE, scale: 1.0 }
                    }
                } else {
                    acc.ty
                }
            }
            _ => {
                // Transcendental functions need a dimensionless argument.
                let a = infos[0];
                if let Ty::Known { dim, .. } = a.ty {
                    if !dim.is_dimensionless() {
                        let d = Diagnostic::new(
                            codes::DIMENSIONED_ARGUMENT,
                            format!("`{}` needs a dimensionless argument, found `{dim}`", b.name()),
                            args[0].span,
                            format!("this is `{dim}`"),
                        )
                        .with_help("divide the argument by a reference quantity in the same unit");
                        self.push(d);
                    }
                }
                if a.ty == Ty::Bare {
                    Ty::Bare
                } else {
                    Ty::Known { dim: Dimension::NONE, scale: 1.0 }
                }
            }
        };
        let values: Option<Vec<f64>> = infos.iter().map(|i| i.value).collect();
        let value = values.and_then(|vals| {
            let x = vals[0];
            let bad = match b {
                Builtin::Log if x <= 0.0 => {
                    Some(format!("logarithm of the non-positive number {x}"))
                }
                Builtin::Sqrt if x < 0.0 => Some(format!("square root of the negative number {x}")),
                Builtin::Asin | Builtin::Acos if !(-1.0..=1.0).contains(&x) => {
                    Some(format!("`{}` of {x}, outside -1 .. 1", b.name()))
                }
                _ => None,
            };
            match bad {
                Some(msg) => {
                    self.undefined(args[0].span, msg, "outside the function's domain");
                    None
                }
                None => b.eval(&vals),
            }
        });
        let mut info = Info {
            ty,
            value,
            constant: all_constant,
            trajectory: infos.iter().any(|i| i.trajectory),
        };
        info = self.finite(e.span, info);
        info
    }

    fn user_call(&mut self, e: &'a Expr, f: SymbolId, args: &'a [Expr], cx: &Cx) -> Info {
        let params = self.sym(f).params.clone();
        let fname = self.sym(f).name.clone();
        let mut infos: Vec<Info> = args.iter().map(|a| self.expr(a, cx)).collect();
        // Arguments enter the function in SI: bare arguments are plain SI numbers.
        for (a, i) in args.iter().zip(infos.iter_mut()) {
            self.settle(a, i, Ty::Unknown);
        }
        let declared = self.fn_decls.get(&f).map_or(0, |d| d.params.len());
        if args.len() != declared {
            let d = Diagnostic::new(
                codes::WRONG_ARITY,
                format!(
                    "`{fname}` takes {} but {} given",
                    plural(declared, "argument"),
                    given(args.len())
                ),
                e.span,
                format!("expected {}", plural(declared, "argument")),
            )
            .with_label(self.sym(f).name_span, "defined here");
            self.push(d);
            return Info::poisoned();
        }
        if cx.place.is_model() && self.recording {
            self.model_fns.insert(f);
        }
        let constant = infos.iter().all(|i| i.constant);
        let trajectory = infos.iter().any(|i| i.trajectory);
        let worth = infos.iter().any(|i| matches!(i.ty, Ty::Known { .. } | Ty::Weighted { .. }))
            || infos.iter().all(|i| i.value.is_some());
        let body = self.fn_decls.get(&f).map(|d| &d.body);
        let (Some(body), false, true, true) =
            (body, self.recursive.contains(&f), worth, self.expansions < EXPANSION_BUDGET)
        else {
            return Info { ty: Ty::Unknown, value: None, constant, trajectory };
        };
        if self.nesting >= MAX_DEFINITION_NESTING {
            self.too_deep(
                e.span,
                format!("more than {MAX_DEFINITION_NESTING} definitions open at this call"),
            );
            return Info::poisoned();
        }
        self.expansions += 1;
        let env: HashMap<SymbolId, Info> =
            params.iter().copied().zip(infos.iter().copied()).collect();
        let inner = Cx { place: Place::Fn(f), in_integral: false, call: Some(Rc::new(env)) };
        let top = self.recording;
        self.recording = false;
        let saved = std::mem::take(&mut self.a.diagnostics);
        self.nesting += 1;
        let r = self.expr(body, &inner);
        self.nesting -= 1;
        let found = std::mem::replace(&mut self.a.diagnostics, saved);
        self.recording = top;
        for d in found {
            let unitish = [
                codes::UNIT_MISMATCH,
                codes::DIMENSIONED_ARGUMENT,
                codes::INVALID_EXPONENT,
                codes::UNDEFINED_CONSTANT,
            ]
            .contains(&d.code);
            if !unitish || self.seen.contains(&(d.code.id, d.primary.span)) {
                continue;
            }
            if top {
                let mut w = Diagnostic::new(
                    d.code,
                    format!("{} in this call of `{fname}`", d.message),
                    e.span,
                    "with these arguments",
                )
                .with_label(d.primary.span, d.primary.message.clone());
                w.notes = d.notes.clone();
                w.help = d.help.clone();
                self.push(w);
            } else {
                self.a.diagnostics.push(d);
            }
        }
        Info { ty: r.ty, value: if constant { r.value } else { None }, constant, trajectory }
    }
}

/// The type of `l * r` (or `l / r`).
fn product(l: Ty, r: Ty, div: bool) -> Ty {
    let r = if div {
        match r {
            Ty::Known { dim, scale } => Ty::Known { dim: dim.inverse(), scale: 1.0 / scale },
            Ty::Weighted { dim, scale } => Ty::Weighted { dim: dim.inverse(), scale: 1.0 / scale },
            other => other,
        }
    } else {
        r
    };
    match (l, r) {
        (Ty::Bare, Ty::Bare) => Ty::Bare,
        (Ty::Unknown, _) | (_, Ty::Unknown) => Ty::Unknown,
        (Ty::Bare, Ty::Known { dim, scale } | Ty::Weighted { dim, scale })
        | (Ty::Known { dim, scale } | Ty::Weighted { dim, scale }, Ty::Bare) => {
            Ty::Weighted { dim, scale }
        }
        (Ty::Known { dim: a, scale: s }, Ty::Known { dim: b, scale: t }) => match a.checked_mul(&b)
        {
            Some(dim) => Ty::Known { dim, scale: s * t },
            None => Ty::Unknown,
        },
        (
            Ty::Known { dim: a, scale: s } | Ty::Weighted { dim: a, scale: s },
            Ty::Known { dim: b, scale: t } | Ty::Weighted { dim: b, scale: t },
        ) => match a.checked_mul(&b) {
            Some(dim) => Ty::Weighted { dim, scale: s * t },
            None => Ty::Unknown,
        },
    }
}

fn plural(n: usize, word: &str) -> String {
    if n == 1 {
        format!("1 {word}")
    } else {
        format!("{n} {word}s")
    }
}

fn given(n: usize) -> String {
    if n == 1 {
        "1 was".to_string()
    } else {
        format!("{n} were")
    }
}
