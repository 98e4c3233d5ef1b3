//! The server's incremental edits, with positions a confused client may send (past the end,
//! inside a multi-byte character, reversed): the text stays valid UTF-8 and analysable.
#![no_main]
use arbitrary::Arbitrary;
use costate_lsp::Document;
use libfuzzer_sys::fuzz_target;
use tower_lsp_server::lsp_types::{Position, Range, TextDocumentContentChangeEvent};

#[derive(Arbitrary, Debug)]
struct Edit {
    start: (u32, u32),
    end: (u32, u32),
    text: String,
    whole: bool,
}

#[derive(Arbitrary, Debug)]
struct Session {
    initial: String,
    edits: Vec<Edit>,
}

fuzz_target!(|session: Session| {
    let mut doc = Document::new(session.initial, 1);
    for edit in session.edits.into_iter().take(64) {
        let range = (!edit.whole).then(|| Range {
            start: Position { line: edit.start.0 % 64, character: edit.start.1 % 256 },
            end: Position { line: edit.end.0 % 64, character: edit.end.1 % 256 },
        });
        doc.apply(TextDocumentContentChangeEvent { range, range_length: None, text: edit.text });
    }
    let _ = costate_syntax::parse(&doc.text);
});
