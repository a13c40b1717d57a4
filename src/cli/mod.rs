//! Command-line interface: argument parsing (clap) and one module per subcommand.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod batch;
mod budgets;
mod cable;
mod common;
mod fidelity;
mod inspect;
mod reduce;
mod synapses;
mod trace;
mod view;

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
    /// Passive electrical maps: input resistance, attenuation to and from the soma, at every point.
    Cable(cable::Args),
    /// Collapse the cell into a strict binary compartment tree under a compartment budget.
    Reduce(reduce::Args),
    /// How well a reduced tree behaves like the cell at every synapse site (EPSP peak and time
    /// to peak, DC attenuation to and from the soma): a per-site table, CSV and JSON.
    Fidelity(fidelity::Args),
    /// The fidelity report at several budgets of one cell, one line each (DC attenuation, EPSP
    /// peak and time to peak, the soma's own EPSP): which budget is good enough. Text, CSV, JSON.
    Budgets(budgets::Args),
    /// Voltage over time at the soma and at one injection point, full cell and reduced tree, for
    /// a current or a conductance synapse there: CSV and JSON.
    Trace(trace::Args),
    /// Reduce every SWC file below a folder, in parallel, with one summary table.
    Batch(batch::Args),
    /// Open a file in the desktop app.
    View(view::Args),
    /// Open the desktop app on the branching lab (parametric trees for teaching).
    Lab,
}

pub fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Some(Command::Inspect(a)) => inspect::run(a),
        Some(Command::Cable(a)) => cable::run(a),
        Some(Command::Reduce(a)) => reduce::run(a),
        Some(Command::Fidelity(a)) => fidelity::run(a),
        Some(Command::Budgets(a)) => budgets::run(a),
        Some(Command::Trace(a)) => trace::run(a),
        Some(Command::Batch(a)) => batch::run(a),
        Some(Command::View(a)) => view::run(a),
        Some(Command::Lab) => view::run_lab(),
        None => view::run_demo(),
    };
    match result {
        Ok(code) => code,
        // a reader that stops early (`| head`) is not an error: the one place this is decided
        Err(e) if is_broken_pipe(&e) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("pollard: {e:#}");
            ExitCode::from(1)
        }
    }
}

/// Is the error (or any error it wraps) a write to a pipe whose reader has gone?
fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
    })
}
