//! After a solve: inlay hints with the end value of every declared quantity beside its
//! declaration, and the lens on the `problem` line (status, cost, iterations, time).

use costate_check::SymbolKind;
use costate_syntax::Span;

use crate::hover::number;
use crate::{Analysis, SolveSummary};

#[derive(Clone, Debug, PartialEq)]
pub struct InlayHint {
    /// Byte offset the hint is shown at (after the declaration's name and unit).
    pub offset: usize,
    pub label: String,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Lens {
    pub span: Span,
    pub title: String,
}

/// End values of the independent variable, states, controls and parameters, within `range`.
pub fn inlay_hints(analysis: &Analysis, solution: &SolveSummary, range: Span) -> Vec<InlayHint> {
    let mut out = Vec::new();
    for symbol in &analysis.check.symbols {
        if !matches!(
            symbol.kind,
            SymbolKind::Time | SymbolKind::State | SymbolKind::Control | SymbolKind::Param
        ) || symbol.name_span.start < range.start
            || symbol.name_span.end > range.end
        {
            continue;
        }
        let Some(result) = solution.variables.get(&symbol.name) else { continue };
        let unit = symbol.unit.as_ref().map(|u| format!(" {}", u.display)).unwrap_or_default();
        // A failed solve's last iterate is no result: say so beside every value.
        let caveat = if solution.solved { "" } else { " (not solved)" };
        let label = if symbol.kind == SymbolKind::Param {
            format!(" = {}{unit}{caveat}", number(result.end))
        } else {
            format!(" → {}{unit}{caveat}", number(result.end))
        };
        out.push(InlayHint { offset: symbol.name_span.end, label });
    }
    out.sort_by_key(|h| h.offset);
    out
}

/// The solve result shown on the `problem` line.
pub fn problem_lens(analysis: &Analysis, solution: &SolveSummary) -> Option<Lens> {
    let name = analysis.parse.file.name.as_ref()?;
    Some(Lens {
        span: name.span,
        title: format!(
            "{} · cost {} · {} iterations · {:.2} s",
            solution.status,
            number(solution.cost),
            solution.iterations,
            solution.seconds
        ),
    })
}
