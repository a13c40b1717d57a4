//! Time-domain response of passive compartment networks: the fine network of a whole cell
//! ([`fine_network`]) and any reduced tree ([`RcNetwork::from_reduced`]), driven by a current
//! waveform or a conductance synapse at one node.
//!
//! C·dV/dt = −A·V + I(t), with A the tree Laplacian of the axial conductances plus the leaks
//! (V relative to rest). Backward Euler and Crank–Nicolson (trapezoid; Crank & Nicolson 1947)
//! are both written as one solve with M = C/h + A (h = dt, or dt/2 followed by V ← 2W − V for
//! Crank–Nicolson), so M is factored once per dt in the parents-first order and every step is
//! O(N) (Hines 1984); both are unconditionally stable. A synapse g(t)·(E − V_s) is implicit: its
//! conductance only changes M's diagonal at s, a rank-one change solved with the
//! Sherman–Morrison formula from one extra solve M⁻¹e_s made once (still O(N) per step). An
//! input at a point on the link between two nodes ([`NodeSplit`]: fraction w of the link's
//! resistance R from s) is that point Kron-eliminated (it has no membrane): u = (1 − w)e_s +
//! w·e_k in place of e_s, and the point's voltage V_x = uᵀV + r·I with r = w(1 − w)R. A current
//! gives u·I(t); a synapse g(t)·(E − V_x) gives g/(1 + g·r)·(E − uᵀV)·u, still rank one.
//!
//! Memory is O(N + recorded nodes × steps): chosen nodes' traces are recorded; for every node
//! the running peak and its time are kept, the time refined by a parabola through the three
//! samples around the largest one.

mod network;

pub use network::{FineNetwork, PieceRule, RcNetwork, fine_network};

use crate::cable::CableError;
use crate::cable::solve::TreeFactor;

/// Why a time-domain computation cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TransientError {
    #[error(transparent)]
    Cable(#[from] CableError),
    #[error("the network has no nodes")]
    Empty,
    #[error("network node {node}: {what}")]
    BadNetwork { node: usize, what: &'static str },
    #[error("{name} = {value} is outside the accepted range {lo} to {hi}")]
    OptionRange {
        name: &'static str,
        value: f64,
        lo: f64,
        hi: f64,
    },
    #[error("node {node} is not a node of the network ({len} nodes)")]
    NodeOutOfRange { node: usize, len: usize },
    #[error("{steps} time steps is more than the limit of {limit}; use a larger time step")]
    TooManySteps { steps: f64, limit: usize },
}

fn check(name: &'static str, value: f64, lo: f64, hi: f64) -> Result<(), TransientError> {
    if value.is_finite() && value >= lo && value <= hi {
        Ok(())
    } else {
        Err(TransientError::OptionRange {
            name,
            value,
            lo,
            hi,
        })
    }
}

/// The implicit integration rule.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    /// First order, L-stable.
    BackwardEuler,
    /// Second order (trapezoid), A-stable.
    #[default]
    CrankNicolson,
}

/// A current waveform (pA, time in ms from the start of the run).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Waveform {
    /// I = peak·(t/τ)·e^(1−t/τ): the alpha function, largest (= peak) at t = τ.
    Alpha { tau_ms: f64, peak_pa: f64 },
    /// I = amplitude for t ≥ 0.
    Step { amplitude_pa: f64 },
    /// I = amplitude·sin(2πft).
    Sine { amplitude_pa: f64, freq_hz: f64 },
}

impl Method {
    /// The rule's name for people.
    pub fn name(&self) -> &'static str {
        match self {
            Method::BackwardEuler => "backward Euler",
            Method::CrankNicolson => "Crank–Nicolson",
        }
    }
}

impl Waveform {
    /// The current at time `t_ms` (pA).
    pub fn at(&self, t_ms: f64) -> f64 {
        match *self {
            Waveform::Alpha { tau_ms, peak_pa } => {
                let x = t_ms / tau_ms;
                peak_pa * x * (1.0 - x).exp()
            }
            Waveform::Step { amplitude_pa } => amplitude_pa,
            Waveform::Sine {
                amplitude_pa,
                freq_hz,
            } => amplitude_pa * (2.0 * std::f64::consts::PI * freq_hz * t_ms * 1e-3).sin(),
        }
    }

    fn validate(&self) -> Result<(), TransientError> {
        match *self {
            Waveform::Alpha { tau_ms, peak_pa } => {
                check("alpha time constant (ms)", tau_ms, 1e-4, 1e4)?;
                check("current (pA)", peak_pa, -1e9, 1e9)
            }
            Waveform::Step { amplitude_pa } => check("current (pA)", amplitude_pa, -1e9, 1e9),
            Waveform::Sine {
                amplitude_pa,
                freq_hz,
            } => {
                check("current (pA)", amplitude_pa, -1e9, 1e9)?;
                check("frequency (Hz)", freq_hz, 0.0, 1e6)
            }
        }
    }

    /// +1 when the waveform mostly pushes the voltage up, −1 otherwise.
    fn polarity(&self) -> f64 {
        let a = match *self {
            Waveform::Alpha { peak_pa, .. } => peak_pa,
            Waveform::Step { amplitude_pa } => amplitude_pa,
            Waveform::Sine { amplitude_pa, .. } => amplitude_pa,
        };
        if a < 0.0 { -1.0 } else { 1.0 }
    }
}

/// A conductance synapse: I = g(t)·(E − V), g a difference of exponentials scaled so that its
/// largest value is `g_peak_ns` (an alpha function when the two time constants are equal).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Synapse {
    /// Reversal potential relative to rest (mV).
    pub e_rev_mv: f64,
    pub g_peak_ns: f64,
    pub tau_rise_ms: f64,
    pub tau_decay_ms: f64,
}

impl Synapse {
    /// g(t) (nS): g_peak·(e^(−t/τd) − e^(−t/τr))/(e^(−t*/τd) − e^(−t*/τr)), t* = τr·τd/(τd − τr)
    /// ·ln(τd/τr) the time of the peak; g_peak·(t/τ)·e^(1−t/τ) when τr = τd (common practice,
    /// no source).
    pub fn conductance(&self, t_ms: f64) -> f64 {
        let (r, d) = (
            self.tau_rise_ms.min(self.tau_decay_ms),
            self.tau_rise_ms.max(self.tau_decay_ms),
        );
        if t_ms <= 0.0 {
            return 0.0;
        }
        if (d - r) <= 1e-9 * d {
            let x = t_ms / d;
            return self.g_peak_ns * x * (1.0 - x).exp();
        }
        let tp = r * d / (d - r) * (d / r).ln();
        let norm = (-tp / d).exp() - (-tp / r).exp();
        self.g_peak_ns * ((-t_ms / d).exp() - (-t_ms / r).exp()) / norm
    }

    fn validate(&self) -> Result<(), TransientError> {
        check("reversal potential (mV)", self.e_rev_mv, -1e3, 1e3)?;
        check("peak conductance (nS)", self.g_peak_ns, 0.0, 1e6)?;
        check("rise time constant (ms)", self.tau_rise_ms, 1e-4, 1e4)?;
        check("decay time constant (ms)", self.tau_decay_ms, 1e-4, 1e4)
    }
}

/// What drives the network, and where.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "drive", rename_all = "snake_case")]
pub enum Drive {
    Current {
        node: usize,
        waveform: Waveform,
        #[serde(skip_serializing_if = "Option::is_none")]
        split: Option<NodeSplit>,
    },
    Synapse {
        node: usize,
        synapse: Synapse,
        #[serde(skip_serializing_if = "Option::is_none")]
        split: Option<NodeSplit>,
    },
}

/// A drive's input at a point on the link between its node and `node` (a neighbour in the
/// tree), at fraction `weight` (0 ≤ w ≤ 1) of the link's resistance from the drive's node: by
/// Kron elimination of the point, 1 − w of its current reaches the drive's node and w the
/// neighbour, and the point reads their mix plus w(1 − w)·R times its own current.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct NodeSplit {
    pub node: usize,
    pub weight: f64,
}

impl Drive {
    /// The input vector u as (node, weight) pairs: the drive's node alone, or with its split.
    fn inputs(&self) -> [(usize, f64); 2] {
        let (Drive::Current { node, split, .. } | Drive::Synapse { node, split, .. }) = *self;
        match split {
            Some(s) => [(node, 1.0 - s.weight), (s.node, s.weight)],
            None => [(node, 1.0), (node, 0.0)],
        }
    }

    /// The input point's own series resistance r = w(1 − w)/g_link (GΩ, for nS), 0 without a
    /// split; `None` if the split's two nodes are not joined by a link of `net`.
    fn series_gohm(&self, net: &RcNetwork) -> Option<f64> {
        let (Drive::Current { node, split, .. } | Drive::Synapse { node, split, .. }) = *self;
        let Some(s) = split else { return Some(0.0) };
        let child = crate::cable::solve::link_child(&net.parent, node, s.node)?;
        Some(s.weight * (1.0 - s.weight) / net.g_axial_ns[child])
    }
}

/// When a run stops.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "stop", rename_all = "snake_case")]
pub enum Stop {
    /// After this many ms.
    At { duration_ms: f64 },
    /// Once every node has passed its peak (no node set a new peak for 10 steps), not before
    /// `min_ms`, at the latest at `max_ms`.
    AllPeaked { min_ms: f64, max_ms: f64 },
}

/// How to integrate.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct RunOptions {
    pub dt_ms: f64,
    pub method: Method,
    pub stop: Stop,
    /// Keep every node's running peak and time to peak.
    pub track_peaks: bool,
    /// A step that grows with t in the slow tail after a brief input; `None`: a fixed step.
    pub growth: Option<Growth>,
}

/// From `after_ms` on, the step grows towards `ratio`·t (never below dt), by 25 % per step
/// at most, M refactored at each change: the tail is followed at a constant relative resolution.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Growth {
    pub after_ms: f64,
    pub ratio: f64,
}

/// Most steps one run may take.
pub const MAX_STEPS: usize = 20_000_000;

/// Per-node peaks of a run (the extremum in the drive's direction: the largest V for a
/// depolarising drive, the most negative for a hyperpolarising one).
#[derive(Debug, Clone, PartialEq)]
pub struct Peaks {
    /// Peak voltage per node (mV), refined by the parabola through the 3 samples around it.
    pub value_mv: Vec<f64>,
    /// Time of the peak per node (ms), refined the same way.
    pub time_ms: Vec<f64>,
    /// Nodes whose largest sample is the last one (still rising when the run stopped).
    pub not_peaked: usize,
}

/// What a run gives.
#[derive(Debug, Clone, PartialEq)]
pub struct Response {
    /// Sample times (ms), from 0 (rest) on.
    pub times_ms: Vec<f64>,
    /// One trace (mV) per recorded node, in the order asked.
    pub traces: Vec<Vec<f64>>,
    /// The voltage (mV) at the input point: its node's, or for an input on a link the point's
    /// own (see [`NodeSplit`]).
    pub input_point_mv: Vec<f64>,
    pub peaks: Option<Peaks>,
}

/// The peak of the parabola through samples `v` = (V_{i−1}, V_i, V_i+1) at `times` i−1, i, i+1
/// (V_i the largest sample): (value, time). The sample itself at either end of the run or when
/// the three are not concave.
pub(crate) fn refine_peak(times: &[f64], i: usize, v: [f64; 3]) -> (f64, f64) {
    let (mut dv, mut dt) = (0.0, 0.0);
    if i > 0 && i + 1 < times.len() {
        let (h1, h2) = (times[i] - times[i - 1], times[i + 1] - times[i]);
        let (d1, d2) = ((v[1] - v[0]) / h1, (v[2] - v[1]) / h2);
        let c = (d2 - d1) / (h1 + h2);
        if c < 0.0 {
            let slope = d1 + c * h1;
            dt = (-slope / (2.0 * c)).clamp(-h1, h2);
            dv = slope * dt + c * dt * dt;
        }
    }
    (v[1] + dv, times[i] + dt)
}

/// Running peak of every node: value, step index, and the samples just before and after.
struct PeakTracker {
    sign: f64,
    peak: Vec<f64>,
    idx: Vec<usize>,
    before: Vec<f64>,
    after: Vec<f64>,
}

impl PeakTracker {
    fn new(n: usize, sign: f64) -> PeakTracker {
        PeakTracker {
            sign,
            peak: vec![0.0; n],
            idx: vec![0; n],
            before: vec![0.0; n],
            after: vec![0.0; n],
        }
    }

    /// Finishes step `step` in one pass (see [`finish_step`]) and keeps the peaks. Returns how
    /// many nodes set a new peak.
    fn update(
        &mut self,
        step: usize,
        v: &mut [f64],
        y: &mut [f64],
        c_h: &[f64],
        cn: bool,
    ) -> usize {
        let s = self.sign;
        let mut rising = 0;
        for k in 0..y.len() {
            let vn = if cn { 2.0 * y[k] - v[k] } else { y[k] };
            let x = s * vn;
            if x > self.peak[k] {
                self.peak[k] = x;
                self.idx[k] = step;
                self.before[k] = s * v[k];
                rising += 1;
            } else if self.idx[k] + 1 == step {
                self.after[k] = x;
            }
            v[k] = vn;
            y[k] = c_h[k] * vn;
        }
        rising
    }

    /// Peaks refined by the vertex of the quadratic through the three samples around each
    /// largest one, at their (possibly unequal) times (Newton's divided differences; common
    /// practice, no source).
    fn finish(self, times: &[f64]) -> Peaks {
        let last = times.len() - 1;
        let n = self.peak.len();
        let mut value = vec![0.0; n];
        let mut time = vec![0.0; n];
        let mut not_peaked = 0;
        for k in 0..n {
            let (i, p) = (self.idx[k], self.peak[k]);
            if i == last && last > 0 {
                not_peaked += 1;
            }
            let (v, t) = refine_peak(times, i, [self.before[k], p, self.after[k]]);
            value[k] = self.sign * v;
            time[k] = t;
        }
        Peaks {
            value_mv: value,
            time_ms: time,
            not_peaked,
        }
    }
}

/// Checks a run's inputs; returns its shortest and longest duration (ms) and the input point's
/// series resistance (GΩ).
fn validate_run(
    net: &RcNetwork,
    drive: &Drive,
    record: &[usize],
    opts: &RunOptions,
) -> Result<(f64, f64, f64), TransientError> {
    net.validate()?;
    let n = net.len();
    for k in record.iter().copied().chain(drive.inputs().map(|i| i.0)) {
        if k >= n {
            return Err(TransientError::NodeOutOfRange { node: k, len: n });
        }
    }
    check(
        "part of the input at the second node",
        drive.inputs()[1].1,
        0.0,
        1.0,
    )?;
    let series = drive.series_gohm(net).ok_or(TransientError::BadNetwork {
        node: drive.inputs()[1].0,
        what: "the input's second node is not joined to its first by a link",
    })?;
    match drive {
        Drive::Current { waveform, .. } => waveform.validate()?,
        Drive::Synapse { synapse, .. } => synapse.validate()?,
    }
    check("time step (ms)", opts.dt_ms, 1e-7, 1e3)?;
    let (min_ms, max_ms) = match opts.stop {
        Stop::At { duration_ms } => (duration_ms, duration_ms),
        Stop::AllPeaked { min_ms, max_ms } => (min_ms, max_ms),
    };
    check("duration (ms)", max_ms, 0.0, 1e7)?;
    check("shortest duration (ms)", min_ms, 0.0, max_ms)?;
    if let Some(g) = opts.growth {
        check(
            "start of the growing step (ms)",
            g.after_ms,
            opts.dt_ms,
            1e7,
        )?;
        check("growing step / t", g.ratio, 1e-6, 0.5)?;
    }
    let steps = (max_ms / opts.dt_ms).round();
    if steps > MAX_STEPS as f64 {
        return Err(TransientError::TooManySteps {
            steps,
            limit: MAX_STEPS,
        });
    }
    Ok((min_ms, max_ms, series))
}

/// The end of a step in one pass: the solve's result `y` gives the new voltage (2y − v for
/// Crank–Nicolson, y for backward Euler) into `v`, and `y` becomes the next right-hand side C/h·v.
fn finish_step(v: &mut [f64], y: &mut [f64], c_h: &[f64], cn: bool) {
    for k in 0..y.len() {
        let vn = if cn { 2.0 * y[k] - v[k] } else { y[k] };
        v[k] = vn;
        y[k] = c_h[k] * vn;
    }
}

/// M = C/h + A factored for one dt (h = dt, or dt/2 for Crank–Nicolson), with M⁻¹u for a
/// synapse whose input vector is u.
struct Stepper {
    dt: f64,
    c_h: Vec<f64>,
    lu: TreeFactor<f64>,
    z: Vec<f64>,
    /// The input point's series resistance (GΩ; see [`NodeSplit`]).
    series: f64,
}

impl Stepper {
    fn new(
        net: &RcNetwork,
        dt: f64,
        cn: bool,
        synapse_at: Option<[(usize, f64); 2]>,
        series: f64,
    ) -> Stepper {
        let h = if cn { 0.5 * dt } else { dt };
        let c_h: Vec<f64> = net.cap_pf.iter().map(|c| c / h).collect();
        let diag: Vec<f64> = c_h.iter().zip(&net.g_leak_ns).map(|(c, g)| c + g).collect();
        let lu = TreeFactor::new(&net.parent, &net.g_axial_ns, &diag);
        // z = M⁻¹u for the synapse's rank-one update (Sherman & Morrison 1950)
        let z = match synapse_at {
            Some(u) => {
                let mut z = vec![0.0; net.len()];
                for (k, w) in u {
                    z[k] += w;
                }
                lu.solve_in_place(&mut z);
                z
            }
            None => Vec::new(),
        };
        Stepper {
            dt,
            c_h,
            lu,
            z,
            series,
        }
    }

    /// One step from t0 to t1: `x` holds C/h·v on entry and the solve of
    /// (M + γ u uᵀ)x = C/h·v + input on return (u: the drive's input vector).
    fn solve(&self, drive: &Drive, cn: bool, x: &mut [f64], t0: f64, t1: f64) {
        let u = drive.inputs();
        match *drive {
            Drive::Current { waveform, .. } => {
                let i = if cn {
                    0.5 * (waveform.at(t0) + waveform.at(t1))
                } else {
                    waveform.at(t1)
                };
                for (k, w) in u {
                    x[k] += w * i;
                }
                self.lu.solve_in_place(x);
            }
            Drive::Synapse { synapse, .. } => {
                let g = |t: f64| self.effective(synapse.conductance(t));
                let gam = if cn { 0.5 * (g(t0) + g(t1)) } else { g(t1) };
                for (k, w) in u {
                    x[k] += w * gam * synapse.e_rev_mv;
                }
                self.lu.solve_in_place(x);
                // (M + γ u uᵀ)⁻¹b = y − γ·uᵀy/(1 + γ·uᵀz)·z
                let dot = |v: &[f64]| u.iter().map(|&(k, w)| w * v[k]).sum::<f64>();
                let f = gam * dot(x) / (1.0 + gam * dot(&self.z));
                for (xk, zk) in x.iter_mut().zip(&self.z) {
                    *xk -= f * zk;
                }
            }
        }
    }

    /// A synapse's conductance as seen through the input point's series resistance r:
    /// g/(1 + g·r) (two conductances in series).
    fn effective(&self, g: f64) -> f64 {
        g / (1.0 + g * self.series)
    }

    /// The input point's voltage at t from the nodes' voltages `v`: uᵀV + r·I(t).
    fn input_point(&self, drive: &Drive, v: &[f64], t: f64) -> f64 {
        let mix: f64 = drive.inputs().iter().map(|&(k, w)| w * v[k]).sum();
        let current = match *drive {
            Drive::Current { waveform, .. } => waveform.at(t),
            Drive::Synapse { synapse, .. } => {
                self.effective(synapse.conductance(t)) * (synapse.e_rev_mv - mix)
            }
        };
        mix + self.series * current
    }
}

/// Integrates the network from rest (V = 0) under `drive`, recording the nodes in `record`
/// (see the module documentation for the scheme).
pub fn simulate(
    net: &RcNetwork,
    drive: &Drive,
    record: &[usize],
    opts: &RunOptions,
) -> Result<Response, TransientError> {
    let (min_ms, max_ms, series) = validate_run(net, drive, record, opts)?;
    let n = net.len();
    let dt0 = opts.dt_ms;
    let cn = opts.method == Method::CrankNicolson;
    let syn = match drive {
        Drive::Synapse { .. } => Some(drive.inputs()),
        Drive::Current { .. } => None,
    };
    let sign = match drive {
        Drive::Current { waveform, .. } => waveform.polarity(),
        Drive::Synapse { synapse, .. } if synapse.e_rev_mv < 0.0 => -1.0,
        Drive::Synapse { .. } => 1.0,
    };
    let mut st = Stepper::new(net, dt0, cn, syn, series);
    let fixed_steps = (max_ms / dt0).round() as usize;
    // v: the voltage; y: C/h·v (the next right-hand side), then the solve's result
    let mut v = vec![0.0; n];
    let mut y = vec![0.0; n];
    let mut tracker = opts.track_peaks.then(|| PeakTracker::new(n, sign));
    let mut times = vec![0.0];
    let mut traces: Vec<Vec<f64>> = record.iter().map(|_| vec![0.0]).collect();
    let mut input_point_mv = vec![st.input_point(drive, &v, 0.0)];
    let mut quiet = 0usize;
    let mut step = 0usize;
    loop {
        let t0 = times[step];
        let t1 = match opts.growth {
            None if step >= fixed_steps => break,
            // a fixed step: t_n = n·dt exactly
            None => (step + 1) as f64 * dt0,
            Some(_) if t0 >= max_ms - 1e-9 * dt0 => break,
            Some(g) => {
                if t0 >= g.after_ms && g.ratio * t0 >= 1.25 * st.dt {
                    st = Stepper::new(net, 1.25 * st.dt, cn, syn, series);
                    for k in 0..n {
                        y[k] = st.c_h[k] * v[k];
                    }
                }
                t0 + st.dt
            }
        };
        st.solve(drive, cn, &mut y, t0, t1);
        step += 1;
        let rising = match tracker.as_mut() {
            Some(tr) => tr.update(step, &mut v, &mut y, &st.c_h, cn),
            None => {
                finish_step(&mut v, &mut y, &st.c_h, cn);
                0
            }
        };
        times.push(t1);
        for (tr, &k) in traces.iter_mut().zip(record) {
            tr.push(v[k]);
        }
        input_point_mv.push(st.input_point(drive, &v, t1));
        quiet = if rising == 0 { quiet + 1 } else { 0 };
        if tracker.is_some()
            && matches!(opts.stop, Stop::AllPeaked { .. })
            && t1 >= min_ms
            && quiet >= 10
        {
            break;
        }
    }
    let peaks = tracker.map(|t| t.finish(&times));
    Ok(Response {
        times_ms: times,
        traces,
        input_point_mv,
        peaks,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::morphology::NONE;

    #[test]
    fn bad_options_are_refused_by_name() {
        let net = RcNetwork {
            parent: vec![NONE],
            g_axial_ns: vec![0.0],
            g_leak_ns: vec![1.0],
            cap_pf: vec![10.0],
        };
        let drive = Drive::Current {
            node: 0,
            waveform: Waveform::Step { amplitude_pa: 1.0 },
            split: None,
        };
        let mut o = RunOptions {
            dt_ms: f64::NAN,
            method: Method::CrankNicolson,
            stop: Stop::At { duration_ms: 1.0 },
            track_peaks: false,
            growth: None,
        };
        let e = simulate(&net, &drive, &[], &o).unwrap_err();
        assert!(e.to_string().contains("time step"), "{e}");
        o.dt_ms = 0.1;
        let e = simulate(&net, &drive, &[3], &o).unwrap_err();
        assert_eq!(e, TransientError::NodeOutOfRange { node: 3, len: 1 });
    }
}
