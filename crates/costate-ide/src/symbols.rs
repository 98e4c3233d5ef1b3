//! The outline: items and the names they declare.

use costate_syntax::ast::{Item, VarDecl};
use costate_syntax::Span;

use crate::Analysis;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum OutlineKind {
    Problem,
    Block,
    Constant,
    Function,
    Variable,
    Entry,
}

#[derive(Clone, Debug, PartialEq)]
pub struct OutlineSymbol {
    pub name: String,
    pub detail: Option<String>,
    pub kind: OutlineKind,
    /// The whole item or entry.
    pub span: Span,
    /// The name (what the editor selects).
    pub selection: Span,
    pub children: Vec<OutlineSymbol>,
}

pub fn document_symbols(analysis: &Analysis) -> Vec<OutlineSymbol> {
    let file = &analysis.parse.file;
    let mut out = Vec::new();
    if let Some(name) = &file.name {
        out.push(OutlineSymbol {
            name: name.name.clone(),
            detail: Some("problem".into()),
            kind: OutlineKind::Problem,
            span: name.span,
            selection: name.span,
            children: Vec::new(),
        });
    }
    let leaf = |name: &str, detail: &str, kind, span, selection| OutlineSymbol {
        name: name.to_string(),
        detail: Some(detail.to_string()),
        kind,
        span,
        selection,
        children: Vec::new(),
    };
    let vars = |decls: &[VarDecl], detail: &str| -> Vec<OutlineSymbol> {
        decls
            .iter()
            .map(|d| leaf(&d.name.name, detail, OutlineKind::Variable, d.span, d.name.span))
            .collect()
    };
    for item in &file.items {
        let (keyword, keyword_span, children) = match item {
            Item::Const(b) => (
                "const",
                b.keyword,
                b.entries
                    .iter()
                    .map(|c| {
                        leaf(&c.name.name, "constant", OutlineKind::Constant, c.span, c.name.span)
                    })
                    .collect(),
            ),
            Item::Fn(f) => {
                out.push(leaf(
                    &f.name.name,
                    "function",
                    OutlineKind::Function,
                    f.span,
                    f.name.span,
                ));
                continue;
            }
            Item::Time(t) => {
                out.push(leaf(
                    &t.name.name,
                    "independent variable",
                    OutlineKind::Variable,
                    t.span,
                    t.name.span,
                ));
                continue;
            }
            Item::Param(b) => ("param", b.keyword, vars(&b.entries, "parameter")),
            Item::State(b) => ("state", b.keyword, vars(&b.entries, "state")),
            Item::Control(b) => ("control", b.keyword, vars(&b.entries, "control")),
            Item::Dynamics(b) => (
                "dynamics",
                b.keyword,
                b.entries
                    .iter()
                    .map(|e| {
                        leaf(
                            &format!("{}'", e.state.name),
                            "equation",
                            OutlineKind::Entry,
                            e.span,
                            e.lhs_span,
                        )
                    })
                    .collect(),
            ),
            Item::Path(b) | Item::Boundary(b) => (
                if matches!(item, Item::Path(_)) { "path" } else { "boundary" },
                b.keyword,
                b.entries
                    .iter()
                    .filter_map(|c| c.label.as_ref().map(|l| (c, l)))
                    .map(|(c, l)| leaf(&l.name, "constraint", OutlineKind::Entry, c.span, l.span))
                    .collect(),
            ),
            Item::Cost(b) => ("cost", b.keyword, Vec::new()),
            Item::Solve(b) => (
                "solve",
                b.keyword,
                b.entries
                    .iter()
                    .map(|s| leaf(&s.key.name, "setting", OutlineKind::Entry, s.span, s.key.span))
                    .collect(),
            ),
            Item::Expect(b) => ("expect", b.keyword, Vec::new()),
        };
        out.push(OutlineSymbol {
            name: keyword.to_string(),
            detail: None,
            kind: OutlineKind::Block,
            span: item.span(),
            selection: keyword_span,
            children,
        });
    }
    out
}
