//! The direct file → flat route of `pollard cable` gives exactly the cell the full morphology
//! route gives (same maps at every SWC id), and is only taken on plain files.

use pollard::cable::prep::{cable_input, flat_from_plain_points};
use pollard::cable::{CellMaps, Params, PrepOptions, prepare};
use pollard::{Morphology, swc, synth};
use std::collections::HashMap;

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
fn real_cells_agree_on_either_route() {
    // the three real cells kept in tests/data/real, and the shared set (POLLARD_CELLS) when set
    let mut dirs = vec![std::path::PathBuf::from(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/real"
    ))];
    if let Ok(extra) = std::env::var("POLLARD_CELLS") {
        dirs.push(extra.into());
    }
    let entries: Vec<_> = dirs
        .iter()
        .flat_map(|d| std::fs::read_dir(d).unwrap())
        .collect();
    assert!(entries.len() >= 3);
    for e in entries.into_iter().flatten() {
        let path = e.path();
        if path.extension().is_none_or(|x| x != "swc") {
            continue;
        }
        let text = std::fs::read_to_string(&path).unwrap();
        let file = swc::parse_str(&text, "t.swc").unwrap();
        let direct = flat_from_plain_points(&file.points).is_some();
        // only the files that need no fix
        if Morphology::parse(&text, "t.swc")
            .ok()
            .and_then(|m| prepare(&m, &PrepOptions::default()).ok())
            .and_then(|fl| CellMaps::compute(&fl, &Params::default(), 0.0).ok())
            .is_some()
        {
            check_same(&text, direct);
        }
    }
}
