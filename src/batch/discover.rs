//! Discovery: the SWC files below a folder, and where each one's outputs go.

use super::{BatchError, RECORD_DIR, Shard};
use std::path::{Path, PathBuf};

/// One input file and where its outputs go.
#[derive(Debug, Clone, PartialEq)]
pub struct Cell {
    /// Path relative to the input folder, `/` between folders (the sort and shard key).
    pub rel: String,
    pub input: PathBuf,
    /// The reduced tree: `OUT/<rel>` with `.json` in place of `.swc`.
    pub output: PathBuf,
    /// The record: `OUT/.pollard-batch/<rel>` with `.json` in place of `.swc`.
    pub record: PathBuf,
    /// Set for a folder that cannot be read, or when another input maps to the same output
    /// name (`a.swc` and `a.SWC`): the cell fails with this message, has no outputs and is
    /// reported again on every run.
    pub fault: Option<String>,
}

fn rel_text(rel: &Path) -> String {
    rel.components()
        .map(|c| c.as_os_str().to_string_lossy())
        .collect::<Vec<_>>()
        .join("/")
}

/// One find of [`discover`]: an SWC file, or a folder that could not be read.
#[derive(Debug, Clone, PartialEq)]
pub struct Found {
    /// Path relative to the input folder, `/` between folders (a folder's ends in `/`).
    pub rel: String,
    pub path: PathBuf,
    /// Why a folder could not be read (its files are unknown; it becomes a failed row).
    pub fault: Option<String>,
}

/// Every `.swc` file below `input` (any case of the extension), sorted by relative path. Folders
/// are walked with an explicit stack; symbolic links to folders are not followed; `skip` (the
/// output folder, if it lies inside) is left out. A subfolder that cannot be read is listed with
/// its fault, so that one locked folder does not stop an archive; the input folder itself must
/// be readable.
pub fn discover(input: &Path, skip: Option<&Path>) -> Result<Vec<Found>, BatchError> {
    if !input.is_dir() {
        return Err(BatchError::NotAFolder(input.to_path_buf()));
    }
    let skip = skip.and_then(|s| std::fs::canonicalize(s).ok());
    let mut found: Vec<Found> = Vec::new();
    let mut stack: Vec<PathBuf> = vec![PathBuf::new()];
    while let Some(rel_dir) = stack.pop() {
        let dir = input.join(&rel_dir);
        if let Some(s) = &skip
            && std::fs::canonicalize(&dir).ok().as_ref() == Some(s)
        {
            continue;
        }
        let listed: Result<Vec<std::fs::DirEntry>, std::io::Error> =
            std::fs::read_dir(&dir).and_then(|it| it.collect());
        let entries = match listed {
            Ok(e) => e,
            Err(source) if rel_dir.as_os_str().is_empty() => {
                return Err(BatchError::ReadDir { path: dir, source });
            }
            Err(e) => {
                let rel = format!("{}/", rel_text(&rel_dir));
                found.push(Found {
                    fault: Some(format!("{rel}: cannot read the folder: {e}")),
                    rel,
                    path: dir,
                });
                continue;
            }
        };
        for e in entries {
            let rel = rel_dir.join(e.file_name());
            let Ok(ft) = e.file_type() else { continue };
            if ft.is_dir() {
                stack.push(rel);
                continue;
            }
            let is_swc = rel
                .extension()
                .is_some_and(|x| x.eq_ignore_ascii_case("swc"));
            // a link counts when it leads to a file
            let is_file = ft.is_file() || (ft.is_symlink() && input.join(&rel).is_file());
            if is_swc && is_file {
                found.push(Found {
                    rel: rel_text(&rel),
                    path: input.join(&rel),
                    fault: None,
                });
            }
        }
    }
    found.sort_by(|a, b| a.rel.cmp(&b.rel));
    Ok(found)
}

/// The cells of one shard of `input`, with their output paths, sorted by relative path.
/// Refuses an output folder that contains the input folder (outputs would land among the inputs).
pub fn plan(input: &Path, out: &Path, shard: Shard) -> Result<Vec<Cell>, BatchError> {
    if !input.is_dir() {
        return Err(BatchError::NotAFolder(input.to_path_buf()));
    }
    if let (Ok(i), Ok(o)) = (std::fs::canonicalize(input), std::fs::canonicalize(out))
        && i.starts_with(&o)
    {
        return Err(BatchError::OutputHoldsInput {
            input: input.to_path_buf(),
            out: out.to_path_buf(),
        });
    }
    let found = discover(input, Some(out))?;
    let mut first_of: std::collections::HashMap<PathBuf, String> = Default::default();
    let mut cells = Vec::new();
    for f in found {
        let rel_json = Path::new(&f.rel).with_extension("json");
        let fault = match (f.fault, first_of.get(&rel_json)) {
            (Some(e), _) => Some(e),
            (None, Some(other)) => Some(format!(
                "{}: its output name {} is taken by {other}; rename one of the two files",
                f.rel,
                rel_text(&rel_json)
            )),
            (None, None) => {
                first_of.insert(rel_json.clone(), f.rel.clone());
                None
            }
        };
        if !shard.contains(&f.rel) {
            continue;
        }
        cells.push(Cell {
            output: out.join(&rel_json),
            record: out.join(RECORD_DIR).join(&rel_json),
            rel: f.rel,
            input: f.path,
            fault,
        });
    }
    Ok(cells)
}
