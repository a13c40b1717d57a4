//! Any bytes through the whole pipeline: read → cable maps → reduction at several budgets →
//! JSON and SWC export. Every step returns Ok or an error. The numbers are checked before they
//! are written: maps that are accepted are finite everywhere, and the exported JSON holds no
//! `null` (serde_json's spelling of NaN and ±∞) except where a point has no compartment.
#![no_main]
use libfuzzer_sys::fuzz_target;
use pollard::cable::prep::{PrepOptions, prepare};
use pollard::cable::{CellMaps, Params};
use pollard::export::{CableDoc, TreeSource, reduced_tree_json, reduced_tree_swc};
use pollard::reduce::{ReduceOptions, Reducer};

/// Panics at the first `null` below `v`, except at `….points.compartment` (the caller puts a
/// single null there in place of the array whose nulls are documented). JSON nesting is a few
/// levels deep, so the recursion is bounded.
fn assert_no_null(v: &serde_json::Value, path: &mut String) {
    match v {
        serde_json::Value::Null => {
            assert!(path.ends_with(".points.compartment"), "null at {path}")
        }
        serde_json::Value::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                let len = path.len();
                path.push_str(&format!("[{i}]"));
                assert_no_null(x, path);
                path.truncate(len);
            }
        }
        serde_json::Value::Object(o) => {
            for (k, x) in o {
                let len = path.len();
                path.push('.');
                path.push_str(k);
                assert_no_null(x, path);
                path.truncate(len);
            }
        }
        _ => {}
    }
}

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
    let ids: Vec<i64> = m.points.iter().map(|p| p.id).collect();
    for freq in [0.0, 100.0] {
        if let Ok(maps) = CellMaps::compute(&flat, &params, freq) {
            let site = maps.site_ratio_abs(flat.len() - 1);
            let summary = maps.summary(&flat);
            let doc = CableDoc::new("fuzz.swc", &ids, &maps, &summary, None, &m.warnings);
            if doc.is_ok() {
                // accepted maps: every value finite, checked here on the maps themselves
                for k in 0..maps.len() {
                    assert!(maps.input_resistance_mohm(k).is_finite());
                    assert!(maps.attenuation_to_soma(k).is_finite());
                    assert!(maps.attenuation_from_soma(k).is_finite());
                }
                assert!(site.is_none_or(|v| v.iter().all(|x| x.is_finite())));
            }
        }
    }
    let Ok(reducer) = Reducer::new(&flat, &params, &ReduceOptions::default()) else {
        return;
    };
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
            let mut v: serde_json::Value = serde_json::from_str(&json).expect("valid JSON");
            // a point outside the kept tree has no compartment: the one documented null
            v["point_map"]["compartment"] = serde_json::Value::Null;
            assert_no_null(&v, &mut String::new());
        }
        let swc = reduced_tree_swc(&tree, &[]);
        assert!(!swc.contains("NaN"));
    }
});
