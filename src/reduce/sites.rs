//! Site lists: which points carry the synapses the reduction should disturb least.
//!
//! A site list is text with one site per line: either one integer (an SWC id) or three numbers
//! x, y, z (µm, snapped to the nearest kept point of the cell). Fields are separated by commas,
//! semicolons, tabs or spaces. Blank lines and lines starting with `#` are ignored, and so is a
//! first line that is not numeric (a header). A point listed twice counts twice.

use super::ReduceError;
use crate::morphology::{Flat, Morphology, NONE};
use std::collections::HashMap;

/// One entry of a site list, resolved against the cell's [`Flat`] nodes where possible.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SiteSpec {
    /// A node of the [`Flat`] arrays (from an SWC id). `line` is the list's line (1-based).
    Node { node: u32, line: usize },
    /// A position (µm), snapped to the nearest kept point when the reduction runs.
    Position { pos: [f64; 3], line: usize },
    /// A node of the [`Flat`] arrays with its own weight (a synapse of a synapse table, see
    /// [`crate::synapses`]). `line` is the table's line.
    Weighted { node: u32, weight: f64, line: usize },
}

/// Reads a site list (see the module doc) for `morph` and its flat arrays `flat`.
pub fn parse_sites_csv(
    text: &str,
    morph: &Morphology,
    flat: &Flat,
) -> Result<Vec<SiteSpec>, ReduceError> {
    let by_id: HashMap<i64, usize> = morph
        .points
        .iter()
        .enumerate()
        .map(|(i, p)| (p.id, i))
        .collect();
    let mut out = Vec::new();
    let mut seen_data = false;
    for (i, raw) in text.lines().enumerate() {
        let line = i + 1;
        let s = raw.trim().trim_start_matches('\u{feff}');
        if s.is_empty() || s.starts_with('#') {
            continue;
        }
        let fields: Vec<&str> = s
            .split(|c: char| c == ',' || c == ';' || c.is_whitespace())
            .filter(|f| !f.is_empty())
            .collect();
        let nums: Vec<Option<f64>> = fields.iter().map(|f| f.parse::<f64>().ok()).collect();
        if !seen_data && nums.iter().any(|x| x.is_none()) {
            seen_data = true; // a header line
            continue;
        }
        seen_data = true;
        let bad = |message: String| ReduceError::SiteFile { line, message };
        let nums: Vec<f64> = nums
            .into_iter()
            .zip(&fields)
            .map(|(x, f)| x.ok_or_else(|| bad(format!("`{f}` is not a number"))))
            .collect::<Result<_, _>>()?;
        match nums.len() {
            1 => {
                let v = nums[0];
                if v.fract() != 0.0 || !v.is_finite() || v.abs() > 9.0e15 {
                    return Err(bad(format!("`{}` is not an SWC id", fields[0])));
                }
                let id = v as i64;
                let idx = *by_id
                    .get(&id)
                    .ok_or_else(|| bad(format!("there is no point with SWC id {id}")))?;
                let node = flat.point_node.get(idx).copied().unwrap_or(NONE);
                if node == NONE {
                    return Err(bad(format!(
                        "SWC id {id} is not in the cell's main tree (it belongs to a separate tree)"
                    )));
                }
                out.push(SiteSpec::Node { node, line });
            }
            3 => {
                if nums.iter().any(|x| !x.is_finite()) {
                    return Err(bad("a coordinate is not finite".into()));
                }
                out.push(SiteSpec::Position {
                    pos: [nums[0], nums[1], nums[2]],
                    line,
                });
            }
            k => {
                return Err(bad(format!(
                    "expected one SWC id or three coordinates x,y,z, found {k} fields"
                )));
            }
        }
    }
    if out.is_empty() {
        return Err(ReduceError::NoSites);
    }
    Ok(out)
}
