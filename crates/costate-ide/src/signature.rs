//! Signatures of built-in and user functions, and signature help inside a call's parentheses.

use costate_check::{Builtin, Symbol, SymbolKind};
use costate_syntax::TokenKind;

use crate::Analysis;

#[derive(Clone, Debug, PartialEq)]
pub struct SignatureHelp {
    /// `atan2(y, x)`
    pub label: String,
    /// Each parameter's text as it appears in `label`.
    pub parameters: Vec<String>,
    /// The parameter the cursor is in (0-based).
    pub active_parameter: usize,
    pub documentation: Option<String>,
}

/// The signature of a built-in: `sin(x)`, `atan2(y, x)`, `min(a, b, ...)`, `pi`.
pub fn builtin_signature(builtin: Builtin) -> SignatureHelp {
    let params: &[&str] = match builtin {
        Builtin::Pi => &[],
        Builtin::Atan2 => &["y", "x"],
        Builtin::Min | Builtin::Max => &["a", "b", "..."],
        Builtin::Start | Builtin::End => &["state"],
        Builtin::Integral => &["expr"],
        _ => &["x"],
    };
    let label = if builtin == Builtin::Pi {
        "pi".to_string()
    } else {
        format!("{}({})", builtin.name(), params.join(", "))
    };
    SignatureHelp {
        label,
        parameters: params.iter().map(|p| p.to_string()).collect(),
        active_parameter: 0,
        documentation: Some(builtin.doc().to_string()),
    }
}

/// The signature of a user function: `pendulum_accel(angle, accel)`.
pub(crate) fn user_signature(analysis: &Analysis, function: &Symbol) -> SignatureHelp {
    let parameters: Vec<String> =
        function.params.iter().map(|p| analysis.check.symbol(*p).name.clone()).collect();
    SignatureHelp {
        label: format!("{}({})", function.name, parameters.join(", ")),
        parameters,
        active_parameter: 0,
        documentation: function.doc.clone(),
    }
}

/// Signature help for the innermost call whose parentheses hold `offset`.
pub fn signature_help(analysis: &Analysis, offset: usize) -> Option<SignatureHelp> {
    let offset = analysis.clamp(offset);
    // Walk back over the tokens before the cursor, counting commas at depth 0, until the
    // unmatched `(` of the call; a line break outside parentheses ends the search.
    let before: Vec<_> = analysis.tokens.iter().take_while(|t| t.span.end <= offset).collect();
    let mut depth = 0usize;
    let mut commas = 0usize;
    for (i, token) in before.iter().enumerate().rev() {
        match token.kind {
            TokenKind::RParen => depth += 1,
            TokenKind::LParen if depth > 0 => depth -= 1,
            TokenKind::LParen => {
                let callee = before.get(i.checked_sub(1)?)?;
                if callee.kind != TokenKind::Ident || callee.span.end != token.span.start {
                    return None;
                }
                let name = analysis.text(callee.span);
                let mut help = match Builtin::from_name(name) {
                    Some(b) => builtin_signature(b),
                    None => {
                        let f = analysis
                            .check
                            .symbols
                            .iter()
                            .find(|s| s.kind == SymbolKind::Function && s.name == name)?;
                        user_signature(analysis, f)
                    }
                };
                let last = help.parameters.len().saturating_sub(1);
                help.active_parameter = if help.parameters.last().is_some_and(|p| p == "...") {
                    commas.min(last.saturating_sub(1).max(1))
                } else {
                    commas.min(last)
                };
                return Some(help);
            }
            TokenKind::Comma if depth == 0 => commas += 1,
            TokenKind::LBrace | TokenKind::RBrace => return None,
            _ => {}
        }
    }
    None
}
