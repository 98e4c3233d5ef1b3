//! Open documents: their text and version, with edits applied in the order they arrive, and the
//! latest analysis. One analysis is kept per document (the newest), so memory does not grow
//! with the number of edits.

use std::collections::HashMap;
use std::sync::Arc;

use costate_ide::Analysis;
use costate_syntax::{LineCol, LineIndex};
use tower_lsp_server::lsp_types::{TextDocumentContentChangeEvent, Uri};

pub struct Document {
    pub text: String,
    pub version: i32,
    /// The analysis of `text` when `analysis_version == version`; otherwise stale.
    pub analysis: Option<Arc<Analysis>>,
    pub analysis_version: i32,
}

impl Document {
    pub fn new(text: String, version: i32) -> Document {
        Document { text, version, analysis: None, analysis_version: i32::MIN }
    }

    /// The current analysis, if it matches the current text.
    pub fn fresh_analysis(&self) -> Option<Arc<Analysis>> {
        self.analysis.clone().filter(|_| self.analysis_version == self.version)
    }

    /// Applies one change. Ranges are clamped to the text and positions inside a multi-byte
    /// character are moved to its start, so a client that is out of step cannot crash us.
    pub fn apply(&mut self, change: TextDocumentContentChangeEvent) {
        match change.range {
            None => self.text = change.text,
            Some(range) => {
                let index = LineIndex::new(&self.text);
                let at = |p: tower_lsp_server::lsp_types::Position| {
                    index.offset_of_utf16(&self.text, LineCol { line: p.line, col: p.character })
                };
                let (a, b) = (at(range.start), at(range.end));
                let (start, end) = (a.min(b), a.max(b));
                self.text.replace_range(start..end, &change.text);
            }
        }
    }
}

#[derive(Default)]
pub struct Documents {
    open: HashMap<Uri, Document>,
}

impl Documents {
    pub fn open(&mut self, uri: Uri, text: String, version: i32) {
        self.open.insert(uri, Document::new(text, version));
    }

    pub fn close(&mut self, uri: &Uri) {
        self.open.remove(uri);
    }

    pub fn get(&self, uri: &Uri) -> Option<&Document> {
        self.open.get(uri)
    }

    pub fn get_mut(&mut self, uri: &Uri) -> Option<&mut Document> {
        self.open.get_mut(uri)
    }

    /// Analyses held (at most one per document).
    pub fn analyses(&self) -> usize {
        self.open.values().filter(|d| d.analysis.is_some()).count()
    }

    pub fn len(&self) -> usize {
        self.open.len()
    }
}
