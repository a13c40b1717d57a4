//! The desktop app (behind the default `gui` feature).

use std::path::PathBuf;

/// What the window opens on.
pub enum Start {
    /// The embedded demo cell.
    Demo,
    /// A file.
    File(PathBuf),
    /// The branching lab.
    Lab,
}

/// Opens the window.
pub fn run(_start: Start) -> anyhow::Result<()> {
    anyhow::bail!("the desktop app is not built yet")
}
