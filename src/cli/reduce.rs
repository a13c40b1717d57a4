//! `pollard reduce` (not yet written).

use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Input path.
    pub input: PathBuf,
}

pub fn run(_a: Args) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`pollard reduce` is not written yet")
}
