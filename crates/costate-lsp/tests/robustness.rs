//! 2,000 random edits (seeded, so a failure repeats): positions inside multi-byte characters,
//! past the end of a line or of the file, reversed ranges, huge lines, whole-file replacements.
//! The server must never crash, must end up with exactly the text a correct editor would hold,
//! and must keep one document and at most one analysis whatever the history.

mod support;

use costate_syntax::{LineCol, LineIndex};
use serde_json::json;
use support::{at, TestClient, HOP};

/// xorshift64*: small, seeded, good enough to scatter edits.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }

    fn below(&mut self, n: u64) -> u64 {
        self.next() % n.max(1)
    }
}

const PIECES: &[&str] = &[
    "x",
    "θ",
    "𝑥",
    "é",
    "\n",
    "{",
    "}",
    "(",
    ")",
    "[",
    "]",
    " [m/s]",
    "' = ",
    "state {\n",
    "}\n",
    "sin(",
    "end(t)",
    " .. ",
    "1e-3",
    "///",
    "// ",
    ":",
    ",",
    "== ",
    "\r\n",
    "\t",
    "",
];

/// The edit a correct editor applies for a range given in UTF-16 positions (the same clamping
/// as the protocol prescribes: past the end of a line means its end).
fn apply(text: &mut String, start: (u32, u32), end: (u32, u32), insert: &str) {
    let index = LineIndex::new(text);
    let a = index.offset_of_utf16(text, LineCol { line: start.0, col: start.1 });
    let b = index.offset_of_utf16(text, LineCol { line: end.0, col: end.1 });
    text.replace_range(a.min(b)..a.max(b), insert);
}

#[tokio::test]
async fn random_edits_never_crash_the_server_and_memory_stays_bounded() {
    let uri = "file:///virtual/fuzz.costate";
    let mut client = TestClient::start();
    client.initialize(json!({ "solveOnSave": false })).await;
    let mut text = HOP.replace("position", "position θ 𝑥 é");
    client.open(uri, &text).await;
    let mut rng = Rng(0x9E37_79B9_7F4A_7C15);
    let edits = 2000;
    for version in 2..=edits + 1 {
        let lines = text.lines().count() as u64 + 3;
        let position = |rng: &mut Rng| (rng.below(lines) as u32, rng.below(90) as u32);
        let (start, end) = (position(&mut rng), position(&mut rng));
        let insert: String = match rng.below(100) {
            0 => "y".repeat(20_000), // a huge line
            1 => HOP.to_string(),
            _ => {
                (0..rng.below(4)).map(|_| PIECES[rng.below(PIECES.len() as u64) as usize]).collect()
            }
        };
        if rng.below(200) == 0 {
            // Whole-document replacement (no range).
            text = insert.clone();
            client.change(uri, version as i64, json!([{ "text": insert }])).await;
        } else {
            apply(&mut text, start, end, &insert);
            let change = json!([{ "range": { "start": at(start.0, start.1), "end": at(end.0, end.1) }, "text": insert }]);
            client.change(uri, version as i64, change).await;
        }
        if text.len() > 200_000 {
            text = HOP.to_string();
            client.change(uri, version as i64, json!([{ "text": HOP }])).await;
        }
        if version % 50 == 0 {
            let (line, character) = position(&mut rng);
            for method in [
                "textDocument/hover",
                "textDocument/completion",
                "textDocument/signatureHelp",
                "textDocument/definition",
            ] {
                let answer = client
                    .request(
                        method,
                        json!({ "textDocument": { "uri": uri }, "position": at(line, character) }),
                    )
                    .await;
                assert!(
                    answer.get("error").is_none(),
                    "{method} failed at version {version}: {answer}"
                );
            }
            for method in [
                "textDocument/documentSymbol",
                "textDocument/semanticTokens/full",
                "textDocument/foldingRange",
                "textDocument/formatting",
            ] {
                let answer = client.request(method, json!({ "textDocument": { "uri": uri }, "options": { "tabSize": 2, "insertSpaces": true } })).await;
                assert!(
                    answer.get("error").is_none(),
                    "{method} failed at version {version}: {answer}"
                );
            }
            // Diagnostics published so far are no longer needed.
            client.seen.clear();
        }
    }
    // The server holds exactly the text we hold: its diagnostics for the last version are the
    // ones the IDE layer computes from our copy.
    let last = (edits + 1) as i64;
    let published = client.diagnostics(uri, last).await;
    let expected = costate_ide::Analysis::new(text.clone()).diagnostics;
    let messages: Vec<&str> =
        published.iter().map(|d| d["message"].as_str().unwrap().lines().next().unwrap()).collect();
    let expected: Vec<&str> = expected.iter().map(|d| d.message.as_str()).collect();
    assert_eq!(messages, expected);
    assert_eq!(client.backend.footprint(), (1, 1, 0), "(documents, analyses, solves)");
}
