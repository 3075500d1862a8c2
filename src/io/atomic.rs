//! Atomic file output: write to a temporary file in the destination folder, flush it to disk
//! (`fsync`), rename it over the destination, then flush the folder so the rename itself is on
//! disk. A reader never sees a half-written file, a failed write leaves nothing behind, and after
//! a crash or power loss a file is either the old one or the whole new one.
//!
//! Also the guard that refuses to write over one of the project's inputs.

use super::error::IoError;
use std::fs;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// Infix of every temporary file name: `.<name>.tmp-<pid>-<counter>`.
const TEMP_INFIX: &str = ".tmp-";

/// True when `name` is the name of a temporary file this module writes (`.<name>.tmp-<pid>-<n>`),
/// e.g. one left behind by a killed process.
pub fn is_temp_name(name: &str) -> bool {
    let Some(rest) = name.strip_prefix('.') else {
        return false;
    };
    let Some(at) = rest.rfind(TEMP_INFIX) else {
        return false;
    };
    let tail = &rest[at + TEMP_INFIX.len()..];
    let mut parts = tail.split('-');
    at > 0
        && matches!(
            (parts.next(), parts.next(), parts.next()),
            (Some(pid), Some(n), None)
                if !pid.is_empty()
                    && !n.is_empty()
                    && pid.bytes().all(|b| b.is_ascii_digit())
                    && n.bytes().all(|b| b.is_ascii_digit())
        )
}

/// Flushes a folder's entries to disk (makes a rename or removal in it durable). File systems
/// that cannot flush a folder are not an error.
pub fn sync_dir(dir: &Path) -> Result<(), IoError> {
    let dir = if dir.as_os_str().is_empty() {
        Path::new(".")
    } else {
        dir
    };
    match fs::File::open(dir).and_then(|d| d.sync_all()) {
        Ok(()) => Ok(()),
        Err(e)
            if matches!(
                e.kind(),
                std::io::ErrorKind::InvalidInput
                    | std::io::ErrorKind::Unsupported
                    | std::io::ErrorKind::PermissionDenied
            ) =>
        {
            Ok(())
        }
        Err(e) => Err(IoError::os(dir, e)),
    }
}

/// A temporary path beside `path`, unique within this process and across processes.
fn temp_path(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let tmp = format!(".{name}{TEMP_INFIX}{}-{n}", std::process::id());
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
/// same folder. On success the temporary file is flushed to disk and renamed over `path`, and the
/// folder is flushed; on any failure the temporary file is removed and `path` is left untouched.
/// Creates the parent folder if needed.
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
        file.sync_all()?;
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
    sync_dir(path.parent().unwrap_or(Path::new("")))
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
    fn temp_names_are_recognised() {
        let p = temp_path(Path::new("dir/a.tif"));
        let name = p.file_name().unwrap().to_str().unwrap();
        assert!(is_temp_name(name), "{name}");
        for other in [
            "a.tif",
            ".a.tif",
            ".tmp-1-2",
            ".a.tmp-1",
            ".a.tmp-x-2",
            ".a.tmp-1-2-3",
        ] {
            assert!(!is_temp_name(other), "{other}");
        }
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
