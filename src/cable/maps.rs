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

use super::{C64, Network, Scalar};
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

/// What the two sweeps give, in any [`Scalar`] (`f64` at DC, `C64` at f > 0).
#[derive(Debug, Clone, Default)]
pub struct Sweep<T> {
    /// P_k: admittance at k's parent of everything except k's branch (S); P_0 = 0.
    pub p: Vec<T>,
    /// g_k/(g_k + D_k): voltage ratio V_k/V_parent for current entering from the parent side.
    pub down: Vec<T>,
    /// Input impedance Z_kk = 1/(D_k + U_k) (Ω).
    pub z_in: Vec<T>,
    /// Transfer impedance to the soma Z_k0 (Ω).
    pub z_soma: Vec<T>,
}

/// Upward sweep (k = n−1 … 1; Hines 1984): on entry `d` holds the shunts S_k, on return the
/// subtree admittances D_k = S_k + Σ_c g_c·D_c/(g_c + D_c). Also fills `down[k]` =
/// g_k/(g_k + D_k) and `p[k]` = S_p + the branches of k's later siblings (the part of P_k known
/// when k is reached).
fn upward<T: Scalar>(parent: &[u32], g: &[T], d: &mut [T], down: &mut [T], p: &mut [T]) {
    for k in (1..parent.len()).rev() {
        let pk = parent[k] as usize;
        let dk = d[k];
        let w = g[k] / (g[k] + dk);
        down[k] = w;
        p[k] = d[pk];
        d[pk] += w * dk;
    }
}

/// Downward sweep (k = 1 … n−1): completes P_k = S_p + U_p + Σ_{c≠k} t_c in `p` (summed from
/// its terms: no subtraction, nothing cancels), turns `d` (D_k on entry) into Z_kk = 1/(D_k + U_k)
/// with U_k = g_k·P_k/(g_k + P_k), and returns Z_k0 (V_k for unit current at the soma:
/// V_0 = 1/D_0, V_k = V_p·g_k/(g_k + D_k)).
fn downward<T: Scalar>(parent: &[u32], g: &[T], d: &mut [T], down: &[T], p: &mut [T]) -> Vec<T> {
    let n = parent.len();
    let zero = T::real(0.0);
    let one = T::real(1.0);
    // acc[q]: U_q plus the branches of q's children met so far
    let mut acc = vec![zero; n];
    let mut z_soma = vec![zero; n];
    d[0] = one / d[0];
    z_soma[0] = d[0];
    for k in 1..n {
        let pk = parent[k] as usize;
        let pp = p[k] + acc[pk];
        p[k] = pp;
        let dk = d[k];
        acc[pk] += down[k] * dk;
        let uk = g[k] * pp / (g[k] + pp);
        acc[k] = uk;
        d[k] = one / (dk + uk);
        z_soma[k] = z_soma[pk] * down[k];
    }
    z_soma
}

/// The two sweeps over a parents-first tree (`parent[k] < k`, node 0 the root) with series
/// admittances `g` and shunts `shunt` (tree elimination: Hines 1984; Koch & Poggio 1985): Z_kk
/// and Z_k0 at every node in O(N), without child lists. When node k is reached on the way up,
/// its parent's running sum holds S_p plus the branches of k's later siblings; on the way down
/// the earlier siblings' branches and U_p are added.
pub fn sweep<T: Scalar>(parent: &[u32], g: &[T], shunt: &[T]) -> Sweep<T> {
    let n = parent.len();
    assert!(g.len() == n && shunt.len() == n, "array lengths differ");
    if n == 0 {
        return Sweep {
            p: vec![],
            down: vec![],
            z_in: vec![],
            z_soma: vec![],
        };
    }
    let zero = T::real(0.0);
    let mut z = shunt.to_vec();
    let mut down = vec![zero; n];
    let mut p = vec![zero; n];
    upward(parent, g, &mut z, &mut down, &mut p);
    let z_soma = downward(parent, g, &mut z, &down, &mut p);
    Sweep {
        p,
        down,
        z_in: z,
        z_soma,
    }
}

/// Voltage ratio V_k / V_j at every node k for a current injected at node `j` (one more pass):
/// towards the root V_p = V_k·g_k/(g_k + P_k), into side branches V_c = V_p·g_c/(g_c + D_c)
/// (Koch & Poggio 1985). `None` when `j` is not a node.
pub fn site_ratio_t<T: Scalar>(
    parent: &[u32],
    g: &[T],
    p: &[T],
    down: &[T],
    j: usize,
) -> Option<Vec<T>> {
    let n = parent.len();
    if j >= n {
        return None;
    }
    let zero = T::real(0.0);
    let mut v = vec![zero; n];
    let mut on_path = vec![false; n];
    let mut k = j;
    v[k] = T::real(1.0);
    on_path[k] = true;
    while parent[k] != NONE {
        let q = parent[k] as usize;
        v[q] = v[k] * g[k] / (g[k] + p[k]);
        on_path[q] = true;
        k = q;
    }
    for k in 1..n {
        if !on_path[k] {
            v[k] = v[parent[k] as usize] * down[k];
        }
    }
    Some(v)
}

impl Maps {
    /// Both sweeps (see [`sweep`]).
    pub fn new(net: &Network) -> Maps {
        let n = net.len();
        let zero = C64::new(0.0, 0.0);
        let mut d = net.shunt.clone();
        let mut down = vec![zero; n];
        let mut p = vec![zero; n];
        let mut u = vec![zero; n];
        if n > 0 {
            upward(&net.parent, &net.g, &mut d, &mut down, &mut p);
            let mut z = d.clone();
            downward(&net.parent, &net.g, &mut z, &down, &mut p);
            for k in 1..n {
                u[k] = net.g[k] * p[k] / (net.g[k] + p[k]);
            }
        }
        Maps { d, p, u, down }
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
    /// All NaN if `j` is not a node (use [`site_ratio_t`] for an `Option`).
    pub fn site_ratio(&self, net: &Network, j: usize) -> Vec<C64> {
        site_ratio_t(&net.parent, &net.g, &self.p, &self.down, j)
            .unwrap_or_else(|| vec![C64::new(f64::NAN, f64::NAN); self.len()])
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
