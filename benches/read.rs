//! Reading and validating a large SWC file held in memory as text.
//!
//! Goal: `Morphology::parse` of a generated 1,000,000-point cell in under 1.0 s on one core
//! (median). The text is made once by `synth::big_cell` (deterministic) and kept in memory, so
//! the benchmark measures parsing, checking, re-ordering and per-point metrics, not the disk.

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
