//! Golden tests for valid input: every `tests/fixtures/parse/*.costate` parses without a
//! diagnostic, and its debug-printed tree matches the snapshot `snapshots/parse_golden__<file>.snap`.
//! Review changed snapshots with `cargo insta review`.

use std::path::Path;

#[test]
fn valid_fixtures_parse_cleanly_and_match_their_snapshots() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/parse");
    let mut paths: Vec<_> = std::fs::read_dir(&dir)
        .expect("fixture directory exists")
        .map(|e| e.expect("readable directory entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "costate"))
        .collect();
    paths.sort();
    assert!(paths.len() >= 8, "expected at least 8 valid fixtures, found {}", paths.len());
    for path in paths {
        let text = std::fs::read_to_string(&path).expect("readable fixture");
        let parse = costate_syntax::parse(&text);
        let name = path.file_stem().and_then(|s| s.to_str()).expect("utf-8 file name");
        assert!(
            parse.diagnostics.is_empty(),
            "{name}: unexpected diagnostics {:#?}",
            parse.diagnostics
        );
        insta::assert_snapshot!(name, format!("{:#?}", parse.file));
    }
}
