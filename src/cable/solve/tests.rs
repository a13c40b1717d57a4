//! The kernel against a dense nalgebra solve (real and complex, random trees), closed forms of
//! a uniform ladder, and a million-deep chain.

use super::*;
use crate::cable::C64;
use nalgebra::DMatrix;

/// xorshift64 (common practice, no source): reproducible pseudo-random numbers in [0, 1).
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> f64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// A random parents-first tree with random admittances; imaginary parts only if `complex`.
fn random_tree(n: usize, seed: u64, complex: bool) -> (Vec<u32>, Vec<C64>, Vec<C64>) {
    let mut r = Rng(seed);
    let mut parent = vec![NONE];
    let mut g = vec![C64::new(0.0, 0.0)];
    let mut s = vec![C64::new(0.01 + r.next(), 0.0)];
    for k in 1..n {
        // mostly chains with some branching, as in a neuron
        let p = if r.next() < 0.7 {
            k - 1
        } else {
            (r.next() * k as f64) as usize
        };
        parent.push(p as u32);
        let im = |r: &mut Rng| if complex { r.next() } else { 0.0 };
        g.push(C64::new(0.2 + 3.0 * r.next(), im(&mut r)));
        s.push(C64::new(0.001 + 0.3 * r.next(), im(&mut r)));
    }
    if complex {
        s[0].im = 0.4;
    }
    (parent, g, s)
}

/// The nodal admittance matrix written out entry by entry (Kirchhoff's current law).
fn dense(parent: &[u32], g: &[C64], s: &[C64], keep: &dyn Fn(usize) -> bool) -> DMatrix<C64> {
    let n = parent.len();
    let mut a = DMatrix::<C64>::zeros(n, n);
    for k in 0..n {
        if !keep(k) {
            a[(k, k)] = C64::new(1.0, 0.0);
            continue;
        }
        a[(k, k)] += s[k];
        if k > 0 && keep(parent[k] as usize) {
            let p = parent[k] as usize;
            a[(k, k)] += g[k];
            a[(p, p)] += g[k];
            a[(k, p)] -= g[k];
            a[(p, k)] -= g[k];
        }
    }
    a
}

fn close(a: C64, b: C64, tol: f64) -> bool {
    (a - b).norm() <= tol * b.norm().max(1e-300)
}

fn in_subtree(parent: &[u32], k: usize, root: usize) -> bool {
    let mut x = k;
    loop {
        if x == root {
            return true;
        }
        if parent[x] == NONE {
            return false;
        }
        x = parent[x] as usize;
    }
}

fn check_against_dense(parent: &[u32], g: &[C64], s: &[C64]) {
    let n = parent.len();
    let inv = dense(parent, g, s, &|_| true)
        .try_inverse()
        .expect("A is regular");
    let m = TreeMaps::new(parent, g, s);
    let f = TreeFactor::new(parent, g, s);
    assert_eq!(f.len(), n);
    let tol = 1e-10;
    // the factor's solve against the dense solve, random right-hand side
    let mut r = Rng(99);
    let b: Vec<C64> = (0..n)
        .map(|_| C64::new(r.next() - 0.5, r.next() - 0.5))
        .collect();
    let mut x = b.clone();
    f.solve_in_place(&mut x);
    let want = &inv * DMatrix::from_column_slice(n, 1, &b);
    for k in 0..n {
        assert!(
            close(x[k], want[(k, 0)], tol),
            "solve k {k}: {} {}",
            x[k],
            want[(k, 0)]
        );
    }
    let zs = f.soma_transfer();
    for k in 0..n {
        assert!(
            close(m.input_impedance()[k], inv[(k, k)], tol),
            "Z_kk at {k}"
        );
        assert!(close(m.soma_transfer()[k], inv[(k, 0)], tol), "Z_k0 at {k}");
        assert!(close(zs[k], inv[(k, 0)], tol), "factor Z_k0 at {k}");
        // D_k: input admittance of k's subtree alone (dense matrix of the subtree)
        let sub = dense(parent, g, s, &|x| in_subtree(parent, x, k));
        let zsub = sub.try_inverse().expect("regular")[(k, k)];
        assert!(
            close(m.subtree_admittance()[k], 1.0 / zsub, tol),
            "D at {k}"
        );
        assert!(
            close(f.subtree_admittance()[k], 1.0 / zsub, tol),
            "factor D at {k}"
        );
        if k > 0 {
            let p = parent[k] as usize;
            // down_k = V_k/V_p for current at the root
            assert!(
                close(m.down()[k], inv[(k, 0)] / inv[(p, 0)], tol),
                "down at {k}"
            );
            // P_k: the tree without k's subtree, seen at p
            let rest = dense(parent, g, s, &|x| !in_subtree(parent, x, k));
            let zr = rest.try_inverse().expect("regular")[(p, p)];
            assert!(close(m.parent_side()[k], 1.0 / zr, tol), "P at {k}");
            let u = g[k] * (1.0 / zr) / (g[k] + 1.0 / zr);
            assert!(close(m.rest_of_tree()[k], u, tol), "U at {k}");
        }
        // logs: ln|Z_kk/Z_k0| and ln|Z_00/Z_k0| from the dense inverse
        let to = (inv[(k, k)] / inv[(k, 0)]).norm().ln();
        let from = (inv[(0, 0)] / inv[(k, 0)]).norm().ln();
        assert!(
            (m.ln_attenuation_to_soma(k) - to).abs() < 1e-9,
            "ln A to at {k}"
        );
        assert!(
            (m.ln_attenuation_from_soma(k) - from).abs() < 1e-9,
            "ln A from at {k}"
        );
    }
    for j in [0, n / 2, n - 1] {
        let v = m.site_ratio(j).expect("j is a node");
        let la = m.ln_attenuations_from_site(j).expect("j is a node");
        for k in 0..n {
            let want = inv[(k, j)] / inv[(j, j)];
            assert!(close(v[k], want, tol), "site {j} k {k}");
            assert!((la[k] + want.norm().ln()).abs() < 1e-9, "ln site {j} k {k}");
        }
    }
    assert!(m.site_ratio(n).is_none());
    assert!(m.ln_attenuations_from_site(n).is_none());
}

#[test]
fn complex_random_trees_match_a_dense_solve() {
    for seed in 1..6 {
        let (p, g, s) = random_tree(40, seed, true);
        check_against_dense(&p, &g, &s);
    }
}

#[test]
fn real_random_trees_match_a_dense_solve_in_f64() {
    for seed in 7..12 {
        let (p, g, s) = random_tree(40, seed, false);
        check_against_dense(&p, &g, &s);
        // the f64 kernel against the same dense reference
        let re = |v: &[C64]| v.iter().map(|z| z.re).collect::<Vec<f64>>();
        let (gr, sr) = (re(&g), re(&s));
        let inv = dense(&p, &g, &s, &|_| true).try_inverse().expect("regular");
        let m = TreeMaps::new(&p, &gr, &sr);
        let f = TreeFactor::new(&p, &gr, &sr);
        let mut x: Vec<f64> = (0..p.len()).map(|k| (k % 3) as f64 - 1.0).collect();
        let b = x.clone();
        f.solve_in_place(&mut x);
        for k in 0..p.len() {
            let want: f64 = (0..p.len()).map(|j| inv[(k, j)].re * b[j]).sum();
            assert!((x[k] - want).abs() < 1e-10 * want.abs().max(1.0), "k {k}");
            assert!((m.input_impedance()[k] - inv[(k, k)].re).abs() < 1e-10 * inv[(k, k)].re);
            // DC attenuations are ≥ 1: ln A ≥ 0
            assert!(m.ln_attenuation_to_soma(k) >= -1e-12);
            assert!(m.ln_attenuation_from_soma(k) >= -1e-12);
        }
    }
}

#[test]
fn refactor_with_new_shunts_solves_the_new_matrix() {
    // factor one tree, then refactor it with other shunts: the solve must be the dense solve of
    // the new matrix (nalgebra), as if the factor had been built fresh
    let (p, g, s) = random_tree(40, 21, true);
    let (_, _, s2) = random_tree(40, 22, true);
    let mut f = TreeFactor::new(&p, &g, &s);
    f.refactor(&s2);
    let inv = dense(&p, &g, &s2, &|_| true)
        .try_inverse()
        .expect("regular");
    let b: Vec<C64> = (0..p.len())
        .map(|k| C64::new(k as f64 % 5.0 - 2.0, 0.5))
        .collect();
    let mut x = b.clone();
    f.solve_in_place(&mut x);
    let want = &inv * DMatrix::from_column_slice(p.len(), 1, &b);
    for k in 0..p.len() {
        assert!(close(x[k], want[(k, 0)], 1e-10), "node {k}");
    }
    assert!(close(
        f.root_admittance(),
        C64::new(1.0, 0.0) / inv[(0, 0)],
        1e-10
    ));
}

#[test]
fn empty_and_single_node() {
    let f = TreeFactor::<f64>::new(&[], &[], &[]);
    assert!(f.is_empty());
    f.solve_in_place(&mut []);
    assert!(TreeMaps::<f64>::new(&[], &[], &[]).site_ratio(0).is_none());
    let m = TreeMaps::new(&[NONE], &[0.0], &[4.0]);
    assert_eq!(m.input_impedance(), &[0.25]);
    assert_eq!(m.ln_attenuation_to_soma(0), 0.0);
    let mut x = [2.0];
    m.factor().solve_in_place(&mut x);
    assert_eq!(x, [0.5]);
}

#[test]
#[should_panic(expected = "parents must come first")]
fn children_before_parents_are_refused() {
    TreeFactor::new(&[NONE, 2, 0], &[0.0, 1.0, 1.0], &[1.0, 1.0, 1.0]);
}

#[test]
fn million_deep_chain_solves_by_ohms_law() {
    // no shunt except at the root: a current I at the tip flows through every link, so
    // V_k = I/S_0 + k·I/g (Ohm's law along a series chain)
    let n = 1_000_000;
    let parent: Vec<u32> = (0..n)
        .map(|k| if k == 0 { NONE } else { k as u32 - 1 })
        .collect();
    let g = vec![2.0; n];
    let mut s = vec![0.0; n];
    s[0] = 0.5;
    let f = TreeFactor::new(&parent, &g, &s);
    let mut x = vec![0.0; n];
    x[n - 1] = 1.0;
    f.solve_in_place(&mut x);
    for k in [0, 1, n / 3, n - 1] {
        let want = 2.0 + k as f64 / 2.0;
        assert!((x[k] - want).abs() < 1e-9 * want, "k {k}: {} {want}", x[k]);
    }
}

#[test]
fn million_deep_uniform_ladder_attenuates_by_its_propagation_constant() {
    // A uniform ladder (series g, shunt s per node) attenuates by e^γ per section with
    // cosh γ = 1 + s/(2g) (ladder network theory, common practice); its characteristic
    // admittance D∞ solves D² − s·D − s·g = 0. With the root's shunt set to D∞ the chain looks
    // infinite from every node, so ln A_{s→k} = ln A_{k→s} = k·γ. Here k·γ reaches 5 000 Np:
    // |Z_k0| underflows and the summed-log fallback must answer.
    let n = 1_000_000;
    let (g, s) = (1.0f64, 1e-4f64);
    let gamma = (1.0 + s / (2.0 * g)).acosh();
    let d_inf = (s + (s * s + 4.0 * s * g).sqrt()) / 2.0;
    let parent: Vec<u32> = (0..n)
        .map(|k| if k == 0 { NONE } else { k as u32 - 1 })
        .collect();
    let mut shunt = vec![s; n];
    shunt[0] = d_inf;
    let m = TreeMaps::new(&parent, &vec![g; n], &shunt);
    // (subnormal products stagnate instead of reaching 0: they are no better than 0)
    assert!(
        m.soma_transfer()[n / 2] < f64::MIN_POSITIVE,
        "Z_k0 underflows, as intended"
    );
    let from_root = m.ln_attenuations_from_site(0).expect("node 0");
    for k in [1, 1000, n / 4, n / 2] {
        let want = k as f64 * gamma;
        for (what, got) in [
            ("from soma", m.ln_attenuation_from_soma(k)),
            ("to soma", m.ln_attenuation_to_soma(k)),
            ("from site 0", from_root[k]),
        ] {
            assert!(
                got.is_finite() && (got - want).abs() < 1e-8 * want,
                "{what} {k}: {got} {want}"
            );
        }
        assert_eq!(m.attenuation_from_soma(n / 2), f64::INFINITY);
    }
}
