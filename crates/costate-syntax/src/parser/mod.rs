//! The parser: tokens to a syntax tree plus syntax diagnostics. It never fails and never panics.
//!
//! Owns the layout rules (which line breaks separate entries), delimiter matching, the item and
//! block structure, doc-comment attachment and error recovery. The grammar of one entry lives in
//! `grammar.rs` (chumsky); this driver cuts the token stream into entries first, so a broken
//! entry is reported once and never swallows the entries or items after it:
//! - an entry ends at a line break (or `;`) outside parentheses and brackets, unless the line
//!   ends with a token that cannot end an expression (`+`, `=`, `,`, `..`, `within`, ...);
//! - a block ends at its `}`, or, if that is missing, where the next item begins;
//! - an unknown item is skipped up to the next line that starts with an item keyword.
//!
//! It does not resolve names or check units: that is `costate-check`'s job.

mod grammar;
mod tok;

use chumsky::error::RichPattern;
use chumsky::prelude::{Input as _, Parser as _, Rich, SimpleSpan};

use crate::ast::*;
use crate::lexer::{lex, TokenKind};
use crate::{closest_name, codes, Diagnostic, Span};
use grammar::{grammar, sp, split, Grammar, Sink, Spanned, SplitFn, P};
use tok::Tok;

/// The result of parsing one file: always a tree, plus the syntax diagnostics.
#[derive(Clone, Debug, PartialEq)]
pub struct Parse {
    pub file: File,
    pub diagnostics: Vec<Diagnostic>,
}

/// Items written as `keyword { entries }`.
pub const BLOCK_KEYWORDS: &[&str] = &[
    "const", "param", "state", "control", "dynamics", "cost", "path", "boundary", "solve", "expect",
];
/// Items written on one line: `problem NAME`, `fn f(x) = ...`, `time t [s]: ...`.
pub const LINE_KEYWORDS: &[&str] = &["problem", "fn", "time"];

/// Deepest parenthesis nesting accepted in one entry; deeper input is reported, not parsed, so
/// neither the parser nor later tree walks can exhaust the stack. Measured: an unoptimised
/// build needs about 75 KiB of stack per level, so 16 levels fit a 2 MiB test thread with room
/// to spare.
const MAX_NESTING: usize = 16;
/// Most operators accepted in one entry, for the same reason (each deepens the tree by one).
const MAX_OPERATORS: usize = 2000;

const MISSING_HEADER: &str = "missing `problem` header";

/// Parses `text`. Never panics, never fails: malformed input yields diagnostics and a tree
/// without the broken parts.
pub fn parse(text: &str) -> Parse {
    let (tokens, mut diagnostics) = lex(text);
    let mut comments = Vec::new();
    let mut raw: Vec<Spanned<'_>> = Vec::with_capacity(tokens.len());
    let mut line_has_code = false;
    for token in &tokens {
        let source = &text[token.span.range()];
        let span = SimpleSpan::from(token.span.range());
        match token.kind {
            TokenKind::Comment => comments.push(Comment {
                text: source.get(2..).unwrap_or("").to_string(),
                span: token.span,
                own_line: !line_has_code,
            }),
            TokenKind::Newline => {
                line_has_code = false;
                raw.push((Tok::Newline, span));
            }
            TokenKind::DocComment => raw.push((Tok::Doc(source), span)),
            kind => {
                line_has_code = true;
                raw.push((Tok::new(kind, source), span));
            }
        }
    }

    let (poison, depth) = match_delimiters(&raw, &mut diagnostics);
    let (toks, poison) = significant_tokens(&raw, &poison, &depth, &mut comments);

    let grammar = grammar();
    let mut driver = Driver { toks: &toks, poison, pos: 0, diagnostics, comments };
    let file = driver.file(&grammar, text.len());
    let mut diagnostics = driver.diagnostics;
    diagnostics.sort_by_key(|d| (d.primary.span.start, d.primary.span.end));
    let mut file = file;
    file.comments = driver.comments;
    file.comments.sort_by_key(|c| c.span.start);
    Parse { file, diagnostics }
}

/// Pairs `(`/`)` and `[`/`]`, reporting the ones left unpaired. Braces end any open pair:
/// a parenthesis never spans blocks. Returns which tokens were reported (their entry's own
/// parse error would only repeat the news) and, per token, how many pairs enclose it.
fn match_delimiters(
    toks: &[Spanned<'_>],
    diagnostics: &mut Vec<Diagnostic>,
) -> (Vec<bool>, Vec<usize>) {
    let mut poison = vec![false; toks.len()];
    let mut delta = vec![0i64; toks.len() + 1];
    let mut stack: Vec<usize> = Vec::new();
    let unclosed = |i: usize, poison: &mut Vec<bool>, diagnostics: &mut Vec<Diagnostic>| {
        poison[i] = true;
        let (open, close) = if toks[i].0 == Tok::LParen { ("(", ")") } else { ("[", "]") };
        diagnostics.push(
            Diagnostic::new(
                codes::UNCLOSED_DELIMITER,
                format!("unclosed `{open}`"),
                sp(toks[i].1),
                format!("this `{open}` is never closed"),
            )
            .with_help(format!("add the matching `{close}`")),
        );
    };
    for (i, (tok, span)) in toks.iter().enumerate() {
        match tok {
            Tok::LParen | Tok::LBracket => stack.push(i),
            Tok::RParen | Tok::RBracket => {
                let (want, open) =
                    if *tok == Tok::RParen { (Tok::LParen, "(") } else { (Tok::LBracket, "[") };
                if let Some(at) = stack.iter().rposition(|&j| toks[j].0 == want) {
                    for j in stack.split_off(at + 1) {
                        unclosed(j, &mut poison, diagnostics);
                    }
                    let j = stack.pop().unwrap_or(i);
                    delta[j + 1] += 1;
                    delta[i] -= 1;
                } else {
                    poison[i] = true;
                    diagnostics.push(
                        Diagnostic::new(
                            codes::UNMATCHED_DELIMITER,
                            format!("unmatched `{tok}`"),
                            sp(*span),
                            format!("no `{open}` opens this"),
                        )
                        .with_help(format!("remove it, or add the matching `{open}` before it")),
                    );
                }
            }
            Tok::LBrace | Tok::RBrace => {
                for j in std::mem::take(&mut stack) {
                    unclosed(j, &mut poison, diagnostics);
                }
            }
            _ => {}
        }
    }
    for j in stack {
        unclosed(j, &mut poison, diagnostics);
    }
    let mut depth = Vec::with_capacity(toks.len());
    let mut level = 0i64;
    for d in &delta[..toks.len()] {
        level += d;
        depth.push(level.max(0) as usize);
    }
    (poison, depth)
}

/// True when an item starts at `i`: a block keyword before `{`, or a line keyword before a name.
fn starts_item(toks: &[Spanned<'_>], i: usize) -> bool {
    let Some((Tok::Ident(word), _)) = toks.get(i) else { return false };
    match toks.get(i + 1) {
        Some((Tok::LBrace, _)) => BLOCK_KEYWORDS.contains(word) || *word == "time",
        Some((Tok::Ident(_), _)) => LINE_KEYWORDS.contains(word),
        _ => false,
    }
}

/// True when an entry of a block starts at `i`: `name'` (a dynamics equation) or `name:` (a
/// labelled constraint), which no expression can continue with. A half-typed `v' =` then
/// ends on its own line instead of swallowing the next equation.
fn starts_entry(toks: &[Spanned<'_>], i: usize) -> bool {
    matches!(
        (toks.get(i), toks.get(i + 1)),
        (Some((Tok::Ident(_), _)), Some((Tok::Prime | Tok::Colon, _)))
    )
}

/// Drops the line breaks that do not end an entry, and turns `///` lines that sit inside an
/// entry (where nothing can carry them) into plain comments.
fn significant_tokens<'a>(
    raw: &[Spanned<'a>],
    poison: &[bool],
    depth: &[usize],
    comments: &mut Vec<Comment>,
) -> (Vec<Spanned<'a>>, Vec<bool>) {
    let mut out: Vec<Spanned<'a>> = Vec::with_capacity(raw.len());
    let mut out_poison = Vec::with_capacity(raw.len());
    let mut last_code: Option<Tok<'a>> = None;
    // Per token, the first one at or after it that is neither a line break nor a doc comment
    // (`raw.len()` if none): looked up, not searched for, so a run of blank lines inside an
    // entry costs linear time (searching made 400,000 of them take 43 s).
    let mut next_code = vec![raw.len(); raw.len() + 1];
    for i in (0..raw.len()).rev() {
        next_code[i] =
            if matches!(raw[i].0, Tok::Newline | Tok::Doc(_)) { next_code[i + 1] } else { i };
    }
    for (i, &(tok, span)) in raw.iter().enumerate() {
        match tok {
            Tok::Newline => {
                if matches!(out.last(), Some((Tok::Newline, _))) {
                    continue;
                }
                let inside_pair = depth[i] > 0;
                let continues = last_code.is_some_and(|t| t.continues_line());
                if inside_pair || continues {
                    // A new item on the next line always ends the entry: a dangling operator
                    // must not pull the next item into this one.
                    let next = Some(next_code[i]).filter(|&k| k < raw.len());
                    if !next.is_some_and(|k| starts_item(raw, k) || starts_entry(raw, k)) {
                        continue;
                    }
                }
            }
            Tok::Doc(text) => {
                let at_entry_start = matches!(
                    out.last(),
                    None | Some((
                        Tok::Newline | Tok::Semi | Tok::LBrace | Tok::RBrace | Tok::Doc(_),
                        _
                    ))
                );
                if !at_entry_start {
                    comments.push(Comment {
                        text: text.get(2..).unwrap_or("").to_string(),
                        span: sp(span),
                        own_line: true,
                    });
                    continue;
                }
            }
            other => last_code = Some(other),
        }
        out.push((tok, span));
        out_poison.push(poison[i]);
    }
    (out, out_poison)
}

fn doc_line(source: &str) -> &str {
    let body = source.get(3..).unwrap_or("");
    body.strip_prefix(' ').unwrap_or(body)
}

/// Attaching a doc comment to the entry it precedes.
trait HasDoc {
    fn set_doc(&mut self, doc: Option<Doc>);
}

macro_rules! has_doc {
    ($($t:ty),*) => {$(
        impl HasDoc for $t {
            fn set_doc(&mut self, doc: Option<Doc>) {
                self.doc = doc;
            }
        }
    )*};
}
has_doc!(ConstDecl, FnDecl, VarDecl, Equation, CostStmt, Constraint, Setting, Expectation);

struct Driver<'t, 'a> {
    toks: &'t [Spanned<'a>],
    poison: Vec<bool>,
    pos: usize,
    diagnostics: Vec<Diagnostic>,
    comments: Vec<Comment>,
}

impl<'t> Driver<'t, 't> {
    fn tok(&self, i: usize) -> Option<Tok<'t>> {
        self.toks.get(i).map(|t| t.0)
    }

    fn span(&self, i: usize) -> Span {
        self.toks.get(i).map_or(Span::default(), |t| sp(t.1))
    }

    fn at_line_start(&self, i: usize) -> bool {
        i == 0 || matches!(self.tok(i - 1), Some(Tok::Newline | Tok::Semi))
    }

    fn skip_separators(&mut self) {
        while matches!(self.tok(self.pos), Some(Tok::Newline | Tok::Semi)) {
            self.pos += 1;
        }
    }

    /// Collects the `///` lines before the next entry (skipping line breaks) into one doc.
    fn take_docs(&mut self, limit: usize) -> Option<Doc> {
        let mut lines: Vec<(&str, Span)> = Vec::new();
        while self.pos < limit {
            match self.tok(self.pos) {
                Some(Tok::Doc(text)) => lines.push((text, self.span(self.pos))),
                Some(Tok::Newline) if !lines.is_empty() => {}
                _ => break,
            }
            self.pos += 1;
        }
        let first = lines.first()?.1;
        let last = lines.last()?.1;
        let text = lines.iter().map(|(t, _)| doc_line(t)).collect::<Vec<_>>().join("\n");
        Some(Doc { text, span: first.to(last) })
    }

    /// A doc comment with nothing to document stays in the file as a comment.
    fn dangling_doc(&mut self, doc: Option<Doc>) {
        let Some(doc) = doc else { return };
        // Recover the individual lines from the tokens that formed the doc.
        for &(tok, span) in
            self.toks.iter().filter(|(_, s)| doc.span.start <= s.start && s.end <= doc.span.end)
        {
            if let Tok::Doc(text) = tok {
                self.comments.push(Comment {
                    text: text.get(2..).unwrap_or("").to_string(),
                    span: sp(span),
                    own_line: true,
                });
            }
        }
    }

    /// Runs one entry parser over `toks[range]`.
    fn entry<T>(&mut self, parser: &P<'t, Option<T>>, range: std::ops::Range<usize>) -> Option<T> {
        let slice = &self.toks[range.clone()];
        let last = slice.last()?.1;
        if let Some(d) = too_deep(slice) {
            self.diagnostics.push(d);
            return None;
        }
        let eoi = SimpleSpan::from(last.end..last.end);
        let input = slice.map(eoi, split as SplitFn<'t>);
        let mut sink = Sink::default();
        let (output, errors) = parser.parse_with_state(input, &mut sink).into_output_errors();
        self.diagnostics.append(&mut sink.diagnostics);
        let already_reported =
            self.poison[range].iter().any(|&p| p) || slice.iter().any(|(t, _)| *t == Tok::Error);
        if let Some(error) = errors.first() {
            if !already_reported {
                self.diagnostics.push(convert_error(error, slice));
            }
        }
        output.flatten()
    }

    fn file(&mut self, g: &Grammar<'t>, len: usize) -> File {
        let mut file = File {
            doc: None,
            name: None,
            items: Vec::new(),
            comments: Vec::new(),
            span: Span::new(0, len),
        };
        let mut header_seen = false;
        loop {
            self.skip_separators();
            let doc = self.take_docs(self.toks.len());
            self.skip_separators();
            let Some(tok) = self.tok(self.pos) else {
                self.dangling_doc(doc);
                break;
            };
            match tok {
                Tok::Ident("problem") => {
                    let kw = self.span(self.pos);
                    let end = self.line_end(self.pos);
                    if header_seen {
                        self.pos = end;
                        self.diagnostics.push(
                            Diagnostic::new(
                                codes::DUPLICATE_PROBLEM_HEADER,
                                "second `problem` header",
                                kw,
                                "a file states one problem",
                            )
                            .with_help(
                                "remove this line, or move the second problem to its own file",
                            ),
                        );
                        self.dangling_doc(doc);
                        continue;
                    }
                    let name = self.entry(&g.header, self.pos..end);
                    self.pos = end;
                    header_seen = true;
                    if !file.items.is_empty() {
                        // The early "missing header" is superseded by the precise complaint.
                        self.diagnostics.retain(|d| {
                            !(d.code == codes::MISSING_PROBLEM_HEADER
                                && d.message == MISSING_HEADER)
                        });
                        self.diagnostics.push(
                            Diagnostic::new(
                                codes::MISSING_PROBLEM_HEADER,
                                "`problem` header must come first",
                                kw,
                                "other items come before this header",
                            )
                            .with_help("move `problem NAME` to the top of the file"),
                        );
                    }
                    if file.doc.is_none() {
                        file.doc = doc;
                    } else {
                        self.dangling_doc(doc);
                    }
                    file.name = name;
                }
                Tok::Ident(word)
                    if BLOCK_KEYWORDS.contains(&word) || LINE_KEYWORDS.contains(&word) =>
                {
                    if !header_seen && file.items.is_empty() {
                        let kw = self.span(self.pos);
                        self.diagnostics.push(
                            Diagnostic::new(
                                codes::MISSING_PROBLEM_HEADER,
                                MISSING_HEADER,
                                kw,
                                "expected `problem NAME` before this item",
                            )
                            .with_help("start the file with `problem my_problem`"),
                        );
                    }
                    self.item(g, word, doc, &mut file.items);
                }
                Tok::RBrace => {
                    self.diagnostics.push(
                        Diagnostic::new(
                            codes::UNMATCHED_DELIMITER,
                            "unmatched `}`",
                            self.span(self.pos),
                            "no block is open here",
                        )
                        .with_help("remove it, or add the block it should close"),
                    );
                    self.dangling_doc(doc);
                    self.pos += 1;
                }
                other => {
                    self.unknown_item(other);
                    self.dangling_doc(doc);
                    self.skip_to_next_item();
                }
            }
        }
        if !header_seen && file.items.is_empty() {
            let span = self.toks.first().map_or(Span::new(0, 0), |t| sp(t.1));
            self.diagnostics.push(
                Diagnostic::new(
                    codes::MISSING_PROBLEM_HEADER,
                    MISSING_HEADER,
                    span,
                    "expected `problem NAME` here",
                )
                .with_help("start the file with `problem my_problem`"),
            );
        }
        file
    }

    fn unknown_item(&mut self, tok: Tok<'t>) {
        let span = self.span(self.pos);
        let keywords = LINE_KEYWORDS.iter().chain(BLOCK_KEYWORDS).copied();
        let d = match tok {
            Tok::Ident(word) => {
                let d = Diagnostic::new(
                    codes::UNKNOWN_ITEM,
                    format!("unknown item `{word}`"),
                    span,
                    "expected an item keyword",
                );
                match closest_name(word, keywords) {
                    Some(near) => d.with_help(format!("did you mean `{near}`?")),
                    None => d.with_help(format!("items start with one of {}", keywords_list())),
                }
            }
            Tok::Error => return,
            other => Diagnostic::new(
                codes::UNKNOWN_ITEM,
                format!("expected an item, found `{other}`"),
                span,
                "expected an item keyword",
            )
            .with_help(format!("items start with one of {}", keywords_list())),
        };
        self.diagnostics.push(d);
    }

    /// Skips a broken item: to the next line outside its braces, or the next line that starts
    /// with an item keyword even inside them.
    fn skip_to_next_item(&mut self) {
        let mut depth = 0usize;
        loop {
            match self.tok(self.pos) {
                None => return,
                Some(Tok::LBrace) => depth += 1,
                Some(Tok::RBrace) => depth = depth.saturating_sub(1),
                _ => {}
            }
            self.pos += 1;
            let Some(next) = self.tok(self.pos) else { return };
            if self.at_line_start(self.pos)
                && !matches!(next, Tok::Newline | Tok::Semi | Tok::Doc(_))
            {
                let keyword = matches!(next, Tok::Ident(w) if BLOCK_KEYWORDS.contains(&w) || LINE_KEYWORDS.contains(&w));
                if depth == 0 || keyword {
                    return;
                }
            }
        }
    }

    /// The end of the line item starting at `from`: the next separator.
    fn line_end(&self, from: usize) -> usize {
        (from..self.toks.len())
            .find(|&i| matches!(self.tok(i), Some(Tok::Newline | Tok::Semi)))
            .unwrap_or(self.toks.len())
    }

    fn item(&mut self, g: &Grammar<'t>, word: &str, doc: Option<Doc>, items: &mut Vec<Item>) {
        let kw = self.span(self.pos);
        match word {
            "fn" => {
                let end = self.line_end(self.pos);
                let decl = self.entry(&g.fn_decl, self.pos..end);
                self.pos = end;
                match decl {
                    Some(mut f) => {
                        f.set_doc(doc);
                        items.push(Item::Fn(f));
                    }
                    None => self.dangling_doc(doc),
                }
            }
            "time" if self.next_non_newline(self.pos + 1) == Some(Tok::LBrace) => {
                self.diagnostics.push(
                    Diagnostic::new(
                        codes::UNEXPECTED_TOKEN,
                        "`time` declares one variable, not a block",
                        kw,
                        "expected a name after `time`",
                    )
                    .with_help("write `time t [s]: start 0, end 10`"),
                );
                let block = self.block(&g.var_decl, word, doc);
                items.extend(block.entries.into_iter().map(Item::Time));
            }
            "time" => {
                let end = self.line_end(self.pos);
                let decl = self.entry(&g.var_decl, self.pos + 1..end);
                if decl.is_none() && self.pos + 1 == end {
                    self.diagnostics.push(
                        Diagnostic::new(
                            codes::UNEXPECTED_TOKEN,
                            "`time` needs a variable",
                            kw,
                            "expected a name after `time`",
                        )
                        .with_help("write `time t [s]: start 0, end 10`"),
                    );
                }
                self.pos = end;
                match decl {
                    Some(mut v) => {
                        v.set_doc(doc);
                        v.span = kw.to(v.span);
                        items.push(Item::Time(v));
                    }
                    None => self.dangling_doc(doc),
                }
            }
            "const" => items.push(Item::Const(self.block(&g.const_decl, word, doc))),
            "param" => items.push(Item::Param(self.block(&g.var_decl, word, doc))),
            "state" => items.push(Item::State(self.block(&g.var_decl, word, doc))),
            "control" => items.push(Item::Control(self.block(&g.var_decl, word, doc))),
            "dynamics" => items.push(Item::Dynamics(self.block(&g.equation, word, doc))),
            "cost" => items.push(Item::Cost(self.block(&g.cost, word, doc))),
            "path" => items.push(Item::Path(self.block(&g.constraint, word, doc))),
            "boundary" => items.push(Item::Boundary(self.block(&g.constraint, word, doc))),
            "solve" => items.push(Item::Solve(self.block(&g.setting, word, doc))),
            _ => items.push(Item::Expect(self.block(&g.expectation, word, doc))),
        }
    }

    fn next_non_newline(&self, from: usize) -> Option<Tok<'t>> {
        self.toks[from.min(self.toks.len())..].iter().map(|t| t.0).find(|t| *t != Tok::Newline)
    }

    /// `keyword { entry ... }` with the keyword at `self.pos`.
    fn block<T: HasDoc>(
        &mut self,
        parser: &P<'t, Option<T>>,
        word: &str,
        doc: Option<Doc>,
    ) -> Block<T> {
        let kw = self.span(self.pos);
        self.pos += 1;
        let mut open = self.pos;
        while self.tok(open) == Some(Tok::Newline) {
            open += 1;
        }
        let mut ranges = Vec::new();
        let end_span;
        if self.tok(open) == Some(Tok::LBrace) {
            let mut i = open + 1;
            let mut entry_start = i;
            let close = loop {
                match self.tok(i) {
                    None => break None,
                    Some(Tok::RBrace) => break Some(i),
                    // A line of `///` belongs to the entry below it.
                    Some(Tok::Newline)
                        if self.toks[entry_start..i].iter().all(|t| matches!(t.0, Tok::Doc(_)))
                            && entry_start < i => {}
                    Some(Tok::Newline | Tok::Semi) => {
                        ranges.push(entry_start..i);
                        entry_start = i + 1;
                    }
                    Some(Tok::Ident(w))
                        if starts_item(self.toks, i)
                            && (BLOCK_KEYWORDS.contains(&w) || self.at_line_start(i)) =>
                    {
                        break None
                    }
                    Some(_) => {}
                }
                i += 1;
            };
            ranges.push(entry_start..i);
            self.pos = match close {
                Some(c) => c + 1,
                None => i,
            };
            if close.is_none() {
                let mut d = Diagnostic::new(
                    codes::UNCLOSED_DELIMITER,
                    format!("unclosed `{word}` block"),
                    self.span(open),
                    "this `{` is never closed",
                )
                .with_help("add `}` after the last entry");
                if i < self.toks.len() {
                    d = d.with_label(self.span(i), "the block must be closed before this item");
                }
                self.diagnostics.push(d);
            }
            end_span = self.span(self.pos.saturating_sub(1).max(open));
        } else {
            let end = self.line_end(self.pos);
            let mut d = Diagnostic::new(
                codes::MISSING_BLOCK,
                format!("expected `{{` after `{word}`"),
                kw,
                format!("`{word}` lists its entries in braces"),
            )
            .with_help(format!("write `{word} {{ ... }}` with one entry per line"));
            if let Some(found) = self.tok(self.pos).filter(|_| self.pos < end) {
                d = d.with_label(self.span(self.pos), format!("found `{found}`"));
            }
            self.diagnostics.push(d);
            let mut start = self.pos;
            for i in self.pos..end {
                if self.tok(i) == Some(Tok::Semi) {
                    ranges.push(start..i);
                    start = i + 1;
                }
            }
            ranges.push(start..end);
            end_span = if end > self.pos { self.span(end - 1) } else { kw };
            self.pos = end;
        }

        let mut entries = Vec::new();
        for range in ranges {
            let saved = self.pos;
            self.pos = range.start;
            let entry_doc = self.take_docs(range.end);
            let start = self.pos;
            self.pos = saved;
            if start >= range.end {
                self.dangling_doc(entry_doc);
                continue;
            }
            match self.entry(parser, start..range.end) {
                Some(mut entry) => {
                    entry.set_doc(entry_doc);
                    entries.push(entry);
                }
                None => self.dangling_doc(entry_doc),
            }
        }
        Block { doc, keyword: kw, entries, span: kw.to(end_span) }
    }
}

fn keywords_list() -> String {
    let all: Vec<String> =
        LINE_KEYWORDS.iter().chain(BLOCK_KEYWORDS).map(|k| format!("`{k}`")).collect();
    all.join(", ")
}

/// Reports an entry whose nesting or length could exhaust the stack of a recursive walk.
fn too_deep(slice: &[Spanned<'_>]) -> Option<Diagnostic> {
    let mut depth = 0usize;
    let mut operators = 0usize;
    for (tok, span) in slice {
        match tok {
            Tok::LParen | Tok::LBracket => {
                depth += 1;
                if depth > MAX_NESTING {
                    return Some(
                        Diagnostic::new(
                            codes::NESTING_TOO_DEEP,
                            "expression is nested too deeply",
                            sp(*span),
                            format!("more than {MAX_NESTING} levels of parentheses"),
                        )
                        .with_help("split the expression with a `const` or an `fn` helper"),
                    );
                }
            }
            Tok::RParen | Tok::RBracket => depth = depth.saturating_sub(1),
            Tok::Plus | Tok::Minus | Tok::Star | Tok::Slash | Tok::Caret => {
                operators += 1;
                if operators > MAX_OPERATORS {
                    return Some(
                        Diagnostic::new(
                            codes::NESTING_TOO_DEEP,
                            "expression is too long",
                            sp(*span),
                            format!("more than {MAX_OPERATORS} operators in one entry"),
                        )
                        .with_help("split the expression with a `const` or an `fn` helper"),
                    );
                }
            }
            _ => {}
        }
    }
    None
}

/// Turns chumsky's first error in an entry into a diagnostic.
fn convert_error(error: &Rich<'_, Tok<'_>, SimpleSpan>, slice: &[Spanned<'_>]) -> Diagnostic {
    let mut expected: Vec<String> = Vec::new();
    let mut saw_operator = false;
    let mut saw_expression = false;
    for pattern in error.expected() {
        let text = match pattern {
            RichPattern::Token(t) => match &**t {
                // `-` alone may be a unary minus, which "an expression" already covers.
                Tok::Minus => continue,
                Tok::Plus | Tok::Star | Tok::Slash | Tok::Caret => {
                    saw_operator = true;
                    continue;
                }
                other => format!("`{other}`"),
            },
            RichPattern::Label(l) => l.to_string(),
            RichPattern::Identifier(i) => format!("`{i}`"),
            RichPattern::EndOfInput => "end of line".to_string(),
            _ => continue,
        };
        if text == "an expression" {
            saw_expression = true;
        }
        if !expected.contains(&text) {
            expected.push(text);
        }
    }
    if saw_operator {
        // After a complete operand the useful news is "an operator", not every token that
        // could extend the operand.
        expected.retain(|e| e != "`'`" && e != "`(`" && e != "`[`");
        expected.insert(0, "an operator".to_string());
    }
    expected.retain(|e| e != "`'`");
    let list = join_or(&expected);
    let only_expression = saw_expression && expected.len() == 1;
    match error.found() {
        Some(found) => {
            let span = sp(*error.span());
            if only_expression {
                Diagnostic::new(
                    codes::EXPECTED_EXPRESSION,
                    format!("expected an expression, found `{found}`"),
                    span,
                    "expected an expression here",
                )
            } else {
                Diagnostic::new(
                    codes::UNEXPECTED_TOKEN,
                    format!("unexpected `{found}`"),
                    span,
                    format!("expected {list}"),
                )
            }
        }
        None => {
            let (last, last_span) =
                slice.last().map_or((Tok::Error, SimpleSpan::from(0..0)), |t| *t);
            let span = sp(last_span);
            if only_expression {
                Diagnostic::new(
                    codes::EXPECTED_EXPRESSION,
                    format!("expected an expression after `{last}`"),
                    span,
                    "an expression must follow this",
                )
            } else {
                Diagnostic::new(
                    codes::UNEXPECTED_TOKEN,
                    format!("expected {list} after `{last}`"),
                    span,
                    "the entry ends after this",
                )
            }
        }
    }
}

fn join_or(items: &[String]) -> String {
    match items {
        [] => "something else".to_string(),
        [one] => one.clone(),
        [init @ .., last] => format!("{} or {last}", init.join(", ")),
    }
}
