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
    // the generated points are dropped here: only the text stays until it is written
    let path = dir.path().join("big.swc");
    pollard::export::write_atomic(&path, text.as_bytes(), &[])?;
    let bytes = text.len();
    drop(text);
    println!(
        "wrote {n} points ({:.1} MB) in {:.2} s",
        bytes as f64 / 1e6,
        t.elapsed().as_secs_f64()
    );
    println!(
        "peak memory so far (generating and writing): {}",
        peak_rss()
    );
    // Linux: writing 5 to clear_refs resets the peak (VmHWM) to the current resident size, so
    // the next report is the peak of reading alone (plus what is resident now).
    let reset = std::fs::write("/proc/self/clear_refs", "5").is_ok();
    println!("current memory before reading: {}", current_rss());
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
    if reset {
        println!("peak memory while reading: {}", peak_rss());
    } else {
        println!("peak memory of the whole run: {}", peak_rss());
    }
    Ok(())
}

/// The process's peak resident set size as Linux reports it (VmHWM), or "unknown".
fn peak_rss() -> String {
    status_field("VmHWM:")
}

/// The process's resident set size now (VmRSS), or "unknown".
fn current_rss() -> String {
    status_field("VmRSS:")
}

fn status_field(key: &str) -> String {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with(key))
                .map(|l| l[key.len()..].trim().to_string())
        })
        .unwrap_or_else(|| "unknown".to_string())
}
