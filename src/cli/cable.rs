//! `pollard cable`: passive maps at every point of a cell (input resistance, attenuation to and
//! from the soma, optionally the voltage map from one site) and whole-cell numbers.

use anyhow::Context;
use pollard::cable::prep::{CableInput, cable_input};
use pollard::cable::{CellMaps, Summary};
use serde::Serialize;
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
    /// Frequency (Hz); 0 = DC. At f > 0 resistances are impedance magnitudes.
    #[arg(
        long = "freq",
        allow_negative_numbers = true,
        default_value_t = 0.0,
        value_name = "HZ"
    )]
    pub freq: f64,
    /// Also map V_k/V_site for a current injected at the point with this SWC id.
    #[arg(long, value_name = "ID")]
    pub site: Option<i64>,
    /// Print JSON (summary and every point) instead of a readable summary.
    #[arg(long)]
    pub json: bool,
    /// Write the output to this file instead of the terminal.
    #[arg(long, short = 'o', value_name = "FILE")]
    pub output: Option<PathBuf>,
}

/// A JSON number, or null when not finite (serde_json's rules: shortest round-trip digits).
fn push_f64(buf: &mut Vec<u8>, x: f64) {
    // writing into a Vec cannot fail
    let _ = serde_json::to_writer(&mut *buf, &x);
}

/// The JSON objects of points `range` (comma-separated, with a leading comma unless the range
/// starts at point 0). Points outside the main tree get nulls.
fn push_points(
    buf: &mut Vec<u8>,
    ids: &[i64],
    maps: &CellMaps,
    site: Option<&[f64]>,
    range: std::ops::Range<usize>,
) {
    for i in range {
        if i > 0 {
            buf.push(b',');
        }
        buf.extend_from_slice(b"{\"id\":");
        let _ = serde_json::to_writer(&mut *buf, &ids[i]);
        let node = maps.node_of_point(i);
        let val = |f: &dyn Fn(usize) -> f64| node.map(f).unwrap_or(f64::NAN);
        buf.extend_from_slice(b",\"input_resistance_mohm\":");
        push_f64(buf, val(&|k| maps.input_resistance_mohm(k)));
        buf.extend_from_slice(b",\"attenuation_to_soma\":");
        push_f64(buf, val(&|k| maps.attenuation_to_soma(k)));
        buf.extend_from_slice(b",\"attenuation_from_soma\":");
        push_f64(buf, val(&|k| maps.attenuation_from_soma(k)));
        if let Some(v) = site {
            buf.extend_from_slice(b",\"site_ratio\":");
            push_f64(buf, val(&|k| v[k]));
        }
        buf.push(b'}');
    }
}

/// Writes the `points` array: chunks of points are formatted in parallel (rayon), a wave at a
/// time into reused buffers, and written in order.
fn write_points(
    w: &mut dyn Write,
    ids: &[i64],
    maps: &CellMaps,
    site: Option<&[f64]>,
) -> std::io::Result<()> {
    use rayon::prelude::*;
    const CHUNK: usize = 16_384;
    let threads = rayon::current_num_threads().max(1);
    let mut bufs: Vec<Vec<u8>> = vec![Vec::new(); threads * 2];
    let n = ids.len();
    let mut start = 0;
    w.write_all(b"[")?;
    while start < n {
        bufs.par_iter_mut().enumerate().for_each(|(c, buf)| {
            buf.clear();
            let a = (start + c * CHUNK).min(n);
            let b = (a + CHUNK).min(n);
            push_points(buf, ids, maps, site, a..b);
        });
        for buf in &bufs {
            w.write_all(buf)?;
        }
        start += bufs.len() * CHUNK;
    }
    w.write_all(b"]")
}

#[derive(Serialize)]
struct Tip {
    id: i64,
    electrotonic_length: f64,
    path_length_um: f64,
}

#[derive(Serialize)]
struct Output<'a> {
    file: String,
    freq_hz: f64,
    rm_ohm_cm2: f64,
    ra_ohm_cm: f64,
    cm_uf_cm2: f64,
    soma_input_resistance_mohm: f64,
    soma_input_phase_deg: f64,
    tau_ms: f64,
    electrotonic_extent: f64,
    mean_tip_electrotonic_length: f64,
    max_attenuation_to_soma: f64,
    max_attenuation_from_soma: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    site: Option<i64>,
    warnings: &'a [pollard::Warning],
    tips: Vec<Tip>,
}

fn tips(ids: &[i64], s: &Summary) -> Vec<Tip> {
    s.tips
        .iter()
        .map(|t| Tip {
            id: ids[t.point],
            electrotonic_length: t.electrotonic_length,
            path_length_um: t.path_length_um,
        })
        .collect()
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
    let site_node = match a.site {
        None => None,
        Some(id) => {
            let i = ids
                .iter()
                .position(|&p| p == id)
                .with_context(|| format!("--site {id}: no point with that id in the file"))?;
            let k = maps.node_of_point(i).with_context(|| {
                format!("--site {id}: that point is not connected to the cell's main tree")
            })?;
            Some(k)
        }
    };
    let site = site_node.and_then(|k| maps.site_ratio_abs(k));
    let summary = maps.summary(flat);

    let mut out: Vec<u8> = Vec::new();
    let mut sink: Box<dyn Write> = match a.output {
        Some(_) => Box::new(&mut out),
        None => Box::new(std::io::BufWriter::with_capacity(
            1 << 20,
            std::io::stdout().lock(),
        )),
    };
    let written = if a.json {
        let o = Output {
            file: a.cell.display().to_string(),
            freq_hz: a.freq,
            rm_ohm_cm2: a.membrane.rm,
            ra_ohm_cm: a.membrane.ra,
            cm_uf_cm2: a.membrane.cm,
            soma_input_resistance_mohm: summary.soma_input_resistance_mohm,
            soma_input_phase_deg: summary.soma_input_phase_deg,
            tau_ms: summary.tau_ms,
            electrotonic_extent: summary.electrotonic_extent,
            mean_tip_electrotonic_length: summary.mean_tip_electrotonic_length,
            max_attenuation_to_soma: summary.max_attenuation_to_soma,
            max_attenuation_from_soma: summary.max_attenuation_from_soma,
            site: a.site,
            warnings,
            tips: tips(ids, &summary),
        };
        // the summary object, then the points array spliced in before its closing brace
        let mut head = serde_json::to_vec(&o)?;
        head.pop();
        sink.write_all(&head)
            .and_then(|_| sink.write_all(b",\"points\":"))
            .and_then(|_| write_points(&mut sink, ids, &maps, site.as_deref()))
            .and_then(|_| writeln!(sink, "}}"))
            .map_err(anyhow::Error::from)
    } else {
        write_text(
            &mut sink,
            &a,
            (ids, warnings),
            &maps,
            &summary,
            site_node,
            site.as_deref(),
        )
    };
    let written = written.and_then(|_| sink.flush().map_err(anyhow::Error::from));
    drop(sink);
    if let Err(e) = written {
        // a reader that stops early (`| head`) is not an error
        let broken_pipe = e
            .downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe);
        if broken_pipe {
            return Ok(ExitCode::SUCCESS);
        }
        return Err(e);
    }
    if let Some(path) = &a.output {
        pollard::export::write_atomic(path, &out, &[a.cell.as_path()])?;
    }
    Ok(ExitCode::SUCCESS)
}

fn write_text(
    w: &mut dyn Write,
    a: &Args,
    (ids, warnings): (&[i64], &[pollard::Warning]),
    maps: &CellMaps,
    s: &Summary,
    site_node: Option<usize>,
    site: Option<&[f64]>,
) -> anyhow::Result<()> {
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
                ids[t.point],
                t.electrotonic_length,
                t.path_length_um,
                p.input_resistance_mohm,
                p.attenuation_to_soma,
                p.attenuation_from_soma
            )?;
        }
    }
    if let (Some(j), Some(v), Some(id)) = (site_node, site, a.site) {
        writeln!(
            w,
            "  site {id}: input resistance {:.2} MΩ; V_soma/V_site {:.4}; smallest |V_k/V_site| {:.4}",
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
