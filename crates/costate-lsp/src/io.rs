//! Writing output files so that nothing the user had is lost, shared by the language server
//! and the CLI: each file goes to a temporary file in its destination folder, is flushed to
//! disk and renamed over the destination (an editor or a plot watching it never reads half of
//! it), and a group of files (a solution and its table) lands together or not at all.

use std::fs;
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// Replace `path` with `contents` atomically.
pub fn write_atomic(path: &Path, contents: &[u8]) -> Result<(), String> {
    write_all_or_none(&[(path, contents)])
}

/// Write every `(path, contents)`, or leave every destination as it was.
///
/// All contents are first written to temporaries beside their destinations (a full disk or a
/// missing folder fails here, before anything is replaced). Each existing destination is then
/// kept under a backup name (a hard link, or a copy where links are not supported) and the
/// temporary renamed over it; if a later rename fails, the destinations already replaced get
/// their backups back (or are removed if they did not exist before).
pub fn write_all_or_none(files: &[(&Path, &[u8])]) -> Result<(), String> {
    let mut temps: Vec<PathBuf> = Vec::with_capacity(files.len());
    for (path, contents) in files {
        let tmp = sibling(path, "tmp");
        let written = write_synced(&tmp, contents);
        temps.push(tmp);
        if let Err(e) = written {
            remove_all(&temps);
            return Err(describe(path, "cannot write", &e));
        }
    }
    // (destination, its backup if it existed)
    let mut replaced: Vec<(&Path, Option<PathBuf>)> = Vec::with_capacity(files.len());
    for ((path, _), tmp) in files.iter().zip(&temps) {
        let step = (|| -> io::Result<Option<PathBuf>> {
            let backup = if path.exists() {
                let backup = sibling(path, "bak");
                let _ = fs::remove_file(&backup);
                if fs::hard_link(path, &backup).is_err() {
                    fs::copy(path, &backup)?;
                }
                Some(backup)
            } else {
                None
            };
            match fs::rename(tmp, path) {
                Ok(()) => Ok(backup),
                Err(e) => {
                    if let Some(b) = &backup {
                        let _ = fs::remove_file(b);
                    }
                    Err(e)
                }
            }
        })();
        match step {
            Ok(backup) => replaced.push((path, backup)),
            Err(e) => {
                for (done, backup) in replaced.iter().rev() {
                    match backup {
                        Some(b) => {
                            let _ = fs::rename(b, done);
                        }
                        None => {
                            let _ = fs::remove_file(done);
                        }
                    }
                }
                remove_all(&temps);
                return Err(describe(path, "cannot write", &e));
            }
        }
    }
    for (_, backup) in replaced {
        if let Some(b) = backup {
            let _ = fs::remove_file(b);
        }
    }
    Ok(())
}

/// A hidden name beside `path`, unique to this process.
fn sibling(path: &Path, what: &str) -> PathBuf {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    dir.join(format!(".{name}.{}.{what}", std::process::id()))
}

fn write_synced(path: &Path, contents: &[u8]) -> io::Result<()> {
    let mut file = fs::File::create(path)?;
    file.write_all(contents)?;
    file.sync_all()
}

fn remove_all(paths: &[PathBuf]) {
    for p in paths {
        let _ = fs::remove_file(p);
    }
}

/// `cannot write `PATH`: reason`, with the common reasons in plain words.
pub fn describe(path: &Path, what: &str, e: &io::Error) -> String {
    let reason = match e.kind() {
        io::ErrorKind::NotFound => "no such file or folder".to_string(),
        io::ErrorKind::PermissionDenied => "permission denied".to_string(),
        io::ErrorKind::IsADirectory => "it is a folder".to_string(),
        _ => e.to_string(),
    };
    format!("{what} `{}`: {reason}", path.display())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("costate-io-{name}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        fs::create_dir_all(&dir).unwrap();
        dir
    }

    fn leftovers(dir: &Path) -> Vec<String> {
        fs::read_dir(dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with('.'))
            .collect()
    }

    #[test]
    fn a_group_replaces_every_file_and_leaves_nothing_behind() {
        let dir = scratch("group");
        let (a, b) = (dir.join("a.json"), dir.join("a.csv"));
        fs::write(&a, "old a").unwrap();
        write_all_or_none(&[(&a, b"new a"), (&b, b"new b")]).unwrap();
        assert_eq!(fs::read_to_string(&a).unwrap(), "new a");
        assert_eq!(fs::read_to_string(&b).unwrap(), "new b");
        assert!(leftovers(&dir).is_empty(), "{:?}", leftovers(&dir));
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn a_group_that_cannot_be_completed_changes_nothing() {
        let dir = scratch("rollback");
        let a = dir.join("a.json");
        fs::write(&a, "old a").unwrap();
        // The second destination is a folder: its rename fails after the first has landed.
        let b = dir.join("a.csv");
        fs::create_dir_all(b.join("inside")).unwrap();
        let err = write_all_or_none(&[(&a, b"new a"), (&b, b"new b")]).unwrap_err();
        assert!(err.contains("a.csv"), "{err}");
        assert_eq!(fs::read_to_string(&a).unwrap(), "old a");
        assert!(b.is_dir());
        assert!(leftovers(&dir).is_empty(), "{:?}", leftovers(&dir));
        // A new file of a failed group is removed again.
        let c = dir.join("c.json");
        write_all_or_none(&[(&c, b"new c"), (&b, b"new b")]).unwrap_err();
        assert!(!c.exists());
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn a_missing_folder_fails_before_anything_is_replaced() {
        let dir = scratch("missing");
        let a = dir.join("a.json");
        fs::write(&a, "old a").unwrap();
        let b = dir.join("no/such/folder/a.csv");
        let err = write_all_or_none(&[(&a, b"new a"), (&b, b"new b")]).unwrap_err();
        assert!(err.contains("no such file or folder"), "{err}");
        assert_eq!(fs::read_to_string(&a).unwrap(), "old a");
        assert!(leftovers(&dir).is_empty(), "{:?}", leftovers(&dir));
        fs::remove_dir_all(&dir).unwrap();
    }
}
