//! The reduced tree's own analyses: its DC and frequency networks, input resistance and
//! impedance, log attenuations (of inputs at a compartment or split between two: [`Split`],
//! [`DcMaps`]), the voltage map from a compartment and the feed-forward form, all on the shared
//! tree kernel (`cable::solve`).
//!
//! What this file does not do: build trees (that is `build`) or compare them with the cell (that
//! is `Reducer::report` and `crate::fidelity`).

use super::{Compartment, FeedForward, ReducedTree};
use crate::cable::solve::{TreeFactor, TreeMaps};
use crate::cable::{C64, Network};
use crate::morphology::NONE;

/// A site on the link between its compartment and the neighbouring `compartment`, at fraction
/// `weight` (0 < weight ≤ 0.5) of the link's resistance R from its own compartment: a point of
/// the axial resistor, without membrane. Eliminating it (Kron) gives its current to the two
/// ends, 1 − w to its own compartment and w to the neighbour, as a point between two nodes of a
/// finite-element cable with linear elements does (Galerkin; e.g. Hughes 1987, ch. 1); its
/// voltage is their mix plus w(1 − w)·R times its own current (the local input resistance of a
/// point inside a section). The weight is fitted to the cell's response at the site rather than
/// taken from the point's position (see `fidelity::split`).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Split {
    pub compartment: u32,
    pub weight: f64,
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
        1.0 / TreeFactor::new(&p, &g, &s).root_admittance()
    }

    /// Soma input impedance at `freq_hz` with the tree's capacitances (Ω).
    pub fn soma_input_impedance(&self, freq_hz: f64) -> C64 {
        let net = self.network(freq_hz);
        C64::new(1.0, 0.0) / TreeFactor::new(&net.parent, &net.g, &net.shunt).root_admittance()
    }

    /// The tree's slowest time constant (ms), see [`slowest_time_constant_ms`]. Rm·Cm exactly
    /// with uniform capacitances.
    pub fn slowest_time_constant_ms(&self) -> f64 {
        let col =
            |f: fn(&Compartment) -> f64| -> Vec<f64> { self.compartments.iter().map(f).collect() };
        super::slowest::slowest_time_constant_ms(
            &self.parents(),
            &col(|c| c.g_axial_ns),
            &col(|c| c.g_leak_ns),
            &col(|c| c.capacitance_pf),
        )
    }

    /// DC log attenuation to the soma of every compartment, ln(Z_kk/Z_k0) (nepers).
    pub fn ln_attenuation_dc(&self) -> Vec<f64> {
        let (p, g, s) = self.dc();
        TreeMaps::new(&p, &g, &s).ln_attenuations_to_soma()
    }

    /// The DC maps of the tree, for attenuations of inputs that may be split (see [`DcMaps`]).
    pub fn dc_maps(&self) -> DcMaps {
        let (p, g, s) = self.dc();
        DcMaps {
            maps: TreeMaps::from_vecs(p, g, s),
        }
    }

    /// Per site: the DC log attenuation to the soma of its input, ln(Z_ss/Z_s0), with its split
    /// if it has one (see [`DcMaps::ln_attenuations`]).
    pub fn site_ln_attenuations_dc(&self) -> Vec<f64> {
        let m = self.dc_maps();
        (0..self.site_compartment.len())
            .map(|i| {
                m.ln_attenuations(self.site_compartment[i] as usize, self.site_split(i))
                    .0
            })
            .collect()
    }

    /// The first site or point whose split is not one this tree can hold (its compartments not
    /// two adjacent compartments of the tree, or its weight outside (0, 0.5]), described.
    pub fn bad_split(&self) -> Option<String> {
        let n = self.len();
        let adjacent = |a: u32, b: u32| {
            let (a, b) = (a as usize, b as usize);
            a < n
                && b < n
                && (self.compartments[a].parent == Some(b as u32)
                    || self.compartments[b].parent == Some(a as u32))
        };
        let bad = |own: u32, s: &Split| {
            !(adjacent(own, s.compartment) && s.weight > 0.0 && s.weight <= 0.5)
        };
        let sites = self.site_compartment.iter().zip(&self.site_split);
        if let Some(i) = sites
            .clone()
            .position(|(&c, s)| s.as_ref().is_some_and(|s| bad(c, s)))
        {
            return Some(format!(
                "site {i}: its split is not between two adjacent compartments with a weight in (0, 0.5]"
            ));
        }
        let points = self.point_compartment.iter().zip(&self.point_split);
        let p = points
            .clone()
            .position(|(&c, s)| s.as_ref().is_some_and(|s| bad(c, s)))?;
        Some(format!(
            "point {p}: its split is not between two adjacent compartments with a weight in (0, 0.5]"
        ))
    }

    /// Site `i`'s split, if it has one.
    pub fn site_split(&self, i: usize) -> Option<Split> {
        self.site_split.get(i).copied().flatten()
    }

    /// Morphology point `p`'s split, if it has one.
    pub fn point_split(&self, p: usize) -> Option<Split> {
        self.point_split.get(p).copied().flatten()
    }

    /// V_k/V_c at DC on the reduced tree for a current injected at compartment `c`
    /// (one extra tree sweep; Koch & Poggio 1985). Empty if `c` is not a compartment.
    pub fn site_ratio_dc(&self, c: usize) -> Vec<f64> {
        let (p, g, s) = self.dc();
        TreeMaps::new(&p, &g, &s).site_ratio(c).unwrap_or_default()
    }

    /// The exact DC feed-forward form (see [`FeedForward`]): the upward elimination's link
    /// ratios and subtree conductances.
    pub fn feed_forward(&self) -> FeedForward {
        let (p, g, s) = self.dc();
        let f = TreeFactor::new(&p, &g, &s);
        let w = (0..self.len())
            .map(|k| (k > 0).then(|| f.down()[k]))
            .collect();
        let y = f.subtree_admittance();
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

/// The reduced tree's DC maps (both sweeps, once), for inputs at one compartment or split
/// between two adjacent ones.
pub struct DcMaps {
    maps: TreeMaps<f64>,
}

impl DcMaps {
    /// DC log attenuations (to the soma, from the soma; nepers) of an input at compartment `c`,
    /// or on the link between `c` and its neighbour `split.compartment` (see [`Split`]). With p
    /// the pair's parent end, q its child end, weights w_p and w_q, g_q the link's conductance
    /// and d_q = V_q/V_p for current at p (Koch & Poggio 1985):
    /// Z_ss = w_p²Z_pp + 2w_pw_qZ_ppd_q + w_q²Z_qq + w_pw_q/g_q (the last term the point's own
    /// part of the resistor) and Z_s0 = Z_p0(w_p + w_qd_q), so ln A_to = ln(Z_ss/Z_pp) + ln A_to(p) − ln(w_p + w_qd_q) and
    /// ln A_from = ln A_from(p) − ln(w_p + w_qd_q) (ratios only: no underflow far out).
    /// A split whose compartment is not a neighbour of `c` is read as none.
    pub fn ln_attenuations(&self, c: usize, split: Option<Split>) -> (f64, f64) {
        let m = &self.maps;
        let own = || (m.ln_attenuation_to_soma(c), m.ln_attenuation_from_soma(c));
        let Some(sh) = split else {
            return own();
        };
        let k = sh.compartment as usize;
        let (p, q, wq) = match crate::cable::solve::link_child(m.parent(), c, k) {
            Some(q) if q == k => (c, k, sh.weight),
            Some(_) => (k, c, 1.0 - sh.weight),
            None => return own(),
        };
        let wp = 1.0 - wq;
        let d = m.down()[q];
        let (zpp, zqq) = (m.input_impedance()[p], m.input_impedance()[q]);
        let on_link = wp * wq / (m.factor().series()[q] * zpp);
        let zss = wp * wp + 2.0 * wp * wq * d + wq * wq * zqq / zpp + on_link;
        let mix = (wp + wq * d).ln();
        (
            zss.ln() + m.ln_attenuation_to_soma(p) - mix,
            m.ln_attenuation_from_soma(p) - mix,
        )
    }
}
