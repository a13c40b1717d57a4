//! A thin adapter over the one tree kernel ([`super::solve`]) for callers not yet moved to
//! [`TreeMaps`] directly (tests). It holds no numerics of its own.
//!
//! Replacements: `Maps::new(&net)` → `net.maps()`; `maps.d` / `.p` / `.u` / `.down` →
//! `subtree_admittance()` / `parent_side()` / `rest_of_tree()` / `down()`;
//! `maps.soma_transfer(&parent)` → `soma_transfer()`; `maps.site_ratio(&net, j)` →
//! `site_ratio(j)`.

use super::solve::TreeMaps;
use super::{C64, Network};

/// The sweeps' results for one network (complex), as plain arrays.
#[derive(Debug, Clone)]
pub struct Maps {
    /// Subtree admittance D_k (S).
    pub d: Vec<C64>,
    /// Admittance at the parent without k's branch, P_k (S); P_0 = 0.
    pub p: Vec<C64>,
    /// Rest of the tree seen from k through its parent link, U_k (S); U_0 = 0.
    pub u: Vec<C64>,
    /// Current-transfer ratio of each parent link towards the soma, g_k/(g_k + D_k).
    pub down: Vec<C64>,
    solved: TreeMaps<C64>,
}

impl Maps {
    /// Both sweeps (see [`TreeMaps`]).
    pub fn new(net: &Network) -> Maps {
        let solved = net.maps();
        Maps {
            d: solved.subtree_admittance().to_vec(),
            p: solved.parent_side().to_vec(),
            u: solved.rest_of_tree(),
            down: solved.down().to_vec(),
            solved,
        }
    }

    pub fn len(&self) -> usize {
        self.d.len()
    }

    pub fn is_empty(&self) -> bool {
        self.d.is_empty()
    }

    /// Input impedance Z_kk = 1/(D_k + U_k) (Ω).
    pub fn input_impedance(&self, k: usize) -> C64 {
        self.solved.input_impedance()[k]
    }

    /// Input impedance at every node (Ω).
    pub fn input_impedances(&self) -> Vec<C64> {
        self.solved.input_impedance().to_vec()
    }

    /// Transfer impedance to the soma Z_ks for every node k (Ω) (`parent` is the network's).
    pub fn soma_transfer(&self, _parent: &[u32]) -> Vec<C64> {
        self.solved.soma_transfer().to_vec()
    }

    /// Voltage ratio V_k / V_j at every node k for a current injected at node `j`.
    /// All NaN if `j` is not a node (use [`TreeMaps::site_ratio`] for an `Option`).
    pub fn site_ratio(&self, _net: &Network, j: usize) -> Vec<C64> {
        self.solved
            .site_ratio(j)
            .unwrap_or_else(|| vec![C64::new(f64::NAN, f64::NAN); self.len()])
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cable::Params;
    use crate::morphology::NONE;

    /// A small network by hand: soma with two children, one of which has a child.
    fn toy() -> Network {
        let r = |x: f64| C64::new(x, 0.0);
        Network {
            parent: vec![NONE, 0, 0, 1],
            g: vec![r(0.0), r(2.0), r(0.5), r(1.5)],
            shunt: vec![r(0.3), r(0.1), r(0.2), r(0.25)],
            freq_hz: 0.0,
            params: Params::default(),
        }
    }

    /// Dense nodal conductance matrix, inverted by Gauss–Jordan (a plain reference, written
    /// out so the check does not share code with the sweeps).
    fn dense_inverse(net: &Network) -> Vec<Vec<f64>> {
        let n = net.len();
        let mut a = vec![vec![0.0; 2 * n]; n];
        for k in 0..n {
            a[k][k] += net.shunt[k].re;
            a[k][n + k] = 1.0;
            if k > 0 {
                let p = net.parent[k] as usize;
                let g = net.g[k].re;
                a[k][k] += g;
                a[p][p] += g;
                a[k][p] -= g;
                a[p][k] -= g;
            }
        }
        for c in 0..n {
            let piv = a[c][c];
            for x in a[c].iter_mut() {
                *x /= piv;
            }
            for r in 0..n {
                if r != c {
                    let f = a[r][c];
                    let row_c = a[c].clone();
                    for (x, y) in a[r].iter_mut().zip(row_c) {
                        *x -= f * y;
                    }
                }
            }
        }
        a.into_iter().map(|row| row[n..].to_vec()).collect()
    }

    #[test]
    fn sweeps_match_a_dense_inverse() {
        let net = toy();
        let m = Maps::new(&net);
        let z = dense_inverse(&net);
        let zs = m.soma_transfer(&net.parent);
        for (k, row) in z.iter().enumerate() {
            assert!((m.input_impedance(k).re - row[k]).abs() < 1e-12);
            assert!((zs[k].re - row[0]).abs() < 1e-12);
        }
        for j in 0..4 {
            let r = m.site_ratio(&net, j);
            for (k, row) in z.iter().enumerate() {
                assert!((r[k].re - row[j] / z[j][j]).abs() < 1e-12, "j {j} k {k}");
            }
        }
    }
}
