//! Tapered segments (frusta): the exact route's two-port against an independent fine model, and
//! the join of a frustum's pieces inside `segment_pi` against a chain of transmission matrices.
//!
//! Reference: a compartment model of the frustum (each of m short pieces: axial conductance
//! π·a·b/(Ra·h) and half its membrane y_m·π(a+b)·slant at each end; Koch 1999 ch. 3, from
//! memory), chained as 2×2 transmission (ABCD) matrices — common practice for two-ports, no
//! source — and extrapolated in m (Richardson, the model being second order in h). Nothing of
//! the library is used for the reference.

use num_complex::Complex64 as C64;
use pollard::cable::{Params, segment_pi};
use std::f64::consts::PI;

const UM: f64 = 1e-4; // cm

type Abcd = [[C64; 2]; 2];

const IDENTITY: Abcd = [
    [C64::new(1.0, 0.0), C64::new(0.0, 0.0)],
    [C64::new(0.0, 0.0), C64::new(1.0, 0.0)],
];

fn mul(x: &Abcd, y: &Abcd) -> Abcd {
    let mut z = [[C64::new(0.0, 0.0); 2]; 2];
    for i in 0..2 {
        for j in 0..2 {
            z[i][j] = x[i][0] * y[0][j] + x[i][1] * y[1][j];
        }
    }
    z
}

/// Transmission matrix of a π network: series admittance `s`, shunts `y1` (port 1), `y2`
/// (port 2): V1 = (1 + y2/s)·V2 + I2/s, I1 = (y1 + y2 + y1·y2/s)·V2 + (1 + y1/s)·I2.
fn abcd(s: C64, y1: C64, y2: C64) -> Abcd {
    let one = C64::new(1.0, 0.0);
    [
        [one + y2 / s, one / s],
        [y1 + y2 + y1 * y2 / s, one + y1 / s],
    ]
}

/// The π network (series, shunt 1, shunt 2) of a transmission matrix.
fn pi_of(m: &Abcd) -> (C64, C64, C64) {
    let s = C64::new(1.0, 0.0) / m[0][1];
    (s, (m[1][1] - 1.0) * s, (m[0][0] - 1.0) * s)
}

/// The compartment model of a frustum a → b (µm) over h µm, cut into m pieces.
fn compartments(p: &Params, ym: C64, h: f64, a: f64, b: f64, m: usize) -> (C64, C64, C64) {
    let hp = h / m as f64;
    let mut t = IDENTITY;
    for i in 0..m {
        let ra = a + (b - a) * i as f64 / m as f64;
        let rb = a + (b - a) * (i + 1) as f64 / m as f64;
        let g = PI * ra * rb * UM / (p.ra_ohm_cm * hp);
        let half = ym * (0.5 * PI * (ra + rb) * hp.hypot(rb - ra) * UM * UM);
        t = mul(&t, &abcd(C64::new(g, 0.0), half, half));
    }
    pi_of(&t)
}

/// Richardson extrapolation of the compartment model (error O(h²)): (4·X(2m) − X(m))/3.
fn reference(p: &Params, ym: C64, h: f64, a: f64, b: f64, m: usize) -> (C64, C64, C64) {
    let x = compartments(p, ym, h, a, b, m);
    let y = compartments(p, ym, h, a, b, 2 * m);
    let r = |u: C64, v: C64| (v * 4.0 - u) / 3.0;
    (r(x.0, y.0), r(x.1, y.1), r(x.2, y.2))
}

fn rel3(x: (C64, C64, C64), y: (C64, C64, C64)) -> f64 {
    [(x.0, y.0), (x.1, y.1), (x.2, y.2)]
        .iter()
        .map(|(u, v)| (u - v).norm() / v.norm())
        .fold(0.0, f64::max)
}

/// `segment_pi` of the frustum cut into `n` equal sub-frusta, chained as transmission matrices.
fn chain(p: &Params, ym: C64, h: f64, a: f64, b: f64, n: usize) -> (C64, C64, C64) {
    let mut t = IDENTITY;
    for i in 0..n {
        let ra = a + (b - a) * i as f64 / n as f64;
        let rb = a + (b - a) * (i + 1) as f64 / n as f64;
        let (s, y1, y2) = segment_pi(p, ym, h / n as f64, ra, rb);
        t = mul(&t, &abcd(s, y1, y2));
    }
    pi_of(&t)
}

#[test]
fn the_join_of_a_frustums_pieces_matches_a_chain_of_transmission_matrices() {
    // 1 → 1.1 µm: ln(1.1)/0.02 → 5 pieces inside segment_pi (radius ratio ≤ 2 % each), joined
    // there by Kron reduction of the inner nodes. The same 5 sub-frusta (each ≤ 2 %: one piece)
    // chained here as ABCD matrices must give the same two-port: this runs the join path.
    let p = Params::default();
    for f in [0.0, 100.0, 1000.0] {
        let ym = p.membrane_admittance(f);
        let joined = segment_pi(&p, ym, 300.0, 1.0, 1.1);
        let chained = chain(&p, ym, 300.0, 1.0, 1.1, 5);
        let e = rel3(joined, chained);
        assert!(e < 1e-11, "f {f}: {e:e}");
        // and the pieces really are pieces: one uncut uniform piece of the same frustum differs
        let one = {
            let (s, y1, y2) = segment_pi(&p, ym, 300.0, 1.05, 1.05);
            (s, y1, y2)
        };
        assert!(rel3(one, chained) > 1e-4, "f {f}");
    }
}

#[test]
fn taper_error_against_an_independent_fine_model() {
    // The exact route's two-port of a frustum against the extrapolated compartment model. The
    // reference is converged far below the errors measured (checked with m and 2m).
    let p = Params::default();
    let cases = [
        // (a, b, h µm, f Hz, bound on the measured relative error)
        (2.0, 0.5, 400.0, 0.0, 1e-8),    // measured 2.9e-9
        (2.0, 0.5, 400.0, 100.0, 1e-7),  // 3.8e-8
        (1.0, 1.1, 300.0, 0.0, 1e-6),    // 1.9e-7
        (1.0, 1.1, 300.0, 100.0, 1e-5),  // 2.5e-6
        (1.0, 1.1, 1200.0, 100.0, 2e-4), // 7.9e-5: long, gently tapered, few pieces
    ];
    for (a, b, h, f, bound) in cases {
        let ym = p.membrane_admittance(f);
        let r = reference(&p, ym, h, a, b, 4096);
        assert!(rel3(reference(&p, ym, h, a, b, 2048), r) < 1e-11);
        let e = rel3(segment_pi(&p, ym, h, a, b), r);
        assert!(
            e < bound && e > 0.0,
            "{a} → {b} µm over {h} µm at {f} Hz: {e:e}"
        );
    }
    // the order: with one piece per sub-frustum, doubling the pieces divides the error by
    // about 16 (fourth order in the piece length)
    let ym = p.membrane_admittance(100.0);
    let r = reference(&p, ym, 1200.0, 1.0, 1.1, 4096);
    let errs: Vec<f64> = [8, 16, 32, 64]
        .iter()
        .map(|&n| rel3(chain(&p, ym, 1200.0, 1.0, 1.1, n), r))
        .collect();
    for w in errs.windows(2) {
        let ratio = w[0] / w[1];
        assert!((14.0..18.0).contains(&ratio), "{errs:?}");
    }
}
