//! Private stand-in for `crate::cable::solve::TreeFactor` (same signature), used until the shared
//! tree-solve kernel is on main; delete this file then.

use crate::cable::Scalar;

/// LU factor of A = tree Laplacian of the series admittances + diag(shunt), parents-first.
#[derive(Debug, Clone)]
pub struct TreeFactor<T> {
    parent: Vec<u32>,
    g: Vec<T>,
    /// g_k/(g_k + D_k): how much of k's eliminated right-hand side reaches its parent.
    w: Vec<T>,
    /// 1/(g_k + D_k) for k > 0, 1/D_0 at the root.
    inv: Vec<T>,
}

impl<T: Scalar> TreeFactor<T> {
    /// Upward elimination in O(N) (Hines 1984), written as D_p += g·D_k/(g + D_k) so that a stiff
    /// link (huge g) and a small leak never cancel.
    pub fn new(parent: &[u32], g: &[T], shunt: &[T]) -> TreeFactor<T> {
        let n = parent.len();
        let one = T::real(1.0);
        let mut d = shunt.to_vec();
        let mut w = vec![T::real(0.0); n];
        let mut inv = vec![T::real(0.0); n];
        for k in (1..n).rev() {
            let p = parent[k] as usize;
            let s = g[k] + d[k];
            inv[k] = one / s;
            w[k] = g[k] * inv[k];
            let t = w[k] * d[k];
            d[p] += t;
        }
        if n > 0 {
            inv[0] = one / d[0];
        }
        TreeFactor {
            parent: parent.to_vec(),
            g: g.to_vec(),
            w,
            inv,
        }
    }

    /// x = A⁻¹ rhs in O(N), in place, no allocation.
    pub fn solve_in_place(&self, rhs: &mut [T]) {
        let n = self.parent.len();
        for k in (1..n).rev() {
            let p = self.parent[k] as usize;
            let r = rhs[k];
            rhs[p] += self.w[k] * r;
        }
        if n > 0 {
            rhs[0] = rhs[0] * self.inv[0];
        }
        for k in 1..n {
            let p = self.parent[k] as usize;
            rhs[k] = (rhs[k] + self.g[k] * rhs[p]) * self.inv[k];
        }
    }

    #[allow(dead_code)]
    pub fn len(&self) -> usize {
        self.parent.len()
    }

    #[allow(dead_code)]
    pub fn is_empty(&self) -> bool {
        self.parent.is_empty()
    }
}
