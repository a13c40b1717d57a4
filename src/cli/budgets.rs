//! `pollard budgets`: the fidelity report at several budgets of one cell, one line each, so the
//! smallest tree good enough for the work can be chosen before `pollard reduce` writes it.

use pollard::export::{DocHeader, write_atomic};
use pollard::fidelity::{BudgetFidelity, Fidelity, FidelityOptions, budgets_csv, default_budgets};
use pollard::reduce::CapacitanceRule;
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
#[command(after_help = "\
Per budget (one line each): the compartments of the tree built for it; the DC log-attenuation
error to the soma over the sites (median / 95th percentile, Np); the soma EPSP for an alpha
current at each site, reduced vs full: peak error (median / 95th percentile, Np and %) and
time-to-peak error (95th percentile); the soma's own EPSP peak error; the slowest time constant.
The full cell is simulated once; each budget's tree is finished by the capacitance rule
(`timed`: polished on that run) before it is judged.")]
pub struct Args {
    #[command(flatten)]
    pub from: super::common::ReducedCellArgs,
    #[command(flatten)]
    pub fidelity: super::common::FidelityArgs,
    /// Budgets to judge, comma-separated (each rounded down to odd; above the maximum gives the
    /// maximum) [default: 1, 3, 7, 15, … below the cell's maximum, and the maximum].
    #[arg(long, value_delimiter = ',', value_name = "LIST")]
    pub budgets: Option<Vec<usize>>,
    /// Also write the table as CSV to this file.
    #[arg(long, value_name = "BUDGETS.csv")]
    pub csv: Option<PathBuf>,
    /// Also write the table, with each budget's whole report, as JSON to this file.
    #[arg(long, short = 'o', value_name = "BUDGETS.json")]
    pub out: Option<PathBuf>,
}

#[derive(serde::Serialize)]
struct Doc<'a> {
    #[serde(flatten)]
    head: DocHeader<'a>,
    options: FidelityOptions,
    /// The capacitance rule every tree was given.
    capacitance: CapacitanceRule,
    max_compartments: usize,
    budgets: &'a [BudgetFidelity],
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let opts = a.fidelity.options();
    opts.validate()?;
    let name = a.from.cell.display().to_string();
    let (m, reducer) = a.from.reducer()?;
    let budgets = match &a.budgets {
        Some(b) if b.is_empty() => anyhow::bail!("--budgets: give at least one budget"),
        Some(b) => b.clone(),
        None => default_budgets(reducer.max_compartments()),
    };
    let fid = Fidelity::new(&reducer, &opts)?;
    let rows = fid.budget_sweep(&reducer, &budgets, Some(&m))?;
    let inputs = a.from.inputs();
    if let Some(p) = &a.csv {
        write_atomic(p, budgets_csv(&rows).as_bytes(), &inputs)?;
    }
    if let Some(p) = &a.out {
        let largest = rows.last().map_or(0, |r| r.compartments);
        let doc = Doc {
            head: DocHeader::new(
                "pollard.fidelity-budgets",
                &name,
                largest,
                *reducer.params(),
            ),
            options: opts,
            capacitance: reducer.options().capacitance,
            max_compartments: reducer.max_compartments(),
            budgets: &rows,
        };
        write_atomic(p, serde_json::to_string_pretty(&doc)?.as_bytes(), &inputs)?;
    }
    // a closed pipe is not an error: cli::main decides that
    write_table(&mut std::io::stdout().lock(), &name, &reducer, &rows)?;
    Ok(ExitCode::SUCCESS)
}

/// A percentage for the table's narrow column (errors of several nepers are thousands of %).
fn percent(x: f64) -> String {
    if x < 999.5 {
        format!("{x:.0}")
    } else {
        ">999".into()
    }
}

fn write_table(
    out: &mut impl Write,
    name: &str,
    reducer: &pollard::reduce::Reducer,
    rows: &[BudgetFidelity],
) -> std::io::Result<()> {
    let sites = rows.first().map_or(0, |r| r.report.sites);
    writeln!(
        out,
        "{name}: fidelity against the budget ({sites} sites, at most {} compartments, capacitance {})",
        reducer.max_compartments(),
        format!("{:?}", reducer.options().capacitance).to_lowercase()
    )?;
    writeln!(
        out,
        "  compartments | DC to soma (Np) median / p95 | EPSP peak error median / p95       | time to peak p95 | soma's own EPSP | slowest τ"
    )?;
    for r in rows {
        let f = &r.report;
        let (e, pe) = (&f.epsp_peak_error_np, &f.epsp_peak_error_percent);
        writeln!(
            out,
            "  {:>12} | {:>12.3} / {:<13.3} | {:>6.3} / {:<6.3} Np ({:>4} / {:>4} %) | {:>14.0} % | {:>13.1} % | {:>6.2} ms",
            r.compartments,
            f.ln_attenuation_to_soma_error_np.median,
            f.ln_attenuation_to_soma_error_np.p95,
            e.median,
            e.p95,
            percent(pe.median),
            percent(pe.p95),
            f.time_to_peak_error.p95 * 100.0,
            f.soma_epsp_peak_error_percent,
            r.slowest_time_constant_ms,
        )?;
    }
    Ok(())
}
