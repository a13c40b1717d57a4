//! Speed goals of the reduction (issue "reduce"): for a 100 000-point cell, the whole collapse
//! order (`Reducer::new`: cable network, sections to edges, binarisation, greedy order) in under
//! 200 ms, and any budget afterwards (`Reducer::tree`) in under 10 ms.
//!
//! Run: `cargo bench --no-default-features --bench reduce`.
use criterion::{BatchSize, Criterion, criterion_group, criterion_main};
use pollard::Morphology;
use pollard::cable::Params;
use pollard::reduce::{ReduceOptions, Reducer};
use std::hint::black_box;

fn big_flat() -> pollard::Flat {
    let pts = pollard::synth::big_cell(100_000, 7);
    let text = pollard::synth::to_swc(&pts, &[]);
    Morphology::parse(&text, "big.swc")
        .expect("the generator writes a valid cell")
        .flatten()
}

fn reduce(c: &mut Criterion) {
    let flat = big_flat();
    let params = Params::default();
    let opts = ReduceOptions::default();
    let mut g = c.benchmark_group("reduce_100k");
    g.sample_size(20);
    g.bench_function("collapse_order", |b| {
        b.iter(|| black_box(Reducer::new(&flat, &params, &opts).expect("reduces")))
    });
    let r = Reducer::new(&flat, &params, &opts).expect("reduces");
    let max = r.max_compartments();
    // 127–1023: the trees whose capacitances are fitted per budget, the costliest
    for budget in [1usize, 15, 31, 63, 127, 255, 511, 1023, max / 2] {
        g.bench_function(format!("tree_{budget}_of_{max}"), |b| {
            b.iter(|| black_box(r.tree(budget)))
        });
    }
    g.bench_function("tree_max", |b| {
        b.iter_batched(|| max, |m| black_box(r.tree(m)), BatchSize::SmallInput)
    });
    g.finish();
}

criterion_group!(benches, reduce);
criterion_main!(benches);
