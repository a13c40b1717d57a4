//! The command line as a user meets it: exit codes, one-line errors naming file and line, and
//! real reconstructions.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn pollard(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_pollard"))
        .args(args)
        .output()
        .expect("the pollard binary runs")
}

fn real(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/real")
        .join(name)
}

fn stderr_lines(o: &Output) -> Vec<String> {
    String::from_utf8_lossy(&o.stderr)
        .lines()
        .map(str::to_string)
        .collect()
}

#[test]
fn inspect_reads_real_files_and_reports_their_oddities() {
    let o = pollard(&[
        "inspect",
        "--json",
        real("interneuron_ca1_pv.swc").to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    // point count from the provenance table (README beside the file)
    assert_eq!(v["points"], 2033);
    for key in [
        "stems",
        "branch_points",
        "tips",
        "total_length_um",
        "membrane_area_um2",
        "soma_area_um2",
        "max_path_distance_um",
        "warnings",
    ] {
        assert!(!v[key].is_null(), "missing {key}");
    }
    // two soma points at one place: the soma is the sphere of the larger radius (convention)
    assert_eq!(v["soma_points"], 2);

    let o = pollard(&[
        "inspect",
        "--json",
        real("drosophila_pn_fafb.swc").to_str().unwrap(),
    ]);
    assert!(o.status.success());
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let codes: Vec<&str> = v["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| w["code"].as_str().unwrap())
        .collect();
    assert!(codes.contains(&"implausible-size"), "{codes:?}");
    assert!(codes.contains(&"all-radii-zero"), "{codes:?}");
}

#[test]
fn three_point_soma_of_a_real_file_has_area_4_pi_r2() {
    let o = pollard(&[
        "inspect",
        "--json",
        real("cultured_neuron_control.swc").to_str().unwrap(),
    ]);
    assert!(o.status.success());
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["soma_points"], 3);
    // read the soma radius from the file itself (first type-1 line)
    let text = std::fs::read_to_string(real("cultured_neuron_control.swc")).unwrap();
    let r: f64 = text
        .lines()
        .filter(|l| !l.trim_start().starts_with('#'))
        .find_map(|l| {
            let c: Vec<&str> = l.split_whitespace().collect();
            (c.len() >= 7 && c[1] == "1").then(|| c[5].parse().unwrap())
        })
        .unwrap();
    let area = v["soma_area_um2"].as_f64().unwrap();
    let expect = 4.0 * std::f64::consts::PI * r * r; // standard three-point soma convention
    assert!((area - expect).abs() < 1e-6 * expect, "{area} vs {expect}");
}

#[test]
fn bad_input_gives_one_line_naming_file_and_line_and_a_non_zero_exit() {
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        ("short.swc", "1 1 0 0 0 1 -1\n2 3 1 0\n", 2),
        ("nan.swc", "1 1 0 0 0 1 -1\n2 3 1 0 nan 1 1\n", 2),
        ("orphan.swc", "1 1 0 0 0 1 -1\n\n# c\n2 3 1 0 0 1 9\n", 4),
        (
            "dup.swc",
            "1 1 0 0 0 1 -1\n2 3 1 0 0 1 1\n2 3 1 0 0 1 1\n",
            3,
        ),
        ("neg.swc", "1 1 0 0 0 -1 -1\n", 1),
    ];
    for (name, text, line) in cases {
        let p = dir.path().join(name);
        std::fs::write(&p, text).unwrap();
        let o = pollard(&["inspect", p.to_str().unwrap()]);
        assert!(!o.status.success(), "{name} accepted");
        let lines = stderr_lines(&o);
        assert_eq!(lines.len(), 1, "{name}: {lines:?}");
        let want = format!("{}:{line}: ", p.display());
        assert!(
            lines[0].contains(&want),
            "{name}: {} lacks {want}",
            lines[0]
        );
    }
    let o = pollard(&["inspect", dir.path().join("absent.swc").to_str().unwrap()]);
    assert!(!o.status.success());
    assert_eq!(stderr_lines(&o).len(), 1);
}

#[test]
fn a_million_deep_chain_goes_through_inspect() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("chain.swc");
    let mut s = String::with_capacity(30_000_000);
    s.push_str("1 1 0 0 0 5 -1\n");
    for i in 2..=1_000_000u32 {
        s.push_str(&format!("{i} 3 {i} 0 0 1 {}\n", i - 1));
    }
    std::fs::write(&p, s).unwrap();
    let o = pollard(&["inspect", "--json", p.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["tips"], 1);
    assert_eq!(v["points"], 1_000_000);
}

/// The catalogue's rejected files (tests/malformed/expected.txt), each through every command
/// that reads a cell: non-zero exit, one line on stderr naming the file (and the line when the
/// catalogue names one), within 2 s.
#[test]
fn every_command_refuses_every_catalogued_bad_file_in_one_line() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/malformed");
    let manifest = std::fs::read_to_string(dir.join("expected.txt")).unwrap();
    let out = tempfile::tempdir().unwrap();
    let tree = out.path().join("t.json");
    let mut checked = 0;
    for line in manifest.lines() {
        let cols: Vec<&str> = line.split('|').map(str::trim).collect();
        if line.starts_with('#') || cols.len() < 3 || !cols[1].starts_with("error") {
            continue;
        }
        let file = dir.join(cols[0]);
        let f = file.to_str().unwrap();
        let want_line = cols[1].trim_start_matches("error").trim();
        for args in [
            vec!["inspect", f],
            vec!["cable", f],
            vec![
                "reduce",
                f,
                "--compartments",
                "7",
                "--out",
                tree.to_str().unwrap(),
            ],
        ] {
            let t0 = std::time::Instant::now();
            let o = pollard(&args);
            let took = t0.elapsed();
            assert!(!o.status.success(), "{args:?} accepted");
            let lines = stderr_lines(&o);
            assert_eq!(lines.len(), 1, "{args:?}: {lines:?}");
            let named = if want_line == "-" {
                f.to_string()
            } else {
                format!("{f}:{want_line}: ")
            };
            assert!(lines[0].contains(&named), "{args:?}: {}", lines[0]);
            assert!(took.as_secs_f64() < 2.0, "{args:?} took {took:?}");
            assert!(!tree.exists(), "no output for a bad input");
            checked += 1;
        }
    }
    assert!(checked >= 3 * 25, "only {checked} checks");
}

/// A 1,000,000-deep chain (1 mm in steps of 1 nm: deep, electrically ordinary) through cable,
/// reduce (with its time-domain fidelity check) and batch: nothing recurses over the tree.
#[test]
fn a_million_deep_chain_goes_through_cable_reduce_and_batch() {
    let dir = tempfile::tempdir().unwrap();
    let cells = dir.path().join("cells");
    std::fs::create_dir(&cells).unwrap();
    let p = cells.join("chain.swc");
    let mut s = String::with_capacity(40_000_000);
    s.push_str("1 1 0 0 0 5 -1\n");
    for i in 2..=1_000_000u32 {
        s.push_str(&format!(
            "{i} 3 {} 0 0 0.5 {}\n",
            f64::from(i) * 0.001,
            i - 1
        ));
    }
    std::fs::write(&p, s).unwrap();
    let f = p.to_str().unwrap();
    let json = dir.path().join("maps.json");
    let o = pollard(&["cable", f, "--json", "-o", json.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&json).unwrap()).unwrap();
    assert_eq!(v["points"].as_array().unwrap().len(), 1_000_000);
    let tree = dir.path().join("tree.json");
    let o = pollard(&[
        "reduce",
        f,
        "--compartments",
        "3",
        "--out",
        tree.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let t: serde_json::Value = serde_json::from_slice(&std::fs::read(&tree).unwrap()).unwrap();
    assert_eq!(t["compartments"].as_array().unwrap().len(), 3);
    let out = dir.path().join("out");
    let o = pollard(&[
        "batch",
        cells.to_str().unwrap(),
        "--out-dir",
        out.to_str().unwrap(),
        "--compartments",
        "3",
        "--no-fidelity",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(out.join("chain.json").exists());
}
