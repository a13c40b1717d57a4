//! Passive cable theory on the reconstructed tree.
//!
//! [`Network::build`] turns the flat arrays of a morphology into an electrical network with one
//! node per point: each segment is the exact two-port of a uniform passive cable (Rall; Koch 1999
//! ch. 2–3; Johnston & Wu 1995 ch. 4) written as a π network, and the soma is one lumped
//! isopotential node (ball-and-stick). Everything downstream (maps, reduction) works on that
//! network.
//!
//! Units: morphology in µm, Rm in Ω·cm², Ra in Ω·cm, Cm in µF/cm², f in Hz; admittances in S.
//!
//! Where to start:
//! - [`CellMaps::compute`] (module [`cell`]): Z_kk, Z_ks, attenuation to and from the soma at
//!   every node, the voltage map from any site, log attenuation, and [`Summary`] (soma input
//!   resistance, τ, Σ l/λ of every tip's path). Per SWC point through `Flat::point_node`.
//! - [`prep`]: a morphology (or parsed file) → prepared [`Flat`] (`--scale`, `--default-diameter`,
//!   extent check; [`prep::cable_input`] skips the full morphology for plain files).
//! - [`solve`]: the one tree-solve kernel. [`TreeFactor`] (O(N) elimination, in-place solves)
//!   and [`TreeMaps`] (D, P, U, Z_kk, Z_k0, down, site columns, log attenuations ln A ≥ 0 with
//!   the summed-log fallback), in any [`Scalar`] (`f64` at DC, [`C64`] above). Everything that
//!   solves a tree network calls it.
//! - [`Network::build`] + [`Network::maps`], or [`network_arrays`] + [`TreeMaps::new`]: the
//!   network of a prepared cell and its maps. ([`maps`] keeps thin array adapters for callers
//!   not yet moved.)

pub mod cell;
pub mod maps;
pub mod prep;
pub mod solve;

use crate::morphology::{Flat, NONE};

pub use cell::{CellMaps, PointMaps, Summary, TipPath};
pub use maps::Maps;
use num_complex::Complex64;
pub use prep::{PrepOptions, prepare};
pub use solve::{TreeFactor, TreeMaps, db, neper};
use std::ops::{Add, AddAssign, Div, Mul, Sub};

pub type C64 = Complex64;

/// The number types the network and the sweeps are written for: `f64` at DC (fast path) and
/// `C64` at f > 0. Only what the formulas need.
pub trait Scalar:
    Copy
    + Send
    + Sync
    + Add<Output = Self>
    + Sub<Output = Self>
    + Mul<Output = Self>
    + Div<Output = Self>
    + Mul<f64, Output = Self>
    + AddAssign
    + std::fmt::Debug
    + 'static
{
    fn real(x: f64) -> Self;
    fn sqrt(self) -> Self;
    fn exp(self) -> Self;
    /// Modulus |x|.
    fn abs(self) -> f64;
    /// max(|Re x|, |Im x|): within a factor √2 of |x| and much cheaper (for range checks).
    fn abs_bound(self) -> f64;
    fn to_c64(self) -> C64;
    /// From the membrane admittance per area (the imaginary part is dropped for `f64`, which is
    /// only used at DC where it is 0).
    fn from_c64(c: C64) -> Self;
}

impl Scalar for f64 {
    #[inline]
    fn real(x: f64) -> Self {
        x
    }
    #[inline]
    fn sqrt(self) -> Self {
        f64::sqrt(self)
    }
    #[inline]
    fn exp(self) -> Self {
        f64::exp(self)
    }
    #[inline]
    fn abs(self) -> f64 {
        f64::abs(self)
    }
    #[inline]
    fn abs_bound(self) -> f64 {
        f64::abs(self)
    }
    #[inline]
    fn to_c64(self) -> C64 {
        C64::new(self, 0.0)
    }
    #[inline]
    fn from_c64(c: C64) -> Self {
        c.re
    }
}

impl Scalar for C64 {
    #[inline]
    fn real(x: f64) -> Self {
        C64::new(x, 0.0)
    }
    #[inline]
    fn sqrt(self) -> Self {
        Complex64::sqrt(self)
    }
    #[inline]
    fn exp(self) -> Self {
        Complex64::exp(self)
    }
    #[inline]
    fn abs(self) -> f64 {
        self.norm()
    }
    #[inline]
    fn abs_bound(self) -> f64 {
        self.re.abs().max(self.im.abs())
    }
    #[inline]
    fn to_c64(self) -> C64 {
        self
    }
    #[inline]
    fn from_c64(c: C64) -> Self {
        c
    }
}

/// Passive membrane and axial parameters. Defaults Rm 20 000 Ω·cm², Ra 150 Ω·cm, Cm 1 µF/cm²
/// are common practice (no single source).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Params {
    /// Specific membrane resistance (Ω·cm²).
    pub rm_ohm_cm2: f64,
    /// Axial resistivity (Ω·cm).
    pub ra_ohm_cm: f64,
    /// Specific membrane capacitance (µF/cm²).
    pub cm_uf_cm2: f64,
}

impl Default for Params {
    fn default() -> Self {
        Params {
            rm_ohm_cm2: 20_000.0,
            ra_ohm_cm: 150.0,
            cm_uf_cm2: 1.0,
        }
    }
}

/// Why a cable computation cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CableError {
    #[error("{name} = {value} is outside the accepted range {lo} to {hi} {unit}")]
    ParamRange {
        name: &'static str,
        value: f64,
        lo: f64,
        hi: f64,
        unit: &'static str,
    },
    #[error(
        "{count} point(s) have radius 0 or NA (unknown), first on line {first_line}; cable work needs radii: pass --default-diameter D (µm) to use for them"
    )]
    MissingRadii { count: usize, first_line: usize },
    #[error(
        "line {line}: {what} {value:e} µm is outside the range cable work accepts ({lo:e} to {hi:e} µm); check the file's units (--scale)"
    )]
    GeometryRange {
        what: &'static str,
        value: f64,
        line: usize,
        lo: f64,
        hi: f64,
    },
    #[error(
        "the cell is {extent_mm:.1} mm across, which suggests coordinates in nanometres or voxels; pass --scale to convert them to µm (--scale 1 keeps µm)"
    )]
    Implausible { extent_mm: f64 },
    #[error("the file has no points")]
    Empty,
    #[error("node {node} cannot be held at rest: the tree has nodes 1 to {last} besides the soma")]
    KilledNode { node: usize, last: usize },
}

impl Params {
    /// Membrane time constant τ = Rm·Cm (ms).
    pub fn tau_ms(&self) -> f64 {
        self.rm_ohm_cm2 * self.cm_uf_cm2 * 1e-3
    }

    /// Checks that every parameter (and the frequency) is finite and in a range where the
    /// model means something.
    pub fn validate(&self, freq_hz: f64) -> Result<(), CableError> {
        let check = in_range;
        check("Rm", self.rm_ohm_cm2, 1.0, 1e8, "Ω·cm²")?;
        check("Ra", self.ra_ohm_cm, 1.0, 1e6, "Ω·cm")?;
        check("Cm", self.cm_uf_cm2, 0.01, 100.0, "µF/cm²")?;
        check("frequency", freq_hz, 0.0, 1e5, "Hz")
    }

    /// Membrane admittance per area y_m = 1/Rm + jωCm (S/cm²).
    pub fn membrane_admittance(&self, freq_hz: f64) -> C64 {
        let w = 2.0 * std::f64::consts::PI * freq_hz;
        C64::new(1.0 / self.rm_ohm_cm2, w * self.cm_uf_cm2 * 1e-6)
    }

    /// DC length constant λ = √(Rm·d / (4Ra)) of a cylinder of diameter `d_um` (µm)
    /// (Rall; Johnston & Wu 1995 eq. 4.25).
    pub fn lambda_um(&self, d_um: f64) -> f64 {
        let d = d_um * UM;
        (self.rm_ohm_cm2 * d / (4.0 * self.ra_ohm_cm)).sqrt() / UM
    }
}

/// Ok when `value` is finite and within lo..=hi, else the error naming it (the one range check
/// of the cable settings, the preparation options and the lab).
pub fn in_range(
    name: &'static str,
    value: f64,
    lo: f64,
    hi: f64,
    unit: &'static str,
) -> Result<(), CableError> {
    if value.is_finite() && value >= lo && value <= hi {
        Ok(())
    } else {
        Err(CableError::ParamRange {
            name,
            value,
            lo,
            hi,
            unit,
        })
    }
}

/// 1 µm in cm.
pub const UM: f64 = 1e-4;
/// Shortest segment length used (µm): a zero-length segment joins two points at one place, so
/// it is given this tiny length (a huge but finite coupling) rather than an infinite one.
pub const MIN_LENGTH_UM: f64 = 1e-4;

/// The cell as a passive network: node k > 0 is joined to `parent[k]` by the series admittance
/// `g[k]`; `shunt[k]` is the total admittance from node k to ground (membrane pieces of the
/// segments that touch k, and the soma membrane at node 0). At DC every entry is real and > 0.
#[derive(Debug, Clone)]
pub struct Network {
    pub parent: Vec<u32>,
    /// Series admittance from node k to its parent (S); `g[0]` = 0.
    pub g: Vec<C64>,
    /// Shunt admittance at node k (S).
    pub shunt: Vec<C64>,
    pub freq_hz: f64,
    pub params: Params,
}

/// π network of a uniform cable piece: series admittance Y0/sinh L and shunt Y0·tanh(L/2) at
/// each end (two-port of the cable equation; Koch 1999 ch. 2; Johnston & Wu 1995 ch. 4).
/// Written with e^(−L) so that long pieces at high frequency do not overflow, and with a series
/// for short pieces so that nothing cancels.
pub fn uniform_pi(y0: C64, l: C64) -> (C64, C64) {
    uniform_pi_t(y0, l)
}

/// [`uniform_pi`] for any [`Scalar`] (real at DC).
#[inline]
pub fn uniform_pi_t<T: Scalar>(y0: T, l: T) -> (T, T) {
    if l.abs() < 1e-2 {
        let l2 = l * l;
        let sinh = l * (T::real(1.0) + l2 * (1.0 / 6.0) + l2 * l2 * (1.0 / 120.0));
        let tanh_half = l * (T::real(0.5) - l2 * (1.0 / 24.0) + l2 * l2 * (1.0 / 240.0));
        (y0 / sinh, y0 * tanh_half)
    } else {
        let e = T::real(0.0) - l;
        let e = e.exp();
        let e2 = e * e;
        let series = y0 * e * 2.0 / (T::real(1.0) - e2);
        let shunt = y0 * (T::real(1.0) - e) / (T::real(1.0) + e);
        (series, shunt)
    }
}

/// π network of a uniform piece from its axial conductance `g_ax` = 1/(r_a·h), membrane
/// admittance `y_m` = y·h and L² = y_m/g_ax: returns the series admittance Y0/sinh L =
/// g_ax·L/sinh L and the factor t = tanh(L/2)/(L/2), each end's shunt Y0·tanh(L/2) being
/// (y_m/2)·t (cable two-port; Koch 1999 ch. 2). Both are even in L, so a short piece (|L| < 0.1)
/// needs no square root: Taylor series to L⁸, truncation < 1e-15.
#[inline]
fn pi_from_l2<T: Scalar>(g_ax: f64, y_m: T, l2: T) -> (T, T) {
    if l2.abs() < 1e-2 {
        // L/sinh L = 1 − L²/6 + 7L⁴/360 − 31L⁶/15120 + 127L⁸/604800 (Horner form)
        let c = |x: f64| T::real(x);
        let f = c(1.0)
            + l2 * (c(-1.0 / 6.0)
                + l2 * (c(7.0 / 360.0) + l2 * (c(-31.0 / 15120.0) + l2 * (127.0 / 604800.0))));
        // tanh(x)/x with x = L/2: 1 − L²/12 + L⁴/120 − 17L⁶/20160 + 31L⁸/362880
        let t = c(1.0)
            + l2 * (c(-1.0 / 12.0)
                + l2 * (c(1.0 / 120.0) + l2 * (c(-17.0 / 20160.0) + l2 * (31.0 / 362880.0))));
        (f * g_ax, t)
    } else {
        let l = l2.sqrt();
        let (series, shunt) = uniform_pi_t(l * g_ax, l);
        (series, shunt * 2.0 / y_m)
    }
}

/// How many pieces a frustum of end radii a, b is cut into, so that each piece's radius ratio is
/// within about 2 % of 1 (each piece keeps its axial resistance and membrane area exactly).
#[inline]
fn frustum_pieces(a: f64, b: f64) -> usize {
    let (lo, hi) = if a < b { (a, b) } else { (b, a) };
    // e^0.02: one piece (the common case) without a logarithm
    if hi <= lo * 1.020_201_340_026_755_8 {
        return 1;
    }
    let ratio = (hi / lo).ln();
    ((ratio / 0.02).ceil() as usize).clamp(1, 64)
}

/// The exact π network of one segment (frustum from radius a to b over length h, all µm):
/// (series, shunt at the proximal end, shunt at the distal end). A frustum is cut into pieces,
/// each a uniform cable with r_a = Ra/(π·a·b) and membrane admittance y_m·π(a+b)·slant/h whose
/// membrane is shared between its ends in the ratio a : b (the taper's first moment), and the
/// inner nodes are removed by Kron reduction (exact). Checked against a finely cut frustum and a
/// compartment model (tests/cable_*.rs): relative error well below 1e-6 on ordinary segments.
pub fn segment_pi(params: &Params, ym: C64, h_um: f64, a_um: f64, b_um: f64) -> (C64, C64, C64) {
    segment_pi_t(params, ym, h_um, a_um, b_um)
}

/// [`segment_pi`] for any [`Scalar`]: `ym` is the membrane admittance per area (S/cm²).
#[inline]
pub fn segment_pi_t<T: Scalar>(
    params: &Params,
    ym: T,
    h_um: f64,
    a_um: f64,
    b_um: f64,
) -> (T, T, T) {
    let h_um = h_um.max(MIN_LENGTH_UM);
    let pieces = frustum_pieces(a_um, b_um);
    let zero = T::real(0.0);
    let (mut series, mut prox, mut dist) = (zero, zero, zero);
    let hp = h_um / pieces as f64;
    let pi_um_over_ra = std::f64::consts::PI * UM / params.ra_ohm_cm;
    let ra_over_pi_um = params.ra_ohm_cm / (std::f64::consts::PI * UM);
    for i in 0..pieces {
        let t0 = i as f64 / pieces as f64;
        let t1 = (i + 1) as f64 / pieces as f64;
        let ra = a_um + (b_um - a_um) * t0;
        let rb = a_um + (b_um - a_um) * t1;
        let slant = if ra == rb {
            hp
        } else {
            (hp * hp + (rb - ra) * (rb - ra)).sqrt()
        };
        // whole-piece axial conductance G = π·a·b/(Ra·h) and membrane admittance
        // Y = y_m·π(a+b)·slant; L² = y·r_a·h² = Y/G; Y0 = √(y/r_a) = G·L (Rall; Koch 1999 ch. 2).
        // One division: q = 1/(a·b·h) gives G = (π/Ra)·(ab)²·q and Y/G = Y·(Ra/π)·h²·q.
        let ab = ra * rb;
        let q = 1.0 / (ab * hp);
        let g_ax = pi_um_over_ra * ab * ab * q; // S
        let per_r = ym * (std::f64::consts::PI * slant * UM * UM); // membrane per µm of radius
        let y_m = per_r * (ra + rb); // S
        let l2 = y_m * (ra_over_pi_um * hp * hp * q);
        let (s, t) = pi_from_l2(g_ax, y_m, l2);
        // Membrane split of a tapered piece: in the resistance coordinate s(t) = t·rb/r(t) of a
        // linear taper, the first moment of the membrane (∝ r) puts rb/(ra+rb) of it at the
        // distal end and ra/(ra+rb) at the proximal end (leading order of the two-port in L;
        // equal halves for a cylinder). Without this a taper leaves an O(taper·L) error.
        let (p_prox, p_dist) = (per_r * t * ra, per_r * t * rb);
        if i == 0 {
            series = s;
            prox = p_prox;
            dist = p_dist;
        } else {
            // join (Kron reduction of the inner node): inner node x has the running distal
            // shunt plus this piece's proximal shunt
            let gx = dist + p_prox;
            let total = series + s + gx;
            prox += series * gx / total;
            let new_series = series * s / total;
            dist = p_dist + s * gx / total;
            series = new_series;
        }
    }
    (series, prox, dist)
}

/// DC electrotonic length Σ l/λ of one segment (frustum from radius a to b over h, µm), with the
/// same pieces as [`segment_pi`]: each piece contributes √(r_a·g_m)·h (Rall 1959; Koch 1999 ch. 2).
pub fn segment_electrotonic_length(params: &Params, h_um: f64, a_um: f64, b_um: f64) -> f64 {
    let pieces = frustum_pieces(a_um, b_um);
    let hp = h_um / pieces as f64;
    let mut x = 0.0;
    for i in 0..pieces {
        let ra = a_um + (b_um - a_um) * (i as f64 / pieces as f64);
        let rb = a_um + (b_um - a_um) * ((i + 1) as f64 / pieces as f64);
        if hp <= 0.0 {
            continue;
        }
        let slant = (hp * hp + (rb - ra) * (rb - ra)).sqrt();
        // L = √(Y/G): membrane conductance over axial conductance of the piece
        let g_ax = std::f64::consts::PI * ra * rb * UM / (params.ra_ohm_cm * hp);
        let g_m = std::f64::consts::PI * (ra + rb) * slant * UM * UM / params.rm_ohm_cm2;
        x += (g_m / g_ax).sqrt();
    }
    x
}

/// Radii (µm) the cable work accepts: outside, conductances leave the range of f64 (a radius of
/// 1e300 µm squares to infinity); such radii are unit errors in practice.
pub const RADIUS_RANGE_UM: (f64, f64) = (1e-4, 1e4);
/// Longest segment (µm) the cable work accepts (10 m).
pub const MAX_SEGMENT_UM: f64 = 1e7;

/// Checks the radii of the main tree: every node k > 0 needs finite, positive radii (counted
/// once per point: a point's own radius, or the soma-side radius when its parent's is fine),
/// within [`RADIUS_RANGE_UM`], and a length up to [`MAX_SEGMENT_UM`].
fn check_radii(flat: &Flat) -> Result<(), CableError> {
    let bad = |r: f64| !(r > 0.0 && r.is_finite());
    let mut count = 0;
    let mut first = None;
    for k in 1..flat.len() {
        let p = flat.parent[k] as usize;
        let own = bad(flat.r_dist_um[k]);
        let prox = bad(flat.r_prox_um[k]) && (p == 0 || !bad(flat.r_dist_um[p]));
        if own || prox {
            count += 1;
            first.get_or_insert(k);
        }
    }
    if let Some(k) = first {
        return Err(CableError::MissingRadii {
            count,
            first_line: flat.line[k],
        });
    }
    let (lo, hi) = RADIUS_RANGE_UM;
    for k in 1..flat.len() {
        let out = |what, value: f64, lo: f64, hi: f64| {
            (!(lo..=hi).contains(&value)).then_some(CableError::GeometryRange {
                what,
                value,
                line: flat.line.get(k).copied().unwrap_or(0),
                lo,
                hi,
            })
        };
        let fault = out("radius", flat.r_dist_um[k], lo, hi)
            .or_else(|| out("radius", flat.r_prox_um[k], lo, hi))
            .or_else(|| out("segment length", flat.length_um[k], 0.0, MAX_SEGMENT_UM));
        if let Some(e) = fault {
            return Err(e);
        }
    }
    Ok(())
}

/// How the network builder reads a segment's radii.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum SegmentRadii {
    /// A frustum from the parent point's radius to the point's own (the SWC rule).
    #[default]
    Frustum,
    /// A cylinder of the point's own radius (the ideal trees of teaching, where a daughter
    /// starts at its own diameter right at the fork).
    Distal,
}

impl SegmentRadii {
    /// (proximal, distal) radius of node k's segment (µm).
    #[inline]
    fn of(self, flat: &Flat, k: usize) -> (f64, f64) {
        match self {
            SegmentRadii::Frustum => (flat.r_prox_um[k], flat.r_dist_um[k]),
            SegmentRadii::Distal => (flat.r_dist_um[k], flat.r_dist_um[k]),
        }
    }
}

/// What the network builder takes besides the cell's arrays and the membrane.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct NetworkInputs {
    pub radii: SegmentRadii,
    /// Nodes held at rest (V = 0: killed, clamped ends). Node k's link to its parent then runs
    /// from the parent to ground, so the parent sees Y0·tanh(L/2) + Y0/sinh L = Y0·coth L, the
    /// killed-end input admittance (Rall 1959; Johnston & Wu 1995 eq. 4.40); links to k's
    /// children run from them to ground. Node k itself is cut off (g = 0) with a 1 S dummy
    /// shunt: its own Z_kk means nothing (it is 0).
    pub killed: Vec<u32>,
}

/// The series admittances `g` and shunts `shunt` of the main tree in any [`Scalar`] (see
/// [`Network`]), SWC frusta, no killed ends. Checks parameters and radii.
pub fn network_arrays<T: Scalar>(
    flat: &Flat,
    params: &Params,
    freq_hz: f64,
) -> Result<(Vec<T>, Vec<T>), CableError> {
    network_arrays_with(flat, params, freq_hz, &NetworkInputs::default())
}

/// [`network_arrays`] with the builder's other inputs (segment radii, killed ends).
pub fn network_arrays_with<T: Scalar>(
    flat: &Flat,
    params: &Params,
    freq_hz: f64,
    inputs: &NetworkInputs,
) -> Result<(Vec<T>, Vec<T>), CableError> {
    params.validate(freq_hz)?;
    check_radii(flat)?;
    let n = flat.len();
    if let Some(&k) = inputs.killed.iter().find(|&&k| k == 0 || k as usize >= n) {
        return Err(CableError::KilledNode {
            node: k as usize,
            last: n.saturating_sub(1),
        });
    }
    let ym = T::from_c64(params.membrane_admittance(freq_hz));
    let zero = T::real(0.0);
    let mut g = vec![zero; n];
    let mut shunt = vec![zero; n];
    if n == 0 {
        return Ok((g, shunt));
    }
    shunt[0] = ym * (flat.soma_area_um2 * UM * UM);
    for k in 1..n {
        let (a, b) = inputs.radii.of(flat, k);
        let (s, p, d) = segment_pi_t(params, ym, flat.length_um[k], a, b);
        g[k] = s;
        shunt[flat.parent[k] as usize] += p;
        shunt[k] += d;
    }
    if !inputs.killed.is_empty() {
        let mut killed = vec![false; n];
        for &k in &inputs.killed {
            killed[k as usize] = true;
        }
        for k in 1..n {
            let p = flat.parent[k] as usize;
            if killed[k] || killed[p] {
                let live = if killed[k] { p } else { k };
                shunt[live] += g[k];
                g[k] = zero;
            }
        }
        for (k, _) in killed.iter().enumerate().filter(|(_, x)| **x) {
            shunt[k] = T::real(1.0);
        }
    }
    Ok((g, shunt))
}

/// DC electrotonic distance X = Σ l/λ from the soma at every node, segment by segment with
/// [`segment_electrotonic_length`] (Rall 1959; Koch 1999 ch. 2).
pub fn electrotonic_distance(flat: &Flat, params: &Params, radii: SegmentRadii) -> Vec<f64> {
    let n = flat.len();
    let mut x = vec![0.0; n];
    for k in 1..n {
        let (a, b) = radii.of(flat, k);
        x[k] = x[flat.parent[k] as usize]
            + segment_electrotonic_length(params, flat.length_um[k], a, b);
    }
    x
}

impl Network {
    /// Builds the network of the main tree at frequency `freq_hz` (0 = DC).
    pub fn build(flat: &Flat, params: &Params, freq_hz: f64) -> Result<Network, CableError> {
        Network::build_with(flat, params, freq_hz, &NetworkInputs::default())
    }

    /// [`Network::build`] with the builder's other inputs (segment radii, killed ends).
    pub fn build_with(
        flat: &Flat,
        params: &Params,
        freq_hz: f64,
        inputs: &NetworkInputs,
    ) -> Result<Network, CableError> {
        let (g, shunt) = network_arrays_with::<C64>(flat, params, freq_hz, inputs)?;
        Ok(Network {
            parent: flat.parent.clone(),
            g,
            shunt,
            freq_hz,
            params: *params,
        })
    }

    pub fn len(&self) -> usize {
        self.parent.len()
    }

    pub fn is_empty(&self) -> bool {
        self.parent.is_empty()
    }

    /// The one tree kernel's maps of this network ([`TreeMaps`]): D, P, U, Z_kk, Z_k0, site
    /// columns and log attenuations, O(N).
    pub fn maps(&self) -> TreeMaps<C64> {
        TreeMaps::new(&self.parent, &self.g, &self.shunt)
    }

    /// Children lists in CSR form (start offsets, child nodes), built with two loops.
    pub fn children(&self) -> (Vec<u32>, Vec<u32>) {
        children_csr(&self.parent)
    }
}

/// Children of each node of a parents-first tree in CSR form: node k's children are
/// `kids[start[k]..start[k+1]]`, in increasing order.
pub fn children_csr(parent: &[u32]) -> (Vec<u32>, Vec<u32>) {
    let n = parent.len();
    let mut start = vec![0u32; n + 1];
    for &p in parent {
        if p != NONE {
            start[p as usize + 1] += 1;
        }
    }
    for k in 0..n {
        start[k + 1] += start[k];
    }
    let mut fill = start.clone();
    let mut kids = vec![0u32; start[n] as usize];
    for (k, &p) in parent.iter().enumerate() {
        if p != NONE {
            kids[fill[p as usize] as usize] = k as u32;
            fill[p as usize] += 1;
        }
    }
    (start, kids)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn check_values_from_the_note() {
        // d = 2 µm, Rm 20 000, Ra 150 → λ ≈ 816 µm (λ = √(Rm·d/4Ra); Johnston & Wu 1995 eq. 4.25)
        let p = Params::default();
        let lam = p.lambda_um(2.0);
        assert!((lam - 816.5).abs() < 0.1, "{lam}");
        assert!((p.tau_ms() - 20.0).abs() < 1e-12);
    }

    #[test]
    fn short_piece_series_matches_the_closed_form() {
        // Y0/sinh L and Y0·tanh(L/2) from cosh/sinh directly (Koch 1999 ch. 2), with L just
        // inside the series range, real and complex
        for l2 in [
            C64::new(0.0099, 0.0),
            C64::new(0.004, 0.008),
            C64::new(1e-6, 2e-6),
        ] {
            let g = 3e-9;
            let y = l2 * g;
            let (s, t) = pi_from_l2(g, y, l2);
            let p = y * 0.5 * t;
            let l = l2.sqrt();
            let y0 = l * g;
            let (s_ref, p_ref) = (y0 / l.sinh(), y0 * (l / 2.0).tanh());
            assert!((s - s_ref).norm() < 1e-14 * s_ref.norm(), "{s} {s_ref}");
            assert!((p - p_ref).norm() < 1e-14 * p_ref.norm(), "{p} {p_ref}");
            let (sr, tr) = pi_from_l2(g, y.re, l2.re);
            let pr = y.re * 0.5 * tr;
            if l2.im == 0.0 {
                assert!((sr - s_ref.re).abs() < 1e-14 * s_ref.re);
                assert!((pr - p_ref.re).abs() < 1e-14 * p_ref.re);
            }
        }
    }

    #[test]
    fn killed_nodes_outside_the_tree_are_errors() {
        let f = Flat {
            parent: vec![NONE, 0],
            length_um: vec![0.0, 100.0],
            r_prox_um: vec![1.0, 1.0],
            r_dist_um: vec![1.0, 1.0],
            soma_area_um2: 10.0,
            ..Default::default()
        };
        for bad in [0, 2] {
            let inputs = NetworkInputs {
                killed: vec![bad],
                ..Default::default()
            };
            let e = network_arrays_with::<f64>(&f, &Params::default(), 0.0, &inputs);
            assert_eq!(
                e,
                Err(CableError::KilledNode {
                    node: bad as usize,
                    last: 1
                })
            );
        }
    }

    #[test]
    fn split_frustum_matches_one_piece_for_a_cylinder() {
        let p = Params::default();
        let ym = p.membrane_admittance(100.0);
        let (s1, a1, b1) = segment_pi(&p, ym, 300.0, 1.0, 1.0);
        // the same cylinder as 4 pieces, joined by hand through the same routine's join
        let (s, pr, _) = segment_pi(&p, ym, 300.0, 1.0, 1.0 + 1e-12);
        assert!((s - s1).norm() < 1e-9 * s1.norm());
        assert!((pr - a1).norm() < 1e-9 * a1.norm());
        assert!((a1 - b1).norm() < 1e-15 * a1.norm());
    }
}
