//! Keeps docs/diagnostics.md complete: every diagnostic code of every crate has a section headed
//! `### {id} {name}` stating its severity and showing a `costate` example, ids are unique across
//! crates, and the document has no section for a code that does not exist.
//!
//! The codes come from the public `ALL` tables of the syntax, check and lower crates and from the
//! text of the driver's `src/codes.rs` (solver findings), which this test reads as text so
//! that a code written in another form cannot slip past it. This test only reads; it owns no code table.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use costate_syntax::{Code, Severity};

/// One code as the test sees it, whichever crate defines it.
#[derive(Clone, Debug, PartialEq, Eq)]
struct Entry {
    id: String,
    name: String,
    severity: Severity,
    origin: &'static str,
}

fn repo_root() -> PathBuf {
    // This file is registered as a test of crates/costate-cli.
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

fn read(path: &Path) -> String {
    std::fs::read_to_string(path).unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()))
}

fn from_table(table: &[Code], origin: &'static str) -> Vec<Entry> {
    table
        .iter()
        .map(|c| Entry {
            id: c.id.to_string(),
            name: c.name.to_string(),
            severity: c.severity,
            origin,
        })
        .collect()
}

/// The string literal that follows `key: "` in `text`, for each occurrence, in order.
fn quoted_after<'a>(text: &'a str, key: &str) -> Vec<&'a str> {
    let pattern = format!("{key}: \"");
    let mut out = Vec::new();
    let mut rest = text;
    while let Some(at) = rest.find(&pattern) {
        let after = &rest[at + pattern.len()..];
        let end = after.find('"').expect("unterminated string literal in codes.rs");
        out.push(&after[..end]);
        rest = &after[end..];
    }
    out
}

/// The CLI's codes, read from the text of its `src/codes.rs`: each `Code { id: "..", name: "..",
/// severity: Severity::.. }` literal.
fn driver_codes(text: &str) -> Vec<Entry> {
    let mut out = Vec::new();
    for literal in text.split("Code {").skip(1) {
        let literal = &literal[..literal.find('}').expect("unterminated `Code {` literal")];
        let ids = quoted_after(literal, "id");
        let names = quoted_after(literal, "name");
        assert!(ids.len() == 1 && names.len() == 1, "cannot read the Code literal `{literal}`");
        let severity = if literal.contains("Severity::Warning") {
            Severity::Warning
        } else {
            assert!(literal.contains("Severity::Error"), "no severity in `{literal}`");
            Severity::Error
        };
        out.push(Entry {
            id: ids[0].to_string(),
            name: names[0].to_string(),
            severity,
            origin: "costate-driver",
        });
    }
    // The literal parse and the plain `id:`/`name:` scan must agree, so that a code written in
    // another form (a helper function, say) is not silently missed.
    let ids = quoted_after(text, "id");
    let names = quoted_after(text, "name");
    assert_eq!(ids.len(), out.len(), "codes.rs has `id:` strings outside `Code {{ .. }}` literals");
    assert_eq!(
        names.len(),
        out.len(),
        "codes.rs has `name:` strings outside `Code {{ .. }}` literals"
    );
    out
}

fn all_codes() -> Vec<Entry> {
    let cli = read(&repo_root().join("crates/costate-driver/src/codes.rs"));
    let mut all = from_table(costate_syntax::codes::ALL, "costate-syntax");
    all.extend(from_table(costate_check::codes::ALL, "costate-check"));
    all.extend(from_table(costate_lower::codes::ALL, "costate-lower"));
    all.extend(driver_codes(&cli));
    all
}

/// Each `### ` heading of the document with the text of its section (up to the next heading of
/// level 3 or higher).
fn sections(doc: &str) -> Vec<(String, String)> {
    let mut out: Vec<(String, String)> = Vec::new();
    let mut in_fence = false;
    for line in doc.lines() {
        if line.starts_with("```") {
            in_fence = !in_fence;
        }
        if !in_fence && line.starts_with("### ") {
            out.push((line["### ".len()..].trim_end().to_string(), String::new()));
        } else if !in_fence && (line.starts_with("## ") || line.starts_with("# ")) {
            out.push((String::new(), String::new()));
        } else if let Some(last) = out.last_mut() {
            last.1.push_str(line);
            last.1.push('\n');
        }
    }
    out.retain(|(heading, _)| !heading.is_empty());
    out
}

/// True for a heading word shaped like a code id: `E` or `W` and four digits.
fn looks_like_id(word: &str) -> bool {
    let mut chars = word.chars();
    matches!(chars.next(), Some('E' | 'W')) && word.len() == 5 && chars.all(|c| c.is_ascii_digit())
}

fn doc() -> String {
    read(&repo_root().join("docs/diagnostics.md"))
}

#[test]
fn the_code_tables_are_read() {
    let all = all_codes();
    // Each source contributes; an empty one means the extraction broke, not that it has no codes.
    for origin in ["costate-syntax", "costate-check", "costate-lower", "costate-driver"] {
        assert!(all.iter().any(|e| e.origin == origin), "no codes read from {origin}");
    }
    let cli = driver_codes(&read(&repo_root().join("crates/costate-driver/src/codes.rs")));
    assert!(cli.iter().all(|e| e.id.starts_with("E10")), "solver findings are E10xx: {cli:?}");
}

#[test]
fn ids_are_unique_across_crates() {
    let mut seen: BTreeMap<String, &'static str> = BTreeMap::new();
    let mut names: BTreeMap<String, String> = BTreeMap::new();
    for e in all_codes() {
        if let Some(first) = seen.insert(e.id.clone(), e.origin) {
            panic!("{} is defined by both {first} and {}", e.id, e.origin);
        }
        if let Some(first) = names.insert(e.name.clone(), e.id.clone()) {
            panic!("the name {} is used by both {first} and {}", e.name, e.id);
        }
    }
}

#[test]
fn every_code_has_a_section_with_severity_and_example() {
    let doc = doc();
    let sections: BTreeMap<String, String> = sections(&doc).into_iter().collect();
    let mut missing = Vec::new();
    for e in all_codes() {
        let heading = format!("{} {}", e.id, e.name);
        let Some(body) = sections.get(&heading) else {
            missing.push(format!("### {heading} ({})", e.origin));
            continue;
        };
        let severity = match e.severity {
            Severity::Error => "Severity: error.",
            Severity::Warning => "Severity: warning.",
        };
        assert!(body.contains(severity), "section `{heading}` must say `{severity}`");
        assert!(body.contains("```costate\n"), "section `{heading}` needs a ```costate example");
        assert!(body.contains("Fix"), "section `{heading}` needs a fix");
    }
    assert!(
        missing.is_empty(),
        "docs/diagnostics.md lacks these headings:\n{}",
        missing.join("\n")
    );
}

#[test]
fn the_doc_has_no_section_for_an_unknown_code() {
    let doc = doc();
    let known: BTreeSet<String> =
        all_codes().into_iter().map(|e| format!("{} {}", e.id, e.name)).collect();
    let mut seen = BTreeSet::new();
    for (heading, _) in sections(&doc) {
        let first = heading.split_whitespace().next().unwrap_or_default();
        if !looks_like_id(first) {
            continue;
        }
        assert!(
            known.contains(&heading),
            "docs/diagnostics.md documents `### {heading}`, which no crate defines"
        );
        assert!(seen.insert(heading.clone()), "`### {heading}` appears twice");
    }
}

/// Sort key of an id: its range (`01`, `02`, `09`, `10`), then errors before warnings, then the
/// number, so that `E02xx` and `W02xx` stay together as the checker's range.
fn order_key(id: &str) -> (&str, &str, &str) {
    (&id[1..3], &id[..1], &id[1..])
}

#[test]
fn sections_are_in_id_order() {
    let ids: Vec<String> = sections(&doc())
        .into_iter()
        .filter_map(|(heading, _)| heading.split_whitespace().next().map(str::to_string))
        .filter(|word| looks_like_id(word))
        .collect();
    for pair in ids.windows(2) {
        assert!(
            order_key(&pair[0]) < order_key(&pair[1]),
            "`{}` comes before `{}` in docs/diagnostics.md",
            pair[0],
            pair[1]
        );
    }
}
