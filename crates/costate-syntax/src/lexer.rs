//! The lexer: source text to a flat token stream with byte spans.
//!
//! Owns the token vocabulary and the character-level diagnostics (stray characters, malformed
//! numbers, non-ASCII names). It keeps every comment and newline as a token so the editor can
//! highlight from the same stream; deciding which newlines separate entries is the parser's job.
//! Words are always identifiers: keywords are contextual and matched by the parser.
//!
//! The lexer never fails: a malformed piece becomes an `Error` token (or, for a name with
//! non-ASCII letters, an `Ident`) plus a diagnostic, and lexing continues after it.

use crate::{codes, Diagnostic, Span};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum TokenKind {
    /// A name or contextual keyword: `state`, `x`, `minimize`.
    Ident,
    /// A numeric literal: `12`, `0.05`, `2.5E+4`.
    Number,
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
    /// `'` in `x'`.
    Prime,
    /// `=`
    Eq,
    /// `==`
    EqEq,
    /// `<=`
    Le,
    /// `>=`
    Ge,
    /// `<`, never valid but lexed so the parser can explain it.
    Lt,
    /// `>`, never valid but lexed so the parser can explain it.
    Gt,
    /// `..`
    DotDot,
    Newline,
    /// A `//` comment, or a `///` comment that follows code on its line.
    Comment,
    /// A `///` comment on its own line.
    DocComment,
    /// Malformed input already reported by the lexer.
    Error,
}

impl TokenKind {
    /// The fixed text of a punctuation token, for messages.
    pub fn symbol(self) -> Option<&'static str> {
        use TokenKind::*;
        Some(match self {
            LBrace => "{",
            RBrace => "}",
            LParen => "(",
            RParen => ")",
            LBracket => "[",
            RBracket => "]",
            Comma => ",",
            Colon => ":",
            Semi => ";",
            Plus => "+",
            Minus => "-",
            Star => "*",
            Slash => "/",
            Caret => "^",
            Percent => "%",
            Prime => "'",
            Eq => "=",
            EqEq => "==",
            Le => "<=",
            Ge => ">=",
            Lt => "<",
            Gt => ">",
            DotDot => "..",
            Ident | Number | Newline | Comment | DocComment | Error => return None,
        })
    }

    /// True for tokens the parser never sees (comments).
    pub fn is_trivia(self) -> bool {
        matches!(self, TokenKind::Comment | TokenKind::DocComment)
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Token {
    pub kind: TokenKind,
    pub span: Span,
}

/// Splits `text` into tokens. Every byte of `text` except spaces, tabs and carriage returns
/// belongs to exactly one token.
pub fn lex(text: &str) -> (Vec<Token>, Vec<Diagnostic>) {
    let mut lexer = Lexer {
        text,
        bytes: text.as_bytes(),
        pos: 0,
        line_has_code: false,
        tokens: Vec::new(),
        diagnostics: Vec::new(),
    };
    lexer.run();
    (lexer.tokens, lexer.diagnostics)
}

struct Lexer<'a> {
    text: &'a str,
    bytes: &'a [u8],
    pos: usize,
    /// Whether a non-comment token precedes `pos` on the current line.
    line_has_code: bool,
    tokens: Vec<Token>,
    diagnostics: Vec<Diagnostic>,
}

impl Lexer<'_> {
    fn peek(&self, ahead: usize) -> u8 {
        self.bytes.get(self.pos + ahead).copied().unwrap_or(0)
    }

    fn push(&mut self, kind: TokenKind, start: usize) {
        let span = Span::new(start, self.pos);
        match kind {
            TokenKind::Newline => self.line_has_code = false,
            TokenKind::Comment | TokenKind::DocComment => {}
            _ => self.line_has_code = true,
        }
        self.tokens.push(Token { kind, span });
    }

    fn run(&mut self) {
        while self.pos < self.bytes.len() {
            let start = self.pos;
            let b = self.bytes[self.pos];
            match b {
                b' ' | b'\t' | b'\r' => self.pos += 1,
                b'\n' => {
                    self.pos += 1;
                    self.push(TokenKind::Newline, start);
                }
                b'/' if self.peek(1) == b'/' => self.comment(start),
                b'0'..=b'9' => self.number(start),
                b'.' if self.peek(1).is_ascii_digit() => self.leading_dot_number(start),
                b'.' if self.peek(1) == b'.' => {
                    self.pos += 2;
                    self.push(TokenKind::DotDot, start);
                }
                b'a'..=b'z' | b'A'..=b'Z' | b'_' => self.word(start),
                _ if b < 0x80 => self.punct(start, b),
                _ => self.non_ascii(start),
            }
        }
    }

    fn comment(&mut self, start: usize) {
        let end = self.text[start..].find('\n').map_or(self.text.len(), |i| start + i);
        self.pos = end;
        let body = &self.text[start..end];
        let is_doc = body.starts_with("///") && !body.starts_with("////");
        let kind =
            if is_doc && !self.line_has_code { TokenKind::DocComment } else { TokenKind::Comment };
        self.push(kind, start);
    }

    fn eat_digits(&mut self) -> usize {
        let from = self.pos;
        while self.peek(0).is_ascii_digit() {
            self.pos += 1;
        }
        self.pos - from
    }

    /// Consumes the rest of a malformed number-like run so it is reported once, as a whole.
    fn eat_number_junk(&mut self) {
        loop {
            let b = self.peek(0);
            let word_part =
                b.is_ascii_alphanumeric() || b == b'_' || (b == b'.' && self.peek(1) != b'.');
            let exponent_sign = (b == b'+' || b == b'-')
                && matches!(self.bytes.get(self.pos.wrapping_sub(1)), Some(b'e' | b'E'));
            if word_part || exponent_sign {
                self.pos += 1;
            } else {
                break;
            }
        }
    }

    /// Consumes an optional exponent `e-3`; returns false when `e` is not followed by digits.
    fn eat_exponent(&mut self) -> bool {
        if matches!(self.peek(0), b'e' | b'E') {
            let sign = usize::from(matches!(self.peek(1), b'+' | b'-'));
            if self.peek(1 + sign).is_ascii_digit() {
                self.pos += 1 + sign;
                self.eat_digits();
            } else {
                return false;
            }
        }
        true
    }

    fn number(&mut self, start: usize) {
        self.eat_digits();
        let mut problem: Option<(&str, String)> = None;
        if self.peek(0) == b'.' && self.peek(1) != b'.' {
            self.pos += 1;
            if self.eat_digits() == 0 {
                problem = Some(("a decimal point must be followed by digits", String::new()));
            }
        }
        if problem.is_none() && !self.eat_exponent() {
            problem = Some((
                "an exponent `e` must be followed by digits",
                "write the exponent like `1e-3`".into(),
            ));
        }
        let next = self.peek(0);
        let trailing_junk =
            next.is_ascii_alphanumeric() || next == b'_' || (next == b'.' && self.peek(1) != b'.');
        if trailing_junk && problem.is_none() {
            let extra_dot = next == b'.';
            problem = Some(if extra_dot {
                (
                    "a number has at most one decimal point",
                    "write a single number such as `1.25`".into(),
                )
            } else {
                (
                    "a number cannot run into a name",
                    "put `*` between a number and a name (`2 * x`), or write a unit in brackets (`2 [m]`)".into(),
                )
            });
        }
        if trailing_junk || problem.is_some() {
            self.eat_number_junk();
        }
        let literal = &self.text[start..self.pos];
        if let Some((label, help)) = problem {
            let mut help = help;
            if help.is_empty() {
                let whole = literal.trim_end_matches('.');
                help = format!("write `{whole}.0` or `{whole}`");
            }
            let diagnostic = Diagnostic::new(
                codes::INVALID_NUMBER,
                format!("invalid number `{literal}`"),
                Span::new(start, self.pos),
                label,
            )
            .with_help(help);
            self.diagnostics.push(diagnostic);
            self.push(TokenKind::Error, start);
            return;
        }
        if literal.parse::<f64>().map_or(true, |v| !v.is_finite()) {
            let diagnostic = Diagnostic::new(
                codes::INVALID_NUMBER,
                format!("number `{literal}` is too large"),
                Span::new(start, self.pos),
                "this does not fit a 64-bit float",
            )
            .with_help("use a smaller number or a larger unit");
            self.diagnostics.push(diagnostic);
            self.push(TokenKind::Error, start);
            return;
        }
        self.push(TokenKind::Number, start);
    }

    fn leading_dot_number(&mut self, start: usize) {
        self.pos += 1;
        self.eat_digits();
        self.eat_number_junk();
        let literal = &self.text[start..self.pos];
        let diagnostic = Diagnostic::new(
            codes::INVALID_NUMBER,
            format!("invalid number `{literal}`"),
            Span::new(start, self.pos),
            "a number must start with a digit",
        )
        .with_help(format!("write `0{literal}`"));
        self.diagnostics.push(diagnostic);
        self.push(TokenKind::Error, start);
    }

    fn word(&mut self, start: usize) {
        let mut non_ascii = false;
        for (i, c) in self.text[start..].char_indices() {
            if c.is_ascii_alphanumeric() || c == '_' {
                continue;
            }
            if !c.is_ascii() && c.is_alphanumeric() {
                non_ascii = true;
                continue;
            }
            self.pos = start + i;
            break;
        }
        if self.pos == start {
            self.pos = self.text.len();
        }
        if non_ascii {
            self.report_non_ascii_name(start);
        }
        self.push(TokenKind::Ident, start);
    }

    fn report_non_ascii_name(&mut self, start: usize) {
        let name = &self.text[start..self.pos];
        let diagnostic = Diagnostic::new(
            codes::NON_ASCII_NAME,
            format!("name `{name}` contains non-ASCII letters"),
            Span::new(start, self.pos),
            "only ASCII letters, digits and `_` may form a name",
        )
        .with_help("spell the name in ASCII, e.g. `theta` for `θ`");
        self.diagnostics.push(diagnostic);
    }

    fn non_ascii(&mut self, start: usize) {
        let c = self.text[start..].chars().next().unwrap_or('\u{fffd}');
        if c.is_alphabetic() {
            // A name that starts with a non-ASCII letter: take the whole word.
            let end = self.text[start..]
                .char_indices()
                .find(|&(_, c)| !(c.is_alphanumeric() || c == '_'))
                .map_or(self.text.len(), |(i, _)| start + i);
            self.pos = end;
            self.report_non_ascii_name(start);
            self.push(TokenKind::Ident, start);
            return;
        }
        self.pos += c.len_utf8();
        let mut run = 1;
        while self.text[self.pos..].starts_with(c) {
            self.pos += c.len_utf8();
            run += 1;
        }
        let replacement = match c {
            '≤' => Some("<="),
            '≥' => Some(">="),
            '−' | '–' | '—' => Some("-"),
            '×' | '·' | '⋅' => Some("*"),
            '÷' => Some("/"),
            '’' | '′' => Some("'"),
            '…' => Some(".."),
            _ => None,
        };
        let message = if run == 1 {
            format!("unexpected character `{c}`")
        } else {
            format!("unexpected character `{c}` ({run} in a row)")
        };
        let mut diagnostic = Diagnostic::new(
            codes::UNEXPECTED_CHARACTER,
            message,
            Span::new(start, self.pos),
            "this character has no meaning here",
        );
        if let Some(r) = replacement {
            diagnostic = diagnostic.with_help(format!("write `{r}` instead"));
        }
        self.diagnostics.push(diagnostic);
        self.push(TokenKind::Error, start);
    }

    fn punct(&mut self, start: usize, b: u8) {
        use TokenKind::*;
        let two = |second: u8, long: TokenKind, short: TokenKind, lexer: &Lexer| {
            if lexer.peek(1) == second {
                (long, 2)
            } else {
                (short, 1)
            }
        };
        let (kind, len) = match b {
            b'{' => (LBrace, 1),
            b'}' => (RBrace, 1),
            b'(' => (LParen, 1),
            b')' => (RParen, 1),
            b'[' => (LBracket, 1),
            b']' => (RBracket, 1),
            b',' => (Comma, 1),
            b':' => (Colon, 1),
            b';' => (Semi, 1),
            b'+' => (Plus, 1),
            b'-' => (Minus, 1),
            b'*' => (Star, 1),
            b'/' => (Slash, 1),
            b'^' => (Caret, 1),
            b'%' => (Percent, 1),
            b'\'' => (Prime, 1),
            b'=' => two(b'=', EqEq, Eq, self),
            b'<' => two(b'=', Le, Lt, self),
            b'>' => two(b'=', Ge, Gt, self),
            _ => {
                self.pos += 1;
                // A run of the same stray character is one finding (a megabyte of NUL bytes
                // once made a million diagnostics and took 6 s).
                let run = 1 + self.bytes[self.pos..].iter().take_while(|&&x| x == b).count();
                self.pos = start + run;
                let c = b as char;
                let shown = if c.is_ascii_graphic() {
                    c.to_string()
                } else {
                    c.escape_default().to_string()
                };
                let message = if run == 1 {
                    format!("unexpected character `{shown}`")
                } else {
                    format!("unexpected character `{shown}` ({run} in a row)")
                };
                let mut diagnostic = Diagnostic::new(
                    codes::UNEXPECTED_CHARACTER,
                    message,
                    Span::new(start, self.pos),
                    "this character has no meaning here",
                );
                diagnostic = match c {
                    '!' if self.peek(0) == b'=' => {
                        diagnostic.with_help("there is no `!=` relation; use `<=`, `>=` or `==`")
                    }
                    '.' => diagnostic.with_help("ranges are written with two dots: `0 .. 5`"),
                    '"' => diagnostic.with_help(
                        "the language has no strings; enumerated settings are written as names",
                    ),
                    '#' => diagnostic.with_help("comments start with `//`"),
                    _ => diagnostic,
                };
                self.diagnostics.push(diagnostic);
                self.push(Error, start);
                return;
            }
        };
        self.pos += len;
        self.push(kind, start);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn kinds(text: &str) -> Vec<TokenKind> {
        lex(text).0.into_iter().map(|t| t.kind).collect()
    }

    #[test]
    fn ranges_after_integers_are_not_decimals() {
        use TokenKind::*;
        assert_eq!(kinds("1..60"), vec![Number, DotDot, Number]);
        assert_eq!(kinds("0 .. "), vec![Number, DotDot]);
    }

    #[test]
    fn numbers_of_all_shapes() {
        for ok in ["12", "0.05", "1e-3", "2.5E+4", "7e2"] {
            let (tokens, diagnostics) = lex(ok);
            assert!(diagnostics.is_empty(), "{ok}: {diagnostics:?}");
            assert_eq!(tokens.len(), 1, "{ok}");
            assert_eq!(tokens[0].kind, TokenKind::Number, "{ok}");
        }
        for bad in ["1.2.3", ".5", "1.", "1e", "2x", "1e999"] {
            let (tokens, diagnostics) = lex(bad);
            assert_eq!(diagnostics.len(), 1, "{bad}: {diagnostics:?}");
            assert_eq!(diagnostics[0].code, codes::INVALID_NUMBER, "{bad}");
            assert_eq!(tokens.len(), 1, "{bad}: {tokens:?}");
            assert_eq!(tokens[0].span, Span::new(0, bad.len()), "{bad}");
        }
    }

    #[test]
    fn doc_comments_only_on_their_own_line() {
        use TokenKind::*;
        assert_eq!(
            kinds("/// a\nx /// b\n//// c"),
            vec![DocComment, Newline, Ident, Comment, Newline, Comment]
        );
    }

    #[test]
    fn non_ascii_names_and_symbols() {
        let (tokens, diagnostics) = lex("θ1 ≤ größe");
        let kinds: Vec<_> = tokens.iter().map(|t| t.kind).collect();
        assert_eq!(kinds, vec![TokenKind::Ident, TokenKind::Error, TokenKind::Ident]);
        let codes: Vec<_> = diagnostics.iter().map(|d| d.code).collect();
        assert_eq!(
            codes,
            vec![codes::NON_ASCII_NAME, codes::UNEXPECTED_CHARACTER, codes::NON_ASCII_NAME]
        );
        assert_eq!(diagnostics[1].help.as_deref(), Some("write `<=` instead"));
    }
}
