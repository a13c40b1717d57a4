//! Synapse-table options shared by `reduce` and `batch`, and the text lines they print.

use pollard::Flat;
use pollard::Morphology;
use pollard::synapses::{
    DEFAULT_SNAP_LIMIT_UM, SnapOptions, Snapped, SynapseMap, read_table, snap,
};
use std::io::Write;
use std::path::Path;

/// How synapse positions are placed on the cell.
#[derive(clap::Args, Debug, Clone)]
pub struct SnapArgs {
    /// Largest distance (µm, after --scale) a synapse may lie outside the nearest point's
    /// sphere (centre distance minus radius). Farther synapses are refused, or listed and left
    /// out with --skip-far.
    #[arg(long = "snap-limit", value_name = "UM", default_value_t = DEFAULT_SNAP_LIMIT_UM)]
    pub snap_limit: f64,
    /// List the synapses farther than --snap-limit and leave them out, instead of refusing
    /// the table.
    #[arg(long = "skip-far")]
    pub skip_far: bool,
}

impl SnapArgs {
    pub fn options(&self, scale: Option<f64>, types: Option<Vec<i32>>) -> SnapOptions {
        SnapOptions {
            scale,
            limit_um: self.snap_limit,
            skip_far: self.skip_far,
            types,
        }
    }
}

/// Reads `path` and places it on the cell.
pub fn load(
    path: &Path,
    m: &Morphology,
    flat: &Flat,
    opts: &SnapOptions,
) -> Result<Snapped, pollard::synapses::SynapseError> {
    snap(&read_table(path)?, m, flat, opts)
}

/// The report's synapse lines (text mode).
pub fn write_summary(w: &mut impl Write, s: &Snapped, map: &SynapseMap) -> std::io::Result<()> {
    let t = &map.summary;
    writeln!(
        w,
        "  synapses ({}): {} from {} inputs, total weight {:.3}",
        s.file, t.synapses, t.inputs, t.weight
    )?;
    if !s.left_out.is_empty() {
        writeln!(
            w,
            "  left out, farther than {} µm from the cell: {}",
            s.limit_um,
            s.left_out.len()
        )?;
        const SHOWN: usize = 20;
        for l in s.left_out.iter().take(SHOWN) {
            writeln!(
                w,
                "    {}:{}: input {}, {:.3} µm",
                s.file, l.line, s.inputs[l.input as usize], l.distance_um
            )?;
        }
        if s.left_out.len() > SHOWN {
            writeln!(
                w,
                "    … and {} more (all listed in the JSON's synapses.left_out)",
                s.left_out.len() - SHOWN
            )?;
        }
    }
    writeln!(
        w,
        "  input × compartment pairs: {}; synapses sharing a compartment with another of their input: {} ({} of {} inputs with several synapses)",
        t.pairs, t.sharing, t.inputs_sharing, t.inputs_repeated
    )?;
    write!(w, "  sharing vs budget (compartments:synapses sharing):")?;
    for c in &map.curve {
        write!(w, " {}:{}", c.compartments, c.sharing)?;
    }
    writeln!(w)
}
