//! Records: what a finished cell leaves for the next run, and the check that reuses it.

use super::{Cell, Row, Status};
use serde::{Deserialize, Serialize};
use std::path::Path;
use std::time::{SystemTime, UNIX_EPOCH};

/// The `format` field of a record file.
const RECORD_FORMAT: &str = "pollard-batch-record/1";

/// What a finished cell leaves for the next run: in the tree file as its last member `batch`
/// (cells that succeeded), or as a record file of its own (cells that failed).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub(super) struct Record {
    format: String,
    /// [`Settings::key`] of the run that made it.
    settings_key: String,
    /// Size of the input file in bytes when it was read.
    input_bytes: u64,
    /// Size of the cell's synapse table in bytes, when the run used one (absent otherwise, so
    /// runs without tables write the same bytes as before).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    table_bytes: Option<u64>,
    /// The row (without its time), decimals written as text ([`row_to_exact`]).
    row: serde_json::Value,
}

impl Record {
    pub(super) fn new(
        settings_key: &str,
        input_bytes: u64,
        table_bytes: Option<u64>,
        row: &Row,
    ) -> Record {
        Record {
            format: RECORD_FORMAT.to_string(),
            settings_key: settings_key.to_string(),
            input_bytes,
            table_bytes,
            row: row_to_exact(&Row {
                seconds: None,
                ..row.clone()
            }),
        }
    }

    /// The row, when this record was made under `settings_key` from an input of `input_bytes`
    /// and a synapse table of `table_bytes` (None: no table).
    fn row_if(
        self,
        settings_key: &str,
        input_bytes: u64,
        table_bytes: Option<u64>,
        rel: &str,
    ) -> Option<Row> {
        if self.format != RECORD_FORMAT
            || self.settings_key != settings_key
            || self.input_bytes != input_bytes
            || self.table_bytes != table_bytes
        {
            return None;
        }
        row_from_exact(self.row).filter(|r| r.file == rel)
    }
}

/// The decimal columns of a [`Row`].
const FLOAT_FIELDS: [&str; 11] = [
    "total_length_um",
    "soma_input_resistance_dc_full_mohm",
    "soma_input_resistance_dc_reduced_mohm",
    "attenuation_to_soma_error_median_np",
    "attenuation_to_soma_error_p95_np",
    "attenuation_to_soma_error_max_np",
    "epsp_peak_error_median_np",
    "epsp_peak_error_p95_np",
    "time_to_peak_error_p95",
    "soma_epsp_peak_error_np",
    "seconds",
];

/// A row as JSON with each decimal as the text of its shortest exact form: serde_json's
/// default number reader may miss the last bit of a double, and a reused row must come back
/// exactly (so that a rerun's summary matches the first run's).
fn row_to_exact(row: &Row) -> serde_json::Value {
    let mut v = serde_json::to_value(row).unwrap_or_default();
    for k in FLOAT_FIELDS {
        if let Some(x) = v.get(k).and_then(serde_json::Value::as_f64) {
            v[k] = serde_json::Value::String(format!("{x:?}"));
        }
    }
    v
}

/// The inverse of [`row_to_exact`] (Rust's own decimal reader is exact).
fn row_from_exact(mut v: serde_json::Value) -> Option<Row> {
    for k in FLOAT_FIELDS {
        if let Some(t) = v.get(k).and_then(serde_json::Value::as_str) {
            let x: f64 = t.parse().ok()?;
            v[k] = serde_json::Number::from_f64(x)?.into();
        }
    }
    serde_json::from_value(v).ok()
}

/// A tree file's `batch` member (every other member is checked to be valid JSON and skipped).
#[derive(Deserialize)]
struct TreeFileBatch {
    batch: Record,
}

/// Size and modification time of the cell's synapse table, when the run uses tables
/// (`tables`) and the cell has one ([`crate::synapses::table_beside`]).
pub(super) fn table_state(cell: &Cell, tables: bool) -> Option<(u64, SystemTime)> {
    if !tables {
        return None;
    }
    let meta = std::fs::metadata(crate::synapses::table_beside(&cell.input)).ok()?;
    Some((meta.len(), meta.modified().ok()?))
}

/// The row of a cell that is complete under `settings` (see the module doc), or `None` when the
/// cell must be (re)done. `tables`: the run uses each cell's synapse table, which then counts as
/// an input too (its size is in the record; a table newer than the output, added or removed
/// redoes the cell). With `retry_failed`, a recorded failure is not reused. The row of a reused
/// cell has no time.
pub fn reusable_row(
    cell: &Cell,
    settings_key: &str,
    tables: bool,
    retry_failed: bool,
) -> Option<Row> {
    if cell.fault.is_some() {
        return None;
    }
    let in_meta = std::fs::metadata(&cell.input).ok()?;
    let table = table_state(cell, tables);
    let in_time = in_meta
        .modified()
        .ok()?
        .max(table.map_or(UNIX_EPOCH, |t| t.1));
    let table_bytes = table.map(|t| t.0);
    let newer = |p: &Path| -> Option<bool> {
        let t = std::fs::metadata(p).ok()?.modified().ok()?;
        Some(t >= in_time)
    };
    match newer(&cell.output) {
        // a tree file: current when it parses, names these settings and this input
        Some(true) => {
            let t: TreeFileBatch =
                serde_json::from_slice(&std::fs::read(&cell.output).ok()?).ok()?;
            t.batch
                .row_if(settings_key, in_meta.len(), table_bytes, &cell.rel)
                .filter(|r| r.status == Status::Ok)
        }
        Some(false) => None,
        None if retry_failed => None,
        None => {
            if !newer(&cell.record)? {
                return None;
            }
            let rec: Record = serde_json::from_slice(&std::fs::read(&cell.record).ok()?).ok()?;
            rec.row_if(settings_key, in_meta.len(), table_bytes, &cell.rel)
                .filter(|r| r.status == Status::Failed)
        }
    }
}
