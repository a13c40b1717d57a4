//! The library entry point for passive maps of a whole cell: [`CellMaps::compute`] gives, at one
//! frequency, the input impedance Z_kk and the transfer impedance to the soma Z_ks at every node
//! in O(N), the attenuations to and from the soma, and the voltage map from any site; and
//! [`Summary`] the soma input resistance, τ and the electrotonic length of every tip's path.
//!
//! ```no_run
//! use pollard::cable::{CellMaps, Params, PrepOptions, prepare};
//! let m = pollard::Morphology::read("cell.swc".as_ref()).unwrap();
//! let flat = prepare(&m, &PrepOptions::default()).unwrap();
//! let maps = CellMaps::compute(&flat, &Params::default(), 0.0).unwrap();
//! let soma_mohm = maps.soma_input_impedance().norm() / 1e6;
//! for i in 0..m.len() {
//!     if let Some(p) = maps.point(i) {
//!         println!("{} {} {}", m.points[i].id, p.input_resistance_mohm, p.attenuation_to_soma);
//!     }
//! }
//! let tips = maps.summary(&flat); // R_in, τ, Σ l/λ of each tip's path
//! ```
//!
//! Definitions (Koch 1999 ch. 3; Zador, Agmon-Snir & Segev 1995):
//! - attenuation to the soma A_{k→s} = |V_k/V_s| for current injected at k = |Z_kk/Z_ks|;
//! - attenuation from the soma A_{s→k} = |V_s/V_k| for current injected at the soma = |Z_ss/Z_ks|;
//! - both are ≥ 1 and generally differ (Rall & Rinzel 1973: a thin distal branch attenuates
//!   strongly towards the soma and hardly at all from it);
//! - the log attenuation ln A (nepers; [`super::neper`], or [`super::db`] for decibels) is additive along a
//!   path: for m between k and the soma, ln A_{k→s} = ln A_{k→m} + ln A_{m→s} (the
//!   morphoelectrotonic transform of Zador, Agmon-Snir & Segev 1995).
//!
//! At f > 0 every impedance is complex; "resistances" reported in MΩ are magnitudes |Z|.
//! At DC the work is done in `f64` (a fast path), otherwise in complex numbers.

use super::solve::TreeMaps;
use super::{C64, CableError, Params, Scalar, SegmentRadii, electrotonic_distance, network_arrays};
use crate::morphology::{Flat, NONE};

/// The kernel's maps, in `f64` at DC (the fast path) or complex above.
#[derive(Debug, Clone)]
enum Store {
    Dc(TreeMaps<f64>),
    Ac(TreeMaps<C64>),
}

/// Passive maps of one cell at one frequency (see the module doc).
///
/// Nodes are those of [`Flat`]: node 0 is the whole soma, node k > 0 one main-tree point.
/// Per-point access goes through `Flat::point_node`; points outside the main tree have none.
/// Every number comes from the one tree kernel ([`super::solve::TreeMaps`]), which also owns
/// the log attenuations and their fallback when |Z_ks| underflows.
#[derive(Debug, Clone)]
pub struct CellMaps {
    pub freq_hz: f64,
    pub params: Params,
    /// For each morphology point, its node or `NONE` (copied from [`Flat`]).
    pub point_node: Vec<u32>,
    /// For each node, one morphology point it stands for (copied from [`Flat`]).
    pub node_point: Vec<u32>,
    store: Store,
}

/// The maps at one SWC point.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct PointMaps {
    /// The point's node.
    pub node: usize,
    /// Input impedance Z_kk (Ω).
    #[serde(skip)]
    pub z_in: C64,
    /// Transfer impedance to the soma Z_ks (Ω).
    #[serde(skip)]
    pub z_soma: C64,
    /// |Z_kk| in MΩ (the input resistance at DC).
    pub input_resistance_mohm: f64,
    /// |Z_kk / Z_ks| ≥ 1.
    pub attenuation_to_soma: f64,
    /// |Z_ss / Z_ks| ≥ 1.
    pub attenuation_from_soma: f64,
}

/// One tip's path to the soma in electrotonic units.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct TipPath {
    pub node: usize,
    /// The morphology point of the tip.
    pub point: usize,
    /// Σ l/λ over the segments from the soma to the tip (DC λ; dimensionless).
    pub electrotonic_length: f64,
    /// Path length from the soma (µm).
    pub path_length_um: f64,
}

/// Whole-cell numbers.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Summary {
    pub freq_hz: f64,
    /// |Z_ss| at the soma (MΩ); the input resistance at DC.
    pub soma_input_resistance_mohm: f64,
    /// Phase of Z_ss (degrees; 0 at DC).
    pub soma_input_phase_deg: f64,
    /// Membrane time constant τ = Rm·Cm (ms).
    pub tau_ms: f64,
    /// Every tip (node without children, not the soma), parents-first order.
    pub tips: Vec<TipPath>,
    /// The cell's electrotonic extent: the largest tip electrotonic length.
    pub electrotonic_extent: f64,
    /// Mean tip electrotonic length (0 without tips).
    pub mean_tip_electrotonic_length: f64,
    /// Largest attenuation to the soma over all nodes (at this frequency).
    pub max_attenuation_to_soma: f64,
    /// Largest attenuation from the soma over all nodes.
    pub max_attenuation_from_soma: f64,
}

macro_rules! with_store {
    ($self:expr, |$m:ident| $body:expr) => {
        match &$self.store {
            Store::Dc($m) => $body,
            Store::Ac($m) => $body,
        }
    };
}

impl CellMaps {
    /// Builds the network of `flat` at `freq_hz` (0 = DC) and runs both sweeps: O(N).
    /// Errors on parameters out of range and on missing radii (see [`super::prep`] for the fixes).
    pub fn compute(flat: &Flat, params: &Params, freq_hz: f64) -> Result<CellMaps, CableError> {
        if flat.is_empty() {
            return Err(CableError::Empty);
        }
        let parent = flat.parent.clone();
        let store = if freq_hz == 0.0 {
            let (g, shunt) = network_arrays::<f64>(flat, params, freq_hz)?;
            Store::Dc(TreeMaps::from_vecs(parent, g, shunt))
        } else {
            let (g, shunt) = network_arrays::<C64>(flat, params, freq_hz)?;
            Store::Ac(TreeMaps::from_vecs(parent, g, shunt))
        };
        Ok(CellMaps {
            freq_hz,
            params: *params,
            point_node: flat.point_node.clone(),
            node_point: flat.node_point.clone(),
            store,
        })
    }

    /// Parent node of each node (`NONE` for node 0), parents first.
    pub fn parent(&self) -> &[u32] {
        with_store!(self, |m| m.parent())
    }

    /// Number of nodes.
    pub fn len(&self) -> usize {
        with_store!(self, |m| m.len())
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Input impedance Z_kk of node k (Ω).
    pub fn z_in(&self, k: usize) -> C64 {
        with_store!(self, |m| m.input_impedance()[k].to_c64())
    }

    /// Transfer impedance Z_ks between node k and the soma (Ω).
    pub fn z_soma(&self, k: usize) -> C64 {
        with_store!(self, |m| m.soma_transfer()[k].to_c64())
    }

    /// Z_ss, the soma's input impedance (Ω).
    pub fn soma_input_impedance(&self) -> C64 {
        self.z_in(0)
    }

    /// Input impedance at every node (Ω).
    pub fn input_impedances(&self) -> Vec<C64> {
        with_store!(self, |m| m
            .input_impedance()
            .iter()
            .map(|z| z.to_c64())
            .collect())
    }

    /// Transfer impedance to the soma at every node (Ω).
    pub fn soma_transfers(&self) -> Vec<C64> {
        with_store!(self, |m| m
            .soma_transfer()
            .iter()
            .map(|z| z.to_c64())
            .collect())
    }

    /// |Z_kk| in MΩ.
    pub fn input_resistance_mohm(&self, k: usize) -> f64 {
        with_store!(self, |m| m.input_impedance()[k].abs() * 1e-6)
    }

    /// A_{k→s} = |Z_kk / Z_ks| (+∞ when it exceeds the range of f64; never NaN).
    pub fn attenuation_to_soma(&self, k: usize) -> f64 {
        with_store!(self, |m| m.attenuation_to_soma(k))
    }

    /// A_{s→k} = |Z_ss / Z_ks| (+∞ when it exceeds the range of f64; never NaN).
    pub fn attenuation_from_soma(&self, k: usize) -> f64 {
        with_store!(self, |m| m.attenuation_from_soma(k))
    }

    /// ln A_{k→s} (nepers, ≥ 0), additive along paths (Zador, Agmon-Snir & Segev 1995); finite
    /// even where A itself is too large for f64.
    pub fn log_attenuation_to_soma(&self, k: usize) -> f64 {
        with_store!(self, |m| m.ln_attenuation_to_soma(k))
    }

    /// ln A_{s→k} (nepers, ≥ 0); finite even where A itself is too large for f64.
    pub fn log_attenuation_from_soma(&self, k: usize) -> f64 {
        with_store!(self, |m| m.ln_attenuation_from_soma(k))
    }

    /// The maps at node k.
    pub fn node(&self, k: usize) -> PointMaps {
        let (z_in, z_soma) = (self.z_in(k), self.z_soma(k));
        PointMaps {
            node: k,
            z_in,
            z_soma,
            input_resistance_mohm: z_in.norm() * 1e-6,
            attenuation_to_soma: self.attenuation_to_soma(k),
            attenuation_from_soma: self.attenuation_from_soma(k),
        }
    }

    /// Node of morphology point `i` (None outside the main tree or out of range).
    pub fn node_of_point(&self, i: usize) -> Option<usize> {
        match self.point_node.get(i) {
            Some(&k) if k != NONE => Some(k as usize),
            _ => None,
        }
    }

    /// The maps at morphology point `i` (soma points all share node 0); None outside the main
    /// tree.
    pub fn point(&self, i: usize) -> Option<PointMaps> {
        self.node_of_point(i).map(|k| self.node(k))
    }

    /// V_k / V_j at every node k for a current injected at node `j` (complex; one O(N) pass).
    /// None when `j` is not a node.
    pub fn site_ratio(&self, j: usize) -> Option<Vec<C64>> {
        with_store!(self, |m| m
            .site_ratio(j)
            .map(|v| v.into_iter().map(|x| x.to_c64()).collect()))
    }

    /// |V_k / V_j| at every node k for a current injected at node `j`. None when `j` is not a node.
    pub fn site_ratio_abs(&self, j: usize) -> Option<Vec<f64>> {
        with_store!(self, |m| m
            .site_ratio(j)
            .map(|v| v.into_iter().map(|x| x.abs()).collect()))
    }

    /// Whole-cell numbers (needs the same `flat` the maps were computed from, for the geometry).
    pub fn summary(&self, flat: &Flat) -> Summary {
        let n = self.len().min(flat.len());
        let x = electrotonic_distance(flat, &self.params, SegmentRadii::Frustum);
        let mut path = vec![0.0; n];
        let mut has_child = vec![false; n];
        for k in 1..n {
            let p = flat.parent[k] as usize;
            path[k] = path[p] + flat.length_um[k];
            has_child[p] = true;
        }
        let tips: Vec<TipPath> = (1..n)
            .filter(|&k| !has_child[k])
            .map(|k| TipPath {
                node: k,
                point: flat.node_point[k] as usize,
                electrotonic_length: x[k],
                path_length_um: path[k],
            })
            .collect();
        let extent = tips
            .iter()
            .map(|t| t.electrotonic_length)
            .fold(0.0, f64::max);
        let mean = if tips.is_empty() {
            0.0
        } else {
            tips.iter().map(|t| t.electrotonic_length).sum::<f64>() / tips.len() as f64
        };
        let zss = self.soma_input_impedance();
        let (mut a_to, mut a_from) = (1.0f64, 1.0f64);
        for k in 0..n {
            a_to = a_to.max(self.attenuation_to_soma(k));
            a_from = a_from.max(self.attenuation_from_soma(k));
        }
        Summary {
            freq_hz: self.freq_hz,
            soma_input_resistance_mohm: zss.norm() * 1e-6,
            soma_input_phase_deg: zss.arg().to_degrees(),
            tau_ms: self.params.tau_ms(),
            tips,
            electrotonic_extent: extent,
            mean_tip_electrotonic_length: mean,
            max_attenuation_to_soma: a_to,
            max_attenuation_from_soma: a_from,
        }
    }
}
