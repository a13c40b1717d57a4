//! Speed goal of synapse tables (issue 15): 1,000,000 synapses onto a 100,000-point cell —
//! read the CSV, snap every position to the cell, map every synapse to its compartment and build
//! the input × compartment matrix — in under 2 s.
//!
//! Run: `cargo bench --no-default-features --bench synapses`.
use criterion::{Criterion, criterion_group, criterion_main};
use pollard::Morphology;
use pollard::cable::{Params, PrepOptions, prepare};
use pollard::reduce::{ReduceOptions, Reducer};
use pollard::synapses::{SnapOptions, SynapseMap, parse_table, snap};
use pollard::synth::Rng;
use std::fmt::Write as _;
use std::hint::black_box;

/// 1M synapses from 20 000 inputs, each on the membrane of a random point (± 0.5 µm).
fn table(m: &Morphology, n: usize) -> String {
    let mut rng = Rng::new(15);
    let mut out = String::from("synapse,input,x,y,z,weight\n");
    for i in 0..n {
        let p = &m.points[rng.below(m.points.len() as u64) as usize];
        let r = p.radius.unwrap_or(0.5) + rng.range(-0.5, 0.5);
        let d = rng.unit_vector();
        let _ = writeln!(
            out,
            "{i},input-{},{:.3},{:.3},{:.3},1",
            rng.below(20_000),
            p.pos[0] + d[0] * r,
            p.pos[1] + d[1] * r,
            p.pos[2] + d[2] * r
        );
    }
    out
}

fn synapses(c: &mut Criterion) {
    let text = pollard::synth::to_swc(&pollard::synth::big_cell(100_000, 7), &[]);
    let m = Morphology::parse(&text, "big.swc").expect("the generator writes a valid cell");
    let flat = prepare(&m, &PrepOptions::default()).expect("prepares");
    let r = Reducer::new(&flat, &Params::default(), &ReduceOptions::default()).expect("reduces");
    let tree = r.tree(1001);
    let csv = table(&m, 1_000_000);
    let opts = SnapOptions::default();
    let mut g = c.benchmark_group("synapses_1m_on_100k");
    g.sample_size(10);
    g.bench_function("read_snap_map", |b| {
        b.iter(|| {
            let t = parse_table(csv.as_bytes(), "bench.csv").expect("reads");
            let s = snap(&t, &m, &flat, &opts).expect("snaps");
            black_box(SynapseMap::new(&s, &tree).expect("maps"))
        })
    });
    g.finish();
}

criterion_group!(benches, synapses);
criterion_main!(benches);
