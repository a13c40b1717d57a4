//! Synapse tables end to end: the matrix adds up to the table, every synapse sits in the
//! compartment holding its snapped point, units through --scale, repeated points, weights,
//! far synapses and the type filter.

use pollard::Morphology;
use pollard::cable::{Params, PrepOptions, prepare};
use pollard::morphology::Flat;
use pollard::reduce::{ReduceOptions, Reducer, SiteSpec, Sites};
use pollard::samples::{DEMO_SYNAPSES, demo};
use pollard::synapses::{SnapOptions, Snapped, SynapseMap, parse_table, snap};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn manifest(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

fn pollard(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_pollard"))
        .args(args)
        .output()
        .expect("the pollard binary runs")
}

fn demo_snapped(opts: &SnapOptions) -> (Morphology, Flat, Snapped) {
    let m = demo();
    let flat = prepare(&m, &PrepOptions::default()).unwrap();
    let t = parse_table(DEMO_SYNAPSES.1.as_bytes(), DEMO_SYNAPSES.0).unwrap();
    let s = snap(&t, &m, &flat, opts).unwrap();
    (m, flat, s)
}

fn reducer(flat: &Flat, sites: Sites, types: Option<Vec<i32>>) -> Reducer {
    let opts = ReduceOptions {
        sites,
        types,
        ..ReduceOptions::default()
    };
    Reducer::new(flat, &Params::default(), &opts).unwrap()
}

/// The demo table's rows and summed weight, read with a plain split (not the CSV reader).
fn demo_rows_and_weight() -> (usize, f64) {
    let rows: Vec<&str> = DEMO_SYNAPSES
        .1
        .lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
        .skip(1)
        .collect();
    let w = rows
        .iter()
        .map(|l| l.rsplit(',').next().unwrap().parse::<f64>().unwrap())
        .sum();
    (rows.len(), w)
}

#[test]
fn matrix_counts_and_weights_add_up_to_the_table() {
    let (_, flat, s) = demo_snapped(&SnapOptions::default());
    let (rows, weight) = demo_rows_and_weight();
    assert_eq!(rows, 765);
    assert_eq!(s.synapses.len(), rows);
    let r = reducer(&flat, s.sites(), None);
    for b in [1, 7, 31, r.max_compartments()] {
        let tree = r.tree(b);
        let map = SynapseMap::new(&s, &tree).unwrap();
        let n: u32 = map.matrix.iter().map(|e| e.count).sum();
        let w: f64 = map.matrix.iter().map(|e| e.weight).sum();
        assert_eq!(n as usize, rows, "budget {b}");
        assert!(
            (w - weight).abs() <= 1e-9 * weight,
            "budget {b}: {w} vs {weight}"
        );
        let per: u32 = map.per_input.iter().map(|p| p.synapses).sum();
        assert_eq!(per as usize, rows);
        assert!(
            map.matrix
                .iter()
                .all(|e| (e.compartment as usize) < tree.len())
        );
        // one compartment: every input reaches exactly one; sharing = inputs with several
        if tree.len() == 1 {
            assert_eq!(map.matrix.len(), s.inputs.len());
            let several: u32 = map
                .per_input
                .iter()
                .filter(|p| p.synapses > 1)
                .map(|p| p.synapses)
                .sum();
            assert_eq!(map.summary.sharing, several as usize);
        }
    }
}

#[test]
fn split_synapses_give_their_second_part_to_the_second_compartment() {
    // timed trees split some sites' input between two adjacent compartments: the matrix must
    // still add up to the table (counts and weights), and each (input, compartment) entry must
    // hold what the site map says lands there, (1 − w) on a site's compartment and w on its
    // split's (the site map is the reducer's route; the matrix is built from the point map)
    let (_, flat, s) = demo_snapped(&SnapOptions::default());
    let (rows, weight) = demo_rows_and_weight();
    let r = reducer(&flat, s.sites(), None);
    let fid = pollard::fidelity::Fidelity::new(&r, &Default::default()).unwrap();
    for b in [7, 31] {
        let mut tree = r.tree(b);
        fid.apply_capacitance_rule(&mut tree).unwrap();
        let splits = tree.site_split.iter().flatten().count();
        assert!(splits > 0, "budget {b}: no split");
        let map = SynapseMap::new(&s, &tree).unwrap();
        let n: u32 = map.matrix.iter().map(|e| e.count).sum();
        let w: f64 = map.matrix.iter().map(|e| e.weight).sum();
        assert_eq!(n as usize, rows, "budget {b}");
        assert!(
            (w - weight).abs() <= 1e-9 * weight,
            "budget {b}: {w} vs {weight}"
        );
        let mut want = std::collections::BTreeMap::<(u32, u32), f64>::new();
        for (i, syn) in s.synapses.iter().enumerate() {
            let c = tree.site_compartment[i];
            let part = tree.site_split[i].map_or(0.0, |x| x.weight);
            *want.entry((syn.input, c)).or_default() += syn.weight * (1.0 - part);
            if let Some(x) = tree.site_split[i] {
                *want.entry((syn.input, x.compartment)).or_default() += syn.weight * part;
            }
        }
        assert_eq!(map.matrix.len(), want.len(), "budget {b}");
        for (e, ((inp, c), wt)) in map.matrix.iter().zip(&want) {
            assert_eq!((e.input, e.compartment), (*inp, *c));
            assert!(
                (e.weight - wt).abs() <= 1e-12 * wt.max(1.0),
                "{e:?} vs {wt}"
            );
        }
    }
}

#[test]
fn each_synapse_is_in_the_compartment_holding_its_snapped_point() {
    let (_, flat, s) = demo_snapped(&SnapOptions::default());
    let r = reducer(&flat, s.sites(), None);
    assert_eq!(r.sites().len(), s.synapses.len());
    for b in [3, 15, 63, r.max_compartments()] {
        let tree = r.tree(b);
        let map = SynapseMap::new(&s, &tree).unwrap();
        // the reducer's own route: site i → its compartment
        assert_eq!(map.compartment, tree.site_compartment, "budget {b}");
    }
}

#[test]
fn snapping_finds_the_nearest_point_like_a_linear_scan() {
    // reference: a linear scan over every node (common practice, no source), the soma by its
    // surface (a sphere of its area), other points by their centre
    let (_, flat, s) = demo_snapped(&SnapOptions::default());
    let t = parse_table(DEMO_SYNAPSES.1.as_bytes(), "t").unwrap();
    let r0 = (flat.soma_area_um2 / (4.0 * std::f64::consts::PI)).sqrt();
    let d = |a: [f64; 3], b: [f64; 3]| {
        ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt()
    };
    let mut on_soma = 0;
    for (row, syn) in t.rows.iter().zip(&s.synapses) {
        let pollard::synapses::Location::Pos(p) = row.location else {
            panic!("positions")
        };
        let (mut best, mut bd) = (1usize, f64::INFINITY);
        for k in 1..flat.len() {
            let x = d(p, flat.pos[k]);
            if x < bd {
                (best, bd) = (k, x);
            }
        }
        // ties (inside both spheres) go to the soma
        let (want, dist) =
            if (d(p, flat.pos[0]) - r0).max(0.0) <= (bd - flat.r_dist_um[best]).max(0.0) {
                (0, (d(p, flat.pos[0]) - r0).max(0.0))
            } else {
                (best, (bd - flat.r_dist_um[best]).max(0.0))
            };
        on_soma += usize::from(want == 0);
        assert_eq!(syn.node as usize, want, "line {}", row.line);
        assert!((syn.distance_um - dist).abs() < 1e-12);
        assert!(syn.distance_um <= 3.0);
    }
    assert!(on_soma > 0, "the demo table has perisomatic synapses");
}

#[test]
fn a_point_listed_twice_counts_twice_and_weights_add() {
    let m = demo();
    let flat = prepare(&m, &PrepOptions::default()).unwrap();
    let t = parse_table(
        b"input,swc_id,weight\na,40,1\na,40,2.5\nb,40,\nb,900,1\n",
        "t.csv",
    )
    .unwrap();
    let s = snap(&t, &m, &flat, &SnapOptions::default()).unwrap();
    let r = reducer(&flat, s.sites(), None);
    let tree = r.tree(r.max_compartments());
    let map = SynapseMap::new(&s, &tree).unwrap();
    let c40 = map.compartment[0];
    let a = map
        .matrix
        .iter()
        .find(|e| e.input == 0 && e.compartment == c40)
        .unwrap();
    assert_eq!((a.count, a.weight), (2, 3.5));
    assert_eq!(map.per_input[0].sharing, 2);
    assert_eq!(map.per_input[1].synapses, 2);
    assert_eq!(map.summary.synapses, 4);
}

#[test]
fn a_site_of_weight_two_reduces_like_the_site_listed_twice() {
    // the collapse cost is Σ w·e² (module doc of reduce), so weight 2 = two sites of weight 1
    let m = demo();
    let flat = prepare(&m, &PrepOptions::default()).unwrap();
    let nodes = [40u32, 300, 301, 900, 1200];
    let weighted = Sites::List(
        nodes
            .iter()
            .enumerate()
            .map(|(i, &node)| SiteSpec::Weighted {
                node,
                weight: if i % 2 == 0 { 2.0 } else { 1.0 },
                line: i + 2,
            })
            .collect(),
    );
    let repeated = Sites::List(
        nodes
            .iter()
            .enumerate()
            .flat_map(|(i, &node)| {
                let k = if i % 2 == 0 { 2 } else { 1 };
                std::iter::repeat_n(SiteSpec::Node { node, line: i + 2 }, k)
            })
            .collect(),
    );
    let a = reducer(&flat, weighted, None).error_curve();
    let b = reducer(&flat, repeated, None).error_curve();
    assert_eq!(a.len(), b.len());
    for ((ca, ea), (cb, eb)) in a.iter().zip(&b) {
        assert_eq!(ca, cb);
        assert!(
            (ea - eb).abs() <= 1e-12 * (1.0 + eb.abs()),
            "{ca}: {ea} vs {eb}"
        );
    }
    // and differs from all weights 1 (the test can fail)
    let ones = Sites::List(
        nodes
            .iter()
            .map(|&node| SiteSpec::Node { node, line: 1 })
            .collect(),
    );
    let c = reducer(&flat, ones, None).error_curve();
    assert!(a.iter().zip(&c).any(|(x, y)| (x.1 - y.1).abs() > 1e-9));
}

fn scaled_lines(text: &str, cols: std::ops::Range<usize>, sep: char) -> String {
    let mut out = String::new();
    for l in text.lines() {
        if l.starts_with('#') || l.trim().is_empty() || l.starts_with("synapse") {
            out.push_str(l);
        } else {
            let f: Vec<String> = l
                .split(sep)
                .enumerate()
                .map(|(i, x)| {
                    if cols.contains(&i) {
                        format!("{}", x.parse::<f64>().unwrap() * 1000.0)
                    } else {
                        x.to_string()
                    }
                })
                .collect();
            out.push_str(&f.join(&sep.to_string()));
        }
        out.push('\n');
    }
    out
}

fn synapse_json(dir: &Path, cell: &Path, table: &Path, extra: &[&str]) -> serde_json::Value {
    let out = dir.join(format!("{}.json", extra.len()));
    let mut args = vec![
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "21",
        "--synapses",
        table.to_str().unwrap(),
        "-o",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    let o = pollard(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_str(&std::fs::read_to_string(out).unwrap()).unwrap()
}

#[test]
fn the_same_table_in_nanometres_with_scale_gives_the_same_matrix() {
    let dir = tempfile::tempdir().unwrap();
    let cell = manifest("sample_cells/practice_pyramidal.swc");
    let table = manifest("sample_cells/practice_pyramidal.synapses.csv");
    let cell_nm = dir.path().join("cell_nm.swc");
    let table_nm = dir.path().join("table_nm.csv");
    let swc = std::fs::read_to_string(&cell).unwrap();
    std::fs::write(&cell_nm, scaled_lines(&swc, 2..6, ' ')).unwrap();
    std::fs::write(&table_nm, scaled_lines(DEMO_SYNAPSES.1, 2..5, ',')).unwrap();
    let um = synapse_json(dir.path(), &cell, &table, &[]);
    let nm = synapse_json(dir.path(), &cell_nm, &table_nm, &["--scale", "0.001"]);
    let (a, b) = (&um["synapses"], &nm["synapses"]);
    assert_eq!(a["matrix"], b["matrix"]);
    assert_eq!(a["synapses"]["compartment"], b["synapses"]["compartment"]);
    assert_eq!(a["summary"]["synapses"], 765);
    assert_eq!(um["parameters"]["sites"], "synapses");
    // the site map's positions are in µm either way
    let (sa, sb) = (
        um["site_map"].as_array().unwrap(),
        nm["site_map"].as_array().unwrap(),
    );
    assert_eq!(sa.len(), 765);
    assert_eq!(sa.len(), sb.len());
    for (x, y) in sa.iter().zip(sb) {
        for c in 0..3 {
            let (p, q) = (&x["position_um"][c], &y["position_um"][c]);
            assert!(
                (p.as_f64().unwrap() - q.as_f64().unwrap()).abs() < 1e-9,
                "{x} {y}"
            );
        }
    }
    let da = a["synapses"]["snap_distance_um"].as_array().unwrap();
    let db = b["synapses"]["snap_distance_um"].as_array().unwrap();
    for (x, y) in da.iter().zip(db) {
        assert!((x.as_f64().unwrap() - y.as_f64().unwrap()).abs() < 1e-9);
    }
    // without --scale the nanometre table is far from the µm cell
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "21",
        "--synapses",
        table_nm.to_str().unwrap(),
        "-o",
        dir.path().join("x.json").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("table_nm.csv:7: the synapse lies"));
}

#[test]
fn far_synapses_are_listed_and_left_out_on_request() {
    let dir = tempfile::tempdir().unwrap();
    let cell = manifest("sample_cells/practice_pyramidal.swc");
    let table = dir.path().join("t.csv");
    std::fs::write(&table, "input,x,y,z\na,0,8.632,0\nb,500,500,500\na,0,9,0\n").unwrap();
    let v = synapse_json(
        dir.path(),
        &cell,
        &table,
        &["--skip-far", "--snap-limit", "2"],
    );
    let s = &v["synapses"];
    assert_eq!(s["left_out"]["line"], serde_json::json!([3]));
    assert_eq!(s["synapses"]["line"], serde_json::json!([2, 4]));
    assert_eq!(s["summary"]["synapses"], 2);
    assert_eq!(s["summary"]["left_out"], 1);
    assert_eq!(s["snap_limit_um"], 2.0);
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "5",
        "--synapses",
        table.to_str().unwrap(),
        "-o",
        dir.path().join("y.json").to_str().unwrap(),
        "--skip-far",
    ]);
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(
        text.contains(&format!("{}:3: input b", table.display())),
        "{text}"
    );
}

#[test]
fn the_type_filter_applies_to_synapses() {
    let m = demo();
    let flat = prepare(&m, &PrepOptions::default()).unwrap();
    // an axon point (type 2) of the demo cell
    let far_from_soma = |p: &pollard::swc::SwcPoint| {
        let s = m.points[0].pos;
        (0..3).map(|k| (p.pos[k] - s[k]).powi(2)).sum::<f64>() > 30.0f64.powi(2)
    };
    let axon = m
        .points
        .iter()
        .find(|p| p.kind == 2 && far_from_soma(p))
        .unwrap();
    let row = format!("input,swc_id\na,{}\n", axon.id);
    let t = parse_table(row.as_bytes(), "t.csv").unwrap();
    let keep = SnapOptions {
        types: Some(vec![1, 3, 4]),
        ..SnapOptions::default()
    };
    let e = snap(&t, &m, &flat, &keep).unwrap_err();
    assert_eq!(
        e.to_string(),
        format!("t.csv:2: SWC id {} is left out by the type filter", axon.id)
    );
    // by position, the axon point snaps to a kept point instead (or is refused as far)
    let p = axon.pos;
    let row = format!("input,x,y,z\na,{},{},{}\n", p[0], p[1], p[2]);
    let t = parse_table(row.as_bytes(), "t.csv").unwrap();
    let all = snap(&t, &m, &flat, &SnapOptions::default()).unwrap();
    assert_eq!(flat.kind[all.synapses[0].node as usize], 2);
    if let Ok(s) = snap(&t, &m, &flat, &keep) {
        assert_ne!(flat.kind[s.synapses[0].node as usize], 2);
    }
}

#[test]
fn batch_picks_up_the_table_beside_each_cell() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("cells");
    let out = dir.path().join("out");
    std::fs::create_dir_all(input.join("sub")).unwrap();
    let cell = std::fs::read(manifest("sample_cells/practice_pyramidal.swc")).unwrap();
    // with the demo table; with a bad table; with none
    std::fs::write(input.join("a.swc"), &cell).unwrap();
    std::fs::write(input.join("a.synapses.csv"), DEMO_SYNAPSES.1).unwrap();
    std::fs::write(input.join("sub/b.swc"), &cell).unwrap();
    std::fs::write(
        input.join("sub/b.synapses.csv"),
        "input,swc_id\nx,2\ny,oops\n",
    )
    .unwrap();
    std::fs::write(input.join("c.swc"), &cell).unwrap();
    let o = pollard(&[
        "batch",
        input.to_str().unwrap(),
        "--out-dir",
        out.to_str().unwrap(),
        "--compartments",
        "21",
        "--synapse-tables",
    ]);
    assert_eq!(
        o.status.code(),
        Some(3),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let summary = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    let head: Vec<&str> = summary.lines().next().unwrap().split(',').collect();
    let col = |name: &str| head.iter().position(|h| *h == name).unwrap();
    let rows: Vec<Vec<&str>> = summary
        .lines()
        .skip(1)
        .map(|l| l.split(',').collect())
        .collect();
    let row = |f: &str| rows.iter().find(|r| r[0] == f).unwrap().clone();
    assert_eq!(row("a.swc")[col("synapses")], "765");
    assert_eq!(row("a.swc")[col("inputs")], "160");
    assert_eq!(row("c.swc")[col("synapses")], "");
    assert_eq!(row("sub/b.swc")[col("status")], "failed");
    assert!(summary.contains("sub/b.synapses.csv:3: the SWC id `oops` is not an integer"));
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("a.json")).unwrap()).unwrap();
    assert_eq!(v["synapses"]["summary"]["synapses"], 765);
    assert!(v["batch"].is_object());
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("c.json")).unwrap()).unwrap();
    assert!(v.get("synapses").is_none());
}

#[test]
fn the_csv_files_hold_the_same_map_as_the_json() {
    let dir = tempfile::tempdir().unwrap();
    let cell = manifest("sample_cells/practice_pyramidal.swc");
    let table = dir.path().join("t.csv");
    // an input name with a comma and a quote, and one far synapse left out
    std::fs::write(
        &table,
        "input,x,y,z,weight\n\"a, \"\"b\"\"\",0,8.632,0,2\nc,0,9,0,1\nc,900,900,900,1\n",
    )
    .unwrap();
    let prefix = dir.path().join("map");
    let v = synapse_json(
        dir.path(),
        &cell,
        &table,
        &["--skip-far", "--synapse-csv", prefix.to_str().unwrap()],
    );
    let read = |n: &str| std::fs::read_to_string(dir.path().join(format!("map.{n}.csv"))).unwrap();
    let inputs = read("inputs");
    assert_eq!(
        inputs.lines().next().unwrap(),
        "row,input,synapses,weight,compartments,sharing,most_on_one"
    );
    assert!(inputs.contains("0,\"a, \"\"b\"\"\",1,2,1,0,1"), "{inputs}");
    let matrix = read("matrix");
    let rows: Vec<Vec<&str>> = matrix
        .lines()
        .skip(1)
        .map(|l| l.split(',').collect())
        .collect();
    let m = &v["synapses"]["matrix"];
    assert_eq!(rows.len(), m["row"].as_array().unwrap().len());
    for (i, r) in rows.iter().enumerate() {
        assert_eq!(r[0], m["row"][i].to_string());
        assert_eq!(r[1], m["column"][i].to_string());
        assert_eq!(r[2], m["count"][i].to_string());
    }
    let syn = read("synapses");
    let lines: Vec<&str> = syn.lines().collect();
    assert_eq!(
        lines[0],
        "line,row,compartment,split_compartment,split_weight,snap_distance_um,swc_id,left_out"
    );
    // the split columns are the JSON's (−1 / 0 there when a synapse is not split)
    let js = &v["synapses"]["synapses"];
    for (k, l) in lines[1..3].iter().enumerate() {
        let f: Vec<&str> = l.split(',').collect();
        let sc = js["split_compartment"][k].as_i64().unwrap();
        assert_eq!(
            f[3],
            if sc < 0 {
                String::new()
            } else {
                sc.to_string()
            }
        );
        assert_eq!(
            f[4].parse::<f64>().unwrap(),
            js["split_weight"][k].as_f64().unwrap()
        );
    }
    assert_eq!(lines.len(), 4);
    assert!(
        lines[3].starts_with("4,1,,") && lines[3].ends_with(",,1"),
        "{}",
        lines[3]
    );
    assert!(
        lines[1].starts_with("2,0,") && lines[1].ends_with(",1,0"),
        "{}",
        lines[1]
    );
}
