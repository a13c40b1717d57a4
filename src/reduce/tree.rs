//! The reduced tree's own analyses: its DC and frequency networks, input resistance and
//! impedance, log attenuations, the voltage map from a compartment and the feed-forward form, all
//! on the shared tree kernel (`cable::solve`).
//!
//! What this file does not do: build trees (that is `build`) or compare them with the cell (that
//! is `Reducer::report` and `crate::fidelity`).

use super::{FeedForward, ReducedTree};
use crate::cable::solve::{TreeFactor, TreeMaps};
use crate::cable::{C64, Network};
use crate::morphology::NONE;

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

    /// DC log attenuation to the soma of every compartment, ln(Z_kk/Z_k0) (nepers).
    pub fn ln_attenuation_dc(&self) -> Vec<f64> {
        let (p, g, s) = self.dc();
        TreeMaps::new(&p, &g, &s).ln_attenuations_to_soma()
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
