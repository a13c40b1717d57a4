//! Any bytes through the whole pipeline: read → cable maps → reduction at several budgets →
//! JSON and SWC export. Every step returns Ok or an error; an exported file never holds NaN.
#![no_main]
use libfuzzer_sys::fuzz_target;
use pollard::cable::prep::{PrepOptions, prepare};
use pollard::cable::{CellMaps, Params};
use pollard::export::{TreeSource, reduced_tree_json, reduced_tree_swc};
use pollard::reduce::{ReduceOptions, Reducer};

fuzz_target!(|data: &[u8]| {
    let Ok(m) = pollard::swc::parse_bytes(data, "fuzz.swc").and_then(pollard::Morphology::from_swc)
    else {
        return;
    };
    let opts = PrepOptions {
        default_diameter_um: Some(1.0),
        scale: Some(1.0),
    };
    let Ok(flat) = prepare(&m, &opts) else {
        return;
    };
    let params = Params::default();
    for freq in [0.0, 100.0] {
        if let Ok(maps) = CellMaps::compute(&flat, &params, freq) {
            let _ = maps.site_ratio_abs(flat.len() - 1);
        }
    }
    let Ok(reducer) = Reducer::new(&flat, &params, &ReduceOptions::default()) else {
        return;
    };
    let ids: Vec<i64> = m.points.iter().map(|p| p.id).collect();
    let pos: Vec<[f64; 3]> = m.points.iter().map(|p| p.pos).collect();
    let src = TreeSource {
        source: "fuzz.swc",
        point_ids: &ids,
        point_pos: &pos,
    };
    for budget in [1, 3, reducer.max_compartments()] {
        let tree = reducer.tree(budget);
        assert!(tree.compartments.iter().all(|c| {
            c.children.is_none() || c.children.is_some_and(|k| k[0] != k[1])
        }));
        if let Ok(report) = reducer.report(&tree) {
            let json = reduced_tree_json(&src, &reducer, &tree, &report).expect("JSON");
            assert!(!json.contains("NaN"));
        }
        let swc = reduced_tree_swc(&tree, &[]);
        assert!(!swc.contains("NaN"));
    }
});
