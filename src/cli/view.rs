//! `pollard view`, `pollard lab` and `pollard` with no subcommand: open the desktop app.

use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The SWC file to open.
    pub cell: PathBuf,
}

#[cfg(feature = "gui")]
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    pollard::app::run(pollard::app::Start::File(a.cell))?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(feature = "gui")]
pub fn run_demo() -> anyhow::Result<ExitCode> {
    pollard::app::run(pollard::app::Start::Demo)?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(feature = "gui")]
pub fn run_lab() -> anyhow::Result<ExitCode> {
    pollard::app::run(pollard::app::Start::Lab)?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(not(feature = "gui"))]
fn no_gui() -> anyhow::Result<ExitCode> {
    anyhow::bail!(
        "this build has no desktop app (it was built without the `gui` feature); see `pollard --help` for the command-line tools"
    )
}

#[cfg(not(feature = "gui"))]
pub fn run(_a: Args) -> anyhow::Result<ExitCode> {
    no_gui()
}

#[cfg(not(feature = "gui"))]
pub fn run_demo() -> anyhow::Result<ExitCode> {
    no_gui()
}

#[cfg(not(feature = "gui"))]
pub fn run_lab() -> anyhow::Result<ExitCode> {
    no_gui()
}
