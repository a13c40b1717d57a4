//! Writes an invented cell of exactly N points (the project's deterministic `synth::big_cell`)
//! to an SWC file, e.g. to try the app or the command line on a large cell:
//!
//! ```sh
//! cargo run --example synth_cell -- 100000 big.swc [SEED]
//! ```

fn main() -> anyhow::Result<()> {
    let mut args = std::env::args().skip(1);
    let usage = "usage: synth_cell POINTS OUT.swc [SEED]";
    let n: usize = args.next().ok_or_else(|| anyhow::anyhow!(usage))?.parse()?;
    let out = std::path::PathBuf::from(args.next().ok_or_else(|| anyhow::anyhow!(usage))?);
    let seed: u64 = match args.next() {
        Some(s) => s.parse()?,
        None => 1,
    };
    let header = format!("invented cell: pollard synth::big_cell({n}, {seed})");
    let text = pollard::synth::to_swc(&pollard::synth::big_cell(n, seed), &[&header]);
    pollard::export::write_atomic(&out, text.as_bytes(), &[])?;
    println!("wrote {n} points to {}", out.display());
    Ok(())
}
