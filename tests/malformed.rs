//! The catalogue of malformed and odd SWC files in tests/malformed/: each file's exact outcome
//! (the error's line and fault, or acceptance with the named warnings) is listed in
//! tests/malformed/expected.txt, written by hand from the file's content and the reader's rules.

use pollard::Morphology;
use pollard::swc::{self, SwcError};
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

fn dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/malformed")
}

#[derive(Debug)]
enum Expect {
    Error {
        line: Option<usize>,
        variant: String,
    },
    Ok {
        /// (code, line if given)
        warnings: Vec<(String, Option<usize>)>,
    },
}

fn manifest() -> Vec<(String, Expect)> {
    let text = std::fs::read_to_string(dir().join("expected.txt")).expect("manifest");
    let mut out = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let line = raw.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let cols: Vec<&str> = line.split('|').map(str::trim).collect();
        assert_eq!(cols.len(), 3, "expected.txt line {}: {raw}", i + 1);
        let expect = if let Some(at) = cols[1].strip_prefix("error") {
            let at = at.trim();
            Expect::Error {
                line: if at == "-" {
                    None
                } else {
                    Some(at.parse().expect("line number"))
                },
                variant: cols[2].to_string(),
            }
        } else {
            assert_eq!(cols[1], "ok", "expected.txt line {}", i + 1);
            let warnings = if cols[2] == "-" {
                Vec::new()
            } else {
                cols[2]
                    .split_whitespace()
                    .map(|w| match w.split_once('@') {
                        Some((c, l)) => (c.to_string(), Some(l.parse().expect("line number"))),
                        None => (w.to_string(), None),
                    })
                    .collect()
            };
            Expect::Ok { warnings }
        };
        out.push((cols[0].to_string(), expect));
    }
    out
}

/// The name of the fault's enum variant, from its Debug form (`NotANumber { .. }` → NotANumber).
fn variant(e: &SwcError) -> String {
    format!("{:?}", e.fault)
        .chars()
        .take_while(|c| c.is_ascii_alphanumeric())
        .collect()
}

fn read(file: &str) -> Result<Morphology, SwcError> {
    let bytes = std::fs::read(dir().join(file)).expect("catalogue file");
    swc::parse_bytes(&bytes, file).and_then(Morphology::from_swc)
}

#[test]
fn every_file_has_its_listed_outcome() {
    let mut failures = Vec::new();
    for (file, expect) in manifest() {
        let got = read(&file);
        match (&expect, &got) {
            (Expect::Error { line, variant: v }, Err(e)) => {
                if e.line != *line || variant(e) != *v {
                    failures.push(format!(
                        "{file}: expected error {line:?} {v}, got {:?} {} ({e})",
                        e.line,
                        variant(e)
                    ));
                }
            }
            (Expect::Ok { warnings }, Ok(m)) => {
                let want: BTreeSet<&str> = warnings.iter().map(|(c, _)| c.as_str()).collect();
                let have: BTreeSet<&str> = m.warnings.iter().map(|w| w.code).collect();
                if want != have {
                    failures.push(format!("{file}: expected warnings {want:?}, got {have:?}"));
                }
                for (code, line) in warnings {
                    if let Some(l) = line {
                        let w = m.warnings.iter().find(|w| w.code == code);
                        if w.map(|w| w.line) != Some(Some(*l)) {
                            failures.push(format!(
                                "{file}: expected {code} on line {l}, got {:?}",
                                w.map(|w| w.line)
                            ));
                        }
                    }
                }
            }
            (Expect::Error { .. }, Ok(m)) => failures.push(format!(
                "{file}: expected {expect:?}, but it was accepted with {:?}",
                m.warnings.iter().map(|w| w.code).collect::<Vec<_>>()
            )),
            (Expect::Ok { .. }, Err(e)) => {
                failures.push(format!("{file}: expected {expect:?}, got error {e}"))
            }
        }
    }
    assert!(failures.is_empty(), "\n{}", failures.join("\n"));
}

#[test]
fn the_manifest_lists_every_file_once() {
    let listed: Vec<String> = manifest().into_iter().map(|(f, _)| f).collect();
    let unique: BTreeSet<&String> = listed.iter().collect();
    assert_eq!(unique.len(), listed.len(), "a file is listed twice");
    let mut on_disk = BTreeSet::new();
    for entry in std::fs::read_dir(dir()).expect("catalogue folder") {
        let name = entry
            .expect("entry")
            .file_name()
            .to_string_lossy()
            .to_string();
        if name.ends_with(".swc") {
            on_disk.insert(name);
        }
    }
    let listed: BTreeSet<String> = listed.into_iter().collect();
    assert_eq!(on_disk, listed);
    assert!(listed.len() >= 25);
}

#[test]
fn errors_name_the_file_and_line_in_their_message() {
    let e = read("mixed_valid_invalid.swc").unwrap_err();
    assert!(
        e.to_string().starts_with("mixed_valid_invalid.swc:5: "),
        "{e}"
    );
    let e = read("empty.swc").unwrap_err();
    assert!(e.to_string().starts_with("empty.swc: "), "{e}");
}

#[test]
fn accepted_odd_files_have_the_right_shape() {
    // parents listed after their children: the soma (id 1, last line) still leads
    let m = read("parents_after_children.swc").unwrap();
    assert_eq!(m.points[0].id, 1);
    assert_eq!((m.points[1].id, m.points[2].id), (2, 3));
    // re-rooted at the soma: the former root (id 1, a dendrite) now hangs from the soma
    let m = read("soma_parent_is_dendrite.swc").unwrap();
    assert_eq!(m.points[0].id, 2);
    assert_eq!(m.metrics().stems, 2);
    // two somas: the second one's tree is kept as a separate tree
    let m = read("two_somas.swc").unwrap();
    assert_eq!((m.trees.len(), m.main_len, m.soma.len()), (2, 3, 1));
    // a three-point soma with nothing else: sphere of 4πr², r = 5 (the three-point soma
    // convention: common practice, no source)
    let m = read("three_point_soma_only.swc").unwrap();
    let a = m.soma_area();
    assert!((a - 4.0 * std::f64::consts::PI * 25.0).abs() < 1e-9, "{a}");
    // CRLF reads like LF
    let a = read("crlf.swc").unwrap();
    let b = Morphology::parse("1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 20 0 0 1 2\n", "lf").unwrap();
    assert_eq!(a.points, b.points);
    // four stems, and a point with four children (a multifurcation is kept as it is)
    let m = read("four_stems_and_a_fork_of_four.swc").unwrap();
    let met = m.metrics();
    assert_eq!((met.stems, met.branch_points, met.tips), (4, 1, 7));
    assert_eq!(m.n_children.iter().max(), Some(&4));
    // NA radius is kept as unknown
    let m = read("na_radius.swc").unwrap();
    assert_eq!(m.points.iter().filter(|p| p.radius.is_none()).count(), 2);
}

/// Every number in a JSON value, with its path; `null`s are reported as NaN (a `null` where a
/// number belongs is a silent non-number).
fn numbers(v: &serde_json::Value, path: &str, out: &mut Vec<(String, f64)>) {
    match v {
        serde_json::Value::Null => out.push((path.to_string(), f64::NAN)),
        serde_json::Value::Number(n) => {
            out.push((path.to_string(), n.as_f64().unwrap_or(f64::NAN)))
        }
        serde_json::Value::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                numbers(x, &format!("{path}[{i}]"), out);
            }
        }
        serde_json::Value::Object(o) => {
            for (k, x) in o {
                numbers(x, &format!("{path}.{k}"), out);
            }
        }
        _ => {}
    }
}

fn pollard(args: &[&str]) -> (i32, String, String) {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_pollard"))
        .args(args)
        .output()
        .expect("run pollard");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).to_string(),
        String::from_utf8_lossy(&out.stderr).to_string(),
    )
}

#[test]
fn cable_and_reduce_give_numbers_or_one_clear_line() {
    // Every catalogue file through `cable --json` and `reduce --json`: exit 0 with every number
    // finite (a null counts as NaN), or a non-zero exit with one line naming the file.
    let tmp = tempfile::tempdir().unwrap();
    let tree = tmp.path().join("tree.json");
    let mut accepted = 0;
    for (file, _) in manifest() {
        let path = dir().join(&file);
        let p = path.to_str().unwrap();
        for args in [
            vec!["cable", p, "--json"],
            vec![
                "reduce",
                p,
                "-n",
                "3",
                "-o",
                tree.to_str().unwrap(),
                "--json",
            ],
        ] {
            let (code, out, err) = pollard(&args);
            if code == 0 {
                accepted += 1;
                let v: serde_json::Value = serde_json::from_str(&out)
                    .unwrap_or_else(|e| panic!("{args:?}: not JSON: {e}"));
                let mut all = Vec::new();
                numbers(&v, "", &mut all);
                let bad: Vec<_> = all.iter().filter(|x| !x.1.is_finite()).take(3).collect();
                assert!(bad.is_empty(), "{args:?}: {bad:?}");
            } else {
                assert_eq!(code, 1, "{args:?}: {err}");
                assert_eq!(err.lines().count(), 1, "{args:?}: {err}");
                assert!(err.contains(&file), "{args:?}: {err}");
            }
        }
    }
    assert!(accepted > 20, "{accepted}");
    // out-of-range radii and lengths are refused by their line
    for (file, what) in [
        ("radius_1e300.swc", "line 2: radius 1e300"),
        ("radius_1e-200.swc", "line 3: radius 1e-200"),
    ] {
        let (code, _, err) = pollard(&["cable", dir().join(file).to_str().unwrap()]);
        assert!(code == 1 && err.contains(what), "{file}: {err}");
    }
    let long = dir().join("coordinates_1e300.swc");
    let (code, _, err) = pollard(&["cable", long.to_str().unwrap(), "--scale", "1"]);
    assert!(code == 1 && err.contains("segment length"), "{err}");
    // and out-of-range parameters by their name
    for flag in [["--rm", "1e300"], ["--ra", "0"], ["--cm", "NaN"]] {
        let cyl = dir().join("zero_radius.swc");
        let (code, _, err) = pollard(&["cable", cyl.to_str().unwrap(), flag[0], flag[1]]);
        assert!(code == 1 && err.lines().count() == 1, "{flag:?}: {err}");
    }
}
