//! How well a reduced tree behaves like the cell, per synapse site: the soma EPSP for a brief
//! current at the site (peak and time to peak, full cell vs reduced tree) and the DC log
//! attenuation to and from the soma.
//!
//! By reciprocity of a passive network (the conductance and capacitance matrices are
//! symmetric), the soma voltage for a current at k equals the voltage at k for the same current
//! at the soma. So ONE simulation of each network, with the current at the soma and every
//! node's peak tracked ([`crate::transient`]), gives every site's EPSP. The full cell's run is
//! the expensive part: [`Fidelity::new`] does it once per reducer; [`Fidelity::report`] then
//! costs one run of the (small) reduced tree.

mod budgets;
mod polish;
mod serve;
mod split;
mod traces;
pub use budgets::{BudgetFidelity, budgets_csv, default_budgets};
pub use polish::{
    POLISH_ITERATIONS, POLISH_MAX_COMPARTMENTS, PolishSummary, SPLIT_MAX_COMPARTMENTS,
};

pub use traces::{
    Input, SideTraces, SiteRef, TraceOptions, Traces, UntilPeaked, full_cell_traces,
    reduced_tree_traces, resolve_site, response_traces, sites_csv,
};

use crate::cable::{CableError, network_arrays};
use crate::morphology::{Morphology, NONE};
use crate::reduce::{ReducedTree, Reducer};
use crate::transient::{
    Drive, Growth, Method, PieceRule, RcNetwork, RunOptions, Stop, TransientError, Waveform,
    fine_network, simulate,
};

/// Why a fidelity report cannot be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FidelityError {
    #[error(transparent)]
    Transient(#[from] TransientError),
    #[error(transparent)]
    Cable(#[from] CableError),
    #[error("the reduced tree is not from this reducer ({what})")]
    Mismatch { what: &'static str },
    #[error("there is no point with SWC id {id}")]
    NoSuchSite { id: i64 },
    #[error("SWC id {id} is not in the reduced cell (another tree, or left out by --types)")]
    SiteLeftOut { id: i64 },
}

/// The test input and the integration of a fidelity report.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct FidelityOptions {
    /// Time constant τ of the alpha current (t/τ)·e^(1−t/τ) (ms); default 0.5.
    pub tau_ms: f64,
    /// Peak of the alpha current (pA); default 10 (everything is linear in it).
    pub peak_pa: f64,
    /// Time step (ms); `None` (absent in JSON): τ/20.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dt_ms: Option<f64>,
    /// Fixed duration (ms); `None` (absent in JSON): each run lasts until every node has passed
    /// its peak (at least 3τ), at most `max_duration_ms`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub duration_ms: Option<f64>,
    /// Longest run when the duration is automatic (ms); default 500.
    pub max_duration_ms: f64,
    /// How finely the full cell's segments are cut.
    pub pieces: PieceRule,
    pub method: Method,
}

/// The time step grows with t from this many τ of the alpha current on.
pub const GROW_AFTER_TAUS: f64 = 10.0;
/// … towards this fraction of t (tests/transient_closed_forms.rs: peaks and their times within
/// 0.3 % of a fixed step's).
pub const GROWTH_RATIO: f64 = 0.02;

impl Default for FidelityOptions {
    fn default() -> Self {
        FidelityOptions {
            tau_ms: 0.5,
            peak_pa: 10.0,
            dt_ms: None,
            duration_ms: None,
            max_duration_ms: 500.0,
            pieces: PieceRule::default(),
            method: Method::CrankNicolson,
        }
    }
}

impl FidelityOptions {
    /// The time step actually used (ms).
    pub fn dt(&self) -> f64 {
        self.dt_ms.unwrap_or(self.tau_ms / 20.0)
    }

    fn run_options(&self) -> RunOptions {
        RunOptions {
            dt_ms: self.dt(),
            method: self.method,
            stop: match self.duration_ms {
                Some(d) => Stop::At { duration_ms: d },
                None => Stop::AllPeaked {
                    min_ms: (3.0 * self.tau_ms).min(self.max_duration_ms),
                    max_ms: self.max_duration_ms,
                },
            },
            track_peaks: true,
            // once the input is over (its alpha current is below 0.2 % of its peak after 10τ)
            // the step grows towards 2 % of t: the slow tail at a constant relative resolution
            growth: Some(Growth {
                after_ms: GROW_AFTER_TAUS * self.tau_ms,
                ratio: GROWTH_RATIO,
            }),
        }
    }

    fn drive(&self) -> Drive {
        Drive::Current {
            node: 0,
            waveform: Waveform::Alpha {
                tau_ms: self.tau_ms,
                peak_pa: self.peak_pa,
            },
            split: None,
        }
    }

    /// Checks every value (the run checks the rest: dt, durations, the waveform).
    pub fn validate(&self) -> Result<(), FidelityError> {
        let range = |name, value: f64, lo, hi| {
            if value.is_finite() && value >= lo && value <= hi {
                Ok(())
            } else {
                Err(FidelityError::Transient(TransientError::OptionRange {
                    name,
                    value,
                    lo,
                    hi,
                }))
            }
        };
        range("EPSP time constant (ms)", self.tau_ms, 1e-3, 1e3)?;
        range("EPSP current (pA)", self.peak_pa, 1e-6, 1e9)?;
        range("longest run (ms)", self.max_duration_ms, 1e-3, 1e6)?;
        if let Some(dt) = self.dt_ms {
            range("time step (ms)", dt, 1e-6, self.tau_ms)?;
        }
        if let Some(d) = self.duration_ms {
            range("duration (ms)", d, self.dt(), 1e6)?;
        }
        Ok(())
    }
}

/// The full cell's side of every site, computed once per reducer.
#[derive(Debug, Clone)]
pub struct Fidelity {
    opts: FidelityOptions,
    /// Per site: the soma EPSP peak (mV) and time to peak (ms) for the alpha current at the site.
    peak: Vec<f64>,
    ttp: Vec<f64>,
    soma_peak: f64,
    soma_ttp: f64,
    /// Per site: DC log attenuation to and from the soma (Np).
    ln_to: Vec<f64>,
    ln_from: Vec<f64>,
    /// Per site: morphology point and SWC line.
    point: Vec<u32>,
    /// Per site: the membrane area its point carries in the reduction (µm²).
    area: Vec<f64>,
    line: Vec<usize>,
    fine_nodes: usize,
    duration_ms: f64,
    not_peaked: usize,
    max_compartments: usize,
    /// The reducer's capacitance rule (`Timed` trees are polished here).
    rule: crate::reduce::CapacitanceRule,
    split_inputs: bool,
}

/// One site's numbers (a row of the per-site table).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SiteFidelity {
    /// Index into [`Reducer::sites`].
    pub site: usize,
    /// Morphology point (index into `Morphology::points`).
    pub point: u32,
    /// SWC id of the point (when the morphology was given).
    pub swc_id: Option<i64>,
    pub swc_line: usize,
    /// The compartment taking the site's input (the larger part of it when split).
    pub compartment: u32,
    /// The part of the site's input given to a neighbouring compartment, if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub split: Option<crate::reduce::Split>,
    pub epsp_peak_full_mv: f64,
    pub epsp_peak_reduced_mv: f64,
    /// |ln(peak_reduced/peak_full)| (Np).
    pub epsp_peak_error_np: f64,
    pub time_to_peak_full_ms: f64,
    pub time_to_peak_reduced_ms: f64,
    /// |ttp_reduced − ttp_full|/ttp_full.
    pub time_to_peak_error: f64,
    /// DC log attenuation to the soma ln(Z_kk/Z_k0) (Np), site in the full cell and its
    /// compartment (or split input) in the reduced tree.
    #[serde(rename = "attenuation_to_soma_full_np")]
    pub ln_attenuation_to_soma_full: f64,
    #[serde(rename = "attenuation_to_soma_reduced_np")]
    pub ln_attenuation_to_soma_reduced: f64,
    /// DC log attenuation from the soma ln(Z_00/Z_0k) (Np).
    #[serde(rename = "attenuation_from_soma_full_np")]
    pub ln_attenuation_from_soma_full: f64,
    #[serde(rename = "attenuation_from_soma_reduced_np")]
    pub ln_attenuation_from_soma_reduced: f64,
}

/// Median, 95th percentile (nearest rank) and largest value of an error over the sites.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct ErrorStats {
    pub median: f64,
    pub p95: f64,
    pub max: f64,
}

impl ErrorStats {
    /// Of the values given (0s when there are none); nearest-rank quantiles (common practice,
    /// no source).
    pub fn of(mut v: Vec<f64>) -> ErrorStats {
        if v.is_empty() {
            return ErrorStats::default();
        }
        v.sort_by(f64::total_cmp);
        let q = |f: f64| v[((f * v.len() as f64).ceil() as usize).clamp(1, v.len()) - 1];
        ErrorStats {
            median: q(0.5),
            p95: q(0.95),
            max: v[v.len() - 1],
        }
    }

    /// The same as percentages e^x − 1 (for errors in nepers).
    pub fn percent(&self) -> ErrorStats {
        ErrorStats {
            median: percent(self.median),
            p95: percent(self.p95),
            max: percent(self.max),
        }
    }
}

/// An error in nepers as a percentage: (e^|x| − 1)·100.
pub fn percent(np: f64) -> f64 {
    np.abs().exp_m1() * 100.0
}

/// One of the worst sites.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WorstSite {
    pub swc_id: Option<i64>,
    pub swc_line: usize,
    pub compartment: u32,
    pub epsp_peak_error_np: f64,
}

/// The summary over the sites.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct FidelityReport {
    pub sites: usize,
    pub epsp_tau_ms: f64,
    pub dt_ms: f64,
    pub method: Method,
    /// Length of the full cell's run (ms).
    pub duration_ms: f64,
    /// Nodes of the full cell's fine network.
    pub fine_nodes: usize,
    pub piece_lambda_fraction: f64,
    /// Sites whose EPSP was still rising when a run stopped (should be 0).
    pub sites_not_peaked: usize,
    /// Soma EPSP peak error for the alpha current at each site, |ln(red/full)| (Np).
    pub epsp_peak_error_np: ErrorStats,
    /// The same as percentages.
    pub epsp_peak_error_percent: ErrorStats,
    /// |ttp_red − ttp_full|/ttp_full.
    pub time_to_peak_error: ErrorStats,
    /// DC |ln A_site − ln A_compartment| to the soma (Np).
    #[serde(rename = "attenuation_to_soma_error_np")]
    pub ln_attenuation_to_soma_error_np: ErrorStats,
    /// DC |ln(Z_00/Z_0k) full − reduced| from the soma (Np).
    #[serde(rename = "attenuation_from_soma_error_np")]
    pub ln_attenuation_from_soma_error_np: ErrorStats,
    /// The soma's own EPSP (current at the soma, soma voltage): peak error (Np) and percent.
    pub soma_epsp_peak_error_np: f64,
    pub soma_epsp_peak_error_percent: f64,
    pub soma_time_to_peak_error: f64,
    /// The five sites with the largest EPSP peak error.
    pub worst_sites: Vec<WorstSite>,
}

/// DC log attenuation from the soma ln(Z_00/Z_0k) of every node of a parents-first network
/// (one tree sweep, Hines 1984; Koch & Poggio 1985).
fn ln_from_soma(parent: &[u32], g: &[f64], shunt: &[f64]) -> Vec<f64> {
    let z = crate::cable::solve::TreeFactor::new(parent, g, shunt).soma_transfer();
    z.iter().map(|&zk| (z[0] / zk).ln()).collect()
}

impl Fidelity {
    /// Simulates the reducer's full (kept) cell once and keeps every site's numbers.
    pub fn new(reducer: &Reducer, opts: &FidelityOptions) -> Result<Fidelity, FidelityError> {
        opts.validate()?;
        let kept = reducer.kept_flat();
        let params = reducer.params();
        let fine = fine_network(kept, params, opts.pieces)?;
        let run = simulate(&fine.net, &opts.drive(), &[], &opts.run_options())?;
        let peaks = run.peaks.expect("peaks tracked");
        let (g, shunt) = network_arrays::<f64>(kept, params, 0.0)?;
        let from = ln_from_soma(&kept.parent, &g, &shunt);
        let sites = reducer.sites();
        // SiteInfo.node numbers the caller's cell; the kept cell is reached through the point
        let kept_node: Vec<usize> = sites
            .iter()
            .map(|s| {
                kept.point_node
                    .get(s.point as usize)
                    .copied()
                    .unwrap_or(NONE)
            })
            .map(|k| if k == NONE { usize::MAX } else { k as usize })
            .collect();
        if kept_node.iter().any(|&k| k >= kept.len()) {
            return Err(FidelityError::Mismatch {
                what: "a site outside the kept cell",
            });
        }
        let at = |i: usize| fine.node_of[kept_node[i]] as usize;
        let end = run.times_ms[run.times_ms.len() - 1];
        let n = sites.len();
        let not_peaked = (0..n).filter(|&i| peaks.time_ms[at(i)] >= end).count();
        Ok(Fidelity {
            opts: *opts,
            peak: (0..n).map(|i| peaks.value_mv[at(i)]).collect(),
            ttp: (0..n).map(|i| peaks.time_ms[at(i)]).collect(),
            soma_peak: peaks.value_mv[0],
            soma_ttp: peaks.time_ms[0],
            ln_to: sites.iter().map(|s| s.ln_attenuation_full).collect(),
            ln_from: kept_node.iter().map(|&k| from[k]).collect(),
            point: sites.iter().map(|s| s.point).collect(),
            area: reducer.site_membrane_areas(),
            line: kept_node.iter().map(|&k| kept.line[k]).collect(),
            fine_nodes: fine.net.len(),
            duration_ms: end,
            not_peaked,
            max_compartments: reducer.max_compartments(),
            rule: reducer.options().capacitance,
            split_inputs: reducer.options().split_inputs,
        })
    }

    pub fn options(&self) -> &FidelityOptions {
        &self.opts
    }

    /// Nodes of the full cell's fine network.
    pub fn fine_nodes(&self) -> usize {
        self.fine_nodes
    }

    /// Every site's numbers for `tree` (one run of the reduced tree). With `m` (the morphology
    /// the reducer was built from) the rows carry SWC ids.
    pub fn sites(
        &self,
        tree: &ReducedTree,
        m: Option<&Morphology>,
    ) -> Result<(Vec<SiteFidelity>, ReducedRun), FidelityError> {
        if tree.site_compartment.len() != self.peak.len() {
            return Err(FidelityError::Mismatch {
                what: "number of sites",
            });
        }
        if tree.len() > self.max_compartments {
            return Err(FidelityError::Mismatch {
                what: "more compartments than the maximal tree",
            });
        }
        let net = RcNetwork::from_reduced(tree);
        // split inputs answer with the mix of their two compartments' responses: one run with
        // every node recorded gives those and the engine's per-node peaks alike
        let (mixes, run_peaks) = match tree.site_split.iter().any(Option::is_some) {
            true => (Some(split::Mixes::new(self, tree)?), None),
            false => {
                let run = simulate(&net, &self.opts.drive(), &[], &self.opts.run_options())?;
                (None, run.peaks)
            }
        };
        let peaks = match (&mixes, &run_peaks) {
            (Some(m), _) => &m.responses.peaks,
            (None, p) => p.as_ref().expect("peaks tracked"),
        };
        // a ratio of impedances: the network's own units (nS) will do
        let from = ln_from_soma(&net.parent, &net.g_axial_ns, &net.g_leak_ns);
        let to = tree.ln_attenuation_dc();
        let rows = (0..self.peak.len())
            .map(|i| {
                let c = tree.site_compartment[i] as usize;
                let (pf, tf) = (self.peak[i], self.ttp[i]);
                let red = match (&mixes, tree.site_split(i)) {
                    (Some(mx), Some(sh)) => mx.answer(c, Some(sh)),
                    _ => split::Answer {
                        peak_mv: peaks.value_mv[c],
                        ttp_ms: peaks.time_ms[c],
                        ln_to: to[c],
                        ln_from: from[c],
                    },
                };
                let (pr, tr) = (red.peak_mv, red.ttp_ms);
                SiteFidelity {
                    site: i,
                    point: self.point[i],
                    swc_id: m.and_then(|m| m.points.get(self.point[i] as usize).map(|p| p.id)),
                    swc_line: self.line[i],
                    compartment: c as u32,
                    split: tree.site_split(i),
                    epsp_peak_full_mv: pf,
                    epsp_peak_reduced_mv: pr,
                    epsp_peak_error_np: (pr / pf).ln().abs(),
                    time_to_peak_full_ms: tf,
                    time_to_peak_reduced_ms: tr,
                    time_to_peak_error: (tr - tf).abs() / tf,
                    ln_attenuation_to_soma_full: self.ln_to[i],
                    ln_attenuation_to_soma_reduced: red.ln_to,
                    ln_attenuation_from_soma_full: self.ln_from[i],
                    ln_attenuation_from_soma_reduced: red.ln_from,
                }
            })
            .collect();
        let reduced = ReducedRun {
            soma_peak_mv: peaks.value_mv[0],
            soma_ttp_ms: peaks.time_ms[0],
            not_peaked: peaks.not_peaked,
        };
        Ok((rows, reduced))
    }

    /// The summary for `tree` (see [`FidelityReport`]).
    pub fn report(
        &self,
        tree: &ReducedTree,
        m: Option<&Morphology>,
    ) -> Result<FidelityReport, FidelityError> {
        let (rows, red) = self.sites(tree, m)?;
        let col = |f: &dyn Fn(&SiteFidelity) -> f64| ErrorStats::of(rows.iter().map(f).collect());
        let peak = col(&|r| r.epsp_peak_error_np);
        let mut order: Vec<usize> = (0..rows.len()).collect();
        order.sort_by(|&a, &b| {
            rows[b]
                .epsp_peak_error_np
                .total_cmp(&rows[a].epsp_peak_error_np)
        });
        let soma_np = (red.soma_peak_mv / self.soma_peak).ln().abs();
        Ok(FidelityReport {
            sites: rows.len(),
            epsp_tau_ms: self.opts.tau_ms,
            dt_ms: self.opts.dt(),
            method: self.opts.method,
            duration_ms: self.duration_ms,
            fine_nodes: self.fine_nodes,
            piece_lambda_fraction: self.opts.pieces.lambda_fraction,
            sites_not_peaked: self.not_peaked,
            epsp_peak_error_np: peak,
            epsp_peak_error_percent: peak.percent(),
            time_to_peak_error: col(&|r| r.time_to_peak_error),
            ln_attenuation_to_soma_error_np: col(&|r| {
                (r.ln_attenuation_to_soma_full - r.ln_attenuation_to_soma_reduced).abs()
            }),
            ln_attenuation_from_soma_error_np: col(&|r| {
                (r.ln_attenuation_from_soma_full - r.ln_attenuation_from_soma_reduced).abs()
            }),
            soma_epsp_peak_error_np: soma_np,
            soma_epsp_peak_error_percent: percent(soma_np),
            soma_time_to_peak_error: (red.soma_ttp_ms - self.soma_ttp).abs() / self.soma_ttp,
            worst_sites: order
                .iter()
                .take(5)
                .map(|&i| WorstSite {
                    swc_id: rows[i].swc_id,
                    swc_line: rows[i].swc_line,
                    compartment: rows[i].compartment,
                    epsp_peak_error_np: rows[i].epsp_peak_error_np,
                })
                .collect(),
        })
    }
}

/// The reduced tree's own run: the soma's EPSP for current at the soma.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ReducedRun {
    pub soma_peak_mv: f64,
    pub soma_ttp_ms: f64,
    pub not_peaked: usize,
}

/// The demo cell's reducer (default options and membrane) and its fidelity, for unit tests.
#[cfg(test)]
fn demo_reduction() -> (Reducer, Fidelity) {
    let flat = crate::samples::demo().flatten();
    let red = Reducer::new(&flat, &crate::cable::Params::default(), &Default::default()).unwrap();
    let fid = Fidelity::new(&red, &Default::default()).unwrap();
    (red, fid)
}
