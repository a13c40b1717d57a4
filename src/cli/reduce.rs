//! `pollard reduce`: collapse a cell into a strict binary compartment tree under a budget, write
//! it as JSON (and optionally SWC), and print what was lost.

use anyhow::Context;
use pollard::Morphology;
use pollard::cable::prepare;
use pollard::export::{
    TreeExtras, TreeSource, reduced_tree_json_with, reduced_tree_swc, write_atomic,
};
use pollard::fidelity::{Fidelity, FidelityReport, percent};
use pollard::reduce::{CapacitanceRule, ReduceOptions, Reducer, Report, Sites, parse_sites_csv};
use pollard::synapses::{SynapseJson, SynapseMap, synapse_csvs};
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The SWC file to read.
    pub cell: PathBuf,
    #[command(flatten)]
    pub membrane: super::common::MembraneArgs,
    #[command(flatten)]
    pub geometry: super::common::GeometryArgs,
    #[command(flatten)]
    pub fidelity: super::common::FidelityArgs,
    /// Skip the EPSP fidelity check (its simulation of the full cell is the slow part of a
    /// reduction); the tree file then has `"fidelity": null`.
    #[arg(long = "no-fidelity")]
    pub no_fidelity: bool,
    /// Number of compartments of the reduced tree, soma included. A strict binary tree has an
    /// odd number: an even number is rounded down; above the maximum gives the maximum.
    #[arg(long, short = 'n', value_name = "N")]
    pub compartments: usize,
    /// Site list: one SWC id, or one x,y,z position (µm, snapped to the nearest point), per
    /// line. Default: every dendritic point, weighted by membrane area.
    #[arg(long, value_name = "FILE", conflicts_with = "synapses")]
    pub sites: Option<PathBuf>,
    /// Synapse table (CSV with a header): `input`, then `swc_id` or `x,y,z` (cell units;
    /// --scale applies), and an optional `weight`. Its synapses become the sites (weight each),
    /// and the JSON gains the input × compartment matrix (member `synapses`).
    #[arg(long, value_name = "TABLE.csv")]
    pub synapses: Option<PathBuf>,
    #[command(flatten)]
    pub snap: super::synapses::SnapArgs,
    /// Also write the synapse map as CSV: PREFIX.inputs.csv, PREFIX.matrix.csv and
    /// PREFIX.synapses.csv (needs --synapses).
    #[arg(long = "synapse-csv", value_name = "PREFIX", requires = "synapses")]
    pub synapse_csv: Option<PathBuf>,
    /// SWC types to keep, comma-separated, as codes or names (e.g. 1,3,4 or
    /// soma,basal,apical leaves out the axon); the soma is always kept. Points of other types,
    /// and everything beyond them, are left out entirely.
    #[arg(long, value_delimiter = ',', value_name = "LIST", value_parser = super::common::parse_type)]
    pub types: Option<Vec<i32>>,
    /// Frequency (Hz) of the report's one impedance line: the soma's input impedance, full cell
    /// vs reduced tree. It does not change the tree: its conductances are built at DC and its
    /// capacitances fitted (see --capacitance).
    #[arg(
        long = "impedance-freq",
        allow_negative_numbers = true,
        default_value_t = 100.0,
        value_name = "HZ"
    )]
    pub impedance_freq: f64,
    /// Junction link length as a fraction of the branch point's radius (multifurcations and a
    /// single-stem soma are split with links this short).
    #[arg(long = "junction-fraction", default_value_t = 1e-4, value_name = "F")]
    pub junction_fraction: f64,
    /// How compartments get their capacitance: `timed` (default) fits them to the cell's
    /// transfer impedances to the soma, then polishes them on the sites' EPSP peaks and times to
    /// peak in the time domain, serves each site by its compartment or a neighbour, whichever
    /// answers most like the cell, and may place a site on the link between two adjacent
    /// compartments, splitting its input (see --one-compartment-per-site; slowest time constant within about 10 % of Rm·Cm; needs the
    /// fidelity run, so with --no-fidelity the default falls back to `fitted` and says so);
    /// `fitted` stops after the fit (slowest time constant within 2 % of Rm·Cm); `uniform` sets
    /// C = Rm·Cm × leak, which keeps the slowest time constant exactly Rm·Cm. Conductances are
    /// the same.
    #[arg(long, value_enum, value_name = "RULE")]
    pub capacitance: Option<Capacitance>,
    /// Give each site's input to one compartment: no split inputs (the `timed` rule's last
    /// step, which may place a site on the link between two adjacent compartments), for codes that
    /// take one compartment per synapse.
    #[arg(long)]
    pub one_compartment_per_site: bool,
    /// Where to write the reduced tree (JSON, see assets/reduced-tree.schema.json).
    #[arg(long, short = 'o', value_name = "TREE.json")]
    pub out: PathBuf,
    /// Also write the reduced tree as SWC (equivalent cylinders).
    #[arg(long, value_name = "OUT.swc")]
    pub swc: Option<PathBuf>,
    /// Also write the reduced tree as a NeuroML v2 cell (one cylinder segment per compartment;
    /// README, "NeuroML", gives the convention that reproduces every conductance exactly).
    #[arg(long, value_name = "OUT.cell.nml")]
    pub neuroml: Option<PathBuf>,
    /// Resting potential of the NeuroML cell: the leak's reversal and the initial potential.
    #[arg(
        long = "neuroml-rest",
        allow_negative_numbers = true,
        default_value_t = pollard::neuroml::DEFAULT_REST_MV,
        value_name = "MV"
    )]
    pub neuroml_rest: f64,
    /// Print the report as JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let params = a.membrane.params();
    params.validate(a.impedance_freq)?;
    let name = a.cell.display().to_string();
    let m = Morphology::read(&a.cell)?;
    let flat = prepare(&m, &a.geometry.prep()).with_context(|| name.clone())?;
    let snapped = match &a.synapses {
        None => None,
        Some(p) => {
            let o = a.snap.options(a.geometry.scale, a.types.clone());
            Some(super::synapses::load(p, &m, &flat, &o)?)
        }
    };
    let opts = ReduceOptions {
        types: a.types.clone(),
        sites: sites_of(&a, snapped.as_ref(), &m, &flat)?,
        freq_hz: a.impedance_freq,
        junction_length_fraction: a.junction_fraction,
        capacitance: Capacitance::rule(a.capacitance, !a.no_fidelity)?,
        split_inputs: !a.one_compartment_per_site,
    };
    let reducer = Reducer::new(&flat, &params, &opts).with_context(|| name.clone())?;
    let mut tree = reducer.tree(a.compartments);
    let mut timed = None;
    let fidelity = if a.no_fidelity {
        None
    } else {
        let f = Fidelity::new(&reducer, &a.fidelity.options()).with_context(|| name.clone())?;
        timed = f.apply_capacitance_rule(&mut tree)?;
        Some(f.report(&tree, Some(&m))?)
    };
    let report = reducer.report(&tree)?;
    let ids: Vec<i64> = m.points.iter().map(|p| p.id).collect();
    let pos = pollard::export::point_positions_um(&m, a.geometry.scale);
    let src = TreeSource {
        source: &name,
        point_ids: &ids,
        point_pos: &pos,
    };
    let mut inputs = vec![a.cell.as_path()];
    inputs.extend(a.sites.iter().chain(&a.synapses).map(|p| p.as_path()));
    let map = match &snapped {
        Some(s) => Some(SynapseMap::new(s, &tree)?.with_curve(s, &reducer)?),
        None => None,
    };
    let extras = TreeExtras::<()> {
        synapses: match (&snapped, &map) {
            (Some(s), Some(mp)) => Some(SynapseJson::new(s, mp, tree.len())),
            _ => None,
        },
        fidelity: fidelity.as_ref(),
        batch: None,
    };
    let json = reduced_tree_json_with(&src, &reducer, &tree, &report, extras, true)?;
    let csvs = match (&a.synapse_csv, &snapped, &map) {
        (Some(prefix), Some(s), Some(mp)) => {
            let texts = synapse_csvs(s, mp, &ids);
            let names = ["inputs", "matrix", "synapses"];
            let mut out = Vec::new();
            for (n, t) in names.iter().zip(texts) {
                let mut p = prefix.clone().into_os_string();
                p.push(format!(".{n}.csv"));
                out.push((PathBuf::from(p), t));
            }
            out
        }
        _ => Vec::new(),
    };
    write_atomic(&a.out, json.as_bytes(), &inputs)?;
    for (p, t) in &csvs {
        write_atomic(p, t.as_bytes(), &inputs)?;
    }
    write_other_formats(&a, &tree, &name, &inputs)?;
    let mut out = std::io::stdout().lock();
    let fallback = a.capacitance.is_none() && a.no_fidelity;
    if a.json {
        let doc = ReportOut {
            report: &report,
            capacitance: reducer.options().capacitance,
            capacitance_note: fallback.then_some(FALLBACK_NOTE),
            timed: timed.as_ref(),
            fidelity: fidelity.as_ref(),
        };
        serde_json::to_writer_pretty(&mut out, &doc).map_err(std::io::Error::from)?;
        writeln!(out)?;
    } else {
        write_report(&mut out, &name, &report, reducer.max_compartments())?;
        if fallback {
            writeln!(out, "  note: {FALLBACK_NOTE}")?;
        }
        if let Some(t) = &timed {
            writeln!(
                out,
                "  timed: capacitances polished in {} steps; {} of {} sites served by a neighbour of the compartment their point's link gave them; {} on a link between two compartments (split inputs)",
                t.steps,
                t.sites_moved,
                tree.site_compartment.len(),
                t.sites_split
            )?;
        }
        if let (Some(s), Some(mp)) = (&snapped, &map) {
            super::synapses::write_summary(&mut out, s, mp)?;
        }
        if let Some(f) = &fidelity {
            write_fidelity(&mut out, f)?;
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// The sites of the reduction: the synapse table's, the site list's, or the default.
fn sites_of(
    a: &Args,
    snapped: Option<&pollard::synapses::Snapped>,
    m: &Morphology,
    flat: &pollard::Flat,
) -> anyhow::Result<Sites> {
    Ok(match (&a.sites, snapped) {
        (_, Some(s)) => s.sites(),
        (None, None) => Sites::Default,
        (Some(p), None) => {
            let text = std::fs::read_to_string(p)
                .with_context(|| format!("{}: cannot read the site list", p.display()))?;
            Sites::List(parse_sites_csv(&text, m, flat).with_context(|| p.display().to_string())?)
        }
    })
}

/// The optional SWC and NeuroML files of the tree.
fn write_other_formats(
    a: &Args,
    tree: &pollard::reduce::ReducedTree,
    name: &str,
    inputs: &[&std::path::Path],
) -> anyhow::Result<()> {
    if let Some(path) = &a.swc {
        let header = vec![
            format!("reduced tree of {name}: {} compartments", tree.len()),
            format!("made by pollard {}", env!("CARGO_PKG_VERSION")),
        ];
        write_atomic(path, reduced_tree_swc(tree, &header).as_bytes(), inputs)?;
    }
    if let Some(path) = &a.neuroml {
        let id = pollard::neuroml::cell_id_from(name);
        let nml = pollard::neuroml::reduced_tree_neuroml(tree, &id, name, a.neuroml_rest)
            .with_context(|| path.display().to_string())?;
        write_atomic(path, nml.as_bytes(), inputs)?;
    }
    Ok(())
}

fn write_report(w: &mut impl Write, name: &str, r: &Report, max: usize) -> std::io::Result<()> {
    writeln!(
        w,
        "{name}: reduced to {} compartments (of at most {max})",
        r.compartments
    )?;
    if r.rounded_down {
        writeln!(
            w,
            "  note: {} requested; a strict binary tree has an odd number of compartments, so it was rounded down",
            r.compartments_requested
        )?;
    }
    if r.clamped {
        writeln!(
            w,
            "  note: {} requested; the budget runs from 1 to {max}",
            r.compartments_requested
        )?;
    }
    if r.points_left_out > 0 {
        writeln!(
            w,
            "  points left out by the type filter: {}",
            r.points_left_out
        )?;
    }
    writeln!(
        w,
        "  soma input resistance, DC:      full {:.6} MΩ, reduced {:.6} MΩ (relative error {:.2e})",
        r.soma_input_resistance_dc_full_mohm,
        r.soma_input_resistance_dc_reduced_mohm,
        r.soma_input_resistance_dc_relative_error
    )?;
    writeln!(
        w,
        "  soma input impedance, {} Hz:   full {:.6} MΩ, reduced {:.6} MΩ (relative error {:.2e})",
        r.freq_hz,
        r.soma_input_impedance_full_mohm,
        r.soma_input_impedance_reduced_mohm,
        r.soma_input_impedance_relative_error
    )?;
    writeln!(
        w,
        "  junctions: {} (their effect on the DC input resistance: {:.2e} relative)",
        r.junctions, r.junction_effect_relative
    )?;
    if r.junction_effect_relative.abs() > 1e-3 {
        writeln!(
            w,
            "  warning: the junction links change the input resistance by more than 0.1 %; pass a smaller --junction-fraction"
        )?;
    }
    writeln!(
        w,
        "  slowest time constant: {:.2} ms (the cell's: Rm·Cm = {} ms)",
        r.slowest_time_constant_ms, r.tau_ms
    )?;
    let s = &r.ln_attenuation_error;
    writeln!(
        w,
        "  {} sites, error in DC log attenuation to the soma (Np): median {:.4}, 95th percentile {:.4}, max {:.4}, weighted RMS {:.4}",
        r.sites, s.median, s.p95, s.max, r.ln_attenuation_error_weighted_rms
    )?;
    // a short view of the curve: budgets 1, 3, 7, 15, … and the maximum
    write!(w, "  error vs budget (weighted RMS, Np):")?;
    let mut next = 1usize;
    for c in &r.error_curve {
        if c.compartments == next || c.compartments == max {
            write!(w, " {}:{:.4}", c.compartments, c.rms_ln_attenuation_error)?;
            if c.compartments == next {
                next = 2 * next + 1;
            }
        }
    }
    writeln!(w)
}

/// The `--json` report: the reducer's report with the fidelity summary as one more member.
#[derive(serde::Serialize)]
struct ReportOut<'a> {
    #[serde(flatten)]
    report: &'a Report,
    /// The capacitance rule the tree was actually given.
    capacitance: CapacitanceRule,
    /// Why it is not the one asked for (the default `timed` without the fidelity run).
    #[serde(skip_serializing_if = "Option::is_none")]
    capacitance_note: Option<&'static str>,
    /// What the timed rule did (polish steps, sites served by a neighbour); absent otherwise.
    #[serde(skip_serializing_if = "Option::is_none")]
    timed: Option<&'a pollard::fidelity::PolishSummary>,
    fidelity: Option<&'a FidelityReport>,
}

/// What the report says when `--no-fidelity` turns the default `timed` into `fitted`.
pub const FALLBACK_NOTE: &str = "capacitances fitted, not timed: the timing polish needs the fidelity run that --no-fidelity skips";

/// The fidelity lines of the text report.
pub fn write_fidelity(w: &mut impl Write, f: &FidelityReport) -> std::io::Result<()> {
    let (e, t) = (&f.epsp_peak_error_np, &f.time_to_peak_error);
    writeln!(
        w,
        "  soma EPSP for an alpha current (τ {} ms) at each site, reduced vs full: peak error median {:.1} % ({:.3} Np), 95th percentile {:.1} % ({:.3} Np), max {:.1} % ({:.3} Np); time-to-peak error median {:.1} %, 95th percentile {:.1} %",
        f.epsp_tau_ms,
        percent(e.median),
        e.median,
        percent(e.p95),
        e.p95,
        percent(e.max),
        e.max,
        t.median * 100.0,
        t.p95 * 100.0
    )?;
    writeln!(
        w,
        "  the soma's own EPSP (current at the soma): peak error {:.1} % ({:.3} Np), time-to-peak error {:.1} %",
        f.soma_epsp_peak_error_percent,
        f.soma_epsp_peak_error_np,
        f.soma_time_to_peak_error * 100.0
    )?;
    let d = &f.ln_attenuation_from_soma_error_np;
    writeln!(
        w,
        "  error in DC log attenuation from the soma (Np): median {:.4}, 95th percentile {:.4}, max {:.4}",
        d.median, d.p95, d.max
    )?;
    let worst: Vec<String> = f
        .worst_sites
        .iter()
        .map(|s| match s.swc_id {
            Some(id) => format!("id {id} ({:.3} Np)", s.epsp_peak_error_np),
            None => format!("line {} ({:.3} Np)", s.swc_line, s.epsp_peak_error_np),
        })
        .collect();
    writeln!(w, "  worst sites (EPSP peak error): {}", worst.join(", "))?;
    writeln!(
        w,
        "  (full cell: {} nodes, pieces ≤ {} λ; {}, dt {} ms, {:.1} ms simulated)",
        f.fine_nodes,
        f.piece_lambda_fraction,
        f.method.name(),
        f.dt_ms,
        f.duration_ms
    )?;
    if f.sites_not_peaked > 0 {
        writeln!(
            w,
            "  warning: {} sites' EPSPs were still rising when the run stopped; pass a longer --duration",
            f.sites_not_peaked
        )?;
    }
    Ok(())
}

/// `--capacitance` values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Capacitance {
    Fitted,
    Uniform,
    Timed,
}

impl Capacitance {
    /// The rule for `--capacitance` (None: not given) when the fidelity run is (not) made: the
    /// default `timed` needs that run and falls back to `fitted` without it; an explicit
    /// `timed` without it is refused.
    pub fn rule(given: Option<Capacitance>, fidelity: bool) -> anyhow::Result<CapacitanceRule> {
        match (given, fidelity) {
            (Some(Capacitance::Timed), false) => anyhow::bail!(
                "--capacitance timed polishes the tree on the fidelity run: drop --no-fidelity"
            ),
            (Some(c), _) => Ok(c.into()),
            (None, true) => Ok(CapacitanceRule::default()),
            (None, false) => Ok(CapacitanceRule::Fitted),
        }
    }
}

impl From<Capacitance> for pollard::reduce::CapacitanceRule {
    fn from(c: Capacitance) -> Self {
        match c {
            Capacitance::Fitted => Self::Fitted,
            Capacitance::Uniform => Self::Uniform,
            Capacitance::Timed => Self::Timed,
        }
    }
}
