//! The one Diagnostic type of the project.
//!
//! Diagnostics are plain data: a stable code, a severity, a message, a primary span with its
//! label, secondary labels, notes and a help line. The CLI renders them with ariadne and the
//! language server converts them to protocol diagnostics; neither re-words them.

use crate::Span;

#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Severity {
    Error,
    Warning,
}

/// A stable diagnostic code with a short title, documented in docs/diagnostics.md.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Code {
    /// Stable identifier such as `E0101`; never reused for another meaning.
    pub id: &'static str,
    /// Short kebab-case name such as `unexpected-token`.
    pub name: &'static str,
    pub severity: Severity,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Label {
    pub span: Span,
    pub message: String,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Diagnostic {
    pub code: Code,
    pub severity: Severity,
    /// Lowercase, no trailing period, names the problem: "unknown state `vx`".
    pub message: String,
    pub primary: Label,
    pub labels: Vec<Label>,
    pub notes: Vec<String>,
    pub help: Option<String>,
}

impl Diagnostic {
    /// A diagnostic of `code`'s default severity whose primary label says `label` at `span`.
    pub fn new(
        code: Code,
        message: impl Into<String>,
        span: Span,
        label: impl Into<String>,
    ) -> Self {
        Diagnostic {
            code,
            severity: code.severity,
            message: message.into(),
            primary: Label { span, message: label.into() },
            labels: Vec::new(),
            notes: Vec::new(),
            help: None,
        }
    }

    pub fn with_label(mut self, span: Span, message: impl Into<String>) -> Self {
        self.labels.push(Label { span, message: message.into() });
        self
    }

    pub fn with_note(mut self, note: impl Into<String>) -> Self {
        self.notes.push(note.into());
        self
    }

    pub fn with_help(mut self, help: impl Into<String>) -> Self {
        self.help = Some(help.into());
        self
    }

    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }
}

/// Suggest the candidate closest to `name` (edit distance at most a third of its length, at
/// least 1), for "did you mean" help lines. Swapped neighbouring letters (`omgea`) count as one
/// edit, the most common typing slip.
pub fn closest_name<'a>(
    name: &str,
    candidates: impl IntoIterator<Item = &'a str>,
) -> Option<&'a str> {
    let limit = (name.chars().count() / 3).max(1);
    candidates
        .into_iter()
        .filter(|c| *c != name)
        .map(|c| (edit_distance(name, c), c))
        .filter(|(d, _)| *d <= limit)
        .min_by_key(|(d, c)| (*d, *c))
        .map(|(_, c)| c)
}

/// Optimal string alignment distance: insertions, deletions, substitutions and transpositions
/// of adjacent characters, each costing one.
fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let width = b.len() + 1;
    let mut d = vec![0usize; (a.len() + 1) * width];
    for (i, row) in d.chunks_mut(width).enumerate() {
        row[0] = i;
    }
    for (j, cell) in d.iter_mut().take(width).enumerate() {
        *cell = j;
    }
    for i in 1..=a.len() {
        for j in 1..=b.len() {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            let mut best = (d[(i - 1) * width + j] + 1)
                .min(d[i * width + j - 1] + 1)
                .min(d[(i - 1) * width + j - 1] + cost);
            if i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] {
                best = best.min(d[(i - 2) * width + j - 2] + 1);
            }
            d[i * width + j] = best;
        }
    }
    d[a.len() * width + b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn closest_name_suggests_near_misses_only() {
        assert_eq!(closest_name("omgea", ["omega", "theta", "x"]), Some("omega"));
        assert_eq!(closest_name("vx", ["v", "x", "omega"]), Some("v"));
        assert_eq!(closest_name("speed", ["omega", "theta"]), None);
        assert_eq!(edit_distance("omgea", "omega"), 1);
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
    }
}

/// Most diagnostics shown for one file: past a few hundred, more findings of a broken file
/// help nobody and cost time and memory (a million unclosed parentheses once made 565 MB of
/// JSON). The shells show these and then say how many more there are.
pub const MAX_SHOWN_DIAGNOSTICS: usize = 200;

/// The diagnostics to show of `all` (in source order): every one when there are at most
/// [`MAX_SHOWN_DIAGNOSTICS`], else that many, errors before warnings, so that a flood of
/// warnings never hides an error. Returns them with the number left out.
pub fn shown_diagnostics(all: &[Diagnostic]) -> (Vec<&Diagnostic>, usize) {
    if all.len() <= MAX_SHOWN_DIAGNOSTICS {
        return (all.iter().collect(), 0);
    }
    let mut shown: Vec<&Diagnostic> = all.iter().filter(|d| d.is_error()).collect();
    shown.truncate(MAX_SHOWN_DIAGNOSTICS);
    let room = MAX_SHOWN_DIAGNOSTICS - shown.len();
    shown.extend(all.iter().filter(|d| !d.is_error()).take(room));
    shown.sort_by_key(|d| (d.primary.span.start, d.primary.span.end));
    let omitted = all.len() - shown.len();
    (shown, omitted)
}

#[cfg(test)]
mod cap_tests {
    use super::*;
    use crate::codes;

    #[test]
    fn errors_are_kept_before_warnings_and_the_rest_is_counted() {
        let at = |i: usize| Span::new(i, i + 1);
        let mut all: Vec<Diagnostic> = (0..500)
            .map(|i| {
                let mut d = Diagnostic::new(codes::UNCLOSED_DELIMITER, "w", at(i), "w");
                d.severity = Severity::Warning;
                d
            })
            .collect();
        all.push(Diagnostic::new(codes::UNCLOSED_DELIMITER, "e", at(1000), "e"));
        let (shown, omitted) = shown_diagnostics(&all);
        assert_eq!(shown.len(), MAX_SHOWN_DIAGNOSTICS);
        assert_eq!(omitted, all.len() - MAX_SHOWN_DIAGNOSTICS);
        assert!(shown.iter().any(|d| d.is_error()), "the error is shown");
        assert!(shown.windows(2).all(|w| w[0].primary.span.start <= w[1].primary.span.start));
        assert_eq!(shown_diagnostics(&all[..10]).1, 0);
    }
}
