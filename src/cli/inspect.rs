//! `pollard inspect`: check a file and summarise its shape.

use pollard::Morphology;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The SWC file to read.
    pub cell: PathBuf,
    /// Print JSON instead of a readable summary.
    #[arg(long)]
    pub json: bool,
    /// Sholl analysis: radius step in µm (0 = leave it out).
    #[arg(long, default_value_t = 0.0)]
    pub sholl_step: f64,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let m = Morphology::read(&a.cell)?;
    let met = m.metrics();
    if a.json {
        let mut v = serde_json::to_value(&met)?;
        v["file"] = a.cell.display().to_string().into();
        v["warnings"] = serde_json::to_value(&m.warnings)?;
        if a.sholl_step > 0.0 {
            v["sholl"] = serde_json::to_value(m.sholl(a.sholl_step))?;
        }
        println!("{}", serde_json::to_string_pretty(&v)?);
        return Ok(ExitCode::SUCCESS);
    }
    println!("{}", a.cell.display());
    println!("  points               {}", met.points);
    println!("  separate trees       {}", met.trees);
    println!(
        "  soma                 {} point(s), area {:.1} µm²",
        met.soma_points, met.soma_area_um2
    );
    println!("  stems                {}", met.stems);
    println!("  branch points        {}", met.branch_points);
    println!("  tips                 {}", met.tips);
    println!("  total length         {:.1} µm", met.total_length_um);
    println!("  membrane area        {:.1} µm²", met.surface_area_um2);
    println!("  volume               {:.1} µm³", met.volume_um3);
    println!(
        "  farthest from soma   {:.1} µm (path)",
        met.max_path_distance_um
    );
    println!(
        "  extent x, y, z       {:.1} × {:.1} × {:.1} µm",
        met.extent_um[0], met.extent_um[1], met.extent_um[2]
    );
    println!("  highest branch order {}", met.max_branch_order);
    println!("  Strahler order       {}", met.max_strahler_order);
    println!("  by type:");
    for t in &met.by_type {
        println!(
            "    {:>3} {:<16} {:>8} points {:>10.1} µm {:>12.1} µm² {:>6} tips",
            t.type_code, t.name, t.points, t.length_um, t.surface_area_um2, t.tips
        );
    }
    if a.sholl_step > 0.0 {
        println!("  Sholl (radius µm: crossings):");
        for (r, c) in m.sholl(a.sholl_step) {
            println!("    {r:>8.1}: {c}");
        }
    }
    if m.warnings.is_empty() {
        println!("  no warnings");
    } else {
        println!("  warnings:");
        for w in &m.warnings {
            println!("    - {w}");
        }
    }
    Ok(ExitCode::SUCCESS)
}
