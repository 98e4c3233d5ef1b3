//! costate-lower: checked problem -> numeric model (SI units) plus a source map back to spans.
//!
//! [`lower`] reads the syntax tree and the checker's [`Analysis`] and builds a
//! [`costate_model::Ocp`]: running functions (dynamics, integrands, path rows) over
//! `[t, x, u, p]`, endpoint functions (objective, boundary rows, expectation targets) over
//! `[t0, tf, x0, xf, p, q]`, bounds, guesses, scales and the horizon. Alongside it comes a
//! [`SourceMap`] from every variable index and function row back to its declaration or entry,
//! and the `expect` entries in evaluable form ([`LoweredExpectation`]).
//!
//! Everything reaching the model is SI (see [`expr`] for how numbers are converted); the
//! dynamics are derivatives with respect to the independent variable in SI (per second for a
//! time in minutes). Scaling a free end time onto a fixed interval is the transcription's
//! business, not ours. A `maximize` is lowered as the negated expression with
//! `Ocp::maximize = true`.
//!
//! Each `integral(..)` occurrence in the cost and in boundary constraints becomes one integrand
//! (an output of `Ocp::integrands`) and one `q` input, in source order (cost first, then
//! boundary constraints); occurrences with identical integrands (the same graph node, since the
//! graph is hash-consed) share one `q`. User functions are inlined.
//!
//! Architecture invariant: pure (no IO, no async); never solves; never re-checks what the
//! checker judged. Errors are [`Diagnostic`]s: the analysis's own errors, or the lowering codes
//! in [`codes`].

pub mod codes;
mod expr;
pub mod source_map;
mod vars;

use costate_check::{Analysis, ConstraintKind, ExpectTarget, SolveSettings, Tolerance, Ty};
use costate_model::{Bounds, Function, NodeId, Ocp, UnaryOp};
use costate_syntax::ast::{self, ExprKind, Item, Sense};
use costate_syntax::{Diagnostic, Span};

pub use expr::{show, MAX_CALL_DEPTH};
pub use source_map::{CostSource, IntegralSource, RowSource, SourceMap, VarSource};

/// A lowered problem, ready for the solver, with the way back to the source.
#[derive(Clone, Debug)]
pub struct Lowered {
    pub ocp: Ocp,
    pub source_map: SourceMap,
    /// The `solve` block, validated by the checker (defaults where not written).
    pub settings: SolveSettings,
    /// The `expect` entries, in source order.
    pub expectations: Vec<LoweredExpectation>,
}

/// What an expectation compares.
#[derive(Clone, Debug)]
pub enum Target {
    /// The optimal cost as the user's sense states it (not negated for `maximize`).
    Cost,
    /// An endpoint function (inputs `[t0, tf, x0, xf, p, q]` as in [`Ocp::endpoint_layout`])
    /// with one output, in SI.
    Expr(Box<Function>),
}

/// How close the found value must be to the expected one.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ExpectTolerance {
    /// `|found - expected| <= tol`, in SI.
    Absolute(f64),
    /// `|found - expected| <= fraction * |expected|` (`within 5%` is 0.05).
    Relative(f64),
}

impl ExpectTolerance {
    /// Whether `found` meets `expected` within this tolerance.
    pub fn holds(&self, expected: f64, found: f64) -> bool {
        let err = (found - expected).abs();
        match *self {
            ExpectTolerance::Absolute(t) => err <= t,
            ExpectTolerance::Relative(f) => err <= f * expected.abs(),
        }
    }
}

/// One `target == value within tolerance` entry.
#[derive(Clone, Debug)]
pub struct LoweredExpectation {
    pub target: Target,
    /// Expected value in SI.
    pub value_si: f64,
    pub tolerance: ExpectTolerance,
    /// SI value of one unit of the unit the user wrote the expectation in: divide SI values by
    /// it to report them as written. 1 for `cost`.
    pub display_scale: f64,
    /// Text of that unit (`km`, `min`), or of the SI dimension when the target is in SI units;
    /// `None` when the target has no known unit or is dimensionless.
    pub unit: Option<String>,
    /// The target as written (`end(x)`, `cost`), for tables.
    pub text: String,
    /// The whole entry.
    pub span: Span,
    pub target_span: Span,
}

/// Lowers a checked file. `Err` holds the analysis's error diagnostics when it has any (nothing
/// is lowered then), or the lowering's own findings ([`codes`]).
pub fn lower(file: &ast::File, analysis: &Analysis) -> Result<Lowered, Vec<Diagnostic>> {
    if analysis.has_errors() {
        return Err(analysis.diagnostics.iter().filter(|d| d.is_error()).cloned().collect());
    }
    let mut lw = expr::Lowerer::new(analysis);
    let out = build(file, analysis, &mut lw);
    let mut diags = lw.diags;
    // One broken helper called from many places reports once.
    let mut seen = std::collections::HashSet::new();
    diags.retain(|d| seen.insert((d.code.id, d.primary.span, d.message.clone())));
    match out {
        Some(l) if diags.is_empty() => Ok(l),
        _ => Err(diags),
    }
}

/// A source entry lowered to one function row.
struct RowDraft {
    node: Option<NodeId>,
    bounds: Bounds,
    source: RowSource,
}

fn build(file: &ast::File, a: &Analysis, lw: &mut expr::Lowerer<'_>) -> Option<Lowered> {
    let problem_span =
        file.name.as_ref().map_or(Span::new(file.span.start, file.span.start), |n| n.span);
    let Some(time) = vars::time_symbol(a) else {
        lw.inconsistent(
            problem_span,
            "cannot lower a problem without an independent variable",
            "no `time`",
        );
        return None;
    };
    let horizon = match vars::horizon(time) {
        Ok(h) => Some(h),
        Err(d) => {
            lw.diags.push(*d);
            None
        }
    };
    let states: Vec<_> = a.states.iter().map(|s| vars::state_info(a.symbol(*s))).collect();
    let controls: Vec<_> = a.controls.iter().map(|s| vars::control_info(a.symbol(*s))).collect();
    let params: Vec<_> = a.params.iter().map(|s| vars::param_info(a.symbol(*s))).collect();
    let mut all_finite = true;
    for sym in a.states.iter().chain(&a.controls).chain(&a.params).map(|id| a.symbol(*id)) {
        let at = &sym.attrs;
        let guess_ok = at.guess.is_none_or(f64::is_finite);
        let scale_ok = at.scale.is_none_or(f64::is_finite);
        if !(guess_ok && scale_ok) {
            all_finite = false;
            let d = Diagnostic::new(
                codes::NON_FINITE_VALUE,
                format!("the guess or scale of `{}` is not a finite number in SI units", sym.name),
                sym.decl_span,
                "declared here",
            )
            .with_help("write the value in a larger unit or with fewer digits");
            lw.diags.push(d);
        }
    }

    // Dynamics, in state order.
    let mut dynamics = Vec::new();
    let mut dynamics_src = Vec::new();
    for &s in &a.states {
        let sym = a.symbol(s);
        match a.dynamics.iter().find(|d| d.state == s) {
            Some(eq) => {
                dynamics.push(lw.lower(&eq.rhs, expr::Cx::Running));
                dynamics_src.push(RowSource {
                    span: eq.span,
                    expr_span: eq.rhs.span,
                    label: None,
                    description: format!("dynamics of `{}`", sym.name),
                });
            }
            None => {
                lw.inconsistent(
                    sym.name_span,
                    format!("cannot lower state `{}`: it has no dynamics", sym.name),
                    "no equation",
                );
                dynamics.push(None);
            }
        }
    }

    // Cost first, so that its integrals come first.
    let Some(cost) = &a.cost else {
        lw.inconsistent(problem_span, "cannot lower a problem without a cost", "no `cost`");
        return None;
    };
    let cost_node = lw.lower(&cost.expr, expr::Cx::Endpoint { integrals: true });
    let sense_word = if cost.sense == Sense::Maximize { "maximize" } else { "minimize" };
    let objective_src = RowSource {
        span: cost.span,
        expr_span: cost.expr.span,
        label: None,
        description: format!("cost `{sense_word} {}`", show(&cost.expr)),
    };
    let objective = cost_node.map(|n| {
        if cost.sense == Sense::Maximize {
            lw.endpoint.unary(UnaryOp::Neg, n)
        } else {
            n
        }
    });

    let mut path = Vec::new();
    let mut boundary = Vec::new();
    for c in &a.constraints {
        let (cx, kind_word, out) = match c.kind {
            ConstraintKind::Path => (expr::Cx::Running, "path", &mut path),
            ConstraintKind::Boundary => {
                (expr::Cx::Endpoint { integrals: true }, "boundary", &mut boundary)
            }
        };
        let text = constraint_text(file, c);
        let name = match &c.label {
            Some(l) => format!("{kind_word} constraint `{l}`"),
            None => format!("{kind_word} constraint `{text}`"),
        };
        let n = c.rows.len();
        for (k, row) in c.rows.iter().enumerate() {
            let description =
                if n > 1 { format!("{name}, row {} of {n}", k + 1) } else { name.clone() };
            out.push(RowDraft {
                node: lw.lower(&row.expr, cx),
                bounds: Bounds { lo: row.lo, hi: row.hi },
                source: RowSource {
                    span: c.span,
                    expr_span: row.expr.span,
                    label: c.label.clone(),
                    description,
                },
            });
        }
    }

    // Expectations do not add integrals, so the endpoint layout is final after the boundary.
    lw.el.nq = lw.integrals.len();
    let mut expectations = Vec::new();
    let mut expectations_ok = true;
    for x in &a.expectations {
        let (target, text, (unit, display_scale)) = match &x.target {
            ExpectTarget::Cost => {
                (Some(Target::Cost), "cost".to_string(), cost_unit(a, &cost.expr))
            }
            ExpectTarget::Expr(e) => {
                let node = lw.lower(e, expr::Cx::Endpoint { integrals: false });
                let f = node.and_then(|n| compile(lw, true, &[n], x.target_span));
                (
                    f.map(|f| Target::Expr(Box::new(f))),
                    show(e),
                    expectation_unit(a, e, x.display_scale),
                )
            }
        };
        let Some(target) = target else {
            expectations_ok = false;
            continue;
        };
        let tolerance = match x.tolerance {
            Tolerance::Absolute(t) => ExpectTolerance::Absolute(t),
            Tolerance::Percent(p) => ExpectTolerance::Relative(p / 100.0),
        };
        expectations.push(LoweredExpectation {
            target,
            value_si: x.value,
            tolerance,
            display_scale,
            unit,
            text,
            span: x.span,
            target_span: x.target_span,
        });
    }

    let dynamics_nodes: Option<Vec<NodeId>> = dynamics.into_iter().collect();
    let path_nodes: Option<Vec<NodeId>> = path.iter().map(|r| r.node).collect();
    let boundary_nodes: Option<Vec<NodeId>> = boundary.iter().map(|r| r.node).collect();
    let (
        Some(horizon),
        Some(dynamics_nodes),
        Some(path_nodes),
        Some(boundary_nodes),
        Some(objective),
        true,
    ) = (
        horizon,
        dynamics_nodes,
        path_nodes,
        boundary_nodes,
        objective,
        all_finite && expectations_ok,
    )
    else {
        return None;
    };
    let integrand_nodes: Vec<NodeId> = lw.integrals.iter().map(|q| q.node).collect();
    let whole = file.span;
    let dynamics_f = compile(lw, false, &dynamics_nodes, whole)?;
    let integrands_f = compile(lw, false, &integrand_nodes, whole)?;
    let path_f = compile(lw, false, &path_nodes, whole)?;
    let objective_f = compile(lw, true, &[objective], cost.span)?;
    let boundary_f = compile(lw, true, &boundary_nodes, whole)?;

    let integrals = lw
        .integrals
        .iter()
        .map(|q| IntegralSource {
            row: RowSource {
                span: q.occurrences[0],
                expr_span: q.occurrences[0],
                label: None,
                description: format!("integrand of `{}`", q.text),
            },
            occurrences: q.occurrences.clone(),
        })
        .collect();
    let source_map = SourceMap {
        problem_name: file.name.as_ref().map_or(String::new(), |n| n.name.clone()),
        problem_span,
        time: vars::var_source(time),
        states: a.states.iter().map(|s| vars::var_source(a.symbol(*s))).collect(),
        controls: a.controls.iter().map(|s| vars::var_source(a.symbol(*s))).collect(),
        params: a.params.iter().map(|s| vars::var_source(a.symbol(*s))).collect(),
        dynamics: dynamics_src,
        integrals,
        path: path.iter().map(|r| r.source.clone()).collect(),
        objective: objective_src,
        boundary: boundary.iter().map(|r| r.source.clone()).collect(),
        cost: CostSource { span: cost.span, expr_span: cost.expr.span, sense: cost.sense },
    };
    let ocp = Ocp {
        horizon,
        states,
        controls,
        params,
        n_integrals: lw.integrals.len(),
        dynamics: dynamics_f,
        integrands: integrands_f,
        path: path_f,
        path_bounds: path.iter().map(|r| r.bounds).collect(),
        objective: objective_f,
        maximize: cost.sense == Sense::Maximize,
        boundary: boundary_f,
        boundary_bounds: boundary.iter().map(|r| r.bounds).collect(),
    };
    Some(Lowered { ocp, source_map, settings: a.settings.clone(), expectations })
}

/// Compiles outputs of the endpoint (`endpoint == true`) or running graph.
fn compile(
    lw: &mut expr::Lowerer<'_>,
    endpoint: bool,
    outputs: &[NodeId],
    span: Span,
) -> Option<Function> {
    let (graph, n) =
        if endpoint { (&mut lw.endpoint, lw.el.len()) } else { (&mut lw.running, lw.rl.len()) };
    match Function::try_compile(graph, n, outputs) {
        Ok(f) => Some(f),
        Err(e) => {
            lw.inconsistent(
                span,
                format!("cannot compile a lowered function: {e}"),
                "while lowering this",
            );
            None
        }
    }
}

/// `e0 op e1 [op e2]` of the source entry behind a normalised constraint, or its rows' text when
/// the entry is not in `file`.
fn constraint_text(file: &ast::File, c: &costate_check::Constraint) -> String {
    let entry = file.items.iter().find_map(|item| match item {
        Item::Path(b) | Item::Boundary(b) => b.entries.iter().find(|e| e.span == c.span),
        _ => None,
    });
    match entry {
        Some(e) => {
            let mut s = show(&e.first);
            for (op, _, x) in &e.rest {
                s.push(' ');
                s.push_str(op.symbol());
                s.push(' ');
                s.push_str(&show(x));
            }
            s
        }
        None => c.rows.iter().map(|r| show(&r.expr)).collect::<Vec<_>>().join(", "),
    }
}

/// Unit text and scale for reporting the cost: SI, named by its dimension when the checker
/// knows it.
fn cost_unit(a: &Analysis, cost: &ast::Expr) -> (Option<String>, f64) {
    match a.type_of(cost.span) {
        Some(Ty::Known { dim, .. }) if !dim.is_dimensionless() => (Some(dim.to_string()), 1.0),
        _ => (None, 1.0),
    }
}

/// Unit text for an expectation reported with `display_scale` (what the checker took the
/// expected value in): the unit of the state, time or parameter the target names
/// (`end(x)`, `p`); else a declared unit of the target's dimension and that scale; else, for a
/// target in SI, its dimension; else `None`.
fn expectation_unit(a: &Analysis, target: &ast::Expr, display_scale: f64) -> (Option<String>, f64) {
    let same = |s: f64| (s - display_scale).abs() <= 1e-12 * display_scale.abs();
    let mut e = target;
    while let ExprKind::Paren(x) = &e.kind {
        e = x;
    }
    let named = match &e.kind {
        ExprKind::Call { args, .. } if args.len() == 1 => match &args[0].kind {
            ExprKind::Name(id) => a.resolve(id.span),
            _ => None,
        },
        ExprKind::Name(id) => a.resolve(id.span),
        _ => None,
    };
    if let Some(u) = named.and_then(|s| s.unit.as_ref()).filter(|u| same(u.scale)) {
        return (Some(u.display.clone()), display_scale);
    }
    let Some(Ty::Known { dim, .. }) = a.type_of(target.span) else {
        return (None, display_scale);
    };
    if let Some(u) = a
        .symbols
        .iter()
        .filter_map(|s| s.unit.as_ref())
        .find(|u| u.dimension == dim && same(u.scale))
    {
        return (Some(u.display.clone()), display_scale);
    }
    let si = (same(1.0) && !dim.is_dimensionless()).then(|| dim.to_string());
    (si, display_scale)
}
