//! A file written piece by piece and still atomically: the pieces go to a temporary file in the
//! same folder (named like [`super::write_atomic`]'s, `.NAME.PID.tmp`, so a killed writer's file
//! is recognised and removed by [`super::remove_stale_temps`]), and [`StreamFile::commit`]
//! flushes, syncs and renames it over the target. Dropped without a commit, the temporary file
//! is removed and the target is untouched.

use std::fs;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use super::AtomicWriteError;

/// A file being streamed to disk; see the module documentation.
#[derive(Debug)]
pub struct StreamFile {
    path: PathBuf,
    tmp: PathBuf,
    out: Option<BufWriter<fs::File>>,
}

impl StreamFile {
    /// Start writing `path` (nothing is visible at `path` until [`StreamFile::commit`]).
    pub fn create(path: &Path) -> Result<StreamFile, AtomicWriteError> {
        let dir = path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "out".into());
        let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
        let file = fs::File::create(&tmp).map_err(|source| AtomicWriteError::Write {
            path: path.to_path_buf(),
            source,
        })?;
        Ok(StreamFile {
            path: path.to_path_buf(),
            tmp,
            out: Some(BufWriter::with_capacity(1 << 16, file)),
        })
    }

    fn err(&self, source: std::io::Error) -> AtomicWriteError {
        AtomicWriteError::Write {
            path: self.path.clone(),
            source,
        }
    }

    /// Append bytes.
    pub fn write(&mut self, bytes: &[u8]) -> Result<(), AtomicWriteError> {
        let r = match self.out.as_mut() {
            Some(w) => w.write_all(bytes),
            None => Ok(()),
        };
        r.map_err(|e| self.err(e))
    }

    /// Append the whole content of the file `from` (copied in blocks, not read into memory).
    pub fn append_file(&mut self, from: &Path) -> Result<(), AtomicWriteError> {
        let r = (|| {
            let mut src = fs::File::open(from)?;
            match self.out.as_mut() {
                Some(w) => std::io::copy(&mut src, w).map(|_| ()),
                None => Ok(()),
            }
        })();
        r.map_err(|source| AtomicWriteError::Write {
            path: from.to_path_buf(),
            source,
        })
    }

    /// Flush, sync and rename over the target.
    pub fn commit(mut self) -> Result<(), AtomicWriteError> {
        let r = (|| {
            if let Some(w) = self.out.take() {
                let f = w.into_inner().map_err(|e| e.into_error())?;
                f.sync_all()?;
            }
            fs::rename(&self.tmp, &self.path)
        })();
        r.map_err(|e| self.err(e))
    }
}

impl Write for StreamFile {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        match self.out.as_mut() {
            Some(w) => w.write(buf),
            None => Ok(buf.len()),
        }
    }

    fn flush(&mut self) -> std::io::Result<()> {
        match self.out.as_mut() {
            Some(w) => w.flush(),
            None => Ok(()),
        }
    }
}

impl Drop for StreamFile {
    fn drop(&mut self) {
        // Not committed (an error or an abandoned point): the target stays as it was.
        if self.out.take().is_some() || self.tmp.exists() {
            let _ = fs::remove_file(&self.tmp);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn streams_then_commits_or_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("t.csv");
        fs::write(&p, "old").unwrap();
        let mut s = StreamFile::create(&p).unwrap();
        s.write(b"a,").unwrap();
        s.write(b"b\n").unwrap();
        // Before the commit the target is the old file and one temporary file exists.
        assert_eq!(fs::read_to_string(&p).unwrap(), "old");
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 2);
        s.commit().unwrap();
        assert_eq!(fs::read_to_string(&p).unwrap(), "a,b\n");
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 1);
        // Dropped without a commit: the target is unchanged and no temporary file is left.
        let mut s = StreamFile::create(&p).unwrap();
        s.write(b"lost").unwrap();
        drop(s);
        assert_eq!(fs::read_to_string(&p).unwrap(), "a,b\n");
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 1);
        // Appending a file copies it.
        let q = dir.path().join("u.csv");
        let mut s = StreamFile::create(&q).unwrap();
        s.write(b"h\n").unwrap();
        s.append_file(&p).unwrap();
        s.commit().unwrap();
        assert_eq!(fs::read_to_string(&q).unwrap(), "h\na,b\n");
    }
}
