//! Unit checks of the reduction against nalgebra Schur complements (Kron reduction done by a
//! general-purpose dense solver), the budget rules and the site list reader.

use super::*;
use crate::cable::{Maps, UM};
use crate::morphology::Morphology;
use nalgebra::DMatrix;

/// Flat arrays by hand: a soma (area `soma`) and cylinders given as (parent node, length µm,
/// radius µm, segments). Each chain's nodes are appended in order.
fn flat_by_hand(soma: f64, branches: &[(usize, f64, f64, usize)]) -> (Flat, Vec<u32>) {
    let mut f = Flat {
        soma_area_um2: soma,
        ..Flat::default()
    };
    f.parent.push(NONE);
    f.length_um.push(0.0);
    f.r_prox_um.push(0.0);
    f.r_dist_um.push(0.0);
    f.kind.push(1);
    f.pos.push([0.0; 3]);
    f.node_point.push(0);
    f.line.push(1);
    // ends[i] = last node of branch i; branches refer to parents by "branch index + 1" (0 = soma)
    let mut ends = vec![0u32];
    for &(from, len, r, m) in branches {
        let mut last = ends[from];
        for i in 1..=m {
            let k = f.parent.len() as u32;
            f.parent.push(last);
            f.length_um.push(len / m as f64);
            f.r_prox_um.push(r);
            f.r_dist_um.push(r);
            f.kind.push(3);
            let p = f.pos[last as usize];
            f.pos
                .push([p[0] + len / m as f64, p[1] + (ends.len() * i) as f64, 0.0]);
            f.node_point.push(k);
            f.line.push(k as usize + 1);
            last = k;
        }
        ends.push(last);
    }
    f.point_node = (0..f.len() as u32).collect();
    (f, ends)
}

/// Dense conductance matrix of the full DC network (S).
fn full_matrix(f: &Flat, p: &Params) -> DMatrix<f64> {
    let net = Network::build(f, p, 0.0).unwrap();
    let n = net.len();
    let mut a = DMatrix::zeros(n, n);
    for k in 0..n {
        a[(k, k)] += net.shunt[k].re;
        if k > 0 {
            let q = net.parent[k] as usize;
            let g = net.g[k].re;
            a[(k, k)] += g;
            a[(q, q)] += g;
            a[(k, q)] -= g;
            a[(q, k)] -= g;
        }
    }
    a
}

/// Schur complement of `a` onto the nodes `keep` (in that order): Kron reduction by nalgebra.
fn schur(a: &DMatrix<f64>, keep: &[usize]) -> DMatrix<f64> {
    let n = a.nrows();
    let elim: Vec<usize> = (0..n).filter(|k| !keep.contains(k)).collect();
    let sub = |r: &[usize], c: &[usize]| DMatrix::from_fn(r.len(), c.len(), |i, j| a[(r[i], c[j])]);
    let arr = sub(keep, keep);
    if elim.is_empty() {
        return arr;
    }
    let are = sub(keep, &elim);
    let aee = sub(&elim, &elim);
    let aer = sub(&elim, keep);
    let x = aee.lu().solve(&aer).unwrap();
    arr - are * x
}

/// Conductance matrix of a reduced tree (S).
fn tree_matrix(t: &ReducedTree) -> DMatrix<f64> {
    let n = t.len();
    let mut a = DMatrix::zeros(n, n);
    for c in &t.compartments {
        let k = c.id as usize;
        a[(k, k)] += c.g_leak_ns * 1e-9;
        if let Some(q) = c.parent {
            let q = q as usize;
            let g = c.g_axial_ns * 1e-9;
            a[(k, k)] += g;
            a[(q, q)] += g;
            a[(k, q)] -= g;
            a[(q, k)] -= g;
        }
    }
    a
}

fn assert_close(a: &DMatrix<f64>, b: &DMatrix<f64>, tol: f64, what: &str) {
    let scale = a.abs().max();
    let diff = (a - b).abs().max();
    assert!(
        diff <= tol * scale,
        "{what}: differ by {diff:e} (scale {scale:e})\n{a}\n{b}"
    );
}

/// `t`'s conductance matrix is the Schur complement of the cell's (`a`) onto its compartments,
/// each found through the SWC line it is named after.
fn assert_kron_reduction(f: &Flat, a: &DMatrix<f64>, t: &ReducedTree, what: &str) {
    let keep: Vec<usize> = t
        .compartments
        .iter()
        .map(|c| f.line.iter().position(|&l| l == c.swc_line).unwrap())
        .collect();
    assert_close(&schur(a, &keep), &tree_matrix(t), 1e-10, what);
}

/// A strictly binary cell (no junctions needed): soma with two stems, forks, long chains.
fn binary_cell() -> Flat {
    flat_by_hand(
        500.0,
        &[
            (0, 120.0, 1.0, 6), // 1: stem A
            (0, 80.0, 1.5, 4),  // 2: stem B
            (1, 200.0, 0.6, 9), // 3: A's daughters
            (1, 90.0, 0.5, 3),  // 4
            (2, 60.0, 0.7, 5),  // 5: B's daughters
            (2, 300.0, 0.4, 8), // 6
            (3, 50.0, 0.3, 2),  // 7: a fork on 3
            (3, 70.0, 0.3, 3),  // 8
        ],
    )
    .0
}

#[test]
fn every_budget_is_the_kron_reduction_of_its_compartments() {
    // Kron reduction: the Schur complement of the full conductance matrix onto the nodes that
    // remain (computed here by nalgebra's LU) must be the reduced tree's matrix exactly.
    let f = binary_cell();
    let p = Params::default();
    let a = full_matrix(&f, &p);
    let r = Reducer::new(&f, &p, &ReduceOptions::default()).unwrap();
    assert_eq!(r.junctions(), 0);
    assert_eq!(r.max_compartments(), 9);
    for b in [1, 3, 5, 7, 9] {
        let t = r.tree(b);
        assert_eq!(t.len(), b);
        assert_kron_reduction(&f, &a, &t, &format!("budget {b}"));
    }
}

/// A trunk with three short side branches below a two-branch tuft (and one basal stem).
/// Returns the cell and the last node of each branch.
fn trunk_and_tuft() -> (Flat, Vec<u32>) {
    flat_by_hand(
        500.0,
        &[
            (0, 100.0, 1.0, 5),   // 1: basal stem
            (0, 50.0, 1.5, 3),    // 2: trunk
            (2, 20.0, 0.2, 2),    // 3: side branch
            (2, 50.0, 1.5, 3),    // 4: trunk
            (4, 20.0, 0.2, 2),    // 5: side branch
            (4, 50.0, 1.5, 3),    // 6: trunk
            (6, 20.0, 0.2, 2),    // 7: side branch
            (6, 50.0, 1.5, 3),    // 8: trunk
            (8, 600.0, 0.25, 12), // 9: thin tuft branch
            (8, 400.0, 0.8, 10),  // 10: thick tuft branch
        ],
    )
}

#[test]
fn small_side_branches_leave_the_tree_before_a_large_tuft_merges() {
    // Strict binary form: the tuft's fork can only stay with its path to the soma, which runs
    // through the three trunk forks. At 5 compartments the two tuft branches are the largest
    // and most different groups of sites, so the tree should be soma, basal leaf, tuft fork
    // and its two branches, with the trunk forks and side branches folded into the link
    // (Kron reduction, exact). A greedy order of cherry collapses alone cannot give this tree:
    // it must merge the tuft before any trunk fork goes.
    let (f, ends) = trunk_and_tuft();
    let p = Params::default();
    let r = Reducer::new(&f, &p, &ReduceOptions::default()).unwrap();
    assert_eq!(r.max_compartments(), 11);
    let t = r.tree(5);
    assert_eq!(t.len(), 5);
    let serve = |node: u32| t.point_compartment[node as usize];
    let (thin, thick, side) = (serve(ends[9]), serve(ends[10]), serve(ends[3]));
    assert_ne!(thin, thick, "the tuft's branches share a compartment");
    assert!(thin != 0 && thick != 0);
    // the side branch's sites go to an end of the trunk link: the soma or the tuft fork
    let fork = t.compartments[thin as usize].parent.unwrap();
    assert_eq!(t.compartments[thick as usize].parent, Some(fork));
    assert!(side == 0 || side == fork, "side branch served by {side}");
    // and the tree is still the Schur complement of the cell's network (nalgebra)
    assert_kron_reduction(&f, &full_matrix(&f, &p), &t, "budget 5");
}

#[test]
fn predicted_curve_bounds_the_measured_error() {
    let f = binary_cell();
    let p = Params::default();
    let r = Reducer::new(&f, &p, &ReduceOptions::default()).unwrap();
    let curve = r.error_curve();
    assert_eq!(curve.len(), 5);
    for &(b, rms) in &curve {
        let rep = r.report(&r.tree(b)).unwrap();
        let measured = rep.ln_attenuation_error_weighted_rms;
        if b == 1 {
            // every site is served by the soma: the prediction is exact
            assert!(
                (measured - rms).abs() < 1e-9,
                "budget 1: {measured} vs {rms}"
            );
        } else {
            // sites may be served by the closer end of their link, so the measured error is
            // at most the prediction (which serves them by the lower end)
            assert!(
                measured <= rms + 1e-9,
                "budget {b}: measured {measured} vs {rms}"
            );
        }
        assert!(rep.soma_input_resistance_dc_relative_error < 1e-9);
    }
}

#[test]
fn budgets_are_odd_and_clamped() {
    let f = binary_cell();
    let r = Reducer::new(&f, &Params::default(), &ReduceOptions::default()).unwrap();
    let t = r.tree(4);
    assert_eq!(t.len(), 3);
    assert!(t.rounded_down && !t.clamped);
    let t = r.tree(0);
    assert_eq!(t.len(), 1);
    assert!(t.clamped);
    let t = r.tree(1000);
    assert_eq!(t.len(), 9);
    assert!(t.clamped && !t.rounded_down);
    assert!(!r.tree(5).rounded_down);
}

#[test]
fn site_ratio_matches_a_dense_inverse() {
    let f = binary_cell();
    let r = Reducer::new(&f, &Params::default(), &ReduceOptions::default()).unwrap();
    let t = r.tree(7);
    let z = tree_matrix(&t).try_inverse().unwrap();
    for c in 0..t.len() {
        let v = t.site_ratio_dc(c);
        for k in 0..t.len() {
            let want = z[(k, c)] / z[(c, c)];
            assert!(
                (v[k] - want).abs() < 1e-9,
                "site {c} node {k}: {} vs {want}",
                v[k]
            );
        }
    }
    assert!(t.site_ratio_dc(99).is_empty());
}

#[test]
fn ln_attenuation_of_the_reduced_tree_matches_a_dense_inverse() {
    let f = binary_cell();
    let r = Reducer::new(&f, &Params::default(), &ReduceOptions::default()).unwrap();
    let t = r.tree(9);
    let z = tree_matrix(&t).try_inverse().unwrap();
    let ln = t.ln_attenuation_dc();
    for k in 0..t.len() {
        // A_k→s = Z_kk/Z_ks (Koch 1999 ch. 3)
        let want = (z[(k, k)] / z[(k, 0)]).ln();
        assert!((ln[k] - want).abs() < 1e-9, "{k}: {} vs {want}", ln[k]);
    }
}

#[test]
fn multifurcations_become_cascades_with_a_small_reported_effect() {
    // soma with four stems, one stem ending in a trifurcation
    let (f, _) = flat_by_hand(
        800.0,
        &[
            (0, 100.0, 1.0, 4),
            (0, 100.0, 1.2, 4),
            (0, 150.0, 0.8, 4),
            (0, 50.0, 0.9, 2),
            (1, 80.0, 0.5, 3),
            (1, 60.0, 0.5, 3),
            (1, 40.0, 0.5, 3),
        ],
    );
    let p = Params::default();
    let r = Reducer::new(&f, &p, &ReduceOptions::default()).unwrap();
    // 6 tips → 11 compartments, of which 2 soma junctions and 1 branch junction
    assert_eq!(r.max_compartments(), 11);
    assert_eq!(r.junctions(), 3);
    let eff = r.junction_effect_relative();
    assert!(eff.abs() < 1e-6 && eff != 0.0, "{eff:e}");
    // links are series resistances in the path: the input resistance can only rise
    assert!(eff > 0.0);
    let t = r.tree(11);
    // a longer junction link changes R_in proportionally more (a check that can fail)
    let coarse = ReduceOptions {
        junction_length_fraction: 1e-2,
        ..Default::default()
    };
    let r2 = Reducer::new(&f, &p, &coarse).unwrap();
    let ratio = r2.junction_effect_relative() / eff;
    assert!((ratio - 100.0).abs() < 1.0, "{ratio}");
    // the reported effect is what a dense solve of the maximal tree measures against the cable
    // engine (with the longer links, so that the dense solve is well conditioned)
    let full = Maps::new(&Network::build(&f, &p, 0.0).unwrap())
        .input_impedance(0)
        .re;
    let z = tree_matrix(&r2.tree(11)).try_inverse().unwrap();
    let measured = z[(0, 0)] / full - 1.0;
    let e2 = r2.junction_effect_relative();
    assert!((measured - e2).abs() < 1e-3 * e2, "{measured:e} vs {e2:e}");
    for c in &t.compartments {
        let kids = t
            .compartments
            .iter()
            .filter(|d| d.parent == Some(c.id))
            .count();
        assert!(kids == 0 || kids == 2);
    }
    // junctions share their node's leak: the total leak is the maximal tree's
    assert_eq!(
        t.compartments
            .iter()
            .filter(|c| c.role == Role::Junction)
            .count(),
        3
    );
}

#[test]
fn collapse_keeps_the_branch_that_carries_the_sites() {
    // binary_cell's layout again, to know its ends: a single site on the tip of branch 6 (B's
    // long daughter). A's side carries no site, so its cherries cost 0 and go first (n3, then
    // A); at budget 5 the site still has its own tip compartment and loses nothing.
    let (f, ends) = flat_by_hand(
        500.0,
        &[
            (0, 120.0, 1.0, 6),
            (0, 80.0, 1.5, 4),
            (1, 200.0, 0.6, 9),
            (1, 90.0, 0.5, 3),
            (2, 60.0, 0.7, 5),
            (2, 300.0, 0.4, 8),
            (3, 50.0, 0.3, 2),
            (3, 70.0, 0.3, 3),
        ],
    );
    let p = Params::default();
    let tip = ends[6];
    let opts = ReduceOptions {
        sites: Sites::List(vec![SiteSpec::Node { node: tip, line: 1 }]),
        ..Default::default()
    };
    let r = Reducer::new(&f, &p, &opts).unwrap();
    let t = r.tree(5);
    assert!(r.report(&t).unwrap().ln_attenuation_error.max < 1e-12);
    let c = &t.compartments[t.site_compartment[0] as usize];
    assert_eq!(c.role, Role::Tip);
    assert_eq!(c.swc_line, f.line[tip as usize]);
    // at budget 3 the site's branch must go too, and then it loses something
    assert!(r.report(&r.tree(3)).unwrap().ln_attenuation_error.max > 0.0);
    // with every point as a site, budget 5 loses something
    let r_all = Reducer::new(&f, &p, &ReduceOptions::default()).unwrap();
    assert!(
        r_all
            .report(&r_all.tree(5))
            .unwrap()
            .ln_attenuation_error
            .max
            > 0.0
    );
}

#[test]
fn types_filter_removes_membrane_and_distal_points() {
    let text = "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 50 0 0 1 2\n4 3 50 20 0 0.5 3\n\
                5 3 50 -20 0 0.5 3\n6 2 -10 0 0 0.5 1\n7 3 -60 0 0 0.5 6\n";
    let m = Morphology::parse(text, "t.swc").unwrap();
    let f = m.flatten();
    let p = Params::default();
    let opts = ReduceOptions {
        types: Some(vec![1, 3]),
        ..Default::default()
    };
    let r = Reducer::new(&f, &p, &opts).unwrap();
    // point 7 is type 3 but beyond the axon: left out with it
    assert_eq!(r.report(&r.tree(1)).unwrap().points_left_out, 2);
    let t = r.tree(99);
    for (i, pt) in m.points.iter().enumerate() {
        let out = pt.id == 6 || pt.id == 7;
        assert_eq!(t.point_compartment[i] == NONE, out, "id {}", pt.id);
    }
    // the cell without the axon: the cable engine on the same cell cut by hand
    let cut = "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 50 0 0 1 2\n4 3 50 20 0 0.5 3\n\
               5 3 50 -20 0 0.5 3\n";
    let fc = Morphology::parse(cut, "c.swc").unwrap().flatten();
    let want = Maps::new(&Network::build(&fc, &p, 0.0).unwrap())
        .input_impedance(0)
        .re;
    let got = r.tree(1).soma_input_resistance_ohm();
    assert!((got / want - 1.0).abs() < 1e-6, "{got} vs {want}");
    assert!(matches!(
        Reducer::new(
            &f,
            &p,
            &ReduceOptions {
                types: Some(vec![]),
                ..Default::default()
            }
        ),
        Err(ReduceError::NoTypes)
    ));
}

#[test]
fn site_lists_read_ids_positions_and_refuse_bad_lines() {
    let text = "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 50 0 0 1 2\n4 3 50 20 0 0.5 3\n\
                5 3 50 -20 0 0.5 3\n";
    let m = Morphology::parse(text, "t.swc").unwrap();
    let f = m.flatten();
    let s = parse_sites_csv("swc_id\n4\n4\n# note\n\n49.0, 19.0, 0.5\n", &m, &f).unwrap();
    assert_eq!(s.len(), 3);
    assert!(matches!(s[0], SiteSpec::Node { line: 2, .. }));
    assert!(matches!(s[2], SiteSpec::Position { line: 6, .. }));
    let r = Reducer::new(
        &f,
        &Params::default(),
        &ReduceOptions {
            sites: Sites::List(s),
            ..Default::default()
        },
    )
    .unwrap();
    let t = r.tree(99);
    // all three sites land on point 4's compartment (the position snaps to it)
    let i4 = m.points.iter().position(|p| p.id == 4).unwrap();
    let c4 = t.point_compartment[i4];
    assert!(t.site_compartment.iter().all(|&c| c == c4));
    assert_eq!(t.compartments[c4 as usize].site_count, 3);
    for bad in ["4 5\n", "99\n", "4\nx\n", "2.5\n", "\n# nothing\n"] {
        assert!(parse_sites_csv(bad, &m, &f).is_err(), "{bad:?}");
    }
    let e = parse_sites_csv("4\n99\n", &m, &f).unwrap_err();
    assert!(matches!(e, ReduceError::SiteFile { line: 2, .. }), "{e}");
}

#[test]
fn bad_options_are_typed_errors() {
    let f = binary_cell();
    let opts = ReduceOptions {
        junction_length_fraction: 0.0,
        ..Default::default()
    };
    assert!(matches!(
        Reducer::new(&f, &Params::default(), &opts),
        Err(ReduceError::OptionRange { .. })
    ));
    assert!(matches!(
        Reducer::new(
            &Flat::default(),
            &Params::default(),
            &ReduceOptions::default()
        ),
        Err(ReduceError::Empty)
    ));
    let mut no_radius = f.clone();
    no_radius.r_dist_um[3] = f64::NAN;
    assert!(matches!(
        Reducer::new(&no_radius, &Params::default(), &ReduceOptions::default()),
        Err(ReduceError::Cable(_))
    ));
}

#[test]
fn a_soma_alone_is_one_compartment() {
    let (f, _) = flat_by_hand(300.0, &[]);
    let p = Params::default();
    let r = Reducer::new(&f, &p, &ReduceOptions::default()).unwrap();
    assert_eq!(r.max_compartments(), 1);
    let t = r.tree(5);
    // G = area/Rm (a sphere of uniform membrane; common practice, no source)
    let want = 300.0 * UM_2 / p.rm_ohm_cm2;
    assert!((t.compartments[0].g_leak_ns * 1e-9 / want - 1.0).abs() < 1e-12);
    assert_eq!(t.feed_forward().layers, vec![vec![0]]);
}

const UM_2: f64 = UM * UM;

#[test]
fn a_million_deep_chain_reduces_without_recursion() {
    // one unbranched dendrite of 10⁶ points (1 mm in steps of 1 nm, so that it is deep but
    // electrically ordinary, L ≈ 1.7): soma, its soma leaf and the tip remain, and the tip's
    // leak is the sealed cable's G∞·tanh(L) (Rall 1959) seen through the chain
    let n = 1_000_000;
    let total_um = 1000.0;
    let (f, _) = flat_by_hand(0.0, &[(0, total_um, 0.5, n)]);
    let p = Params::default();
    let r = Reducer::new(&f, &p, &ReduceOptions::default()).unwrap();
    assert_eq!(r.max_compartments(), 3);
    let t = r.tree(1);
    let lambda_cm = (p.rm_ohm_cm2 * 1.0 * UM / (4.0 * p.ra_ohm_cm)).sqrt();
    let g_inf =
        std::f64::consts::PI * (1.0 * UM).powf(1.5) / (2.0 * (p.rm_ohm_cm2 * p.ra_ohm_cm).sqrt());
    let l = total_um * UM / lambda_cm;
    let want = g_inf * l.tanh();
    let got = t.compartments[0].g_leak_ns * 1e-9;
    assert!((got / want - 1.0).abs() < 1e-6, "{got} vs {want}");
}
