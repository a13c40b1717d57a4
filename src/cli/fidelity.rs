//! `pollard fidelity`: how well a reduced tree behaves like the cell at every synapse site —
//! the per-site table (CSV and JSON) and its summary on stdout.

use pollard::export::{DocHeader, write_atomic};
use pollard::fidelity::{Fidelity, FidelityOptions, FidelityReport, SiteFidelity, sites_csv};
use pollard::reduce::CapacitanceRule;
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
#[command(after_help = "\
Per site (one row each): its SWC id and line, its compartment; the soma EPSP peak (mV) and time
to peak (ms) for an alpha current at the site in the full cell and in the reduced tree, the peak
error |ln(reduced/full)| (Np) and the time-to-peak error |ttp_red - ttp_full|/ttp_full; the
DC log attenuation to the soma ln(Z_kk/Z_k0) and from the soma ln(Z_00/Z_0k), full and reduced.
One simulation of each network (current at the soma) gives every site, by reciprocity.")]
pub struct Args {
    #[command(flatten)]
    pub from: super::common::ReducedCellArgs,
    #[command(flatten)]
    pub budget: super::common::BudgetArg,
    #[command(flatten)]
    pub fidelity: super::common::FidelityArgs,
    /// Write the per-site table as CSV to this file.
    #[arg(long, value_name = "SITES.csv")]
    pub csv: Option<PathBuf>,
    /// Write the per-site table and the summary as JSON to this file.
    #[arg(long, short = 'o', value_name = "SITES.json")]
    pub out: Option<PathBuf>,
}

#[derive(serde::Serialize)]
struct Doc<'a> {
    #[serde(flatten)]
    head: DocHeader<'a>,
    options: FidelityOptions,
    /// The capacitance rule the tree was given.
    capacitance: CapacitanceRule,
    summary: &'a FidelityReport,
    sites: &'a [SiteFidelity],
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    if a.csv.is_none() && a.out.is_none() {
        anyhow::bail!("give --out FILE.json and/or --csv FILE.csv for the per-site table");
    }
    let opts = a.fidelity.options();
    opts.validate()?;
    let name = a.from.cell.display().to_string();
    let (m, reducer) = a.from.reducer()?;
    let mut tree = reducer.tree(a.budget.compartments);
    let fid = Fidelity::new(&reducer, &opts)?;
    // `timed` (the default): the tree is polished on this run before it is judged
    fid.apply_capacitance_rule(&mut tree)?;
    let (rows, _) = fid.sites(&tree, Some(&m))?;
    let summary = fid.report(&tree, Some(&m))?;
    let inputs = a.from.inputs();
    if let Some(p) = &a.csv {
        write_atomic(p, sites_csv(&rows).as_bytes(), &inputs)?;
    }
    if let Some(p) = &a.out {
        let doc = Doc {
            head: DocHeader::new(
                "pollard.fidelity-sites",
                &name,
                tree.len(),
                *reducer.params(),
            ),
            options: opts,
            capacitance: reducer.options().capacitance,
            summary: &summary,
            sites: &rows,
        };
        write_atomic(p, serde_json::to_string_pretty(&doc)?.as_bytes(), &inputs)?;
    }
    let mut out = std::io::stdout().lock();
    let written = writeln!(
        out,
        "{name}: {} compartments (of at most {}), {} sites",
        tree.len(),
        reducer.max_compartments(),
        rows.len()
    )
    .and_then(|_| super::reduce::write_fidelity(&mut out, &summary));
    written?; // a closed pipe is not an error: cli::main decides that
    Ok(ExitCode::SUCCESS)
}
