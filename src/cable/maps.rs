//! Input and transfer impedances at every node in O(N): two sweeps over the parents-first order
//! (tree elimination in the style of Hines 1984 and Koch & Poggio 1985), one more for the voltage
//! map from any site.
//!
//! Notation (see DEVELOPERS.md): node k is joined to its parent p by the series admittance g_k
//! and has shunt S_k.
//! - D_k: admittance of k's own subtree seen at k, D_k = S_k + Σ_c g_c·D_c/(g_c + D_c).
//! - P_k: admittance at p of everything except k's branch (S_p + U_p + the other children of p),
//!   summed from the other terms directly (no subtraction, so nothing cancels).
//! - U_k = g_k·P_k/(g_k + P_k): the rest of the tree seen from k through its parent link.
//! - Z_kk = 1/(D_k + U_k).

use super::{C64, Network, children_csr};
use crate::morphology::NONE;

/// The sweeps' results for one network.
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
}

impl Maps {
    /// Both sweeps: children before parents for D, parents before children for P and U.
    pub fn new(net: &Network) -> Maps {
        let n = net.len();
        let g = &net.g;
        let mut d = net.shunt.clone();
        // contribution of k's branch to its parent: g_k·D_k/(g_k + D_k)
        let mut t = vec![C64::new(0.0, 0.0); n];
        let mut down = vec![C64::new(0.0, 0.0); n];
        for k in (1..n).rev() {
            let s = g[k] + d[k];
            down[k] = g[k] / s;
            t[k] = down[k] * d[k];
            let p = net.parent[k] as usize;
            let add = t[k];
            d[p] += add;
        }
        let (start, kids) = children_csr(&net.parent);
        let mut p_adm = vec![C64::new(0.0, 0.0); n];
        let mut u = vec![C64::new(0.0, 0.0); n];
        let mut scratch: Vec<C64> = Vec::new();
        for q in 0..n {
            let ks = &kids[start[q] as usize..start[q + 1] as usize];
            if ks.is_empty() {
                continue;
            }
            // node q is final (U_q known) before its children: parents-first order
            let base = net.shunt[q] + u[q];
            // prefix sums of the children's contributions, then a suffix sweep
            scratch.clear();
            let mut acc = C64::new(0.0, 0.0);
            for &c in ks {
                scratch.push(acc);
                acc += t[c as usize];
            }
            let mut suffix = C64::new(0.0, 0.0);
            for (i, &c) in ks.iter().enumerate().rev() {
                let c = c as usize;
                let pk = base + scratch[i] + suffix;
                p_adm[c] = pk;
                u[c] = g[c] * pk / (g[c] + pk);
                suffix += t[c];
            }
        }
        Maps {
            d,
            p: p_adm,
            u,
            down,
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
        1.0 / (self.d[k] + self.u[k])
    }

    /// Input impedance at every node (Ω).
    pub fn input_impedances(&self) -> Vec<C64> {
        (0..self.len()).map(|k| self.input_impedance(k)).collect()
    }

    /// Transfer impedance to the soma Z_ks for every node k (Ω): the voltage at k for a unit
    /// current at the soma (node 0), V_0 = 1/D_0 and V_k = V_p·g_k/(g_k + D_k); by reciprocity
    /// also the soma voltage for a unit current at k.
    pub fn soma_transfer(&self, parent: &[u32]) -> Vec<C64> {
        let n = self.len();
        let mut v = vec![C64::new(0.0, 0.0); n];
        if n == 0 {
            return v;
        }
        v[0] = 1.0 / self.d[0];
        for k in 1..n {
            v[k] = v[parent[k] as usize] * self.down[k];
        }
        v
    }

    /// Voltage ratio V_k / V_j at every node k for a current injected at node `j`: towards the
    /// root V_p = V_k·g_k/(g_k + P_k), into side branches V_c = V_p·g_c/(g_c + D_c).
    pub fn site_ratio(&self, net: &Network, j: usize) -> Vec<C64> {
        let n = self.len();
        let mut v = vec![C64::new(f64::NAN, 0.0); n];
        let mut on_path = vec![false; n];
        let mut k = j;
        v[k] = C64::new(1.0, 0.0);
        on_path[k] = true;
        while net.parent[k] != NONE {
            let p = net.parent[k] as usize;
            v[p] = v[k] * net.g[k] / (net.g[k] + self.p[k]);
            on_path[p] = true;
            k = p;
        }
        for k in 1..n {
            if !on_path[k] {
                v[k] = v[net.parent[k] as usize] * self.down[k];
            }
        }
        v
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cable::Params;

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
        for k in 0..4 {
            assert!((m.input_impedance(k).re - z[k][k]).abs() < 1e-12);
        }
        let zs = m.soma_transfer(&net.parent);
        for k in 0..4 {
            assert!((zs[k].re - z[k][0]).abs() < 1e-12);
        }
        for j in 0..4 {
            let r = m.site_ratio(&net, j);
            for k in 0..4 {
                assert!((r[k].re - z[k][j] / z[j][j]).abs() < 1e-12, "j {j} k {k}");
            }
        }
    }
}
