//! Writes a generated 1,000,000-point cell to a temporary file and loads it, so that the peak
//! memory of reading can be measured:
//!
//! ```sh
//! /usr/bin/time -v cargo run --release --no-default-features --example read_big
//! ```
//!
//! An optional argument sets the number of points (default 1,000,000).

use std::time::Instant;

fn main() -> anyhow::Result<()> {
    let n: usize = match std::env::args().nth(1) {
        Some(a) => a.parse()?,
        None => 1_000_000,
    };
    let t = Instant::now();
    let text = pollard::synth::to_swc(&pollard::synth::big_cell(n, 1), &["read_big test cell"]);
    let dir = tempfile::tempdir()?;
    let path = dir.path().join("big.swc");
    pollard::export::write_atomic(&path, text.as_bytes(), &[])?;
    let bytes = text.len();
    drop(text);
    println!(
        "wrote {n} points ({:.1} MB) in {:.2} s",
        bytes as f64 / 1e6,
        t.elapsed().as_secs_f64()
    );
    let t = Instant::now();
    let m = pollard::Morphology::read(&path)?;
    let read_s = t.elapsed().as_secs_f64();
    let met = m.metrics();
    println!(
        "read {} points in {read_s:.3} s: {} tips, {} branch points, total length {:.0} µm",
        m.len(),
        met.tips,
        met.branch_points,
        met.total_length_um
    );
    for w in &m.warnings {
        println!("warning: {w}");
    }
    Ok(())
}
