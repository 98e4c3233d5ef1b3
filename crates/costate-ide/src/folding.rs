//! Folding ranges: blocks and function declarations that span lines, and runs of comment lines.

use costate_syntax::TokenKind;

use crate::Analysis;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FoldKind {
    Region,
    Comment,
}

/// Lines are zero-based; a fold hides the lines after `start_line` up to `end_line`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Fold {
    pub start_line: u32,
    pub end_line: u32,
    pub kind: FoldKind,
}

pub fn folding_ranges(analysis: &Analysis) -> Vec<Fold> {
    let index = &analysis.line_index;
    let mut out = Vec::new();
    for item in &analysis.parse.file.items {
        let span = item.span();
        let (start, end) = (index.line_of(span.start), index.line_of(span.end.saturating_sub(1)));
        if end > start {
            out.push(Fold { start_line: start, end_line: end, kind: FoldKind::Region });
        }
    }
    // Consecutive lines that hold only a comment.
    let mut run: Option<(u32, u32)> = None;
    let mut last_code_line = None;
    for token in &analysis.tokens {
        let line = index.line_of(token.span.start);
        match token.kind {
            TokenKind::Newline => continue,
            TokenKind::Comment | TokenKind::DocComment if last_code_line != Some(line) => {
                run = match run {
                    Some((s, e)) if e + 1 == line => Some((s, line)),
                    other => {
                        push_comment_run(other, &mut out);
                        Some((line, line))
                    }
                };
            }
            _ => last_code_line = Some(line),
        }
    }
    push_comment_run(run, &mut out);
    out.sort_by_key(|f| (f.start_line, f.end_line));
    out
}

fn push_comment_run(run: Option<(u32, u32)>, out: &mut Vec<Fold>) {
    if let Some((s, e)) = run.filter(|(s, e)| e > s) {
        out.push(Fold { start_line: s, end_line: e, kind: FoldKind::Comment });
    }
}
