//! Per-node electrical maps of a network (the model or a reduced tree) at one parameter set
//! and frequency, as the app draws them: input impedance and voltage levels.
//!
//! What this file does not do: build networks (that is `cable`) or hold any view state.

use crate::cable::{C64, Network, Params, TreeMaps};
use crate::morphology::Flat;

/// A voltage level from a log attenuation: ln|V_far/V_near| = −ln A (≤ 0 at DC). The app shows
/// levels (0 at the source, falling away from it); the library's convention is ln A ≥ 0.
pub(super) fn levels(ln_attenuation: Vec<f64>) -> Vec<f64> {
    ln_attenuation.into_iter().map(|a| -a).collect()
}

/// Per-node electrical maps of the model at one parameter set and frequency.
#[derive(Debug, Clone)]
pub struct Electrical {
    pub maps: TreeMaps<C64>,
    /// |Z_kk| (MΩ) per model node.
    pub input_mohm: Vec<f64>,
    /// ln|V_soma / V_k| for a current at k, per model node (≤ 0): −ln A_{k→s}.
    pub ln_to_soma: Vec<f64>,
}

impl Electrical {
    pub fn new(flat: &Flat, params: &Params, freq_hz: f64) -> anyhow::Result<Electrical> {
        let maps = Network::build(flat, params, freq_hz)?.maps();
        Ok(Electrical::from_maps(maps))
    }

    pub(super) fn from_maps(maps: TreeMaps<C64>) -> Electrical {
        let input_mohm = maps
            .input_impedance()
            .iter()
            .map(|z| z.norm() * 1e-6)
            .collect();
        let ln_to_soma = levels(maps.ln_attenuations_to_soma());
        Electrical {
            maps,
            input_mohm,
            ln_to_soma,
        }
    }

    /// ln|V_k / V_site| for a current at a point on the link between node `c` and
    /// `split.compartment` (see `reduce::Split`): V = (1 − w)·Z_cc·r_c + w·Z_kk·r_k with
    /// r_j = V/V_j for a current at j (Koch & Poggio 1985), and the point's own voltage that mix
    /// plus w(1 − w)/g_link. Below 0 everywhere else. NaN everywhere if a node is missing or the
    /// two are not joined by a link.
    pub fn ln_from_split(&self, c: usize, split: crate::reduce::Split) -> Vec<f64> {
        let (k, w) = (split.compartment as usize, split.weight);
        let n = self.maps.len();
        let (Some(rc), Some(rk)) = (self.maps.site_ratio(c), self.maps.site_ratio(k)) else {
            return vec![f64::NAN; n];
        };
        let z = self.maps.input_impedance();
        let v: Vec<C64> = (0..n)
            .map(|m| rc[m] * z[c] * (1.0 - w) + rk[m] * z[k] * w)
            .collect();
        let Some(child) = crate::cable::solve::link_child(self.maps.parent(), c, k) else {
            return vec![f64::NAN; n];
        };
        let own = C64::new(w * (1.0 - w), 0.0) / self.maps.factor().series()[child];
        let at_site = v[c] * (1.0 - w) + v[k] * w + own;
        v.iter().map(|x| (x / at_site).norm().ln()).collect()
    }

    /// ln|V_k / V_site| for a current at `site` (model node; ≤ 0): −ln A_{site→k}. NaN
    /// everywhere if `site` is not a node.
    pub fn ln_from_site(&self, site: usize) -> Vec<f64> {
        match self.maps.ln_attenuations_from_site(site) {
            Some(a) => levels(a),
            None => vec![f64::NAN; self.maps.len()],
        }
    }
}
