//! The exact cable maps against a general-purpose solver: a finely discretised compartment model
//! of random trees, assembled here and solved densely with nalgebra's complex LU. The
//! compartment model's error must fall as O(h²) towards the exact maps (standard second-order
//! discretisation of the cable equation; Koch 1999 ch. 3; Johnston & Wu 1995 ch. 4). Also
//! reciprocity Z_ij = Z_ji and the additivity of log attenuation along paths
//! (Zador, Agmon-Snir & Segev 1995).

use nalgebra::DMatrix;
use num_complex::Complex64 as C64;
use pollard::cable::{CellMaps, Params, PrepOptions, prepare};
use pollard::morphology::Flat;
use std::f64::consts::PI;

const UM: f64 = 1e-4; // cm

fn random_flat(n: usize, seed: u64) -> Flat {
    let text = pollard::synth::to_swc(&pollard::synth::random_tree(n, seed), &[]);
    let m = pollard::Morphology::parse(&text, "random.swc").unwrap();
    prepare(&m, &PrepOptions::default()).unwrap()
}

/// The compartment model: every segment cut into `m` equal pieces along its length (radii
/// linear along a frustum); each piece gives the axial conductance π·a·b/(Ra·h) between its two
/// end nodes and half its membrane admittance y_m·π(a+b)·slant to each end node; the soma node
/// carries y_m·soma area. Returns the dense nodal admittance matrix; nodes 0..flat.len() are the
/// flat nodes, inner nodes follow.
fn compartment_matrix(fl: &Flat, p: &Params, f: f64, m: usize) -> DMatrix<C64> {
    let n = fl.len();
    let size = n + (n - 1) * (m - 1);
    let ym = C64::new(1.0 / p.rm_ohm_cm2, 2.0 * PI * f * p.cm_uf_cm2 * 1e-6);
    let mut y = DMatrix::<C64>::zeros(size, size);
    y[(0, 0)] += ym * (fl.soma_area_um2 * UM * UM);
    let mut next = n;
    for k in 1..n {
        let (h, a, b) = (fl.length_um[k], fl.r_prox_um[k], fl.r_dist_um[k]);
        let hp = h / m as f64;
        let mut from = fl.parent[k] as usize;
        for i in 0..m {
            let to = if i + 1 == m {
                k
            } else {
                next += 1;
                next - 1
            };
            let ra = a + (b - a) * i as f64 / m as f64;
            let rb = a + (b - a) * (i + 1) as f64 / m as f64;
            let g = PI * ra * rb * UM * UM / (p.ra_ohm_cm * hp * UM);
            let area = PI * (ra + rb) * hp.hypot(rb - ra) * UM * UM;
            let half = ym * (0.5 * area);
            y[(from, from)] += g + half;
            y[(to, to)] += g + half;
            y[(from, to)] -= g;
            y[(to, from)] -= g;
            from = to;
        }
    }
    assert_eq!(next, size);
    y
}

/// Largest relative error, over the flat nodes, of the compartment model's soma column (Z_k0)
/// and of the input impedance Z_jj at a few sites `js`.
fn discretisation_error(
    fl: &Flat,
    maps: &CellMaps,
    p: &Params,
    f: f64,
    m: usize,
    js: &[usize],
) -> f64 {
    let y = compartment_matrix(fl, p, f, m);
    let size = y.nrows();
    let mut rhs = DMatrix::<C64>::zeros(size, 1 + js.len());
    rhs[(0, 0)] = C64::new(1.0, 0.0);
    for (c, &j) in js.iter().enumerate() {
        rhs[(j, c + 1)] = C64::new(1.0, 0.0);
    }
    let z = y
        .lu()
        .solve(&rhs)
        .expect("the nodal matrix is not singular");
    let mut err: f64 = 0.0;
    for k in 0..fl.len() {
        let exact = maps.z_soma(k);
        err = err.max((z[(k, 0)] - exact).norm() / exact.norm());
    }
    for (c, &j) in js.iter().enumerate() {
        let exact = maps.z_in(j);
        err = err.max((z[(j, c + 1)] - exact).norm() / exact.norm());
        // and the whole column against the site map: Z_kj = Z_jj·(V_k/V_j)
        let ratio = maps.site_ratio(j).unwrap();
        for k in 0..fl.len() {
            let e = exact * ratio[k];
            err = err.max((z[(k, c + 1)] - e).norm() / e.norm());
        }
    }
    err
}

#[test]
fn compartment_model_converges_as_h_squared() {
    // Random trees of up to 300 points (tapering segments included), DC, 100 Hz and 500 Hz;
    // lower Rm makes segments electrotonically longer so the discretisation error stands well
    // above rounding. Each segment cut into 2, then 4 compartments: the error must fall 4×.
    let cases = [
        (300, 1u64, Params::default(), 0.0),
        (250, 7, Params::default(), 100.0),
        (
            200,
            42,
            Params {
                rm_ohm_cm2: 2_000.0,
                ra_ohm_cm: 200.0,
                cm_uf_cm2: 1.0,
            },
            500.0,
        ),
    ];
    for (n, seed, p, f) in cases {
        let fl = random_flat(n, seed);
        let maps = CellMaps::compute(&fl, &p, f).unwrap();
        let js = [1, fl.len() / 3, fl.len() / 2, fl.len() - 1];
        let e1 = discretisation_error(&fl, &maps, &p, f, 2, &js);
        let e2 = discretisation_error(&fl, &maps, &p, f, 4, &js);
        let ratio = e1 / e2;
        eprintln!("n {n} f {f}: error at h {e1:.3e}, at h/2 {e2:.3e}, ratio {ratio:.3}");
        assert!(e1 < 1e-2, "{e1}");
        assert!(e2 > 1e-11, "error too small to measure the order: {e2}");
        assert!(
            (3.9..4.1).contains(&ratio),
            "O(h²) means a ratio near 4: {ratio}"
        );
    }
}

#[test]
fn reciprocity_z_ij_equals_z_ji() {
    // Z_ij = Z_ji for any passive network (reciprocity theorem; Koch 1999 ch. 3): from the
    // site maps, Z_ij = Z_jj·(V_i/V_j)|_j and Z_ji = Z_ii·(V_j/V_i)|_i.
    for f in [0.0, 100.0] {
        let fl = random_flat(300, 3);
        let maps = CellMaps::compute(&fl, &Params::default(), f).unwrap();
        let n = fl.len();
        let sites: Vec<usize> = (0..12).map(|i| (i * 97 + 5) % n).collect();
        let ratios: Vec<Vec<C64>> = sites.iter().map(|&j| maps.site_ratio(j).unwrap()).collect();
        for (a, &i) in sites.iter().enumerate() {
            for (b, &j) in sites.iter().enumerate() {
                let z_ij = maps.z_in(j) * ratios[b][i];
                let z_ji = maps.z_in(i) * ratios[a][j];
                assert!((z_ij - z_ji).norm() < 1e-10 * z_ij.norm(), "{i} {j}");
            }
            // and the soma column: Z_i0 from the downward sweep equals Z_00·(V_i/V_0) and
            // Z_ii·(V_0/V_i)
            let z_i0 = maps.z_in(i) * ratios[a][0];
            assert!((z_i0 - maps.z_soma(i)).norm() < 1e-10 * z_i0.norm());
        }
    }
}

#[test]
fn log_attenuation_adds_along_paths() {
    // Morphoelectrotonic transform (Zador, Agmon-Snir & Segev 1995): for current at k and m on
    // the path from k to the soma, ln A_{k→s} = ln A_{k→m} + ln A_{m→s}, where A_{m→s} is
    // measured with current at m. Also A_{k→s} = |Z_kk/Z_ks| equals |V_k/V_s| from the site map.
    for f in [0.0, 100.0] {
        let fl = random_flat(300, 11);
        let maps = CellMaps::compute(&fl, &Params::default(), f).unwrap();
        let k = fl.len() - 1;
        let from_k = maps.site_ratio(k).unwrap();
        let ln_ks = maps.log_attenuation_to_soma(k);
        assert!((ln_ks - (-from_k[0].norm().ln())).abs() < 1e-9 * ln_ks.abs().max(1.0));
        let mut m = fl.parent[k] as usize;
        let mut checked = 0;
        while m != 0 {
            let ln_km = -(from_k[m].norm().ln());
            let ln_ms = maps.log_attenuation_to_soma(m);
            assert!(
                (ln_ks - (ln_km + ln_ms)).abs() < 1e-9,
                "{ln_ks} {ln_km} {ln_ms}"
            );
            checked += 1;
            m = fl.parent[m] as usize;
        }
        assert!(checked > 0);
        assert!((pollard::cable::db(10.0) - 20.0).abs() < 1e-12);
    }
}
