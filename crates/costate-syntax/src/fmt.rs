//! The canonical formatter: one layout for every `.costate` file, comments kept.
//!
//! Owns the canonical text of a parsed file (`format_file`), the refuse-on-syntax-errors entry
//! point used by `costate fmt` (`format_source`) and `strip_layout`, the comparison that says
//! what the formatter is allowed to change. It must not parse (it calls `crate::parse`), check
//! meaning, or do IO: the CLI reads and writes files.
//!
//! # Canonical layout
//!
//! * The file doc (`///` lines), then `problem NAME`, one blank line, then the items in source
//!   order, each separated from the next by exactly one blank line.
//! * Blocks are written `keyword {`, one entry per line indented by two spaces, `}`; a block
//!   with no entries and no comments is `keyword {}`. `fn` and `time` take one line each.
//! * Entries: `name [unit]: attr, attr` (attributes in source order, `, ` between them, no colon
//!   when there are none): `start 0`, `end free`, `end in 1 .. 60`, `in -2 .. 2`, `in 0 ..`,
//!   `in .. 5`, `guess 8`, `scale 10`. Constants `name [unit] = expr`, functions
//!   `fn name(a, b) = expr`, equations `x' = expr`, cost `minimize expr` / `maximize expr`,
//!   constraints `label: a <= b <= c`, settings `key = value`, expectations
//!   `target == value within tol` or `within 5%`.
//! * Expressions: binary `+ - * /` with one space on each side, `^` without spaces (`x^2`),
//!   unary minus tight (`-x`), calls `f(a, b)`, numbers with their source text and one space
//!   before a unit (`9.81 [m/s^2]`). Parentheses are kept exactly as written; the formatter
//!   adds one only for a tree that could not have come from the parser (built by hand), where
//!   leaving it out would change the meaning.
//! * Units are rendered from their factors: the factors with a non-negative exponent joined by
//!   `*` (`kg*m^2`), then each factor with a negative exponent as `/name` or `/name^k`; `1`
//!   stands in for an empty numerator (`[1/s]`) and for no factors at all (`[1]`).
//! * Long lines are never wrapped. Each declaration, equation or constraint is written on one
//!   line: where the author broke a long expression over several lines (after an operator or
//!   inside parentheses) the lines are joined. Comments that sat inside such an entry move to
//!   their own lines directly above it, in their original order; a comment at the end of its
//!   last line stays there.
//! * Comments: an own-line `//` comment stays on its own line before the entry or item that
//!   follows it, at that entry's indentation; comments after the last entry of a block stay
//!   before its `}`, comments after the last item stay at the end of the file. A comment that
//!   follows code on the same line stays there, written `code  // text` (two spaces). Comment
//!   text is kept verbatim except for trailing whitespace. Doc comments are written `/// text`
//!   directly above their declaration (plain comments found between a doc comment and its
//!   declaration move above the doc comment). A `///` line inside a multi-line entry is a plain
//!   comment to the parser (nothing follows it to document); moved above the entry it is
//!   written `// /text` so that it stays one.
//! * Blank lines: inside a block, one blank line where the author left one or more between two
//!   entries or comments (so entries can be grouped), none after `{` or before `}`. At the top
//!   level, an item is always followed by one blank line; between a comment and what follows it
//!   the author's blank line (at most one) is kept.
//! * No trailing whitespace, `\n` line endings, exactly one `\n` at the end of a non-empty file.
//!
//! The layout is a function of the tree and of the blank lines and comment positions of the
//! source, and the formatted text parses back to the same tree with the same comments in the
//! same order, so formatting is idempotent: `format(format(x)) == format(x)`.

use crate::ast::{
    Attr, AttrValue, BinOp, Block, Comment, ConstDecl, Constraint, CostStmt, Doc, Equation,
    Expectation, Expr, ExprKind, File, FnDecl, Item, Range, Sense, Setting, UnitExpr, VarDecl,
    NEG_PRECEDENCE,
};
use crate::{Diagnostic, Span};

const INDENT: &str = "  ";

/// Format `source`, or return its syntax errors: text that does not parse cleanly is never
/// rewritten, since its tree may not hold everything the author wrote.
pub fn format_source(source: &str) -> Result<String, Vec<Diagnostic>> {
    let parse = crate::parse(source);
    let errors: Vec<Diagnostic> =
        parse.diagnostics.into_iter().filter(Diagnostic::is_error).collect();
    if errors.is_empty() {
        Ok(format_file(&parse.file, source))
    } else {
        Err(errors)
    }
}

/// The canonical text of `file`, which was parsed from `source`. The source is consulted only
/// for line breaks (where comments sit, where the author left blank lines); everything else
/// comes from the tree. Never panics, even when spans do not match `source`.
pub fn format_file(file: &File, source: &str) -> String {
    Formatter { src: Source(source), out: String::new() }.file(file)
}

/// A copy of `file` with everything the formatter may change erased: spans zeroed, unit factors
/// in canonical order (non-negative exponents first, otherwise source order), comments reduced
/// to their text without trailing whitespace (`own_line` cleared; `// /x` counts as `///x`, see
/// the module doc) and doc lines without trailing whitespace. Two files with equal stripped forms are the same program with the same
/// comments in the same order.
pub fn strip_layout(file: &File) -> File {
    let mut file = file.clone();
    strip::file(&mut file);
    file
}

/// Byte-offset queries on the source that never panic on a bad span.
#[derive(Clone, Copy)]
struct Source<'a>(&'a str);

impl<'a> Source<'a> {
    fn slice(self, from: usize, to: usize) -> &'a str {
        if from <= to {
            self.0.get(from..to).unwrap_or("")
        } else {
            ""
        }
    }

    /// True when no line break separates `from` and `to` (and `from <= to`).
    fn same_line(self, from: usize, to: usize) -> bool {
        from <= to && to <= self.0.len() && !self.0.as_bytes()[from..to].contains(&b'\n')
    }

    /// True when the text between `from` and `to` contains a line holding only whitespace.
    fn blank_line_between(self, from: usize, to: usize) -> bool {
        let gap = self.slice(from, to);
        let pieces: Vec<&str> = gap.split('\n').collect();
        pieces.len() >= 3 && pieces[1..pieces.len() - 1].iter().any(|p| p.trim().is_empty())
    }
}

/// Where the comments of one container (the file or one block) go, relative to its units
/// (items or entries), which are given by their outer spans (doc comment included).
struct Placement<'c> {
    /// A comment on the container's header line (`state {  // ...`).
    header_trailing: Option<&'c Comment>,
    /// Per unit: own-line comments before it, comments inside it (moved above it), the comment
    /// at the end of its last line.
    before: Vec<Vec<&'c Comment>>,
    inside: Vec<Vec<&'c Comment>>,
    trailing: Vec<Option<&'c Comment>>,
    /// Comments after the last unit.
    tail: Vec<&'c Comment>,
}

fn place<'c>(
    src: Source,
    comments: &[&'c Comment],
    units: &[Span],
    header_end: Option<usize>,
) -> Placement<'c> {
    let mut p = Placement {
        header_trailing: None,
        before: vec![Vec::new(); units.len()],
        inside: vec![Vec::new(); units.len()],
        trailing: vec![None; units.len()],
        tail: Vec::new(),
    };
    for &c in comments {
        let at = c.span.start;
        if let Some(i) = units.iter().position(|u| u.start <= at && at < u.end) {
            p.inside[i].push(c);
            continue;
        }
        if !c.own_line {
            match units.iter().rposition(|u| u.end <= at) {
                Some(i) => {
                    if src.same_line(units[i].end, at) && p.trailing[i].is_none() {
                        p.trailing[i] = Some(c);
                        continue;
                    }
                }
                None => {
                    if let Some(h) = header_end {
                        if src.same_line(h, at) && p.header_trailing.is_none() {
                            p.header_trailing = Some(c);
                            continue;
                        }
                    }
                }
            }
        }
        match units.iter().position(|u| u.start >= at) {
            Some(i) => p.before[i].push(c),
            None => p.tail.push(c),
        }
    }
    p
}

/// The span of a declaration together with its doc comment.
fn outer(doc: &Option<Doc>, span: Span) -> Span {
    match doc {
        Some(d) => Span::new(d.span.start.min(span.start), span.end),
        None => span,
    }
}

fn item_doc(item: &Item) -> &Option<Doc> {
    match item {
        Item::Const(b) => &b.doc,
        Item::Fn(f) => &f.doc,
        Item::Time(t) => &t.doc,
        Item::Param(b) | Item::State(b) | Item::Control(b) => &b.doc,
        Item::Dynamics(b) => &b.doc,
        Item::Cost(b) => &b.doc,
        Item::Path(b) | Item::Boundary(b) => &b.doc,
        Item::Solve(b) => &b.doc,
        Item::Expect(b) => &b.doc,
    }
}

/// The keyword span and body span of a block item; `None` for `fn` and `time`.
fn item_block_region(item: &Item) -> Option<Span> {
    fn region<T>(b: &Block<T>) -> Option<Span> {
        Some(Span::new(b.keyword.start, b.span.end))
    }
    match item {
        Item::Fn(_) | Item::Time(_) => None,
        Item::Const(b) => region(b),
        Item::Param(b) | Item::State(b) | Item::Control(b) => region(b),
        Item::Dynamics(b) => region(b),
        Item::Cost(b) => region(b),
        Item::Path(b) | Item::Boundary(b) => region(b),
        Item::Solve(b) => region(b),
        Item::Expect(b) => region(b),
    }
}

/// One entry of a block: how to render it and where it sits.
trait Entry {
    fn doc(&self) -> &Option<Doc>;
    fn span(&self) -> Span;
    fn render(&self, f: &Formatter, out: &mut String);
}

macro_rules! entry {
    ($t:ty, $method:ident) => {
        impl Entry for $t {
            fn doc(&self) -> &Option<Doc> {
                &self.doc
            }
            fn span(&self) -> Span {
                self.span
            }
            fn render(&self, f: &Formatter, out: &mut String) {
                f.$method(self, out)
            }
        }
    };
}

entry!(ConstDecl, const_decl);
entry!(VarDecl, var_decl);
entry!(Equation, equation);
entry!(CostStmt, cost_stmt);
entry!(Constraint, constraint);
entry!(Setting, setting);
entry!(Expectation, expectation);

struct Formatter<'a> {
    src: Source<'a>,
    out: String,
}

impl Formatter<'_> {
    fn file(mut self, file: &File) -> String {
        let mut comments: Vec<&Comment> = file.comments.iter().collect();
        comments.sort_by_key(|c| c.span.start);

        // Comments inside a block's braces are placed among its entries; the rest among the
        // header and the items.
        let regions: Vec<Option<Span>> = file.items.iter().map(item_block_region).collect();
        let mut in_block: Vec<Vec<&Comment>> = vec![Vec::new(); file.items.len()];
        let mut top: Vec<&Comment> = Vec::new();
        for c in comments {
            let at = c.span.start;
            match regions.iter().position(|r| r.is_some_and(|r| r.start <= at && at < r.end)) {
                Some(i) => in_block[i].push(c),
                None => top.push(c),
            }
        }

        let header = file.name.as_ref().map(|name| outer(&file.doc, name.span));
        let mut units: Vec<Span> = header.into_iter().collect();
        let first_item = units.len();
        units.extend(file.items.iter().map(|item| outer(item_doc(item), item.span())));
        let placement = place(self.src, &top, &units, None);

        // `prev`: end of the previous unit and whether it was code (an item or the header,
        // always followed by a blank line) rather than a comment.
        let mut prev: Option<(usize, bool)> = None;
        for (u, unit) in units.iter().enumerate() {
            for c in &placement.before[u] {
                self.top_separator(prev, c.span.start);
                self.comment_line("", c, true);
                prev = Some((c.span.end, false));
            }
            self.top_separator(prev, unit.start);
            for c in &placement.inside[u] {
                self.comment_line("", c, true);
            }
            let trailing = placement.trailing[u];
            if u < first_item {
                self.doc_lines("", &file.doc);
                let mut line = String::from("problem ");
                if let Some(name) = &file.name {
                    line.push_str(&name.name);
                }
                self.line("", &line, trailing);
            } else {
                let i = u - first_item;
                self.item(&file.items[i], &in_block[i], trailing);
            }
            prev = Some((unit.end, true));
        }
        for c in &placement.tail {
            self.top_separator(prev, c.span.start);
            self.comment_line("", c, false);
            prev = Some((c.span.end, false));
        }
        self.out
    }

    fn top_separator(&mut self, prev: Option<(usize, bool)>, next_start: usize) {
        if let Some((end, was_code)) = prev {
            if was_code || self.src.blank_line_between(end, next_start) {
                self.out.push('\n');
            }
        }
    }

    fn item(&mut self, item: &Item, inner: &[&Comment], trailing: Option<&Comment>) {
        self.doc_lines("", item_doc(item));
        match item {
            Item::Fn(decl) => {
                let mut line = String::new();
                self.fn_decl(decl, &mut line);
                self.line("", &line, trailing);
            }
            Item::Time(decl) => {
                let mut line = String::from("time ");
                self.var_decl(decl, &mut line);
                self.line("", &line, trailing);
            }
            Item::Const(b) => self.block("const", b, inner, trailing),
            Item::Param(b) => self.block("param", b, inner, trailing),
            Item::State(b) => self.block("state", b, inner, trailing),
            Item::Control(b) => self.block("control", b, inner, trailing),
            Item::Dynamics(b) => self.block("dynamics", b, inner, trailing),
            Item::Cost(b) => self.block("cost", b, inner, trailing),
            Item::Path(b) => self.block("path", b, inner, trailing),
            Item::Boundary(b) => self.block("boundary", b, inner, trailing),
            Item::Solve(b) => self.block("solve", b, inner, trailing),
            Item::Expect(b) => self.block("expect", b, inner, trailing),
        }
    }

    fn block<T: Entry>(
        &mut self,
        keyword: &str,
        block: &Block<T>,
        comments: &[&Comment],
        trailing: Option<&Comment>,
    ) {
        let units: Vec<Span> = block.entries.iter().map(|e| outer(e.doc(), e.span())).collect();
        let p = place(self.src, comments, &units, Some(block.keyword.end));
        if units.is_empty() && p.header_trailing.is_none() && p.tail.is_empty() {
            self.line("", &format!("{keyword} {{}}"), trailing);
            return;
        }
        self.line("", &format!("{keyword} {{"), p.header_trailing);
        let mut prev_end: Option<usize> = None;
        for (i, (entry, unit)) in block.entries.iter().zip(&units).enumerate() {
            for c in &p.before[i] {
                self.block_separator(prev_end, c.span.start);
                self.comment_line(INDENT, c, true);
                prev_end = Some(c.span.end);
            }
            self.block_separator(prev_end, unit.start);
            for c in &p.inside[i] {
                self.comment_line(INDENT, c, true);
            }
            self.doc_lines(INDENT, entry.doc());
            let mut line = String::new();
            entry.render(self, &mut line);
            self.line(INDENT, &line, p.trailing[i]);
            prev_end = Some(unit.end);
        }
        for c in &p.tail {
            self.block_separator(prev_end, c.span.start);
            self.comment_line(INDENT, c, false);
            prev_end = Some(c.span.end);
        }
        self.line("", "}", trailing);
    }

    fn block_separator(&mut self, prev_end: Option<usize>, next_start: usize) {
        if prev_end.is_some_and(|end| self.src.blank_line_between(end, next_start)) {
            self.out.push('\n');
        }
    }

    fn line(&mut self, indent: &str, code: &str, trailing: Option<&Comment>) {
        self.out.push_str(indent);
        self.out.push_str(code);
        if let Some(c) = trailing {
            self.out.push_str("  //");
            self.out.push_str(c.text.trim_end());
        }
        self.out.push('\n');
    }

    /// An own-line comment. `attaches` says whether a declaration follows, in which case a
    /// text beginning with a single `/` (a `///` the parser demoted to a plain comment because
    /// it sat inside an entry) gets a space after `//`, so it does not become that
    /// declaration's doc comment.
    fn comment_line(&mut self, indent: &str, c: &Comment, attaches: bool) {
        self.out.push_str(indent);
        self.out.push_str("//");
        if attaches && c.text.starts_with('/') && !c.text.starts_with("//") {
            self.out.push(' ');
        }
        self.out.push_str(c.text.trim_end());
        self.out.push('\n');
    }

    fn doc_lines(&mut self, indent: &str, doc: &Option<Doc>) {
        let Some(doc) = doc else { return };
        for text in doc.text.split('\n') {
            let text = text.trim_end();
            self.out.push_str(indent);
            self.out.push_str("///");
            if !text.is_empty() {
                self.out.push(' ');
                self.out.push_str(text);
            }
            self.out.push('\n');
        }
    }

    // ---- entries (each rendered on one line, without indentation) ----

    fn fn_decl(&self, decl: &FnDecl, out: &mut String) {
        out.push_str("fn ");
        out.push_str(&decl.name.name);
        out.push('(');
        for (i, p) in decl.params.iter().enumerate() {
            if i > 0 {
                out.push_str(", ");
            }
            out.push_str(&p.name);
        }
        out.push_str(") = ");
        self.expr(&decl.body, out);
    }

    fn const_decl(&self, decl: &ConstDecl, out: &mut String) {
        out.push_str(&decl.name.name);
        if let Some(unit) = &decl.unit {
            out.push(' ');
            unit_expr(unit, out);
        }
        out.push_str(" = ");
        self.expr(&decl.value, out);
    }

    fn var_decl(&self, decl: &VarDecl, out: &mut String) {
        out.push_str(&decl.name.name);
        if let Some(unit) = &decl.unit {
            out.push(' ');
            unit_expr(unit, out);
        }
        for (i, attr) in decl.attrs.iter().enumerate() {
            out.push_str(if i == 0 { ": " } else { ", " });
            self.attr(attr, out);
        }
    }

    fn attr(&self, attr: &Attr, out: &mut String) {
        out.push_str(attr.kind.keyword());
        match &attr.value {
            AttrValue::Expr(e) => {
                out.push(' ');
                self.expr(e, out);
            }
            AttrValue::Free(_) => out.push_str(" free"),
            AttrValue::Range(r) => {
                // The `in` attribute's own keyword already introduces the range.
                if attr.kind != crate::ast::AttrKind::In {
                    out.push_str(" in");
                }
                out.push(' ');
                self.range(r, out);
            }
        }
    }

    fn range(&self, range: &Range, out: &mut String) {
        if let Some(lo) = &range.lo {
            self.expr(lo, out);
            out.push(' ');
        }
        out.push_str("..");
        if let Some(hi) = &range.hi {
            out.push(' ');
            self.expr(hi, out);
        }
    }

    fn equation(&self, eq: &Equation, out: &mut String) {
        out.push_str(&eq.state.name);
        out.push_str("' = ");
        self.expr(&eq.rhs, out);
    }

    fn cost_stmt(&self, stmt: &CostStmt, out: &mut String) {
        out.push_str(match stmt.sense {
            Sense::Minimize => "minimize ",
            Sense::Maximize => "maximize ",
        });
        self.expr(&stmt.expr, out);
    }

    fn constraint(&self, c: &Constraint, out: &mut String) {
        if let Some(label) = &c.label {
            out.push_str(&label.name);
            out.push_str(": ");
        }
        self.expr(&c.first, out);
        for (op, _, e) in &c.rest {
            out.push(' ');
            out.push_str(op.symbol());
            out.push(' ');
            self.expr(e, out);
        }
    }

    fn setting(&self, s: &Setting, out: &mut String) {
        out.push_str(&s.key.name);
        out.push_str(" = ");
        self.expr(&s.value, out);
    }

    fn expectation(&self, x: &Expectation, out: &mut String) {
        self.expr(&x.target, out);
        out.push_str(" == ");
        self.expr(&x.value, out);
        out.push_str(" within ");
        self.expr(&x.tolerance, out);
        if x.percent {
            out.push('%');
        }
    }

    // ---- expressions ----

    fn expr(&self, e: &Expr, out: &mut String) {
        match &e.kind {
            ExprKind::Number { text, unit, .. } => {
                out.push_str(text);
                if let Some(unit) = unit {
                    out.push(' ');
                    unit_expr(unit, out);
                }
            }
            ExprKind::Name(id) => out.push_str(&id.name),
            ExprKind::Neg(inner) => {
                out.push('-');
                self.operand(inner, precedence(inner) < NEG_PRECEDENCE, out);
            }
            ExprKind::Binary { op, lhs, rhs } => {
                let p = op.precedence();
                // `^` is right-associative, the others left: an operand of equal precedence
                // needs parentheses on the side the operator does not associate to. A negation
                // on the right never does: a prefix minus is read the same wherever an operand
                // starts.
                let right_assoc = *op == BinOp::Pow;
                let (lp, rp) = (precedence(lhs), precedence(rhs));
                let lhs_parens = lp < p || (lp == p && right_assoc);
                let rhs_parens =
                    !matches!(rhs.kind, ExprKind::Neg(_)) && (rp < p || (rp == p && !right_assoc));
                self.operand(lhs, lhs_parens, out);
                if right_assoc {
                    out.push_str(op.symbol());
                } else {
                    out.push(' ');
                    out.push_str(op.symbol());
                    out.push(' ');
                }
                self.operand(rhs, rhs_parens, out);
            }
            ExprKind::Call { callee, args } => {
                out.push_str(&callee.name);
                out.push('(');
                for (i, a) in args.iter().enumerate() {
                    if i > 0 {
                        out.push_str(", ");
                    }
                    self.expr(a, out);
                }
                out.push(')');
            }
            ExprKind::Paren(inner) => {
                out.push('(');
                self.expr(inner, out);
                out.push(')');
            }
            ExprKind::Error => {
                // Only reachable for text with syntax errors, which `format_source` refuses;
                // keep what the author wrote, on one line.
                let text = self.src.slice(e.span.start, e.span.end);
                out.push_str(&text.split_whitespace().collect::<Vec<_>>().join(" "));
            }
        }
    }

    fn operand(&self, e: &Expr, parens: bool, out: &mut String) {
        if parens {
            out.push('(');
            self.expr(e, out);
            out.push(')');
        } else {
            self.expr(e, out);
        }
    }
}

/// Binding power of the outermost operator of `e`; atoms bind tightest.
fn precedence(e: &Expr) -> u8 {
    match &e.kind {
        ExprKind::Binary { op, .. } => op.precedence(),
        ExprKind::Neg(_) => NEG_PRECEDENCE,
        _ => u8::MAX,
    }
}

fn unit_expr(unit: &UnitExpr, out: &mut String) {
    out.push('[');
    let mut numerator = false;
    for f in unit.factors.iter().filter(|f| f.exponent >= 0) {
        if numerator {
            out.push('*');
        }
        numerator = true;
        out.push_str(&f.name.name);
        if f.exponent != 1 {
            out.push('^');
            out.push_str(&f.exponent.to_string());
        }
    }
    if !numerator {
        out.push('1');
    }
    for f in unit.factors.iter().filter(|f| f.exponent < 0) {
        out.push('/');
        out.push_str(&f.name.name);
        let k = -i64::from(f.exponent);
        if k != 1 {
            out.push('^');
            out.push_str(&k.to_string());
        }
    }
    out.push(']');
}

/// Erasing layout from a tree, for `strip_layout`.
mod strip {
    use crate::ast::*;
    use crate::Span;

    const Z: Span = Span { start: 0, end: 0 };

    pub(super) fn file(f: &mut File) {
        f.span = Z;
        doc(&mut f.doc);
        if let Some(n) = &mut f.name {
            n.span = Z;
        }
        for item in &mut f.items {
            self::item(item);
        }
        for c in &mut f.comments {
            c.span = Z;
            c.own_line = false;
            let text = c.text.trim_end();
            // `// /x`, as the formatter writes a demoted `///x` that it moves above an entry.
            c.text = match text.strip_prefix(" /") {
                Some(rest) if !rest.starts_with('/') => format!("/{rest}"),
                _ => text.to_string(),
            };
        }
    }

    fn doc(d: &mut Option<Doc>) {
        if let Some(d) = d {
            d.span = Z;
            d.text = d.text.split('\n').map(str::trim_end).collect::<Vec<_>>().join("\n");
        }
    }

    fn block<T>(b: &mut Block<T>, each: impl Fn(&mut T)) {
        doc(&mut b.doc);
        b.keyword = Z;
        b.span = Z;
        b.entries.iter_mut().for_each(each);
    }

    fn item(item: &mut Item) {
        match item {
            Item::Const(b) => block(b, |c| {
                doc(&mut c.doc);
                c.name.span = Z;
                unit_opt(&mut c.unit);
                expr(&mut c.value);
                c.span = Z;
            }),
            Item::Fn(f) => {
                doc(&mut f.doc);
                f.name.span = Z;
                f.params.iter_mut().for_each(|p| p.span = Z);
                expr(&mut f.body);
                f.span = Z;
            }
            Item::Time(v) => var(v),
            Item::Param(b) | Item::State(b) | Item::Control(b) => block(b, var),
            Item::Dynamics(b) => block(b, |e| {
                doc(&mut e.doc);
                e.state.span = Z;
                e.lhs_span = Z;
                expr(&mut e.rhs);
                e.span = Z;
            }),
            Item::Cost(b) => block(b, |s| {
                doc(&mut s.doc);
                s.sense_span = Z;
                expr(&mut s.expr);
                s.span = Z;
            }),
            Item::Path(b) | Item::Boundary(b) => block(b, |c| {
                doc(&mut c.doc);
                if let Some(l) = &mut c.label {
                    l.span = Z;
                }
                expr(&mut c.first);
                for (_, s, e) in &mut c.rest {
                    *s = Z;
                    expr(e);
                }
                c.span = Z;
            }),
            Item::Solve(b) => block(b, |s| {
                doc(&mut s.doc);
                s.key.span = Z;
                expr(&mut s.value);
                s.span = Z;
            }),
            Item::Expect(b) => block(b, |x| {
                doc(&mut x.doc);
                expr(&mut x.target);
                expr(&mut x.value);
                expr(&mut x.tolerance);
                x.span = Z;
            }),
        }
    }

    fn var(v: &mut VarDecl) {
        doc(&mut v.doc);
        v.name.span = Z;
        unit_opt(&mut v.unit);
        for a in &mut v.attrs {
            a.kind_span = Z;
            a.span = Z;
            match &mut a.value {
                AttrValue::Expr(e) => expr(e),
                AttrValue::Free(s) => *s = Z,
                AttrValue::Range(r) => range(r),
            }
        }
        v.span = Z;
    }

    fn range(r: &mut Range) {
        r.span = Z;
        if let Some(e) = &mut r.lo {
            expr(e);
        }
        if let Some(e) = &mut r.hi {
            expr(e);
        }
    }

    fn unit_opt(u: &mut Option<UnitExpr>) {
        if let Some(u) = u {
            u.span = Z;
            for f in &mut u.factors {
                f.span = Z;
                f.name.span = Z;
            }
            // The formatter writes the numerator factors first; the sort is stable.
            u.factors.sort_by_key(|f| f.exponent < 0);
        }
    }

    fn expr(e: &mut Expr) {
        e.span = Z;
        match &mut e.kind {
            ExprKind::Number { unit, .. } => unit_opt(unit),
            ExprKind::Name(id) => id.span = Z,
            ExprKind::Neg(inner) | ExprKind::Paren(inner) => expr(inner),
            ExprKind::Binary { lhs, rhs, .. } => {
                expr(lhs);
                expr(rhs);
            }
            ExprKind::Call { callee, args } => {
                callee.span = Z;
                args.iter_mut().for_each(expr);
            }
            ExprKind::Error => {}
        }
    }
}

#[cfg(test)]
mod tests {
    //! Trees built by hand, which the parser could never produce (operators nested against
    //! their precedence without `Paren`): the formatter must still write text that means them.

    use super::*;
    use crate::ast::{Ident, UnitFactor};

    const Z: Span = Span { start: 0, end: 0 };

    fn e(kind: ExprKind) -> Expr {
        Expr { kind, span: Z }
    }
    fn name(n: &str) -> Expr {
        e(ExprKind::Name(Ident { name: n.into(), span: Z }))
    }
    fn bin(op: BinOp, lhs: Expr, rhs: Expr) -> Expr {
        e(ExprKind::Binary { op, lhs: Box::new(lhs), rhs: Box::new(rhs) })
    }
    fn neg(x: Expr) -> Expr {
        e(ExprKind::Neg(Box::new(x)))
    }
    fn render(x: &Expr) -> String {
        let f = Formatter { src: Source(""), out: String::new() };
        let mut out = String::new();
        f.expr(x, &mut out);
        out
    }

    #[test]
    fn hand_built_trees_get_the_parentheses_their_meaning_needs() {
        use BinOp::*;
        let (a, b, c) = (name("a"), name("b"), name("c"));
        let sum = bin(Add, a.clone(), b.clone());
        assert_eq!(render(&bin(Mul, sum.clone(), c.clone())), "(a + b) * c");
        assert_eq!(render(&bin(Mul, c.clone(), sum.clone())), "c * (a + b)");
        assert_eq!(render(&neg(sum.clone())), "-(a + b)");
        assert_eq!(render(&neg(bin(Mul, a.clone(), b.clone()))), "-(a * b)");
        assert_eq!(render(&neg(bin(Pow, a.clone(), b.clone()))), "-a^b");
        assert_eq!(render(&bin(Pow, neg(a.clone()), b.clone())), "(-a)^b");
        assert_eq!(render(&bin(Pow, a.clone(), neg(b.clone()))), "a^-b");
        assert_eq!(render(&bin(Pow, bin(Pow, a.clone(), b.clone()), c.clone())), "(a^b)^c");
        assert_eq!(render(&bin(Pow, a.clone(), bin(Pow, b.clone(), c.clone()))), "a^b^c");
        assert_eq!(render(&bin(Sub, a.clone(), bin(Sub, b.clone(), c.clone()))), "a - (b - c)");
        assert_eq!(render(&bin(Sub, bin(Sub, a.clone(), b.clone()), c.clone())), "a - b - c");
        assert_eq!(render(&bin(Div, a.clone(), bin(Mul, b.clone(), c.clone()))), "a / (b * c)");
        assert_eq!(render(&bin(Mul, neg(a.clone()), b.clone())), "-a * b");
        assert_eq!(render(&bin(Sub, a.clone(), neg(b.clone()))), "a - -b");
        assert_eq!(render(&neg(neg(a))), "--a");
    }

    #[test]
    fn units_put_the_numerator_first() {
        let factor = |n: &str, exponent| UnitFactor {
            name: Ident { name: n.into(), span: Z },
            exponent,
            span: Z,
        };
        let render = |factors| {
            let mut out = String::new();
            unit_expr(&UnitExpr { factors, span: Z }, &mut out);
            out
        };
        assert_eq!(render(vec![factor("s", -2), factor("m", 1)]), "[m/s^2]");
        assert_eq!(render(vec![factor("kg", 1), factor("m", 2), factor("s", -1)]), "[kg*m^2/s]");
        assert_eq!(render(vec![factor("s", -1)]), "[1/s]");
        assert_eq!(render(vec![]), "[1]");
        assert_eq!(render(vec![factor("m", 0)]), "[m^0]");
    }
}
