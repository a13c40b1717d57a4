//! The all-points cable maps on generated cells of 10k, 100k and 1M points, at DC and 100 Hz.
//!
//! Goal: ≤ 30 ns per point per map at DC on one core (a 1M-point cell in ≤ 30 ms), for
//! `CellMaps::compute` (network of exact segment two-ports + both sweeps, giving Z_kk and Z_ks at
//! every point). Also timed: the sweeps alone on a built network, and the voltage map from one
//! site.
//!
//! Two groups: `cable_maps` (wall-clock time) and `cable_maps_cpu` (the thread's CPU time, which
//! on a shared machine leaves out waiting for a core).
//!
//! For scale, a general-purpose solve of ONE column (the soma column, Z_ks) with nalgebra's dense
//! complex LU on the same cell's nodal matrix, where a dense matrix fits (1k and 2k points; a
//! dense 10k matrix is 1.6 GB and its LU ~10^12 operations). The ratio (general solve of one
//! column / our all-points map) is printed from medians of repeated runs.

use criterion::measurement::{Measurement, ValueFormatter};
use criterion::{BenchmarkId, Criterion, Throughput, criterion_group};
use nalgebra::DMatrix;
use num_complex::Complex64 as C64;
use pollard::cable::{CellMaps, Params, PrepOptions, TreeMaps, network_arrays, prepare};
use pollard::morphology::Flat;
use pollard::{Morphology, synth};
use std::hint::black_box;
use std::time::{Duration, Instant};

fn cell(n: usize) -> Flat {
    let text = synth::to_swc(&synth::big_cell(n, 1), &[]);
    let m = Morphology::parse(&text, "big.swc").expect("generated cell parses");
    prepare(&m, &PrepOptions::default()).expect("generated cell is plausible")
}

fn label(n: usize) -> String {
    match n {
        n if n >= 1_000_000 => format!("{}M", n / 1_000_000),
        n => format!("{}k", n / 1000),
    }
}

/// CPU time of the calling thread (clock_gettime(CLOCK_THREAD_CPUTIME_ID), from the C library
/// the standard library already links): on a shared machine it leaves out the time the
/// benchmark spends waiting for a core, which wall-clock time counts.
#[repr(C)]
struct Timespec {
    sec: i64,
    nsec: i64,
}

unsafe extern "C" {
    fn clock_gettime(clock: i32, ts: *mut Timespec) -> i32;
}

fn thread_cpu_ns() -> u64 {
    const CLOCK_THREAD_CPUTIME_ID: i32 = 3; // Linux
    let mut ts = Timespec { sec: 0, nsec: 0 };
    // SAFETY: `ts` is a valid, writable timespec for the duration of the call.
    unsafe { clock_gettime(CLOCK_THREAD_CPUTIME_ID, &mut ts) };
    ts.sec as u64 * 1_000_000_000 + ts.nsec as u64
}

struct CpuTime;
struct CpuFormatter;

impl Measurement for CpuTime {
    type Intermediate = u64;
    type Value = u64;
    fn start(&self) -> u64 {
        thread_cpu_ns()
    }
    fn end(&self, i: u64) -> u64 {
        thread_cpu_ns().saturating_sub(i)
    }
    fn add(&self, a: &u64, b: &u64) -> u64 {
        a + b
    }
    fn zero(&self) -> u64 {
        0
    }
    fn to_f64(&self, v: &u64) -> f64 {
        *v as f64
    }
    fn formatter(&self) -> &dyn ValueFormatter {
        &CpuFormatter
    }
}

impl ValueFormatter for CpuFormatter {
    fn scale_values(&self, typical: f64, values: &mut [f64]) -> &'static str {
        let (div, unit) = if typical < 1e3 {
            (1.0, "ns cpu")
        } else if typical < 1e6 {
            (1e3, "µs cpu")
        } else if typical < 1e9 {
            (1e6, "ms cpu")
        } else {
            (1e9, "s cpu")
        };
        for v in values {
            *v /= div;
        }
        unit
    }
    fn scale_throughputs(&self, _typical: f64, t: &Throughput, values: &mut [f64]) -> &'static str {
        let per = match *t {
            Throughput::Elements(e) => e as f64,
            _ => 1.0,
        };
        for v in values {
            *v = per * 1e9 / *v;
        }
        "elem/s cpu"
    }
    fn scale_for_machines(&self, _values: &mut [f64]) -> &'static str {
        "ns"
    }
}

fn maps_wall(c: &mut Criterion) {
    maps(c, "cable_maps");
}

fn maps_cpu(c: &mut Criterion<CpuTime>) {
    maps(c, "cable_maps_cpu");
}

fn maps<M: Measurement>(c: &mut Criterion<M>, name: &str) {
    let p = Params::default();
    let mut g = c.benchmark_group(name);
    g.sample_size(20);
    g.measurement_time(Duration::from_secs(8));
    for n in [10_000, 100_000, 1_000_000] {
        let fl = cell(n);
        for f in [0.0, 100.0] {
            let name = if f == 0.0 { "dc" } else { "100hz" };
            g.bench_with_input(
                BenchmarkId::new(format!("compute_{name}"), label(n)),
                &fl,
                |b, fl| b.iter(|| CellMaps::compute(black_box(fl), &p, f).map(|m| m.len())),
            );
        }
        // the sweeps alone, on a built network
        let (gd, sd) = network_arrays::<f64>(&fl, &p, 0.0).expect("radii are set");
        g.bench_function(BenchmarkId::new("sweeps_dc", label(n)), |b| {
            b.iter(|| TreeMaps::new(black_box(&fl.parent), &gd, &sd).len())
        });
        let (gc, sc) = network_arrays::<C64>(&fl, &p, 100.0).expect("radii are set");
        g.bench_function(BenchmarkId::new("sweeps_100hz", label(n)), |b| {
            b.iter(|| TreeMaps::new(black_box(&fl.parent), &gc, &sc).len())
        });
        let m = CellMaps::compute(&fl, &p, 0.0).expect("maps");
        let j = fl.len() - 1;
        g.bench_function(BenchmarkId::new("site_ratio_dc", label(n)), |b| {
            b.iter(|| m.site_ratio_abs(black_box(j)).map(|v| v.len()))
        });
    }
    g.finish();
}

/// Dense nodal admittance matrix of the cell's network (the same network as the maps).
fn dense(fl: &Flat, p: &Params, f: f64) -> DMatrix<C64> {
    let (g, s) = network_arrays::<C64>(fl, p, f).expect("radii are set");
    let n = fl.len();
    let mut y = DMatrix::<C64>::zeros(n, n);
    for k in 0..n {
        y[(k, k)] += s[k];
        if k > 0 {
            let q = fl.parent[k] as usize;
            y[(k, k)] += g[k];
            y[(q, q)] += g[k];
            y[(k, q)] -= g[k];
            y[(q, k)] -= g[k];
        }
    }
    y
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Is a name filter given on the command line that leaves out the dense comparison?
fn dense_filtered_out() -> bool {
    let filters: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with('-') && a.parse::<f64>().is_err())
        .collect();
    !filters.is_empty() && !filters.iter().any(|f| f.contains("dense"))
}

fn general_solve(c: &mut Criterion) {
    if dense_filtered_out() {
        return;
    }
    let p = Params::default();
    let f = 100.0;
    let mut g = c.benchmark_group("cable_vs_dense_lu");
    g.sample_size(10);
    g.measurement_time(Duration::from_secs(10));
    for n in [1_000, 2_000] {
        let fl = cell(n);
        let y = dense(&fl, &p, f);
        let mut e0 = DMatrix::<C64>::zeros(fl.len(), 1);
        e0[(0, 0)] = C64::new(1.0, 0.0);
        let solve = || {
            y.clone()
                .lu()
                .solve(&e0)
                .map(|z| z[(fl.len() - 1, 0)])
                .expect("nonsingular")
        };
        // the two answers agree (the soma column)
        let maps = CellMaps::compute(&fl, &p, f).expect("maps");
        let z = solve();
        let exact = maps.z_soma(fl.len() - 1);
        assert!((z - exact).norm() < 1e-8 * exact.norm(), "{z} vs {exact}");
        g.bench_function(
            BenchmarkId::new("nalgebra_dense_lu_one_column", label(n)),
            |b| b.iter(&solve),
        );
        g.bench_function(BenchmarkId::new("all_points_maps", label(n)), |b| {
            b.iter(|| CellMaps::compute(black_box(&fl), &p, f).map(|m| m.len()))
        });
        let time = |run: &dyn Fn(), reps: usize| {
            median(
                (0..reps)
                    .map(|_| {
                        let t = Instant::now();
                        run();
                        t.elapsed().as_secs_f64()
                    })
                    .collect(),
            )
        };
        let t_lu = time(
            &|| {
                black_box(solve());
            },
            3,
        );
        let t_maps = time(
            &|| {
                black_box(CellMaps::compute(&fl, &p, f).map(|m| m.len()).ok());
            },
            51,
        );
        println!(
            "cable_vs_dense_lu/{}: nalgebra dense LU, one column {:.3} ms; all-points maps {:.4} ms; ratio {:.0}×",
            label(n),
            t_lu * 1e3,
            t_maps * 1e3,
            t_lu / t_maps
        );
    }
    g.finish();
}

criterion_group!(benches, maps_wall, general_solve);
criterion_group! {
    name = cpu_benches;
    config = Criterion::default().with_measurement(CpuTime);
    targets = maps_cpu
}

/// With `POLLARD_WRITE_CELL=path`, writes the benchmark's 1,000,000-point cell
/// (`synth::big_cell(1_000_000, 1)`) to `path` and exits: benches/peer_cable.sh uses it for the
/// end-to-end timing against the numpy/scipy peer.
fn main() {
    if let Some(path) = std::env::var_os("POLLARD_WRITE_CELL") {
        let text = synth::to_swc(&synth::big_cell(1_000_000, 1), &["pollard benchmark cell"]);
        pollard::export::write_atomic(path.as_ref(), text.as_bytes(), &[]).expect("cell written");
        return;
    }
    benches();
    cpu_benches();
    Criterion::default().configure_from_args().final_summary();
}
