//! What the end-to-end tests over the `costate` binary share: the repository root, running
//! the binary there, and reading its output. Each test binary uses a part of it.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The repository root (the tests live in `costate-cli`, two folders down).
pub fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// The built `costate` binary with `args`, run at the repository root without colours.
pub fn costate(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_costate"))
        .args(args)
        .current_dir(repo())
        .env("NO_COLOR", "1")
        .output()
        .expect("the costate binary runs")
}

pub fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

/// A file's name without folder and extension.
pub fn stem(file: &str) -> &str {
    Path::new(file).file_stem().and_then(|s| s.to_str()).unwrap_or(file)
}
