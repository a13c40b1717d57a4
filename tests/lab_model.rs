//! The branching lab's numbers against closed forms of passive cable theory.
//! Every reference is written out here from its formula, not taken from the lab's code.

use pollard::cable::{C64, Params};
use pollard::lab::{End, LabResult, LabTree, Piece, Shape, TreeSpec};
use std::f64::consts::PI;

/// R∞ = (2/π)·√(Rm·Ra)·d^(−3/2) (Ω), d in µm (Rall 1959; Johnston & Wu 1995 ch. 4, from memory).
fn r_inf(p: &Params, d_um: f64) -> f64 {
    let d = d_um * 1e-4;
    2.0 / PI * (p.rm_ohm_cm2 * p.ra_ohm_cm).sqrt() * d.powf(-1.5)
}

/// λ = √(Rm·d/(4·Ra)) (µm) (Johnston & Wu 1995 ch. 4, from memory).
fn lambda(p: &Params, d_um: f64) -> f64 {
    (p.rm_ohm_cm2 * d_um * 1e-4 / (4.0 * p.ra_ohm_cm)).sqrt() * 1e4
}

fn cable(length: f64, diam: f64, end: End) -> TreeSpec {
    let mut s = TreeSpec {
        shape: Shape::Cable,
        end,
        ..TreeSpec::default()
    };
    s.level[0] = Piece::new(length, diam);
    s
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

#[test]
fn sealed_cable_input_resistance_is_r_inf_coth_l() {
    // Rall 1959; Johnston & Wu 1995 ch. 4, from memory: R_in = R∞·coth(L)
    for (len, d) in [(300.0, 2.0), (800.0, 1.0), (2000.0, 0.5), (50.0, 4.0)] {
        let s = cable(len, d, End::Sealed);
        let t = LabTree::build(&s).unwrap();
        let l = len / lambda(&s.params, d);
        let want = r_inf(&s.params, d) / l.tanh();
        let got = t.input_impedance(0).re;
        assert!(rel(got, want) < 1e-9, "len {len} d {d}: {got} vs {want}");
    }
}

#[test]
fn killed_cable_input_resistance_is_r_inf_tanh_l() {
    // Rall 1959; Johnston & Wu 1995 ch. 4, from memory: R_in = R∞·tanh(L)
    for (len, d) in [(300.0, 2.0), (800.0, 1.0), (2000.0, 0.5), (50.0, 4.0)] {
        let s = cable(len, d, End::Killed);
        let t = LabTree::build(&s).unwrap();
        let l = len / lambda(&s.params, d);
        let want = r_inf(&s.params, d) * l.tanh();
        let got = t.input_impedance(0).re;
        assert!(rel(got, want) < 1e-9, "len {len} d {d}: {got} vs {want}");
    }
}

#[test]
fn check_value_r_inf_of_a_2um_cable() {
    // the note's check value (values from memory): d = 2 µm, Rm 20 000, Ra 150 → R∞ ≈ 390 MΩ;
    // a very long sealed cable approaches it
    let s = cable(20_000.0, 2.0, End::Sealed);
    let r = LabTree::build(&s).unwrap().soma_rin_mohm();
    assert!((r - 390.0).abs() < 1.0, "{r}");
}

#[test]
fn voltage_along_a_sealed_cable_is_cosh() {
    // V(X)/V(0) = cosh(L − X)/cosh(L) for current at X = 0, sealed end (Rall 1959)
    let s = cable(600.0, 1.0, End::Sealed);
    let r = LabResult::compute(&s, 0).unwrap();
    let lam = lambda(&s.params, 1.0);
    let big_l = 600.0 / lam;
    assert_eq!(r.path.dist_um.len(), s.segments + 1);
    for (i, &x_um) in r.path.dist_um.iter().enumerate() {
        let x = x_um / lam;
        let want = (big_l - x).cosh() / big_l.cosh();
        assert!((r.path.v_from_soma[i] - want).abs() < 1e-9, "at {x_um} µm");
        assert!((r.path.x[i] - x).abs() < 1e-12);
    }
}

#[test]
fn voltage_along_a_killed_cable_is_sinh() {
    // V(X)/V(0) = sinh(L − X)/sinh(L) for current at X = 0, killed end (Rall 1959)
    let s = cable(600.0, 1.0, End::Killed);
    let r = LabResult::compute(&s, 0).unwrap();
    let lam = lambda(&s.params, 1.0);
    let big_l = 600.0 / lam;
    for (i, &x_um) in r.path.dist_um.iter().enumerate() {
        let x = x_um / lam;
        let want = (big_l - x).sinh() / big_l.sinh();
        assert!((r.path.v_from_soma[i] - want).abs() < 1e-9, "at {x_um} µm");
    }
    // the killed tip is at rest and has no input resistance; current goes in one node before
    let last = r.path.v_from_soma.len() - 1;
    assert_eq!(r.path.v_from_soma[last], 0.0);
    assert_eq!(r.path.rin_mohm[last], 0.0);
    assert!(r.path.melec_in[last].is_nan());
    assert_eq!(r.path.inject_at, last - 1);
}

#[test]
fn sealed_cable_at_100_hz_matches_the_complex_closed_form() {
    // Z_in = coth(γℓ)/Y0, γ = √(r_a·y), Y0 = √(y/r_a), y = πd(1/Rm + jωCm), r_a = 4Ra/(πd²)
    // (Koch 1999 ch. 2; Johnston & Wu 1995 ch. 4 with complex L)
    let mut s = cable(700.0, 1.5, End::Sealed);
    s.freq_hz = 100.0;
    let t = LabTree::build(&s).unwrap();
    let p = s.params;
    let d = 1.5e-4;
    let w = 2.0 * PI * 100.0;
    let y = C64::new(1.0 / p.rm_ohm_cm2, w * p.cm_uf_cm2 * 1e-6) * (PI * d);
    let ra = 4.0 * p.ra_ohm_cm / (PI * d * d);
    let y0 = (y / ra).sqrt();
    let gl = (y * ra).sqrt() * 0.07;
    let want = gl.cosh() / gl.sinh() / y0;
    let got = t.input_impedance(0);
    assert!((got - want).norm() < 1e-9 * want.norm(), "{got} vs {want}");
    // and it is smaller than at DC (the membrane capacitance shunts): fact of the trade
    let dc = LabTree::build(&cable(700.0, 1.5, End::Sealed)).unwrap();
    assert!(got.norm() < dc.input_impedance(0).norm());
}

#[test]
fn soma_in_parallel_adds_its_conductance() {
    // R_in = 1/(G_soma + 1/(R∞·coth L)), G_soma = πd_s²/Rm (a sphere; Rall 1959 ball and stick)
    let mut s = cable(500.0, 2.0, End::Sealed);
    s.soma_diam_um = 20.0;
    let t = LabTree::build(&s).unwrap();
    let l = 500.0 / lambda(&s.params, 2.0);
    let g_soma = PI * (20e-4f64).powi(2) / s.params.rm_ohm_cm2;
    let want = 1.0 / (g_soma + l.tanh() / r_inf(&s.params, 2.0));
    assert!(rel(t.input_impedance(0).re, want) < 1e-9);
}

/// Input conductance of a sealed or killed cylinder: Y0·tanh L or Y0·coth L (Rall 1959).
fn g_end(p: &Params, piece: Piece, end: End) -> f64 {
    let l = piece.length_um / lambda(p, piece.diam_um);
    let y0 = 1.0 / r_inf(p, piece.diam_um);
    match end {
        End::Sealed => y0 * l.tanh(),
        End::Killed => y0 / l.tanh(),
    }
}

/// Input conductance of a cylinder loaded at its far end by G_L:
/// G = Y0·(G_L + Y0·tanh L)/(Y0 + G_L·tanh L) (Rall 1959; Johnston & Wu 1995 ch. 4, written from memory).
fn g_loaded(p: &Params, piece: Piece, g_load: f64) -> f64 {
    let l = piece.length_um / lambda(p, piece.diam_um);
    let y0 = 1.0 / r_inf(p, piece.diam_um);
    y0 * (g_load + y0 * l.tanh()) / (y0 + g_load * l.tanh())
}

#[test]
fn y_junction_with_one_killed_daughter_matches_the_loaded_cable() {
    let mut s = TreeSpec {
        shape: Shape::YJunction,
        ..TreeSpec::default()
    };
    s.level[0] = Piece::new(250.0, 2.5);
    s.overrides.insert(1, Piece::new(300.0, 1.0));
    s.overrides.insert(2, Piece::new(150.0, 1.5));
    s.end_overrides.insert(2, End::Killed);
    let t = LabTree::build(&s).unwrap();
    let p = s.params;
    let g_l = g_end(&p, Piece::new(300.0, 1.0), End::Sealed)
        + g_end(&p, Piece::new(150.0, 1.5), End::Killed);
    let want = 1.0 / g_loaded(&p, Piece::new(250.0, 2.5), g_l);
    assert!(rel(t.input_impedance(0).re, want) < 1e-9);
}

#[test]
fn rall_tree_equals_its_equivalent_cylinder() {
    // Rall 1962: forks obeying d_p^(3/2) = Σ d_c^(3/2), all tips at one electrotonic distance,
    // same end condition → R_in = R∞(d_trunk)·coth(L) with L = Σ l/λ along any path.
    let mut s = TreeSpec {
        shape: Shape::Symmetric,
        levels: 3,
        ..TreeSpec::default()
    };
    let k = 2f64.powf(-2.0 / 3.0);
    s.level[0] = Piece::new(200.0, 3.0);
    s.level[1] = Piece::new(150.0, 3.0 * k);
    s.level[2] = Piece::new(120.0, 3.0 * k * k);
    let p = s.params;
    let big_l: f64 = (0..3)
        .map(|i| s.level[i].length_um / lambda(&p, s.level[i].diam_um))
        .sum();
    for end in [End::Sealed, End::Killed] {
        s.end = end;
        let r = LabResult::compute(&s, 0).unwrap();
        let want = match end {
            End::Sealed => r_inf(&p, 3.0) / big_l.tanh(),
            End::Killed => r_inf(&p, 3.0) * big_l.tanh(),
        };
        assert!(rel(r.tree.input_impedance(0).re, want) < 1e-9, "{end:?}");
        let e = &r.equivalent;
        assert!(e.qualifies(), "{:?}", e.reasons);
        assert!((e.big_l - big_l).abs() < 1e-9);
        assert!(rel(e.rin_tree_mohm, want * 1e-6) < 1e-9);
        assert!(rel(e.rin_cylinder_mohm, want * 1e-6) < 1e-6);
        assert!(rel(e.rin_closed_mohm, want * 1e-6) < 1e-6);
        for j in &r.junctions {
            assert!((j.ratio - 1.0).abs() < 1e-12);
        }
    }
    // break the rule at one fork: no longer an equivalent cylinder, and the lab says why
    s.overrides.insert(1, Piece::new(150.0, 3.0));
    let r = LabResult::compute(&s, 0).unwrap();
    assert!(!r.equivalent.qualifies());
}

#[test]
fn three_halves_ratio_at_a_fork() {
    // Σ d_c^(3/2) / d_p^(3/2) (Rall 1959), by hand: 1^1.5 + 2^1.5 over 4^1.5 = (1 + 2.828…)/8
    let mut s = TreeSpec {
        shape: Shape::YJunction,
        ..TreeSpec::default()
    };
    s.level[0] = Piece::new(200.0, 4.0);
    s.overrides.insert(1, Piece::new(200.0, 1.0));
    s.overrides.insert(2, Piece::new(200.0, 2.0));
    let r = LabResult::compute(&s, 1).unwrap();
    assert_eq!(r.junctions.len(), 1);
    assert!((r.junctions[0].ratio - (1.0 + 8f64.sqrt()) / 8.0).abs() < 1e-12);
    assert!(r.junctions[0].on_path);
}

#[test]
fn attenuation_is_stronger_towards_the_soma() {
    // Rall & Rinzel 1973: a thin tip's potential shrinks far more on the way to the soma than
    // the soma's on the way out. By reciprocity (Z_ts = Z_st) the two attenuations differ by
    // the ratio of input resistances: A_tip→soma / A_soma→tip = Z_tt / Z_ss.
    let mut s = TreeSpec {
        shape: Shape::YJunction,
        ..TreeSpec::default()
    };
    s.level[0] = Piece::new(200.0, 3.0);
    s.level[1] = Piece::new(300.0, 0.6);
    s.soma_diam_um = 20.0;
    let r = LabResult::compute(&s, 1).unwrap();
    let last = r.path.nodes.len() - 1;
    assert!(r.att_tip_to_soma > 3.0 * r.att_soma_to_tip);
    let ratio = r.att_tip_to_soma / r.att_soma_to_tip;
    let want = r.path.rin_mohm[last] / r.path.rin_mohm[0];
    assert!(rel(ratio, want) < 1e-9);
    // morphoelectrotonic distances are the logs of those attenuations (Zador et al. 1995)
    assert!((r.path.melec_in[last] - r.att_tip_to_soma.ln()).abs() < 1e-9);
    assert!((r.path.melec_out[last] - r.att_soma_to_tip.ln()).abs() < 1e-9);
}

#[test]
fn thinner_daughters_let_more_soma_voltage_reach_the_fork() {
    // a smaller load at the fork (thinner daughters) lowers the trunk's input conductance, so
    // V_fork/V_soma = 1/(cosh L + (G_L/Y0) sinh L) rises (Rall 1959; fact of the trade)
    let mut s = TreeSpec {
        shape: Shape::YJunction,
        ..TreeSpec::default()
    };
    s.level[0] = Piece::new(300.0, 2.0);
    let mut last = 0.0;
    for d in [3.0, 2.0, 1.26, 0.8, 0.4] {
        s.level[1] = Piece::new(200.0, d);
        let r = LabResult::compute(&s, 1).unwrap();
        let j = &r.junctions[0];
        let i = r.path.nodes.iter().position(|&k| k == j.node).unwrap();
        let v = r.path.v_from_soma[i];
        // the closed form
        let p = s.params;
        let g_l = 2.0 * g_end(&p, Piece::new(200.0, d), End::Sealed);
        let l = 300.0 / lambda(&p, 2.0);
        let y0 = 1.0 / r_inf(&p, 2.0);
        let want = 1.0 / (l.cosh() + g_l / y0 * l.sinh());
        assert!((v - want).abs() < 1e-9, "d {d}: {v} vs {want}");
        assert!(v > last);
        last = v;
    }
}

#[test]
fn the_lab_tree_as_swc_reads_back_with_the_same_shape() {
    for shape in Shape::ALL {
        let s = TreeSpec {
            shape,
            levels: 4,
            ..TreeSpec::default()
        };
        let t = LabTree::build(&s).unwrap();
        let text = t.morphology.to_swc_string(&[]);
        let m = pollard::Morphology::parse(&text, "lab.swc").unwrap();
        let metrics = m.metrics();
        let tips = t.sections.iter().filter(|x| x.is_tip()).count();
        assert_eq!(metrics.tips, tips, "{shape:?}");
        let total: f64 = t.sections.iter().map(|x| x.piece.length_um).sum();
        assert!(rel(metrics.total_length_um, total) < 1e-9, "{shape:?}");
        assert!(!m.warnings.iter().any(|w| w.code == "zero-length"));
    }
}

#[test]
fn bad_numbers_are_errors_not_panics() {
    let mut s = TreeSpec::default();
    s.level[0].diam_um = f64::NAN;
    assert!(LabTree::build(&s).is_err());
    let mut s = TreeSpec::default();
    s.params.rm_ohm_cm2 = -1.0;
    assert!(LabTree::build(&s).is_err());
    let s = TreeSpec::default();
    assert!(LabResult::compute(&s, 99).is_err());
}

/// |Z_in| at the soma of a cell given as SWC points, through the engine (Ω).
fn engine_rin(points: Vec<pollard::swc::SwcPoint>, p: &Params) -> f64 {
    let m = pollard::Morphology::from_swc(pollard::swc::SwcFile {
        source: "synth".into(),
        points,
        header: Vec::new(),
        warnings: Vec::new(),
    })
    .unwrap();
    let net = pollard::cable::Network::build(&m.flatten(), p, 0.0).unwrap();
    pollard::cable::Maps::new(&net).input_impedance(0).re
}

#[test]
fn lab_trees_agree_with_the_generated_cells() {
    // the generators' single cable is the same ideal cylinder
    let s = cable(600.0, 1.0, End::Sealed);
    let lab = LabTree::build(&s).unwrap().input_impedance(0).re;
    let gen_ = engine_rin(pollard::synth::cylinder(600.0, 1.0, 24), &s.params);
    assert!(rel(gen_, lab) < 1e-9);
    // the generators' Y junction tapers each daughter's first segment from the parent's radius;
    // as the segments shorten it tends to the lab's ideal Y (which has no taper)
    let mut y = TreeSpec {
        shape: Shape::YJunction,
        ..TreeSpec::default()
    };
    y.level[0] = Piece::new(300.0, 2.0);
    y.level[1] = Piece::new(200.0, 1.0);
    let lab = LabTree::build(&y).unwrap().input_impedance(0).re;
    let coarse = engine_rin(
        pollard::synth::y_junction(300.0, 2.0, 200.0, 1.0, 4),
        &y.params,
    );
    let fine = engine_rin(
        pollard::synth::y_junction(300.0, 2.0, 200.0, 1.0, 400),
        &y.params,
    );
    assert!((fine - lab).abs() < (coarse - lab).abs());
    assert!(rel(fine, lab) < 1e-3, "{fine} vs {lab}");
}
