//! Response traces for one injection point: soma and injection-point voltage over time, full cell
//! and reduced tree, for a current waveform or a conductance synapse there (what `pollard trace`
//! writes and the app can plot), and the per-site table (the scored sites) as CSV.

use super::{FidelityError, GROWTH_RATIO, SiteFidelity};
use crate::morphology::{Morphology, NONE};
use crate::reduce::{ReducedTree, Reducer};
use crate::transient::{
    Drive, Growth, Method, NodeSplit, PieceRule, RcNetwork, RunOptions, Stop, Synapse, Waveform,
    fine_network, simulate,
};

/// What is injected at the injection point.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Input {
    Current { waveform: Waveform },
    Synapse { synapse: Synapse },
}

/// An injection point named by the user.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SiteRef {
    /// An SWC id of a point of the kept cell.
    SwcId(i64),
    /// A position (µm), snapped to the nearest point of the kept cell.
    Position([f64; 3]),
}

/// How long and how finely to integrate the traces.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct TraceOptions {
    /// The run's length (ms); with `until_peaked`, its longest.
    pub duration_ms: f64,
    pub dt_ms: f64,
    pub method: Method,
    pub pieces: PieceRule,
    /// `None`: exactly `duration_ms` at the fixed step `dt_ms`. `Some`: the run ends once every
    /// node of its network has passed its peak, and its step grows in the slow tail, as the
    /// fidelity report's runs do.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub until_peaked: Option<UntilPeaked>,
}

/// A run that lasts until the responses have peaked (see [`TraceOptions::until_peaked`]).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct UntilPeaked {
    /// The shortest run (ms), even when everything has peaked sooner.
    pub min_ms: f64,
    /// From this time on (ms; once a brief input is over) the step grows towards
    /// [`GROWTH_RATIO`] × t.
    pub grow_after_ms: f64,
}

impl Default for TraceOptions {
    fn default() -> Self {
        TraceOptions {
            duration_ms: 50.0,
            dt_ms: 0.025,
            method: Method::CrankNicolson,
            pieces: PieceRule::default(),
            until_peaked: None,
        }
    }
}

/// Soma and injection-point voltage (mV, relative to rest) over time, full cell and reduced tree.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Traces {
    /// Morphology point of the injection point.
    pub point: u32,
    pub swc_id: Option<i64>,
    /// The injection point's compartment in the reduced tree (the larger part of its input
    /// when split).
    pub compartment: u32,
    /// The part of the input the reduced tree gives a neighbouring compartment, if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub split: Option<crate::reduce::Split>,
    pub times_ms: Vec<f64>,
    pub soma_full_mv: Vec<f64>,
    pub injection_point_full_mv: Vec<f64>,
    pub soma_reduced_mv: Vec<f64>,
    pub injection_point_reduced_mv: Vec<f64>,
}

impl Traces {
    /// |ln(peak_reduced/peak_full)| of the soma traces (Np): the largest |V| of each.
    pub fn soma_peak_error_np(&self) -> f64 {
        let peak = |v: &[f64]| v.iter().fold(0.0f64, |m, x| m.max(x.abs()));
        (peak(&self.soma_reduced_mv) / peak(&self.soma_full_mv))
            .ln()
            .abs()
    }

    /// The traces as CSV: one row per time.
    pub fn to_csv(&self) -> String {
        let mut s = String::from(
            "time_ms,soma_full_mv,injection_point_full_mv,soma_reduced_mv,injection_point_reduced_mv\n",
        );
        for i in 0..self.times_ms.len() {
            s.push_str(&format!(
                "{:?},{:?},{:?},{:?},{:?}\n",
                self.times_ms[i],
                self.soma_full_mv[i],
                self.injection_point_full_mv[i],
                self.soma_reduced_mv[i],
                self.injection_point_reduced_mv[i]
            ));
        }
        s
    }
}

/// The morphology point a user's injection point names, within the reducer's kept cell.
pub fn resolve_site(
    m: &Morphology,
    reducer: &Reducer,
    site: SiteRef,
) -> Result<u32, FidelityError> {
    let kept = reducer.kept_flat();
    match site {
        SiteRef::SwcId(id) => {
            let i = m
                .points
                .iter()
                .position(|p| p.id == id)
                .ok_or(FidelityError::NoSuchSite { id })?;
            match kept.point_node.get(i) {
                Some(&k) if k != NONE => Ok(i as u32),
                _ => Err(FidelityError::SiteLeftOut { id }),
            }
        }
        SiteRef::Position(p) => {
            // nearest kept node (brute force, one pass)
            let mut best = (f64::INFINITY, 0usize);
            for (k, q) in kept.pos.iter().enumerate() {
                let d = (q[0] - p[0]).powi(2) + (q[1] - p[1]).powi(2) + (q[2] - p[2]).powi(2);
                if d < best.0 {
                    best = (d, k);
                }
            }
            Ok(kept.node_point[best.1])
        }
    }
}

/// One network's soma and injection-point voltage (mV, relative to rest) over time.
#[derive(Debug, Clone, PartialEq)]
pub struct SideTraces {
    pub times_ms: Vec<f64>,
    pub soma_mv: Vec<f64>,
    pub injection_point_mv: Vec<f64>,
}

impl SideTraces {
    /// The soma trace's largest |V| (mV) and its time (ms), the first sample if all are 0.
    pub fn soma_peak(&self) -> (f64, f64) {
        let (i, v) = self.soma_peak_sample();
        (v, self.times_ms.get(i).copied().unwrap_or(0.0))
    }

    /// True when the soma trace has a peak inside the run: its largest |V| is not 0 and is not
    /// the last sample (a trace still rising at the end has no peak to compare).
    pub fn soma_peaked(&self) -> bool {
        let (i, v) = self.soma_peak_sample();
        v != 0.0 && i + 1 < self.soma_mv.len()
    }

    /// The end of the run (ms).
    pub fn end_ms(&self) -> f64 {
        self.times_ms.last().copied().unwrap_or(0.0)
    }

    /// Index and value of the soma trace's first largest |V| (0, 0.0 when all are 0).
    fn soma_peak_sample(&self) -> (usize, f64) {
        let mut best = (0, 0.0f64);
        for (i, v) in self.soma_mv.iter().enumerate() {
            if v.abs() > best.1.abs() {
                best = (i, *v);
            }
        }
        best
    }
}

fn run(
    net: &RcNetwork,
    node: usize,
    split: Option<NodeSplit>,
    input: &Input,
    opts: &TraceOptions,
) -> Result<SideTraces, FidelityError> {
    let (stop, growth) = match opts.until_peaked {
        None => (
            Stop::At {
                duration_ms: opts.duration_ms,
            },
            None,
        ),
        Some(u) => (
            Stop::AllPeaked {
                min_ms: u.min_ms.min(opts.duration_ms),
                max_ms: opts.duration_ms,
            },
            Some(Growth {
                after_ms: u.grow_after_ms,
                ratio: GROWTH_RATIO,
            }),
        ),
    };
    let run_opts = RunOptions {
        dt_ms: opts.dt_ms,
        method: opts.method,
        stop,
        // the stop on peaks watches every node's running peak
        track_peaks: opts.until_peaked.is_some(),
        growth,
    };
    let drive = match *input {
        Input::Current { waveform } => Drive::Current {
            node,
            waveform,
            split,
        },
        Input::Synapse { synapse } => Drive::Synapse {
            node,
            synapse,
            split,
        },
    };
    // an input on a link reads the point's own voltage (see `reduce::Split`)
    let r = simulate(net, &drive, &[0], &run_opts)?;
    let soma_mv = r.traces.into_iter().next().unwrap_or_default();
    let injection_point_mv = r.input_point_mv;
    Ok(SideTraces {
        times_ms: r.times_ms,
        soma_mv,
        injection_point_mv,
    })
}

/// The full cell's half of [`response_traces`]: its fine network driven at morphology point
/// `point` (the expensive half; it does not depend on the budget).
pub fn full_cell_traces(
    reducer: &Reducer,
    point: u32,
    input: &Input,
    opts: &TraceOptions,
) -> Result<SideTraces, FidelityError> {
    let kept = reducer.kept_flat();
    let k = kept.point_node.get(point as usize).copied().unwrap_or(NONE);
    if k == NONE {
        return Err(FidelityError::Mismatch {
            what: "the injection point is not a point of the reduced cell",
        });
    }
    let fine = fine_network(kept, reducer.params(), opts.pieces)?;
    run(
        &fine.net,
        fine.node_of[k as usize] as usize,
        None,
        input,
        opts,
    )
}

/// The reduced tree's half of [`response_traces`]: `tree` driven at the compartment that
/// serves morphology point `point` (split with a neighbour when the point's input is). Returns
/// the compartment too.
pub fn reduced_tree_traces(
    tree: &ReducedTree,
    point: u32,
    input: &Input,
    opts: &TraceOptions,
) -> Result<(u32, SideTraces), FidelityError> {
    let c = tree
        .point_compartment
        .get(point as usize)
        .copied()
        .unwrap_or(NONE);
    if c == NONE || c as usize >= tree.len() {
        return Err(FidelityError::Mismatch {
            what: "the injection point is not a point of the reduced cell",
        });
    }
    let net = RcNetwork::from_reduced(tree);
    let split = tree.point_split(point as usize).map(|s| NodeSplit {
        node: s.compartment as usize,
        weight: s.weight,
    });
    Ok((c, run(&net, c as usize, split, input, opts)?))
}

/// Soma and injection-point traces for `input` at morphology point `point` (see [`resolve_site`]): the
/// full cell's fine network and `tree`, integrated over the same times.
pub fn response_traces(
    reducer: &Reducer,
    tree: &ReducedTree,
    point: u32,
    input: &Input,
    opts: &TraceOptions,
) -> Result<Traces, FidelityError> {
    let (c, red) = reduced_tree_traces(tree, point, input, opts)?;
    let full = full_cell_traces(reducer, point, input, opts)?;
    Ok(Traces {
        point,
        swc_id: None,
        compartment: c,
        split: tree.point_split(point as usize),
        times_ms: full.times_ms,
        soma_full_mv: full.soma_mv,
        injection_point_full_mv: full.injection_point_mv,
        soma_reduced_mv: red.soma_mv,
        injection_point_reduced_mv: red.injection_point_mv,
    })
}

/// The per-site table as CSV (one row per site, the columns of [`SiteFidelity`]; a site without
/// a split has `split_with` empty and `split_weight` 0).
pub fn sites_csv(rows: &[SiteFidelity]) -> String {
    let mut s = String::from(
        "site,swc_id,swc_line,compartment,split_with,split_weight,epsp_peak_full_mv,epsp_peak_reduced_mv,epsp_peak_error_np,time_to_peak_full_ms,time_to_peak_reduced_ms,time_to_peak_error,attenuation_to_soma_full_np,attenuation_to_soma_reduced_np,attenuation_from_soma_full_np,attenuation_from_soma_reduced_np\n",
    );
    for r in rows {
        s.push_str(&format!(
            "{},{},{},{},{},{:?},{:?},{:?},{:?},{:?},{:?},{:?},{:?},{:?},{:?},{:?}\n",
            r.site,
            r.swc_id.map(|i| i.to_string()).unwrap_or_default(),
            r.swc_line,
            r.compartment,
            r.split
                .map(|s| s.compartment.to_string())
                .unwrap_or_default(),
            r.split.map_or(0.0, |s| s.weight),
            r.epsp_peak_full_mv,
            r.epsp_peak_reduced_mv,
            r.epsp_peak_error_np,
            r.time_to_peak_full_ms,
            r.time_to_peak_reduced_ms,
            r.time_to_peak_error,
            r.ln_attenuation_to_soma_full,
            r.ln_attenuation_to_soma_reduced,
            r.ln_attenuation_from_soma_full,
            r.ln_attenuation_from_soma_reduced
        ));
    }
    s
}
