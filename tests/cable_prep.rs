//! The direct file → flat route of `pollard cable` gives exactly the cell the full morphology
//! route gives (same maps at every SWC id), and is only taken on plain files; on real cells the
//! maps match a sparse direct solve (nalgebra-sparse Cholesky) of the same network.

use pollard::cable::prep::{cable_input, flat_from_plain_points};
use pollard::cable::{CellMaps, Params, PrepOptions, prepare};
use pollard::{Morphology, swc, synth};
use std::collections::HashMap;

mod common;

/// Per SWC id: (|Z_kk|, A to soma, A from soma), by the full route.
fn full_route(text: &str, opts: &PrepOptions, f: f64) -> HashMap<i64, [f64; 3]> {
    let m = Morphology::parse(text, "t.swc").unwrap();
    let fl = prepare(&m, opts).unwrap();
    let maps = CellMaps::compute(&fl, &Params::default(), f).unwrap();
    (0..m.len())
        .filter_map(|i| {
            maps.point(i).map(|p| {
                (
                    m.points[i].id,
                    [
                        p.input_resistance_mohm,
                        p.attenuation_to_soma,
                        p.attenuation_from_soma,
                    ],
                )
            })
        })
        .collect()
}

fn check_same(text: &str, expect_direct: bool) {
    let opts = PrepOptions::default();
    for f in [0.0, 100.0] {
        let want = full_route(text, &opts, f);
        let input = cable_input(swc::parse_str(text, "t.swc").unwrap(), &opts).unwrap();
        assert_eq!(input.morphology.is_none(), expect_direct);
        let maps = CellMaps::compute(&input.flat, &Params::default(), f).unwrap();
        let mut seen = 0;
        for (i, id) in input.ids.iter().enumerate() {
            let Some(p) = maps.point(i) else { continue };
            let w = want[id];
            let got = [
                p.input_resistance_mohm,
                p.attenuation_to_soma,
                p.attenuation_from_soma,
            ];
            for c in 0..3 {
                assert!(
                    (got[c] - w[c]).abs() <= 1e-12 * w[c],
                    "id {id}: {got:?} vs {w:?}"
                );
            }
            seen += 1;
        }
        assert_eq!(seen, want.len());
    }
}

#[test]
fn direct_route_matches_the_full_route() {
    check_same(&synth::to_swc(&synth::big_cell(20_000, 3), &[]), true);
    check_same(&synth::to_swc(&synth::random_tree(2_000, 5), &[]), true);
    check_same(&synth::to_swc(&synth::pyramidal(2), &[]), true);
}

#[test]
fn other_files_take_the_full_route() {
    // a three-point soma, a zero radius, ids out of order: the morphology decides
    let three = "1 1 0 0 0 5 -1\n2 1 0 -5 0 5 1\n3 1 0 5 0 5 1\n4 3 0 20 0 1 1\n";
    check_same(three, false);
    let zero_r = "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 20 0 0 0 2\n";
    let pts = swc::parse_str(zero_r, "t.swc").unwrap().points;
    assert!(flat_from_plain_points(&pts).is_none());
    let unordered = "1 1 0 0 0 5 -1\n3 3 20 0 0 1 2\n2 3 10 0 0 1 1\n";
    check_same(unordered, false);
    let child_first = "1 1 0 0 0 5 -1\n2 3 20 0 0 1 3\n3 3 10 0 0 1 1\n";
    check_same(child_first, false);
}

#[test]
fn real_cells_match_a_sparse_direct_solve() {
    // The real cells (tests/data/real, and POLLARD_CELLS when set), prepared as a user would
    // (--scale 0.001 for the nm file, --default-diameter 0.5 where radii are missing). The maps
    // of the O(N) sweeps against nalgebra-sparse's Cholesky factorisation of the same DC network: Z_00, Z_k0 at every
    // node, and Z_kk at a few nodes. None of these files takes the direct route; those that
    // would are compared with the full route too.
    let paths = common::real_cell_paths();
    assert!(paths.len() >= 3);
    let p = Params::default();
    for path in paths {
        let text = std::fs::read_to_string(&path).unwrap();
        let m = Morphology::parse(&text, "t.swc").unwrap();
        let fl = common::flat_as_a_user_would(&m);
        let maps = CellMaps::compute(&fl, &p, 0.0).unwrap();
        let net = pollard::cable::Network::build(&fl, &p, 0.0).unwrap();
        let n = fl.len();
        let js = [n / 5, n / 2, n - 1];
        let z = common::z_columns(&net, &[0, js[0], js[1], js[2]]);
        let rel = |a: f64, b: f64| (a - b).abs() / b.abs();
        let mut worst: f64 = 0.0;
        for (k, &zk) in z[0].iter().enumerate() {
            worst = worst.max(rel(maps.z_soma(k).re, zk));
        }
        for (c, &j) in js.iter().enumerate() {
            worst = worst.max(rel(maps.z_in(j).re, z[c + 1][j]));
        }
        assert!(worst < 1e-9, "{}: {worst:e}", path.display());
        let file = swc::parse_str(&text, "t.swc").unwrap();
        if flat_from_plain_points(&file.points).is_some() {
            check_same(&text, true);
        }
    }
}
