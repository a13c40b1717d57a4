//! `pollard batch`: reduce every SWC file below a folder, in parallel, with one summary table.
//! The work itself is in [`pollard::batch`]; this file parses the flags and shows progress.

use anyhow::Context as _;
use pollard::batch::{self, RunOptions, Settings, Shard, Status};

use pollard::reduce::ReduceOptions;
use std::io::IsTerminal as _;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Mutex;
use std::time::{Duration, Instant};

/// Exit code when the batch ran but at least one cell failed (1: the batch could not run;
/// 2: the command line is wrong, as for every command).
const SOME_FAILED: u8 = 3;

#[derive(clap::Args, Debug)]
#[command(after_help = "\
Outputs: OUT_DIR/<same folders>/<name>.json per cell, OUT_DIR/summary.csv and summary.jsonl
(one row per input file; with --shard I/K: summary.shard-I-of-K.csv/.jsonl). Why a cell failed:
the summary's `error` column, and its record OUT_DIR/.pollard-batch/<same folders>/<name>.json.
A second run skips the cells already done with the same flags; --force redoes them.
Exit code: 0 all cells reduced; 3 some cells failed (see the summary); 1 the batch could not run;
2 the command line is wrong.")]
pub struct Args {
    /// The folder to search for .swc files (all subfolders too).
    #[arg(required_unless_present = "merge_summaries")]
    pub input: Option<PathBuf>,
    #[command(flatten)]
    pub membrane: super::common::MembraneArgs,
    #[command(flatten)]
    pub geometry: super::common::GeometryArgs,
    #[command(flatten)]
    pub fidelity: super::common::FidelityArgs,
    /// Skip the EPSP fidelity check (faster; its summary columns are then empty).
    #[arg(long = "no-fidelity")]
    pub no_fidelity: bool,
    /// Write into this folder (created if missing); its subfolders mirror the input's.
    #[arg(long = "out-dir", value_name = "OUT_DIR")]
    pub out_dir: PathBuf,
    /// Compartments of each reduced tree, soma included (an even number is rounded down to
    /// the odd number below; above a cell's maximum gives its maximum).
    #[arg(
        long,
        short = 'n',
        value_name = "N",
        required_unless_present = "merge_summaries"
    )]
    pub compartments: Option<usize>,
    /// Frequency (Hz) of the report's one impedance line: the soma's input impedance, full cell
    /// vs reduced tree. It does not change the tree: its conductances are built at DC and its
    /// capacitances fitted (see --capacitance).
    #[arg(long = "impedance-freq", value_name = "HZ", default_value_t = ReduceOptions::default().freq_hz)]
    pub impedance_freq: f64,
    /// How compartments get their capacitance, as for `pollard reduce`: `timed` (default;
    /// fitted, then polished on each cell's fidelity run; with --no-fidelity the default falls
    /// back to `fitted` and says so, an explicit `timed` is refused), `fitted` or `uniform`
    /// (C = Rm·Cm × leak). Part of the settings a rerun compares.
    #[arg(long, value_enum, value_name = "RULE")]
    pub capacitance: Option<super::reduce::Capacitance>,
    /// Give each site's input to one compartment: no split inputs (the `timed` rule's last
    /// step), for codes that take one compartment per synapse.
    #[arg(long)]
    pub one_compartment_per_site: bool,
    /// Junction link length as a fraction of the branch point's radius.
    #[arg(long = "junction-fraction", value_name = "F",
          default_value_t = ReduceOptions::default().junction_length_fraction)]
    pub junction_fraction: f64,
    /// Keep only these SWC types, comma-separated, as codes or names (e.g. 1,3,4 or
    /// soma,basal,apical drops the axon); the soma is always kept.
    #[arg(long, value_name = "LIST", value_delimiter = ',', value_parser = super::common::parse_type)]
    pub types: Option<Vec<i32>>,
    /// Use each cell's synapse table as its sites: NAME.synapses.csv beside NAME.swc (the
    /// format of `pollard reduce --synapses`). Cells without one keep the default sites; the
    /// summary gains their synapse and input counts, each tree JSON the member `synapses`.
    #[arg(long = "synapse-tables")]
    pub synapse_tables: bool,
    #[command(flatten)]
    pub snap: super::synapses::SnapArgs,
    /// Worker threads that compute (default: one per core). Writes are finished by a few
    /// extra threads per worker that mostly wait for the disk.
    #[arg(long, short = 'j', value_name = "J")]
    pub jobs: Option<usize>,
    /// Do only share I of K of the files (chosen by a stable hash of each path), e.g. 3/8.
    #[arg(long, value_name = "I/K")]
    pub shard: Option<Shard>,
    /// Redo every cell, even those whose outputs are complete.
    #[arg(long)]
    pub force: bool,
    /// Redo the cells that failed last time (otherwise they are skipped until the file changes).
    #[arg(long)]
    pub retry_failed: bool,
    /// Do no cells: join the shard summaries in OUT_DIR into summary.csv and summary.jsonl.
    #[arg(long)]
    pub merge_summaries: bool,
}

/// Progress on a terminal (a bar with an ETA) or, in a log, a plain line every 10 % or minute.
struct Progress {
    bar: indicatif::ProgressBar,
    plain: Option<Mutex<PlainState>>,
    total: usize,
}

struct PlainState {
    done: usize,
    failed: usize,
    next_tenth: usize,
    last: Instant,
    start: Instant,
}

impl Progress {
    fn new(total: usize) -> Progress {
        let tty = std::io::stderr().is_terminal();
        let bar = if tty {
            let b = indicatif::ProgressBar::new(total as u64);
            let style = indicatif::ProgressStyle::with_template(
                "{elapsed_precise} [{bar:40}] {pos}/{len} cells, {per_sec}, ETA {eta} {msg}",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
            .progress_chars("=> ");
            b.set_style(style);
            b.enable_steady_tick(Duration::from_millis(200));
            b
        } else {
            indicatif::ProgressBar::with_draw_target(
                Some(total as u64),
                indicatif::ProgressDrawTarget::hidden(),
            )
        };
        let plain = (!tty).then(|| {
            let now = Instant::now();
            Mutex::new(PlainState {
                done: 0,
                failed: 0,
                next_tenth: 1,
                last: now,
                start: now,
            })
        });
        Progress { bar, plain, total }
    }

    fn line(&self, text: String) {
        if self.plain.is_some() {
            eprintln!("{text}");
        } else {
            self.bar.println(text);
        }
    }

    fn on_row(&self, row: &batch::Row, reused: bool) {
        if row.status == Status::Failed && !reused {
            self.line(format!(
                "failed: {}",
                row.error.as_deref().unwrap_or(&row.file)
            ));
        }
        self.bar.inc(1);
        let Some(plain) = &self.plain else { return };
        let Ok(mut s) = plain.lock() else { return };
        s.done += 1;
        if row.status == Status::Failed {
            s.failed += 1;
        }
        let tenth = s.done * 10 / self.total.max(1);
        if tenth >= s.next_tenth || s.last.elapsed() >= Duration::from_secs(60) {
            s.next_tenth = tenth + 1;
            s.last = Instant::now();
            let t = s.start.elapsed().as_secs_f64();
            let rate = s.done as f64 / t.max(1e-9);
            let eta = (self.total - s.done) as f64 / rate.max(1e-9);
            eprintln!(
                "{}/{} cells ({:.0} %), {} failed, {:.1} cells/s, ETA {:.0} s",
                s.done,
                self.total,
                100.0 * s.done as f64 / self.total.max(1) as f64,
                s.failed,
                rate,
                eta
            );
        }
    }
}

fn exit_for(rows: &[batch::Row]) -> ExitCode {
    if rows.iter().any(|r| r.status == Status::Failed) {
        ExitCode::from(SOME_FAILED)
    } else {
        ExitCode::SUCCESS
    }
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    if a.merge_summaries {
        let rows = batch::merge_summaries(&a.out_dir)?;
        let failed = rows.iter().filter(|r| r.status == Status::Failed).count();
        eprintln!(
            "joined {} rows ({failed} failed) into {}",
            rows.len(),
            a.out_dir.join("summary.csv").display()
        );
        return Ok(exit_for(&rows));
    }
    let (Some(input), Some(compartments)) = (a.input.as_ref(), a.compartments) else {
        anyhow::bail!("give the input folder and --compartments N");
    };
    let types = a.types.clone().map(|mut t| {
        t.sort_unstable();
        t.dedup();
        t
    });
    let mut settings = Settings {
        compartments,
        params: a.membrane.params(),
        default_diameter_um: a.geometry.default_diameter,
        scale: a.geometry.scale,
        types,
        freq_hz: a.impedance_freq,
        junction_length_fraction: a.junction_fraction,
        synapses: a.synapse_tables.then_some(pollard::synapses::TableRule {
            snap_limit_um: a.snap.snap_limit,
            skip_far: a.snap.skip_far,
        }),
        fidelity: (!a.no_fidelity).then(|| a.fidelity.options()),
        // an explicit `timed` without the fidelity run is refused by `validate`
        capacitance: match a.capacitance {
            Some(c) => c.into(),
            None => super::reduce::Capacitance::rule(None, !a.no_fidelity)?,
        },
        split_inputs: false,
    };
    // splits exist only with `timed`: false otherwise, so fitted records keep their key
    settings.split_inputs = settings.capacitance == pollard::reduce::CapacitanceRule::Timed
        && !a.one_compartment_per_site;
    if a.capacitance.is_none() && a.no_fidelity {
        eprintln!("note: {}", super::reduce::FALLBACK_NOTE);
    }
    // a flag error would fail every cell alike: say it once, before any work
    anyhow::ensure!(
        a.snap.snap_limit.is_finite() && a.snap.snap_limit >= 0.0,
        "--snap-limit {} is not a finite number ≥ 0",
        a.snap.snap_limit
    );
    settings.validate()?;
    let shard = a.shard.unwrap_or(Shard::ALL);
    std::fs::create_dir_all(&a.out_dir)
        .with_context(|| format!("{}: cannot create the output folder", a.out_dir.display()))?;
    let cells = batch::plan(input, &a.out_dir, shard)?;
    let jobs = a
        .jobs
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
        .max(1);
    eprintln!(
        "{} cell(s) in {}{}, {jobs} worker(s)",
        cells.len(),
        input.display(),
        if shard.count > 1 {
            format!(" (shard {shard})")
        } else {
            String::new()
        }
    );
    let progress = Progress::new(cells.len());
    let start = Instant::now();
    let opts = RunOptions {
        jobs,
        force: a.force,
        retry_failed: a.retry_failed,
    };
    let (rows, reused) = batch::run(&cells, &settings, &opts, &|r, re| progress.on_row(r, re))?;
    progress.bar.finish_and_clear();
    let (csv, _) = batch::write_summary(&a.out_dir, &shard.summary_stem(), &rows)?;
    let failed = rows.iter().filter(|r| r.status == Status::Failed).count();
    let secs = start.elapsed().as_secs_f64();
    let done = rows.len() - reused;
    eprintln!(
        "{} cell(s): {done} done in this run, {reused} reused from earlier runs, {failed} failed; {:.1} s ({:.1} cells/s); summary {}",
        rows.len(),
        secs,
        done as f64 / secs.max(1e-9),
        csv.display()
    );
    if failed > 0 {
        eprintln!(
            "why cells failed is in the `error` column of {} and in each failed cell's record (the error and the settings) under {}",
            csv.display(),
            a.out_dir.join(batch::RECORD_DIR).display()
        );
    }
    Ok(exit_for(&rows))
}
