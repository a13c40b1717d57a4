//! CPU time (not wall time) of the reduction of a 100,000-point cell, for a loaded machine where
//! criterion's wall-clock medians mostly measure the other jobs:
//! `cargo run --release --no-default-features --example reduce_cpu`.
use pollard::Morphology;
use pollard::cable::Params;
use pollard::reduce::{ReduceOptions, Reducer};

/// This thread's user + system CPU time (s), from /proc (Linux; clock ticks of 10 ms).
fn cpu_s() -> f64 {
    let s = std::fs::read_to_string("/proc/thread-self/stat").unwrap_or_default();
    let f: Vec<&str> = s
        .rsplit(')')
        .next()
        .unwrap_or("")
        .split_whitespace()
        .collect();
    let t = |i: usize| f.get(i).and_then(|x| x.parse::<f64>().ok()).unwrap_or(0.0);
    (t(11) + t(12)) / 100.0
}

fn main() {
    let pts = pollard::synth::big_cell(100_000, 7);
    let flat = Morphology::parse(&pollard::synth::to_swc(&pts, &[]), "big.swc")
        .expect("valid")
        .flatten();
    let (p, o) = (Params::default(), ReduceOptions::default());
    let reps = 20;
    let t0 = cpu_s();
    for _ in 0..reps {
        std::hint::black_box(Reducer::new(&flat, &p, &o).expect("reduces"));
    }
    println!(
        "collapse order: {:.1} ms CPU",
        (cpu_s() - t0) / reps as f64 * 1e3
    );
    let r = Reducer::new(&flat, &p, &o).expect("reduces");
    let t0 = cpu_s();
    std::hint::black_box(r.tree(63));
    println!(
        "first budget (full-cell transfer impedances for the fit, once): {:.0} ms CPU",
        (cpu_s() - t0) * 1e3
    );
    for b in [
        1,
        15,
        63,
        255,
        r.max_compartments() / 2,
        r.max_compartments(),
    ] {
        let t0 = cpu_s();
        for _ in 0..reps {
            std::hint::black_box(r.tree(b));
        }
        println!(
            "tree({b}): {:.1} ms CPU",
            (cpu_s() - t0) / reps as f64 * 1e3
        );
    }
}
