//! `pollard batch` on a generated folder of cells with broken files mixed in: outputs, summary
//! rows, exit codes, resumability, shards and byte-identical results.

mod common;

use pollard::batch::{self, Row, RunOptions, Settings, Shard, Status};
use pollard::synth;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::Command;

const BUDGET: &str = "12";

/// Good cells (relative path → points) and broken files (relative path) written into `dir`.
struct Archive {
    good: BTreeMap<String, usize>,
    bad: BTreeSet<String>,
}

fn write(dir: &Path, rel: &str, bytes: &[u8]) {
    let p = dir.join(rel);
    std::fs::create_dir_all(p.parent().unwrap()).unwrap();
    std::fs::write(p, bytes).unwrap();
}

fn make_archive(dir: &Path) -> Archive {
    let mut good = BTreeMap::new();
    let folders = ["", "mouse/", "mouse/v1/", "rat,odd name/"];
    for i in 0..18usize {
        let n = 60 + 37 * i;
        let rel = format!("{}cell_{i:02}.swc", folders[i % folders.len()]);
        let text = synth::to_swc(&synth::random_tree(n, 1000 + i as u64), &["test cell"]);
        write(dir, &rel, text.as_bytes());
        good.insert(rel, n);
    }
    // upper-case extension counts too
    let text = synth::to_swc(&synth::random_tree(80, 7), &[]);
    write(dir, "mouse/UPPER.SWC", text.as_bytes());
    good.insert("mouse/UPPER.SWC".into(), 80);

    let mut bad = BTreeSet::new();
    let broken: [(&str, &[u8]); 7] = [
        ("empty.swc", b""),
        ("mouse/garbage.swc", b"this is not a reconstruction\n"),
        ("mouse/v1/cycle.swc", b"1 3 0 0 0 1 2\n2 3 1 0 0 1 1\n"),
        ("missing_parent.swc", b"1 1 0 0 0 5 -1\n2 3 10 0 0 1 7\n"),
        ("rat,odd name/latin1.swc", b"# caf\xe9\n1 1 0 0 0 5 -1\n"),
        ("mouse/negative.swc", b"1 1 0 0 0 5 -1\n2 3 10 0 0 -1 1\n"),
        ("short.swc", b"1 1 0 0 0 5\n"),
    ];
    for (rel, bytes) in broken {
        write(dir, rel, bytes);
        bad.insert(rel.to_string());
    }
    // not inputs: other extensions, and a folder whose name ends in .swc (walked, not read)
    write(dir, "notes.txt", b"1 1 0 0 0 5 -1\n");
    write(dir, "mouse/cell_00.swc.bak", b"junk");
    write(
        dir,
        "folder.swc/inner.swc",
        synth::to_swc(&synth::random_tree(50, 3), &[]).as_bytes(),
    );
    good.insert("folder.swc/inner.swc".into(), 50);
    Archive { good, bad }
}

fn pollard(args: &[&str]) -> (i32, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_pollard"))
        .args(args)
        .output()
        .expect("runs the pollard binary");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn read_rows(path: &Path) -> Vec<Row> {
    batch::read_summary(path).unwrap()
}

fn no_time(rows: &[Row]) -> Vec<Row> {
    rows.iter()
        .map(|r| Row {
            seconds: None,
            ..r.clone()
        })
        .collect()
}

fn tree_path(out: &Path, rel: &str) -> PathBuf {
    out.join(Path::new(rel).with_extension("json"))
}

/// All files below `dir` (relative path → bytes), leaving out the summaries.
fn snapshot(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let mut m = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let e = e.unwrap();
            let p = e.path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let rel = p.strip_prefix(dir).unwrap().to_string_lossy().to_string();
                if !rel.starts_with("summary") {
                    m.insert(rel, std::fs::read(&p).unwrap());
                }
            }
        }
    }
    m
}

#[test]
fn every_cell_has_an_output_or_an_error_row_and_reruns_do_no_work() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    let out = tmp.path().join("out");
    let arch = make_archive(&input);

    let (code, err) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&out),
        "--compartments",
        BUDGET,
        "--jobs",
        "2",
    ]);
    // exit code 3: the batch ran, some cells failed (documented in `pollard batch --help`)
    assert_eq!(code, 3, "{err}");
    // stderr is not a terminal here: plain progress lines, and one line per failure
    assert!(err.contains("cells (100 %), 7 failed"), "{err}");
    assert_eq!(err.matches("failed: ").count(), 7, "{err}");
    // the hidden record folder is named where a user reads the outcome
    let records = out.join(".pollard-batch");
    assert!(err.contains(&records.display().to_string()), "{err}");

    let rows = read_rows(&out.join("summary.jsonl"));
    let files: Vec<&str> = rows.iter().map(|r| r.file.as_str()).collect();
    let mut expected: Vec<&str> = arch
        .good
        .keys()
        .chain(arch.bad.iter())
        .map(|x| x.as_str())
        .collect();
    expected.sort();
    assert_eq!(files, expected, "one row per input file, sorted by path");

    for r in &rows {
        if let Some(&n) = arch.good.get(&r.file) {
            assert_eq!(r.status, Status::Ok, "{r:?}");
            assert_eq!(r.points, Some(n), "{r:?}");
            assert!(r.error.is_none());
            let rin = r.soma_rin_full_mohm.unwrap();
            assert!(rin.is_finite() && rin > 0.0, "{r:?}");
            let tree: serde_json::Value =
                serde_json::from_slice(&std::fs::read(tree_path(&out, &r.file)).unwrap()).unwrap();
            // a strict binary tree has an odd number of nodes (2L − 1 for L leaves); the
            // budget 12 is rounded down to 11
            let nc = tree["compartments"].as_array().unwrap().len();
            assert_eq!(Some(nc), r.compartments);
            assert!(nc % 2 == 1 && nc <= 11, "{nc}");
            assert_eq!(tree["source"], r.file.as_str());
            // the full soma input resistance agrees with nalgebra-sparse's Cholesky of the cell's DC
            // network (independent of the engine's tree sweeps)
            let m = pollard::Morphology::read(&input.join(&r.file)).unwrap();
            let net =
                pollard::cable::Network::build(&m.flatten(), &Default::default(), 0.0).unwrap();
            let z = common::z_columns(&net, &[0])[0][0] * 1e-6;
            assert!((rin - z).abs() <= 1e-9 * z, "{rin} {z}");
            let red = r.soma_rin_reduced_mohm.unwrap();
            assert!(red.is_finite() && red > 0.0);
            let emax = r.site_error_max_np.unwrap();
            assert!(r.site_error_median_np.unwrap() <= r.site_error_p95_np.unwrap());
            assert!(r.site_error_p95_np.unwrap() <= emax && emax.is_finite());
        } else {
            assert_eq!(r.status, Status::Failed, "{r:?}");
            let e = r.error.as_deref().unwrap();
            assert!(e.contains(&r.file), "the error names the file: {e}");
            assert!(r.points.is_none());
            assert!(!tree_path(&out, &r.file).exists());
        }
    }
    // the CSV has the same rows, in the same order, with the header first
    let csv = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    let lines: Vec<&str> = csv.lines().collect();
    assert_eq!(lines[0], batch::CSV_HEADER);
    assert_eq!(lines.len(), rows.len() + 1);
    // a name with a comma is quoted (RFC 4180)
    assert!(
        lines
            .iter()
            .any(|l| l.starts_with("\"rat,odd name/latin1.swc\",failed,,")),
        "{csv}"
    );
    for (l, r) in lines[1..].iter().zip(&rows) {
        // same file and status; numbers equal to the JSON's up to its reader's last bit
        let f: Vec<&str> = match l.strip_prefix('"') {
            Some(quoted) => {
                let (name, rest) = quoted.split_once("\",").unwrap();
                std::iter::once(name).chain(rest.split(',')).collect()
            }
            None => l.split(',').collect(),
        };
        assert_eq!(f[0].replace("\"\"", "\""), r.file);
        assert_eq!(
            f[1],
            if r.status == Status::Ok {
                "ok"
            } else {
                "failed"
            }
        );
        let close = |text: &str, v: Option<f64>| match v {
            None => assert_eq!(text, ""),
            Some(v) => {
                let x: f64 = text.parse().unwrap();
                assert!((x - v).abs() <= 1e-14 * v.abs(), "{x} {v}");
            }
        };
        close(f[4], r.total_length_um);
        close(f[6], r.soma_rin_full_mohm);
        close(f[7], r.soma_rin_reduced_mohm);
        close(f[10], r.site_error_max_np);
    }

    // a tree file holds what `pollard reduce` writes for the same cell and flags (without the
    // indentation), with the batch record as one more member
    let one = "mouse/v1/cell_02.swc";
    let single = tmp.path().join("single.json");
    let st = Command::new(env!("CARGO_BIN_EXE_pollard"))
        .current_dir(&input)
        .args(["reduce", one, "--compartments", BUDGET, "--out", s(&single)])
        .output()
        .unwrap();
    assert!(
        st.status.success(),
        "{}",
        String::from_utf8_lossy(&st.stderr)
    );
    let mut from_batch: serde_json::Value =
        serde_json::from_slice(&std::fs::read(tree_path(&out, one)).unwrap()).unwrap();
    let rec = from_batch.as_object_mut().unwrap().remove("batch").unwrap();
    assert!(
        rec["settings_key"]
            .as_str()
            .unwrap()
            .contains("\"compartments\":12")
    );
    let from_reduce: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&single).unwrap()).unwrap();
    assert_eq!(from_batch, from_reduce);
    // the rerun does no work: no file below OUT changes, and the rows are the same
    let before = snapshot(&out);
    let (code2, err2) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&out),
        "--compartments",
        BUDGET,
        "--jobs",
        "2",
    ]);
    assert_eq!(code2, 3);
    assert!(err2.contains(" 0 done in this run"), "{err2}");
    assert_eq!(snapshot(&out), before);
    // the summary is rebuilt from the records: the same rows, with no time for reused cells
    let rerun = read_rows(&out.join("summary.jsonl"));
    assert!(rerun.iter().all(|r| r.seconds.is_none()));
    assert_eq!(no_time(&rerun), no_time(&rows));
    let csv2 = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    assert_eq!(csv2.lines().count(), csv.lines().count());

    // --force redoes every cell (records are rewritten, trees come out byte-identical)
    let (code3, err3) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&out),
        "--compartments",
        BUDGET,
        "--force",
    ]);
    assert_eq!(code3, 3);
    assert!(err3.contains(" 0 reused"), "{err3}");
    let after = snapshot(&out);
    for rel in arch.good.keys() {
        let k = Path::new(rel)
            .with_extension("json")
            .to_string_lossy()
            .to_string();
        assert_eq!(after[&k], before[&k], "{rel} is byte-identical");
    }
}

#[test]
fn all_good_cells_exit_zero() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    for i in 0..3 {
        let text = synth::to_swc(&synth::random_tree(100, i), &[]);
        write(&input, &format!("c{i}.swc"), text.as_bytes());
    }
    let out = input.join("reduced"); // an output folder inside the input is left out of the search
    let (code, err) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&out),
        "--compartments",
        BUDGET,
    ]);
    assert_eq!(code, 0, "{err}");
    assert_eq!(read_rows(&out.join("summary.jsonl")).len(), 3);
    let (code, err) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&out),
        "--compartments",
        BUDGET,
    ]);
    assert_eq!(code, 0, "{err}");
    assert_eq!(read_rows(&out.join("summary.jsonl")).len(), 3);
    // an output folder that holds the input is refused: exit code 1
    let (code, err) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(tmp.path()),
        "--compartments",
        BUDGET,
    ]);
    assert_eq!(code, 1, "{err}");
}

fn settings() -> Settings {
    Settings {
        compartments: BUDGET.parse().unwrap(),
        params: Default::default(),
        ..Default::default()
    }
}

fn run_lib(cells: &[batch::Cell], st: &Settings, force: bool) -> (Vec<Row>, usize) {
    let opts = RunOptions {
        jobs: 2,
        force,
        retry_failed: false,
    };
    batch::run(cells, st, &opts, &|_, _| {}).unwrap()
}

#[test]
fn incomplete_or_stale_outputs_are_redone() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    let out = tmp.path().join("out");
    let arch = make_archive(&input);
    let cells = batch::plan(&input, &out, Shard::ALL).unwrap();
    let st = settings();
    let (rows, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, 0);
    assert_eq!(rows.len(), arch.good.len() + arch.bad.len());
    let (_, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, cells.len());

    let pick = |rel: &str| cells.iter().find(|c| c.rel == rel).unwrap();
    // a truncated tree file does not count as complete
    let a = pick("cell_00.swc");
    let full = std::fs::read(&a.output).unwrap();
    std::fs::write(&a.output, &full[..full.len() / 2]).unwrap();
    // nor does a tree file without its record (valid JSON, but not one this batch wrote)
    let b = pick("mouse/cell_01.swc");
    std::fs::write(&b.output, b"{\"format\": \"pollard.reduced-tree\"}").unwrap();
    // nor does a missing tree
    let c = pick("mouse/v1/cell_02.swc");
    std::fs::remove_file(&c.output).unwrap();
    // an input that changed is redone
    let d = pick("cell_04.swc");
    std::thread::sleep(std::time::Duration::from_millis(20));
    let text = synth::to_swc(&synth::random_tree(90, 77), &[]);
    std::fs::write(&d.input, text).unwrap();
    let (rows, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, cells.len() - 4);
    assert_eq!(std::fs::read(&a.output).unwrap(), full);
    assert!(c.output.exists());
    assert_eq!(
        rows.iter().find(|r| r.file == d.rel).unwrap().points,
        Some(90)
    );

    // other flags: nothing is reused
    let mut st2 = st.clone();
    st2.params.rm_ohm_cm2 = 15_000.0;
    let (rows2, reused) = run_lib(&cells, &st2, false);
    assert_eq!(reused, 0);
    // a larger Rm gives a larger soma input resistance (every membrane conductance shrinks;
    // Rall's input conductance is monotone in them: Rall 1959)
    for (r1, r2) in rows.iter().zip(&rows2) {
        if r1.status == Status::Ok {
            assert!(r2.soma_rin_full_mohm.unwrap() < r1.soma_rin_full_mohm.unwrap());
        }
    }
    // a fixed broken file is retried without --force: its size (or time) changed
    let e = pick("empty.swc");
    std::thread::sleep(std::time::Duration::from_millis(20));
    std::fs::write(&e.input, synth::to_swc(&synth::random_tree(40, 5), &[])).unwrap();
    let (rows3, _) = run_lib(&cells, &st2, false);
    assert_eq!(
        rows3.iter().find(|r| r.file == e.rel).unwrap().status,
        Status::Ok
    );
}

#[test]
fn shards_partition_the_archive_and_merge_into_the_whole() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    let whole = tmp.path().join("whole");
    let split = tmp.path().join("split");
    let arch = make_archive(&input);
    let n = arch.good.len() + arch.bad.len();

    let (code, _) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&whole),
        "--compartments",
        BUDGET,
    ]);
    assert_eq!(code, 3);
    let all = read_rows(&whole.join("summary.jsonl"));

    let k = 3;
    let mut seen: Vec<String> = Vec::new();
    for i in 1..=k {
        let shard = format!("{i}/{k}");
        let (code, err) = pollard(&[
            "batch",
            s(&input),
            "--out-dir",
            s(&split),
            "--compartments",
            BUDGET,
            "--shard",
            &shard,
            "--jobs",
            "1",
        ]);
        assert!(code == 0 || code == 3, "{err}");
        let rows = read_rows(&split.join(format!("summary.shard-{i}-of-{k}.jsonl")));
        assert!(split.join(format!("summary.shard-{i}-of-{k}.csv")).exists());
        // the library's own split agrees with the command's
        let planned = batch::plan(&input, &split, shard.parse().unwrap()).unwrap();
        assert_eq!(
            planned.iter().map(|c| c.rel.clone()).collect::<Vec<_>>(),
            rows.iter().map(|r| r.file.clone()).collect::<Vec<_>>()
        );
        seen.extend(rows.into_iter().map(|r| r.file));
    }
    // exactly a partition: every file once
    let uniq: BTreeSet<&String> = seen.iter().collect();
    assert_eq!(seen.len(), n);
    assert_eq!(uniq.len(), n);
    assert!(!split.join("summary.jsonl").exists());

    let (code, err) = pollard(&["batch", "--out-dir", s(&split), "--merge-summaries"]);
    assert_eq!(code, 3, "{err}");
    let merged = read_rows(&split.join("summary.jsonl"));
    assert_eq!(no_time(&merged), no_time(&all));
    // the trees of the split run equal those of the whole run, byte for byte
    for rel in arch.good.keys() {
        assert_eq!(
            std::fs::read(tree_path(&split, rel)).unwrap(),
            std::fs::read(tree_path(&whole, rel)).unwrap(),
            "{rel}"
        );
    }
    // an incomplete set of shard summaries is refused
    std::fs::remove_file(split.join("summary.shard-2-of-3.jsonl")).unwrap();
    let (code, err) = pollard(&["batch", "--out-dir", s(&split), "--merge-summaries"]);
    assert_eq!(code, 1);
    assert!(err.contains("shard(s) 2 of 3"), "{err}");
}

#[test]
fn type_filter_is_a_setting_and_name_clashes_are_reported() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    let out = tmp.path().join("out");
    for (i, rel) in ["a.swc", "b.swc", "b.SWC"].iter().enumerate() {
        let text = synth::to_swc(&synth::random_tree(150, 40 + i as u64), &[]);
        write(&input, rel, text.as_bytes());
    }
    write(&input, "broken.swc", b"1 1 0 0 0 5 -1\n2 3 0 0 0 1 99\n");
    let cells = batch::plan(&input, &out, Shard::ALL).unwrap();
    assert_eq!(cells.len(), 4);
    let st = settings();
    let (rows, _) = run_lib(&cells, &st, false);
    let failed: Vec<&str> = rows
        .iter()
        .filter(|r| r.status == Status::Failed)
        .map(|r| r.file.as_str())
        .collect();
    // "b.SWC" sorts before "b.swc" (byte order) and takes the name b.json first
    assert_eq!(failed, ["b.swc", "broken.swc"]);
    let clash = rows.iter().find(|r| r.file == "b.swc").unwrap();
    assert!(clash.error.as_deref().unwrap().contains("b.SWC"));

    // keeping only the soma and the basal dendrites (types 1 and 3) is another setting: nothing
    // is reused, and with the axon and apical dendrites left out the cell's membrane shrinks,
    // so its soma input resistance grows (input conductance is a sum over the branches; Rall 1959)
    let mut st2 = st.clone();
    st2.types = Some(vec![1, 3]);
    let (rows2, reused) = run_lib(&cells, &st2, false);
    assert_eq!(reused, 0);
    for (r1, r2) in rows.iter().zip(&rows2) {
        if r1.status == Status::Ok {
            assert!(r2.soma_rin_full_mohm.unwrap() > r1.soma_rin_full_mohm.unwrap());
        }
    }
    // everything is reused but the clash, which has no record of its own
    let (rows3, reused) = run_lib(&cells, &st2, false);
    assert_eq!(reused, 3);
    assert_eq!(no_time(&rows3), no_time(&rows2));
    // --retry-failed redoes the failed cell too
    let opts = RunOptions {
        jobs: 1,
        force: false,
        retry_failed: true,
    };
    let (_, reused) = batch::run(&cells, &st2, &opts, &|_, _| {}).unwrap();
    assert_eq!(reused, 2);
}

#[test]
fn flags_out_of_range_stop_before_any_work() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    write(
        &input,
        "a.swc",
        synth::to_swc(&synth::random_tree(50, 1), &[]).as_bytes(),
    );
    let out = tmp.path().join("out");
    for bad in [
        vec!["--rm", "0"],
        vec!["--shard", "0/3"],
        vec!["--shard", "4/3"],
        vec!["--scale", "0"],
        vec!["--junction-fraction", "2"],
        vec!["--impedance-freq", "-1"],
    ] {
        let mut args = vec![
            "batch",
            s(&input),
            "--out-dir",
            s(&out),
            "--compartments",
            BUDGET,
        ];
        args.extend(bad.iter().copied());
        let (code, err) = pollard(&args);
        // 1: the batch could not run; 2: clap's usage error (not 3, "some cells failed")
        assert!(code == 1 || code == 2, "{bad:?}: {code} {err}");
        assert!(!out.join("a.json").exists());
    }
    // a folder that is not there
    let (code, _) = pollard(&[
        "batch",
        s(&tmp.path().join("nope")),
        "--out-dir",
        s(&out),
        "--compartments",
        "5",
    ]);
    assert_eq!(code, 1);
}

/// A synapse table of `n` rows on the points with SWC ids 1..=n (ids of `synth::random_tree`).
fn table_text(n: usize) -> String {
    let mut t = String::from("input,swc_id\n");
    for i in 1..=n {
        t.push_str(&format!("in-{},{i}\n", i % 3));
    }
    t
}

#[test]
fn a_changed_added_or_removed_synapse_table_redoes_its_cell() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    let out = tmp.path().join("out");
    for i in 0..4u64 {
        let text = synth::to_swc(&synth::random_tree(60, 40 + i), &[]);
        write(&input, &format!("c{i}.swc"), text.as_bytes());
    }
    for i in 0..3 {
        write(
            &input,
            &format!("c{i}.synapses.csv"),
            table_text(10).as_bytes(),
        );
    }
    let cells = batch::plan(&input, &out, Shard::ALL).unwrap();
    let st = Settings {
        synapses: Some(pollard::synapses::TableRule {
            snap_limit_um: 3.0,
            skip_far: false,
        }),
        ..settings()
    };
    let synapses_of =
        |rows: &[Row], rel: &str| rows.iter().find(|r| r.file == rel).unwrap().synapses;
    let (rows, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, 0);
    assert_eq!(synapses_of(&rows, "c0.swc"), Some(10));
    assert_eq!(synapses_of(&rows, "c3.swc"), None);
    let (_, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, 4);

    std::thread::sleep(std::time::Duration::from_millis(20));
    // c0: more rows (size and time change); c1: the same bytes written again (only the time
    // changes); c2: removed; c3: added; c1's tree must be redone byte-identically
    let before_c1 = std::fs::read(&cells[1].output).unwrap();
    write(&input, "c0.synapses.csv", table_text(25).as_bytes());
    write(&input, "c1.synapses.csv", table_text(10).as_bytes());
    std::fs::remove_file(input.join("c2.synapses.csv")).unwrap();
    write(&input, "c3.synapses.csv", table_text(7).as_bytes());
    let (rows, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, 0);
    assert_eq!(synapses_of(&rows, "c0.swc"), Some(25));
    assert_eq!(synapses_of(&rows, "c1.swc"), Some(10));
    assert_eq!(synapses_of(&rows, "c2.swc"), None);
    assert_eq!(synapses_of(&rows, "c3.swc"), Some(7));
    assert_eq!(std::fs::read(&cells[1].output).unwrap(), before_c1);
    let (_, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, 4);

    // a broken table fails its cell; fixed, the cell is redone without --force
    std::thread::sleep(std::time::Duration::from_millis(20));
    write(&input, "c3.synapses.csv", b"input,swc_id\nx,99999\n");
    let (rows, _) = run_lib(&cells, &st, false);
    let c3 = rows.iter().find(|r| r.file == "c3.swc").unwrap();
    assert_eq!(c3.status, Status::Failed, "{c3:?}");
    assert!(
        c3.error.as_deref().unwrap().contains("c3.synapses.csv:2"),
        "{c3:?}"
    );
    let (_, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, 4);
    std::thread::sleep(std::time::Duration::from_millis(20));
    write(&input, "c3.synapses.csv", table_text(5).as_bytes());
    let (rows, reused) = run_lib(&cells, &st, false);
    assert_eq!(reused, 3);
    assert_eq!(synapses_of(&rows, "c3.swc"), Some(5));

    // without --synapse-tables the tables are not inputs: a changed table redoes nothing
    let plain = settings();
    run_lib(&cells, &plain, false);
    std::thread::sleep(std::time::Duration::from_millis(20));
    write(&input, "c0.synapses.csv", table_text(3).as_bytes());
    let (_, reused) = run_lib(&cells, &plain, false);
    assert_eq!(reused, 4);
}

/// `(done, reused)` from the batch's last stderr line ("… N done in this run, M reused …").
fn done_reused(err: &str) -> (usize, usize) {
    let line = err
        .lines()
        .find(|l| l.contains("done in this run"))
        .unwrap();
    let num = |before: &str| -> usize {
        let head = &line[..line.find(before).unwrap()];
        head.split_whitespace().last().unwrap().parse().unwrap()
    };
    (num(" done in this run"), num(" reused"))
}

/// The `compartments` member's `key` of every compartment of a tree file, as JSON values.
fn column(path: &Path, key: &str) -> Vec<serde_json::Value> {
    let doc: serde_json::Value = serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap();
    assert!(doc["parameters"]["capacitance"].is_string());
    doc["compartments"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c[key].clone())
        .collect()
}

#[test]
fn timed_capacitances_are_a_setting_and_keep_the_conductances() {
    let tmp = tempfile::tempdir().unwrap();
    let input = tmp.path().join("in");
    let out = tmp.path().join("out");
    for i in 0..3 {
        let text = synth::to_swc(&synth::random_tree(150, 60 + i), &[]);
        write(&input, &format!("c{i}.swc"), text.as_bytes());
    }
    let run = |extra: &[&str]| {
        let mut args = vec![
            "batch",
            s(&input),
            "--out-dir",
            s(&out),
            "-n",
            "15",
            "-j",
            "2",
        ];
        args.extend(extra);
        let (code, err) = pollard(&args);
        assert_eq!(code, 0, "{err}");
        done_reused(&err)
    };
    let trees = |key: &str| -> Vec<Vec<serde_json::Value>> {
        (0..3)
            .map(|i| column(&out.join(format!("c{i}.json")), key))
            .collect()
    };
    let rule = || -> String {
        let doc: serde_json::Value =
            serde_json::from_slice(&std::fs::read(out.join("c0.json")).unwrap()).unwrap();
        doc["parameters"]["capacitance"]
            .as_str()
            .unwrap()
            .to_string()
    };
    assert_eq!(run(&["--capacitance", "fitted"]), (3, 0));
    assert_eq!(rule(), "fitted");
    let fitted_bytes = std::fs::read(out.join("c1.json")).unwrap();
    let (ga, gl, cf) = (
        trees("g_axial_ns"),
        trees("g_leak_ns"),
        trees("capacitance_pf"),
    );
    // another rule is another setting: every cell is redone, then reused; the default is timed
    assert_eq!(run(&[]), (3, 0));
    assert_eq!(rule(), "timed");
    assert_eq!(run(&["--capacitance", "timed"]), (0, 3));
    // reference: the fitted run's trees; the polish changes capacitances only
    assert_eq!(trees("g_axial_ns"), ga);
    assert_eq!(trees("g_leak_ns"), gl);
    let ct = trees("capacitance_pf");
    for (t, f) in ct.iter().zip(&cf) {
        assert_eq!(t.len(), f.len());
        assert_ne!(t, f, "the polish moved some capacitance");
        assert!(t.iter().all(|c| c.as_f64().unwrap() > 0.0));
    }
    // reference: `pollard reduce --capacitance timed` on the same cell and budget
    let single = tmp.path().join("single.json");
    let (code, err) = pollard(&[
        "reduce",
        s(&input.join("c2.swc")),
        "-n",
        "15",
        "--capacitance",
        "timed",
        "--out",
        s(&single),
    ]);
    assert_eq!(code, 0, "{err}");
    assert_eq!(column(&single, "capacitance_pf"), ct[2]);
    // back to fitted: redone, the first run's bytes again
    assert_eq!(run(&["--capacitance", "fitted"]), (3, 0));
    assert_eq!(std::fs::read(out.join("c1.json")).unwrap(), fitted_bytes);
    // timed without the fidelity run it polishes on: one line, exit 1, no work
    let out2 = tmp.path().join("out2");
    let (code, err) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&out2),
        "-n",
        "15",
        "--capacitance",
        "timed",
        "--no-fidelity",
    ]);
    assert_eq!(code, 1, "{err}");
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    assert!(err.contains("--no-fidelity"), "{err}");
    assert!(!out2.join("c0.json").exists());
    // the default without it: fitted, said on stderr and recorded in every tree
    let (code, err) = pollard(&[
        "batch",
        s(&input),
        "--out-dir",
        s(&out2),
        "-n",
        "15",
        "--no-fidelity",
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("capacitances fitted, not timed"), "{err}");
    let doc: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out2.join("c1.json")).unwrap()).unwrap();
    assert_eq!(doc["parameters"]["capacitance"], "fitted");
    assert_eq!(column(&out2.join("c1.json"), "capacitance_pf"), cf[1]);
}
