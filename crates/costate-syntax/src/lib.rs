//! costate-syntax: the text layer of the costate problem language.
//!
//! Owns spans, the line index, the lexer, the parser (chumsky), the syntax tree, the formatter
//! and the project's one `Diagnostic` type.
//!
//! Architecture invariant: this crate never fails and never checks meaning. `parse` turns any
//! text into a tree plus syntax diagnostics; names, units and well-posedness belong to
//! `costate-check`. It does no IO and depends on no other costate crate.

pub mod ast;
pub mod codes;
pub mod diagnostic;
pub mod fmt;
pub mod lexer;
pub mod line_index;
mod parser;
mod span;
pub mod testing;

pub use diagnostic::{
    closest_name, shown_diagnostics, Code, Diagnostic, Label, Severity, MAX_SHOWN_DIAGNOSTICS,
};
pub use lexer::{lex, Token, TokenKind};
pub use line_index::{LineCol, LineIndex};
pub use parser::{parse, Parse, BLOCK_KEYWORDS, LINE_KEYWORDS};
pub use span::Span;
