//! The time-domain engine (src/transient) against closed forms and independent references:
//! isopotential RC responses, the sealed finite cable's series solution, the cable engine's
//! impedances, reciprocity, an independent RK4 integration of a synapse, the order of
//! convergence in dt, and the piece rule of the fine network. Each check names its source.

use pollard::cable::{CellMaps, Params};
use pollard::morphology::{Flat, NONE};
use pollard::transient::{
    Drive, Growth, Method, NodeSplit, PieceRule, RcNetwork, RunOptions, Stop, Synapse, Waveform,
    fine_network, simulate,
};
use std::f64::consts::PI;

/// Flat arrays by hand: `nodes[i] = (parent, length µm, radius µm)` for node i + 1 (cylinders),
/// node 0 the soma with `soma_area` µm².
fn flat(soma_area: f64, nodes: &[(u32, f64, f64)]) -> Flat {
    let n = nodes.len() + 1;
    let mut f = Flat {
        parent: vec![NONE],
        length_um: vec![0.0],
        r_prox_um: vec![0.0],
        r_dist_um: vec![0.0],
        kind: vec![1],
        pos: vec![[0.0; 3]],
        soma_area_um2: soma_area,
        point_node: (0..n as u32).collect(),
        node_point: (0..n as u32).collect(),
        line: (1..=n).collect(),
    };
    for &(p, l, r) in nodes {
        f.parent.push(p);
        f.length_um.push(l);
        f.r_prox_um.push(r);
        f.r_dist_um.push(r);
        f.kind.push(3);
        f.pos.push([0.0; 3]);
    }
    f
}

fn one_node(g_ns: f64, c_pf: f64) -> RcNetwork {
    RcNetwork {
        parent: vec![NONE],
        g_axial_ns: vec![0.0],
        g_leak_ns: vec![g_ns],
        cap_pf: vec![c_pf],
    }
}

fn run(dt: f64, method: Method, ms: f64) -> RunOptions {
    RunOptions {
        dt_ms: dt,
        method,
        stop: Stop::At { duration_ms: ms },
        track_peaks: false,
        growth: None,
    }
}

fn current(node: usize, waveform: Waveform) -> Drive {
    Drive::Current {
        node,
        waveform,
        split: None,
    }
}

#[test]
fn isopotential_rc_step_response() {
    // V = I·R·(1 − e^(−t/τ)), τ = RC (charging of an RC circuit; Johnston & Wu 1995 ch. 2)
    let (g, c, i) = (2.0, 40.0, 10.0); // nS, pF, pA: R = 0.5 GΩ, τ = 20 ms
    let net = one_node(g, c);
    for (method, tol) in [(Method::CrankNicolson, 1e-6), (Method::BackwardEuler, 2e-3)] {
        let r = simulate(
            &net,
            &current(0, Waveform::Step { amplitude_pa: i }),
            &[0],
            &run(0.01, method, 60.0),
        )
        .unwrap();
        for (t, v) in r.times_ms.iter().zip(&r.traces[0]) {
            let want = i / g * (1.0 - (-t / (c / g)).exp());
            assert!(
                (v - want).abs() <= tol * i / g,
                "{method:?} t {t}: {v} vs {want}"
            );
        }
    }
}

/// V(t) of an RC node (R = 1/g, τ = c/g) for the alpha current peak·(t/τa)·e^(1−t/τa): with
/// a = 1/τa, b = 1/τ, s = b − a, V = K·(e^(−at)·(t/s − 1/s²) + e^(−bt)/s²), K = peak·e·a/c
/// (the convolution integral of the first-order ODE, worked by hand; no source).
fn rc_alpha(t: f64, g: f64, c: f64, tau_a: f64, peak: f64) -> f64 {
    let (a, b) = (1.0 / tau_a, g / c);
    let s = b - a;
    let k = peak * std::f64::consts::E * a / c;
    k * ((-a * t).exp() * (t / s - 1.0 / (s * s)) + (-b * t).exp() / (s * s))
}

#[test]
fn crank_nicolson_is_second_order_and_backward_euler_first() {
    // error ratio when dt halves: 4 for a second-order method, 2 for a first-order one
    // (Crank & Nicolson 1947; any numerical-analysis text); reference: rc_alpha above
    let (g, c, tau_a, peak) = (1.0, 20.0, 0.5, 10.0);
    let net = one_node(g, c);
    let drive = current(
        0,
        Waveform::Alpha {
            tau_ms: tau_a,
            peak_pa: peak,
        },
    );
    let err = |dt: f64, m: Method| {
        let r = simulate(&net, &drive, &[0], &run(dt, m, 10.0)).unwrap();
        r.times_ms
            .iter()
            .zip(&r.traces[0])
            .map(|(&t, v)| (v - rc_alpha(t, g, c, tau_a, peak)).abs())
            .fold(0.0, f64::max)
    };
    for (m, lo, hi) in [
        (Method::CrankNicolson, 3.6, 4.4),
        (Method::BackwardEuler, 1.8, 2.2),
    ] {
        let e: Vec<f64> = [0.1, 0.05, 0.025].iter().map(|&dt| err(dt, m)).collect();
        for w in e.windows(2) {
            let ratio = w[0] / w[1];
            assert!(ratio > lo && ratio < hi, "{m:?}: errors {e:?}");
        }
    }
}

#[test]
fn peak_time_is_refined_between_samples() {
    // the peak of rc_alpha by bisection on its closed-form slope (dV/dt = (I − gV)/c = 0)
    let (g, c, tau_a, peak) = (1.0, 20.0, 0.5, 10.0);
    let slope = |t: f64| {
        let x = t / tau_a;
        peak * x * (1.0 - x).exp() - g * rc_alpha(t, g, c, tau_a, peak)
    };
    let (mut lo, mut hi) = (tau_a, 20.0 * tau_a);
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        if slope(mid) > 0.0 { lo = mid } else { hi = mid }
    }
    let t_star = 0.5 * (lo + hi);
    let v_star = rc_alpha(t_star, g, c, tau_a, peak);
    let mut o = run(0.05, Method::CrankNicolson, 0.0);
    o.stop = Stop::AllPeaked {
        min_ms: 1.0,
        max_ms: 50.0,
    };
    o.track_peaks = true;
    let drive = current(
        0,
        Waveform::Alpha {
            tau_ms: tau_a,
            peak_pa: peak,
        },
    );
    let p = simulate(&one_node(g, c), &drive, &[], &o)
        .unwrap()
        .peaks
        .unwrap();
    assert_eq!(p.not_peaked, 0);
    // without the parabola the time could be off by up to dt/2 = 0.025 ms
    assert!(
        (p.time_ms[0] - t_star).abs() < 2e-3,
        "{} vs {t_star}",
        p.time_ms[0]
    );
    // the value carries Crank–Nicolson's own O(dt²) error (about 1e-3 at this dt)
    assert!(
        (p.value_mv[0] - v_star).abs() < 2e-3 * v_star,
        "{} vs {v_star}",
        p.value_mv[0]
    );
}

#[test]
fn sealed_finite_cable_current_step_series() {
    // Sealed cylinder of electrotonic length L = ℓ/λ, step current I at X = 0 (from memory,
    // Rall 1969; Jack, Noble & Tsien 1975 ch. 3, by separation of variables):
    //   V(X, T) = (I/G_tot)·Σ_n c_n·cos(nπX/L)/(1 + (nπ/L)²)·(1 − e^(−(1 + (nπ/L)²)·T)),
    // c_0 = 1, c_n = 2, T = t/τ, G_tot the whole membrane conductance; at T → ∞ and X = 0 it is
    // I·R∞·coth L.
    let p = Params::default();
    let d = 2.0;
    let lam = p.lambda_um(d);
    let big_l = 0.5;
    let len = big_l * lam;
    let f = flat(0.0, &[(0, len, d / 2.0)]);
    let fine = fine_network(
        &f,
        &p,
        PieceRule {
            lambda_fraction: 0.0025,
        },
    )
    .unwrap();
    let far = fine.node_of[1] as usize;
    let i = 10.0;
    let r = simulate(
        &fine.net,
        &current(0, Waveform::Step { amplitude_pa: i }),
        &[0, far],
        &run(0.005, Method::CrankNicolson, 60.0),
    )
    .unwrap();
    let g_tot = PI * d * len * 1e-8 / p.rm_ohm_cm2 * 1e9; // nS
    let tau = p.tau_ms();
    let series = |x: f64, t: f64| {
        let mut s = 1.0 - (-t / tau).exp();
        for n in 1..200_000 {
            let q = (n as f64 * PI / big_l).powi(2);
            s += 2.0 * (n as f64 * PI * x).cos() / (1.0 + q) * (1.0 - (-(1.0 + q) * t / tau).exp());
        }
        i / g_tot * s
    };
    for t in [0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 60.0] {
        let step = (t / 0.005_f64).round() as usize;
        for (col, x) in [(0, 0.0), (1, 1.0)] {
            let (got, want) = (r.traces[col][step], series(x, t));
            assert!(
                (got - want).abs() < 1e-3 * want,
                "X = {x}, t = {t}: {got} vs {want}"
            );
        }
    }
}

/// A small branched cell: soma, a thick stem that forks into a long thin branch and a tapered
/// short one.
fn small_cell() -> Flat {
    let mut f = flat(
        500.0,
        &[
            (0, 80.0, 1.5),
            (1, 300.0, 0.5),
            (1, 150.0, 0.8),
            (3, 100.0, 0.4),
        ],
    );
    f.r_dist_um[3] = 0.5; // a tapered segment
    f
}

#[test]
fn sinusoid_steady_state_gives_the_cable_engine_impedance() {
    // Steady state of a sinusoidal current I·sin ωt is I·|Z|·sin(ωt + arg Z) (linear
    // time-invariant network); Z from the frequency-domain cable engine (exact π networks).
    let p = Params::default();
    let f = small_cell();
    let fine = fine_network(&f, &p, PieceRule::default()).unwrap();
    let freq = 200.0;
    let maps = CellMaps::compute(&f, &p, freq).unwrap();
    let period = 1000.0 / freq;
    let dt = period / 200.0;
    let settle = 15.0 * p.tau_ms(); // transients decay by e^(−15)
    let total = settle + 5.0 * period;
    for site in [2usize, 4] {
        let k = fine.node_of[site] as usize;
        let amp = 10.0;
        let r = simulate(
            &fine.net,
            &current(
                k,
                Waveform::Sine {
                    amplitude_pa: amp,
                    freq_hz: freq,
                },
            ),
            &[k, 0],
            &run(dt, Method::CrankNicolson, total),
        )
        .unwrap();
        let start = (settle / dt).round() as usize;
        let w = 2.0 * PI * freq * 1e-3;
        for (col, want) in [(0, maps.z_in(site)), (1, maps.z_soma(site))] {
            // projection on sin and cos over whole periods
            let (mut a, mut b) = (0.0, 0.0);
            let m = r.times_ms.len() - 1 - start;
            for s in start..start + m {
                let (t, v) = (r.times_ms[s], r.traces[col][s]);
                a += v * (w * t).sin();
                b += v * (w * t).cos();
            }
            let z = num_complex::Complex64::new(a, b) * (2.0 / m as f64 / amp) * 1e9; // mV/pA = GΩ → Ω
            let rel = (z - want).norm() / want.norm();
            assert!(
                rel < 2e-3,
                "site {site} col {col}: {z} vs {want} ({rel:.2e})"
            );
        }
    }
}

/// Deterministic random numbers for the random trees (splitmix64; Steele, Lea & Flood 2014).
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    }
}

fn random_tree(n: usize, seed: u64) -> RcNetwork {
    let mut r = Rng(seed);
    let mut net = RcNetwork {
        parent: vec![NONE],
        g_axial_ns: vec![0.0],
        g_leak_ns: vec![],
        cap_pf: vec![],
    };
    for k in 1..n {
        net.parent.push((r.next() * k as f64) as u32);
        net.g_axial_ns.push(10f64.powf(-1.0 + 3.0 * r.next()));
    }
    for _ in 0..n {
        net.g_leak_ns.push(0.01 + r.next());
        net.cap_pf.push(1.0 + 20.0 * r.next());
    }
    net
}

#[test]
fn reciprocity_on_a_random_tree() {
    // V_j(t) for a current at i = V_i(t) for the same current at j: the conductance and
    // capacitance matrices are symmetric (reciprocity theorem of linear networks)
    let net = random_tree(60, 7);
    let w = Waveform::Alpha {
        tau_ms: 0.5,
        peak_pa: 10.0,
    };
    for (i, j) in [(5usize, 41usize), (0, 59), (17, 3)] {
        let o = run(0.02, Method::CrankNicolson, 30.0);
        let a = simulate(&net, &current(i, w), &[j], &o).unwrap();
        let b = simulate(&net, &current(j, w), &[i], &o).unwrap();
        let scale = a.traces[0].iter().fold(0.0f64, |m, v| m.max(v.abs()));
        assert!(scale > 0.0);
        for (x, y) in a.traces[0].iter().zip(&b.traces[0]) {
            assert!((x - y).abs() < 1e-10 * scale, "{i}→{j}: {x} vs {y}");
        }
        // and the two are not trivially equal to the response at the injection site
        let c = simulate(&net, &current(i, w), &[i], &o).unwrap();
        assert!((c.traces[0][100] - a.traces[0][100]).abs() > 1e-6 * scale);
    }
}

/// Dense RK4 integration (Runge–Kutta, classic fourth order; common practice) of a small
/// network with a synapse whose input vector is `u` ((node, weight) pairs: the synapse sees
/// V_u = Σ w·V and injects g·(E − V_u)·w at each node; one node with weight 1 is a plain
/// synapse), written out independently of the engine.
/// Dense classical RK4 of a synapse at node `s`, or at a point x on the link between `s` and
/// `on_link.0` at fraction `on_link.1` of its resistance from s: the link's g cut into g/w
/// towards s and g/(1 − w) towards the other end, x without membrane, so its voltage is the
/// conductance-weighted mean of its neighbours and the synapse. Returns the soma's and the
/// input point's voltages at every step.
fn rk4_synapse(
    net: &RcNetwork,
    s: usize,
    on_link: Option<(usize, f64)>,
    syn: &Synapse,
    dt: f64,
    t_end: f64,
) -> (Vec<f64>, Vec<f64>) {
    let n = net.len();
    let point = |t: f64, v: &[f64]| -> (f64, [(usize, f64); 2]) {
        let g = syn.conductance(t);
        let Some((k, w)) = on_link else {
            return (v[s], [(s, 0.0), (s, 0.0)]);
        };
        let child = if net.parent[s] as usize == k { s } else { k };
        let (g1, g2) = (net.g_axial_ns[child] / w, net.g_axial_ns[child] / (1.0 - w));
        let vx = (g1 * v[s] + g2 * v[k] + g * syn.e_rev_mv) / (g1 + g2 + g);
        (vx, [(s, g1), (k, g2)])
    };
    let deriv = |t: f64, v: &[f64]| -> Vec<f64> {
        let mut i: Vec<f64> = (0..n).map(|k| -net.g_leak_ns[k] * v[k]).collect();
        let (vx, ends) = point(t, v);
        for k in 1..n {
            let p = net.parent[k] as usize;
            let through_x = (k, p) == (ends[0].0, ends[1].0) || (k, p) == (ends[1].0, ends[0].0);
            if on_link.is_some() && through_x {
                continue; // the link through x
            }
            let cur = net.g_axial_ns[k] * (v[p] - v[k]);
            i[k] += cur;
            i[p] -= cur;
        }
        match on_link {
            None => i[s] += syn.conductance(t) * (syn.e_rev_mv - v[s]),
            Some(_) => {
                for (k, gk) in ends {
                    i[k] += gk * (vx - v[k]);
                }
            }
        }
        (0..n).map(|k| i[k] / net.cap_pf[k]).collect()
    };
    let mut v = vec![0.0; n];
    let steps = (t_end / dt).round() as usize;
    let mut out = (vec![v[0]], vec![point(0.0, &v).0]);
    for st in 0..steps {
        let t = st as f64 * dt;
        let k1 = deriv(t, &v);
        let v2: Vec<f64> = (0..n).map(|k| v[k] + 0.5 * dt * k1[k]).collect();
        let k2 = deriv(t + 0.5 * dt, &v2);
        let v3: Vec<f64> = (0..n).map(|k| v[k] + 0.5 * dt * k2[k]).collect();
        let k3 = deriv(t + 0.5 * dt, &v3);
        let v4: Vec<f64> = (0..n).map(|k| v[k] + dt * k3[k]).collect();
        let k4 = deriv(t + dt, &v4);
        for k in 0..n {
            v[k] += dt / 6.0 * (k1[k] + 2.0 * k2[k] + 2.0 * k3[k] + k4[k]);
        }
        out.0.push(v[0]);
        out.1.push(point(t + dt, &v).0);
    }
    out
}

#[test]
fn conductance_synapse_matches_an_independent_rk4() {
    let net = random_tree(8, 3);
    let syn = Synapse {
        e_rev_mv: 70.0,
        g_peak_ns: 5.0,
        tau_rise_ms: 0.2,
        tau_decay_ms: 2.0,
    };
    let s = 6;
    let (reference, _) = rk4_synapse(&net, s, None, &syn, 1e-4, 20.0);
    let dt = 0.01;
    let r = simulate(
        &net,
        &Drive::Synapse {
            node: s,
            synapse: syn,
            split: None,
        },
        &[0],
        &run(dt, Method::CrankNicolson, 20.0),
    )
    .unwrap();
    let scale = reference.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    assert!(scale > 0.1, "{scale}");
    for (st, v) in r.traces[0].iter().enumerate() {
        let want = reference[st * 100];
        assert!((v - want).abs() < 1e-4 * scale, "step {st}: {v} vs {want}");
    }
}

#[test]
fn split_synapse_matches_an_independent_rk4() {
    // a synapse at a point on the link between node 6 and its parent, 0.3 of the link's
    // resistance from node 6: the engine's rank-one update with the point Kron-eliminated
    // against the dense RK4 with the point as a node of its own (soma and point voltages)
    let net = random_tree(8, 3);
    let syn = Synapse {
        e_rev_mv: 70.0,
        g_peak_ns: 8.0,
        tau_rise_ms: 0.2,
        tau_decay_ms: 2.0,
    };
    let (s, k) = (6, net.parent[6] as usize);
    let (reference, at_point) = rk4_synapse(&net, s, Some((k, 0.3)), &syn, 1e-4, 20.0);
    let (alone, _) = rk4_synapse(&net, s, None, &syn, 1e-4, 20.0);
    let r = simulate(
        &net,
        &Drive::Synapse {
            node: s,
            synapse: syn,
            split: Some(NodeSplit {
                node: k,
                weight: 0.3,
            }),
        },
        &[0],
        &run(0.01, Method::CrankNicolson, 20.0),
    )
    .unwrap();
    let scale = reference.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    // the split changes the answer (else the check below could not fail)
    let moved = (0..reference.len()).fold(0.0f64, |m, i| m.max((reference[i] - alone[i]).abs()));
    assert!(moved > 0.01 * scale, "{moved} vs {scale}");
    let point_scale = at_point.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    for (st, v) in r.traces[0].iter().enumerate() {
        let want = reference[st * 100];
        assert!((v - want).abs() < 1e-4 * scale, "step {st}: {v} vs {want}");
        let (x, want) = (r.input_point_mv[st], at_point[st * 100]);
        assert!(
            (x - want).abs() < 1e-3 * point_scale,
            "step {st}: point {x} vs {want}"
        );
    }
    // a split between two nodes not joined by a link is refused
    let far = (1..8)
        .find(|&j| j != s && j != k && net.parent[s] as usize != j && net.parent[j] as usize != s)
        .unwrap();
    let bad = Drive::Synapse {
        node: s,
        synapse: syn,
        split: Some(NodeSplit {
            node: far,
            weight: 0.3,
        }),
    };
    assert!(simulate(&net, &bad, &[0], &run(0.01, Method::CrankNicolson, 1.0)).is_err());
}

#[test]
fn piece_rule_converges_on_a_real_cell() {
    // Richardson-style check (common practice, no source): the soma-injection peaks at every
    // point change by less than 0.1 % when the pieces are halved, and by less again when
    // halved once more (the change shrinks as the discretisation converges).
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/real/cultured_neuron_control.swc"
    );
    let m = pollard::Morphology::read(std::path::Path::new(path)).unwrap();
    let f = m.flatten();
    let p = Params::default();
    let peaks = |frac: f64| {
        let fine = fine_network(
            &f,
            &p,
            PieceRule {
                lambda_fraction: frac,
            },
        )
        .unwrap();
        let mut o = run(0.025, Method::CrankNicolson, 0.0);
        o.stop = Stop::AllPeaked {
            min_ms: 1.5,
            max_ms: 200.0,
        };
        o.track_peaks = true;
        let drive = current(
            0,
            Waveform::Alpha {
                tau_ms: 0.5,
                peak_pa: 10.0,
            },
        );
        let pk = simulate(&fine.net, &drive, &[], &o).unwrap().peaks.unwrap();
        (
            fine.net.len(),
            fine.node_of
                .iter()
                .map(|&k| pk.value_mv[k as usize])
                .collect::<Vec<_>>(),
        )
    };
    let change = |a: &[f64], b: &[f64]| {
        a.iter()
            .zip(b)
            .map(|(x, y)| ((x - y) / y).abs())
            .fold(0.0, f64::max)
    };
    let (n1, p1) = peaks(0.02);
    let (n2, p2) = peaks(0.01);
    let (n3, p3) = peaks(0.005);
    assert!(n1 < n2 && n2 < n3, "{n1} {n2} {n3}");
    let (c12, c23) = (change(&p1, &p2), change(&p2, &p3));
    eprintln!("nodes {n1} {n2} {n3}; peak changes {c12:.2e} then {c23:.2e}");
    assert!(c23 < 1e-3, "default rule vs half: {c23}");
    assert!(c23 < c12, "{c12} then {c23}");
}

#[test]
fn growing_step_keeps_the_peaks_of_a_fixed_step() {
    // the fixed-step run is the reference (Crank–Nicolson at dt = 0.025 ms, errors ~1e-4);
    // the growing step (dt → 2 % of t after 5 ms) must give the same peaks and times to 0.3 %
    // a generated cell whose farthest points peak late (tens of ms)
    let text = pollard::synth::to_swc(&pollard::synth::big_cell(3000, 7), &[]);
    let m = pollard::Morphology::parse(&text, "big.swc").unwrap();
    let fine = fine_network(&m.flatten(), &Params::default(), PieceRule::default()).unwrap();
    let drive = current(
        0,
        Waveform::Alpha {
            tau_ms: 0.5,
            peak_pa: 10.0,
        },
    );
    let peaks = |grow: Option<Growth>| {
        let mut o = run(0.025, Method::CrankNicolson, 0.0);
        o.stop = Stop::AllPeaked {
            min_ms: 1.5,
            max_ms: 300.0,
        };
        o.track_peaks = true;
        o.growth = grow;
        let r = simulate(&fine.net, &drive, &[], &o).unwrap();
        (r.times_ms.len(), r.peaks.unwrap())
    };
    let (n_fixed, a) = peaks(None);
    assert_eq!(a.not_peaked, 0);
    let (n_grow, b) = peaks(Some(Growth {
        after_ms: 5.0,
        ratio: pollard::fidelity::GROWTH_RATIO,
    }));
    assert!(n_grow < n_fixed, "{n_grow} steps vs {n_fixed}");
    for k in 0..a.value_mv.len() {
        let dv = (a.value_mv[k] - b.value_mv[k]).abs() / a.value_mv[k];
        let dt = (a.time_ms[k] - b.time_ms[k]).abs() / a.time_ms[k];
        assert!(dv < 3e-3 && dt < 3e-3, "node {k}: {dv:.2e} {dt:.2e}");
    }
}
