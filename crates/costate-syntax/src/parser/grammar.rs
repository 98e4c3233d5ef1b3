//! The chumsky grammar: expressions, units and one parser per kind of entry.
//!
//! Each parser here consumes exactly one entry (a line of a block, or one line item) that the
//! driver in `mod.rs` has already cut out of the token stream, so a failure never reaches past
//! the entry. Near-miss spellings that have a clear fix (`<` for `<=`, a missing `=` or prime,
//! `minimise`) are accepted by permissive branches that record a precise diagnostic in the
//! parse state and still build the node; everything else fails and the driver turns chumsky's
//! error into an `unexpected-token` diagnostic.
//!
//! This module knows nothing of blocks, items, newlines or comments.

use chumsky::input::MappedInput;
use chumsky::inspector::Inspector;
use chumsky::prelude::*;

use super::tok::Tok;
use crate::ast::*;
use crate::{closest_name, codes, Diagnostic, Span};

/// Diagnostics recorded while parsing. Rewound with chumsky's backtracking so an abandoned
/// alternative leaves no trace. Parsers that report must not sit under `ignored`,
/// `then_ignore`, `ignore_then`'s left side or `to`: chumsky runs those in check mode, where
/// mapping closures are skipped.
#[derive(Default)]
pub(crate) struct Sink {
    pub diagnostics: Vec<Diagnostic>,
}

impl<'src, I: chumsky::input::Input<'src>> Inspector<'src, I> for Sink {
    type Checkpoint = usize;

    fn on_token(&mut self, _: &I::Token) {}

    fn on_save<'parse>(&self, _: &chumsky::input::Cursor<'src, 'parse, I>) -> usize {
        self.diagnostics.len()
    }

    fn on_rewind<'parse>(&mut self, marker: &chumsky::input::Checkpoint<'src, 'parse, I, usize>) {
        self.diagnostics.truncate(*marker.inspector());
    }
}

pub(crate) type Spanned<'a> = (Tok<'a>, SimpleSpan);
pub(crate) type SplitFn<'a> = fn(&'a Spanned<'a>) -> (&'a Tok<'a>, &'a SimpleSpan);
pub(crate) type In<'a> = MappedInput<Tok<'a>, SimpleSpan, &'a [Spanned<'a>], SplitFn<'a>>;
pub(crate) type Ex<'a> = extra::Full<Rich<'a, Tok<'a>, SimpleSpan>, Sink, ()>;
pub(crate) type P<'a, T> = Boxed<'a, 'a, In<'a>, T, Ex<'a>>;

pub(crate) fn split<'a>(t: &'a Spanned<'a>) -> (&'a Tok<'a>, &'a SimpleSpan) {
    (&t.0, &t.1)
}

pub(crate) fn sp(s: SimpleSpan) -> Span {
    Span::new(s.start, s.end)
}

/// Attribute words of declarations.
pub(crate) const ATTRIBUTES: &[&str] = &["start", "end", "in", "guess", "scale"];

/// The parsers for every kind of entry, built once per `parse` call.
pub(crate) struct Grammar<'a> {
    pub header: P<'a, Option<Ident>>,
    pub const_decl: P<'a, Option<ConstDecl>>,
    pub fn_decl: P<'a, Option<FnDecl>>,
    pub var_decl: P<'a, Option<VarDecl>>,
    pub equation: P<'a, Option<Equation>>,
    pub cost: P<'a, Option<CostStmt>>,
    pub constraint: P<'a, Option<Constraint>>,
    pub setting: P<'a, Option<Setting>>,
    pub expectation: P<'a, Option<Expectation>>,
}

fn report<'a>(e: &mut chumsky::input::MapExtra<'a, '_, In<'a>, Ex<'a>>, d: Diagnostic) {
    e.state().diagnostics.push(d);
}

fn punct<'a>(t: Tok<'a>) -> impl Parser<'a, In<'a>, Span, Ex<'a>> + Clone {
    just(t).map_with(|_, e| sp(e.span()))
}

fn ident<'a>() -> impl Parser<'a, In<'a>, Ident, Ex<'a>> + Clone {
    select! { Tok::Ident(name) = e => Ident { name: name.to_string(), span: sp(e.span()) } }
        .labelled("a name")
}

fn keyword<'a>(
    word: &'static str,
    label: &'static str,
) -> impl Parser<'a, In<'a>, Span, Ex<'a>> + Clone {
    select! { Tok::Ident(w) = e if w == word => sp(e.span()) }.labelled(label)
}

/// Where a definition, equation or setting lacks its `=`: accept the entry, say what is missing.
fn equals_or_report<'a>() -> impl Parser<'a, In<'a>, bool, Ex<'a>> + Clone {
    just(Tok::Eq).or_not().map(|eq| eq.is_some())
}

fn missing_equals(lhs: &str, span: Span) -> Diagnostic {
    Diagnostic::new(
        codes::MISSING_EQUALS,
        format!("missing `=` after `{lhs}`"),
        span,
        "expected `=` after this",
    )
    .with_help(format!("write `{lhs} = ...`"))
}

/// The inside of a unit bracket, validated by hand so every mistake gets a unit-specific
/// message: `1`, `m`, `kg*m^2/s^2`, `1/s`, `s^-1`.
fn unit_from_tokens(
    open: Span,
    body: &[(Tok<'_>, SimpleSpan)],
    close: Span,
) -> Result<UnitExpr, Box<Diagnostic>> {
    let span = open.to(close);
    let invalid = |at: Span, label: &str| {
        Box::new(
            Diagnostic::new(codes::INVALID_UNIT, "invalid unit", at, label)
                .with_help("write units like `[m]`, `[m/s^2]`, `[kg*m^2]`, `[1/s]` or `[1]`"),
        )
    };
    if body.is_empty() {
        return Err(invalid(
            span,
            "a unit needs at least one symbol; write `[1]` for a dimensionless quantity",
        ));
    }
    let mut factors = Vec::new();
    let mut i = 0;
    let mut divide = false;
    let mut expect_factor = true;
    while i < body.len() {
        let (tok, s) = body[i];
        let at = sp(s);
        if expect_factor {
            match tok {
                Tok::Number("1") if i == 0 => {}
                Tok::Number(_) => {
                    return Err(invalid(at, "the only number allowed in a unit is a leading `1`"))
                }
                Tok::Ident(name) => {
                    let mut exponent: i32 = 1;
                    let mut end = at;
                    if let Some((Tok::Caret, caret)) = body.get(i + 1) {
                        let negative = matches!(body.get(i + 2), Some((Tok::Minus, _)));
                        let at_number = i + 2 + usize::from(negative);
                        match body.get(at_number) {
                            Some((Tok::Number(text), ns)) => {
                                exponent = text.parse::<i32>().map_err(|_| {
                                    invalid(sp(*ns), "a unit exponent must be a whole number")
                                })?;
                                if negative {
                                    exponent = -exponent;
                                }
                                end = sp(*ns);
                                i = at_number;
                            }
                            _ => {
                                return Err(invalid(
                                    sp(*caret),
                                    "expected a whole-number exponent after `^`",
                                ))
                            }
                        }
                    }
                    if divide {
                        exponent = -exponent;
                    }
                    factors.push(UnitFactor {
                        name: Ident { name: name.to_string(), span: at },
                        exponent,
                        span: at.to(end),
                    });
                }
                _ => return Err(invalid(at, "expected a unit symbol such as `m` or `s`")),
            }
            expect_factor = false;
        } else {
            match tok {
                Tok::Star => divide = false,
                Tok::Slash => divide = true,
                _ => return Err(invalid(at, "expected `*`, `/` or `]`")),
            }
            expect_factor = true;
        }
        i += 1;
    }
    if expect_factor {
        let last = sp(body[body.len() - 1].1);
        return Err(invalid(last, "expected a unit symbol after this"));
    }
    Ok(UnitExpr { factors, span })
}

/// A declaration's name, its optional `[unit]` (inner `None` when the unit was malformed) and
/// its optional attribute list, as the parser produces them.
type DeclParts = ((Ident, Option<Option<UnitExpr>>), Option<Vec<Attr>>);

fn unit<'a>() -> impl Parser<'a, In<'a>, Option<UnitExpr>, Ex<'a>> + Clone {
    let inner = any()
        .filter(|t: &Tok| *t != Tok::RBracket)
        .map_with(|t, e| (t, e.span()))
        .repeated()
        .collect::<Vec<_>>();
    punct(Tok::LBracket).then(inner).then(punct(Tok::RBracket)).map_with(
        |((open, body), close), e| match unit_from_tokens(open, &body, close) {
            Ok(u) => Some(u),
            Err(d) => {
                report(e, *d);
                None
            }
        },
    )
}

fn binary(op: BinOp, lhs: Expr, rhs: Expr) -> Expr {
    Expr {
        span: lhs.span.to(rhs.span),
        kind: ExprKind::Binary { op, lhs: Box::new(lhs), rhs: Box::new(rhs) },
    }
}

fn negate(minus: Span, e: Expr) -> Expr {
    Expr { span: minus.to(e.span), kind: ExprKind::Neg(Box::new(e)) }
}

fn expression<'a>() -> impl Parser<'a, In<'a>, Expr, Ex<'a>> + Clone {
    recursive(|expr| {
        let number = select! { Tok::Number(text) = e => (text, sp(e.span())) }.then(unit().or_not()).map(
            |((text, span), unit): ((&str, Span), Option<Option<UnitExpr>>)| {
                // The lexer only emits finite, well-formed numbers; NaN is unreachable.
                let value = text.parse::<f64>().unwrap_or(f64::NAN);
                let unit = unit.flatten();
                let span = unit.as_ref().map_or(span, |u| span.to(u.span));
                Expr { kind: ExprKind::Number { value, text: text.to_string(), unit }, span }
            },
        ).boxed();
        let args = expr
            .clone()
            .separated_by(just(Tok::Comma))
            .collect::<Vec<_>>()
            .then(punct(Tok::RParen))
            .delimited_by(just(Tok::LParen), empty())
            .boxed();
        let name_or_call = ident().then(args.or_not()).map(|(callee, args)| match args {
            Some((args, close)) => Expr { span: callee.span.to(close), kind: ExprKind::Call { callee, args } },
            None => Expr { span: callee.span, kind: ExprKind::Name(callee) },
        }).boxed();
        let paren = punct(Tok::LParen)
            .then(expr.clone())
            .then(punct(Tok::RParen))
            .map(|((open, inner), close)| Expr { span: open.to(close), kind: ExprKind::Paren(Box::new(inner)) })
            .boxed();
        // Malformed input the lexer already reported stands in for an operand.
        let error = select! { Tok::Error = e => Expr { kind: ExprKind::Error, span: sp(e.span()) } }.boxed();
        let atom = choice((number, name_or_call, paren, error)).labelled("an expression").boxed();

        let primed = atom.then(punct(Tok::Prime).repeated().collect::<Vec<_>>()).map_with(|(atom, primes), e| {
            let Some(last) = primes.last() else { return atom };
            let span = atom.span.to(*last);
            let shown = match &atom.kind {
                ExprKind::Name(id) => format!("{}'", id.name),
                _ => "x'".to_string(),
            };
            report(
                e,
                Diagnostic::new(
                    codes::MISPLACED_DERIVATIVE,
                    format!("a derivative `{shown}` may only stand on the left of a dynamics equation"),
                    span,
                    "derivatives cannot be used inside expressions",
                )
                .with_help("use the right-hand side of the state's dynamics equation, or the state itself"),
            );
            Expr { kind: ExprKind::Error, span }
        }).boxed();

        // `a ^ -b ^ c` is `a ^ (-(b ^ c))`: folded from the right without recursion.
        let minuses = punct(Tok::Minus).repeated().collect::<Vec<_>>().boxed();
        let pow = primed
            .clone()
            .then(just(Tok::Caret).ignore_then(minuses.clone()).then(primed).repeated().collect::<Vec<_>>())
            .map(|(first, rest): (Expr, Vec<(Vec<Span>, Expr)>)| {
                let mut acc: Option<Expr> = None;
                for (signs, operand) in rest.into_iter().rev() {
                    let mut value = match acc.take() {
                        Some(rhs) => binary(BinOp::Pow, operand, rhs),
                        None => operand,
                    };
                    for minus in signs.into_iter().rev() {
                        value = negate(minus, value);
                    }
                    acc = Some(value);
                }
                match acc {
                    Some(rhs) => binary(BinOp::Pow, first, rhs),
                    None => first,
                }
            })
            .boxed();
        let unary = punct(Tok::Minus).repeated().foldr(pow, negate).boxed();
        let mul_op = choice((just(Tok::Star).to(BinOp::Mul), just(Tok::Slash).to(BinOp::Div))).boxed();
        let product = unary.clone().foldl(mul_op.then(unary).repeated(), |l, (op, r)| binary(op, l, r)).boxed();
        let add_op = choice((just(Tok::Plus).to(BinOp::Add), just(Tok::Minus).to(BinOp::Sub))).boxed();
        product.clone().foldl(add_op.then(product).repeated(), |l, (op, r)| binary(op, l, r)).boxed()
    })
    .labelled("an expression")
}

fn range<'a>(expr: P<'a, Expr>) -> impl Parser<'a, In<'a>, Range, Ex<'a>> + Clone {
    expr.clone().or_not().then(punct(Tok::DotDot)).then(expr.or_not()).map(|((lo, dots), hi)| {
        let start = lo.as_ref().map_or(dots, |e| e.span);
        let end = hi.as_ref().map_or(dots, |e| e.span);
        Range { lo, hi, span: start.to(end) }
    })
}

fn attributes<'a>(expr: P<'a, Expr>) -> impl Parser<'a, In<'a>, Vec<Attr>, Ex<'a>> + Clone {
    let range = range(expr.clone()).boxed();
    let in_range = keyword("in", "`in`").then(range.clone()).boxed();
    let bound_value = choice((
        keyword("free", "`free`").map(AttrValue::Free),
        in_range.clone().map(|(_, r)| AttrValue::Range(r)),
        expr.clone().map(AttrValue::Expr),
    ))
    .boxed();
    let start_end = select! {
        Tok::Ident("start") = e => (AttrKind::Start, sp(e.span())),
        Tok::Ident("end") = e => (AttrKind::End, sp(e.span())),
    }
    .then(bound_value)
    .map(|((kind, kind_span), value)| Some(attr(kind, kind_span, value)))
    .boxed();
    let in_attr = in_range
        .map(|(kind_span, r)| Some(attr(AttrKind::In, kind_span, AttrValue::Range(r))))
        .boxed();
    let guess_scale = select! {
        Tok::Ident("guess") = e => (AttrKind::Guess, sp(e.span())),
        Tok::Ident("scale") = e => (AttrKind::Scale, sp(e.span())),
    }
    .then(expr.clone())
    .map(|((kind, kind_span), value)| Some(attr(kind, kind_span, AttrValue::Expr(value))))
    .boxed();
    let unknown = select! { Tok::Ident(w) = e if !ATTRIBUTES.contains(&w) && w != "free" => (w, sp(e.span())) }
        .then(choice((keyword("in", "`in`").ignore_then(range.clone()).map(|_| ()), range.map(|_| ()), expr.map(|_| ()))).or_not())
        .map_with(|((word, span), _), e| {
            let mut d = Diagnostic::new(
                codes::UNKNOWN_ATTRIBUTE,
                format!("unknown attribute `{word}`"),
                span,
                "not a declaration attribute",
            );
            d = match closest_name(word, ATTRIBUTES.iter().copied()) {
                Some(near) => d.with_help(format!("did you mean `{near}`?")),
                None => d.with_help("attributes are `start`, `end`, `in`, `guess` and `scale`"),
            };
            report(e, d);
            None
        })
        .boxed();
    choice((start_end, in_attr, guess_scale, unknown))
        .labelled("an attribute")
        .then_ignore(just(Tok::Comma).or_not())
        .repeated()
        .at_least(1)
        .collect::<Vec<_>>()
        .map(|attrs| attrs.into_iter().flatten().collect())
}

fn attr(kind: AttrKind, kind_span: Span, value: AttrValue) -> Attr {
    let end = match &value {
        AttrValue::Expr(e) => e.span,
        AttrValue::Free(s) => *s,
        AttrValue::Range(r) => r.span,
    };
    Attr { kind, kind_span, value, span: kind_span.to(end) }
}

/// A relation between two sides; `<`, `>` and `=` are accepted with a diagnostic.
fn relation<'a>() -> impl Parser<'a, In<'a>, (RelOp, Span), Ex<'a>> + Clone {
    let good = select! {
        Tok::Le = e => (RelOp::Le, sp(e.span())),
        Tok::Ge = e => (RelOp::Ge, sp(e.span())),
        Tok::EqEq = e => (RelOp::Eq, sp(e.span())),
    };
    let bad = select! {
        Tok::Lt = e => (RelOp::Le, "<", sp(e.span())),
        Tok::Gt = e => (RelOp::Ge, ">", sp(e.span())),
        Tok::Eq = e => (RelOp::Eq, "=", sp(e.span())),
    }
    .map_with(|(op, written, span), e| {
        let (label, fix) = if written == "=" {
            ("`=` defines, it does not compare", "==")
        } else {
            ("strict inequalities are not supported", op.symbol())
        };
        report(
            e,
            Diagnostic::new(
                codes::INVALID_RELATION,
                format!("`{written}` is not a relation"),
                span,
                label,
            )
            .with_help(format!("write `{fix}`")),
        );
        (op, span)
    });
    choice((good, bad)).labelled("`<=`, `>=` or `==`")
}

pub(crate) fn grammar<'a>() -> Grammar<'a> {
    let expr: P<'a, Expr> = expression().boxed();

    let header = keyword("problem", "`problem`")
        .then(ident().or_not())
        .map_with(|(kw, name), e| {
            if name.is_none() {
                report(
                    e,
                    Diagnostic::new(
                        codes::MISSING_PROBLEM_HEADER,
                        "missing problem name",
                        kw,
                        "expected a name after `problem`",
                    )
                    .with_help("write `problem my_problem`"),
                );
            }
            name
        })
        .then_ignore(end())
        .boxed();

    let const_decl = ident()
        .then(unit().or_not())
        .then(equals_or_report())
        .then(expr.clone())
        .map_with(|(((name, unit), eq), value), e| {
            let unit = unit.flatten();
            let lhs = unit.as_ref().map_or(name.span, |u| name.span.to(u.span));
            if !eq {
                report(e, missing_equals(&name.name, lhs));
            }
            ConstDecl { doc: None, span: name.span.to(value.span), name, unit, value }
        })
        .then_ignore(end())
        .map(Some)
        .boxed();

    let params = ident()
        .separated_by(just(Tok::Comma))
        .collect::<Vec<_>>()
        .delimited_by(just(Tok::LParen), just(Tok::RParen));
    let fn_decl = keyword("fn", "`fn`")
        .then(ident())
        .then(params.map_with(|p, e| (p, sp(e.span()))))
        .then(equals_or_report())
        .then(expr.clone())
        .map_with(|((((kw, name), (params, params_span)), eq), body), e| {
            if !eq {
                report(e, missing_equals(&format!("{}(..)", name.name), name.span.to(params_span)));
            }
            FnDecl { doc: None, span: kw.to(body.span), name, params, body }
        })
        .then_ignore(end())
        .map(Some)
        .boxed();

    let var_decl = ident()
        .then(unit().or_not())
        .then(just(Tok::Colon).ignore_then(attributes(expr.clone())).or_not())
        .map(|((name, unit), attrs): DeclParts| {
            let unit = unit.flatten();
            let attrs = attrs.unwrap_or_default();
            let mut span = unit.as_ref().map_or(name.span, |u| name.span.to(u.span));
            if let Some(last) = attrs.last() {
                span = span.to(last.span);
            }
            VarDecl { doc: None, name, unit, attrs, span }
        })
        .then_ignore(end())
        .map(Some)
        .boxed();

    let equation = ident()
        .then(punct(Tok::Prime).or_not())
        .then(equals_or_report())
        .then(expr.clone())
        .map_with(|(((state, prime), eq), rhs), e| {
            let lhs_span = prime.map_or(state.span, |p| state.span.to(p));
            if prime.is_none() {
                report(
                    e,
                    Diagnostic::new(
                        codes::MISSING_PRIME,
                        format!("missing `'` after `{}`", state.name),
                        state.span,
                        "a dynamics equation defines a derivative",
                    )
                    .with_help(format!("write `{}' = ...`", state.name)),
                );
            }
            if !eq {
                report(e, missing_equals(&format!("{}'", state.name), lhs_span));
            }
            Equation { doc: None, span: state.span.to(rhs.span), state, lhs_span, rhs }
        })
        .then_ignore(end())
        .map(Some)
        .boxed();

    let senses = ["minimize", "maximize"];
    let sense = select! {
        Tok::Ident("minimize") = e => (Sense::Minimize, sp(e.span())),
        Tok::Ident("maximize") = e => (Sense::Maximize, sp(e.span())),
    };
    let near_sense =
        select! { Tok::Ident(w) = e if closest_name(w, senses).is_some() => (w, sp(e.span())) }
            .map_with(move |(word, span), e| {
                let near = closest_name(word, senses).unwrap_or("minimize");
                report(
                    e,
                    Diagnostic::new(
                        codes::MISSING_COST_SENSE,
                        format!("unknown cost sense `{word}`"),
                        span,
                        "expected `minimize` or `maximize`",
                    )
                    .with_help(format!("did you mean `{near}`?")),
                );
                (if near == "maximize" { Sense::Maximize } else { Sense::Minimize }, span)
            });
    let stated = choice((sense, near_sense)).then(expr.clone()).then_ignore(end()).map(
        |((sense, sense_span), expr)| {
            Some(CostStmt { doc: None, sense, sense_span, span: sense_span.to(expr.span), expr })
        },
    );
    let bare = expr.clone().then_ignore(end()).map_with(|expr, e| {
        report(
            e,
            Diagnostic::new(
                codes::MISSING_COST_SENSE,
                "cost has no `minimize` or `maximize`",
                expr.span,
                "is this to be minimized or maximized?",
            )
            .with_help("write `minimize <expression>` or `maximize <expression>`"),
        );
        None
    });
    let cost = choice((stated, bare)).boxed();

    let label = ident().then_ignore(just(Tok::Colon));
    let constraint = label
        .or_not()
        .then(expr.clone())
        .then(relation().then(expr.clone()).repeated().collect::<Vec<_>>())
        .map_with(|((label, first), rest), e| {
            if rest.is_empty() {
                report(
                    e,
                    Diagnostic::new(
                        codes::MISSING_RELATION,
                        "constraint has no relation",
                        first.span,
                        "nothing is compared here",
                    )
                    .with_help("compare two sides with `<=`, `>=` or `==`, e.g. `0 <= x <= 5`"),
                );
                return None;
            }
            let start = label.as_ref().map_or(first.span, |l| l.span);
            let end = rest.last().map_or(first.span, |(_, e): &((RelOp, Span), Expr)| e.span);
            let rest = rest.into_iter().map(|((op, op_span), e)| (op, op_span, e)).collect();
            Some(Constraint { doc: None, label, first, rest, span: start.to(end) })
        })
        .then_ignore(end())
        .boxed();

    let setting = ident()
        .then(equals_or_report())
        .then(expr.clone())
        .map_with(|((key, eq), value), e| {
            if !eq {
                report(e, missing_equals(&key.name, key.span));
            }
            Setting { doc: None, span: key.span.to(value.span), key, value }
        })
        .then_ignore(end())
        .map(Some)
        .boxed();

    let expect_eq = select! {
        Tok::EqEq => (),
    }
    .or(select! { Tok::Eq = e => sp(e.span()) }.map_with(|span, e| {
        report(
            e,
            Diagnostic::new(
                codes::INVALID_RELATION,
                "`=` is not a relation",
                span,
                "`=` defines, it does not compare",
            )
            .with_help("write `==`"),
        );
    }))
    .labelled("`==`");
    let tolerance =
        keyword("within", "`within`").ignore_then(expr.clone()).then(punct(Tok::Percent).or_not());
    let full = expr
        .clone()
        // Not `then_ignore`: chumsky skips the mapping closures of ignored parsers, and
        // `expect_eq` reports through one.
        .then(expect_eq)
        .map(|(target, ())| target)
        .then(expr.clone())
        .then(tolerance.or_not())
        .then_ignore(end())
        .map_with(|((target, value), tol), e| match tol {
            Some((tolerance, percent)) => {
                let end = percent.unwrap_or(tolerance.span);
                Some(Expectation {
                    doc: None,
                    span: target.span.to(end),
                    target,
                    value,
                    tolerance,
                    percent: percent.is_some(),
                })
            }
            None => {
                report(
                    e,
                    Diagnostic::new(
                        codes::MISSING_TOLERANCE,
                        "expectation has no tolerance",
                        target.span.to(value.span),
                        "how close must the result be?",
                    )
                    .with_help("add `within 1%` (relative) or `within 0.05` (absolute)"),
                );
                None
            }
        });
    let no_relation = expr.clone().then_ignore(end()).map_with(|target, e| {
        report(
            e,
            Diagnostic::new(
                codes::MISSING_RELATION,
                "expectation has no `==`",
                target.span,
                "nothing is compared here",
            )
            .with_help("write `target == value within tolerance`, e.g. `end(t) == 8.9 within 5%`"),
        );
        None
    });
    let expectation = choice((full, no_relation)).boxed();

    Grammar {
        header,
        const_decl,
        fn_decl,
        var_decl,
        equation,
        cost,
        constraint,
        setting,
        expectation,
    }
}
