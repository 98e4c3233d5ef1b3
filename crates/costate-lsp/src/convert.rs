//! Between the editor's positions (line and UTF-16 column) and the IDE layer's byte offsets,
//! and from IDE and syntax data to protocol types. The only place that knows both.

use costate_ide::Analysis;
use costate_syntax::{Diagnostic, LineCol, Severity, Span};
use tower_lsp_server::lsp_types::{
    self as lsp, DiagnosticRelatedInformation, DiagnosticSeverity, Location, NumberOrString,
    Position, Range, Uri,
};

pub fn offset(analysis: &Analysis, position: Position) -> usize {
    analysis
        .line_index
        .offset_of_utf16(&analysis.source, LineCol { line: position.line, col: position.character })
}

pub fn position(analysis: &Analysis, offset: usize) -> Position {
    let lc = analysis.line_index.utf16_line_col(&analysis.source, offset);
    Position { line: lc.line, character: lc.col }
}

pub fn range(analysis: &Analysis, span: Span) -> Range {
    Range { start: position(analysis, span.start), end: position(analysis, span.end) }
}

pub fn span(analysis: &Analysis, range: Range) -> Span {
    Span::new(offset(analysis, range.start), offset(analysis, range.end))
}

/// `related`: the client shows related information; for one that does not (Neovim), each
/// secondary label is folded into the message with its line, so nothing the CLI shows is lost.
pub fn diagnostic(
    analysis: &Analysis,
    uri: &Uri,
    d: &Diagnostic,
    related: bool,
) -> lsp::Diagnostic {
    let mut message = d.message.clone();
    if !d.primary.message.is_empty() {
        message.push_str(&format!("\n{}", d.primary.message));
    }
    if !related {
        for l in &d.labels {
            let line = position(analysis, l.span.start).line + 1;
            message.push_str(&format!("\nline {line}: {}", l.message));
        }
    }
    for note in &d.notes {
        message.push_str(&format!("\nnote: {note}"));
    }
    if let Some(help) = &d.help {
        message.push_str(&format!("\nhelp: {help}"));
    }
    let related_information: Vec<DiagnosticRelatedInformation> = d
        .labels
        .iter()
        .map(|l| DiagnosticRelatedInformation {
            location: Location { uri: uri.clone(), range: range(analysis, l.span) },
            message: l.message.clone(),
        })
        .collect();
    lsp::Diagnostic {
        range: range(analysis, d.primary.span),
        severity: Some(match d.severity {
            Severity::Error => DiagnosticSeverity::ERROR,
            Severity::Warning => DiagnosticSeverity::WARNING,
        }),
        code: Some(NumberOrString::String(d.code.id.to_string())),
        source: Some("costate".into()),
        message,
        related_information: (related && !related_information.is_empty())
            .then_some(related_information),
        ..Default::default()
    }
}
