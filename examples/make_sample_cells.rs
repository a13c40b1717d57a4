//! Writes the invented sample cells to sample_cells/ (deterministic: running it twice gives the
//! same bytes). Run from the repository root: `cargo run --example make_sample_cells`.

use std::path::Path;

fn main() -> anyhow::Result<()> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_cells");
    std::fs::create_dir_all(&dir)?;
    for (name, text) in pollard::samples::generate() {
        let path = dir.join(name);
        pollard::export::write_atomic(&path, text.as_bytes(), &[])?;
        let points = text.lines().filter(|l| !l.starts_with('#')).count();
        println!("{}: {points} points, {} bytes", path.display(), text.len());
    }
    let (name, text) = pollard::samples::generate_synapses();
    let path = dir.join(name);
    pollard::export::write_atomic(&path, text.as_bytes(), &[])?;
    let rows = text.lines().filter(|l| !l.starts_with('#')).count() - 1;
    println!("{}: {rows} synapses, {} bytes", path.display(), text.len());
    Ok(())
}
