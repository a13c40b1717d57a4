//! `pollard reduce` as a user meets it: files written, the report printed, the JSON layout of
//! assets/reduced-tree.schema.json, budgets rounded, types and site lists, one-line errors.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn pollard(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_pollard"))
        .args(args)
        .output()
        .expect("the pollard binary runs")
}

fn manifest(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

#[test]
fn reduce_writes_json_and_swc_and_prints_the_report() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("tree.json");
    let swc = dir.path().join("tree.swc");
    let cell = manifest("sample_cells/practice_pyramidal.swc");
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "--compartments",
        "16",
        "--out",
        out.to_str().unwrap(),
        "--swc",
        swc.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let stdout = text(&o.stdout);
    assert!(stdout.contains("reduced to 15 compartments"), "{stdout}");
    assert!(stdout.contains("rounded down"), "{stdout}");
    assert!(stdout.contains("soma input resistance, DC"), "{stdout}");
    assert!(stdout.contains("95th percentile"), "{stdout}");
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&out).unwrap()).unwrap();
    assert_eq!(v["format"], "pollard.reduced-tree");
    assert_eq!(v["schema_version"], 5);
    let comps = v["compartments"].as_array().unwrap();
    assert_eq!(comps.len(), 15);
    // the schema's required fields are present in every compartment
    let schema: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(manifest("assets/reduced-tree.schema.json")).unwrap(),
    )
    .unwrap();
    let req = schema["properties"]["compartments"]["items"]["required"]
        .as_array()
        .unwrap();
    for c in comps {
        for k in req {
            assert!(c.get(k.as_str().unwrap()).is_some(), "missing {k} in {c}");
        }
        let kids = c["children"].as_array().unwrap().len();
        assert!(kids == 0 || kids == 2);
    }
    for k in schema["required"].as_array().unwrap() {
        assert!(
            v.get(k.as_str().unwrap()).is_some(),
            "missing top-level {k}"
        );
    }
    for k in schema["properties"]["report"]["required"]
        .as_array()
        .unwrap()
    {
        assert!(
            v["report"].get(k.as_str().unwrap()).is_some(),
            "missing report {k}"
        );
    }
    for k in schema["properties"]["fidelity"]["required"]
        .as_array()
        .unwrap()
    {
        assert!(
            v["fidelity"].get(k.as_str().unwrap()).is_some(),
            "missing fidelity {k}"
        );
    }
    // the fidelity summary: ordered statistics, every site peaked, named in the text report
    let f = &v["fidelity"];
    let e = &f["epsp_peak_error_np"];
    assert!(e["median"].as_f64().unwrap() <= e["p95"].as_f64().unwrap());
    assert!(e["p95"].as_f64().unwrap() <= e["max"].as_f64().unwrap());
    assert_eq!(f["sites_not_peaked"], 0);
    assert!(
        stdout.contains("soma EPSP for an alpha current"),
        "{stdout}"
    );
    assert!(stdout.contains("the soma's own EPSP"), "{stdout}");
    assert_eq!(
        v["feed_forward"]["current_ratio_to_parent"][0],
        serde_json::Value::Null
    );
    assert_eq!(v["compartments"][0]["parent"], serde_json::Value::Null);
    // the SWC has one point per compartment, the root first
    let swc_text = std::fs::read_to_string(&swc).unwrap();
    let lines: Vec<&str> = swc_text.lines().filter(|l| !l.starts_with('#')).collect();
    assert_eq!(lines.len(), 15);
    assert!(lines[0].ends_with(" -1"));
    let m = pollard::Morphology::parse(&swc_text, "tree.swc").unwrap();
    assert_eq!(m.len(), 15);
    // strict binary: 8 leaves (points that are nobody's parent), every other point 2 children
    let leaves = m.n_children.iter().filter(|&&c| c == 0).count();
    assert_eq!(leaves, 8);
    assert!(m.n_children.iter().all(|&c| c == 0 || c == 2));
    // split inputs (the default rule's last step): each between two adjacent compartments,
    // weight in (0, 0.5], the point map's splits the same as the site map's for the same points
    let split_of = |v: &serde_json::Value| -> Vec<(i64, u64, f64)> {
        v["site_map"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|x| x.get("split").is_some())
            .map(|x| {
                let sp = &x["split"];
                (
                    x["swc_id"].as_i64().unwrap(),
                    sp["compartment"].as_u64().unwrap(),
                    sp["weight"].as_f64().unwrap(),
                )
            })
            .collect()
    };
    let splits = split_of(&v);
    assert!(splits.len() > 100, "{} splits", splits.len());
    let parent = |c: u64| comps[c as usize]["parent"].as_u64();
    let ids = v["point_map"]["swc_id"].as_array().unwrap();
    let point_splits = v["point_map"]["splits"].as_array().unwrap();
    assert_eq!(point_splits.len(), splits.len()); // default sites: one per point
    for (x, p) in v["site_map"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|x| x.get("split").is_some())
        .zip(point_splits)
    {
        let (c, k) = (
            x["compartment"].as_u64().unwrap(),
            x["split"]["compartment"].as_u64().unwrap(),
        );
        assert!(parent(c) == Some(k) || parent(k) == Some(c), "{x}");
        let w = x["split"]["weight"].as_f64().unwrap();
        assert!(w > 0.0 && w <= 0.5, "{x}");
        assert_eq!(ids[p["point"].as_u64().unwrap() as usize], x["swc_id"]);
        assert_eq!(p["compartment"], x["split"]["compartment"]);
        assert_eq!(p["weight"], x["split"]["weight"]);
    }
    assert!(
        stdout.contains("on a link between two compartments (split inputs)"),
        "{stdout}"
    );
    // --one-compartment-per-site: no split anywhere, the same conductances (the capacitances
    // are polished once more when the sites are split, so they may differ)
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "15",
        "--one-compartment-per-site",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let whole: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&out).unwrap()).unwrap();
    assert!(split_of(&whole).is_empty() && whole["point_map"].get("splits").is_none());
    for (a, b) in comps.iter().zip(whole["compartments"].as_array().unwrap()) {
        assert_eq!(a["g_axial_ns"], b["g_axial_ns"]);
        assert_eq!(a["g_leak_ns"], b["g_leak_ns"]);
    }
}

#[test]
fn reduce_takes_types_and_a_site_list() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("tree.json");
    let cell = manifest("sample_cells/practice_pyramidal.swc");
    let m = pollard::Morphology::read(&cell).unwrap();
    // three sites: two SWC ids (one twice) on dendrites
    let dend: Vec<i64> = m
        .points
        .iter()
        .filter(|p| p.kind == 3)
        .map(|p| p.id)
        .take(2)
        .collect();
    let sites = dir.path().join("sites.csv");
    std::fs::write(
        &sites,
        format!("swc_id\n{}\n{}\n{}\n", dend[0], dend[1], dend[1]),
    )
    .unwrap();
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "7",
        "--types",
        "soma,basal,apical-dendrite",
        "--sites",
        sites.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--json",
    ]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let rep: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(rep["sites"], 3);
    assert_eq!(rep["compartments"], 7);
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&out).unwrap()).unwrap();
    let total: u64 = v["compartments"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["site_count"].as_u64().unwrap())
        .sum();
    assert_eq!(total, 3);
    assert_eq!(v["parameters"]["types_kept"], serde_json::json!([1, 3, 4]));
    // axon points (type 2) are mapped to no compartment
    let ids = v["point_map"]["swc_id"].as_array().unwrap();
    let comp = v["point_map"]["compartment"].as_array().unwrap();
    for (i, p) in m.points.iter().enumerate() {
        assert_eq!(ids[i], p.id);
        if p.kind == 2 {
            assert!(comp[i].is_null(), "axon point {} mapped", p.id);
        }
    }
}

#[test]
fn an_unknown_type_name_is_a_usage_error_naming_it() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("tree.json");
    let cell = manifest("sample_cells/y_junction.swc");
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "3",
        "--types",
        "soma,dendrites",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        text(&o.stderr).contains("`dendrites`"),
        "{}",
        text(&o.stderr)
    );
    assert!(!out.exists());
}

#[test]
fn reduce_errors_are_one_line_and_name_the_file() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("tree.json");
    let cell = manifest("sample_cells/y_junction.swc");
    let sites = dir.path().join("bad.csv");
    std::fs::write(&sites, "12345678\n").unwrap();
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "3",
        "--sites",
        sites.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1));
    let err = text(&o.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("bad.csv") && err.contains("line 1"), "{err}");
    assert!(!out.exists());
    // refusing to overwrite the input
    let o = pollard(&[
        "reduce",
        cell.to_str().unwrap(),
        "-n",
        "3",
        "--out",
        cell.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1));
    assert!(text(&o.stderr).contains("refusing to overwrite"));
}

#[test]
fn timed_capacitances_are_recorded_and_need_the_fidelity_run() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("tree.json");
    let cell = manifest("sample_cells/practice_stellate.swc");
    let (c, o) = (cell.to_str().unwrap(), out.to_str().unwrap());
    let r = pollard(&["reduce", c, "-n", "15", "--capacitance", "timed", "-o", o]);
    assert!(r.status.success(), "{}", text(&r.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&std::fs::read(&out).unwrap()).unwrap();
    assert_eq!(doc["parameters"]["capacitance"], "timed");
    let tau = doc["report"]["slowest_time_constant_ms"].as_f64().unwrap();
    // within ~10 % of Rm·Cm = 20 ms (18.2–22.2 ms measured on the real cells)
    assert!((tau / 20.0 - 1.0).abs() < 0.12, "{tau}");
    let r = pollard(&[
        "reduce",
        c,
        "-n",
        "15",
        "--capacitance",
        "timed",
        "--no-fidelity",
        "-o",
        o,
    ]);
    assert!(!r.status.success());
    let err = text(&r.stderr);
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    assert!(err.contains("--no-fidelity"), "{err}");
}

#[test]
fn the_default_capacitances_are_timed_and_fall_back_to_fitted_without_the_fidelity_run() {
    let dir = tempfile::tempdir().unwrap();
    let cell = manifest("sample_cells/practice_stellate.swc");
    let c = cell.to_str().unwrap();
    let tree = |extra: &[&str]| -> (serde_json::Value, String, serde_json::Value) {
        let out = dir.path().join("tree.json");
        let mut args = vec!["reduce", c, "-n", "15", "-o", out.to_str().unwrap()];
        args.extend(extra);
        let r = pollard(&args);
        assert!(r.status.success(), "{}", text(&r.stderr));
        let doc = serde_json::from_slice(&std::fs::read(&out).unwrap()).unwrap();
        let mut args_json = args.clone();
        args_json.push("--json");
        let j = pollard(&args_json);
        assert!(j.status.success(), "{}", text(&j.stderr));
        (
            doc,
            text(&r.stdout),
            serde_json::from_slice(&j.stdout).unwrap(),
        )
    };
    let caps = |d: &serde_json::Value| -> Vec<f64> {
        let cs = d["compartments"].as_array().unwrap();
        cs.iter()
            .map(|c| c["capacitance_pf"].as_f64().unwrap())
            .collect()
    };
    let tau = |d: &serde_json::Value| d["report"]["slowest_time_constant_ms"].as_f64().unwrap();
    let (timed, _, report) = tree(&[]);
    let (explicit, _, _) = tree(&["--capacitance", "timed"]);
    let (fitted, _, _) = tree(&["--capacitance", "fitted"]);
    assert_eq!(timed["parameters"]["capacitance"], "timed");
    assert_eq!(report["capacitance"], "timed");
    assert!(report.get("capacitance_note").is_none());
    // what the timed rule did is reported: polish steps, and how many sites a neighbour serves,
    // which must be the number of sites whose compartment differs from the fitted tree's
    let sites = |d: &serde_json::Value| -> Vec<u64> {
        let ss = d["site_map"].as_array().unwrap();
        ss.iter()
            .map(|s| s["compartment"].as_u64().unwrap())
            .collect()
    };
    let moved = report["timed"]["sites_moved"].as_u64().unwrap() as usize;
    let (st, sf) = (sites(&timed), sites(&fitted));
    assert!(report["timed"]["steps"].as_u64().unwrap() >= 1);
    assert_eq!(moved, st.iter().zip(&sf).filter(|(a, b)| a != b).count());
    assert!(moved > 0 && moved < st.len(), "{moved} of {}", st.len());
    assert_eq!(caps(&timed), caps(&explicit));
    assert_ne!(caps(&timed), caps(&fitted));
    // Rm·Cm = 20 ms is the full cell's slowest time constant (Rall 1969): the fit holds the
    // tree's within 2 % of it (README; 5 % on every cell tested), the polish within ~10 %
    // (measured 18.2–22.2 ms on the real cells)
    assert!((tau(&fitted) / 20.0 - 1.0).abs() < 0.05, "{}", tau(&fitted));
    assert!((tau(&timed) / 20.0 - 1.0).abs() < 0.12, "{}", tau(&timed));
    // without the fidelity run the default cannot polish: fitted, and every output says so
    let (fallback, text_report, json) = tree(&["--no-fidelity"]);
    assert_eq!(fallback["parameters"]["capacitance"], "fitted");
    assert_eq!(caps(&fallback), caps(&fitted));
    assert!(
        text_report.contains("capacitances fitted, not timed"),
        "{text_report}"
    );
    assert_eq!(json["capacitance"], "fitted");
    assert!(json.get("timed").is_none());
    assert!(
        json["capacitance_note"]
            .as_str()
            .unwrap()
            .contains("--no-fidelity")
    );
}
