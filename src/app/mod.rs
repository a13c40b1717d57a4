//! The desktop app (behind the default `gui` feature).

/// What the window opens on.
pub enum Start {
    /// The embedded demo cell.
    Demo,
}

/// Opens the window.
pub fn run(_start: Start) -> anyhow::Result<()> {
    anyhow::bail!("the desktop app is not built yet")
}
