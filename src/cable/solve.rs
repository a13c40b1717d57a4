//! The one tree-solve kernel: every linear solve on a passive tree network goes through here.
//!
//! A = tree Laplacian of the series admittances g (g_k joins k and parent[k]) + diag(shunt),
//! over a parents-first tree (parent[k] < k, node 0 the root). [`TreeFactor`] eliminates A
//! upwards in O(N) (Hines 1984) and solves A·x = b in O(N) without allocating; [`TreeMaps`] adds
//! the downward sweep (Koch & Poggio 1985) and is the one result type of the analysis: subtree
//! admittance D, rest-of-tree P/U, input impedance Z_kk, soma column Z_k0, current-transfer
//! ratios, the column of any site, and the log attenuations with their single sign convention.
//!
//! Notation (DEVELOPERS.md): node k is joined to its parent p by g_k and has shunt S_k.
//! - D_k = S_k + Σ_c g_c·D_c/(g_c + D_c): k's own subtree seen at k.
//! - down_k = g_k/(g_k + D_k): V_k/V_p for current entering from the parent side.
//! - P_k: admittance at p of everything except k's branch (S_p + U_p + the other children of p),
//!   summed from its terms (never D_p − t_k, so nothing cancels).
//! - U_k = g_k·P_k/(g_k + P_k): the rest of the tree seen from k through its parent link.
//! - Z_kk = 1/(D_k + U_k); Z_k0 = V_k for unit current at the root.
//!
//! Log attenuations are natural logs of voltage ratios ≥ 1 (nepers): ln A ≥ 0 at DC, additive
//! along paths (Zador, Agmon-Snir & Segev 1995). Nothing here recurses: every pass is a loop over
//! the parents-first order, so a million-deep chain is as cheap as a bush.

use super::Scalar;
use crate::morphology::NONE;

/// The upward elimination of one tree network (Hines 1984), reusable for any number of
/// right-hand sides.
#[derive(Debug, Clone)]
pub struct TreeFactor<T> {
    parent: Vec<u32>,
    g: Vec<T>,
    /// D_k.
    d: Vec<T>,
    /// g_k/(g_k + D_k); 0 at the root.
    down: Vec<T>,
    /// 1/(g_k + D_k); 1/D_0 at the root.
    inv: Vec<T>,
}

/// Checks the lengths the kernel relies on; a violation is a programming error in the caller
/// (the parents-first order is checked during the elimination).
fn check_shape<T>(parent: &[u32], g: &[T], shunt: &[T]) {
    let n = parent.len();
    assert!(
        g.len() == n && shunt.len() == n,
        "tree arrays differ in length"
    );
    assert!(n == 0 || parent[0] == NONE, "node 0 must be the root");
}

/// Upward elimination (k = n−1 … 1; Hines 1984). On entry `d` holds the shunts, on return D.
/// When `p` is given, `p[k]` receives S_p + the branches of k's later siblings (the part of P_k
/// known when k is reached).
fn eliminate<T: Scalar, const RECORD_P: bool>(
    parent: &[u32],
    g: &[T],
    d: &mut [T],
    down: &mut [T],
    inv: &mut [T],
    p: &mut [T],
) {
    let one = T::real(1.0);
    for k in (1..parent.len()).rev() {
        let q = parent[k] as usize;
        assert!(q < k, "parents must come first (parent[k] < k)");
        let dk = d[k];
        let i = one / (g[k] + dk);
        inv[k] = i;
        let w = g[k] * i;
        down[k] = w;
        if RECORD_P {
            p[k] = d[q];
        }
        d[q] += w * dk;
    }
    if let Some(d0) = d.first() {
        inv[0] = one / *d0;
    }
}

impl<T: Scalar> TreeFactor<T> {
    /// A = tree Laplacian of series admittances g (g[k] joins k and parent[k], parent[0] = NONE)
    /// plus diag(shunt); parents-first (parent[k] < k). O(N) upward elimination (Hines 1984), no
    /// child lists. Panics if the arrays differ in length or are not parents-first.
    pub fn new(parent: &[u32], g: &[T], shunt: &[T]) -> TreeFactor<T> {
        TreeFactor::from_vecs(parent.to_vec(), g.to_vec(), shunt.to_vec())
    }

    /// [`TreeFactor::new`] taking the arrays (no copies; `shunt` becomes D).
    pub fn from_vecs(parent: Vec<u32>, g: Vec<T>, shunt: Vec<T>) -> TreeFactor<T> {
        TreeFactor::build(parent, g, shunt, None)
    }

    fn build(parent: Vec<u32>, g: Vec<T>, shunt: Vec<T>, p: Option<&mut [T]>) -> TreeFactor<T> {
        check_shape(&parent, &g, &shunt);
        let n = parent.len();
        let zero = T::real(0.0);
        let mut d = shunt;
        let mut down = vec![zero; n];
        let mut inv = vec![zero; n];
        match p {
            Some(p) => eliminate::<T, true>(&parent, &g, &mut d, &mut down, &mut inv, p),
            None => eliminate::<T, false>(&parent, &g, &mut d, &mut down, &mut inv, &mut []),
        }
        TreeFactor {
            parent,
            g,
            d,
            down,
            inv,
        }
    }

    /// The same tree with new shunts (series admittances and parents kept): eliminates again in
    /// place, no allocation. The result equals [`TreeFactor::new`] with these shunts, bit for bit.
    /// Panics if `shunt` has the wrong length.
    pub fn refactor(&mut self, shunt: &[T]) {
        check_shape(&self.parent, &self.g, shunt);
        self.d.copy_from_slice(shunt);
        eliminate::<T, false>(
            &self.parent,
            &self.g,
            &mut self.d,
            &mut self.down,
            &mut self.inv,
            &mut [],
        );
    }

    /// x = A⁻¹·rhs in O(N), in place, no allocation: the upward pass folds each node's current
    /// into its parent (weight down_k), then V_0 = I'_0/D_0 and V_k = I'_k/(g_k + D_k) +
    /// down_k·V_p on the way down (Hines 1984). Panics if `rhs` has the wrong length.
    pub fn solve_in_place(&self, rhs: &mut [T]) {
        let n = self.len();
        assert_eq!(rhs.len(), n, "right-hand side has the wrong length");
        if n == 0 {
            return;
        }
        for k in (1..n).rev() {
            let q = self.parent[k] as usize;
            let add = self.down[k] * rhs[k];
            rhs[q] += add;
        }
        rhs[0] = rhs[0] * self.inv[0];
        for k in 1..n {
            let q = self.parent[k] as usize;
            rhs[k] = rhs[k] * self.inv[k] + self.down[k] * rhs[q];
        }
    }

    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.parent.len()
    }

    pub fn is_empty(&self) -> bool {
        self.parent.is_empty()
    }

    /// Subtree admittance D_k (S).
    pub fn subtree_admittance(&self) -> &[T] {
        &self.d
    }

    /// Current-transfer ratio of each parent link, down_k = g_k/(g_k + D_k) (0 at the root):
    /// V_k/V_p for current entering k's subtree from its parent, and the share of a current at k
    /// that reaches the parent (reciprocity).
    pub fn down(&self) -> &[T] {
        &self.down
    }

    /// The parent array (parents first).
    pub fn parent(&self) -> &[u32] {
        &self.parent
    }

    /// Series admittances g (g[0] unused).
    pub fn series(&self) -> &[T] {
        &self.g
    }

    /// Input admittance at the root, D_0 (0 for an empty tree).
    pub fn root_admittance(&self) -> T {
        self.d.first().copied().unwrap_or(T::real(0.0))
    }

    /// Z_k0 at every node: the voltage for a unit current at the root, V_0 = 1/D_0 and
    /// V_k = V_p·down_k (by reciprocity also the root voltage for unit current at k).
    pub fn soma_transfer(&self) -> Vec<T> {
        let mut v = vec![T::real(0.0); self.len()];
        if let Some(v0) = v.first_mut() {
            *v0 = self.inv[0];
        }
        for k in 1..self.len() {
            v[k] = v[self.parent[k] as usize] * self.down[k];
        }
        v
    }
}

impl TreeFactor<f64> {
    /// Number of negative pivots of the elimination (g_k + D_k below the root, D_0 at it): by
    /// Sylvester's law of inertia (1852) the number of negative eigenvalues of A. `None` when a
    /// pivot is zero or not finite (the count is then undecided).
    pub fn negative_pivots(&self) -> Option<usize> {
        let mut count = 0;
        for &i in &self.inv {
            if !i.is_finite() || i == 0.0 {
                return None;
            }
            count += usize::from(i < 0.0);
        }
        Some(count)
    }
}

/// Every node's result of one network analysis (see the module doc): the factor plus the
/// downward sweep. Built by [`TreeMaps::new`] in O(N).
#[derive(Debug, Clone)]
pub struct TreeMaps<T> {
    factor: TreeFactor<T>,
    /// P_k (0 at the root).
    p: Vec<T>,
    /// Z_kk.
    z_in: Vec<T>,
    /// Z_k0.
    z_soma: Vec<T>,
    /// ln|Z_k0| per node, kept only when some |Z_k0| left the range of f64 (a cell many length
    /// constants long, or a high frequency): attenuations are then taken from logs summed along
    /// the path, so they saturate at +∞, never NaN.
    ln_z_soma: Option<Vec<f64>>,
}

/// Downward sweep (k = 1 … n−1; Koch & Poggio 1985): completes P_k = S_p + U_p + Σ_{c≠k} t_c
/// (summed from its terms), U_k = g_k·P_k/(g_k + P_k), Z_kk = 1/(D_k + U_k) and
/// Z_k0 = Z_p0·down_k.
fn downward<T: Scalar>(f: &TreeFactor<T>, p: &mut [T]) -> (Vec<T>, Vec<T>) {
    let n = f.len();
    let zero = T::real(0.0);
    let one = T::real(1.0);
    let (parent, g, d, down) = (&f.parent, &f.g, &f.d, &f.down);
    // acc[q]: U_q plus the branches of q's children met so far
    let mut acc = vec![zero; n];
    let mut z_in = vec![zero; n];
    let mut z_soma = vec![zero; n];
    if n == 0 {
        return (z_in, z_soma);
    }
    z_in[0] = f.inv[0];
    z_soma[0] = f.inv[0];
    for k in 1..n {
        let q = parent[k] as usize;
        let pk = p[k] + acc[q];
        p[k] = pk;
        let dk = d[k];
        acc[q] += down[k] * dk;
        let uk = g[k] * pk / (g[k] + pk);
        acc[k] = uk;
        z_in[k] = one / (dk + uk);
        z_soma[k] = z_soma[q] * down[k];
    }
    (z_in, z_soma)
}

/// |x| is zero, subnormal or not finite: its logarithm cannot be trusted.
fn out_of_range(x: f64) -> bool {
    !(x >= f64::MIN_POSITIVE && x.is_finite())
}

impl<T: Scalar> TreeMaps<T> {
    /// Both sweeps over the network (see [`TreeFactor::new`] for the arrays' meaning).
    pub fn new(parent: &[u32], g: &[T], shunt: &[T]) -> TreeMaps<T> {
        TreeMaps::from_vecs(parent.to_vec(), g.to_vec(), shunt.to_vec())
    }

    /// [`TreeMaps::new`] taking the arrays (no copies).
    pub fn from_vecs(parent: Vec<u32>, g: Vec<T>, shunt: Vec<T>) -> TreeMaps<T> {
        let mut p = vec![T::real(0.0); parent.len()];
        let factor = TreeFactor::build(parent, g, shunt, Some(&mut p));
        let (z_in, z_soma) = downward(&factor, &mut p);
        // |Z_k0| is a product of link ratios: far from the soma it can underflow
        // (max(|re|, |im|) is within √2 of |z|: no square root per node for the check)
        let ln_z_soma = z_soma
            .iter()
            .any(|z| out_of_range(z.abs_bound()))
            .then(|| ln_soma_transfer(&factor));
        TreeMaps {
            factor,
            p,
            z_in,
            z_soma,
            ln_z_soma,
        }
    }

    /// The factor, for further solves with arbitrary currents.
    pub fn factor(&self) -> &TreeFactor<T> {
        &self.factor
    }

    pub fn len(&self) -> usize {
        self.factor.len()
    }

    pub fn is_empty(&self) -> bool {
        self.factor.is_empty()
    }

    pub fn parent(&self) -> &[u32] {
        &self.factor.parent
    }

    /// Subtree admittance D_k (S).
    pub fn subtree_admittance(&self) -> &[T] {
        &self.factor.d
    }

    /// P_k: admittance at k's parent of everything except k's branch (S); 0 at the root.
    pub fn parent_side(&self) -> &[T] {
        &self.p
    }

    /// U_k = g_k·P_k/(g_k + P_k): the rest of the tree seen from k through its parent link
    /// (S); 0 at the root. Computed on each call (not stored).
    pub fn rest_of_tree(&self) -> Vec<T> {
        let f = &self.factor;
        let mut u: Vec<T> =
            f.g.iter()
                .zip(&self.p)
                .map(|(&g, &p)| g * p / (g + p))
                .collect();
        if let Some(u0) = u.first_mut() {
            *u0 = T::real(0.0);
        }
        u
    }

    /// down_k = g_k/(g_k + D_k) (see [`TreeFactor::down`]).
    pub fn down(&self) -> &[T] {
        &self.factor.down
    }

    /// Input impedance Z_kk = 1/(D_k + U_k) (Ω).
    pub fn input_impedance(&self) -> &[T] {
        &self.z_in
    }

    /// Transfer impedance to the root Z_k0 (Ω): V_k for unit current at the root, and by
    /// reciprocity V_0 for unit current at k.
    pub fn soma_transfer(&self) -> &[T] {
        &self.z_soma
    }

    /// V_k/V_j at every node k for a current injected at node `j` (the column of A⁻¹ through j,
    /// scaled by 1/Z_jj; one O(N) pass): towards the root V_p = V_k·g_k/(g_k + P_k), into side
    /// branches V_c = V_p·down_c (Koch & Poggio 1985). `None` when `j` is not a node.
    pub fn site_ratio(&self, j: usize) -> Option<Vec<T>> {
        let f = &self.factor;
        let n = f.len();
        if j >= n {
            return None;
        }
        let mut v = vec![T::real(0.0); n];
        let mut on_path = vec![false; n];
        let mut k = j;
        v[k] = T::real(1.0);
        on_path[k] = true;
        while f.parent[k] != NONE {
            let q = f.parent[k] as usize;
            v[q] = v[k] * f.g[k] / (f.g[k] + self.p[k]);
            on_path[q] = true;
            k = q;
        }
        for k in 1..n {
            if !on_path[k] {
                v[k] = v[f.parent[k] as usize] * f.down[k];
            }
        }
        Some(v)
    }

    /// ln A_{j→k} = ln|V_j/V_k| (nepers, ≥ 0 at DC) at every node k for a current injected at
    /// node `j`, summed along the path link by link (ln|(g_k + P_k)/g_k| towards the root,
    /// ln|(g_c + D_c)/g_c| into side branches), so it stays finite where V_k/V_j would underflow.
    /// `None` when `j` is not a node.
    pub fn ln_attenuations_from_site(&self, j: usize) -> Option<Vec<f64>> {
        let f = &self.factor;
        let n = f.len();
        if j >= n {
            return None;
        }
        let mut a = vec![0.0; n];
        let mut on_path = vec![false; n];
        let mut k = j;
        on_path[k] = true;
        while f.parent[k] != NONE {
            let q = f.parent[k] as usize;
            a[q] = a[k] + ((f.g[k] + self.p[k]) / f.g[k]).abs().ln();
            on_path[q] = true;
            k = q;
        }
        for k in 1..n {
            if !on_path[k] {
                a[k] = a[f.parent[k] as usize] - f.down[k].abs().ln();
            }
        }
        Some(a)
    }

    /// A_{k→s} = |Z_kk/Z_k0| (+∞ when beyond f64; never NaN).
    pub fn attenuation_to_soma(&self, k: usize) -> f64 {
        match &self.ln_z_soma {
            Some(_) => self.ln_attenuation_to_soma(k).exp(),
            None => (self.z_in[k] / self.z_soma[k]).abs(),
        }
    }

    /// A_{s→k} = |Z_00/Z_k0| (+∞ when beyond f64; never NaN).
    pub fn attenuation_from_soma(&self, k: usize) -> f64 {
        match &self.ln_z_soma {
            Some(_) => self.ln_attenuation_from_soma(k).exp(),
            None => (self.z_in[0] / self.z_soma[k]).abs(),
        }
    }

    /// ln A_{k→s} (nepers, ≥ 0 at DC), additive along paths; finite even where A is too large
    /// for f64.
    pub fn ln_attenuation_to_soma(&self, k: usize) -> f64 {
        match &self.ln_z_soma {
            Some(l) => self.z_in[k].abs().ln() - l[k],
            None => self.attenuation_to_soma(k).ln(),
        }
    }

    /// ln A_{s→k} (nepers, ≥ 0 at DC); finite even where A is too large for f64.
    pub fn ln_attenuation_from_soma(&self, k: usize) -> f64 {
        match &self.ln_z_soma {
            Some(l) => self.z_in[0].abs().ln() - l[k],
            None => self.attenuation_from_soma(k).ln(),
        }
    }

    /// [`TreeMaps::ln_attenuation_to_soma`] at every node.
    pub fn ln_attenuations_to_soma(&self) -> Vec<f64> {
        (0..self.len())
            .map(|k| self.ln_attenuation_to_soma(k))
            .collect()
    }

    /// [`TreeMaps::ln_attenuation_from_soma`] at every node.
    pub fn ln_attenuations_from_soma(&self) -> Vec<f64> {
        (0..self.len())
            .map(|k| self.ln_attenuation_from_soma(k))
            .collect()
    }
}

/// ln|Z_k0| at every node from the link ratios: ln|Z_00| + Σ ln|down_k| along the path.
fn ln_soma_transfer<T: Scalar>(f: &TreeFactor<T>) -> Vec<f64> {
    let n = f.len();
    let mut l = vec![0.0; n];
    if let Some(first) = l.first_mut() {
        *first = f.inv[0].abs().ln();
    }
    for k in 1..n {
        l[k] = l[f.parent[k] as usize] + f.down[k].abs().ln();
    }
    l
}

/// Log attenuation in nepers: ln A.
/// The child end of the link joining nodes `a` and `b` of a parent array, or `None` when they
/// are not joined by a link.
pub fn link_child(parent: &[u32], a: usize, b: usize) -> Option<usize> {
    if parent.get(b) == Some(&(a as u32)) {
        Some(b)
    } else if parent.get(a) == Some(&(b as u32)) {
        Some(a)
    } else {
        None
    }
}

pub fn neper(attenuation: f64) -> f64 {
    attenuation.ln()
}

/// Log attenuation in decibels: 20·log10 A (a voltage ratio); from nepers, dB = Np·20/ln 10.
pub fn db(attenuation: f64) -> f64 {
    20.0 * attenuation.log10()
}

/// Nepers to decibels (voltage ratio): 20/ln 10 ≈ 8.686 dB per Np.
pub fn db_from_neper(ln_a: f64) -> f64 {
    ln_a * (20.0 / std::f64::consts::LN_10)
}

#[cfg(test)]
mod tests;
