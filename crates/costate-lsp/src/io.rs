//! Writing the solution files atomically, exactly as the CLI does: a temporary file in the
//! destination folder, flushed, then renamed over the destination, so an editor or a plot
//! watching the file never reads half of it.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

pub fn write_atomic(path: &Path, contents: &[u8]) -> Result<(), String> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let tmp = dir.join(format!(".{name}.{}.lsp.tmp", std::process::id()));
    let result = (|| -> std::io::Result<()> {
        let mut file = fs::File::create(&tmp)?;
        file.write_all(contents)?;
        file.sync_all()?;
        drop(file);
        fs::rename(&tmp, path)
    })();
    result.map_err(|e| {
        let _ = fs::remove_file(&tmp);
        format!("cannot write `{}`: {e}", path.display())
    })
}
