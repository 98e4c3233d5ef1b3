//! Dynamics, cost, path and boundary constraints, `solve` settings and expectations.

use std::collections::HashMap;

use costate_syntax::ast::{BinOp, Constraint as AstConstraint, Expr, ExprKind, Item, RelOp};
use costate_syntax::{Diagnostic, Span};

use super::decls::{did_you_mean, show};
use super::expr::{Cx, Info, Place};
use super::Checker;
use crate::analysis::{
    bounds_for, Constraint, ConstraintKind, Cost, DynamicsEq, ExpectTarget, Expectation, Row,
    SymbolId, SymbolKind, Tolerance, Ty,
};
use crate::codes;
use crate::settings::{key_def, Value, ValueKind, KEYS};
use crate::units::Dimension;

impl<'a> Checker<'a> {
    pub(super) fn check_dynamics(&mut self) {
        let file = self.file;
        let mut first_eq: HashMap<SymbolId, Span> = HashMap::new();
        let mut eqs = Vec::new();
        for item in &file.items {
            let Item::Dynamics(b) = item else { continue };
            for eq in &b.entries {
                let cx = Cx::new(Place::Dynamics);
                let target = match self.globals.get(&eq.state.name).copied() {
                    None => {
                        let states: Vec<&str> =
                            self.a.states.iter().map(|s| self.sym(*s).name.as_str()).collect();
                        let mut d = Diagnostic::new(
                            codes::UNKNOWN_NAME,
                            format!("unknown state `{}`", eq.state.name),
                            eq.state.span,
                            "not declared",
                        );
                        if let Some(h) = did_you_mean(&eq.state.name, states) {
                            d = d.with_help(h);
                        } else {
                            d = d.with_help(format!(
                                "declare it in a `state` block: `state {{ {} }}`",
                                eq.state.name
                            ));
                        }
                        self.push(d);
                        None
                    }
                    Some(id) => {
                        self.a.resolutions.insert(eq.state.span, id);
                        let s = self.sym(id);
                        if s.kind != SymbolKind::State {
                            let d = Diagnostic::new(
                                codes::DYNAMICS_FOR_NON_STATE,
                                format!("`{}` is a {}, not a state", s.name, s.kind.describe()),
                                eq.lhs_span,
                                "only states have dynamics",
                            )
                            .with_label(
                                s.name_span,
                                format!("declared as a {} here", s.kind.describe()),
                            )
                            .with_help("declare it in a `state` block, or remove the equation");
                            self.push(d);
                            None
                        } else if let Some(&prev) = first_eq.get(&id) {
                            let d = Diagnostic::new(
                                codes::DUPLICATE_DYNAMICS,
                                format!("state `{}` has two dynamics equations", s.name),
                                eq.lhs_span,
                                "second equation",
                            )
                            .with_label(prev, "first equation")
                            .with_help("keep one equation per state");
                            self.push(d);
                            None
                        } else {
                            first_eq.insert(id, eq.lhs_span);
                            Some(id)
                        }
                    }
                };
                let mut info = self.expr(&eq.rhs, &cx);
                let Some(id) = target else { continue };
                // The right side is the state's rate: its unit per the independent variable's.
                let want = match (self.var_ty(id), self.time_ty()) {
                    (Ty::Known { dim: x, scale: sx }, Ty::Known { dim: t, scale: st }) => {
                        x.checked_div(&t).map(|dim| Ty::Known { dim, scale: sx / st })
                    }
                    _ => None,
                };
                self.settle(&eq.rhs, &mut info, want.unwrap_or(Ty::Unknown));
                if let (Some(Ty::Known { dim: want_dim, .. }), Ty::Known { dim, .. }) =
                    (want, info.ty)
                {
                    if dim != want_dim {
                        let s = self.sym(id);
                        let xu = s.unit.as_ref().map_or(String::new(), |u| u.display.clone());
                        let tu = self
                            .a
                            .time
                            .and_then(|t| self.sym(t).unit.as_ref().map(|u| u.display.clone()))
                            .unwrap_or_default();
                        let d = Diagnostic::new(
                            codes::DYNAMICS_UNIT,
                            format!("the rate of `{}` must be in `{want_dim}`, found `{dim}`", s.name),
                            eq.rhs.span,
                            format!("this is `{dim}`"),
                        )
                        .with_label(eq.lhs_span, format!("`{xu}` per `{tu}`"))
                        .with_help("the right side is the derivative of the state with respect to the independent variable");
                        self.push(d);
                    }
                }
                let state_index = self.sym(id).index;
                eqs.push(DynamicsEq { state: id, state_index, rhs: eq.rhs.clone(), span: eq.span });
            }
        }
        eqs.sort_by_key(|d| d.state_index);
        self.a.dynamics = eqs;
    }

    pub(super) fn check_cost(&mut self) {
        let file = self.file;
        let mut first: Option<Span> = None;
        for item in &file.items {
            let Item::Cost(b) = item else { continue };
            for c in &b.entries {
                let mut info = self.expr(&c.expr, &Cx::new(Place::Cost));
                self.settle(&c.expr, &mut info, Ty::Unknown);
                if let Some(prev) = first {
                    let d = Diagnostic::new(
                        codes::DUPLICATE_COST,
                        "the problem has more than one cost",
                        c.sense_span,
                        "second objective",
                    )
                    .with_label(prev, "first objective")
                    .with_help("combine them into one expression, e.g. `minimize a + 0.1 * b`");
                    self.push(d);
                    continue;
                }
                first = Some(c.sense_span);
                self.a.cost = Some(Cost { sense: c.sense, expr: c.expr.clone(), span: c.span });
            }
        }
    }

    pub(super) fn check_constraints(&mut self) {
        let file = self.file;
        for item in &file.items {
            let (b, kind) = match item {
                Item::Path(b) => (b, ConstraintKind::Path),
                Item::Boundary(b) => (b, ConstraintKind::Boundary),
                _ => continue,
            };
            for c in &b.entries {
                if let Some(out) = self.constraint(c, kind) {
                    self.a.constraints.push(out);
                }
            }
        }
    }

    fn constraint(&mut self, c: &'a AstConstraint, kind: ConstraintKind) -> Option<Constraint> {
        let place = if kind == ConstraintKind::Path { Place::Path } else { Place::Boundary };
        let cx = Cx::new(place);
        let mut exprs: Vec<&'a Expr> = vec![&c.first];
        exprs.extend(c.rest.iter().map(|(_, _, e)| e));
        let mut infos: Vec<Info> = exprs.iter().map(|e| self.expr(e, &cx)).collect();
        if c.rest.is_empty() {
            return None; // the parser reports the missing relation
        }
        let shape_ok = self.chain_shape(c);
        for i in 0..c.rest.len() {
            let what = if c.rest[i].0 == RelOp::Eq { "equate" } else { "compare" };
            let (l, r) = infos.split_at_mut(i + 1);
            let ty = self.unify(exprs[i], &mut l[i], exprs[i + 1], &mut r[0], what);
            let _ = ty;
        }
        if infos.iter().all(|i| i.constant) {
            let d = Diagnostic::new(
                codes::CONSTANT_RELATION,
                "this constraint involves only constants",
                c.first.span.to(exprs[exprs.len() - 1].span),
                "always true or always false",
            )
            .with_help("constrain a state, control or parameter, or remove the constraint");
            self.push(d);
            return None;
        }
        if kind == ConstraintKind::Path && !infos.iter().any(|i| i.trajectory) {
            let d = Diagnostic::new(
                codes::PATH_WITHOUT_TRAJECTORY,
                "this path constraint involves no state, control or independent variable",
                c.first.span.to(exprs[exprs.len() - 1].span),
                "the same at every instant",
            )
            .with_help("move it to a `boundary` block");
            self.push(d);
        }
        if !shape_ok {
            return None;
        }
        let rows =
            normalise(&exprs, &infos, &c.rest.iter().map(|(op, _, _)| *op).collect::<Vec<_>>());
        Some(Constraint {
            kind,
            label: c.label.as_ref().map(|l| l.name.clone()),
            span: c.span,
            rows,
        })
    }

    /// Reports chains that are not `a op b` or `lo <= e <= hi` (one direction, no `==`).
    fn chain_shape(&mut self, c: &AstConstraint) -> bool {
        if c.rest.len() > 2 {
            let (_, span, _) = &c.rest[2];
            let d = Diagnostic::new(
                codes::INVALID_CHAIN,
                "a relation chain has at most two comparisons",
                *span,
                "third comparison",
            )
            .with_help("split it into separate constraints");
            self.push(d);
            return false;
        }
        if c.rest.len() == 2 {
            let (o1, s1, _) = &c.rest[0];
            let (o2, s2, _) = &c.rest[1];
            if *o1 == RelOp::Eq || *o2 == RelOp::Eq {
                let span = if *o1 == RelOp::Eq { *s1 } else { *s2 };
                let d = Diagnostic::new(
                    codes::INVALID_CHAIN,
                    "`==` cannot be part of a chain",
                    span,
                    "in a chain",
                )
                .with_help("write the equality as its own constraint");
                self.push(d);
                return false;
            }
            if o1 != o2 {
                let d = Diagnostic::new(
                    codes::INVALID_CHAIN,
                    "a relation chain must keep one direction",
                    *s2,
                    format!("`{}` here", o2.symbol()),
                )
                .with_label(*s1, format!("`{}` here", o1.symbol()))
                .with_help("write `lo <= e <= hi` or `hi >= e >= lo`");
                self.push(d);
                return false;
            }
        }
        true
    }

    pub(super) fn check_settings(&mut self) {
        let file = self.file;
        let mut seen: HashMap<&str, Span> = HashMap::new();
        for item in &file.items {
            let Item::Solve(b) = item else { continue };
            for s in &b.entries {
                let key = s.key.name.as_str();
                let Some(def) = key_def(key) else {
                    let mut d = Diagnostic::new(
                        codes::UNKNOWN_SETTING,
                        format!("unknown setting `{key}`"),
                        s.key.span,
                        "not a `solve` key",
                    );
                    d = match did_you_mean(key, KEYS.iter().map(|k| k.key)) {
                        Some(h) => d.with_help(h),
                        None => {
                            let all: Vec<&str> = KEYS.iter().map(|k| k.key).collect();
                            d.with_help(format!("known settings: {}", all.join(", ")))
                        }
                    };
                    self.push(d);
                    continue;
                };
                if let Some(&prev) = seen.get(key) {
                    let d = Diagnostic::new(
                        codes::DUPLICATE_DEFINITION,
                        format!("setting `{key}` is given twice"),
                        s.key.span,
                        "second one",
                    )
                    .with_label(prev, "first given here")
                    .with_help("keep one of them");
                    self.push(d);
                    continue;
                }
                seen.insert(def.key, s.key.span);
                if let Some(v) = self.setting_value(def.key, def.kind, &s.value) {
                    self.a.settings.set(def.key, v);
                }
            }
        }
    }

    fn setting_value(
        &mut self,
        key: &'static str,
        kind: ValueKind,
        e: &'a Expr,
    ) -> Option<Value<'static>> {
        let invalid = |msg: String, label: &str, help: String| {
            Diagnostic::new(codes::INVALID_SETTING, msg, e.span, label).with_help(help)
        };
        if let ValueKind::Choice(options) = kind {
            let list = options.iter().map(|o| format!("`{o}`")).collect::<Vec<_>>().join(" or ");
            let chosen = match &e.kind {
                ExprKind::Name(id) => options.iter().find(|o| **o == id.name).copied(),
                _ => None,
            };
            if chosen.is_none() {
                let help = match &e.kind {
                    ExprKind::Name(id) => did_you_mean(&id.name, options.iter().copied()),
                    _ => None,
                }
                .unwrap_or_else(|| format!("write `{key} = {}`", options[0]));
                let d = invalid(format!("`{key}` must be {list}"), "not one of the choices", help);
                self.push(d);
            }
            return chosen.map(Value::Choice);
        }
        let mut info = self.expr(e, &Cx::new(Place::Setting));
        let seconds = Ty::Known { dim: Dimension::from_ints([0, 0, 1, 0, 0, 0, 0]), scale: 1.0 };
        match kind {
            ValueKind::Duration => {
                self.settle(e, &mut info, seconds);
                if let Ty::Known { dim, .. } = info.ty {
                    if Some(dim) != seconds.dimension() {
                        let d = invalid(
                            format!("`{key}` is a duration, found `{dim}`"),
                            "not a time",
                            format!("write `{key} = 60` (seconds) or `{key} = 2 [min]`"),
                        );
                        self.push(d);
                        return None;
                    }
                }
            }
            _ => {
                self.settle(e, &mut info, Ty::Unknown);
                if let Ty::Known { dim, .. } = info.ty {
                    if !dim.is_dimensionless() {
                        let d = invalid(
                            format!("`{key}` takes a plain number, found `{dim}`"),
                            "has a unit",
                            "leave the unit off".to_string(),
                        );
                        self.push(d);
                        return None;
                    }
                }
            }
        }
        let v = info.value?;
        match kind {
            ValueKind::Integer { min } => {
                if v.fract() != 0.0 {
                    let d = invalid(
                        format!("`{key}` must be a whole number, found {v}"),
                        "not a whole number",
                        format!("write `{key} = {}`", v.round().max(min as f64)),
                    );
                    self.push(d);
                    return None;
                }
                if v < min as f64 || v > 1e9 {
                    let d = invalid(
                        format!("`{key}` must be between {min} and 1000000000, found {v}"),
                        "out of range",
                        format!(
                            "write `{key} = {}`",
                            if v < min as f64 { min as f64 } else { 1e9 }
                        ),
                    );
                    self.push(d);
                    return None;
                }
            }
            ValueKind::Between { lo, hi } => {
                if !(lo..=hi).contains(&v) {
                    let d = invalid(
                        format!("`{key}` must be between {lo:e} and {hi:e}, found {v:e}"),
                        "out of range",
                        format!(
                            "the default is {}; {} is the {} sensible value",
                            key_def(key).map_or("", |k| k.default),
                            if v < lo { lo } else { hi },
                            if v < lo { "smallest" } else { "largest" }
                        ),
                    );
                    self.push(d);
                    return None;
                }
            }
            ValueKind::Duration => {
                if v <= 0.0 {
                    let d = invalid(
                        format!("`{key}` must be positive, found {v}"),
                        "not positive",
                        format!("the default is {}", key_def(key).map_or("", |k| k.default)),
                    );
                    self.push(d);
                    return None;
                }
            }
            ValueKind::Choice(_) => return None,
        }
        Some(Value::Number(v))
    }

    pub(super) fn check_expectations(&mut self) {
        let file = self.file;
        for item in &file.items {
            let Item::Expect(b) = item else { continue };
            for x in &b.entries {
                let is_cost = matches!(&x.target.kind, ExprKind::Name(id) if id.name == "cost")
                    && !self.globals.contains_key("cost");
                let (target, tty) = if is_cost {
                    (ExpectTarget::Cost, Ty::Unknown)
                } else {
                    let mut info = self.expr(&x.target, &Cx::new(Place::ExpectTarget));
                    if info.constant {
                        let d = Diagnostic::new(
                            codes::CONSTANT_RELATION,
                            "this expectation's target involves only constants",
                            x.target.span,
                            "does not depend on the solution",
                        )
                        .with_help("expect `cost`, or an expression of `start(..)`, `end(..)` and parameters");
                        self.push(d);
                    }
                    self.settle(&x.target, &mut info, Ty::Unknown);
                    (ExpectTarget::Expr(x.target.clone()), info.ty)
                };
                let value = self.expected_number(&x.value, tty, "expected value");
                let tolerance = if x.percent {
                    let mut info = self.expr(&x.tolerance, &Cx::new(Place::ExpectValue));
                    if matches!(info.ty, Ty::Known { .. }) {
                        let d = Diagnostic::new(
                            codes::INVALID_TOLERANCE,
                            "a percent tolerance takes a plain number",
                            x.tolerance.span,
                            "has a unit",
                        )
                        .with_help("leave the unit off, e.g. `within 5%`");
                        self.push(d);
                        None
                    } else {
                        self.settle(&x.tolerance, &mut info, Ty::Unknown);
                        info.value.map(Tolerance::Percent)
                    }
                } else {
                    self.expected_number(&x.tolerance, tty, "tolerance").map(Tolerance::Absolute)
                };
                let tol_value = match tolerance {
                    Some(Tolerance::Percent(t) | Tolerance::Absolute(t)) => Some(t),
                    None => None,
                };
                if let Some(t) = tol_value.filter(|t| *t < 0.0) {
                    let d = Diagnostic::new(
                        codes::INVALID_TOLERANCE,
                        format!("a tolerance cannot be negative, found {}", show(t, tty.scale())),
                        x.tolerance.span,
                        "negative",
                    )
                    .with_help("write the tolerance as a positive number");
                    self.push(d);
                    continue;
                }
                if let (Some(value), Some(tolerance)) = (value, tolerance) {
                    self.a.expectations.push(Expectation {
                        target,
                        target_span: x.target.span,
                        value,
                        tolerance,
                        display_scale: tty.scale(),
                        span: x.span,
                    });
                }
            }
        }
    }

    /// A constant in the target's unit (bare numbers adapt to it), in SI.
    fn expected_number(&mut self, e: &'a Expr, target: Ty, what: &str) -> Option<f64> {
        let mut info = self.expr(e, &Cx::new(Place::ExpectValue));
        if let (Ty::Known { dim, .. }, Ty::Known { dim: want, .. }) = (info.ty, target) {
            if dim != want {
                let d = Diagnostic::new(
                    codes::UNIT_MISMATCH,
                    format!("the {what} is in `{dim}` but the target is in `{want}`"),
                    e.span,
                    format!("this is `{dim}`"),
                )
                .with_help("write it in a unit of the target's dimension, or leave the unit off");
                self.push(d);
                return None;
            }
        }
        self.settle(e, &mut info, target);
        info.value
    }
}

/// Rows of a well-shaped relation `e0 op e1 [op e2]`; see [`Constraint`].
fn normalise(exprs: &[&Expr], infos: &[Info], ops: &[RelOp]) -> Vec<Row> {
    let c = |i: usize| infos[i].value.filter(|_| infos[i].constant);
    if ops.len() == 2 {
        if let (Some(a), Some(b)) = (c(0), c(2)) {
            let (lo, hi) = if ops[0] == RelOp::Le { (a, b) } else { (b, a) };
            return vec![Row { expr: exprs[1].clone(), lo, hi }];
        }
        let mut rows =
            single(exprs[0], c(0), infos[0].constant, exprs[1], c(1), infos[1].constant, ops[0]);
        rows.extend(single(
            exprs[1],
            c(1),
            infos[1].constant,
            exprs[2],
            c(2),
            infos[2].constant,
            ops[1],
        ));
        return rows;
    }
    single(exprs[0], c(0), infos[0].constant, exprs[1], c(1), infos[1].constant, ops[0])
}

fn single(
    a: &Expr,
    av: Option<f64>,
    a_const: bool,
    b: &Expr,
    bv: Option<f64>,
    b_const: bool,
    op: RelOp,
) -> Vec<Row> {
    if let Some(v) = bv {
        let (lo, hi) = bounds_for(op, v, false);
        return vec![Row { expr: a.clone(), lo, hi }];
    }
    if let Some(v) = av {
        let (lo, hi) = bounds_for(op, v, true);
        return vec![Row { expr: b.clone(), lo, hi }];
    }
    if a_const || b_const {
        return Vec::new(); // a constant side that failed to fold was reported
    }
    let diff = Expr {
        kind: ExprKind::Binary {
            op: BinOp::Sub,
            lhs: Box::new(a.clone()),
            rhs: Box::new(b.clone()),
        },
        span: a.span.to(b.span),
    };
    let (lo, hi) = bounds_for(op, 0.0, false);
    vec![Row { expr: diff, lo, hi }]
}
