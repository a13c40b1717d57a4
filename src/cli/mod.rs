//! Command-line interface: argument parsing (clap) and one module per subcommand.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod inspect;

/// pollard: open a reconstructed neuron (SWC), check it, compute its passive electrical
/// structure, and reduce it to a strict binary compartment tree.
///
/// With no subcommand, opens the desktop app on the built-in demo cell.
#[derive(Parser, Debug)]
#[command(name = "pollard", version, about, long_about)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Option<Command>,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Check a reconstruction and print its shape: points, branches, tips, lengths, areas.
    Inspect(inspect::Args),
}

pub fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Some(Command::Inspect(a)) => inspect::run(a),
        None => open_app(),
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("pollard: {e:#}");
            ExitCode::from(1)
        }
    }
}

#[cfg(feature = "gui")]
fn open_app() -> anyhow::Result<ExitCode> {
    pollard::app::run(pollard::app::Start::Demo)?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(not(feature = "gui"))]
fn open_app() -> anyhow::Result<ExitCode> {
    anyhow::bail!("this build has no desktop app (built without the `gui` feature); try `pollard --help`")
}
