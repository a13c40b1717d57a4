//! Writing results to disk safely, and the file formats of the reduced tree.
//!
//! Every output is written to a temporary file in the target folder and renamed into place, so a
//! reader never sees half a file and a crash never leaves one; an output path that is one of the
//! inputs is refused.

use std::io::Write;
use std::path::{Path, PathBuf};

/// Why an output could not be written.
#[derive(Debug, thiserror::Error)]
pub enum WriteError {
    #[error("{0}: refusing to overwrite an input file; choose another output path")]
    WouldOverwriteInput(PathBuf),
    #[error("{path}: the folder {folder} does not exist")]
    NoFolder { path: PathBuf, folder: PathBuf },
    #[error("{path}: cannot write: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
}

fn same_file(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    }
}

/// Writes `bytes` to `path` through a temporary file in the same folder and a rename.
/// Refuses if `path` is one of `inputs`.
pub fn write_atomic(path: &Path, bytes: &[u8], inputs: &[&Path]) -> Result<(), WriteError> {
    if inputs.iter().any(|i| same_file(i, path)) {
        return Err(WriteError::WouldOverwriteInput(path.to_path_buf()));
    }
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !folder.is_dir() {
        return Err(WriteError::NoFolder {
            path: path.to_path_buf(),
            folder,
        });
    }
    let io = |source| WriteError::Io {
        path: path.to_path_buf(),
        source,
    };
    let mut tmp = tempfile::Builder::new()
        .prefix(".pollard-")
        .suffix(".tmp")
        .tempfile_in(&folder)
        .map_err(io)?;
    tmp.write_all(bytes).map_err(io)?;
    tmp.as_file().sync_all().map_err(io)?;
    tmp.persist(path).map_err(|e| io(e.error))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_atomically_and_refuses_inputs() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("out.txt");
        write_atomic(&p, b"one", &[]).unwrap();
        write_atomic(&p, b"two", &[]).unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"two");
        let e = write_atomic(&p, b"three", &[&p]).unwrap_err();
        assert!(matches!(e, WriteError::WouldOverwriteInput(_)));
        assert_eq!(std::fs::read(&p).unwrap(), b"two");
        let e = write_atomic(&dir.path().join("no/such/x"), b"x", &[]).unwrap_err();
        assert!(matches!(e, WriteError::NoFolder { .. }));
        // no temporary files left behind
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }
}
