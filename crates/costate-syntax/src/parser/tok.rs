//! The parser's token: the lexer's kind plus the text that identifiers and numbers carry.
//!
//! Punctuation variants carry no data so `just(Tok::Comma)` compares by kind alone.

use std::fmt;

use crate::lexer::TokenKind;

#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) enum Tok<'a> {
    Ident(&'a str),
    Number(&'a str),
    LBrace,
    RBrace,
    LParen,
    RParen,
    LBracket,
    RBracket,
    Comma,
    Colon,
    Semi,
    Plus,
    Minus,
    Star,
    Slash,
    Caret,
    Percent,
    Prime,
    Eq,
    EqEq,
    Le,
    Ge,
    Lt,
    Gt,
    DotDot,
    Newline,
    /// One `///` line on its own line, with its slashes.
    Doc(&'a str),
    /// Malformed input already reported by the lexer.
    Error,
}

impl<'a> Tok<'a> {
    /// The parser's view of a non-comment lexer token with source text `text`.
    pub(crate) fn new(kind: TokenKind, text: &'a str) -> Tok<'a> {
        use TokenKind as K;
        match kind {
            K::Ident => Tok::Ident(text),
            K::Number => Tok::Number(text),
            K::LBrace => Tok::LBrace,
            K::RBrace => Tok::RBrace,
            K::LParen => Tok::LParen,
            K::RParen => Tok::RParen,
            K::LBracket => Tok::LBracket,
            K::RBracket => Tok::RBracket,
            K::Comma => Tok::Comma,
            K::Colon => Tok::Colon,
            K::Semi => Tok::Semi,
            K::Plus => Tok::Plus,
            K::Minus => Tok::Minus,
            K::Star => Tok::Star,
            K::Slash => Tok::Slash,
            K::Caret => Tok::Caret,
            K::Percent => Tok::Percent,
            K::Prime => Tok::Prime,
            K::Eq => Tok::Eq,
            K::EqEq => Tok::EqEq,
            K::Le => Tok::Le,
            K::Ge => Tok::Ge,
            K::Lt => Tok::Lt,
            K::Gt => Tok::Gt,
            K::DotDot => Tok::DotDot,
            K::Newline => Tok::Newline,
            K::DocComment => Tok::Doc(text),
            K::Comment | K::Error => Tok::Error,
        }
    }

    /// Tokens after which a line break continues the entry instead of ending it.
    ///
    /// `..` is deliberately absent: `in 0 ..` (an open upper bound) often ends a line, and the
    /// declaration on the next line must not become its upper bound.
    pub(crate) fn continues_line(self) -> bool {
        matches!(
            self,
            Tok::Plus
                | Tok::Minus
                | Tok::Star
                | Tok::Slash
                | Tok::Caret
                | Tok::Eq
                | Tok::EqEq
                | Tok::Le
                | Tok::Ge
                | Tok::Lt
                | Tok::Gt
                | Tok::Comma
                | Tok::Colon
                | Tok::LBrace
                | Tok::Ident("within")
        )
    }
}

impl fmt::Display for Tok<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = match self {
            Tok::Ident(s) | Tok::Number(s) => s,
            Tok::LBrace => "{",
            Tok::RBrace => "}",
            Tok::LParen => "(",
            Tok::RParen => ")",
            Tok::LBracket => "[",
            Tok::RBracket => "]",
            Tok::Comma => ",",
            Tok::Colon => ":",
            Tok::Semi => ";",
            Tok::Plus => "+",
            Tok::Minus => "-",
            Tok::Star => "*",
            Tok::Slash => "/",
            Tok::Caret => "^",
            Tok::Percent => "%",
            Tok::Prime => "'",
            Tok::Eq => "=",
            Tok::EqEq => "==",
            Tok::Le => "<=",
            Tok::Ge => ">=",
            Tok::Lt => "<",
            Tok::Gt => ">",
            Tok::DotDot => "..",
            Tok::Newline => "line break",
            Tok::Doc(_) => "doc comment",
            Tok::Error => "invalid input",
        };
        f.write_str(s)
    }
}
