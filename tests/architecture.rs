//! Architecture invariants, enforced from `cargo metadata` (see ARCHITECTURE.md).
//!
//! Each crate may depend only on the costate crates below it, and heavy or side-effecting
//! libraries stay in the crate that owns their concern: the parser library in syntax, the
//! numeric libraries in solve, the terminal renderer in the CLI, async and the editor protocol
//! in the language server. Only `costate-lsp` may depend on tokio or the protocol crates, and
//! `costate-ide` depends on nothing but the syntax and check crates.

use std::collections::BTreeMap;
use std::process::Command;

/// For each crate: the workspace crates and the third-party crates it may depend on directly
/// (normal dependencies; dev-dependencies are free).
fn allowed() -> BTreeMap<&'static str, (&'static [&'static str], &'static [&'static str])> {
    BTreeMap::from([
        ("costate-syntax", (&[][..], &["chumsky"][..])),
        ("costate-check", (&["costate-syntax"][..], &[][..])),
        ("costate-model", (&[][..], &[][..])),
        ("costate-lower", (&["costate-syntax", "costate-check", "costate-model"][..], &[][..])),
        ("costate-solve", (&["costate-model"][..], &["argmin", "nalgebra", "clarabel"][..])),
        (
            "costate-driver",
            (
                &[
                    "costate-syntax",
                    "costate-check",
                    "costate-model",
                    "costate-lower",
                    "costate-solve",
                ][..],
                &["serde_json"][..],
            ),
        ),
        // The IDE layer is pure: no solver, no async, no protocol types.
        ("costate-ide", (&["costate-syntax", "costate-check"][..], &[][..])),
        (
            "costate-lsp",
            (
                &[
                    "costate-syntax",
                    "costate-check",
                    "costate-ide",
                    "costate-lower",
                    "costate-model",
                    "costate-solve",
                    "costate-driver",
                ][..],
                &[
                    "tower-lsp-server",
                    "tokio",
                    "serde",
                    "serde_json",
                    "tracing",
                    "tracing-subscriber",
                ][..],
            ),
        ),
        (
            "costate-cli",
            (
                &[
                    "costate-syntax",
                    "costate-check",
                    "costate-model",
                    "costate-lower",
                    "costate-solve",
                    "costate-ide",
                    "costate-lsp",
                    "costate-driver",
                ][..],
                &["ariadne", "clap", "serde", "serde_json"][..],
            ),
        ),
    ])
}

#[test]
fn crates_depend_only_on_what_their_layer_allows() {
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
    let out = Command::new(cargo)
        .args(["metadata", "--format-version", "1", "--no-deps", "--offline"])
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .expect("cargo metadata runs");
    assert!(
        out.status.success(),
        "cargo metadata failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let meta: serde_json::Value = serde_json::from_slice(&out.stdout).expect("metadata is JSON");
    let rules = allowed();
    let mut problems = Vec::new();
    let mut seen = 0;
    for package in meta["packages"].as_array().expect("packages") {
        let name = package["name"].as_str().unwrap();
        let Some((own, third)) = rules.get(name) else {
            problems.push(format!("crate `{name}` has no layering rule in tests/architecture.rs"));
            continue;
        };
        seen += 1;
        for dep in package["dependencies"].as_array().unwrap() {
            if !dep["kind"].is_null() {
                continue; // dev- and build-dependencies do not ship
            }
            let dep_name = dep["name"].as_str().unwrap();
            let ok = if dep_name.starts_with("costate-") {
                own.contains(&dep_name)
            } else {
                third.contains(&dep_name)
            };
            if !ok {
                problems.push(format!("`{name}` must not depend on `{dep_name}`"));
            }
        }
    }
    assert!(seen >= 9, "expected the workspace crates in cargo metadata, saw {seen}");
    assert!(problems.is_empty(), "layering violations:\n{}", problems.join("\n"));
}
