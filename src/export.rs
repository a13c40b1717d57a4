//! Writing results to disk safely, and the file formats of the reduced tree.
//!
//! Every output is written to a temporary file in the target folder and renamed into place, so a
//! reader never sees half a file and a crash never leaves one; an output path that is one of the
//! inputs is refused.

use std::io::Write;
use std::path::{Path, PathBuf};

mod cable_json;
pub use cable_json::{CableDoc, CableJsonError, PointsOut, TipOut};

/// `"pollard X.Y.Z"`: the `generator` member of every document pollard writes.
pub fn generator() -> String {
    format!("pollard {}", env!("CARGO_PKG_VERSION"))
}

/// The first members of the documents written beside a reduced tree (traces, fidelity tables):
/// what the document is, what wrote it, from which cell, for how many compartments and which
/// membrane. A document puts it first with `#[serde(flatten)]`.
#[derive(Debug, Clone, serde::Serialize)]
pub struct DocHeader<'a> {
    pub format: &'static str,
    pub generator: String,
    pub source: &'a str,
    pub compartments: usize,
    pub parameters: crate::cable::Params,
}

impl<'a> DocHeader<'a> {
    /// The header of a `format` document about the cell `source` and a tree of `compartments`.
    pub fn new(
        format: &'static str,
        source: &'a str,
        compartments: usize,
        parameters: crate::cable::Params,
    ) -> Self {
        DocHeader {
            format,
            generator: generator(),
            source,
            compartments,
            parameters,
        }
    }
}

/// Why an output could not be written.
#[derive(Debug, thiserror::Error)]
pub enum WriteError {
    #[error("{0}: refusing to overwrite an input file; choose another output path")]
    WouldOverwriteInput(PathBuf),
    #[error("{path}: the folder {folder} does not exist")]
    NoFolder { path: PathBuf, folder: PathBuf },
    #[error("{path}: cannot write: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
}

fn same_file(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    }
}

/// Writes `bytes` to `path` through a temporary file in the same folder and a rename.
/// Refuses if `path` is one of `inputs`.
pub fn write_atomic(path: &Path, bytes: &[u8], inputs: &[&Path]) -> Result<(), WriteError> {
    if inputs.iter().any(|i| same_file(i, path)) {
        return Err(WriteError::WouldOverwriteInput(path.to_path_buf()));
    }
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !folder.is_dir() {
        return Err(WriteError::NoFolder {
            path: path.to_path_buf(),
            folder,
        });
    }
    let io = |source| WriteError::Io {
        path: path.to_path_buf(),
        source,
    };
    let mut tmp = tempfile::Builder::new()
        .prefix(".pollard-")
        .suffix(".tmp")
        .tempfile_in(&folder)
        .map_err(io)?;
    tmp.write_all(bytes).map_err(io)?;
    // the temporary file is private (0600); the output gets the usual rw-r--r-- so that others
    // on shared storage can read it, as a file made by any other program would be
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        tmp.as_file()
            .set_permissions(std::fs::Permissions::from_mode(0o644))
            .map_err(io)?;
    }
    tmp.as_file().sync_all().map_err(io)?;
    tmp.persist(path).map_err(|e| io(e.error))?;
    Ok(())
}

/// Version of the reduced-tree JSON layout (`assets/reduced-tree.schema.json`). Raised when a
/// field changes meaning or is removed; adding fields keeps it.
pub const REDUCED_TREE_SCHEMA_VERSION: u32 = 5;

/// The `format` value of a reduced-tree JSON file.
pub const REDUCED_TREE_FORMAT: &str = "pollard.reduced-tree";

/// Position of every morphology point in µm (`--scale` applied, as the cable arrays have it),
/// for [`TreeSource::point_pos`].
pub fn point_positions_um(m: &crate::Morphology, scale: Option<f64>) -> Vec<[f64; 3]> {
    let s = scale.unwrap_or(1.0);
    m.points.iter().map(|p| p.pos.map(|x| x * s)).collect()
}

/// Where a reduced tree came from, for the file's header and site map.
#[derive(Debug, Clone, Copy)]
pub struct TreeSource<'a> {
    /// The input file's name or path, as the user gave it.
    pub source: &'a str,
    /// SWC id of every morphology point (`Morphology::points[i].id`).
    pub point_ids: &'a [i64],
    /// Position of every morphology point (µm, see [`point_positions_um`]).
    pub point_pos: &'a [[f64; 3]],
}

#[derive(serde::Serialize)]
struct Parameters<'a> {
    rm_ohm_cm2: f64,
    ra_ohm_cm: f64,
    cm_uf_cm2: f64,
    tau_ms: f64,
    impedance_freq_hz: f64,
    types_kept: Option<&'a [i32]>,
    sites: &'static str,
    junction_length_fraction: f64,
    /// How the capacitances were chosen (`timed`, `fitted` or `uniform`): the reducer's rule, which
    /// callers build as `fitted` when they cannot polish (no fidelity run).
    capacitance: crate::reduce::CapacitanceRule,
    compartments_requested: usize,
    compartments: usize,
}

#[derive(serde::Serialize)]
struct PointMap {
    swc_id: Vec<i64>,
    compartment: Vec<Option<u32>>,
    /// The points whose input is split with a second compartment (absent when none is).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    splits: Vec<PointSplitOut>,
}

#[derive(serde::Serialize)]
struct PointSplitOut {
    /// Index into the point map's arrays.
    point: usize,
    compartment: u32,
    weight: f64,
}

#[derive(serde::Serialize)]
struct SiteOut {
    swc_id: i64,
    position_um: [f64; 3],
    weight: f64,
    compartment: u32,
    #[serde(skip_serializing_if = "Option::is_none")]
    split: Option<crate::reduce::Split>,
    attenuation_to_soma_full_np: f64,
    attenuation_to_soma_reduced_np: f64,
    attenuation_to_soma_error_np: f64,
}

#[derive(serde::Serialize)]
struct TreeFile<'a, B: serde::Serialize> {
    format: &'static str,
    schema_version: u32,
    generator: String,
    source: &'a str,
    parameters: Parameters<'a>,
    compartments: &'a [crate::reduce::Compartment],
    feed_forward: crate::reduce::FeedForward,
    /// Every point of the file → its compartment (null: left out).
    point_map: PointMap,
    /// Every site of the reduction → its compartment, with its DC attenuation to the soma.
    site_map: Vec<SiteOut>,
    report: &'a crate::reduce::Report,
    /// The synapse table's map ([`crate::synapses`]), when the sites came from one.
    #[serde(skip_serializing_if = "Option::is_none")]
    synapses: Option<crate::synapses::SynapseJson<'a>>,
    /// The time-domain fidelity summary ([`crate::fidelity`]); null when not computed.
    fidelity: Option<&'a crate::fidelity::FidelityReport>,
    /// A caller's own last member (batch: the cell's record).
    #[serde(skip_serializing_if = "Option::is_none")]
    batch: Option<&'a B>,
}

/// The reduced tree as JSON (layout: `assets/reduced-tree.schema.json`, version
/// [`REDUCED_TREE_SCHEMA_VERSION`]): parameters, compartments, the DC feed-forward form, the
/// site map (every point and every site → compartment, with each site's DC log attenuation to
/// the soma in the full and the reduced cell), the report, and the fidelity summary (`null` here:
/// [`reduced_tree_json_with`] writes it). Non-finite numbers are written as `null`.
pub fn reduced_tree_json(
    src: &TreeSource<'_>,
    reducer: &crate::reduce::Reducer,
    tree: &crate::reduce::ReducedTree,
    report: &crate::reduce::Report,
) -> Result<String, serde_json::Error> {
    tree_json::<()>(src, reducer, tree, report, TreeExtras::default(), true)
}

/// The same document as [`reduced_tree_json`] without indentation (smaller and faster to write:
/// for archives).
pub fn reduced_tree_json_compact(
    src: &TreeSource<'_>,
    reducer: &crate::reduce::Reducer,
    tree: &crate::reduce::ReducedTree,
    report: &crate::reduce::Report,
) -> Result<String, serde_json::Error> {
    tree_json::<()>(src, reducer, tree, report, TreeExtras::default(), false)
}

/// [`reduced_tree_json_compact`] with one more member, `batch`, last: the batch run's record of
/// the cell (any serialisable value; readers of the tree ignore it).
pub fn reduced_tree_json_with_batch<B: serde::Serialize>(
    src: &TreeSource<'_>,
    reducer: &crate::reduce::Reducer,
    tree: &crate::reduce::ReducedTree,
    report: &crate::reduce::Report,
    batch: &B,
) -> Result<String, serde_json::Error> {
    let extras = TreeExtras {
        batch: Some(batch),
        ..TreeExtras::default()
    };
    tree_json(src, reducer, tree, report, extras, false)
}

/// The optional members of a tree file.
pub struct TreeExtras<'a, B> {
    /// A synapse table's map (`synapses`).
    pub synapses: Option<crate::synapses::SynapseJson<'a>>,
    /// The time-domain fidelity summary (`fidelity`; null when absent).
    pub fidelity: Option<&'a crate::fidelity::FidelityReport>,
    /// A caller's own last member (`batch`).
    pub batch: Option<&'a B>,
}

impl<B> Default for TreeExtras<'_, B> {
    fn default() -> Self {
        TreeExtras {
            synapses: None,
            fidelity: None,
            batch: None,
        }
    }
}

/// The tree JSON with the optional members ([`TreeExtras`]): `synapses`, `fidelity` and `batch`
/// (last); `pretty` indents it as [`reduced_tree_json`] does.
pub fn reduced_tree_json_with<B: serde::Serialize>(
    src: &TreeSource<'_>,
    reducer: &crate::reduce::Reducer,
    tree: &crate::reduce::ReducedTree,
    report: &crate::reduce::Report,
    extras: TreeExtras<'_, B>,
    pretty: bool,
) -> Result<String, serde_json::Error> {
    tree_json(src, reducer, tree, report, extras, pretty)
}

fn tree_json<B: serde::Serialize>(
    src: &TreeSource<'_>,
    reducer: &crate::reduce::Reducer,
    tree: &crate::reduce::ReducedTree,
    report: &crate::reduce::Report,
    extras: TreeExtras<'_, B>,
    pretty: bool,
) -> Result<String, serde_json::Error> {
    use crate::morphology::NONE;
    let p = reducer.params();
    let o = reducer.options();
    let ln_red = tree.site_ln_attenuations_dc();
    let sites = reducer
        .sites()
        .iter()
        .zip(&tree.site_compartment)
        .enumerate()
        .map(|(k, (s, &c))| {
            let i = s.point as usize;
            let red = ln_red[k];
            SiteOut {
                swc_id: src.point_ids.get(i).copied().unwrap_or(-1),
                position_um: src.point_pos.get(i).copied().unwrap_or([f64::NAN; 3]),
                weight: s.weight,
                compartment: c,
                split: tree.site_split(k),
                attenuation_to_soma_full_np: s.ln_attenuation_full,
                attenuation_to_soma_reduced_np: red,
                attenuation_to_soma_error_np: s.ln_attenuation_full - red,
            }
        })
        .collect();
    let file = TreeFile {
        format: REDUCED_TREE_FORMAT,
        schema_version: REDUCED_TREE_SCHEMA_VERSION,
        generator: generator(),
        source: src.source,
        parameters: Parameters {
            rm_ohm_cm2: p.rm_ohm_cm2,
            ra_ohm_cm: p.ra_ohm_cm,
            cm_uf_cm2: p.cm_uf_cm2,
            tau_ms: p.tau_ms(),
            impedance_freq_hz: o.freq_hz,
            types_kept: o.types.as_deref(),
            sites: match &o.sites {
                crate::reduce::Sites::Default => "default",
                crate::reduce::Sites::List(l)
                    if l.iter()
                        .any(|x| matches!(x, crate::reduce::SiteSpec::Weighted { .. })) =>
                {
                    "synapses"
                }
                crate::reduce::Sites::List(_) => "list",
            },
            junction_length_fraction: o.junction_length_fraction,
            capacitance: o.capacitance,
            compartments_requested: tree.requested,
            compartments: tree.len(),
        },
        compartments: &tree.compartments,
        feed_forward: tree.feed_forward(),
        point_map: PointMap {
            swc_id: src.point_ids.to_vec(),
            compartment: tree
                .point_compartment
                .iter()
                .map(|&c| (c != NONE).then_some(c))
                .collect(),
            splits: (0..tree.point_split.len())
                .filter_map(|point| {
                    tree.point_split(point).map(|sh| PointSplitOut {
                        point,
                        compartment: sh.compartment,
                        weight: sh.weight,
                    })
                })
                .collect(),
        },
        site_map: sites,
        report,
        synapses: extras.synapses,
        fidelity: extras.fidelity,
        batch: extras.batch,
    };
    if pretty {
        serde_json::to_string_pretty(&file)
    } else {
        serde_json::to_string(&file)
    }
}

/// The reduced tree as SWC, one point per compartment, each an *equivalent cylinder*: the
/// radius r and length l for which a cylinder has the compartment's axial conductance
/// g = πr²/(Ra·l) and leak G = 2πrl/Rm (core-conductor model; Rall 1959), i.e.
/// r³ = (g·Ra/π)·(G·Rm/2π) and l = G·Rm/(2πr). The soma is a sphere of area G·Rm (type 1).
/// Each point is placed l µm from its parent, towards the position of the point the
/// compartment is named after. Ids are compartment id + 1. Readers that draw a frustum between
/// a point and its parent will see tapers at the joins; the JSON is the exact description.
pub fn reduced_tree_swc(tree: &crate::reduce::ReducedTree, header: &[String]) -> String {
    use std::fmt::Write as _;
    let p = &tree.params;
    let mut out = String::new();
    for h in header {
        let _ = writeln!(out, "# {h}");
    }
    let _ = writeln!(
        out,
        "# equivalent cylinders: radius and length give each compartment's axial and leak conductance (Rm {} ohm cm2, Ra {} ohm cm)",
        p.rm_ohm_cm2, p.ra_ohm_cm
    );
    let mut pos: Vec<[f64; 3]> = Vec::with_capacity(tree.len());
    for c in &tree.compartments {
        let g = c.g_axial_ns * 1e-9;
        let gl = c.g_leak_ns * 1e-9;
        let (xyz, r_um, parent) = match c.parent {
            None => {
                let area_cm2 = gl * p.rm_ohm_cm2;
                let r = (area_cm2 / (4.0 * std::f64::consts::PI)).sqrt() / crate::cable::UM;
                (c.position_um, r, -1i64)
            }
            Some(q) => {
                let pi = std::f64::consts::PI;
                let r_cm = ((g * p.ra_ohm_cm / pi) * (gl * p.rm_ohm_cm2 / (2.0 * pi))).cbrt();
                let l_um = gl * p.rm_ohm_cm2 / (2.0 * pi * r_cm) / crate::cable::UM;
                let from = pos[q as usize];
                let target = c.position_um;
                let src_from = tree.compartments[q as usize].position_um;
                let mut d = [0.0; 3];
                for k in 0..3 {
                    d[k] = target[k] - src_from[k];
                }
                let norm = (d[0] * d[0] + d[1] * d[1] + d[2] * d[2]).sqrt();
                let dir = if norm > 0.0 && norm.is_finite() {
                    d.map(|v| v / norm)
                } else {
                    [1.0, 0.0, 0.0]
                };
                (
                    [0, 1, 2].map(|k| from[k] + dir[k] * l_um),
                    r_cm / crate::cable::UM,
                    q as i64 + 1,
                )
            }
        };
        pos.push(xyz);
        let kind = if c.parent.is_none() { 1 } else { c.swc_type };
        let _ = writeln!(
            out,
            "{} {} {} {} {} {} {}",
            c.id + 1,
            kind,
            xyz[0],
            xyz[1],
            xyz[2],
            r_um,
            parent
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_atomically_and_refuses_inputs() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("out.txt");
        write_atomic(&p, b"one", &[]).unwrap();
        write_atomic(&p, b"two", &[]).unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"two");
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = std::fs::metadata(&p).unwrap().permissions().mode();
            assert_eq!(mode & 0o777, 0o644);
        }
        let e = write_atomic(&p, b"three", &[&p]).unwrap_err();
        assert!(matches!(e, WriteError::WouldOverwriteInput(_)));
        assert_eq!(std::fs::read(&p).unwrap(), b"two");
        let e = write_atomic(&dir.path().join("no/such/x"), b"x", &[]).unwrap_err();
        assert!(matches!(e, WriteError::NoFolder { .. }));
        // no temporary files left behind
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }
}
