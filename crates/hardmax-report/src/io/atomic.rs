//! Atomic file writes: write to a temporary file in the same folder, flush, then rename over the
//! target, so a reader (or an interrupted run) sees either the old file or the complete new one.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Failure to write a file atomically; names the file.
#[derive(Debug, thiserror::Error)]
pub enum AtomicWriteError {
    #[error("cannot write `{path}`: {source}. Check that the folder exists and is writable.")]
    Write {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
}

/// Write `bytes` to `path` atomically (temporary file + fsync + rename).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), AtomicWriteError> {
    let wrap = |source| AtomicWriteError::Write {
        path: path.to_path_buf(),
        source,
    };
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out".into());
    let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result.map_err(wrap)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_and_replaces() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.csv");
        write_atomic(&p, b"one").unwrap();
        write_atomic(&p, b"two").unwrap();
        assert_eq!(fs::read_to_string(&p).unwrap(), "two");
        let leftovers: Vec<_> = fs::read_dir(dir.path()).unwrap().collect();
        assert_eq!(leftovers.len(), 1);
    }

    #[test]
    fn missing_folder_is_an_error_naming_the_file() {
        let e = write_atomic(Path::new("/nonexistent-hardmax-dir/x.csv"), b"x").unwrap_err();
        assert!(e.to_string().contains("/nonexistent-hardmax-dir/x.csv"));
    }
}
