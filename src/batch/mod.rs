//! Batch reduction of a folder of reconstructions: discovery, sharding, the per-cell job, the
//! summary table and resumability.
//!
//! - **Discovery** ([`discover`]): every file whose name ends in `.swc` (any case) below the input
//!   folder, found by an explicit stack (no recursion), sorted by its path relative to the input
//!   folder, written with `/` between folders ([`Cell::rel`]). Symbolic links to folders are not
//!   followed (they could loop); links to files are. The output folder is skipped when it lies
//!   inside the input folder.
//! - **Shards** ([`Shard`]): cell `rel` belongs to shard `I/K` when
//!   `stable_hash(rel) mod K = I − 1`, so K independent tasks split an archive exactly, with no
//!   coordination, and the split never changes between runs, machines or versions
//!   ([`stable_hash`]: FNV-1a 64 followed by a 64-bit finaliser; never a randomised hasher).
//! - **Per-cell job** ([`process_cell`]): read, build, flatten, reduce, and write the reduced
//!   tree ([`crate::export::reduced_tree_json_compact`], with the cell's *record* added as its last
//!   member `batch`) with [`crate::export::write_atomic`] to `OUT/<rel with .json for
//!   .swc>`. A cell that fails gets no tree and a record file of its own,
//!   `OUT/.pollard-batch/<same>`. One safe write per cell: the disk's flushes, not the
//!   numerics, bound the rate on ordinary disks.
//! - **Resumability** ([`reusable_row`]): a cell is complete, and skipped on the next run, when
//!   its tree file parses, its record names the same settings (all flags that change the output,
//!   and the pollard version) and an input of the same size, and the input is not newer than the
//!   tree (with `--synapse-tables`, the same for the cell's table: same size, not newer, neither
//!   added nor removed); a failed cell likewise through its record file. Every file is written by temporary
//!   file + rename, so a half-written output never counts as complete. A changed flag, a newer
//!   input file or a new pollard version redoes the cell; `force` redoes everything;
//!   `retry_failed` redoes the cells that failed. The record is deterministic (it holds no time),
//!   so the same input and flags give byte-identical tree files.
//! - **Summary** ([`write_summary`]): one row per input file of the run (shard), rebuilt on every
//!   run from the fresh results and the records of skipped cells, sorted by path, as CSV and JSON
//!   lines. A shard writes `summary.shard-I-of-K.{csv,jsonl}`; [`merge_summaries`] joins the K
//!   shard tables into `summary.{csv,jsonl}`.

mod cell;
mod discover;
mod record;
mod shard;
mod summary;

pub use cell::{Pending, compute_cell, process_cell, write_cell};
pub use discover::{Cell, Found, discover, plan};
pub use record::reusable_row;
pub use shard::{Shard, stable_hash};
pub use summary::{CSV_HEADER, csv_fields, merge_summaries, read_summary, write_summary};

use crate::cable::{Params, PrepOptions};
use crate::export::WriteError;
use crate::fidelity::{FidelityError, FidelityOptions};
use crate::morphology::{Flat, NONE, kind};
use crate::reduce::{CapacitanceRule, ReduceOptions, Reducer, Sites};
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// The folder (inside the output folder) that holds the per-cell records.
pub const RECORD_DIR: &str = ".pollard-batch";

/// Why a batch cannot run (errors of single cells are rows of the summary, not these).
#[derive(Debug, thiserror::Error)]
pub enum BatchError {
    #[error("{0}: not a folder")]
    NotAFolder(PathBuf),
    #[error(
        "the output folder {out} contains the input folder {input}; choose an output folder outside it"
    )]
    OutputHoldsInput { input: PathBuf, out: PathBuf },
    #[error("{path}: cannot read the folder: {source}")]
    ReadDir {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}: cannot create the folder: {source}")]
    CreateDir {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("shard {0:?}: write I/K with whole numbers 1 ≤ I ≤ K (for example 3/8)")]
    BadShard(String),
    #[error("cannot start {jobs} worker threads: {message}")]
    Threads { jobs: usize, message: String },
    #[error(transparent)]
    Write(#[from] WriteError),
    #[error(transparent)]
    Geometry(#[from] crate::cable::CableError),
    #[error(transparent)]
    Options(#[from] crate::reduce::ReduceError),
    #[error(transparent)]
    Fidelity(#[from] FidelityError),
    #[error(
        "--capacitance timed polishes each tree on its cell's fidelity run: drop --no-fidelity"
    )]
    TimedWithoutFidelity,
    #[error("{path}: cannot read the summary: {message}")]
    SummaryRead { path: PathBuf, message: String },
    #[error("{folder}: {message}")]
    Merge { folder: PathBuf, message: String },
}

/// Everything that changes a cell's output. Stored in each record; a record with other settings
/// is not reused.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    /// Compartment budget of the reduced tree.
    pub compartments: usize,
    /// Passive parameters.
    pub params: Params,
    /// Diameter (µm) for points with radius 0 or unknown; `None` makes them an error.
    pub default_diameter_um: Option<f64>,
    /// Coordinate scale factor (e.g. 0.001 for nm); `None` for files in µm.
    pub scale: Option<f64>,
    /// SWC type codes kept (sorted, no repeats; the soma is always kept); `None` keeps every
    /// type.
    pub types: Option<Vec<i32>>,
    /// Frequency (Hz) of the soma input-impedance line of each report.
    pub freq_hz: f64,
    /// Junction link length as a fraction of the branch point's radius.
    pub junction_length_fraction: f64,
    /// Use each cell's synapse table (`NAME.synapses.csv` beside `NAME.swc`, see
    /// [`crate::synapses::table_beside`]) as its sites; cells without one keep the default sites.
    #[serde(default)]
    pub synapses: Option<crate::synapses::TableRule>,
    /// The EPSP fidelity check's options; `None` skips it (its columns are then empty).
    pub fidelity: Option<FidelityOptions>,
    /// How compartments get their capacitance; `Timed` polishes each tree on its cell's
    /// fidelity run, so it needs `fidelity`. Left out of the stored settings when `Fitted`, so
    /// records written before this setting existed (all fitted) stay current; read back as
    /// `Fitted` when absent (not as the library's default, `Timed`).
    #[serde(default = "fitted", skip_serializing_if = "is_fitted")]
    pub capacitance: CapacitanceRule,
    /// With `Timed`: split sites' inputs between adjacent compartments (see
    /// [`ReduceOptions::split_inputs`]). Stored only when true, and read back as false when
    /// absent: records written before splits existed had none, and fitted records stay as
    /// they were.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub split_inputs: bool,
}

fn is_fitted(c: &CapacitanceRule) -> bool {
    *c == CapacitanceRule::Fitted
}

fn fitted() -> CapacitanceRule {
    CapacitanceRule::Fitted
}

impl Default for Settings {
    /// The defaults of `pollard reduce` with a budget of 1.
    fn default() -> Self {
        let o = ReduceOptions::default();
        Settings {
            compartments: 1,
            params: Params::default(),
            default_diameter_um: None,
            scale: None,
            types: None,
            freq_hz: o.freq_hz,
            junction_length_fraction: o.junction_length_fraction,
            synapses: None,
            fidelity: Some(FidelityOptions::default()),
            capacitance: o.capacitance,
            split_inputs: o.split_inputs,
        }
    }
}

impl Settings {
    /// The settings as the exact text stored in records, with the pollard version: two runs
    /// reuse each other's outputs only when these texts are equal.
    pub fn key(&self) -> String {
        let v = serde_json::json!({
            "pollard_version": env!("CARGO_PKG_VERSION"),
            "settings": self,
        });
        v.to_string()
    }

    /// The geometry fixes applied to every cell before cable work.
    pub fn prep(&self) -> PrepOptions {
        PrepOptions {
            default_diameter_um: self.default_diameter_um,
            scale: self.scale,
        }
    }

    /// The reducer's options for every cell (default sites).
    pub fn reduce_options(&self) -> ReduceOptions {
        ReduceOptions {
            types: self.types.clone(),
            sites: Sites::Default,
            freq_hz: self.freq_hz,
            junction_length_fraction: self.junction_length_fraction,
            capacitance: self.capacitance,
            split_inputs: self.split_inputs,
        }
    }

    /// Checks every setting once, before any cell, with the library's own checks: a bad flag
    /// would fail every cell alike. The geometry fixes go through [`PrepOptions::validate`];
    /// the membrane and reducer options through [`Reducer::new`] itself, run once on a
    /// two-point cell (a soma and one cylinder), so no range is written twice.
    pub fn validate(&self) -> Result<(), BatchError> {
        self.prep().validate()?;
        if self.capacitance == CapacitanceRule::Timed && self.fidelity.is_none() {
            return Err(BatchError::TimedWithoutFidelity);
        }
        if let Some(f) = &self.fidelity {
            f.validate()?;
        }
        // a type list is only checked for being empty here (the probe has one dendrite type)
        let mut opts = self.reduce_options();
        opts.types = self.types.clone().filter(|t| t.is_empty());
        Reducer::new(&probe_cell(), &self.params, &opts)?;
        Ok(())
    }
}

/// A soma (area 4π·5² µm²) with one 10 µm cylinder of radius 1 µm: the cell on which
/// [`Settings::validate`] runs the reducer's checks.
fn probe_cell() -> Flat {
    Flat {
        parent: vec![NONE, 0],
        length_um: vec![0.0, 10.0],
        r_prox_um: vec![0.0, 1.0],
        r_dist_um: vec![0.0, 1.0],
        kind: vec![kind::SOMA, kind::BASAL],
        pos: vec![[0.0; 3], [10.0, 0.0, 0.0]],
        soma_area_um2: 100.0 * std::f64::consts::PI,
        point_node: vec![0, 1],
        node_point: vec![0, 1],
        line: vec![1, 2],
    }
}

/// Outcome of one cell.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    Ok,
    Failed,
}

/// One row of the summary table: one input file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Row {
    /// Path relative to the input folder, `/` between folders.
    pub file: String,
    pub status: Status,
    /// Points in the file.
    pub points: Option<usize>,
    /// Tips (points without children) in the file.
    pub tips: Option<usize>,
    /// Total neurite length (µm).
    pub total_length_um: Option<f64>,
    /// Compartments of the reduced tree.
    pub compartments: Option<usize>,
    /// Soma input resistance of the full cell at DC (MΩ).
    #[serde(rename = "soma_input_resistance_dc_full_mohm")]
    pub soma_rin_full_mohm: Option<f64>,
    /// Soma input resistance of the reduced tree at DC (MΩ).
    #[serde(rename = "soma_input_resistance_dc_reduced_mohm")]
    pub soma_rin_reduced_mohm: Option<f64>,
    /// Error over the synapse sites, |ln A_full − ln A_reduced| of the DC attenuation to the
    /// soma (nepers): median, 95th percentile and largest. Empty when the cell has no sites.
    #[serde(rename = "attenuation_to_soma_error_median_np")]
    pub site_error_median_np: Option<f64>,
    #[serde(rename = "attenuation_to_soma_error_p95_np")]
    pub site_error_p95_np: Option<f64>,
    #[serde(rename = "attenuation_to_soma_error_max_np")]
    pub site_error_max_np: Option<f64>,
    /// Synapses and inputs of the cell's synapse table (empty without one).
    #[serde(default)]
    pub synapses: Option<usize>,
    #[serde(default)]
    pub inputs: Option<usize>,
    /// Soma EPSP peak error for an alpha current at each site, |ln(reduced/full)| (nepers):
    /// median and 95th percentile; time-to-peak error (relative) 95th percentile; the soma's
    /// own EPSP peak error (nepers). Empty when the check was skipped.
    #[serde(default)]
    pub epsp_peak_error_median_np: Option<f64>,
    #[serde(default)]
    pub epsp_peak_error_p95_np: Option<f64>,
    #[serde(default)]
    pub time_to_peak_error_p95: Option<f64>,
    #[serde(default)]
    pub soma_epsp_peak_error_np: Option<f64>,
    /// Wall time of the cell's job in this run (s), rounded to µs; empty for a cell reused
    /// from an earlier run.
    pub seconds: Option<f64>,
    /// Why the cell failed.
    pub error: Option<String>,
}

impl Row {
    fn failed(file: &str, seconds: Option<f64>, error: String) -> Row {
        Row {
            file: file.to_string(),
            status: Status::Failed,
            points: None,
            tips: None,
            total_length_um: None,
            compartments: None,
            soma_rin_full_mohm: None,
            soma_rin_reduced_mohm: None,
            site_error_median_np: None,
            site_error_p95_np: None,
            site_error_max_np: None,
            synapses: None,
            inputs: None,
            epsp_peak_error_median_np: None,
            epsp_peak_error_p95_np: None,
            time_to_peak_error_p95: None,
            soma_epsp_peak_error_np: None,
            seconds,
            error: Some(error),
        }
    }
}

/// How a batch runs.
#[derive(Debug, Clone)]
pub struct RunOptions {
    /// Worker threads that compute (at least 1); use one per core.
    pub jobs: usize,
    /// Redo every cell, complete or not.
    pub force: bool,
    /// Redo the cells whose record says they failed.
    pub retry_failed: bool,
}

/// Writer threads per computing worker. A safe write waits for the disk to flush; while it
/// waits, the worker goes on to its next cell and a writer thread finishes the write.
pub const WRITERS_PER_JOB: usize = 4;

/// A counting semaphore: at most `n` computed cells wait for their writes, so memory stays
/// bounded when the disk is slower than the workers.
struct Slots {
    free: std::sync::Mutex<usize>,
    freed: std::sync::Condvar,
}

impl Slots {
    fn acquire(&self) {
        let mut f = self.free.lock().unwrap_or_else(|e| e.into_inner());
        while *f == 0 {
            f = self.freed.wait(f).unwrap_or_else(|e| e.into_inner());
        }
        *f -= 1;
    }
    fn release(&self) {
        *self.free.lock().unwrap_or_else(|e| e.into_inner()) += 1;
        self.freed.notify_one();
    }
}

/// Rows of all `cells` (in the same order) and how many were reused. Cells are computed in
/// parallel on a local pool of `opts.jobs` workers and written by a second local pool of
/// `WRITERS_PER_JOB × jobs` threads (at most that many written cells wait at once);
/// `on_row(row, reused)` is called once per cell as it finishes (from either pool's threads).
pub fn run(
    cells: &[Cell],
    settings: &Settings,
    opts: &RunOptions,
    on_row: &(dyn Fn(&Row, bool) + Sync),
) -> Result<(Vec<Row>, usize), BatchError> {
    use rayon::prelude::*;
    let jobs = opts.jobs.max(1);
    let n_writers = jobs * WRITERS_PER_JOB;
    let pool = |n: usize, name: &'static str| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .thread_name(move |i| format!("pollard-{name}-{i}"))
            .build()
            .map_err(|e| BatchError::Threads {
                jobs: n,
                message: e.to_string(),
            })
    };
    let compute_pool = pool(jobs, "batch")?;
    let write_pool = pool(n_writers, "write")?;
    let key = settings.key();
    let tables = settings.synapses.is_some();
    let slots = Slots {
        free: std::sync::Mutex::new(n_writers),
        freed: std::sync::Condvar::new(),
    };
    let done: Vec<std::sync::Mutex<Option<(Row, bool)>>> = (0..cells.len())
        .map(|_| std::sync::Mutex::new(None))
        .collect();
    let put = |i: usize, row: Row, reused: bool| {
        on_row(&row, reused);
        *done[i].lock().unwrap_or_else(|e| e.into_inner()) = Some((row, reused));
    };
    write_pool.in_place_scope(|scope| {
        compute_pool.install(|| {
            cells
                .par_iter()
                .enumerate()
                .with_max_len(1)
                .for_each(|(i, cell)| {
                    if !opts.force
                        && let Some(row) = reusable_row(cell, &key, tables, opts.retry_failed)
                    {
                        put(i, row, true);
                        return;
                    }
                    let pending = compute_cell(cell, settings, &key);
                    slots.acquire();
                    let (key, slots, put) = (&key, &slots, &put);
                    scope.spawn(move |_| {
                        put(i, write_cell(cell, pending, key), false);
                        slots.release();
                    });
                });
        });
    });
    let mut rows = Vec::with_capacity(cells.len());
    let mut n_reused = 0;
    for (i, d) in done.into_iter().enumerate() {
        let taken = d.into_inner().unwrap_or_else(|e| e.into_inner());
        let (row, reused) = taken.unwrap_or_else(|| {
            // every cell sets its slot above; this only guards against a lost write job
            (
                Row::failed(&cells[i].rel, None, format!("{}: not done", cells[i].rel)),
                false,
            )
        });
        n_reused += reused as usize;
        rows.push(row);
    }
    Ok((rows, n_reused))
}
