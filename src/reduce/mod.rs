//! Reduction of a reconstructed cell to a strict binary compartment tree, exact at DC.
//!
//! # Pipeline ([`Reducer::new`], once per cell and parameter set)
//! 1. **Types filter.** Nodes whose SWC type is not in [`ReduceOptions::types`], and everything
//!    distal to them, are left out entirely: the result is the cell *without* them (their
//!    membrane and axial paths do not exist). The soma is always kept.
//! 2. **Cable network.** The kept tree goes through the cable engine
//!    ([`crate::cable::Network::build`] at DC): one node per point, each segment the exact DC
//!    two-port of a passive cable as a π network.
//! 3. **Sections to edges.** Every node that is neither the soma, a branch point nor a tip has
//!    degree 2 and is removed by Kron reduction (Schur complement of the conductance matrix):
//!    for x between a and b, S = g_a + g_b + G_x, the new edge is g_a·g_b/S and a, b gain the
//!    shunts g_a·G_x/S, g_b·G_x/S. All values stay ≥ 0 and the graph stays a tree. Each removed
//!    point maps to the section end that receives the larger share of a current injected at it
//!    (the Kron source split; by reciprocity, its voltage when that end is held at 1 V and the
//!    other end grounded).
//! 4. **Binarisation.** A node with m > 2 children becomes a cascade of m − 1 bifurcations
//!    through m − 2 *junction* compartments: the child presenting the largest admittance stays
//!    on the node, the others go down the cascade. A soma with a single stem gets a second
//!    child, a *soma leaf*. Junction links have the axial conductance of a cylinder of the
//!    node's radius (the thickest segment end meeting there; soma: the radius of a sphere of
//!    the soma's area, or the thickest stem without a soma area) and length
//!    [`ReduceOptions::junction_length_fraction`] × radius, g = π·r/(Ra·fraction), shared out
//!    over the m − 2 links of a cascade (each link is 1/(m − 2) of that length, so the whole
//!    cascade adds no more series resistance than one such piece). Each junction
//!    (and the soma leaf) takes an equal share of its node's leak and membrane area, so the
//!    total leak is unchanged. This is the only inexact step; its effect on the soma's DC input
//!    resistance is measured and reported ([`Report::junction_effect_relative`]).
//!    The result is the *maximal tree*: 2·(tips) − 1 compartments, strict binary.
//! 5. **Collapse order** (`order`). Greedy steps, each removing two compartments: a *cherry*
//!    (compartment whose two children are leaves) collapses by Kron-eliminating its leaves
//!    (c's shunt += g_x·G_x/(g_x + G_x)), or a compartment with one leaf child is *spliced* out
//!    with that leaf (its other child hangs from its parent through the Kron-reduced path). Both
//!    are exact at DC, so the subtree admittance D_k and the admittance P_k seen at k's parent
//!    without k's branch are the same at every budget for every compartment that remains, and a
//!    site served one compartment up changes its log attenuation to the soma by exactly
//!    ln(1 + P_x/g_x) (the morphoelectrotonic transform, Zador, Agmon-Snir & Segev 1995). The
//!    cost of a step is the increase in Σ_sites w·‖f_site − f_served‖² over the DC log attenuation
//!    and a timing coordinate (the log of each point's phase delay to the soma at 40 Hz, which
//!    follows its soma-EPSP time to peak), from per-node sums; a heap with lazy invalidation
//!    gives the whole order in O(N log N).
//!
//! # Budgets ([`Reducer::tree`])
//! The budget is the number of compartments of the final tree, the soma included. A strict
//! binary tree has an odd number of compartments, so an even request is rounded **down**
//! (and at least 1; above the maximum it is the maximum); [`ReducedTree::rounded_down`] says
//! so. Any budget replays the first (max − budget)/2 steps from the maximal tree: O(N).
//!
//! # Capacitance
//! With a uniform membrane every compartment gets C_k = τ·G_k (τ = Rm·Cm): the uniform voltage
//! is then an eigenvector of C⁻¹G with eigenvalue 1/τ, and since G − C/τ is the (positive
//! semi-definite) graph Laplacian of the axial links, it is the slowest mode: τ is exactly the
//! reduced tree's slowest time constant (Rall 1969's τ₀ for a uniform membrane).
//!
//! # Sites
//! Default sites ([`Sites::Default`]): every kept non-soma point that is not axon (type 2), each
//! weighted by the membrane area of its segment; if the kept cell has no such point, every kept
//! non-soma point. A site list ([`Sites::List`]) has weight 1 per entry (a repeated point counts
//! again). [`parse_sites_csv`] reads SWC ids or x,y,z positions (snapped to the nearest kept
//! point).

mod build;
mod capacitance;
pub use capacitance::FIT_MAX_COMPARTMENTS;
mod fine;
mod order;
mod sites;
mod slowest;
mod tree;
pub use slowest::slowest_time_constant_ms;
pub use tree::{DcMaps, Split};

pub use sites::{SiteSpec, parse_sites_csv};

use crate::cable::solve::TreeFactor;
use crate::cable::{C64, CableError, Network, Params};
use crate::morphology::{Flat, NONE};
use std::sync::OnceLock;

/// Why a reduction cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ReduceError {
    #[error(transparent)]
    Cable(#[from] CableError),
    #[error("the cell has no points")]
    Empty,
    #[error("{name} = {value} is outside the accepted range {lo} to {hi}")]
    OptionRange {
        name: &'static str,
        value: f64,
        lo: f64,
        hi: f64,
    },
    #[error("site {index} (node {node}) is not a point of the cell")]
    SiteOutOfRange { index: usize, node: u32 },
    #[error(
        "site {index} (line {line} of the site list) lies in a part of the cell left out by the type filter"
    )]
    SiteExcluded { index: usize, line: usize },
    #[error("site list, line {line}: {message}")]
    SiteFile { line: usize, message: String },
    #[error("the site list has no sites")]
    NoSites,
    #[error("the types to keep are empty")]
    NoTypes,
    #[error(
        "the point on line {line} is {nepers:.0} Np of DC attenuation from the soma: that part of the cell is electrically cut off (a segment far longer than its length constant); check the coordinates' units (--scale)"
    )]
    CutOff { line: usize, nepers: f64 },
}

/// Largest DC log attenuation to the soma (nepers) a reduction accepts: e^300 ≈ 10^130.
pub const MAX_LN_ATTENUATION: f64 = 300.0;

/// Which points are the synapse sites the reduction should disturb least.
#[derive(Debug, Clone, Default, PartialEq)]
pub enum Sites {
    /// Every kept non-soma, non-axon point, weighted by its segment's membrane area.
    #[default]
    Default,
    /// Listed sites: weight 1 each (see [`parse_sites_csv`]), or their own weight
    /// ([`SiteSpec::Weighted`], from a synapse table).
    List(Vec<SiteSpec>),
}

/// Options of a reduction (beyond the membrane [`Params`]).
#[derive(Debug, Clone, PartialEq)]
pub struct ReduceOptions {
    /// SWC type codes to keep (the soma is always kept); `None` keeps everything.
    pub types: Option<Vec<i32>>,
    /// The synapse sites.
    pub sites: Sites,
    /// Frequency for the input-impedance line of the report (Hz); default 100.
    pub freq_hz: f64,
    /// Junction link length as a fraction of the node's radius (default 1e-4; accepted
    /// 1e-9 to 1). Smaller is closer to exact and stiffer.
    pub junction_length_fraction: f64,
    /// How compartments get their capacitance.
    pub capacitance: CapacitanceRule,
    /// With `Timed`: split a site's input between two adjacent compartments where that answers
    /// more like the cell (default true; false gives each site one compartment).
    pub split_inputs: bool,
}

/// How the reduced tree's capacitances are chosen (the conductances are the same either way).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CapacitanceRule {
    /// Fitted to the full cell's transfer impedances to the soma: the soma's own
    /// EPSP and the sites' EPSPs follow the cell; the slowest time constant is close to, not
    /// exactly, Rm·Cm.
    Fitted,
    /// C = τ·G_leak (τ = Rm·Cm): the slowest time constant is exactly Rm·Cm, the transients are
    /// those of the DC-exact network with that membrane.
    Uniform,
    /// `Fitted`, then polished in the time domain on the sites' EPSP peaks and times to peak
    /// (`fidelity::Fidelity::polish`, which needs the full cell's time-domain run). The reducer
    /// itself builds the `Fitted` tree; the caller polishes it. The default.
    #[default]
    Timed,
}

impl Default for ReduceOptions {
    fn default() -> Self {
        ReduceOptions {
            types: None,
            sites: Sites::Default,
            freq_hz: 100.0,
            junction_length_fraction: 1e-4,
            capacitance: CapacitanceRule::default(),
            split_inputs: true,
        }
    }
}

/// What a compartment of the maximal tree stands for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    Soma,
    BranchPoint,
    Tip,
    /// Inserted to split a multifurcation into bifurcations.
    Junction,
    /// Inserted as the second child of a soma with a single stem.
    #[serde(rename = "soma_second_child")]
    SomaLeaf,
    /// A point inside a section, where the leaf standing for a collapsed subtree sits.
    SectionPoint,
}

/// One compartment of a reduced tree. Ids are parents-first (`parent < id`), the soma is 0.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Compartment {
    pub id: u32,
    /// Parent compartment; `None` at the root (the soma).
    pub parent: Option<u32>,
    /// The two children, or `None` for a leaf.
    #[serde(serialize_with = "children_list")]
    pub children: Option<[u32; 2]>,
    /// Axial conductance to the parent (nS); 0 at the root.
    pub g_axial_ns: f64,
    /// Leak conductance to ground (nS).
    pub g_leak_ns: f64,
    /// Capacitance (pF) = τ × leak.
    pub capacitance_pf: f64,
    /// Position of the point this compartment is named after (µm).
    pub position_um: [f64; 3],
    /// Membrane area of the points mapped to it (µm²).
    pub membrane_area_um2: f64,
    /// Number of sites mapped to it (with multiplicity).
    pub site_count: u32,
    /// Number of links to the root (root 0).
    pub depth: u32,
    /// SWC type code of the point it is named after (junctions and soma leaf: their node's).
    pub swc_type: i32,
    /// What the compartment is named after.
    pub role: Role,
    /// SWC line of the point it is named after (0 for junctions and the soma leaf).
    pub swc_line: usize,
}

fn children_list<S: serde::Serializer>(c: &Option<[u32; 2]>, s: S) -> Result<S::Ok, S::Error> {
    use serde::ser::SerializeSeq;
    let v: &[u32] = match c {
        Some(a) => a,
        None => &[],
    };
    let mut seq = s.serialize_seq(Some(v.len()))?;
    for x in v {
        seq.serialize_element(x)?;
    }
    seq.end()
}

/// One site of the reduction, as resolved against the cell.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SiteInfo {
    /// Node of the [`Flat`] arrays (0 = soma).
    pub node: u32,
    /// Morphology point it stands for (index into `Morphology::points`).
    pub point: u32,
    /// Weight in the collapse cost (membrane area µm² for default sites, 1 for listed ones).
    pub weight: f64,
    /// DC log attenuation to the soma in the full (kept) cell, ln(Z_kk/Z_ks) (nepers).
    pub ln_attenuation_full: f64,
}

/// A reduced tree at one budget.
#[derive(Debug, Clone)]
pub struct ReducedTree {
    pub compartments: Vec<Compartment>,
    /// Per morphology point (index into `Morphology::points`): its compartment, or `NONE`
    /// (u32::MAX) for points of other trees and points left out by the type filter.
    pub point_compartment: Vec<u32>,
    /// Per site of [`Reducer::sites`]: its compartment (when split: the one taking the larger
    /// part of its input).
    pub site_compartment: Vec<u32>,
    /// Per site: the part of its input given to a neighbouring compartment, if any; empty when no
    /// site is split (every rule but `timed`).
    pub site_split: Vec<Option<Split>>,
    /// Per morphology point: the same for the points that are sites; empty when no site is split.
    pub point_split: Vec<Option<Split>>,
    /// The budget asked for.
    pub requested: usize,
    /// True when an even request was rounded down to the odd number below.
    pub rounded_down: bool,
    /// True when the request exceeded the maximal tree (or was 0) and was clamped.
    pub clamped: bool,
    pub params: Params,
}

/// A point of the error-versus-budget curve.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct CurvePoint {
    pub compartments: usize,
    /// Weighted RMS over the sites of (ln A_site − ln A_compartment) at DC (nepers), where A is
    /// the attenuation to the soma. Exact on the maximal tree's network (junction links
    /// included).
    #[serde(rename = "attenuation_to_soma_error_rms_np")]
    pub rms_ln_attenuation_error: f64,
}

/// The exact DC feed-forward form of a reduced tree (for training code).
///
/// With Y_k the admittance of compartment k's subtree seen at k (Y_k = G_k + Σ_c w_c·Y_c) and
/// w_k = g_k/(g_k + Y_k) ∈ (0, 1), the soma voltage for injected currents I is
/// V_0 = (Σ_k I_k·Π_{links on k's path to the root} w)/Y_0 (the upward tree sweep of Hines
/// 1984 at DC).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct FeedForward {
    /// Per compartment: current-transfer ratio to the parent; `None` at the root.
    #[serde(rename = "current_ratio_to_parent")]
    pub w: Vec<Option<f64>>,
    /// Per compartment: subtree input conductance Y_k (nS).
    pub subtree_conductance_ns: Vec<f64>,
    /// Y_0: the root's input conductance (nS).
    pub root_input_conductance_ns: f64,
    /// Compartment ids grouped by depth (layer 0 = the root).
    #[serde(rename = "compartments_by_depth")]
    pub layers: Vec<Vec<u32>>,
}

/// Summary of one error statistic over sites.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Stats {
    pub median: f64,
    pub p95: f64,
    pub max: f64,
}

/// What was lost: measured after the reduction on the reduced tree's own network.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Report {
    pub compartments_requested: usize,
    pub compartments: usize,
    pub max_compartments: usize,
    /// The even request was rounded down.
    pub rounded_down: bool,
    /// The request was 0 or above the maximum and was clamped.
    pub clamped: bool,
    pub points_kept: usize,
    pub points_left_out: usize,
    pub junctions: usize,
    /// Relative change of the soma DC input resistance caused by the junction links (maximal
    /// tree versus the full kept cell).
    pub junction_effect_relative: f64,
    pub soma_input_resistance_dc_full_mohm: f64,
    pub soma_input_resistance_dc_reduced_mohm: f64,
    pub soma_input_resistance_dc_relative_error: f64,
    #[serde(rename = "impedance_freq_hz")]
    pub freq_hz: f64,
    /// |Z_in| of the soma at `freq_hz`, full kept cell (MΩ).
    pub soma_input_impedance_full_mohm: f64,
    /// |Z_in| of the soma at `freq_hz`, reduced tree with its capacitances (MΩ).
    pub soma_input_impedance_reduced_mohm: f64,
    /// |Z_red − Z_full|/|Z_full| at `freq_hz` (complex difference).
    pub soma_input_impedance_relative_error: f64,
    /// The membrane time constant Rm·Cm, the full cell's slowest (ms).
    pub tau_ms: f64,
    /// The reduced tree's slowest time constant (ms): Rm·Cm exactly with uniform capacitances,
    /// within 5 % of it with fitted ones, within ~10 % once polished (`Timed`).
    pub slowest_time_constant_ms: f64,
    pub sites: usize,
    /// |ln A_site(full) − ln A_compartment(reduced)| over the sites, DC (nepers).
    #[serde(rename = "attenuation_to_soma_error_np")]
    pub ln_attenuation_error: Stats,
    /// Weighted RMS of the same, as in the curve.
    #[serde(rename = "attenuation_to_soma_error_weighted_rms_np")]
    pub ln_attenuation_error_weighted_rms: f64,
    /// The predicted curve over every odd budget.
    pub error_curve: Vec<CurvePoint>,
}

/// The binarised fine network and the collapse order of one cell; every budget is a replay.
#[derive(Debug)]
pub struct Reducer {
    params: Params,
    opts: ReduceOptions,
    fine: fine::Fine,
    sk: order::Skeleton,
    max_compartments: usize,
    sites: Vec<SiteInfo>,
    /// Per site: its fine node and weight.
    site_fine: Vec<(u32, f64)>,
    /// The kept cell as flat arrays (for the frequency line of the report).
    kept: Flat,
    r_in_full_ohm: f64,
    junction_effect: f64,
    junctions: usize,
    points_left_out: usize,
    z_full_freq: OnceLock<Result<C64, CableError>>,
    /// The full cell's ln Z_0k at the capacitance fit's frequencies (per kept-cell node).
    full_lz: Vec<Vec<C64>>,
    /// `full_lz` at the serving frequencies, indexed by fine node.
    serve_lz: OnceLock<Vec<Vec<C64>>>,
    /// Per site, what the capacitance fit sums (weight, and weighted ln|Z| and 1/phase at each
    /// fit frequency).
    site_sums: OnceLock<Vec<capacitance::SiteSums>>,
}

/// Checks the options and parameters once.
fn validate(flat: &Flat, params: &Params, opts: &ReduceOptions) -> Result<(), ReduceError> {
    params.validate(opts.freq_hz)?;
    let fr = opts.junction_length_fraction;
    if !(fr.is_finite() && (1e-9..=1.0).contains(&fr)) {
        return Err(ReduceError::OptionRange {
            name: "junction length fraction",
            value: fr,
            lo: 1e-9,
            hi: 1.0,
        });
    }
    if flat.is_empty() {
        return Err(ReduceError::Empty);
    }
    if matches!(&opts.types, Some(t) if t.is_empty()) {
        return Err(ReduceError::NoTypes);
    }
    Ok(())
}

/// The sites as (kept node, weight): default sites or the resolved list.
fn resolve_sites(
    kept: &Flat,
    old_to_kept: &[u32],
    sites: &Sites,
) -> Result<Vec<(u32, f64)>, ReduceError> {
    let n = kept.len();
    match sites {
        Sites::Default => {
            let pick = |axon_ok: bool| -> Vec<(u32, f64)> {
                (1..n)
                    .filter(|&k| axon_ok || kept.kind[k] != crate::morphology::kind::AXON)
                    .map(|k| (k as u32, kept.segment_area(k)))
                    .collect()
            };
            let s = pick(false);
            Ok(if s.is_empty() { pick(true) } else { s })
        }
        Sites::List(list) => {
            if list.is_empty() {
                return Err(ReduceError::NoSites);
            }
            let mut out = Vec::with_capacity(list.len());
            for (i, s) in list.iter().enumerate() {
                let (node, line, weight) = match *s {
                    SiteSpec::Node { node, line } => (node, line, 1.0),
                    SiteSpec::Weighted { node, weight, line } => (node, line, weight),
                    SiteSpec::Position { pos, .. } => {
                        out.push((nearest(&kept.pos, pos), 1.0));
                        continue;
                    }
                };
                if !(weight.is_finite() && weight > 0.0) {
                    return Err(ReduceError::OptionRange {
                        name: "site weight",
                        value: weight,
                        lo: f64::MIN_POSITIVE,
                        hi: f64::MAX,
                    });
                }
                if node as usize >= old_to_kept.len() {
                    return Err(ReduceError::SiteOutOfRange { index: i, node });
                }
                let m = old_to_kept[node as usize];
                if m == NONE {
                    return Err(ReduceError::SiteExcluded { index: i, line });
                }
                out.push((m, weight));
            }
            Ok(out)
        }
    }
}

impl Reducer {
    /// Builds the binarised fine network of the cell and the whole collapse order
    /// (O(N log N)). See the module documentation for each stage.
    pub fn new(flat: &Flat, params: &Params, opts: &ReduceOptions) -> Result<Reducer, ReduceError> {
        validate(flat, params, opts)?;
        let (kept, old_to_kept) = fine::filter_types(flat, opts);
        let points_left_out = flat.len() - kept.len();
        let fine = fine::build(&kept, params, opts.junction_length_fraction)?;
        // A part of the cell hundreds of length constants from the soma (a segment far longer
        // than its length constant, usually coordinates in the wrong units) has no meaningful
        // reduction, and its numbers would leave the range of f64: refuse it by name.
        if let Some(k) = (1..kept.len()).find(|&k| {
            fine.flat_ln_att[k].is_nan() || fine.flat_ln_att[k].abs() > MAX_LN_ATTENUATION
        }) {
            return Err(ReduceError::CutOff {
                line: kept.line[k],
                nepers: fine.flat_ln_att[k],
            });
        }
        let site_list = resolve_sites(&kept, &old_to_kept, &opts.sites)?;
        let site_fine: Vec<(u32, f64)> = site_list
            .iter()
            .map(|&(s, w)| (fine.of_flat[s as usize], w))
            .collect();
        let sites = site_list
            .iter()
            .map(|&(s, w)| {
                let point = kept.node_point[s as usize];
                SiteInfo {
                    node: flat.point_node[point as usize],
                    point,
                    weight: w,
                    ln_attenuation_full: fine.flat_ln_att[s as usize],
                }
            })
            .collect();
        let full_lz = capacitance::full_log_transfer(&kept, params);
        let lt = order::timing_coordinate(
            &fine,
            full_lz.get(capacitance::TIMING_HZ_INDEX).map(Vec::as_slice),
            capacitance::FIT_HZ[capacitance::TIMING_HZ_INDEX],
        );
        let mut sk = order::skeleton(&fine, &site_fine, &lt);
        order::collapse_order(&fine, &mut sk, &lt);
        let max_compartments = sk.retained.iter().filter(|&&r| r).count();
        let junctions = fine
            .role
            .iter()
            .filter(|r| matches!(r, Role::Junction | Role::SomaLeaf))
            .count();
        let r_in_full_ohm = fine.r_in_full_ohm;
        Ok(Reducer {
            params: *params,
            opts: opts.clone(),
            junction_effect: (1.0 / fine.d[0]) / r_in_full_ohm - 1.0,
            fine,
            sk,
            max_compartments,
            sites,
            site_fine,
            kept,
            r_in_full_ohm,
            junctions,
            points_left_out,
            z_full_freq: OnceLock::new(),
            full_lz,
            serve_lz: OnceLock::new(),
            site_sums: OnceLock::new(),
        })
    }
    /// Compartments of the maximal tree (odd; 2·tips − 1 plus one for a single-stem soma).
    pub fn max_compartments(&self) -> usize {
        self.max_compartments
    }

    /// The budget actually used for a request: odd, between 1 and the maximum.
    pub fn effective_budget(&self, requested: usize) -> usize {
        let b = requested.clamp(1, self.max_compartments());
        if b.is_multiple_of(2) { b - 1 } else { b }
    }

    /// The predicted error for every odd budget, ascending: (compartments, weighted RMS of the
    /// change in DC log attenuation to the soma over the sites, nepers).
    pub fn error_curve(&self) -> Vec<(usize, f64)> {
        self.sk
            .curve
            .iter()
            .map(|c| (c.compartments, c.rms_ln_attenuation_error))
            .collect()
    }

    /// The same curve as [`CurvePoint`]s.
    pub fn curve_points(&self) -> &[CurvePoint] {
        &self.sk.curve
    }

    /// The sites, in the order of [`ReducedTree::site_compartment`].
    pub fn sites(&self) -> &[SiteInfo] {
        &self.sites
    }

    pub fn params(&self) -> &Params {
        &self.params
    }

    pub fn options(&self) -> &ReduceOptions {
        &self.opts
    }

    /// Number of junction compartments (and soma leaves) in the maximal tree.
    pub fn junctions(&self) -> usize {
        self.junctions
    }

    /// Relative change of the soma DC input resistance caused by the junction links.
    pub fn junction_effect_relative(&self) -> f64 {
        self.junction_effect
    }

    /// Soma DC input resistance of the full kept cell from the cable engine (Ω).
    pub fn full_input_resistance_ohm(&self) -> f64 {
        self.r_in_full_ohm
    }

    /// Per site: the membrane area its point carries in the reduction (µm²; a point with
    /// junctions below it shares its segment's area with them).
    pub fn site_membrane_areas(&self) -> Vec<f64> {
        self.site_fine
            .iter()
            .map(|&(x, _)| self.fine.area[x as usize])
            .collect()
    }

    /// The kept cell as flat arrays (types filter applied).
    pub fn kept_flat(&self) -> &Flat {
        &self.kept
    }

    /// The reduced tree with `budget` compartments (see [`Reducer::effective_budget`]): replays
    /// the first (max − budget)/2 collapses of the order, places each leaf, and Kron-reduces the
    /// fine network onto the kept nodes; O(N).
    pub fn tree(&self, budget: usize) -> ReducedTree {
        // on a worker of the thread pool: its parallel steps (the serving, the fit's
        // frequencies) are then joins inside the pool, and no idle worker spins against it
        rayon::scope(|_| self.build_tree(budget))
    }

    fn build_tree(&self, budget: usize) -> ReducedTree {
        let nm = self.max_compartments();
        let b = self.effective_budget(budget);
        let (fine, sk) = (&self.fine, &self.sk);
        let rp = build::replay(sk, (nm - b) / 2);
        let place = build::place_leaves(fine, sk, &rp, &self.site_fine);
        let mut keep = vec![false; fine.len()];
        for &k in &sk.rnodes {
            let k = k as usize;
            if rp.alive[k] {
                let placed = rp.leaf[k] && place[k] != NONE;
                keep[if placed { place[k] as usize } else { k }] = true;
            }
        }
        let dynamics: Vec<&[C64]> = self
            .serve_log_transfer()
            .iter()
            .map(Vec::as_slice)
            .collect();
        let kron = build::kron(fine, &keep, &dynamics);
        let m = kron.node.len();
        let site_compartment: Vec<u32> = self
            .site_fine
            .iter()
            .map(|&(x, _)| kron.serves[x as usize])
            .collect();
        // the fit and the per-node bookkeeping it does not need, side by side
        let (cap, (area, count, point_compartment)) = rayon::join(
            || capacitance::assign(self, &kron, &site_compartment),
            || self.areas_counts_points(&kron, &site_compartment),
        );
        // children per compartment, in id order (a count and the first two: strict binary)
        let mut kids = vec![(0usize, [0u32; 2]); m];
        for c in 1..m {
            let (count, first) = &mut kids[kron.parent[c] as usize];
            if *count < 2 {
                first[*count] = c as u32;
            }
            *count += 1;
        }
        let mut comps: Vec<Compartment> = Vec::with_capacity(m);
        for c in 0..m {
            let x = kron.node[c] as usize;
            let k = fine.flat_node[x] as usize;
            let parent = (c > 0).then_some(kron.parent[c]);
            let role = fine.role[x];
            let named = !matches!(role, Role::Junction | Role::SomaLeaf);
            comps.push(Compartment {
                id: c as u32,
                parent,
                children: (kids[c].0 == 2).then_some(kids[c].1),
                g_axial_ns: kron.g[c] * 1e9,
                g_leak_ns: kron.shunt[c] * 1e9,
                capacitance_pf: cap[c] * 1e12,
                position_um: self.kept.pos[k],
                membrane_area_um2: area[c],
                site_count: count[c],
                depth: parent.map_or(0, |p| comps[p as usize].depth + 1),
                role,
                swc_line: if named { self.kept.line[k] } else { 0 },
                swc_type: self.kept.kind[k],
            });
        }
        ReducedTree {
            compartments: comps,
            point_compartment,
            site_compartment,
            site_split: Vec::new(),
            point_split: Vec::new(),
            requested: budget,
            rounded_down: budget.is_multiple_of(2) && budget <= nm && budget >= 1,
            clamped: budget == 0 || budget > nm,
            params: self.params,
        }
    }

    /// Per compartment of a Kron-reduced tree: its membrane area (µm², the fine nodes it serves)
    /// and its number of sites; per point of the kept cell, its compartment. Three independent
    /// passes, side by side.
    fn areas_counts_points(
        &self,
        kron: &build::Kept,
        site_compartment: &[u32],
    ) -> (Vec<f64>, Vec<u32>, Vec<u32>) {
        let m = kron.node.len();
        let (area, (count, points)) = rayon::join(
            || build::compartment_areas(&kron.serves, &self.fine.area, m),
            || {
                rayon::join(
                    || build::site_counts(site_compartment, m),
                    || self.point_compartments(kron),
                )
            },
        );
        (area, count, points)
    }

    /// The compartment of every point of the kept cell (NONE for points without a node).
    fn point_compartments(&self, kron: &build::Kept) -> Vec<u32> {
        let fine = &self.fine;
        self.kept
            .point_node
            .iter()
            .map(|&k| {
                if k == NONE {
                    NONE
                } else {
                    kron.serves[fine.of_flat[k as usize] as usize]
                }
            })
            .collect()
    }

    /// The full cell's complex log transfer to the soma at the fit frequencies.
    fn full_log_transfer(&self) -> &[Vec<C64>] {
        &self.full_lz
    }

    /// Per site, what the fit sums per compartment (see `capacitance::site_sums`), computed
    /// once.
    fn site_sums(&self) -> &[capacitance::SiteSums] {
        self.site_sums.get_or_init(|| capacitance::site_sums(self))
    }

    /// The full cell's complex log transfer to the soma at the serving frequencies, per fine
    /// node (junctions take their point's), computed once.
    fn serve_log_transfer(&self) -> &[Vec<C64>] {
        self.serve_lz.get_or_init(|| {
            let lz = self.full_log_transfer();
            capacitance::SERVE_HZ_INDEX
                .iter()
                .filter_map(|&i| lz.get(i))
                .filter(|v| !v.is_empty())
                .map(|v| self.fine.flat_node.iter().map(|&k| v[k as usize]).collect())
                .collect()
        })
    }

    /// Soma input impedance of the full kept cell at the options' frequency (Ω), computed once.
    pub fn full_input_impedance_at_freq(&self) -> Result<C64, ReduceError> {
        self.z_full_freq
            .get_or_init(|| {
                let net = Network::build(&self.kept, &self.params, self.opts.freq_hz)?;
                Ok(C64::new(1.0, 0.0)
                    / TreeFactor::new(&net.parent, &net.g, &net.shunt).root_admittance())
            })
            .clone()
            .map_err(ReduceError::from)
    }

    /// Measures what `tree` lost (see [`Report`]).
    pub fn report(&self, tree: &ReducedTree) -> Result<Report, ReduceError> {
        let r_red = tree.soma_input_resistance_ohm();
        let z_full = self.full_input_impedance_at_freq()?;
        let z_red = tree.soma_input_impedance(self.opts.freq_hz);
        let ln_red = tree.site_ln_attenuations_dc();
        let mut errs: Vec<f64> = Vec::with_capacity(self.sites.len());
        let mut wsum = 0.0;
        let mut w2 = 0.0;
        for (s, &red) in self.sites.iter().zip(&ln_red) {
            let e = s.ln_attenuation_full - red;
            errs.push(e.abs());
            wsum += s.weight;
            w2 += s.weight * e * e;
        }
        errs.sort_by(f64::total_cmp);
        let q = |f: f64| -> f64 {
            if errs.is_empty() {
                return 0.0;
            }
            // nearest-rank quantile (common practice, no source)
            let r = ((f * errs.len() as f64).ceil() as usize).clamp(1, errs.len());
            errs[r - 1]
        };
        Ok(Report {
            compartments_requested: tree.requested,
            compartments: tree.compartments.len(),
            max_compartments: self.max_compartments(),
            rounded_down: tree.rounded_down,
            clamped: tree.clamped,
            points_kept: self.kept.len(),
            points_left_out: self.points_left_out,
            junctions: self.junctions,
            junction_effect_relative: self.junction_effect,
            soma_input_resistance_dc_full_mohm: self.r_in_full_ohm / 1e6,
            soma_input_resistance_dc_reduced_mohm: r_red / 1e6,
            soma_input_resistance_dc_relative_error: (r_red - self.r_in_full_ohm).abs()
                / self.r_in_full_ohm,
            freq_hz: self.opts.freq_hz,
            soma_input_impedance_full_mohm: z_full.norm() / 1e6,
            soma_input_impedance_reduced_mohm: z_red.norm() / 1e6,
            soma_input_impedance_relative_error: (z_red - z_full).norm() / z_full.norm(),
            tau_ms: self.params.tau_ms(),
            slowest_time_constant_ms: tree.slowest_time_constant_ms(),
            sites: self.sites.len(),
            ln_attenuation_error: Stats {
                median: q(0.5),
                p95: q(0.95),
                max: errs.last().copied().unwrap_or(0.0),
            },
            ln_attenuation_error_weighted_rms: if wsum > 0.0 { (w2 / wsum).sqrt() } else { 0.0 },
            error_curve: self.sk.curve.clone(),
        })
    }
}

/// Index of the position nearest to `p` (brute force; site lists are short).
fn nearest(pos: &[[f64; 3]], p: [f64; 3]) -> u32 {
    let mut best = (f64::INFINITY, 0u32);
    for (k, q) in pos.iter().enumerate() {
        let d = (q[0] - p[0]).powi(2) + (q[1] - p[1]).powi(2) + (q[2] - p[2]).powi(2);
        if d < best.0 {
            best = (d, k as u32);
        }
    }
    best.1
}

#[cfg(test)]
mod tests;
