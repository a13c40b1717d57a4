//! Speed goal of the fidelity report (issue 11): for a 100 000-point cell, under 1 s. Measured
//! as its two parts: the full cell's run, made once per reducer (`Fidelity::new`: fine network,
//! one Crank–Nicolson run with every node's peak tracked), and the report of one reduced tree
//! (`Fidelity::report`: one run of the tree and the statistics over the sites).
//!
//! Run: `cargo bench --no-default-features --bench fidelity`.
use criterion::{Criterion, criterion_group, criterion_main};
use pollard::Morphology;
use pollard::cable::Params;
use pollard::fidelity::{Fidelity, FidelityOptions};
use pollard::reduce::{ReduceOptions, Reducer};
use std::hint::black_box;

fn fidelity(c: &mut Criterion) {
    let pts = pollard::synth::big_cell(100_000, 7);
    let text = pollard::synth::to_swc(&pts, &[]);
    let m = Morphology::parse(&text, "big.swc").expect("the generator writes a valid cell");
    let flat = m.flatten();
    let r = Reducer::new(&flat, &Params::default(), &ReduceOptions::default()).expect("reduces");
    let opts = FidelityOptions::default();
    let mut g = c.benchmark_group("fidelity_100k");
    g.sample_size(10);
    g.bench_function("full_cell_run", |b| {
        b.iter(|| black_box(Fidelity::new(&r, &opts).expect("runs")))
    });
    let f = Fidelity::new(&r, &opts).expect("runs");
    let tree = r.tree(63);
    g.bench_function("report_63", |b| {
        b.iter(|| black_box(f.report(&tree, Some(&m)).expect("reports")))
    });
    g.finish();
}

criterion_group!(benches, fidelity);
criterion_main!(benches);
