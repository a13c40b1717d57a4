//! The catalogue of malformed synapse tables in tests/synapses_malformed/: each is refused by
//! `pollard reduce --synapses` with one line naming the file, the line (tests/synapses_malformed/
//! expected.txt, written by hand) and the fault, a non-zero exit, and nothing written.

use std::path::{Path, PathBuf};
use std::process::Command;

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).to_path_buf()
}

fn manifest() -> Vec<(String, Option<usize>, String)> {
    let text = std::fs::read_to_string(root().join("tests/synapses_malformed/expected.txt"))
        .expect("manifest");
    let mut out = Vec::new();
    for raw in text.lines() {
        let line = raw.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let cols: Vec<&str> = line.splitn(3, '|').map(str::trim).collect();
        assert_eq!(cols.len(), 3, "expected.txt: {raw}");
        let at = (cols[1] != "-").then(|| cols[1].parse().expect("a line number"));
        out.push((cols[0].to_string(), at, cols[2].to_string()));
    }
    out
}

#[test]
fn every_table_in_the_catalogue_is_listed() {
    let listed: Vec<String> = manifest().into_iter().map(|m| m.0).collect();
    for e in std::fs::read_dir(root().join("tests/synapses_malformed")).unwrap() {
        let name = e.unwrap().file_name().to_string_lossy().into_owned();
        if name != "expected.txt" {
            assert!(listed.contains(&name), "{name} is not in expected.txt");
        }
    }
}

#[test]
fn every_malformed_table_is_refused_with_its_line() {
    let cell = root().join("sample_cells/practice_pyramidal.swc");
    let list = manifest();
    assert!(list.len() >= 20);
    for (file, at, words) in list {
        let table = root().join("tests/synapses_malformed").join(&file);
        let out_dir = tempfile::tempdir().unwrap();
        let out = Command::new(env!("CARGO_BIN_EXE_pollard"))
            .arg("reduce")
            .arg(&cell)
            .args(["-n", "7", "--synapses"])
            .arg(&table)
            .arg("-o")
            .arg(out_dir.path().join("t.json"))
            .arg("--synapse-csv")
            .arg(out_dir.path().join("t"))
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(1), "{file}: {err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{file}: {err}");
        let name = table.display().to_string();
        let want = match at {
            Some(l) => format!("{name}:{l}: "),
            None => format!("{name}: "),
        };
        assert!(err.contains(&want), "{file}: expected `{want}` in: {err}");
        assert!(err.contains(&words), "{file}: expected `{words}` in: {err}");
        assert!(out.stdout.is_empty(), "{file}: printed a report");
        let left = std::fs::read_dir(out_dir.path()).unwrap().count();
        assert_eq!(left, 0, "{file}: something was written");
    }
}
