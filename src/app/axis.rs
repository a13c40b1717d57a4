//! The axes of the cell view's plots: the three narrow plots' x axes (about 150 px each) and the
//! traces' axes keep their labels at any cell size; the path-distance and voltage axes' units. egui_plot's default ticks are
//! powers of ten and hide every label closer than 60 px, which left only "0" under a cell
//! 2,000 µm deep (and under its 4,000-compartment error curve).
//!
//! Here the labelled step is the smallest 1, 2, 2.5 or 5 × 10^k that keeps labels [`LABEL_PX`]
//! apart (common practice for axis ticks, no source), four unlabelled grid lines split each
//! step, and the path distance is in µm up to 1,000 µm and in mm beyond (labels stay within four
//! characters). A voltage is in the largest of mV, µV, nV, pV in which its peak is at least 1
//! (a far injection point's soma response on a large cell is a fraction of a µV, which in mV
//! needed labels of nine characters).

use egui_plot::{AxisHints, GridInput, GridMark, Plot};

/// Labelled ticks are at least this far apart (px): four characters and a gap.
pub const LABEL_PX: f64 = 34.0;
/// The plot's grid lines are no closer than this (px): the lower end of `Plot::grid_spacing`,
/// which egui_plot folds into `GridInput::base_step_size` and [`marks`] reads back.
pub const GRID_MIN_PX: f32 = 8.0;
/// Tick labels fade in between these spacings (px): above the unlabelled lines' spacing (at most
/// 2 × [`LABEL_PX`] / 5) and below the labelled ticks' (at least [`LABEL_PX`]).
pub const LABEL_FADE_PX: (f32, f32) = (20.0, 30.0);

/// The unit of the path-distance axis.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DistanceUnit {
    Micrometre,
    Millimetre,
}

impl DistanceUnit {
    /// µm while the farthest point is within 1,000 µm of the soma, mm beyond.
    pub fn for_extent(max_um: f64) -> DistanceUnit {
        if max_um > 1000.0 {
            DistanceUnit::Millimetre
        } else {
            DistanceUnit::Micrometre
        }
    }

    /// How many µm one axis unit is.
    pub fn um(self) -> f64 {
        match self {
            DistanceUnit::Micrometre => 1.0,
            DistanceUnit::Millimetre => 1000.0,
        }
    }

    /// The axis title, naming the unit.
    pub fn title(self) -> &'static str {
        match self {
            DistanceUnit::Micrometre => "path distance from the soma (µm)",
            DistanceUnit::Millimetre => "path distance from the soma (mm)",
        }
    }
}

/// The unit of a voltage axis.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum VoltageUnit {
    Millivolt,
    Microvolt,
    Nanovolt,
    Picovolt,
}

impl VoltageUnit {
    /// The largest unit in which `peak_mv` (the largest |V| shown, mV) is at least 1; mV for 0
    /// or anything not finite, pV below 1 nV.
    pub fn for_peak(peak_mv: f64) -> VoltageUnit {
        let p = peak_mv.abs();
        if !(p.is_finite() && p > 0.0) || p >= 1.0 {
            VoltageUnit::Millivolt
        } else if p >= 1e-3 {
            VoltageUnit::Microvolt
        } else if p >= 1e-6 {
            VoltageUnit::Nanovolt
        } else {
            VoltageUnit::Picovolt
        }
    }

    /// How many of this unit one mV is.
    pub fn per_mv(self) -> f64 {
        match self {
            VoltageUnit::Millivolt => 1.0,
            VoltageUnit::Microvolt => 1e3,
            VoltageUnit::Nanovolt => 1e6,
            VoltageUnit::Picovolt => 1e9,
        }
    }

    pub fn symbol(self) -> &'static str {
        match self {
            VoltageUnit::Millivolt => "mV",
            VoltageUnit::Microvolt => "µV",
            VoltageUnit::Nanovolt => "nV",
            VoltageUnit::Picovolt => "pV",
        }
    }

    /// `mv` in this unit with three significant digits (up to 999) and the symbol.
    pub fn show(self, mv: f64) -> String {
        let x = mv * self.per_mv();
        let digits = match x.abs() {
            a if a < 10.0 => 2,
            a if a < 100.0 => 1,
            _ => 0,
        };
        format!("{x:.digits$} {}", self.symbol()).replace('-', "\u{2212}")
    }
}

/// `plot` with an x axis titled `title` that keeps its labels in a narrow plot ([`marks`],
/// [`label`]).
pub fn readable_x<'a>(plot: Plot<'a>, title: impl Into<String>) -> Plot<'a> {
    plot.custom_x_axes(vec![readable(AxisHints::new_x(), title.into())])
        .x_grid_spacer(marks)
        .grid_spacing(GRID_MIN_PX..=300.0)
}

/// `plot` with a y axis titled `title` whose labels are [`readable_x`]'s ([`marks`], [`label`]).
pub fn readable_y<'a>(plot: Plot<'a>, title: impl Into<String>) -> Plot<'a> {
    plot.custom_y_axes(vec![readable(AxisHints::new_y(), title.into())])
        .y_grid_spacer(marks)
        .grid_spacing(GRID_MIN_PX..=300.0)
}

fn readable(hints: AxisHints<'_>, title: String) -> AxisHints<'_> {
    hints
        .label(title)
        .formatter(|mark, _| label(mark))
        .label_spacing(LABEL_FADE_PX.0..=LABEL_FADE_PX.1)
}

/// The labelled step for an axis of `units_per_px`: the smallest 1, 2, 2.5 or 5 × 10^k whose
/// ticks are at least [`LABEL_PX`] apart (so a step is at most twice the least one).
pub fn label_step(units_per_px: f64) -> f64 {
    let least = units_per_px * LABEL_PX;
    if !(least.is_finite() && least > 0.0) {
        return 1.0;
    }
    let decade = 10f64.powf(least.log10().floor());
    [1.0, 2.0, 2.5, 5.0, 10.0]
        .into_iter()
        .map(|m| m * decade)
        .find(|&s| s >= least * (1.0 - 1e-12))
        .unwrap_or(10.0 * decade)
}

/// The grid spacer: labelled marks at multiples of [`label_step`] (their `step_size` is that
/// step) and four unlabelled lines between (a fifth of it), over the visible range.
pub fn marks(input: GridInput) -> Vec<GridMark> {
    let units_per_px = input.base_step_size / GRID_MIN_PX as f64;
    let step = label_step(units_per_px);
    let minor = step / 5.0;
    let (lo, hi) = input.bounds;
    if !(lo.is_finite() && hi.is_finite() && hi > lo) {
        return Vec::new();
    }
    let (first, last) = ((lo / minor).ceil() as i64, (hi / minor).floor() as i64);
    (first..=last)
        .map(|i| {
            if i % 5 == 0 {
                GridMark {
                    value: (i / 5) as f64 * step,
                    step_size: step,
                }
            } else {
                GridMark {
                    value: i as f64 * minor,
                    step_size: minor,
                }
            }
        })
        .collect()
}

/// A tick's text: as many decimals as its step needs (2.5 → one; 200 → none), a typographic
/// minus.
pub fn label(mark: GridMark) -> String {
    let decimals = (0..6)
        .find(|&d| {
            let x = mark.step_size * 10f64.powi(d);
            (x - x.round()).abs() < 1e-6 * x.max(1.0)
        })
        .unwrap_or(6) as usize;
    let v = if mark.value.abs() < 0.5 * mark.step_size * 1e-6 {
        0.0
    } else {
        mark.value
    };
    format!("{v:.decimals$}").replace('-', "\u{2212}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn steps_follow_one_two_two_and_a_half_five() {
        // hand-worked: 34 px at 10 µm/px wants 340 µm → 500; at 1 → 34 → 50; at 0.05 → 1.7 → 2
        assert_eq!(label_step(10.0), 500.0);
        assert_eq!(label_step(1.0), 50.0);
        assert_eq!(label_step(0.05), 2.0);
        assert_eq!(label_step(20.0 / 34.0), 20.0);
        assert_eq!(label_step(21.0 / 34.0), 25.0);
        assert_eq!(label_step(0.013), 0.5);
        for k in 0..400 {
            let upp = 10f64.powf(-4.0 + k as f64 / 40.0);
            let s = label_step(upp);
            assert!(s >= upp * LABEL_PX * (1.0 - 1e-9), "{upp}: {s}");
            assert!(s <= 2.0 * upp * LABEL_PX * (1.0 + 1e-9), "{upp}: {s}");
        }
    }

    #[test]
    fn a_narrow_plot_of_a_deep_cell_gets_at_least_three_labels() {
        // 150 px over 0 … 1.956 mm (+5 % margins): the case that showed only "0"
        let (lo, hi) = (-0.098, 2.054);
        let px = 150.0;
        let m = marks(GridInput {
            bounds: (lo, hi),
            base_step_size: (hi - lo) / px * GRID_MIN_PX as f64,
        });
        let labelled: Vec<String> = m
            .iter()
            .filter(|g| g.step_size * px / (hi - lo) >= LABEL_FADE_PX.1 as f64)
            .map(|&g| label(g))
            .collect();
        assert_eq!(labelled, ["0.0", "0.5", "1.0", "1.5", "2.0"]);
        // unlabelled lines stay below the fade-in spacing
        let minor = m.iter().map(|g| g.step_size).fold(f64::INFINITY, f64::min);
        assert!(minor * px / (hi - lo) < LABEL_FADE_PX.0 as f64);
    }

    #[test]
    fn labels_have_the_decimals_of_their_step() {
        let g = |value, step_size| label(GridMark { value, step_size });
        assert_eq!(g(750.0, 250.0), "750");
        assert_eq!(g(7.5, 2.5), "7.5");
        assert_eq!(g(0.25, 0.25), "0.25");
        assert_eq!(g(3.0 * 0.1, 0.1), "0.3");
        assert_eq!(g(-1e-17, 0.1), "0.0");
        assert_eq!(g(-2.0, 1.0), "\u{2212}2");
        assert_eq!(DistanceUnit::for_extent(999.0), DistanceUnit::Micrometre);
        assert_eq!(DistanceUnit::for_extent(1956.0).um(), 1000.0);
    }

    #[test]
    fn a_voltage_is_shown_in_the_unit_of_its_peak() {
        // hand-worked: 2.1e-3 mV = 2.1 µV; 2.1e-4 mV = 210 nV; 1.3e-6 mV = 1.3 nV; 7e-7 mV =
        // 700 pV; 0.5 mV = 500 µV
        let u = VoltageUnit::for_peak;
        assert_eq!(u(2.1e-3).show(2.1e-3), "2.10 µV");
        assert_eq!(u(2.1e-4), VoltageUnit::Nanovolt);
        assert_eq!(u(2.1e-4).show(2.1e-4), "210 nV");
        assert_eq!(u(1.3e-6), VoltageUnit::Nanovolt);
        assert_eq!(u(1.3e-6).show(7e-7), "0.70 nV");
        assert_eq!(u(7e-7).show(7e-7), "700 pV");
        assert_eq!(u(0.5).show(0.5), "500 µV");
        assert_eq!(u(1.0).show(-12.345), "\u{2212}12.3 mV");
        assert_eq!(u(0.0), VoltageUnit::Millivolt);
        assert_eq!(u(f64::NAN), VoltageUnit::Millivolt);
        // a peak of 1 to 1000 units over a 150 px axis: labels of at most four characters
        for peak in [1.0, 2.7, 99.0, 999.0] {
            let step = label_step(peak * 1.1 / 150.0);
            let top = label(GridMark {
                value: (peak / step).floor() * step,
                step_size: step,
            });
            assert!(top.chars().count() <= 4, "{peak}: {top}");
        }
    }
}
