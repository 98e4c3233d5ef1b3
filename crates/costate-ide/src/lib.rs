//! costate-ide: the editor features of the costate language, as pure functions over one
//! [`Analysis`] snapshot of a file (its text, syntax tree, tokens and check result).
//!
//! Owns diagnostics, hover, completion, navigation (definition, references, rename), the
//! outline, semantic tokens, formatting, signature help, folding ranges, inlay hints and the
//! solve-result lens. Positions are byte offsets and [`Span`]s; converting them to the editor's
//! UTF-16 positions is the language server's job (with `costate_syntax::LineIndex`).
//!
//! Architecture invariant: no IO, no async, no editor-protocol types, and no dependency on the
//! solver. What a solve found reaches this crate as plain data ([`SolveSummary`]), built by the
//! language server from the solution document.

mod completion;
mod folding;
mod hover;
mod inlay;
mod navigation;
mod signature;
mod solution;
mod symbols;
mod tokens;

use costate_syntax::{Diagnostic, LineIndex, Span, Token};

pub use completion::{completions, CompletionItem, CompletionKind};
pub use folding::{folding_ranges, Fold, FoldKind};
pub use hover::{hover, Hover};
pub use inlay::{inlay_hints, problem_lens, InlayHint, Lens};
pub use navigation::{definition, references, rename, RenameError};
pub use signature::{builtin_signature, signature_help, SignatureHelp};
pub use solution::{SolveSummary, VariableResult};
pub use symbols::{document_symbols, OutlineKind, OutlineSymbol};
pub use tokens::{semantic_tokens, SemanticToken, TokenType, TOKEN_TYPES};

/// Everything known about one version of one file. Built once per change; every feature reads it.
#[derive(Debug)]
pub struct Analysis {
    pub source: String,
    pub line_index: LineIndex,
    pub parse: costate_syntax::Parse,
    pub check: costate_check::Analysis,
    /// The lexer's tokens, comments and newlines included.
    pub tokens: Vec<Token>,
    /// Syntax and check diagnostics, in source order.
    pub diagnostics: Vec<Diagnostic>,
}

impl Analysis {
    pub fn new(source: String) -> Analysis {
        let parse = costate_syntax::parse(&source);
        let check = costate_check::check(&parse.file);
        let (tokens, _) = costate_syntax::lex(&source);
        let mut diagnostics = parse.diagnostics.clone();
        diagnostics.extend(check.diagnostics.iter().cloned());
        diagnostics.sort_by_key(|d| (d.primary.span.start, d.primary.span.end));
        let line_index = LineIndex::new(&source);
        Analysis { source, line_index, parse, check, tokens, diagnostics }
    }

    /// `offset` clamped to the text and moved back to a character boundary, so that a position
    /// from a stale or hostile client never panics a slice.
    pub fn clamp(&self, offset: usize) -> usize {
        let mut offset = offset.min(self.source.len());
        while !self.source.is_char_boundary(offset) {
            offset -= 1;
        }
        offset
    }

    /// The text of `span`, or "" when it does not fit the text.
    pub fn text(&self, span: Span) -> &str {
        self.source.get(span.range()).unwrap_or("")
    }

    /// The name token touching `offset` (the cursor may sit just after it).
    pub fn word_at(&self, offset: usize) -> Option<Span> {
        let offset = self.clamp(offset);
        let bytes = self.source.as_bytes();
        let is_word = |b: u8| b.is_ascii_alphanumeric() || b == b'_';
        let mut start = offset;
        while start > 0 && is_word(bytes[start - 1]) {
            start -= 1;
        }
        let mut end = offset;
        while end < bytes.len() && is_word(bytes[end]) {
            end += 1;
        }
        (start < end).then_some(Span::new(start, end))
    }
}

/// The canonical layout of the file (the formatter of `costate fmt`), or `None` when the text
/// has syntax errors (it is then never rewritten) or is already formatted.
pub fn format(analysis: &Analysis) -> Option<String> {
    let formatted = costate_syntax::fmt::format_source(&analysis.source).ok()?;
    (formatted != analysis.source).then_some(formatted)
}
