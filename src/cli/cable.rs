//! `pollard cable`: passive maps at every point of a cell (input resistance, attenuation to and
//! from the soma, optionally the voltage map for a current at one injection point) and whole-cell
//! numbers.

use anyhow::Context;
use pollard::cable::prep::{CableInput, cable_input};
use pollard::cable::{CellMaps, Summary};
use pollard::export::CableDoc;
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The SWC file to read.
    pub cell: PathBuf,
    #[command(flatten)]
    pub membrane: super::common::MembraneArgs,
    #[command(flatten)]
    pub geometry: super::common::GeometryArgs,
    /// Frequency (Hz) of the maps; 0 = DC. At f > 0 resistances are impedance magnitudes.
    #[arg(
        long = "freq",
        allow_negative_numbers = true,
        default_value_t = 0.0,
        value_name = "HZ"
    )]
    pub freq: f64,
    /// Also map V_k/V_inj for a current injected at the point with this SWC id (the injection
    /// point; `--sites` elsewhere is the scored list of a reduction).
    #[arg(
        long = "injection-point",
        value_name = "ID",
        allow_negative_numbers = true
    )]
    pub injection_point: Option<i64>,
    /// Print JSON (summary and every point) instead of a readable summary.
    #[arg(long)]
    pub json: bool,
    /// Write the output to this file instead of the terminal.
    #[arg(long, short = 'o', value_name = "FILE")]
    pub out: Option<PathBuf>,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let params = a.membrane.params();
    params.validate(a.freq)?;
    let opts = a.geometry.prep();
    let file = pollard::swc::read_path(&a.cell)?;
    let input = cable_input(file, &opts)?;
    let CableInput {
        ids,
        warnings,
        flat,
        ..
    } = &input;
    let maps =
        CellMaps::compute(flat, &params, a.freq).with_context(|| a.cell.display().to_string())?;
    let site_node = match a.injection_point {
        None => None,
        Some(id) => {
            let i = ids.iter().position(|&p| p == id).with_context(|| {
                format!("--injection-point {id}: no point with that id in the file")
            })?;
            let k = maps.node_of_point(i).with_context(|| {
                format!(
                    "--injection-point {id}: that point is not connected to the cell's main tree"
                )
            })?;
            Some(k)
        }
    };
    let site = site_node.and_then(|k| maps.site_ratio_abs(k));
    let summary = maps.summary(flat);
    let name = a.cell.display().to_string();
    // the text is made from the same checked document as the JSON: no number that is not one
    let doc = CableDoc::new(
        &name,
        ids,
        &maps,
        &summary,
        a.injection_point.zip(site.as_deref()),
        warnings,
    )?;
    match &a.out {
        Some(path) => {
            let mut out: Vec<u8> = Vec::new();
            write_doc(&mut out, &a, &doc, &maps, &summary, site_node)?;
            pollard::export::write_atomic(path, &out, &[a.cell.as_path()])?;
        }
        None => {
            let out = std::io::BufWriter::with_capacity(1 << 20, std::io::stdout().lock());
            write_doc(out, &a, &doc, &maps, &summary, site_node)?;
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// The JSON document or the readable summary, flushed.
fn write_doc<W: Write>(
    mut w: W,
    a: &Args,
    doc: &CableDoc<'_>,
    maps: &CellMaps,
    s: &Summary,
    site_node: Option<usize>,
) -> anyhow::Result<()> {
    if a.json {
        doc.write(&mut w)?;
    } else {
        write_text(&mut w, a, doc, maps, s, site_node)?;
    }
    w.flush()?;
    Ok(())
}

fn write_text(
    w: &mut dyn Write,
    a: &Args,
    doc: &CableDoc<'_>,
    maps: &CellMaps,
    s: &Summary,
    site_node: Option<usize>,
) -> std::io::Result<()> {
    let (warnings, site) = (doc.warnings, doc.points.injection_point());
    let what = if a.freq > 0.0 {
        format!("|Z| at {} Hz", a.freq)
    } else {
        "DC".to_string()
    };
    writeln!(w, "{}", a.cell.display())?;
    writeln!(
        w,
        "  Rm {} Ω·cm², Ra {} Ω·cm, Cm {} µF/cm² ({what})",
        a.membrane.rm, a.membrane.ra, a.membrane.cm
    )?;
    writeln!(w, "  nodes                      {}", maps.len())?;
    writeln!(
        w,
        "  soma input resistance      {:.2} MΩ{}",
        s.soma_input_resistance_mohm,
        if a.freq > 0.0 {
            format!(" (phase {:.1}°)", s.soma_input_phase_deg)
        } else {
            String::new()
        }
    )?;
    writeln!(w, "  membrane time constant τ   {:.2} ms", s.tau_ms)?;
    writeln!(w, "  tips                       {}", s.tips.len())?;
    writeln!(
        w,
        "  electrotonic extent        {:.3} (largest Σ l/λ, soma to tip)",
        s.electrotonic_extent
    )?;
    writeln!(
        w,
        "  mean tip distance          {:.3} (Σ l/λ)",
        s.mean_tip_electrotonic_length
    )?;
    writeln!(
        w,
        "  largest attenuation        to soma {:.3}, from soma {:.3}",
        s.max_attenuation_to_soma, s.max_attenuation_from_soma
    )?;
    let mut far: Vec<_> = s.tips.iter().collect();
    far.sort_by(|x, y| y.electrotonic_length.total_cmp(&x.electrotonic_length));
    if !far.is_empty() {
        writeln!(
            w,
            "  farthest tips (id: Σ l/λ, path µm, R_in MΩ, attenuation to / from soma):"
        )?;
        for t in far.iter().take(10) {
            let p = maps.node(t.node);
            writeln!(
                w,
                "    {:>9}: {:.3}, {:.1}, {:.1}, {:.3} / {:.3}",
                doc.points.id(t.point),
                t.electrotonic_length,
                t.path_length_um,
                p.input_resistance_mohm,
                p.attenuation_to_soma,
                p.attenuation_from_soma
            )?;
        }
    }
    if let (Some(j), Some(v), Some(id)) = (site_node, site, a.injection_point) {
        writeln!(
            w,
            "  injection point {id}: input resistance {:.2} MΩ; V_soma/V_inj {:.4}; smallest |V_k/V_inj| {:.4}",
            maps.input_resistance_mohm(j),
            v[0],
            v.iter().cloned().fold(f64::INFINITY, f64::min)
        )?;
    }
    if !warnings.is_empty() {
        writeln!(w, "  warnings:")?;
        for x in warnings {
            writeln!(w, "    - {x}")?;
        }
    }
    writeln!(w, "  (every point: --json)")?;
    Ok(())
}
