//! Batch throughput: cells per second on a generated archive of 1,000 cells of 3,000 points each
//! (random_tree, seeds 1..=1000, in 10 folders), with 1 and 2 workers. Every sample redoes the
//! whole archive (`force`), so it measures read + reduce + one safe write per tree, and the
//! summary; a third measures a rerun with nothing to do. Criterion's throughput line ("thrpt")
//! is in cells/s.
//!
//! `POLLARD_BENCH_CELLS` and `POLLARD_BENCH_POINTS` shrink the archive for a quick look.

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use pollard::batch::{self, RunOptions, Settings, Shard};
use pollard::synth;
use std::time::Duration;

fn env_or(name: &str, default: usize) -> usize {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn batch_throughput(c: &mut Criterion) {
    let n_cells = env_or("POLLARD_BENCH_CELLS", 1000);
    let n_points = env_or("POLLARD_BENCH_POINTS", 3000);
    let tmp = tempfile::tempdir().expect("a temporary folder");
    let input = tmp.path().join("archive");
    for i in 0..n_cells {
        let dir = input.join(format!("group_{:02}", i % 10));
        std::fs::create_dir_all(&dir).expect("create a folder");
        let text = synth::to_swc(&synth::random_tree(n_points, i as u64 + 1), &[]);
        std::fs::write(dir.join(format!("cell_{i:05}.swc")), text).expect("write a cell");
    }
    let out = tmp.path().join("out");
    std::fs::create_dir_all(&out).expect("create the output folder");
    let cells = batch::plan(&input, &out, Shard::ALL).expect("plan");
    let settings = Settings {
        compartments: 63,
        params: Default::default(),
        ..Default::default()
    };
    let mut g = c.benchmark_group("batch");
    g.sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(30))
        .throughput(Throughput::Elements(n_cells as u64));
    for jobs in [1usize, 2] {
        let opts = RunOptions {
            jobs,
            force: true,
            retry_failed: false,
        };
        g.bench_function(
            format!("{n_cells}_cells_{n_points}_points_{jobs}_workers"),
            |b| {
                b.iter(|| {
                    let (rows, _) = batch::run(&cells, &settings, &opts, &|_, _| {}).expect("runs");
                    batch::write_summary(&out, "summary", &rows).expect("summary");
                    assert!(rows.iter().all(|r| r.status == batch::Status::Ok));
                })
            },
        );
    }
    // a rerun over a finished archive: every cell is checked (its tree read and parsed) and
    // reused
    let opts = RunOptions {
        jobs: 2,
        force: false,
        retry_failed: false,
    };
    g.bench_function(
        format!("{n_cells}_cells_rerun_nothing_to_do_2_workers"),
        |b| {
            b.iter(|| {
                let (rows, reused) =
                    batch::run(&cells, &settings, &opts, &|_, _| {}).expect("runs");
                assert_eq!(reused, rows.len());
            })
        },
    );
    g.finish();
}

criterion_group!(benches, batch_throughput);
criterion_main!(benches);
