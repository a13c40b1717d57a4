//! Acceptance checks of the reduction on cells: strict binary, positive finite conductances,
//! soma DC input resistance against the cable engine (checked with an independent nalgebra
//! solve), τ as the slowest time constant (nalgebra eigenvalues), the feed-forward form against
//! a full solve, and the site and point maps.

use nalgebra::{DMatrix, DVector, SymmetricEigen};
use pollard::cable::{Maps, Network, Params};
use pollard::morphology::{Flat, Morphology, NONE};
use pollard::reduce::{CapacitanceRule, ReduceOptions, ReducedTree, Reducer};

const BUDGETS: [usize; 6] = [1, 3, 7, 15, 31, 63];

/// Conductance matrix of a reduced tree in nS.
fn g_matrix(t: &ReducedTree) -> DMatrix<f64> {
    let n = t.len();
    let mut a = DMatrix::zeros(n, n);
    for c in &t.compartments {
        let k = c.id as usize;
        a[(k, k)] += c.g_leak_ns;
        if let Some(p) = c.parent {
            let p = p as usize;
            a[(k, k)] += c.g_axial_ns;
            a[(p, p)] += c.g_axial_ns;
            a[(k, p)] -= c.g_axial_ns;
            a[(p, k)] -= c.g_axial_ns;
        }
    }
    a
}

/// Independent sparse solve for large trees: Gaussian elimination of the tree's conductance
/// matrix leaves-first (children have larger ids), then back-substitution. Returns V for the
/// currents `i` (nS, pA → mV).
fn tree_solve(t: &ReducedTree, i: &[f64]) -> Vec<f64> {
    let n = t.len();
    let mut diag: Vec<f64> = t
        .compartments
        .iter()
        .map(|c| c.g_leak_ns + c.g_axial_ns)
        .collect();
    for c in &t.compartments {
        if let Some([a, b]) = c.children {
            diag[c.id as usize] +=
                t.compartments[a as usize].g_axial_ns + t.compartments[b as usize].g_axial_ns;
        }
    }
    let mut rhs = i.to_vec();
    for k in (1..n).rev() {
        let c = &t.compartments[k];
        let p = c.parent.unwrap() as usize;
        let f = -c.g_axial_ns / diag[k];
        diag[p] -= f * -c.g_axial_ns;
        rhs[p] -= f * rhs[k];
    }
    let mut v = vec![0.0; n];
    v[0] = rhs[0] / diag[0];
    for k in 1..n {
        let c = &t.compartments[k];
        let p = c.parent.unwrap() as usize;
        v[k] = (rhs[k] + c.g_axial_ns * v[p]) / diag[k];
    }
    v
}

/// Trees up to this size are checked through the factor M (QR and SVD), larger ones through
/// the assembled matrix.
const FACTOR_MAX: usize = 500;

/// The factor M with G = MᵀM (nS^½): one row √g·(e_k − e_parent) per link and one row √G·e_k
/// per leak. Working from M instead of the assembled G keeps the leaks that a diagonal entry
/// g + G would round away when links are 1e10 times stiffer than leaks, so QR and SVD of M
/// are accurate to about ε·√κ(G) instead of ε·κ(G) (Golub & Van Loan 2013, §5.3, §8.6).
fn factor(t: &ReducedTree) -> DMatrix<f64> {
    let n = t.len();
    let mut m = DMatrix::zeros(2 * n - 1, n);
    let mut row = 0;
    for c in &t.compartments {
        let k = c.id as usize;
        if let Some(p) = c.parent {
            let s = c.g_axial_ns.sqrt();
            m[(row, k)] = s;
            m[(row, p as usize)] = -s;
            row += 1;
        }
        m[(row, k)] = c.g_leak_ns.sqrt();
        row += 1;
    }
    m
}

/// Soma voltage for currents `i`: G = MᵀM = RᵀR from the QR factorisation of M, then two
/// triangular solves (small trees); dense LU of G or the tree solve (large trees).
fn soma_voltage(t: &ReducedTree, i: &[f64]) -> f64 {
    let n = t.len();
    let b = DVector::from_column_slice(i);
    if n <= FACTOR_MAX {
        let r = factor(t).qr().r();
        let y = r.transpose().solve_lower_triangular(&b).unwrap();
        let x = r.solve_upper_triangular(&y).unwrap();
        x[0]
    } else if n <= 1500 {
        g_matrix(t).lu().solve(&b).unwrap()[0]
    } else {
        tree_solve(t, i)[0]
    }
}

/// Smallest and largest eigenvalues of C⁻¹G (1/ms with nS and pF): squared singular values of
/// M·C^{-1/2} (small trees), or eigenvalues of the symmetric form C^{-1/2} G C^{-1/2}.
fn rates(t: &ReducedTree) -> (f64, f64) {
    let n = t.len();
    let s: Vec<f64> = t
        .compartments
        .iter()
        .map(|c| 1.0 / c.capacitance_pf.sqrt())
        .collect();
    if n <= FACTOR_MAX {
        let mut m = factor(t);
        for (j, sj) in s.iter().enumerate() {
            m.column_mut(j).scale_mut(*sj);
        }
        let sv = m.svd(false, false).singular_values;
        let lo = sv.iter().cloned().fold(f64::INFINITY, f64::min);
        let hi = sv.iter().cloned().fold(0.0, f64::max);
        return (lo * lo, hi * hi);
    }
    let a = g_matrix(t);
    let m = DMatrix::from_fn(n, n, |r, c| a[(r, c)] * s[r] * s[c]);
    let e = SymmetricEigen::new(m);
    let lo = e.eigenvalues.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = e.eigenvalues.iter().cloned().fold(0.0, f64::max);
    (lo, hi)
}

/// Simple deterministic generator (xorshift) so the checks need no extra crate.
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> f64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// Checks every acceptance point for one cell and returns the worst relative errors
/// (R_in, τ, feed-forward).
fn check_cell(name: &str, flat: &Flat, opts: &ReduceOptions) -> [f64; 3] {
    let params = Params::default();
    let red = Reducer::new(flat, &params, opts).unwrap();
    let maxc = red.max_compartments();
    // the cable engine's value, on the kept cell
    let net = Network::build(red.kept_flat(), &params, 0.0).unwrap();
    let r_engine = Maps::new(&net).input_impedance(0).re;
    let tau = params.tau_ms();
    let mut worst = [0.0f64; 3];
    let mut budgets: Vec<usize> = BUDGETS.to_vec();
    budgets.push(maxc);
    let mut rng = Rng(0x9e3779b97f4a7c15);
    for &b in &budgets {
        let t = red.tree(b);
        let n = t.len();
        assert_eq!(n, b.min(maxc), "{name}: budget {b}");
        assert!(n % 2 == 1);
        // strict binary, parents first, positive finite conductances
        let mut nkids = vec![0usize; n];
        for c in &t.compartments {
            assert!(c.g_leak_ns.is_finite() && c.g_leak_ns > 0.0, "{name} {c:?}");
            assert!(c.capacitance_pf.is_finite() && c.capacitance_pf > 0.0);
            match c.parent {
                None => assert_eq!(c.id, 0),
                Some(p) => {
                    assert!(p < c.id);
                    assert!(
                        c.g_axial_ns.is_finite() && c.g_axial_ns > 0.0,
                        "{name} {c:?}"
                    );
                    nkids[p as usize] += 1;
                }
            }
        }
        for c in &t.compartments {
            let k = nkids[c.id as usize];
            assert!(
                k == 0 || k == 2,
                "{name}: compartment {} has {k} children",
                c.id
            );
            assert_eq!(k == 2, c.children.is_some());
        }
        let tol = 1e-6;
        // soma DC input resistance: independent solve against the cable engine
        let mut e0 = vec![0.0; n];
        e0[0] = 1.0;
        let r_red = soma_voltage(&t, &e0) * 1e9; // 1/nS → Ω
        let rel = (r_red - r_engine).abs() / r_engine;
        worst[0] = worst[0].max(rel);
        assert!(
            rel < tol,
            "{name} budget {b}: R_in {r_red} vs {r_engine} ({rel:e}); junction effect {:e}, tree sweep {:e}\n{:#?}",
            red.junction_effect_relative(),
            t.soma_input_resistance_ohm() / r_engine - 1.0,
            t.compartments
        );
        // The full cell's slowest time constant is Rm·Cm (uniform membrane: the uniform voltage
        // is its slowest mode; Rall 1969). With C = τ·G (`CapacitanceRule::Uniform`) the reduced
        // tree keeps it exactly; fitted capacitances keep it within 2 % (README; the fit ends by
        // scaling C when its penalty left τ outside the band). The reducer builds the default
        // `Timed` trees fitted (the polish, ~10 %, is the caller's; checked in
        // tests/fidelity.rs and tests/reduce_cli.rs). Reference: nalgebra's SVD. The
        // tree's own report of it agrees with them.
        let tau_tol = match opts.capacitance {
            CapacitanceRule::Uniform => 1e-6,
            // the reducer builds Timed trees as Fitted (the polish is the caller's)
            CapacitanceRule::Fitted | CapacitanceRule::Timed => 0.0201,
        };
        if n <= 1500 {
            let (lam, _) = rates(&t);
            let rel = (1.0 / lam - tau).abs() / tau;
            worst[1] = worst[1].max(rel);
            assert!(
                rel < tau_tol,
                "{name} budget {b}: slowest τ {} vs {tau}",
                1.0 / lam
            );
            let own = t.slowest_time_constant_ms();
            assert!(
                (own * lam - 1.0).abs() < 1e-6,
                "{name} budget {b}: reported slowest τ {own} vs {}",
                1.0 / lam
            );
        }
        // feed-forward form against the full solve for random currents
        let ff = t.feed_forward();
        for _ in 0..3 {
            let i: Vec<f64> = (0..n).map(|_| rng.next() * 2.0 - 0.5).collect();
            let v_solve = soma_voltage(&t, &i);
            let mut prod = vec![1.0; n];
            let mut sum = i[0];
            for k in 1..n {
                let p = t.compartments[k].parent.unwrap() as usize;
                prod[k] = prod[p] * ff.w[k].unwrap();
                assert!(ff.w[k].unwrap() > 0.0 && ff.w[k].unwrap() < 1.0);
                sum += i[k] * prod[k];
            }
            let v_ff = sum / ff.root_input_conductance_ns;
            let scale: f64 = i.iter().map(|x| x.abs()).sum::<f64>() / ff.root_input_conductance_ns;
            let rel = (v_ff - v_solve).abs() / scale;
            worst[2] = worst[2].max(rel);
            assert!(
                rel < tol,
                "{name} budget {b}: feed-forward {v_ff} vs {v_solve}"
            );
        }
        // layers cover every compartment once, by depth
        let total: usize = ff.layers.iter().map(|l| l.len()).sum();
        assert_eq!(total, n);
        // point map: every kept point maps to a compartment; site counts add up
        let counted: u32 = t.compartments.iter().map(|c| c.site_count).sum();
        assert_eq!(counted as usize, red.sites().len());
        for &c in &t.site_compartment {
            assert!((c as usize) < n);
        }
        let area: f64 = t.compartments.iter().map(|c| c.membrane_area_um2).sum();
        let kept = red.kept_flat();
        let full_area: f64 =
            kept.soma_area_um2 + (1..kept.len()).map(|k| kept.segment_area(k)).sum::<f64>();
        assert!(
            (area - full_area).abs() <= 1e-9 * full_area,
            "{name}: area {area} vs {full_area}"
        );
    }
    eprintln!(
        "{name}: max {maxc}, junctions {}, junction effect {:.2e}, worst R_in {:.2e}, τ {:.2e}, ff {:.2e}",
        red.junctions(),
        red.junction_effect_relative(),
        worst[0],
        worst[1],
        worst[2]
    );
    worst
}

/// Flat arrays of a morphology, with a default radius where the file has none.
fn flat_of(m: &Morphology) -> Flat {
    let mut f = m.flatten();
    // files in nanometres or voxels (the fly cells): to µm, as a user would with --scale
    if m.warnings.iter().any(|w| w.code == "implausible-size") {
        pollard::cable::prep::scale_flat(&mut f, 0.001);
    }
    for k in 1..f.len() {
        for r in [&mut f.r_prox_um[k], &mut f.r_dist_um[k]] {
            if !(*r > 0.0 && r.is_finite()) {
                *r = 0.25;
            }
        }
    }
    f
}

#[test]
fn sample_cells_meet_the_acceptance_checks() {
    for s in pollard::samples::SAMPLES {
        let m = Morphology::parse(s.text, s.file_name).unwrap();
        let f = flat_of(&m);
        check_cell(s.name, &f, &ReduceOptions::default());
        let uniform = ReduceOptions {
            capacitance: CapacitanceRule::Uniform,
            ..Default::default()
        };
        check_cell(s.name, &f, &uniform);
    }
}

#[test]
fn point_map_covers_the_main_tree_and_types_filter_leaves_out_the_axon() {
    // soma, a dendrite with a fork, an axon with a fork
    let text = "1 1 0 0 0 8 -1\n\
                2 3 20 0 0 1 1\n3 3 60 10 0 0.8 2\n4 3 60 -10 0 0.8 2\n5 3 90 15 0 0.5 3\n\
                6 2 -20 0 0 0.6 1\n7 2 -80 5 0 0.4 6\n8 2 -80 -5 0 0.4 6\n\
                9 3 0 0 500 1 -1\n";
    let m = Morphology::parse(text, "t.swc").unwrap();
    let f = m.flatten();
    let all = Reducer::new(&f, &Params::default(), &ReduceOptions::default()).unwrap();
    let t = all.tree(all.max_compartments());
    for i in 0..m.len() {
        let inside = i < m.main_len;
        assert_eq!(t.point_compartment[i] != NONE, inside, "point {i}");
    }
    let opts = ReduceOptions {
        types: Some(vec![1, 3]),
        ..Default::default()
    };
    let no_axon = Reducer::new(&f, &Params::default(), &opts).unwrap();
    let t2 = no_axon.tree(99);
    for (i, p) in m.points.iter().enumerate() {
        if p.kind == 2 {
            assert_eq!(t2.point_compartment[i], NONE);
        }
    }
    // the cell without its axon has a higher input resistance
    assert!(t2.soma_input_resistance_ohm() > t.soma_input_resistance_ohm());
    check_cell("no-axon", &f, &opts);
}

/// Real reconstructions: the three kept in tests/data/real (provenance in the README there), and
/// every SWC file of the folder named by POLLARD_CELLS when it is set (CI sets it to the shared
/// set of eight real cells when that folder is present).
#[test]
fn real_cells_from_a_folder() {
    let mut dirs = vec![std::path::PathBuf::from(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/real"
    ))];
    if let Ok(extra) = std::env::var("POLLARD_CELLS") {
        dirs.push(extra.into());
    }
    let mut paths: Vec<_> = dirs
        .iter()
        .flat_map(|d| std::fs::read_dir(d).unwrap().map(|e| e.unwrap().path()))
        .collect();
    paths.sort();
    for p in paths {
        if p.extension().is_none_or(|e| e != "swc") {
            continue;
        }
        let m = Morphology::read(&p).unwrap();
        let f = flat_of(&m);
        let jf = std::env::var("POLLARD_JF")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(1e-4);
        let opts = ReduceOptions {
            junction_length_fraction: jf,
            ..Default::default()
        };
        check_cell(&p.display().to_string(), &f, &opts);
    }
}

/// Flat arrays from a random parent list: node k hangs on `parents[k-1] % k` (so high-degree
/// multifurcations occur), with segment lengths including zero and radii over two decades.
fn random_flat(parents: &[usize], lens: &[f64], radii: &[f64], soma_area: f64) -> Flat {
    let n = parents.len() + 1;
    let mut f = Flat {
        soma_area_um2: soma_area,
        ..Flat::default()
    };
    for k in 0..n {
        let p = if k == 0 {
            NONE
        } else {
            (parents[k - 1] % k) as u32
        };
        f.parent.push(p);
        let (l, r) = if k == 0 {
            (0.0, 0.0)
        } else {
            (lens[k - 1], radii[k - 1])
        };
        f.length_um.push(l);
        f.r_prox_um.push(r);
        f.r_dist_um.push(r * 0.9);
        f.kind.push(if k == 0 { 1 } else { 3 });
        f.pos.push([k as f64, 0.0, 0.0]);
        f.node_point.push(k as u32);
        f.line.push(k + 1);
    }
    f.point_node = (0..n as u32).collect();
    f
}

mod property {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig { cases: 40, ..ProptestConfig::default() })]

        /// Random cells of the generator (stems of types 2, 3, 4; trifurcations), with a
        /// random type filter.
        #[test]
        fn random_cells_meet_the_acceptance_checks(
            n in 2usize..400,
            seed in any::<u64>(),
            drop_axon in any::<bool>(),
        ) {
            let pts = pollard::synth::random_tree(n, seed);
            let text = pollard::synth::to_swc(&pts, &[]);
            let m = Morphology::parse(&text, "random.swc").unwrap();
            let f = flat_of(&m);
            let opts = ReduceOptions {
                types: drop_axon.then(|| vec![1, 3, 4]),
                capacitance: if seed % 2 == 0 { CapacitanceRule::Uniform } else { CapacitanceRule::Fitted },
                ..Default::default()
            };
            check_cell(&format!("random_tree({n}, {seed})"), &f, &opts);
        }

        /// Random parent lists: multifurcations of any degree, zero-length segments, radii
        /// from 0.05 to 5 µm, a soma with or without area.
        #[test]
        fn random_parent_lists_meet_the_acceptance_checks(
            parents in proptest::collection::vec(any::<usize>(), 1..200),
            seed in any::<u64>(),
            soma in prop_oneof![Just(0.0), 10.0f64..2000.0],
        ) {
            let mut rng = Rng(seed | 1);
            let n = parents.len();
            let lens: Vec<f64> = (0..n)
                .map(|_| if rng.next() < 0.1 { 0.0 } else { rng.next() * 50.0 })
                .collect();
            let radii: Vec<f64> = (0..n).map(|_| 0.05 * 100f64.powf(rng.next())).collect();
            let f = random_flat(&parents, &lens, &radii, soma);
            check_cell("random parents", &f, &ReduceOptions::default());
            let uniform = ReduceOptions { capacitance: CapacitanceRule::Uniform, ..Default::default() };
            check_cell("random parents (uniform C)", &f, &uniform);
        }
    }
}
