//! Colours: a perceptually ordered heat scale for continuous values and our own palette for
//! neurite types and Strahler orders.

use super::state::{CellState, ColourBy};
use eframe::egui::Color32;

/// Colour of anything that is not part of the model (a switched-off neurite type).
pub const OFF: Color32 = Color32::from_rgb(72, 72, 80);
/// Colour of the faint copy of the original arbor behind the reduced tree.
pub const FAINT: Color32 = Color32::from_rgb(58, 58, 68);
/// The mark of the synapse site and of its compartment.
pub const SITE: Color32 = Color32::from_rgb(80, 220, 255);

/// 256 samples of the heat scale (dark = strongly attenuated / low, bright = high).
pub struct Scale {
    lut: [Color32; 256],
}

impl Default for Scale {
    fn default() -> Self {
        Self::new()
    }
}

impl Scale {
    pub fn new() -> Scale {
        let mut lut = [Color32::BLACK; 256];
        for (i, c) in lut.iter_mut().enumerate() {
            // start a little above black so the darkest branches stay visible on the background
            let t = 0.12 + 0.88 * i as f64 / 255.0;
            let col = colorous::INFERNO.eval_continuous(t);
            *c = Color32::from_rgb(col.r, col.g, col.b);
        }
        Scale { lut }
    }

    /// Colour of value v in [lo, hi] (clamped); NaN gives [`OFF`].
    #[inline]
    pub fn colour(&self, v: f64, lo: f64, hi: f64) -> Color32 {
        if !v.is_finite() {
            return OFF;
        }
        let t = ((v - lo) / (hi - lo)).clamp(0.0, 1.0);
        self.lut[(t * 255.0 + 0.5) as usize]
    }

    /// Colour at fraction t in [0, 1].
    pub fn at(&self, t: f64) -> Color32 {
        self.lut[(t.clamp(0.0, 1.0) * 255.0 + 0.5) as usize]
    }
}

/// Our own colours for neurite types.
pub fn type_colour(k: i32) -> Color32 {
    match k {
        1 => Color32::from_rgb(235, 235, 225), // soma: chalk
        2 => Color32::from_rgb(64, 190, 170),  // axon: sea green
        3 => Color32::from_rgb(240, 170, 60),  // basal dendrite: amber
        4 => Color32::from_rgb(150, 120, 235), // apical dendrite: lavender
        0 => Color32::from_rgb(170, 170, 150), // undefined: stone
        5 | 6 => Color32::from_rgb(205, 120, 150),
        _ => Color32::from_rgb(120, 185, 90),
    }
}

/// Our own colours for Strahler orders 1, 2, 3, … (cycling after eight).
pub fn order_colour(o: u32) -> Color32 {
    const P: [Color32; 8] = [
        Color32::from_rgb(120, 200, 235),
        Color32::from_rgb(110, 215, 140),
        Color32::from_rgb(235, 215, 90),
        Color32::from_rgb(245, 150, 70),
        Color32::from_rgb(230, 90, 110),
        Color32::from_rgb(190, 110, 230),
        Color32::from_rgb(240, 240, 240),
        Color32::from_rgb(150, 150, 150),
    ];
    P[(o.max(1) as usize - 1) % P.len()]
}

/// Colour of a value under the current choice of colouring.
#[inline]
pub fn colour_of(scale: &Scale, by: ColourBy, v: f64, range: (f64, f64)) -> Color32 {
    if !v.is_finite() {
        return OFF;
    }
    match by {
        ColourBy::NeuriteType => type_colour(v as i32),
        ColourBy::Strahler => order_colour(v as u32),
        ColourBy::InputResistance => {
            // input resistance spans decades: colour by its log
            let (lo, hi) = (range.0.max(1e-9).ln(), range.1.max(1e-9).ln());
            scale.colour(v.max(1e-9).ln(), lo, hi.max(lo + 1e-9))
        }
        _ => scale.colour(v, range.0, range.1),
    }
}

/// Colours of every whole-tree node and every compartment, and the shared range.
pub struct Colours {
    pub nodes: Vec<Color32>,
    pub comps: Vec<Color32>,
    pub range: (f64, f64),
}

/// Computes all colours for the current state (each value computed once).
pub fn colours(state: &CellState, scale: &Scale) -> Colours {
    let by = state.colour_by;
    let node_vals: Vec<f64> = (0..state.cell.flat.len())
        .map(|k| state.value_full(k))
        .collect();
    let comp_vals: Vec<f64> = match &state.reduced {
        Some(r) => (0..r.tree.len()).map(|c| state.value_comp(c)).collect(),
        None => Vec::new(),
    };
    let range = state.range_of(&node_vals, &comp_vals);
    let nodes = node_vals
        .iter()
        .map(|&v| colour_of(scale, by, v, range))
        .collect();
    let comps = comp_vals
        .iter()
        .map(|&v| colour_of(scale, by, v, range))
        .collect();
    Colours {
        nodes,
        comps,
        range,
    }
}

/// Hex form `#rrggbb` (for SVG).
pub fn hex(c: Color32) -> String {
    format!("#{:02x}{:02x}{:02x}", c.r(), c.g(), c.b())
}
