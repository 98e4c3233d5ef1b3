//! Semantic tokens: every lexer token classified by what it means (a state, a built-in, a unit,
//! a contextual keyword ...), so the editor colours names by their role.

use std::collections::HashSet;

use costate_check::SymbolKind;
use costate_syntax::{Span, TokenKind, BLOCK_KEYWORDS, LINE_KEYWORDS};

use crate::Analysis;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TokenType {
    Keyword,
    Variable,
    Parameter,
    Function,
    Number,
    Comment,
    Operator,
    /// A unit inside `[...]`.
    Type,
    /// A `solve` key.
    Property,
    /// A constant.
    EnumMember,
}

/// The token types in legend order, named as the editor protocol's standard types; the index
/// of a [`TokenType`] in this list is `token_type as usize`.
pub const TOKEN_TYPES: &[&str] = &[
    "keyword",
    "variable",
    "parameter",
    "function",
    "number",
    "comment",
    "operator",
    "type",
    "property",
    "enumMember",
];

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SemanticToken {
    pub span: Span,
    pub token_type: TokenType,
    /// The declaration of the name, not a use.
    pub declaration: bool,
}

const OTHER_KEYWORDS: &[&str] =
    &["start", "end", "in", "guess", "scale", "free", "minimize", "maximize", "within"];

/// Tokens in source order; tokens with no special meaning (punctuation) are left out.
pub fn semantic_tokens(analysis: &Analysis) -> Vec<SemanticToken> {
    let mut out = Vec::new();
    let mut bracket_depth = 0usize;
    let mut block_stack: Vec<bool> = Vec::new();
    let mut previous: Option<&str> = None;
    let declared: HashSet<Span> = analysis
        .check
        .symbols
        .iter()
        .filter(|s| s.kind != SymbolKind::Builtin)
        .map(|s| s.name_span)
        .collect();
    for token in &analysis.tokens {
        let text = analysis.text(token.span);
        let token_type = match token.kind {
            TokenKind::LBracket => {
                bracket_depth += 1;
                None
            }
            TokenKind::RBracket => {
                bracket_depth = bracket_depth.saturating_sub(1);
                None
            }
            TokenKind::LBrace => {
                block_stack.push(previous == Some("solve"));
                None
            }
            TokenKind::RBrace => {
                block_stack.pop();
                None
            }
            TokenKind::Number => Some(TokenType::Number),
            TokenKind::Comment | TokenKind::DocComment => Some(TokenType::Comment),
            TokenKind::Plus
            | TokenKind::Minus
            | TokenKind::Star
            | TokenKind::Slash
            | TokenKind::Caret
            | TokenKind::Eq
            | TokenKind::EqEq
            | TokenKind::Le
            | TokenKind::Ge
            | TokenKind::Prime => Some(TokenType::Operator),
            TokenKind::Ident if bracket_depth > 0 => Some(TokenType::Type),
            TokenKind::Ident => {
                let in_solve = block_stack.last().copied().unwrap_or(false);
                classify(analysis, token.span, text, in_solve, declared.contains(&token.span))
            }
            _ => None,
        };
        if token.kind != TokenKind::Newline && !token.kind.is_trivia() {
            previous = Some(text);
        }
        if let Some(token_type) = token_type {
            let declaration = declared.contains(&token.span);
            out.push(SemanticToken { span: token.span, token_type, declaration });
        }
    }
    out
}

fn classify(
    analysis: &Analysis,
    span: Span,
    text: &str,
    in_solve: bool,
    declared: bool,
) -> Option<TokenType> {
    let symbol = analysis.check.resolve(span).or_else(|| {
        declared
            .then(|| {
                analysis
                    .check
                    .symbols
                    .iter()
                    .find(|s| s.kind != SymbolKind::Builtin && s.name_span == span)
            })
            .flatten()
    });
    if let Some(symbol) = symbol {
        return Some(match symbol.kind {
            SymbolKind::Const => TokenType::EnumMember,
            SymbolKind::Function | SymbolKind::Builtin => TokenType::Function,
            SymbolKind::FnParam => TokenType::Parameter,
            SymbolKind::Param => TokenType::Parameter,
            SymbolKind::Time | SymbolKind::State | SymbolKind::Control => TokenType::Variable,
        });
    }
    if in_solve && costate_check::settings::key_def(text).is_some() {
        return Some(TokenType::Property);
    }
    let is_keyword = BLOCK_KEYWORDS.contains(&text)
        || LINE_KEYWORDS.contains(&text)
        || OTHER_KEYWORDS.contains(&text)
        || text == "cost";
    is_keyword.then_some(TokenType::Keyword)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The language server sends `token_type as usize` as the legend index.
    #[test]
    fn token_types_are_declared_in_legend_order() {
        let all = [
            TokenType::Keyword,
            TokenType::Variable,
            TokenType::Parameter,
            TokenType::Function,
            TokenType::Number,
            TokenType::Comment,
            TokenType::Operator,
            TokenType::Type,
            TokenType::Property,
            TokenType::EnumMember,
        ];
        assert_eq!(all.len(), TOKEN_TYPES.len());
        for t in all {
            let name = format!("{t:?}");
            let legend = TOKEN_TYPES[t as usize];
            assert!(name.eq_ignore_ascii_case(legend), "{name} is sent as `{legend}`");
        }
    }
}
