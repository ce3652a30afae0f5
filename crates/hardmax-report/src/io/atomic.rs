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

/// The writer's process id of a temporary file made by [`write_atomic`] (`.NAME.PID.tmp`).
fn temp_writer_pid(file_name: &str) -> Option<u32> {
    let inner = file_name.strip_prefix('.')?.strip_suffix(".tmp")?;
    let (_, pid) = inner.rsplit_once('.')?;
    pid.parse().ok()
}

/// Is process `pid` running? This process counts as gone when `own_is_gone` (a run that
/// starts has no write in flight). Without `/proc` another process is assumed alive.
fn writer_alive(pid: u32, own_is_gone: bool) -> bool {
    if pid == std::process::id() {
        return !own_is_gone;
    }
    let proc_root = Path::new("/proc");
    if !proc_root.join("self").exists() {
        return true;
    }
    proc_root.join(pid.to_string()).exists()
}

/// Remove the temporary files that [`write_atomic`] left in `dir` when its writer was killed
/// (the writer's process is gone, or is this process, which has no write in flight when it
/// calls this). Files of a running writer are kept. Returns how many were removed.
pub fn remove_stale_temps(dir: &Path) -> usize {
    let Ok(rd) = fs::read_dir(dir) else {
        return 0;
    };
    let mut removed = 0;
    for e in rd.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        let Some(pid) = temp_writer_pid(&name) else {
            continue;
        };
        if e.file_type().is_ok_and(|t| t.is_file())
            && !writer_alive(pid, true)
            && fs::remove_file(e.path()).is_ok()
        {
            removed += 1;
        }
    }
    removed
}

/// Is `name` a temporary file of [`write_atomic`]?
pub fn is_temp_name(name: &str) -> bool {
    temp_writer_pid(name).is_some()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[cfg(unix)]
    #[test]
    fn stale_temps_of_gone_writers_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        // A pid above the Linux maximum (4194304) is never alive.
        let gone = dir.path().join(".points.csv.99999999.tmp");
        let own = dir
            .path()
            .join(format!(".manifest.json.{}.tmp", std::process::id()));
        let keep = dir.path().join("points.csv");
        for p in [&gone, &own, &keep] {
            fs::write(p, "x").unwrap();
        }
        // The parent process (the test harness's launcher) is alive: its file stays.
        let parent = std::os::unix::process::parent_id();
        let alive = dir.path().join(format!(".chips.csv.{parent}.tmp"));
        fs::write(&alive, "x").unwrap();
        assert_eq!(remove_stale_temps(dir.path()), 2);
        assert!(!gone.exists() && !own.exists());
        assert!(keep.exists() && alive.exists());
        assert_eq!(temp_writer_pid(".a.b.12.tmp"), Some(12));
        assert_eq!(temp_writer_pid("a.12.tmp"), None);
    }

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
