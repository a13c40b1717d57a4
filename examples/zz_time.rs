use pollard::Morphology;
use pollard::cable::Params;
use pollard::reduce::{ReduceOptions, Reducer};
fn main() {
    let pts = pollard::synth::big_cell(100_000, 7);
    let flat = Morphology::parse(&pollard::synth::to_swc(&pts, &[]), "big.swc")
        .unwrap()
        .flatten();
    let r = Reducer::new(&flat, &Params::default(), &ReduceOptions::default()).unwrap();
    r.tree(63);
    let args: Vec<usize> = std::env::args()
        .skip(1)
        .map(|a| a.parse().unwrap())
        .collect();
    let reps = args[0];
    let mut line = String::new();
    for &b in &args[1..] {
        let mut best = f64::INFINITY;
        for _ in 0..9 {
            let t0 = std::time::Instant::now();
            for _ in 0..reps {
                std::hint::black_box(r.tree(b));
            }
            best = best.min(t0.elapsed().as_secs_f64() * 1e3 / reps as f64);
        }
        line += &format!(" {b}:{best:.2}");
    }
    println!("{line}");
}
