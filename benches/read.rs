//! Reading and validating a large SWC file held in memory as text.
//!
//! Goal: `Morphology::parse` of a generated 1,000,000-point cell in under 1.0 s on one core
//! (median). The text is made once by `synth::big_cell` (deterministic) and kept in memory, so
//! the benchmark measures parsing, checking, re-ordering and per-point metrics, not the disk.
//!
//! Recorded 2026-12-02 on the shared 2-core build machine (load average 5–7 from other jobs,
//! so wall-clock medians swing between runs): parse_str_1M 0.30–0.50 s, morphology_parse_1M
//! 0.89–1.26 s, morphology_parse_chain_1M 0.41–1.21 s. CPU time of one Morphology::parse of
//! the 1M-point cell (perf stat task-clock, 10 parses less the generation): 0.53 s. Peak
//! memory of reading it from disk (`examples/read_big.rs`): 174 MB for a 46 MB file.

use criterion::{Criterion, criterion_group, criterion_main};
use pollard::Morphology;
use pollard::swc;
use pollard::synth;
use std::hint::black_box;
use std::time::Duration;

fn read(c: &mut Criterion) {
    let text = synth::to_swc(&synth::big_cell(1_000_000, 1), &["benchmark cell"]);
    let mut g = c.benchmark_group("read");
    g.sample_size(10);
    g.measurement_time(Duration::from_secs(20));
    g.bench_function("parse_str_1M", |b| {
        b.iter(|| swc::parse_str(black_box(&text), "big.swc").map(|f| f.points.len()))
    });
    g.bench_function("morphology_parse_1M", |b| {
        b.iter(|| Morphology::parse(black_box(&text), "big.swc").map(|m| m.len()))
    });
    let chain = synth::to_swc(&synth::chain(1_000_000), &[]);
    g.bench_function("morphology_parse_chain_1M", |b| {
        b.iter(|| Morphology::parse(black_box(&chain), "chain.swc").map(|m| m.len()))
    });
    g.finish();
}

criterion_group!(benches, read);
criterion_main!(benches);
