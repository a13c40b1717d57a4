//! Prints the fidelity table (markdown) of the reducer on real cells at budgets 15, 31, 63:
//! DC log-attenuation errors to and from the soma, soma EPSP peak and time-to-peak errors for an
//! alpha current at each site, and the soma's own EPSP. Re-run it after changing the reducer.
//!
//! cargo run --release --no-default-features --example fidelity_table [DIR …]
//! (default: tests/data/real and ../shared/cells; a file name seen twice is taken once)
//!
//! Files are prepared as a user would: coordinates in nm or voxels (the `implausible-size`
//! warning) get `--scale 0.001`, points without a radius get `--default-diameter 0.5`.

use pollard::cable::{Params, PrepOptions, prepare};
use pollard::fidelity::{Fidelity, FidelityOptions, percent};
use pollard::morphology::Morphology;
use pollard::reduce::{CapacitanceRule, ReduceOptions, Reducer};
use std::time::Instant;

const BUDGETS: [usize; 3] = [15, 31, 63];

fn prep_for(m: &Morphology) -> PrepOptions {
    let scale = m
        .warnings
        .iter()
        .any(|w| w.code == "implausible-size")
        .then_some(0.001);
    let no_radius = m.points[..m.main_len]
        .iter()
        .skip(1)
        .any(|p| !p.radius.is_some_and(|r| r > 0.0 && r.is_finite()));
    PrepOptions {
        scale,
        default_diameter_um: no_radius.then_some(0.5),
    }
}

/// The library's default rule (`timed`: fitted, then polished in the time domain);
/// `POLLARD_CAPACITANCE=fitted` measures the fitted capacitances alone, `uniform` C = τ·G;
/// `POLLARD_TABLE_MAX=1` adds a row at the largest budget the cell allows;
/// `POLLARD_ONE_PER_SITE=1` measures the timed rule without split inputs
/// (`--one-compartment-per-site`).
fn capacitance_rule() -> CapacitanceRule {
    match std::env::var("POLLARD_CAPACITANCE").as_deref() {
        Ok("uniform") => CapacitanceRule::Uniform,
        Ok("fitted") => CapacitanceRule::Fitted,
        _ => CapacitanceRule::Timed,
    }
}

/// The smallest p95 of an error any reduced tree could reach with this site → compartment map,
/// whatever its dynamics, if every site took its compartment's own response (no split inputs):
/// each compartment has one soma response, so one value (time to peak, or EPSP peak) for all
/// its sites (split inputs are not bound by it: a mix of two responses lies between them); `width(e)` is the span of log values one response can serve
/// within error e (time to peak: a site's own t within [t/(1 + e), t/(1 − e)]; peak: ln p within
/// ±e). Bisection on e, each compartment's best window by two pointers over its sites' sorted
/// log values.
fn map_floor(
    rows: &[pollard::fidelity::SiteFidelity],
    comps: usize,
    value: impl Fn(&pollard::fidelity::SiteFidelity) -> f64,
    width: impl Fn(f64) -> f64,
    hi: f64,
) -> f64 {
    let mut by: Vec<Vec<f64>> = vec![Vec::new(); comps];
    for r in rows {
        by[r.compartment as usize].push(value(r).max(1e-300).ln());
    }
    by.iter_mut().for_each(|v| v.sort_by(f64::total_cmp));
    let need = (0.95 * rows.len() as f64).ceil() as usize;
    let covered = |e: f64| -> usize {
        let w = width(e);
        by.iter()
            .map(|v| {
                let (mut best, mut j) = (0, 0);
                for i in 0..v.len() {
                    while v[i] - v[j] > w {
                        j += 1;
                    }
                    best = best.max(i + 1 - j);
                }
                best
            })
            .sum()
    };
    let (mut lo, mut hi) = (0.0, hi);
    for _ in 0..40 {
        let mid = 0.5 * (lo + hi);
        if covered(mid) >= need {
            hi = mid
        } else {
            lo = mid
        }
    }
    hi
}

/// [`map_floor`] of the time-to-peak error (relative).
fn ttp_partition_floor(rows: &[pollard::fidelity::SiteFidelity], comps: usize) -> f64 {
    let width = |e: f64| ((1.0 + e) / (1.0 - e).max(1e-12)).ln();
    map_floor(rows, comps, |r| r.time_to_peak_full_ms, width, 0.999)
}

/// [`map_floor`] of the EPSP peak error (Np).
fn peak_partition_floor(rows: &[pollard::fidelity::SiteFidelity], comps: usize) -> f64 {
    map_floor(rows, comps, |r| r.epsp_peak_full_mv, |e| 2.0 * e, 50.0)
}

fn flags(p: &PrepOptions) -> String {
    let mut s = Vec::new();
    if let Some(x) = p.scale {
        s.push(format!("--scale {x}"));
    }
    if let Some(d) = p.default_diameter_um {
        s.push(format!("--default-diameter {d}"));
    }
    s.join(" ")
}

fn cell(path: &std::path::Path, opts: &FidelityOptions) -> Result<Vec<String>, String> {
    let name = path.file_stem().unwrap().to_string_lossy().to_string();
    let m = Morphology::read(path).map_err(|e| e.to_string())?;
    let prep = prep_for(&m);
    let flat = prepare(&m, &prep).map_err(|e| e.to_string())?;
    let t0 = Instant::now();
    let ropts = ReduceOptions {
        capacitance: capacitance_rule(),
        split_inputs: std::env::var("POLLARD_ONE_PER_SITE").is_err(),
        ..ReduceOptions::default()
    };
    let red = Reducer::new(&flat, &Params::default(), &ropts).map_err(|e| e.to_string())?;
    let fid = Fidelity::new(&red, opts).map_err(|e| e.to_string())?;
    let setup = t0.elapsed().as_secs_f64();
    let mut rows = Vec::new();
    let mut budgets = BUDGETS.to_vec();
    if std::env::var("POLLARD_TABLE_MAX").is_ok() {
        budgets.push(red.max_compartments());
    }
    for b in budgets {
        let mut tree = red.tree(b);
        fid.apply_capacitance_rule(&mut tree)
            .map_err(|e| e.to_string())?;
        let r = fid.report(&tree, Some(&m)).map_err(|e| e.to_string())?;
        let (site_rows, _) = fid.sites(&tree, Some(&m)).map_err(|e| e.to_string())?;
        let floor = ttp_partition_floor(&site_rows, tree.len());
        let peak_floor = peak_partition_floor(&site_rows, tree.len());
        let (e, pe) = (r.epsp_peak_error_np, r.epsp_peak_error_percent);
        let got = if tree.len() < b {
            format!("{b} (max {})", tree.len())
        } else {
            b.to_string()
        };
        rows.push(format!(
            "| {name} | {} | {got} | {:.2} / {:.2} | {:.2} / {:.2} | {:.0} % / {:.0} % ({:.2} / {:.2} Np; floor {:.2} Np) | {:.0} % (floor {:.0} %) | {:.1} % ({:.3} Np) | {} | {} | {:.0} | {} | {:.1} |",
            flags(&prep),
            r.ln_attenuation_to_soma_error_np.median,
            r.ln_attenuation_to_soma_error_np.p95,
            r.ln_attenuation_from_soma_error_np.median,
            r.ln_attenuation_from_soma_error_np.p95,
            pe.median,
            pe.p95,
            e.median,
            e.p95,
            peak_floor,
            r.time_to_peak_error.p95 * 100.0,
            floor * 100.0,
            percent(r.soma_epsp_peak_error_np),
            r.soma_epsp_peak_error_np,
            r.sites,
            r.fine_nodes,
            r.duration_ms,
            r.sites_not_peaked,
            setup,
        ));
    }
    Ok(rows)
}

fn main() {
    let mut dirs: Vec<std::path::PathBuf> = std::env::args().skip(1).map(Into::into).collect();
    if dirs.is_empty() {
        dirs = vec!["tests/data/real".into(), "../shared/cells".into()];
    }
    let mut files: Vec<std::path::PathBuf> = Vec::new();
    for d in &dirs {
        let Ok(rd) = std::fs::read_dir(d) else {
            eprintln!("skipping {}: not a folder", d.display());
            continue;
        };
        for e in rd.flatten() {
            let p = e.path();
            let dup = files.iter().any(|f| f.file_name() == p.file_name());
            if p.extension().is_some_and(|x| x == "swc") && !dup {
                files.push(p);
            }
        }
    }
    files.sort_by_key(|p| p.file_name().map(|s| s.to_owned()));
    let opts = FidelityOptions::default();
    println!(
        "EPSP: alpha current τ = {} ms at each site (by reciprocity: at the soma), {}, dt = {} ms, \
         full cell cut into pieces ≤ {} λ; default membrane {:?}.\n",
        opts.tau_ms,
        opts.method.name(),
        opts.dt(),
        opts.pieces.lambda_fraction,
        Params::default()
    );
    println!(
        "| cell | flags | budget | DC to soma (Np) median / p95 | DC from soma (Np) median / p95 | EPSP peak error median / p95 (floor of one response per compartment) | time-to-peak error p95 (floor of one response per compartment) | soma's own EPSP peak error | sites | fine nodes | run (ms) | not peaked | setup (s) |"
    );
    println!("|---|---|---|---|---|---|---|---|---|---|---|---|---|");
    for f in files {
        match cell(&f, &opts) {
            Ok(rows) => rows.iter().for_each(|r| println!("{r}")),
            Err(e) => println!(
                "| {} | | – | cannot be reduced: {e} | | | | | | | | | |",
                f.file_stem().unwrap().to_string_lossy()
            ),
        }
    }
}
