//! `pollard inspect`: check a file and summarise its shape.

use pollard::Morphology;
use std::io::Write;
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
    let mut out = std::io::stdout().lock();
    if a.json {
        let mut v = serde_json::to_value(&met)?;
        v["file"] = a.cell.display().to_string().into();
        v["warnings"] = serde_json::to_value(&m.warnings)?;
        if a.sholl_step > 0.0 {
            v["sholl"] = serde_json::to_value(m.sholl(a.sholl_step))?;
        }
        writeln!(out, "{}", serde_json::to_string_pretty(&v)?)?;
        return Ok(ExitCode::SUCCESS);
    }
    writeln!(out, "{}", a.cell.display())?;
    writeln!(out, "  points               {}", met.points)?;
    writeln!(out, "  separate trees       {}", met.trees)?;
    writeln!(
        out,
        "  soma                 {} point(s), area {:.1} µm²",
        met.soma_points, met.soma_area_um2
    )?;
    writeln!(out, "  stems                {}", met.stems)?;
    writeln!(out, "  branch points        {}", met.branch_points)?;
    writeln!(out, "  tips                 {}", met.tips)?;
    writeln!(out, "  total length         {:.1} µm", met.total_length_um)?;
    writeln!(
        out,
        "  membrane area        {:.1} µm²",
        met.membrane_area_um2
    )?;
    writeln!(out, "  volume               {:.1} µm³", met.volume_um3)?;
    writeln!(
        out,
        "  farthest from soma   {:.1} µm (path)",
        met.max_path_distance_um
    )?;
    writeln!(
        out,
        "  extent x, y, z       {:.1} × {:.1} × {:.1} µm",
        met.extent_um[0], met.extent_um[1], met.extent_um[2]
    )?;
    writeln!(out, "  highest branch order {}", met.max_branch_order)?;
    writeln!(out, "  Strahler order       {}", met.max_strahler_order)?;
    writeln!(out, "  by type:")?;
    for t in &met.by_type {
        writeln!(
            out,
            "    {:>3} {:<16} {:>8} points {:>10.1} µm {:>12.1} µm² {:>6} tips",
            t.type_code, t.name, t.points, t.length_um, t.membrane_area_um2, t.tips
        )?;
    }
    if a.sholl_step > 0.0 {
        writeln!(out, "  Sholl (radius µm: crossings):")?;
        for (r, c) in m.sholl(a.sholl_step) {
            writeln!(out, "    {r:>8.1}: {c}")?;
        }
    }
    if m.warnings.is_empty() {
        writeln!(out, "  no warnings")?;
    } else {
        writeln!(out, "  warnings:")?;
        for w in &m.warnings {
            writeln!(out, "    - {w}")?;
        }
    }
    Ok(ExitCode::SUCCESS)
}
