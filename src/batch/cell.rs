//! The per-cell job: compute (read, build, reduce) and write (tree with record, or failure record).

use super::record::{Record, table_state};
use super::{BatchError, Cell, Row, Settings, Status};
use crate::cable::prepare;
use crate::export::{TreeExtras, TreeSource, reduced_tree_json_with, write_atomic};
use crate::fidelity::{Fidelity, FidelityReport};
use crate::morphology::Morphology;
use crate::reduce::Reducer;
use crate::synapses::{SynapseJson, SynapseMap, table_for_cell};
use std::path::Path;
use std::time::Instant;

/// What one cell's computation gives: the tree file's bytes and the row's numbers.
struct Computed {
    json: Vec<u8>,
    row: Row,
}

/// Read, build, reduce one cell; the tree file is [`reduced_tree_json_with`] (fidelity and record) with the relative path
/// as its source, so it does not depend on where the archive lies. Errors are plain messages
/// naming the file (they go into the summary).
fn compute(
    cell: &Cell,
    settings: &Settings,
    settings_key: &str,
    table_bytes: Option<u64>,
) -> Result<Computed, String> {
    let name = cell.rel.as_str();
    let bytes = std::fs::read(&cell.input).map_err(|e| format!("{name}: cannot read: {e}"))?;
    let swc = crate::swc::parse_bytes(&bytes, name).map_err(|e| e.to_string())?;
    let m = Morphology::from_swc(swc).map_err(|e| e.to_string())?;
    let met = m.metrics();
    let flat = prepare(&m, &settings.prep()).map_err(|e| format!("{name}: {e}"))?;
    let snapped = match &settings.synapses {
        Some(rule) => {
            let (scale, types) = (settings.scale, settings.types.clone());
            table_for_cell(&cell.input, name, &m, &flat, rule, scale, types)
                .map_err(|e| e.to_string())?
        }
        None => None,
    };
    let mut opts = settings.reduce_options();
    if let Some(s) = &snapped {
        opts.sites = s.sites();
    }
    let reducer =
        Reducer::new(&flat, &settings.params, &opts).map_err(|e| format!("{name}: {e}"))?;
    let mut tree = reducer.tree(settings.compartments);
    // polished (`timed`) before anything reads the tree's capacitances
    let fidelity =
        fidelity_for(settings, &reducer, &mut tree, &m).map_err(|e| format!("{name}: {e}"))?;
    let report = reducer.report(&tree).map_err(|e| format!("{name}: {e}"))?;
    let map = match &snapped {
        Some(s) => Some(
            SynapseMap::new(s, &tree)
                .and_then(|m| m.with_curve(s, &reducer))
                .map_err(|e| e.to_string())?,
        ),
        None => None,
    };
    let ids: Vec<i64> = m.points.iter().map(|p| p.id).collect();
    let fid = |f: fn(&FidelityReport) -> f64| {
        fidelity
            .as_ref()
            .filter(|r| r.sites > 0)
            .map(f)
            .filter(|x| x.is_finite())
    };
    let pos = crate::export::point_positions_um(&m, settings.scale);
    let src = TreeSource {
        source: name,
        point_ids: &ids,
        point_pos: &pos,
    };
    let e = &report.ln_attenuation_error;
    let finite = |x: f64| x.is_finite().then_some(x);
    let row = Row {
        file: cell.rel.clone(),
        status: Status::Ok,
        points: Some(met.points),
        tips: Some(met.tips),
        total_length_um: finite(met.total_length_um),
        compartments: Some(report.compartments),
        soma_rin_full_mohm: finite(report.soma_input_resistance_dc_full_mohm),
        soma_rin_reduced_mohm: finite(report.soma_input_resistance_dc_reduced_mohm),
        site_error_median_np: (report.sites > 0).then_some(e.median).and_then(finite),
        site_error_p95_np: (report.sites > 0).then_some(e.p95).and_then(finite),
        site_error_max_np: (report.sites > 0).then_some(e.max).and_then(finite),
        synapses: map.as_ref().map(|m| m.summary.synapses),
        inputs: map.as_ref().map(|m| m.summary.inputs),
        epsp_peak_error_median_np: fid(|r| r.epsp_peak_error_np.median),
        epsp_peak_error_p95_np: fid(|r| r.epsp_peak_error_np.p95),
        time_to_peak_error_p95: fid(|r| r.time_to_peak_error.p95),
        soma_epsp_peak_error_np: fid(|r| r.soma_epsp_peak_error_np),
        seconds: None,
        error: None,
    };
    // the tree with the record as its last member: one file (one safe write) per cell
    let record = Record::new(settings_key, bytes.len() as u64, table_bytes, &row);
    let member = snapped
        .as_ref()
        .zip(map.as_ref())
        .map(|(s, m)| SynapseJson::new(s, m, tree.len()));
    let extras = TreeExtras {
        synapses: member,
        fidelity: fidelity.as_ref(),
        batch: Some(&record),
    };
    let json = reduced_tree_json_with(&src, &reducer, &tree, &report, extras, false)
        .map_err(|e| format!("{name}: cannot write the tree as JSON: {e}"))?;
    Ok(Computed {
        json: json.into_bytes(),
        row,
    })
}

/// The fidelity summary of a cell's tree, when the settings ask for it; with the `timed` rule
/// the tree's capacitances are first polished on the same full-cell run (as `pollard reduce`).
fn fidelity_for(
    settings: &Settings,
    reducer: &Reducer,
    tree: &mut crate::reduce::ReducedTree,
    m: &Morphology,
) -> Result<Option<FidelityReport>, crate::fidelity::FidelityError> {
    let Some(o) = &settings.fidelity else {
        return Ok(None);
    };
    let f = Fidelity::new(reducer, o)?;
    f.apply_capacitance_rule(tree)?;
    Ok(Some(f.report(tree, Some(m))?))
}

fn make_parent(path: &Path) -> Result<(), BatchError> {
    if let Some(dir) = path.parent()
        && !dir.as_os_str().is_empty()
    {
        std::fs::create_dir_all(dir).map_err(|source| BatchError::CreateDir {
            path: dir.to_path_buf(),
            source,
        })?;
    }
    Ok(())
}

fn remove_if_present(path: &Path) -> Result<(), String> {
    match std::fs::remove_file(path) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
        Err(e) => Err(format!(
            "{}: cannot remove a stale output: {e}",
            path.display()
        )),
    }
}

/// A cell computed and waiting to be written.
pub struct Pending {
    t0: Instant,
    /// Size of the cell's synapse table before it was read (None: no table, or not used).
    table_bytes: Option<u64>,
    result: Result<Computed, String>,
}

/// The computing half of [`process_cell`]: read, build, reduce (no file is written). A panic
/// inside the computation is caught and becomes the cell's error.
pub fn compute_cell(cell: &Cell, settings: &Settings, settings_key: &str) -> Pending {
    let t0 = Instant::now();
    if let Some(msg) = &cell.fault {
        return Pending {
            t0,
            table_bytes: None,
            result: Err(msg.clone()),
        };
    }
    let table_bytes = table_state(cell, settings.synapses.is_some()).map(|t| t.0);
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
        compute(cell, settings, settings_key, table_bytes)
    }))
    .unwrap_or_else(|p| {
        let what = p
            .downcast_ref::<&str>()
            .map(|s| s.to_string())
            .or_else(|| p.downcast_ref::<String>().cloned())
            .unwrap_or_default();
        Err(format!(
            "{}: internal error (a bug; please report it): {what}",
            cell.rel
        ))
    });
    Pending {
        t0,
        table_bytes,
        result,
    }
}

/// The writing half of [`process_cell`]: the tree (with its record inside) or the failure record.
pub fn write_cell(cell: &Cell, pending: Pending, settings_key: &str) -> Row {
    let Pending {
        t0,
        table_bytes,
        result,
    } = pending;
    let inputs = [cell.input.as_path()];
    let written = (|| -> Result<Row, String> {
        if cell.fault.is_some() {
            // no record: a clash's record name is the other file's; a folder has none
            return Err(result.err().unwrap_or_default());
        }
        match result {
            Ok(c) => {
                make_parent(&cell.output).map_err(|e| e.to_string())?;
                write_atomic(&cell.output, &c.json, &inputs).map_err(|e| e.to_string())?;
                // an older failure record is out of date now
                remove_if_present(&cell.record)?;
                Ok(c.row)
            }
            Err(msg) => {
                // a tree left from an earlier run must not look current: removed first, so
                // that a stop between the two steps leaves neither
                remove_if_present(&cell.output)?;
                let row = Row::failed(&cell.rel, None, msg);
                let input_bytes = std::fs::metadata(&cell.input).map(|m| m.len()).unwrap_or(0);
                let rec = Record::new(settings_key, input_bytes, table_bytes, &row);
                let text = serde_json::to_vec(&rec).map_err(|e| e.to_string())?;
                make_parent(&cell.record).map_err(|e| e.to_string())?;
                write_atomic(&cell.record, &text, &inputs).map_err(|e| e.to_string())?;
                Ok(row)
            }
        }
    })();
    let mut row = written.unwrap_or_else(|msg| Row::failed(&cell.rel, None, msg));
    row.seconds = Some((t0.elapsed().as_secs_f64() * 1e6).round() / 1e6);
    row
}

/// Does one cell and writes its tree (on success, with its record inside) or its failure
/// record. Never panics on a bad file. Returns the row.
pub fn process_cell(cell: &Cell, settings: &Settings, settings_key: &str) -> Row {
    write_cell(
        cell,
        compute_cell(cell, settings, settings_key),
        settings_key,
    )
}
