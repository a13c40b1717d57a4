//! `pollard fidelity` and `pollard trace` as a user meets them: on every real cell of
//! tests/data/real, files written (CSV and JSON), summaries printed, one-line errors.

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

/// The real cells with the flags a user needs for them (README: nm coordinates and missing
/// radii), and one SWC id of a dendritic point of each.
fn real_cells() -> Vec<(PathBuf, Vec<&'static str>, &'static str)> {
    vec![
        (
            manifest("tests/data/real/cultured_neuron_control.swc"),
            vec![],
            "100",
        ),
        (
            manifest("tests/data/real/drosophila_pn_fafb.swc"),
            vec!["--scale", "0.001", "--default-diameter", "0.5"],
            "1000",
        ),
        (
            manifest("tests/data/real/interneuron_ca1_pv.swc"),
            vec![],
            "500",
        ),
    ]
}

#[test]
fn fidelity_writes_the_per_site_table_on_every_real_cell() {
    let dir = tempfile::tempdir().unwrap();
    for (cell, flags, _) in real_cells() {
        let csv = dir.path().join("sites.csv");
        let json = dir.path().join("sites.json");
        let mut args = vec!["fidelity", cell.to_str().unwrap(), "-n", "15"];
        args.extend(&flags);
        args.extend([
            "--csv",
            csv.to_str().unwrap(),
            "--out",
            json.to_str().unwrap(),
        ]);
        let o = pollard(&args);
        assert!(o.status.success(), "{}", text(&o.stderr));
        let out = text(&o.stdout);
        assert!(out.contains("soma EPSP for an alpha current"), "{out}");
        let v: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
        assert_eq!(v["format"], "pollard.fidelity-sites");
        let sites = v["sites"].as_array().unwrap();
        assert_eq!(sites.len() as u64, v["summary"]["sites"].as_u64().unwrap());
        let table = std::fs::read_to_string(&csv).unwrap();
        let lines: Vec<&str> = table.lines().collect();
        assert_eq!(lines.len(), sites.len() + 1);
        let cols = lines[0].split(',').count();
        for l in &lines[1..] {
            assert_eq!(l.split(',').count(), cols, "{l}");
            assert!(!l.contains("NaN") && !l.contains("inf"), "{l}");
        }
        // the CSV's peak error is the JSON's and the log of the two peaks' ratio
        assert!(lines[0].starts_with(
            "site,swc_id,swc_line,compartment,split_with,split_weight,epsp_peak_full_mv,"
        ));
        let f: Vec<f64> = lines[1]
            .split(',')
            .skip(6)
            .take(3)
            .map(|x| x.parse().unwrap())
            .collect();
        assert!((f[2] - (f[1] / f[0]).ln().abs()).abs() < 1e-12, "{f:?}");
        // (serde_json's default float reader may miss the last bit)
        let j = sites[0]["epsp_peak_error_np"].as_f64().unwrap();
        assert!(
            (j - f[2]).abs() <= 1e-15 * f[2].abs().max(1e-300),
            "{j} {}",
            f[2]
        );
    }
}

#[test]
fn trace_writes_soma_and_site_voltages_on_every_real_cell() {
    let dir = tempfile::tempdir().unwrap();
    for (cell, flags, id) in real_cells() {
        for synapse in [false, true] {
            let csv = dir.path().join("tr.csv");
            let json = dir.path().join("tr.json");
            let mut args = vec![
                "trace",
                cell.to_str().unwrap(),
                "-n",
                "31",
                "--injection-point",
                id,
            ];
            args.extend(&flags);
            args.extend(["--duration", "20", "--csv", csv.to_str().unwrap()]);
            args.extend(["--out", json.to_str().unwrap()]);
            if synapse {
                args.push("--synapse");
            }
            let o = pollard(&args);
            assert!(o.status.success(), "{}", text(&o.stderr));
            assert!(
                text(&o.stdout).contains("peak error"),
                "{}",
                text(&o.stdout)
            );
            let t = std::fs::read_to_string(&csv).unwrap();
            let lines: Vec<&str> = t.lines().collect();
            assert_eq!(
                lines[0],
                "time_ms,soma_full_mv,injection_point_full_mv,soma_reduced_mv,injection_point_reduced_mv"
            );
            assert_eq!(lines.len(), 1 + 801); // 0 to 20 ms by 0.025
            let v: serde_json::Value =
                serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
            assert_eq!(v["swc_id"].as_i64().unwrap().to_string(), id);
            assert_eq!(v["format"], "pollard.traces");
            assert_eq!(v["schema_version"], 2);
            assert!(v.get("site_full_mv").is_none() && v["injection_point_full_mv"].is_array());
            // a depolarising input: the injection point rises above the soma in both networks
            // (passive attenuation from the injection point; it is not the soma)
            let peak = |k: &str| {
                v[k].as_array()
                    .unwrap()
                    .iter()
                    .fold(0.0f64, |m, x| m.max(x.as_f64().unwrap()))
            };
            assert!(
                peak("injection_point_full_mv") > peak("soma_full_mv"),
                "{}",
                cell.display()
            );
            assert!(peak("soma_full_mv") > 0.0);
        }
    }
}

#[test]
fn trace_and_fidelity_errors_are_one_line() {
    let cell = manifest("tests/data/real/interneuron_ca1_pv.swc");
    let c = cell.to_str().unwrap();
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("x.csv");
    let o = out.to_str().unwrap();
    for (args, needle) in [
        (
            vec![
                "trace",
                c,
                "-n",
                "7",
                "--injection-point",
                "99999999",
                "--csv",
                o,
            ],
            "no point with SWC id",
        ),
        (
            vec!["trace", c, "-n", "7", "--at", "1,2", "--csv", o],
            "three finite numbers",
        ),
        (
            vec!["trace", c, "-n", "7", "--injection-point", "500"],
            "--csv FILE",
        ),
        (
            vec![
                "trace",
                c,
                "-n",
                "7",
                "--injection-point",
                "500",
                "--dt",
                "0",
                "--csv",
                o,
            ],
            "time step",
        ),
        (vec!["fidelity", c, "-n", "7"], "--csv FILE"),
        (
            vec!["fidelity", c, "-n", "7", "--epsp-tau", "-1", "--csv", o],
            "EPSP time constant",
        ),
    ] {
        let r = pollard(&args);
        assert_eq!(r.status.code(), Some(1), "{args:?}");
        let e = text(&r.stderr);
        assert_eq!(e.trim_end().lines().count(), 1, "{e}");
        assert!(e.contains(needle), "{args:?}: {e}");
    }
}

#[test]
fn trace_and_fidelity_polish_the_default_tree_as_reduce_does() {
    let dir = tempfile::tempdir().unwrap();
    let cell = manifest("sample_cells/practice_stellate.swc");
    let c = cell.to_str().unwrap();
    let json = |args: &[&str], out: &Path| -> serde_json::Value {
        let o = pollard(args);
        assert!(o.status.success(), "{args:?}: {}", text(&o.stderr));
        serde_json::from_str(&std::fs::read_to_string(out).unwrap()).unwrap()
    };
    let tr = dir.path().join("tr.json");
    let t = tr.to_str().unwrap();
    let base = [
        "trace",
        c,
        "-n",
        "15",
        "--injection-point",
        "103",
        "--out",
        t,
    ];
    let timed = json(&base, &tr);
    let fitted = json(&[&base[..], &["--capacitance", "fitted"]].concat(), &tr);
    assert_eq!(timed["capacitance"], "timed");
    assert_eq!(fitted["capacitance"], "fitted");
    // the same cell, another reduced tree: only the reduced side moves
    assert_eq!(timed["soma_full_mv"], fitted["soma_full_mv"]);
    assert_ne!(timed["soma_reduced_mv"], fitted["soma_reduced_mv"]);
    // reference: `pollard reduce`'s own fidelity summary of its default (timed) tree
    let fi = dir.path().join("sites.json");
    let f = fi.to_str().unwrap();
    let sites = json(&["fidelity", c, "-n", "15", "--out", f], &fi);
    assert_eq!(sites["capacitance"], "timed");
    let tree = dir.path().join("tree.json");
    let reduced = json(
        &["reduce", c, "-n", "15", "--out", tree.to_str().unwrap()],
        &tree,
    );
    assert_eq!(sites["summary"], reduced["fidelity"]);
}

#[test]
fn budgets_judges_every_budget_as_reduce_does_on_every_real_cell() {
    let dir = tempfile::tempdir().unwrap();
    for (cell, flags, _) in real_cells() {
        let c = cell.to_str().unwrap();
        let csv = dir.path().join("budgets.csv");
        let json = dir.path().join("budgets.json");
        let mut args = vec!["budgets", c, "--budgets", "15,3,16"];
        args.extend(&flags);
        args.extend(["--csv", csv.to_str().unwrap(), "-o", json.to_str().unwrap()]);
        let o = pollard(&args);
        assert!(o.status.success(), "{}", text(&o.stderr));
        // one line per distinct tree (16 rounds down to 15), ascending
        let out = text(&o.stdout);
        assert_eq!(out.lines().count(), 2 + 2, "{out}");
        let table = std::fs::read_to_string(&csv).unwrap();
        let lines: Vec<&str> = table.lines().collect();
        assert_eq!(lines.len(), 3, "{table}");
        assert!(
            lines[1].starts_with("3,3,") && lines[2].starts_with("15,15,"),
            "{table}"
        );
        assert!(!table.contains("NaN") && !table.contains("inf"), "{table}");
        let v: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
        assert_eq!(v["format"], "pollard.fidelity-budgets");
        assert_eq!(v["capacitance"], "timed");
        // reference: `pollard reduce`'s own fidelity summary of its 15-compartment tree
        let tree = dir.path().join("tree.json");
        let mut r = vec!["reduce", c, "-n", "15", "--out", tree.to_str().unwrap()];
        r.extend(&flags);
        let o = pollard(&r);
        assert!(o.status.success(), "{}", text(&o.stderr));
        let reduced: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&tree).unwrap()).unwrap();
        assert_eq!(v["budgets"][1]["report"], reduced["fidelity"], "{c}");
        // (serde_json's float parsing may differ in the last bit)
        let p95: f64 = lines[2].split(',').nth(6).unwrap().parse().unwrap();
        let want = reduced["fidelity"]["epsp_peak_error_np"]["p95"]
            .as_f64()
            .unwrap();
        assert!((p95 - want).abs() <= 1e-12 * want, "{p95} vs {want}");
    }
}

#[test]
fn budgets_defaults_double_up_to_the_cells_maximum_and_errors_are_one_line() {
    let cell = manifest("tests/data/real/interneuron_ca1_pv.swc");
    let c = cell.to_str().unwrap();
    let o = pollard(&["budgets", c]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let firsts: Vec<usize> = text(&o.stdout)
        .lines()
        .skip(2)
        .map(|l| l.split('|').next().unwrap().trim().parse().unwrap())
        .collect();
    // this cell allows 37 compartments at most (docs/fidelity.md)
    assert_eq!(firsts, vec![1, 3, 7, 15, 31, 37]);
    // a malformed list is the argument parser's usage error (exit 2)
    let r = pollard(&["budgets", c, "--budgets", "x"]);
    assert_eq!(r.status.code(), Some(2));
    assert!(text(&r.stderr).contains("invalid digit"));
    for (args, needle) in [
        (vec!["budgets", c, "--epsp-tau", "0"], "EPSP time constant"),
        (vec!["budgets", "/no/such/file.swc"], "/no/such/file.swc"),
    ] {
        let r = pollard(&args);
        assert_eq!(r.status.code(), Some(1), "{args:?}");
        let e = text(&r.stderr);
        assert!(e.contains(needle), "{args:?}: {e}");
        assert_eq!(e.trim_end().lines().count(), 1, "{args:?}: {e}");
    }
}
