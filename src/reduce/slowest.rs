//! The slowest mode of an RC tree, G·x = λ·C·x (G: axial and leak conductances, C diagonal):
//! λ₀ certified to a relative tolerance, and its mode.
//!
//! Inverse iteration with the tree factorisation of G (Hines 1984), from the caller's previous
//! mode when there is one (the capacitance fit moves C a little per evaluation) or else from
//! the uniform voltage (Rall 1969: the slowest mode of a uniform membrane is uniform), gives a
//! Rayleigh quotient λ ≥ λ₀. The certificate is the inertia of G − λ(1 − ε)·C: no negative
//! pivot in its tree elimination means no eigenvalue below λ(1 − ε) (Sylvester's law of
//! inertia, 1852), so λ₀ ∈ [λ(1 − ε), λ]. When the certificate fails (the iteration sits near a
//! faster mode, or the slowest two are close and it has not converged), bisection on the same
//! count (Wilkinson 1965's Sturm-count bisection) brackets λ₀ to 0.1 %, and inverse iteration
//! shifted to the bracket's lower end finishes; if even that is not certified, bisection goes on
//! to ε and the mode is the shifted iteration's.
//!
//! What this does not do: any mode but the slowest, or allocate per call (the factors and the
//! shifted shunts are kept between calls).

use crate::cable::solve::TreeFactor;

/// Inverse-iteration steps at most before the certificate is tried (an RC tree's slowest two
/// rates usually differ by a factor of several, so a step gains that factor squared in λ).
const PLAIN_STEPS: usize = 40;

/// Shifted inverse-iteration steps at most after the bisection.
const SHIFTED_STEPS: usize = 100;

/// Relative width of the bracket the bisection leaves for the shifted iteration.
const BRACKET: f64 = 1e-3;

/// One tree's slowest-mode solver: G fixed, C given per call.
#[derive(Debug, Clone)]
pub(crate) struct SlowestMode {
    /// G factored (axial and leak).
    g_fac: TreeFactor<f64>,
    /// G − σ·C for the last shift σ tried.
    shifted: TreeFactor<f64>,
    shunt: Vec<f64>,
    leak: Vec<f64>,
    /// The mode of the last call (unit length, positive): the next call's start.
    x: Vec<f64>,
}

impl SlowestMode {
    /// The solver for the tree of series conductances `g` and leaks `leak` (parents first).
    pub(crate) fn new(parent: &[u32], g: &[f64], leak: &[f64]) -> SlowestMode {
        let g_fac = TreeFactor::new(parent, g, leak);
        SlowestMode {
            shifted: g_fac.clone(),
            g_fac,
            shunt: leak.to_vec(),
            leak: leak.to_vec(),
            x: Vec::new(),
        }
    }

    /// The mode of the last [`SlowestMode::solve`] or [`SlowestMode::estimate`] (unit length).
    pub(crate) fn mode(&self) -> &[f64] {
        &self.x
    }

    /// λ₀ for capacitances `cap` (1/s for S and F) within relative `eps` (λ₀ ∈ [λ(1 − ε), λ]
    /// when certified, see the module documentation) and xᵀCx of the mode left in
    /// [`SlowestMode::mode`]. Starts from the uniform voltage.
    pub(crate) fn solve(&mut self, cap: &[f64], eps: f64) -> (f64, f64) {
        let n = self.leak.len();
        if n == 0 || cap.len() != n {
            return (0.0, 0.0);
        }
        self.x.clear();
        self.x.resize(n, 1.0);
        let (lam, xcx) = self.iterate(false, cap, PLAIN_STEPS, 0.1 * eps);
        if self.count_below(cap, lam * (1.0 - eps)) == Some(0) {
            return (lam, xcx);
        }

        // bracket λ₀: hi has a mode below it (or is undecided), lo none
        let mut hi = lam * (1.0 - eps);
        let mut lo = hi;
        let mut found = false;
        for _ in 0..64 {
            lo *= 0.25;
            if self.count_below(cap, lo) == Some(0) {
                found = true;
                break;
            }
        }
        if !found {
            return (lam, xcx);
        }
        self.bisect(cap, &mut lo, &mut hi, BRACKET);
        // inverse iteration shifted to lo (G − lo·C is positive definite), from the uniform
        // voltage (the slowest mode is positive: it cannot be orthogonal to it)
        self.count_below(cap, lo);
        self.x.iter_mut().for_each(|v| *v = 1.0);
        let (lam, xcx) = self.iterate(true, cap, SHIFTED_STEPS, 0.1 * eps);
        if lam <= hi && self.count_below(cap, lam * (1.0 - eps)) == Some(0) {
            return (lam, xcx);
        }
        self.bisect(cap, &mut lo, &mut hi, eps);
        (hi, xcx)
    }

    /// Geometric bisection of [lo, hi] on the count of modes below, to relative width `width`.
    fn bisect(&mut self, cap: &[f64], lo: &mut f64, hi: &mut f64, width: f64) {
        while *hi > *lo * (1.0 + width) {
            let mid = (*lo * *hi).sqrt();
            if mid <= *lo || mid >= *hi {
                break;
            }
            if self.count_below(cap, mid) == Some(0) {
                *lo = mid;
            } else {
                *hi = mid;
            }
        }
    }

    /// The fit's estimate: `steps` steps of inverse iteration from the uniform voltage, no
    /// certificate. A fixed number of steps from a fixed start makes the estimate a smooth
    /// function of C, which the fit's line search needs (λ₀ itself has corners where the
    /// slowest two modes cross, and on reduced trees they are close: τ₁/τ₀ ≈ 0.984–0.9999 on
    /// the 100k-point cell); it weights the near-slowest modes together. Returns the Rayleigh
    /// quotient and xᵀCx, the iterate left in [`SlowestMode::mode`].
    pub(crate) fn estimate(&mut self, cap: &[f64], steps: usize) -> (f64, f64) {
        let x = &mut self.x;
        x.clear();
        x.resize(self.leak.len(), 1.0);
        // no Rayleigh quotient until the end (nothing stops early); the scale is reset every
        // few steps only to stay far from underflow (each step scales x by about τ in s)
        for step in 1..=steps {
            x.iter_mut().zip(cap).for_each(|(a, c)| *a *= c);
            self.g_fac.solve_in_place(x);
            if step % 4 == 0 && step < steps {
                let s = norm(x);
                x.iter_mut().for_each(|v| *v /= s);
            }
        }
        let (parent, g) = (self.g_fac.parent(), self.g_fac.series());
        scaled_rayleigh(x, parent, g, &self.leak, cap)
    }

    /// Number of modes below σ: the negative pivots of G − σ·C (see the module documentation);
    /// `None` when a pivot is zero or not finite.
    pub(crate) fn count_below(&mut self, cap: &[f64], sigma: f64) -> Option<usize> {
        for ((s, &l), &c) in self.shunt.iter_mut().zip(&self.leak).zip(cap) {
            *s = l - sigma * c;
        }
        self.shifted.refactor(&self.shunt);
        self.shifted.negative_pivots()
    }

    /// Inverse iteration x ← A⁻¹·C·x (A = G, or the last shifted factor) for at most `steps`
    /// steps, until the Rayleigh quotient xᵀGx / xᵀCx moves by less than `tol` (relative).
    /// Returns it and xᵀCx.
    fn iterate(&mut self, shifted: bool, cap: &[f64], steps: usize, tol: f64) -> (f64, f64) {
        let fac = if shifted { &self.shifted } else { &self.g_fac };
        let (parent, g) = (self.g_fac.parent(), self.g_fac.series());
        let x = &mut self.x;
        let (mut lam, mut xcx) = scaled_rayleigh(x, parent, g, &self.leak, cap);
        for _ in 0..steps {
            x.iter_mut().zip(cap).for_each(|(a, c)| *a *= c);
            fac.solve_in_place(x);
            let (next, next_xcx) = scaled_rayleigh(x, parent, g, &self.leak, cap);
            let moved = ((next - lam) / next).abs();
            (lam, xcx) = (next, next_xcx);
            if moved < tol {
                break;
            }
        }
        (lam, xcx)
    }
}

/// Euclidean length of x (floored, so a zero vector divides safely).
fn norm(x: &[f64]) -> f64 {
    x.iter().map(|v| v * v).sum::<f64>().sqrt().max(1e-300)
}

/// Scales x to unit length and returns the Rayleigh quotient xᵀGx / xᵀCx and xᵀCx.
fn scaled_rayleigh(
    x: &mut [f64],
    parent: &[u32],
    g: &[f64],
    leak: &[f64],
    cap: &[f64],
) -> (f64, f64) {
    let norm = norm(x);
    let (mut xgx, mut xcx) = (-0.0, -0.0);
    for ((v, &l), &c) in x.iter_mut().zip(leak).zip(cap) {
        *v /= norm;
        xgx += l * *v * *v;
        xcx += c * *v * *v;
    }
    for k in 1..x.len() {
        let d = x[k] - x[parent[k] as usize];
        xgx += g[k] * d * d;
    }
    (xgx / f64::max(xcx, 1e-300), xcx)
}

/// The slowest time constant (ms) of any RC tree given parents-first (conductances in nS,
/// capacitances in pF): 1/λ₀ certified to 1e-10 (see the module documentation).
pub fn slowest_time_constant_ms(
    parent: &[u32],
    g_ns: &[f64],
    leak_ns: &[f64],
    cap_pf: &[f64],
) -> f64 {
    let (lam, _) = SlowestMode::new(parent, g_ns, leak_ns).solve(cap_pf, 1e-10);
    1.0 / lam
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Dense reference: the smallest eigenvalue of C^(-1/2)·G·C^(-1/2) by nalgebra.
    fn dense_lambda(parent: &[u32], g: &[f64], leak: &[f64], cap: &[f64]) -> f64 {
        let n = parent.len();
        let mut a = nalgebra::DMatrix::<f64>::zeros(n, n);
        for k in 0..n {
            a[(k, k)] += leak[k];
            if k > 0 {
                let p = parent[k] as usize;
                a[(k, k)] += g[k];
                a[(p, p)] += g[k];
                a[(k, p)] -= g[k];
                a[(p, k)] -= g[k];
            }
        }
        let s: Vec<f64> = cap.iter().map(|c| 1.0 / c.sqrt()).collect();
        for i in 0..n {
            for j in 0..n {
                a[(i, j)] *= s[i] * s[j];
            }
        }
        a.symmetric_eigenvalues().min()
    }

    #[test]
    fn certified_lambda_matches_a_dense_eigensolver_on_hard_trees() {
        // trees built to defeat plain inverse iteration: two nearly equal slow modes (two
        // identical weakly coupled halves) and huge capacitance contrasts; reference nalgebra
        let mut seed = 7u64;
        let mut rnd = || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for case in 0..40 {
            let n = 3 + case * 3;
            let parent: Vec<u32> = (0..n)
                .map(|k| {
                    if k == 0 {
                        u32::MAX
                    } else {
                        (rnd() * k as f64) as u32
                    }
                })
                .collect();
            let g: Vec<f64> = (0..n)
                .map(|k| if k == 1 { 1e-6 } else { 0.1 + rnd() })
                .collect();
            let leak: Vec<f64> = (0..n).map(|_| 0.01 + 0.01 * rnd()).collect();
            let cap: Vec<f64> = (0..n).map(|_| (rnd() * 16.0 - 8.0).exp()).collect();
            let want = dense_lambda(&parent, &g, &leak, &cap);
            let mut solver = SlowestMode::new(&parent, &g, &leak);
            let (got, _) = solver.solve(&cap, 1e-10);
            assert!(
                (got / want - 1.0).abs() < 1e-8,
                "case {case}: λ {got} vs nalgebra {want}"
            );
            // the same solver again, for other capacitances
            let cap2: Vec<f64> = cap.iter().rev().copied().collect();
            let (got2, _) = solver.solve(&cap2, 1e-10);
            let want2 = dense_lambda(&parent, &g, &leak, &cap2);
            assert!(
                (got2 / want2 - 1.0).abs() < 1e-8,
                "case {case} again: λ {got2} vs nalgebra {want2}"
            );
        }
    }
}
