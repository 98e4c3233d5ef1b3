//! Go to definition, find references and rename.

use costate_check::{Builtin, SymbolKind};
use costate_syntax::{Span, BLOCK_KEYWORDS, LINE_KEYWORDS};

use crate::Analysis;

/// Words that may not become a name, even though keywords are contextual: renaming to one would
/// make some use of the name read as a keyword.
const RESERVED: &[&str] =
    &["start", "end", "in", "guess", "scale", "free", "minimize", "maximize", "within", "cost"];

/// The declaration of the name at `offset` (the name's span), for declared symbols.
pub fn definition(analysis: &Analysis, offset: usize) -> Option<Span> {
    let word = analysis.word_at(offset)?;
    let symbol = analysis.check.symbol_at(word.start)?;
    (symbol.kind != SymbolKind::Builtin).then_some(symbol.name_span)
}

/// Every use of the name at `offset`, and its declaration first when `include_declaration`.
pub fn references(analysis: &Analysis, offset: usize, include_declaration: bool) -> Vec<Span> {
    let Some(symbol) = analysis.word_at(offset).and_then(|w| analysis.check.symbol_at(w.start))
    else {
        return Vec::new();
    };
    let mut spans = Vec::new();
    if include_declaration && symbol.kind != SymbolKind::Builtin {
        spans.push(symbol.name_span);
    }
    // A resolution may cover more than the name (`x'`); keep the name part only.
    let len = symbol.name.len();
    spans.extend(
        analysis.check.references(symbol.id).into_iter().map(|s| Span::new(s.start, s.start + len)),
    );
    spans
}

#[derive(Clone, Debug, PartialEq, Eq)]
pub enum RenameError {
    NotAName,
    BuiltIn(String),
    InvalidName(String),
    Taken(String),
}

impl std::fmt::Display for RenameError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            RenameError::NotAName => write!(f, "there is no declared name here to rename"),
            RenameError::BuiltIn(n) => write!(f, "`{n}` is built in and cannot be renamed"),
            RenameError::InvalidName(n) => write!(
                f,
                "`{n}` is not a valid name: use ASCII letters, digits and `_`, not starting with a digit, and no keyword"
            ),
            RenameError::Taken(n) => write!(f, "`{n}` is already declared"),
        }
    }
}

/// The edits that rename the symbol at `offset` to `new_name`: every span to replace.
pub fn rename(
    analysis: &Analysis,
    offset: usize,
    new_name: &str,
) -> Result<Vec<Span>, RenameError> {
    let word = analysis.word_at(offset).ok_or(RenameError::NotAName)?;
    let symbol = analysis.check.symbol_at(word.start).ok_or(RenameError::NotAName)?;
    if symbol.kind == SymbolKind::Builtin {
        return Err(RenameError::BuiltIn(symbol.name.clone()));
    }
    if !is_valid_name(new_name) {
        return Err(RenameError::InvalidName(new_name.to_string()));
    }
    let clash = analysis.check.symbols.iter().any(|s| {
        s.name == new_name
            && s.id != symbol.id
            && (s.kind != SymbolKind::FnParam || s.owner == symbol.owner)
    });
    if clash {
        return Err(RenameError::Taken(new_name.to_string()));
    }
    Ok(references(analysis, offset, true))
}

fn is_valid_name(name: &str) -> bool {
    let mut chars = name.chars();
    let first_ok = chars.next().is_some_and(|c| c.is_ascii_alphabetic() || c == '_');
    first_ok
        && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_')
        && !BLOCK_KEYWORDS.contains(&name)
        && !LINE_KEYWORDS.contains(&name)
        && !RESERVED.contains(&name)
        && Builtin::from_name(name).is_none()
}
