//! Atomic file output: write to a temporary file in the destination folder, then rename it over the
//! destination. A reader never sees a half-written file, and a failed write leaves nothing behind.
//!
//! Also the guard that refuses to write over one of the project's inputs.

use super::IoError;
use std::fs;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// A temporary path beside `path`, unique within this process and across processes.
fn temp_path(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let tmp = format!(".{name}.tmp-{}-{n}", std::process::id());
    match path.parent() {
        Some(dir) if !dir.as_os_str().is_empty() => dir.join(tmp),
        _ => PathBuf::from(tmp),
    }
}

/// Creates the destination's parent folder if it is missing.
fn ensure_parent(path: &Path) -> Result<(), IoError> {
    if let Some(dir) = path.parent()
        && !dir.as_os_str().is_empty()
        && !dir.is_dir()
    {
        fs::create_dir_all(dir).map_err(|e| IoError::os(dir, e))?;
    }
    Ok(())
}

/// Writes `bytes` to `path` atomically (temporary file in the same folder, then rename). Creates
/// the parent folder if needed.
pub fn write_bytes(path: &Path, bytes: &[u8]) -> Result<(), IoError> {
    write_with(path, |w| w.write_all(bytes))
}

/// Writes `path` atomically with `f`, which receives a buffered writer on a temporary file in the
/// same folder. On success the temporary file is renamed over `path`; on any failure it is removed
/// and `path` is left untouched. Creates the parent folder if needed.
pub fn write_with<F: FnOnce(&mut dyn Write) -> std::io::Result<()>>(
    path: &Path,
    f: F,
) -> Result<(), IoError> {
    ensure_parent(path)?;
    let tmp = temp_path(path);
    let result = (|| -> std::io::Result<()> {
        let file = fs::File::create(&tmp)?;
        let mut w = BufWriter::new(file);
        f(&mut w)?;
        w.flush()?;
        let file = w.into_inner().map_err(|e| e.into_error())?;
        drop(file);
        Ok(())
    })();
    if let Err(e) = result {
        let _ = fs::remove_file(&tmp);
        return Err(IoError::os(path, e));
    }
    if let Err(e) = fs::rename(&tmp, path) {
        let _ = fs::remove_file(&tmp);
        return Err(IoError::os(path, e));
    }
    Ok(())
}

/// The canonical form of `path` if it exists, else its absolute form with the parent canonicalised
/// when that exists.
fn comparable(path: &Path) -> PathBuf {
    if let Ok(p) = fs::canonicalize(path) {
        return p;
    }
    let abs = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
    match (abs.parent(), abs.file_name()) {
        (Some(dir), Some(name)) => match fs::canonicalize(dir) {
            Ok(d) => d.join(name),
            Err(_) => abs,
        },
        _ => abs,
    }
}

/// Refuses an output path that is one of `inputs` (compared after resolving links and relative
/// parts).
pub fn ensure_not_input(path: &Path, inputs: &[PathBuf]) -> Result<(), IoError> {
    let out = comparable(path);
    if inputs.iter().any(|i| comparable(i) == out) {
        return Err(IoError::WouldOverwriteInput {
            path: path.to_path_buf(),
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn failed_write_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("a.txt");
        let err = write_with(&path, |w| {
            w.write_all(b"partial")?;
            Err(std::io::Error::other("boom"))
        })
        .unwrap_err();
        assert!(err.to_string().contains("a.txt"));
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 0);
    }

    #[test]
    fn writes_and_replaces() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("sub").join("b.txt");
        write_bytes(&path, b"one").unwrap();
        write_bytes(&path, b"two").unwrap();
        assert_eq!(fs::read(&path).unwrap(), b"two");
        assert_eq!(fs::read_dir(path.parent().unwrap()).unwrap().count(), 1);
    }

    #[test]
    fn refuses_inputs() {
        let dir = tempfile::tempdir().unwrap();
        let input = dir.path().join("in.tif");
        fs::write(&input, b"x").unwrap();
        let same = dir.path().join(".").join("in.tif");
        assert!(ensure_not_input(&same, std::slice::from_ref(&input)).is_err());
        assert!(ensure_not_input(&dir.path().join("out.tif"), &[input]).is_ok());
    }
}
