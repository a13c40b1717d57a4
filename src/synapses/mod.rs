//! Synapse tables: which presynaptic input contacts the cell where, and where each of its
//! synapses ends up in a reduced tree.
//!
//! # The table ([`read_table`], [`parse_table`])
//! CSV (comma-separated, optionally quoted), first line a header. Columns are found by name
//! (case-insensitive; other columns are ignored):
//! - `input` (also `input_id`, `pre`, `pre_id`, `presynaptic`): the input's identity, any
//!   non-empty text;
//! - the location: either `swc_id` (a point of the cell) or `x`, `y`, `z` (a position in the
//!   cell's units: `--scale` applies to it as to the cell);
//! - `weight` (optional, default 1; an empty cell is 1): a finite number above 0.
//!
//! Blank lines and lines starting with `#` are skipped. A position listed twice counts twice.
//!
//! # Snapping ([`snap`])
//! A position goes to the nearest point of the kept cell (the type filter applied): the nearest
//! point centre, found in a k-d tree ([`kiddo`]), or the soma when the position is nearer the
//! soma's surface (a sphere of the soma's area) than that point's. Its *snap distance* is how far
//! it lies outside the chosen point's sphere (distance to the centre minus the radius), so
//! synapses on the membrane of a thick soma or dendrite are at 0. A synapse
//! farther than [`SnapOptions::limit_um`] is refused with its file and line, or, with
//! [`SnapOptions::skip_far`], listed in [`Snapped::left_out`] and left out.
//!
//! # Reduction and mapping ([`Snapped::sites`], [`SynapseMap`])
//! Each synapse is one site of the reduction, weighted by its weight (so n synapses on one
//! point weigh n × weight). After the reduction every synapse belongs to the compartment that
//! holds its snapped point; [`SynapseMap`] gathers the sparse input × compartment matrix
//! (synapse count and summed weight per pair) and how the repetition of each input survives.

mod demo;
mod map;
mod snap;
mod table;
mod write;

pub use demo::{DEMO_AFFERENTS, DEMO_SEED, demo_table};
pub use map::{CurveEntry, InputStats, MatrixEntry, Summary, SynapseMap};
pub use snap::{LeftOut, SnapOptions, Snapped, Synapse, snap};
pub use table::{Location, Row, SynapseTable, parse_table, read_table};
pub use write::{SynapseJson, synapse_csvs};

/// Batch runs: where a cell's table lies (`NAME.swc` → `NAME.synapses.csv`, beside it).
pub fn table_beside(swc: &std::path::Path) -> std::path::PathBuf {
    swc.with_extension("synapses.csv")
}

/// Batch settings for synapse tables found by [`table_beside`]: how they are snapped.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct TableRule {
    pub snap_limit_um: f64,
    pub skip_far: bool,
}

/// Batch runs: the synapse table beside the cell file `swc` (named `name` in messages, e.g.
/// its path relative to the archive), placed on the cell; `None` when there is none.
pub fn table_for_cell(
    swc: &std::path::Path,
    name: &str,
    morph: &crate::Morphology,
    flat: &crate::Flat,
    rule: &TableRule,
    scale: Option<f64>,
    types: Option<Vec<i32>>,
) -> Result<Option<Snapped>, SynapseError> {
    let path = table_beside(swc);
    if !path.is_file() {
        return Ok(None);
    }
    let file = table_beside(std::path::Path::new(name))
        .display()
        .to_string();
    let bytes = std::fs::read(&path).map_err(|e| SynapseError::Io {
        file: file.clone(),
        message: e.to_string(),
    })?;
    let opts = SnapOptions {
        scale,
        limit_um: rule.snap_limit_um,
        skip_far: rule.skip_far,
        types,
    };
    snap(&parse_table(&bytes, &file)?, morph, flat, &opts).map(Some)
}

/// Default snap limit (µm): how far outside the nearest point's sphere a synapse may lie.
pub const DEFAULT_SNAP_LIMIT_UM: f64 = 3.0;

/// Why a synapse table cannot be used. Every message names the file and, for a row, its line.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SynapseError {
    #[error("{file}: cannot read the synapse table: {message}")]
    Io { file: String, message: String },
    #[error("{file}:{line}: {message}")]
    Row {
        file: String,
        line: usize,
        message: String,
    },
    #[error("{file}: {message}")]
    Table { file: String, message: String },
}
