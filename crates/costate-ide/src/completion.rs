//! Contextual completion: what may be typed at the cursor. The context comes from the tokens
//! before the cursor (which block it is in, whether it is inside `[...]`, at the start of an
//! entry, after a `:` or `=`), so completion works while the file is broken mid-edit.

use costate_check::settings::{ValueKind, KEYS};
use costate_check::units::{PREFIXES, UNITS};
use costate_check::{Builtin, SymbolKind};
use costate_syntax::{TokenKind, BLOCK_KEYWORDS, LINE_KEYWORDS};

use crate::signature::{builtin_signature, user_signature};
use crate::Analysis;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CompletionKind {
    Keyword,
    Variable,
    Constant,
    Function,
    Setting,
    Value,
    Unit,
}

#[derive(Clone, Debug, PartialEq)]
pub struct CompletionItem {
    pub label: String,
    pub kind: CompletionKind,
    /// Kind and unit (`state [m]`) or a signature.
    pub detail: Option<String>,
    pub documentation: Option<String>,
}

const ATTRIBUTE_WORDS: &[&str] = &["start", "end", "in", "guess", "scale", "free"];

/// What the cursor is in, found from the tokens before it.
struct Context<'a> {
    /// The keyword of the innermost open block (`state`, `solve`, ...), `None` at the top level.
    block: Option<&'a str>,
    /// The first word of the current line (`time`, `fn`, ...).
    line_head: Option<&'a str>,
    /// No token on the current line before the word being typed.
    entry_start: bool,
    in_unit: bool,
    after_colon: bool,
    /// The key of a `key =` on this line.
    setting_key: Option<&'a str>,
    after_eqeq: bool,
}

fn context(analysis: &Analysis, offset: usize) -> Context<'_> {
    let word_start = analysis.word_at(offset).map(|w| w.start.min(offset)).unwrap_or(offset);
    let mut blocks: Vec<Option<&str>> = Vec::new();
    let mut line: Vec<(TokenKind, &str)> = Vec::new();
    let mut previous_ident: Option<&str> = None;
    for token in analysis.tokens.iter().take_while(|t| t.span.end <= word_start) {
        if token.kind.is_trivia() {
            continue;
        }
        let text = analysis.text(token.span);
        match token.kind {
            TokenKind::LBrace => blocks.push(previous_ident),
            TokenKind::RBrace => {
                blocks.pop();
            }
            _ => {}
        }
        if token.kind == TokenKind::Newline {
            line.clear();
        } else {
            line.push((token.kind, text));
        }
        if !matches!(token.kind, TokenKind::Newline) {
            previous_ident = (token.kind == TokenKind::Ident).then_some(text);
        }
        if token.kind == TokenKind::LBrace {
            line.clear();
        }
    }
    let mut depth_bracket = 0i32;
    for (kind, _) in &line {
        match kind {
            TokenKind::LBracket => depth_bracket += 1,
            TokenKind::RBracket => depth_bracket -= 1,
            _ => {}
        }
    }
    let setting_key = match line.as_slice() {
        [(TokenKind::Ident, key), (TokenKind::Eq, _), ..] => Some(*key),
        _ => None,
    };
    Context {
        block: blocks.last().copied().flatten(),
        line_head: line.first().filter(|(k, _)| *k == TokenKind::Ident).map(|(_, t)| *t),
        entry_start: line.is_empty(),
        in_unit: depth_bracket > 0,
        after_colon: line.iter().any(|(k, _)| *k == TokenKind::Colon),
        setting_key,
        after_eqeq: line.iter().any(|(k, _)| *k == TokenKind::EqEq),
    }
}

pub fn completions(analysis: &Analysis, offset: usize) -> Vec<CompletionItem> {
    let offset = analysis.clamp(offset);
    let cx = context(analysis, offset);
    let mut out = Vec::new();
    let keyword = |w: &str| CompletionItem {
        label: w.to_string(),
        kind: CompletionKind::Keyword,
        detail: Some("keyword".into()),
        documentation: None,
    };
    if cx.in_unit {
        units(&mut out);
        return out;
    }
    match cx.block {
        None if cx.entry_start => {
            out.extend(LINE_KEYWORDS.iter().chain(BLOCK_KEYWORDS).copied().map(keyword));
        }
        None => {
            if cx.line_head == Some("time") && cx.after_colon {
                out.extend(ATTRIBUTE_WORDS.iter().copied().map(keyword));
            }
            names(analysis, offset, &mut out);
        }
        Some("state" | "control" | "param") => {
            if cx.after_colon {
                out.extend(ATTRIBUTE_WORDS.iter().copied().map(keyword));
                names(analysis, offset, &mut out);
            }
        }
        Some("solve") => match cx.setting_key {
            None if cx.entry_start => out.extend(KEYS.iter().map(|k| CompletionItem {
                label: k.key.to_string(),
                kind: CompletionKind::Setting,
                detail: Some(format!("default {}", k.default)),
                documentation: Some(k.doc.to_string()),
            })),
            Some(key) => {
                if let Some(ValueKind::Choice(values)) =
                    costate_check::settings::key_def(key).map(|d| d.kind)
                {
                    out.extend(values.iter().map(|v| CompletionItem {
                        label: v.to_string(),
                        kind: CompletionKind::Value,
                        detail: Some(format!("value of `{key}`")),
                        documentation: None,
                    }));
                }
            }
            None => {}
        },
        Some("cost") if cx.entry_start => {
            out.extend(["minimize", "maximize"].into_iter().map(keyword));
        }
        Some("expect") => {
            if cx.entry_start {
                out.push(keyword("cost"));
            }
            if cx.after_eqeq {
                out.push(keyword("within"));
            }
            names(analysis, offset, &mut out);
        }
        Some(_) => names(analysis, offset, &mut out),
    }
    // Dynamics and path constraints hold at every instant: endpoint values and integrals are
    // errors there (E0206, E0207), so they are not offered.
    if matches!(cx.block, Some("dynamics" | "path")) {
        out.retain(|item| !matches!(item.label.as_str(), "start" | "end" | "integral"));
    }
    // After `:` in a declaration, `start` and `end` are attribute words; the built-ins of the
    // same names would only show up twice.
    let mut seen = std::collections::HashSet::new();
    out.retain(|item| seen.insert(item.label.clone()));
    out
}

/// Declared names visible at `offset` (a function's parameters only inside its declaration)
/// and the built-ins.
fn names(analysis: &Analysis, offset: usize, out: &mut Vec<CompletionItem>) {
    for symbol in &analysis.check.symbols {
        let unit = symbol.unit.as_ref().map(|u| format!(" [{}]", u.display)).unwrap_or_default();
        let item = match symbol.kind {
            SymbolKind::Builtin => {
                let Some(b) = symbol.builtin else { continue };
                let sig = builtin_signature(b);
                CompletionItem {
                    label: symbol.name.clone(),
                    kind: if b == Builtin::Pi {
                        CompletionKind::Constant
                    } else {
                        CompletionKind::Function
                    },
                    detail: Some(sig.label),
                    documentation: sig.documentation,
                }
            }
            SymbolKind::Function => CompletionItem {
                label: symbol.name.clone(),
                kind: CompletionKind::Function,
                detail: Some(format!("function {}", user_signature(analysis, symbol).label)),
                documentation: symbol.doc.clone(),
            },
            SymbolKind::FnParam => {
                let owner = symbol.owner.map(|o| analysis.check.symbol(o).decl_span);
                if !owner.is_some_and(|span| span.start <= offset && offset <= span.end) {
                    continue;
                }
                CompletionItem {
                    label: symbol.name.clone(),
                    kind: CompletionKind::Variable,
                    detail: Some("function parameter".into()),
                    documentation: None,
                }
            }
            kind => CompletionItem {
                label: symbol.name.clone(),
                kind: if kind == SymbolKind::Const {
                    CompletionKind::Constant
                } else {
                    CompletionKind::Variable
                },
                detail: Some(format!("{}{unit}", kind.describe())),
                documentation: symbol.doc.clone(),
            },
        };
        out.push(item);
    }
}

fn units(out: &mut Vec<CompletionItem>) {
    for def in UNITS {
        out.push(CompletionItem {
            label: def.symbol.to_string(),
            kind: CompletionKind::Unit,
            detail: Some(def.quantity.to_string()),
            documentation: def.prefixable.then(|| {
                let prefixes: Vec<&str> = PREFIXES.iter().map(|(p, _)| *p).collect();
                format!("takes SI prefixes: {}", prefixes.join(" "))
            }),
        });
    }
}
