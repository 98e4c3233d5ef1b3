//! Reading problem files and writing outputs atomically.
//!
//! Outputs are written as the language server writes them (`costate_lsp::io`): a temporary
//! file in the destination folder, flushed to disk and then renamed over the destination, so a
//! crash or a full disk never leaves a half-written file in place of what the user had.

use std::fs;
use std::io;
use std::path::Path;

/// An IO problem, worded for a one-line error message.
#[derive(Debug)]
pub struct FileError(pub String);

impl std::fmt::Display for FileError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

pub fn read_source(path: &Path) -> Result<String, FileError> {
    let bytes = fs::read(path).map_err(|e| FileError(describe(path, "cannot read", &e)))?;
    String::from_utf8(bytes).map_err(|e| {
        FileError(format!(
            "cannot read `{}`: not UTF-8 text (invalid byte at offset {})",
            path.display(),
            e.utf8_error().valid_up_to()
        ))
    })
}

/// Replace `path` with `contents` atomically.
pub fn write_atomic(path: &Path, contents: &[u8]) -> Result<(), FileError> {
    costate_lsp::io::write_atomic(path, contents).map_err(FileError)
}

/// Write every file or none (a solution and its table land together).
pub fn write_all_or_none(files: &[(&Path, &[u8])]) -> Result<(), FileError> {
    costate_lsp::io::write_all_or_none(files).map_err(FileError)
}

pub fn create_dir(path: &Path) -> Result<(), FileError> {
    fs::create_dir_all(path).map_err(|e| FileError(describe(path, "cannot create folder", &e)))
}

fn describe(path: &Path, what: &str, e: &io::Error) -> String {
    costate_lsp::io::describe(path, what, e)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn atomic_write_replaces_and_leaves_no_temporary() {
        let dir = std::env::temp_dir().join(format!("costate-files-{}", std::process::id()));
        fs::create_dir_all(&dir).unwrap();
        let target = dir.join("a.txt");
        fs::write(&target, "old").unwrap();
        write_atomic(&target, b"new").unwrap();
        assert_eq!(fs::read_to_string(&target).unwrap(), "new");
        let leftovers: Vec<_> = fs::read_dir(&dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .filter(|e| e.file_name().to_string_lossy().ends_with(".tmp"))
            .collect();
        assert!(leftovers.is_empty());
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn missing_file_is_a_one_line_error() {
        let err = read_source(Path::new("/nonexistent/x.costate")).unwrap_err();
        assert_eq!(err.0, "cannot read `/nonexistent/x.costate`: no such file or folder");
    }
}
