//! `pollard trace`: soma and injection-point voltage over time for one injection point, full cell
//! and reduced tree, for a current or a conductance synapse there (CSV and JSON).

use pollard::export::{DocHeader, write_atomic};
use pollard::fidelity::{
    Fidelity, FidelityOptions, Input, SiteRef, TraceOptions, Traces, percent, resolve_site,
    response_traces,
};
use pollard::reduce::CapacitanceRule;
use pollard::transient::{PieceRule, Synapse, Waveform};
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
#[command(group(clap::ArgGroup::new("where").required(true).args(["injection_point", "at"])))]
#[command(after_help = "\
Columns: time_ms, soma_full_mv, injection_point_full_mv, soma_reduced_mv,
injection_point_reduced_mv (voltages relative to rest). Input: an alpha current (t/tau)e^(1-t/tau) by default, or with --synapse a conductance
g(t)(E - V) whose g is a difference of exponentials peaking at --g-peak.")]
pub struct Args {
    #[command(flatten)]
    pub from: super::common::ReducedCellArgs,
    #[command(flatten)]
    pub budget: super::common::BudgetArg,
    /// The injection point: an SWC id.
    #[arg(
        long = "injection-point",
        value_name = "ID",
        allow_negative_numbers = true
    )]
    pub injection_point: Option<i64>,
    /// The injection point: a position x,y,z (µm), snapped to the nearest point.
    #[arg(
        long,
        value_name = "X,Y,Z",
        value_delimiter = ',',
        allow_negative_numbers = true
    )]
    pub at: Option<Vec<f64>>,
    #[command(flatten)]
    pub input: InputArgs,
    /// Simulated time (ms).
    #[arg(long, value_name = "MS", default_value_t = TraceOptions::default().duration_ms,
          allow_negative_numbers = true)]
    pub duration: f64,
    /// Time step (ms).
    #[arg(long, value_name = "MS", default_value_t = TraceOptions::default().dt_ms,
          allow_negative_numbers = true)]
    pub dt: f64,
    /// Largest piece of the full cell's network, as a fraction of its segment's length constant.
    #[arg(long = "piece-fraction", value_name = "F", allow_negative_numbers = true,
          default_value_t = PieceRule::default().lambda_fraction)]
    pub piece_fraction: f64,
    /// Write the traces as CSV to this file.
    #[arg(long, value_name = "TRACES.csv")]
    pub csv: Option<PathBuf>,
    /// Write the traces as JSON to this file.
    #[arg(long, short = 'o', value_name = "TRACES.json")]
    pub out: Option<PathBuf>,
}

/// What is injected at the site: an alpha current, or with `--synapse` a conductance.
#[derive(clap::Args, Debug)]
pub struct InputArgs {
    /// Peak of the alpha current (pA).
    #[arg(
        long,
        value_name = "PA",
        default_value_t = 10.0,
        allow_negative_numbers = true
    )]
    pub current: f64,
    /// Time constant of the alpha current (ms).
    #[arg(
        long,
        value_name = "MS",
        default_value_t = 0.5,
        allow_negative_numbers = true
    )]
    pub tau: f64,
    /// Inject a conductance synapse instead of a current.
    #[arg(long)]
    pub synapse: bool,
    /// Synapse reversal potential relative to rest (mV).
    #[arg(
        long,
        value_name = "MV",
        default_value_t = 70.0,
        allow_negative_numbers = true
    )]
    pub e_rev: f64,
    /// Synapse peak conductance (nS).
    #[arg(
        long,
        value_name = "NS",
        default_value_t = 1.0,
        allow_negative_numbers = true
    )]
    pub g_peak: f64,
    /// Synapse rise time constant (ms).
    #[arg(
        long,
        value_name = "MS",
        default_value_t = 0.2,
        allow_negative_numbers = true
    )]
    pub tau_rise: f64,
    /// Synapse decay time constant (ms).
    #[arg(
        long,
        value_name = "MS",
        default_value_t = 2.0,
        allow_negative_numbers = true
    )]
    pub tau_decay: f64,
}

impl InputArgs {
    fn input(&self) -> Input {
        if self.synapse {
            Input::Synapse {
                synapse: Synapse {
                    e_rev_mv: self.e_rev,
                    g_peak_ns: self.g_peak,
                    tau_rise_ms: self.tau_rise,
                    tau_decay_ms: self.tau_decay,
                },
            }
        } else {
            Input::Current {
                waveform: Waveform::Alpha {
                    tau_ms: self.tau,
                    peak_pa: self.current,
                },
            }
        }
    }
}

#[derive(serde::Serialize)]
struct Doc<'a> {
    #[serde(flatten)]
    head: DocHeader<'a>,
    /// 2: the unversioned first form's `site_*_mv` traces became `injection_point_*_mv`.
    schema_version: u32,
    input: Input,
    options: TraceOptions,
    /// The capacitance rule the tree was given.
    capacitance: CapacitanceRule,
    #[serde(flatten)]
    traces: &'a Traces,
}

fn peak(v: &[f64], t: &[f64]) -> (f64, f64) {
    let mut best = (0.0f64, 0.0);
    for (x, &tt) in v.iter().zip(t) {
        if x.abs() > best.0.abs() {
            best = (*x, tt);
        }
    }
    best
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    if a.csv.is_none() && a.out.is_none() {
        anyhow::bail!("give --out FILE.json and/or --csv FILE.csv for the traces");
    }
    let name = a.from.cell.display().to_string();
    let (m, reducer) = a.from.reducer()?;
    let site = match (&a.injection_point, &a.at) {
        (Some(id), _) => SiteRef::SwcId(*id),
        (None, Some(p)) if p.len() == 3 && p.iter().all(|x| x.is_finite()) => {
            SiteRef::Position([p[0], p[1], p[2]])
        }
        (None, Some(_)) => anyhow::bail!("--at takes three finite numbers x,y,z (µm)"),
        (None, None) => anyhow::bail!("give --injection-point ID or --at X,Y,Z"),
    };
    let point = resolve_site(&m, &reducer, site)?;
    let mut tree = reducer.tree(a.budget.compartments);
    // `timed` (the default): polished on the full cell's EPSP run, as `pollard reduce` does
    if reducer.options().capacitance == CapacitanceRule::Timed {
        Fidelity::new(&reducer, &FidelityOptions::default())?.apply_capacitance_rule(&mut tree)?;
    }
    let input = a.input.input();
    let opts = TraceOptions {
        duration_ms: a.duration,
        dt_ms: a.dt,
        pieces: PieceRule {
            lambda_fraction: a.piece_fraction,
        },
        ..TraceOptions::default()
    };
    let mut tr = response_traces(&reducer, &tree, point, &input, &opts)?;
    tr.swc_id = m.points.get(point as usize).map(|p| p.id);
    let inputs = a.from.inputs();
    if let Some(p) = &a.csv {
        write_atomic(p, tr.to_csv().as_bytes(), &inputs)?;
    }
    if let Some(p) = &a.out {
        let doc = Doc {
            head: DocHeader::new("pollard.traces", &name, tree.len(), *reducer.params()),
            schema_version: 2,
            input,
            options: opts,
            capacitance: reducer.options().capacitance,
            traces: &tr,
        };
        write_atomic(p, serde_json::to_string_pretty(&doc)?.as_bytes(), &inputs)?;
    }
    let (pf, tf) = peak(&tr.soma_full_mv, &tr.times_ms);
    let (pr, trd) = peak(&tr.soma_reduced_mv, &tr.times_ms);
    let err = tr.soma_peak_error_np();
    let mut out = std::io::stdout().lock();
    let written = writeln!(
        out,
        "{name}: injection point SWC id {} (compartment {} of {}{}); soma peak: full {pf:.4} mV at {tf:.2} ms, reduced {pr:.4} mV at {trd:.2} ms; peak error {}",
        tr.swc_id.unwrap_or(-1),
        tr.compartment,
        tree.len(),
        match tr.split {
            Some(x) => format!(
                ", on the link to compartment {1}: {0:.1} % of the input there",
                100.0 * x.weight,
                x.compartment
            ),
            None => String::new(),
        },
        if err.is_finite() {
            format!("{:.1} % ({err:.3} Np)", percent(err))
        } else {
            "– (no response)".to_string()
        }
    );
    written?; // a closed pipe is not an error: cli::main decides that
    Ok(ExitCode::SUCCESS)
}
