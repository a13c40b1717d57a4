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
//! 5. **Collapse order.** A *cherry* (compartment whose two children are leaves) collapses by
//!    Kron-eliminating its two leaf children: for leaf x (shunt G_x) on c by g_x,
//!    c's shunt += g_x·G_x/(g_x + G_x). This is exact at DC, so the subtree admittance D_k and
//!    the admittance P_k seen at k's parent without k's branch are the same at every budget
//!    for every compartment that remains. Hence a site moved from leaf x to its parent c changes
//!    its log attenuation to the soma by exactly e_x = ln(1 + P_x/g_x) (A_x = A_c·(g_x + P_x)/g_x
//!    at DC; the morphoelectrotonic transform, Zador, Agmon-Snir & Segev 1995), and errors only
//!    add. The collapse cost is the increase in Σ_sites w·(ln A_site − ln A_compartment)², which
//!    is known exactly from per-compartment sums (W, Σw·b, Σw·b²) once both children are
//!    leaves and never changes afterwards, so one binary heap gives the whole greedy order in
//!    O(N log N) with no re-keying.
//!
//! # Budgets ([`Reducer::tree`])
//! The budget is the number of compartments of the final tree, the soma included. A strict
//! binary tree has an odd number of compartments, so an even request is rounded **down**
//! (and at least 1; above the maximum it is the maximum); [`ReducedTree::rounded_down`] says
//! so. Any budget replays the first (max − budget)/2 collapses from the maximal tree: O(N).
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

mod sites;

pub use sites::{SiteSpec, parse_sites_csv};

use crate::cable::{C64, CableError, Maps, Network, Params};
use crate::morphology::{Flat, NONE};
use std::cmp::Ordering;
use std::collections::BinaryHeap;
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
        "the point on line {line} is {nepers:.0} nepers of DC attenuation from the soma: that part of the cell is electrically cut off (a segment far longer than its length constant); check the coordinates' units (--scale)"
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
}

impl Default for ReduceOptions {
    fn default() -> Self {
        ReduceOptions {
            types: None,
            sites: Sites::Default,
            freq_hz: 100.0,
            junction_length_fraction: 1e-4,
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
    SomaLeaf,
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
    /// Per site of [`Reducer::sites`]: its compartment.
    pub site_compartment: Vec<u32>,
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
    pub w: Vec<Option<f64>>,
    /// Per compartment: subtree input conductance Y_k (nS).
    pub subtree_conductance_ns: Vec<f64>,
    /// Y_0: the root's input conductance (nS).
    pub root_input_conductance_ns: f64,
    /// Compartment ids grouped by depth (layer 0 = the root).
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
    pub freq_hz: f64,
    /// |Z_in| of the soma at `freq_hz`, full kept cell (MΩ).
    pub soma_input_impedance_full_mohm: f64,
    /// |Z_in| of the soma at `freq_hz`, reduced tree with C = τ·G (MΩ).
    pub soma_input_impedance_reduced_mohm: f64,
    /// |Z_red − Z_full|/|Z_full| at `freq_hz` (complex difference).
    pub soma_input_impedance_relative_error: f64,
    pub tau_ms: f64,
    pub sites: usize,
    /// |ln A_site(full) − ln A_compartment(reduced)| over the sites, DC (nepers).
    pub ln_attenuation_error: Stats,
    /// Weighted RMS of the same, as in the curve.
    pub ln_attenuation_error_weighted_rms: f64,
    /// The predicted curve over every odd budget.
    pub error_curve: Vec<CurvePoint>,
}

/// The maximal tree and the collapse order of one cell; every budget is a replay.
#[derive(Debug)]
pub struct Reducer {
    params: Params,
    opts: ReduceOptions,
    /// Maximal tree, parents-first.
    max: Tree,
    kids: Vec<Option<[u32; 2]>>,
    site_count: Vec<u32>,
    /// Cherry parents in collapse order.
    order: Vec<u32>,
    curve: Vec<CurvePoint>,
    /// Per morphology point: max-tree node (NONE outside).
    point_max: Vec<u32>,
    sites: Vec<SiteInfo>,
    site_max: Vec<u32>,
    /// The kept cell as flat arrays (for the frequency line of the report).
    kept: Flat,
    r_in_full_ohm: f64,
    junction_effect: f64,
    junctions: usize,
    points_left_out: usize,
    z_full_freq: OnceLock<Result<C64, CableError>>,
}

/// f64 with a total order, for the heap.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Key(f64, u32);
impl Eq for Key {}
impl PartialOrd for Key {
    fn partial_cmp(&self, o: &Self) -> Option<Ordering> {
        Some(self.cmp(o))
    }
}
impl Ord for Key {
    // reversed: BinaryHeap is a max-heap, we pop the smallest cost (ties: smallest id)
    fn cmp(&self, o: &Self) -> Ordering {
        o.0.total_cmp(&self.0).then(o.1.cmp(&self.1))
    }
}

/// Real DC sweep of a parents-first tree: subtree admittances D, the admittance P at each
/// node's parent without its branch, and U = g·P/(g + P) (Hines 1984; Koch & Poggio 1985).
/// P_k = S_p + U_p + Σ_{siblings c} t_c is summed from its terms, never as D_p − t_k, so nothing
/// cancels: when the upward sweep (k descending) reaches k, D_p holds S_p and the branches of
/// k's later siblings; the downward sweep adds the earlier siblings and U_p.
fn dc_sweep(parent: &[u32], g: &[f64], shunt: &[f64]) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let n = parent.len();
    let mut d = shunt.to_vec();
    let mut p = vec![0.0; n];
    let mut t = vec![0.0; n];
    for k in (1..n).rev() {
        let q = parent[k] as usize;
        t[k] = g[k] * d[k] / (g[k] + d[k]);
        p[k] = d[q];
        d[q] += t[k];
    }
    let mut pre = vec![0.0; n];
    let mut u = vec![0.0; n];
    for k in 1..n {
        let q = parent[k] as usize;
        let pk = p[k] + pre[q] + u[q];
        p[k] = pk;
        pre[q] += t[k];
        u[k] = g[k] * pk / (g[k] + pk);
    }
    (d, p, u)
}

impl Reducer {
    /// Builds the maximal strict binary tree of the cell and the whole collapse order
    /// (O(N log N)). See the module documentation for each step.
    pub fn new(flat: &Flat, params: &Params, opts: &ReduceOptions) -> Result<Reducer, ReduceError> {
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
        // 1. types filter
        let n0 = flat.len();
        let mut keep = vec![false; n0];
        keep[0] = true;
        for k in 1..n0 {
            keep[k] = keep[flat.parent[k] as usize]
                && opts
                    .types
                    .as_ref()
                    .is_none_or(|t| t.contains(&flat.kind[k]));
        }
        let (kept, old_to_kept) = flat.restrict(&keep);
        let points_left_out = n0 - kept.len();
        // 2. the cable engine's DC network of the kept cell
        let net = Network::build(&kept, params, 0.0)?;
        let n = kept.len();
        let g_full: Vec<f64> = net.g.iter().map(|z| z.re).collect();
        let maps = Maps::new(&net);
        let r_in_full_ohm = 1.0 / maps.d[0].re;
        // DC log attenuation to the soma of every node: ln(Z_kk/Z_k0)
        let zs = maps.soma_transfer(&net.parent);
        let ln_att: Vec<f64> = (0..n)
            .map(|k| {
                if k == 0 {
                    0.0
                } else {
                    let zkk = 1.0 / (maps.d[k].re + maps.u[k].re);
                    (zkk / zs[k].re).ln()
                }
            })
            .collect();
        // A part of the cell hundreds of length constants from the soma (a segment far longer
        // than its length constant, usually coordinates in the wrong units) has no meaningful
        // reduction, and its numbers would leave the range of f64: refuse it by name.
        if let Some(k) =
            (1..n).find(|&k| ln_att[k].is_nan() || ln_att[k].abs() > MAX_LN_ATTENUATION)
        {
            return Err(ReduceError::CutOff {
                line: kept.line[k],
                nepers: ln_att[k],
            });
        }
        // sites (kept-node index, weight)
        let site_list: Vec<(u32, f64)> = match &opts.sites {
            Sites::Default => {
                let pick = |axon_ok: bool| -> Vec<(u32, f64)> {
                    (1..n)
                        .filter(|&k| axon_ok || kept.kind[k] != crate::morphology::kind::AXON)
                        .map(|k| (k as u32, kept.segment_area(k)))
                        .collect()
                };
                let s = pick(false);
                if s.is_empty() { pick(true) } else { s }
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
                    if node as usize >= n0 {
                        return Err(ReduceError::SiteOutOfRange { index: i, node });
                    }
                    let m = old_to_kept[node as usize];
                    if m == NONE {
                        return Err(ReduceError::SiteExcluded { index: i, line });
                    }
                    out.push((m, weight));
                }
                out
            }
        };
        // 3. sections to edges
        let mut nchild = vec![0u32; n];
        for k in 1..n {
            nchild[kept.parent[k] as usize] += 1;
        }
        let retained: Vec<bool> = (0..n).map(|k| k == 0 || nchild[k] != 1).collect();
        let mut sh: Vec<f64> = net.shunt.iter().map(|z| z.re).collect();
        let mut gsec = vec![0.0; n]; // edge from a retained node to its retained parent
        let mut rparent = vec![NONE; n];
        let mut node_to_ret: Vec<u32> = (0..n as u32).collect();
        let mut path: Vec<usize> = Vec::new();
        let mut cc: Vec<f64> = Vec::new();
        let mut dd: Vec<f64> = Vec::new();
        for b in 1..n {
            if !retained[b] {
                continue;
            }
            path.clear();
            let mut x = kept.parent[b] as usize;
            while !retained[x] {
                path.push(x);
                x = kept.parent[x] as usize;
            }
            let a = x;
            rparent[b] = a as u32;
            path.reverse(); // x1 … x_{m−1}, top to bottom
            if path.is_empty() {
                gsec[b] = g_full[b];
                continue;
            }
            cc.clear();
            dd.clear();
            let mut g_run = g_full[path[0]];
            for i in 0..path.len() {
                let xi = path[i];
                let below = if i + 1 < path.len() { path[i + 1] } else { b };
                let g_dn = g_full[below];
                let gx = sh[xi];
                // Kron reduction of a degree-2 node
                let s = g_run + g_dn + gx;
                sh[a] += g_run * gx / s;
                sh[below] += g_dn * gx / s;
                cc.push(g_run / s);
                dd.push(g_dn / s);
                g_run = g_run * g_dn / s;
            }
            gsec[b] = g_run;
            // back-substitution: share to a (v) and to b (u) of a current injected at x_i
            let mut v = 0.0;
            let mut u = 1.0;
            for i in (0..path.len()).rev() {
                v = cc[i] + dd[i] * v;
                u *= dd[i];
                node_to_ret[path[i]] = if v >= u { a as u32 } else { b as u32 };
            }
        }
        // areas per retained node
        let mut area_ret = vec![0.0; n];
        area_ret[0] = kept.soma_area_um2;
        for k in 1..n {
            area_ret[node_to_ret[k] as usize] += kept.segment_area(k);
        }
        // 4. binarisation, parents-first
        let soma_radius_um = {
            let r = (kept.soma_area_um2 / (4.0 * std::f64::consts::PI)).sqrt();
            if r > 0.0 && r.is_finite() {
                r
            } else {
                (1..n)
                    .filter(|&k| kept.parent[k] == 0)
                    .map(|k| kept.r_prox_um[k])
                    .fold(0.0, f64::max)
                    .max(1.0)
            }
        };
        // the radius of a branch point: the thickest process meeting there (its own segment's
        // distal end, or a child segment's proximal end)
        let mut node_r = kept.r_dist_um.clone();
        for k in 1..n {
            let q = kept.parent[k] as usize;
            node_r[q] = node_r[q].max(kept.r_prox_um[k]);
        }
        let junction_g = |k: usize| -> f64 {
            // cylinder of radius r and length fraction·r: π r²/(Ra·fraction·r) (Ohm's law for
            // a uniform core conductor)
            let r_um = if k == 0 { soma_radius_um } else { node_r[k] };
            std::f64::consts::PI * r_um * crate::cable::UM / (params.ra_ohm_cm * fr)
        };
        let mut kids_ret: Vec<Vec<u32>> = vec![Vec::new(); n];
        for b in 1..n {
            if retained[b] {
                kids_ret[rparent[b] as usize].push(b as u32);
            }
        }
        // what each child branch presents to its parent (for the cascade order)
        let branch_adm = {
            // D of the kept network at b seen through the section edge
            let d: Vec<f64> = maps.d.iter().map(|z| z.re).collect();
            let gs = &gsec;
            move |b: usize| gs[b] * d[b] / (gs[b] + d[b])
        };
        let mut t = Tree::default();
        let mut ret_to_max = vec![NONE; n];
        let mut attach = vec![NONE; n]; // retained child → its max-tree parent
        let mut junctions = 0usize;
        for k in 0..n {
            if !retained[k] {
                continue;
            }
            let me = t.len() as u32;
            let role = if k == 0 {
                Role::Soma
            } else if nchild[k] == 0 {
                Role::Tip
            } else {
                Role::BranchPoint
            };
            t.push(
                if k == 0 { NONE } else { attach[k] },
                if k == 0 { 0.0 } else { gsec[k] },
                sh[k],
                area_ret[k],
                kept.pos[k],
                role,
                kept.line[k],
                kept.kind[k],
            );
            ret_to_max[k] = me;
            let mut ch = std::mem::take(&mut kids_ret[k]);
            match ch.len() {
                0 => {}
                1 => {
                    // soma with one stem: a soma leaf takes half the soma's leak and area
                    attach[ch[0] as usize] = me;
                    let gj = junction_g(k);
                    let half_sh = t.shunt[me as usize] / 2.0;
                    let half_area = t.area[me as usize] / 2.0;
                    t.shunt[me as usize] = half_sh;
                    t.area[me as usize] = half_area;
                    t.push(
                        me,
                        gj,
                        half_sh,
                        half_area,
                        kept.pos[k],
                        Role::SomaLeaf,
                        0,
                        kept.kind[k],
                    );
                    junctions += 1;
                }
                2 => {
                    for &c in &ch {
                        attach[c as usize] = me;
                    }
                }
                m => {
                    ch.sort_by(|&x, &y| {
                        branch_adm(y as usize)
                            .total_cmp(&branch_adm(x as usize))
                            .then(x.cmp(&y))
                    });
                    // the m − 2 links of the cascade together make one piece of length
                    // fraction·r, so a long cascade adds no more series resistance than one link
                    let gj = junction_g(k) * (m - 2) as f64;
                    let share_sh = t.shunt[me as usize] / (m - 1) as f64;
                    let share_area = t.area[me as usize] / (m - 1) as f64;
                    t.shunt[me as usize] = share_sh;
                    t.area[me as usize] = share_area;
                    attach[ch[0] as usize] = me;
                    let mut up = me;
                    for i in 1..m - 1 {
                        let j = t.len() as u32;
                        t.push(
                            up,
                            gj,
                            share_sh,
                            share_area,
                            kept.pos[k],
                            Role::Junction,
                            0,
                            kept.kind[k],
                        );
                        junctions += 1;
                        attach[ch[i] as usize] = j;
                        up = j;
                    }
                    attach[ch[m - 1] as usize] = up;
                }
            }
        }
        let nm = t.len();
        let mut kids: Vec<Option<[u32; 2]>> = vec![None; nm];
        {
            let mut first = vec![NONE; nm];
            for k in 1..nm {
                let p = t.parent[k] as usize;
                if first[p] == NONE {
                    first[p] = k as u32;
                } else {
                    kids[p] = Some([first[p], k as u32]);
                }
            }
        }
        // maps of points and sites to the maximal tree
        let point_max: Vec<u32> = kept
            .point_node
            .iter()
            .map(|&k| {
                if k == NONE {
                    NONE
                } else {
                    ret_to_max[node_to_ret[k as usize] as usize]
                }
            })
            .collect();
        let mut w_sum = vec![0.0; nm];
        let mut b_sum = vec![0.0; nm];
        let mut b2_sum = vec![0.0; nm];
        let mut site_count = vec![0u32; nm];
        let mut sites = Vec::with_capacity(site_list.len());
        let mut site_max = Vec::with_capacity(site_list.len());
        for &(s, w) in &site_list {
            let r = node_to_ret[s as usize] as usize;
            let mx = ret_to_max[r] as usize;
            let b = ln_att[s as usize] - ln_att[r];
            w_sum[mx] += w;
            b_sum[mx] += w * b;
            b2_sum[mx] += w * b * b;
            site_count[mx] += 1;
            site_max.push(mx as u32);
            sites.push(SiteInfo {
                node: 0,
                point: kept.node_point[s as usize],
                weight: w,
                ln_attenuation_full: ln_att[s as usize],
            });
        }
        // fix SiteInfo.node to be the node of the caller's Flat
        for (si, &(s, _)) in sites.iter_mut().zip(&site_list) {
            si.node = flat.point_node[kept.node_point[s as usize] as usize];
        }
        // 5. collapse order
        let (d_max, p_max, _) = dc_sweep(&t.parent, &t.g, &t.shunt);
        let junction_effect = (1.0 / d_max[0]) / r_in_full_ohm - 1.0;
        let e: Vec<f64> = (0..nm)
            .map(|x| {
                if x == 0 {
                    0.0
                } else {
                    (p_max[x] / t.g[x]).ln_1p()
                }
            })
            .collect();
        let w_total: f64 = w_sum.iter().sum();
        let mut total = b2_sum.iter().sum::<f64>();
        let cost = |x: usize, w: &[f64], b: &[f64]| 2.0 * e[x] * b[x] + e[x] * e[x] * w[x];
        let mut heap = BinaryHeap::new();
        let is_leaf = |leaf: &[bool], c: usize| -> bool { leaf[c] };
        let mut leaf: Vec<bool> = kids.iter().map(|k| k.is_none()).collect();
        for (c, kc) in kids.iter().enumerate() {
            if let Some([x, y]) = *kc
                && leaf[x as usize]
                && leaf[y as usize]
            {
                let k = cost(x as usize, &w_sum, &b_sum) + cost(y as usize, &w_sum, &b_sum);
                heap.push(Key(k, c as u32));
            }
        }
        let rms = |tot: f64| {
            if w_total > 0.0 {
                (tot.max(0.0) / w_total).sqrt()
            } else {
                0.0
            }
        };
        let mut curve = Vec::with_capacity(nm / 2 + 1);
        curve.push(CurvePoint {
            compartments: nm,
            rms_ln_attenuation_error: rms(total),
        });
        let mut order = Vec::with_capacity(nm / 2);
        let mut alive = nm;
        while let Some(Key(k, c)) = heap.pop() {
            let c = c as usize;
            order.push(c as u32);
            total += k;
            let [x, y] = kids[c].expect("a cherry has two children");
            for x in [x as usize, y as usize] {
                let ex = e[x];
                let (w, b, b2) = (w_sum[x], b_sum[x], b2_sum[x]);
                b2_sum[c] += b2 + 2.0 * ex * b + ex * ex * w;
                b_sum[c] += b + ex * w;
                w_sum[c] += w;
            }
            leaf[c] = true;
            alive -= 2;
            curve.push(CurvePoint {
                compartments: alive,
                rms_ln_attenuation_error: rms(total),
            });
            let p = t.parent[c];
            if p != NONE
                && let Some([x, y]) = kids[p as usize]
                && is_leaf(&leaf, x as usize)
                && is_leaf(&leaf, y as usize)
            {
                let k = cost(x as usize, &w_sum, &b_sum) + cost(y as usize, &w_sum, &b_sum);
                heap.push(Key(k, p));
            }
        }
        curve.reverse();
        Ok(Reducer {
            params: *params,
            opts: opts.clone(),
            max: t,
            kids,
            site_count,
            order,
            curve,
            point_max,
            sites,
            site_max,
            kept,
            r_in_full_ohm,
            junction_effect,
            junctions,
            points_left_out,
            z_full_freq: OnceLock::new(),
        })
    }

    /// Compartments of the maximal tree (odd; 2·tips − 1 plus one for a single-stem soma).
    pub fn max_compartments(&self) -> usize {
        self.max.parent.len()
    }

    /// The budget actually used for a request: odd, between 1 and the maximum.
    pub fn effective_budget(&self, requested: usize) -> usize {
        let b = requested.clamp(1, self.max_compartments());
        if b.is_multiple_of(2) { b - 1 } else { b }
    }

    /// The predicted error for every odd budget, ascending: (compartments, weighted RMS of the
    /// change in DC log attenuation to the soma over the sites, nepers).
    pub fn error_curve(&self) -> Vec<(usize, f64)> {
        self.curve
            .iter()
            .map(|c| (c.compartments, c.rms_ln_attenuation_error))
            .collect()
    }

    /// The same curve as [`CurvePoint`]s.
    pub fn curve_points(&self) -> &[CurvePoint] {
        &self.curve
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

    /// The kept cell as flat arrays (types filter applied).
    pub fn kept_flat(&self) -> &Flat {
        &self.kept
    }

    /// The reduced tree with `budget` compartments (see [`Reducer::effective_budget`]): replays
    /// the first (max − budget)/2 collapses of the order, O(N).
    pub fn tree(&self, budget: usize) -> ReducedTree {
        let nm = self.max_compartments();
        let b = self.effective_budget(budget);
        let steps = (nm - b) / 2;
        let mut sh = self.max.shunt.clone();
        let mut area = self.max.area.clone();
        let mut count = self.site_count.clone();
        let mut alive = vec![true; nm];
        let mut leaf: Vec<bool> = self.kids.iter().map(|k| k.is_none()).collect();
        for &c in &self.order[..steps] {
            let c = c as usize;
            if let Some([x, y]) = self.kids[c] {
                for x in [x as usize, y as usize] {
                    // Kron reduction of a leaf: c's shunt += g·G/(g + G)
                    sh[c] += self.max.g[x] * sh[x] / (self.max.g[x] + sh[x]);
                    area[c] += area[x];
                    count[c] += count[x];
                    alive[x] = false;
                }
            }
            leaf[c] = true;
        }
        let mut rep = vec![0u32; nm];
        let mut id = vec![NONE; nm];
        let mut next = 0u32;
        for k in 0..nm {
            if alive[k] {
                rep[k] = k as u32;
                id[k] = next;
                next += 1;
            } else {
                rep[k] = rep[self.max.parent[k] as usize];
            }
        }
        let tau_s = self.params.tau_ms() * 1e-3;
        let mut comps: Vec<Compartment> = Vec::with_capacity(b);
        for k in 0..nm {
            if !alive[k] {
                continue;
            }
            let parent = (k > 0).then(|| id[self.max.parent[k] as usize]);
            let depth = parent.map_or(0, |p| comps[p as usize].depth + 1);
            comps.push(Compartment {
                id: id[k],
                parent,
                children: if leaf[k] {
                    None
                } else {
                    self.kids[k].map(|[x, y]| [id[x as usize], id[y as usize]])
                },
                g_axial_ns: if k == 0 { 0.0 } else { self.max.g[k] * 1e9 },
                g_leak_ns: sh[k] * 1e9,
                capacitance_pf: tau_s * sh[k] * 1e12,
                position_um: self.max.pos[k],
                membrane_area_um2: area[k],
                site_count: count[k],
                depth,
                role: self.max.role[k],
                swc_line: self.max.line[k],
                swc_type: self.max.kind[k],
            });
        }
        let map = |m: u32| {
            if m == NONE {
                NONE
            } else {
                id[rep[m as usize] as usize]
            }
        };
        ReducedTree {
            compartments: comps,
            point_compartment: self.point_max.iter().map(|&m| map(m)).collect(),
            site_compartment: self.site_max.iter().map(|&m| map(m)).collect(),
            requested: budget,
            rounded_down: budget.is_multiple_of(2) && budget <= nm && budget >= 1,
            clamped: budget == 0 || budget > nm,
            params: self.params,
        }
    }

    /// Soma input impedance of the full kept cell at the options' frequency (Ω), computed once.
    pub fn full_input_impedance_at_freq(&self) -> Result<C64, ReduceError> {
        self.z_full_freq
            .get_or_init(|| {
                let net = Network::build(&self.kept, &self.params, self.opts.freq_hz)?;
                Ok(Maps::new(&net).input_impedance(0))
            })
            .clone()
            .map_err(ReduceError::from)
    }

    /// Measures what `tree` lost (see [`Report`]).
    pub fn report(&self, tree: &ReducedTree) -> Result<Report, ReduceError> {
        let r_red = tree.soma_input_resistance_ohm();
        let z_full = self.full_input_impedance_at_freq()?;
        let z_red = tree.soma_input_impedance(self.opts.freq_hz);
        let ln_red = tree.ln_attenuation_dc();
        let mut errs: Vec<f64> = Vec::with_capacity(self.sites.len());
        let mut wsum = 0.0;
        let mut w2 = 0.0;
        for (s, &c) in self.sites.iter().zip(&tree.site_compartment) {
            let e = s.ln_attenuation_full - ln_red[c as usize];
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
            sites: self.sites.len(),
            ln_attenuation_error: Stats {
                median: q(0.5),
                p95: q(0.95),
                max: errs.last().copied().unwrap_or(0.0),
            },
            ln_attenuation_error_weighted_rms: if wsum > 0.0 { (w2 / wsum).sqrt() } else { 0.0 },
            error_curve: self.curve.clone(),
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

/// The maximal tree: built in `Reducer::new`, then kept by the reducer.
#[derive(Debug, Default)]
struct Tree {
    parent: Vec<u32>,
    g: Vec<f64>,
    shunt: Vec<f64>,
    area: Vec<f64>,
    pos: Vec<[f64; 3]>,
    role: Vec<Role>,
    line: Vec<usize>,
    kind: Vec<i32>,
}

impl Tree {
    fn len(&self) -> usize {
        self.parent.len()
    }
    #[allow(clippy::too_many_arguments)]
    fn push(
        &mut self,
        parent: u32,
        g: f64,
        shunt: f64,
        area: f64,
        pos: [f64; 3],
        role: Role,
        line: usize,
        kind: i32,
    ) {
        self.kind.push(kind);
        self.parent.push(parent);
        self.g.push(g);
        self.shunt.push(shunt);
        self.area.push(area);
        self.pos.push(pos);
        self.role.push(role);
        self.line.push(line);
    }
}

impl ReducedTree {
    pub fn len(&self) -> usize {
        self.compartments.len()
    }

    pub fn is_empty(&self) -> bool {
        self.compartments.is_empty()
    }

    /// Parent index per compartment (`NONE` at the root).
    pub fn parents(&self) -> Vec<u32> {
        self.compartments
            .iter()
            .map(|c| c.parent.unwrap_or(NONE))
            .collect()
    }

    /// The reduced tree as a cable [`Network`] at `freq_hz`: series g, shunt G + jωC (S).
    pub fn network(&self, freq_hz: f64) -> Network {
        let w = 2.0 * std::f64::consts::PI * freq_hz;
        Network {
            parent: self.parents(),
            g: self
                .compartments
                .iter()
                .map(|c| C64::new(c.g_axial_ns * 1e-9, 0.0))
                .collect(),
            shunt: self
                .compartments
                .iter()
                .map(|c| C64::new(c.g_leak_ns * 1e-9, w * c.capacitance_pf * 1e-12))
                .collect(),
            freq_hz,
            params: self.params,
        }
    }

    fn dc(&self) -> (Vec<u32>, Vec<f64>, Vec<f64>) {
        (
            self.parents(),
            self.compartments
                .iter()
                .map(|c| c.g_axial_ns * 1e-9)
                .collect(),
            self.compartments
                .iter()
                .map(|c| c.g_leak_ns * 1e-9)
                .collect(),
        )
    }

    /// Soma DC input resistance of the reduced tree (Ω).
    pub fn soma_input_resistance_ohm(&self) -> f64 {
        let (p, g, s) = self.dc();
        let (d, _, _) = dc_sweep(&p, &g, &s);
        1.0 / d[0]
    }

    /// Soma input impedance at `freq_hz` with C = τ·G (Ω).
    pub fn soma_input_impedance(&self, freq_hz: f64) -> C64 {
        Maps::new(&self.network(freq_hz)).input_impedance(0)
    }

    /// DC log attenuation to the soma of every compartment, ln(Z_kk/Z_k0) (nepers).
    pub fn ln_attenuation_dc(&self) -> Vec<f64> {
        let (p, g, s) = self.dc();
        let (d, pp, _) = dc_sweep(&p, &g, &s);
        // A_k = A_parent·(g_k + P_k)/g_k: the voltage at the parent for current at k
        // (Zador, Agmon-Snir & Segev 1995: log attenuations add along a path)
        let mut out = vec![0.0; p.len()];
        for k in 1..p.len() {
            out[k] = out[p[k] as usize] + (pp[k] / g[k]).ln_1p();
        }
        let _ = d;
        out
    }

    /// V_k/V_c at DC on the reduced tree for a current injected at compartment `c`
    /// (one extra tree sweep; Koch & Poggio 1985). Empty if `c` is not a compartment.
    pub fn site_ratio_dc(&self, c: usize) -> Vec<f64> {
        if c >= self.len() {
            return Vec::new();
        }
        let net = self.network(0.0);
        let maps = Maps::new(&net);
        maps.site_ratio(&net, c).iter().map(|z| z.re).collect()
    }

    /// The exact DC feed-forward form (see [`FeedForward`]).
    pub fn feed_forward(&self) -> FeedForward {
        let n = self.len();
        let (p, g, s) = self.dc();
        let mut y = s.clone();
        let mut w = vec![None; n];
        for k in (1..n).rev() {
            let wk = g[k] / (g[k] + y[k]);
            w[k] = Some(wk);
            y[p[k] as usize] += wk * y[k];
        }
        let mut layers: Vec<Vec<u32>> = Vec::new();
        for c in &self.compartments {
            let d = c.depth as usize;
            if layers.len() <= d {
                layers.resize(d + 1, Vec::new());
            }
            layers[d].push(c.id);
        }
        FeedForward {
            w,
            subtree_conductance_ns: y.iter().map(|v| v * 1e9).collect(),
            root_input_conductance_ns: y.first().copied().unwrap_or(0.0) * 1e9,
            layers,
        }
    }
}

#[cfg(test)]
mod tests;
