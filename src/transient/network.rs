//! The compartment networks the time-domain engine integrates: the fine network of a whole cell
//! (from [`Flat`] + [`Params`]) and the network of a reduced tree.

use super::TransientError;
use crate::cable::{Params, UM};
use crate::morphology::{Flat, NONE};
use crate::reduce::ReducedTree;

/// A passive compartment network, parents-first (`parent[k] < k`, node 0 the root, `parent[0]`
/// = `NONE`). Units chosen so that no conversion is needed while stepping: nS, pF, ms, mV, pA
/// (nS·mV = pA, pF·mV/ms = pA).
#[derive(Debug, Clone, PartialEq)]
pub struct RcNetwork {
    pub parent: Vec<u32>,
    /// Axial conductance from node k to its parent (nS); 0 at the root.
    pub g_axial_ns: Vec<f64>,
    /// Leak conductance to ground (nS).
    pub g_leak_ns: Vec<f64>,
    /// Membrane capacitance (pF).
    pub cap_pf: Vec<f64>,
}

impl RcNetwork {
    pub fn len(&self) -> usize {
        self.parent.len()
    }

    pub fn is_empty(&self) -> bool {
        self.parent.is_empty()
    }

    /// The network of a reduced tree: its compartments' axial and leak conductances and
    /// capacitances as they are (compartment ids are parents-first).
    pub fn from_reduced(tree: &ReducedTree) -> RcNetwork {
        let c = &tree.compartments;
        RcNetwork {
            parent: tree.parents(),
            g_axial_ns: c.iter().map(|c| c.g_axial_ns).collect(),
            g_leak_ns: c.iter().map(|c| c.g_leak_ns).collect(),
            cap_pf: c.iter().map(|c| c.capacitance_pf).collect(),
        }
    }

    /// Checks that every value is finite, conductances ≥ 0 (axial > 0 below the root) and
    /// capacitances ≥ 0 with a positive total, and that the tree is parents-first.
    pub fn validate(&self) -> Result<(), TransientError> {
        let n = self.len();
        if n == 0 {
            return Err(TransientError::Empty);
        }
        if self.g_axial_ns.len() != n || self.g_leak_ns.len() != n || self.cap_pf.len() != n {
            return Err(TransientError::BadNetwork {
                node: 0,
                what: "array lengths differ",
            });
        }
        for k in 0..n {
            let bad = |what| Err(TransientError::BadNetwork { node: k, what });
            if k > 0 && (self.parent[k] as usize >= k) {
                return bad("parent is not listed before its child");
            }
            if k > 0 && !(self.g_axial_ns[k] > 0.0 && self.g_axial_ns[k].is_finite()) {
                return bad("axial conductance is not a positive finite number");
            }
            if !(self.g_leak_ns[k] >= 0.0 && self.g_leak_ns[k].is_finite()) {
                return bad("leak conductance is negative or not finite");
            }
            if !(self.cap_pf[k] >= 0.0 && self.cap_pf[k].is_finite()) {
                return bad("capacitance is negative or not finite");
            }
        }
        if self.cap_pf.iter().sum::<f64>() <= 0.0 {
            return Err(TransientError::BadNetwork {
                node: 0,
                what: "total capacitance is 0",
            });
        }
        Ok(())
    }
}

/// The rule that cuts a cell's segments into pieces for the fine network: a segment of mean
/// diameter d is cut into ⌈h / (fraction·λ(d))⌉ equal pieces, λ(d) = √(Rm·d/(4Ra)) the DC length
/// constant. Default fraction 0.01 (pieces at most λ/100; halving it changes soma EPSP peaks by
/// well under 0.1 %, tests/transient_closed_forms.rs).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PieceRule {
    /// Largest piece as a fraction of the DC length constant of its segment.
    pub lambda_fraction: f64,
}

impl Default for PieceRule {
    fn default() -> Self {
        PieceRule {
            lambda_fraction: 0.01,
        }
    }
}

/// Most pieces one segment is cut into (a segment hundreds of λ long is cut off anyway).
const MAX_PIECES: usize = 100_000;

/// The fine network of a cell and where each [`Flat`] node sits in it.
#[derive(Debug, Clone)]
pub struct FineNetwork {
    pub net: RcNetwork,
    /// Per node of the [`Flat`]: its node in `net` (inner nodes of cut segments come after).
    pub node_of: Vec<u32>,
}

/// Builds the fine compartment network of a whole cell. Each piece of a segment (a frustum from
/// radius a to b over length h) is a compartment link with axial conductance π·a·b/(Ra·h) (the
/// exact resistance of a frustum) and membrane π(a+b)·slant whose leak 1/Rm and capacitance Cm are
/// shared between the piece's ends in the ratio a : b (the taper's first moment, as the cable
/// engine's π network does; equal halves for a cylinder). The soma's area is at node 0. This is
/// the second-order compartmental discretisation of the cable equation (Rall 1964; Segev,
/// Fleshman & Burke 1989); it converges to the cable engine as the pieces shrink.
pub fn fine_network(
    flat: &Flat,
    params: &Params,
    rule: PieceRule,
) -> Result<FineNetwork, TransientError> {
    // the cable engine's checks of parameters and radii, same messages
    crate::cable::network_arrays::<f64>(flat, params, 0.0)?;
    let f = rule.lambda_fraction;
    if !(f.is_finite() && (1e-6..=1.0).contains(&f)) {
        return Err(TransientError::OptionRange {
            name: "piece length (fraction of λ)",
            value: f,
            lo: 1e-6,
            hi: 1.0,
        });
    }
    let n = flat.len();
    let gm_per_um2 = UM * UM / params.rm_ohm_cm2 * 1e9; // nS per µm²
    let cm_per_um2 = params.cm_uf_cm2 * UM * UM * 1e6; // pF per µm²
    let pi = std::f64::consts::PI;
    let mut net = RcNetwork {
        parent: Vec::with_capacity(n),
        g_axial_ns: Vec::with_capacity(n),
        g_leak_ns: Vec::with_capacity(n),
        cap_pf: Vec::with_capacity(n),
    };
    let mut area = Vec::with_capacity(n);
    let mut node_of = vec![NONE; n];
    net.parent.push(NONE);
    net.g_axial_ns.push(0.0);
    area.push(flat.soma_area_um2);
    node_of[0] = 0;
    for k in 1..n {
        let (a, b) = (flat.r_prox_um[k], flat.r_dist_um[k]);
        let h = flat.length_um[k].max(crate::cable::MIN_LENGTH_UM);
        let lam = params.lambda_um(a + b);
        let m = ((h / (f * lam)).ceil() as usize).clamp(1, MAX_PIECES);
        let hp = h / m as f64;
        let mut up = node_of[flat.parent[k] as usize];
        for i in 0..m {
            let ra = a + (b - a) * (i as f64 / m as f64);
            let rb = a + (b - a) * ((i + 1) as f64 / m as f64);
            let slant = (hp * hp + (rb - ra) * (rb - ra)).sqrt();
            let membrane = pi * (ra + rb) * slant;
            // axial conductance of a frustum: π·a·b/(Ra·h) (cm units → S → nS)
            let g = pi * ra * rb * UM / (params.ra_ohm_cm * hp) * 1e9;
            let me = net.parent.len();
            net.parent.push(up);
            net.g_axial_ns.push(g);
            area.push(0.0);
            area[up as usize] += membrane * ra / (ra + rb);
            area[me] += membrane * rb / (ra + rb);
            up = me as u32;
        }
        node_of[k] = up;
    }
    net.g_leak_ns = area.iter().map(|a| a * gm_per_um2).collect();
    net.cap_pf = area.iter().map(|a| a * cm_per_um2).collect();
    Ok(FineNetwork { net, node_of })
}
