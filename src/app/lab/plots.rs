//! The lab's three plots along the path and the numbers beside the drawing.

use super::{LabView, XAxis};
use crate::lab::{End, Equivalent, LabResult, PathSeries};
use eframe::egui::{self, Color32, RichText};
use egui_plot::{AxisHints, Line, LineStyle, Plot, VLine};

/// One curve of a plot: its name, points and colour; dashed curves are the comparison.
struct Curve {
    name: &'static str,
    points: Vec<[f64; 2]>,
    colour: Color32,
    dashed: bool,
}

/// One of the three plots along the path: a title, a key, the curves and the forks.
struct PathPlot<'a> {
    id: &'static str,
    title: String,
    key: Vec<(Color32, &'static str)>,
    /// What the dashed curves show (None: no note in the key).
    dashed: Option<&'a str>,
    y_label: &'static str,
    y_range: &'a [f64],
    curves: Vec<Curve>,
}

const TIP: Color32 = Color32::from_rgb(250, 170, 60);
const SOMA: Color32 = Color32::from_rgb(120, 200, 235);
const FORK: Color32 = Color32::from_rgb(190, 110, 230);
const RIN: Color32 = Color32::from_rgb(110, 215, 140);

impl PathPlot<'_> {
    fn ui(self, ui: &mut egui::Ui, width: f32, height: f32, x_label: &str, forks: &[f64]) {
        ui.vertical(|ui| {
            ui.set_width(width);
            ui.label(RichText::new(self.title).strong());
            let mut entries = self.key;
            entries.push((FORK, "forks"));
            key(ui, &entries, self.dashed);
            let mut plot = Plot::new(self.id)
                .height(height)
                .custom_x_axes(vec![x_axis(x_label)])
                .custom_y_axes(vec![y_axis(self.y_label)]);
            for &y in self.y_range {
                plot = plot.include_y(y);
            }
            plot.show(ui, |pu| {
                for c in self.curves {
                    let line = Line::new(c.name, c.points).color(c.colour);
                    pu.line(if c.dashed {
                        line.style(LineStyle::dashed_loose())
                    } else {
                        line.width(2.0)
                    });
                }
                for x in forks {
                    pu.vline(VLine::new("forks", *x).color(FORK));
                }
            });
        });
    }
}

/// (x, y) pairs of a path series against the chosen axis, finite values only.
fn points(s: &PathSeries, axis: XAxis, ys: &[f64]) -> Vec<[f64; 2]> {
    let xs = match axis {
        XAxis::Micrometres => &s.dist_um,
        XAxis::Electrotonic => &s.x,
    };
    xs.iter()
        .zip(ys)
        .filter(|(_, y)| y.is_finite())
        .map(|(&x, &y)| [x, y])
        .collect()
}

impl LabView {
    /// The three plots along the path: voltage, local input resistance, morphoelectrotonic
    /// distance; the comparison (steady current, or the other end condition) dashed.
    pub(super) fn plots(&self, ui: &mut egui::Ui, r: &LabResult) {
        let s = &r.path;
        let axis = self.x_axis;
        let x_label = match axis {
            XAxis::Micrometres => "distance from the soma (µm)",
            XAxis::Electrotonic => "X (λ)",
        };
        let xs = match axis {
            XAxis::Micrometres => &s.dist_um,
            XAxis::Electrotonic => &s.x,
        };
        // x of every fork on the path
        let forks: Vec<f64> = r
            .junctions
            .iter()
            .filter(|j| j.on_path)
            .filter_map(|j| Some(xs[s.nodes.iter().position(|&q| q == j.node)?]))
            .collect();
        let compared = self.compare.as_ref().map(|(_, d)| &d.path);
        let dashed = self.compare.as_ref().map(|(what, _)| *what);
        let curve = |name, ys: &[f64], colour| Curve {
            name,
            points: points(s, axis, ys),
            colour,
            dashed: false,
        };
        let compare = |name, f: fn(&PathSeries) -> &Vec<f64>, colour| {
            compared.map(|d| Curve {
                name,
                points: points(d, axis, f(d)),
                colour,
                dashed: true,
            })
        };
        let freq = if self.spec.freq_hz > 0.0 {
            format!(" at {:.0} Hz", self.spec.freq_hz)
        } else {
            String::new()
        };
        let voltage = PathPlot {
            id: "lab_voltage",
            title: format!("Voltage along the path{freq}"),
            key: vec![(TIP, "current at the tip"), (SOMA, "current at the soma")],
            dashed,
            y_label: "V / V at the injection point",
            y_range: &[0.0, 1.05],
            curves: [
                Some(curve("current at the tip", &s.v_from_tip, TIP)),
                Some(curve("current at the soma", &s.v_from_soma, SOMA)),
                compare("tip, compared", |d| &d.v_from_tip, TIP),
                compare("soma, compared", |d| &d.v_from_soma, SOMA),
            ]
            .into_iter()
            .flatten()
            .collect(),
        };
        let rin = PathPlot {
            id: "lab_rin",
            title: format!("Local input resistance{freq}"),
            key: vec![(RIN, "input resistance")],
            dashed,
            y_label: "|Z_in| (MΩ)",
            y_range: &[0.0],
            curves: [
                Some(curve("input resistance", &s.rin_mohm, RIN)),
                compare("compared", |d| &d.rin_mohm, RIN),
            ]
            .into_iter()
            .flatten()
            .collect(),
        };
        let melec = PathPlot {
            id: "lab_melec",
            title: format!("Morphoelectrotonic distance{freq}"),
            key: vec![(TIP, "towards the soma"), (SOMA, "away from the soma")],
            dashed: None,
            y_label: "attenuation to or from the soma (Np)",
            y_range: &[0.0],
            curves: vec![
                curve("towards the soma", &s.melec_in, TIP),
                curve("away from the soma", &s.melec_out, SOMA),
            ],
        };
        // below the plots' titles and keys (about 50 points)
        let height = (ui.available_height() - 56.0).max(120.0);
        let width = (ui.available_width() - 24.0) / 3.0;
        ui.horizontal(|ui| {
            for p in [voltage, rin, melec] {
                p.ui(ui, width, height, x_label, &forks);
            }
        });
    }
}

/// The numbers beside the drawing.
pub(super) fn numbers(ui: &mut egui::Ui, r: &LabResult, cylinder: Option<&LabResult>) {
    let t = &r.tree;
    let s = &r.path;
    let tip = &t.sections[s.tip_section];
    let last = s.nodes.len() - 1;
    ui.label(RichText::new(format!("Path: from the soma to the tip of {}", tip.name)).strong());
    egui::Grid::new("lab_summary")
        .num_columns(2)
        .striped(true)
        .show(ui, |ui| {
            ui.label("Input resistance at the soma");
            ui.label(format!("{:.1} MΩ", s.rin_mohm[0]));
            ui.end_row();
            ui.label("Input resistance at the injection point");
            ui.label(format!("{:.1} MΩ", s.rin_mohm[s.inject_at]));
            ui.end_row();
            ui.label("Attenuation, tip to soma");
            ui.label(format!("{:.2}×", r.att_tip_to_soma));
            ui.end_row();
            ui.label("Attenuation, soma to tip");
            if r.att_soma_to_tip.is_finite() {
                ui.label(format!("{:.2}×", r.att_soma_to_tip));
            } else {
                ui.label("∞ (tip held at rest)");
            }
            ui.end_row();
            ui.label("Electrotonic length of the path");
            ui.label(format!("L = {:.3}", s.x[last]));
            ui.end_row();
        });
    ui.add_space(6.0);
    ui.label(RichText::new("Forks: Σ d_child^3/2 / d_parent^3/2").strong());
    if r.junctions.is_empty() {
        ui.label("(no fork)");
    } else {
        egui::Grid::new("lab_forks")
            .num_columns(3)
            .striped(true)
            .show(ui, |ui| {
                for j in &r.junctions {
                    ui.label(format!("end of {}", j.name));
                    let good = (j.ratio - 1.0).abs() <= crate::lab::RALL_TOLERANCE;
                    let col = if good {
                        Color32::from_rgb(110, 215, 140)
                    } else {
                        Color32::from_rgb(245, 150, 70)
                    };
                    ui.colored_label(col, format!("{:.3}", j.ratio));
                    ui.label(if j.on_path { "on the path" } else { "" });
                    ui.end_row();
                }
            });
    }
    ui.add_space(6.0);
    equivalent(ui, &r.equivalent, cylinder);
}

fn equivalent(ui: &mut egui::Ui, e: &Equivalent, cylinder: Option<&LabResult>) {
    ui.label(RichText::new("Equivalent cylinder").strong());
    if !e.qualifies() {
        ui.label("This tree is not one cylinder in disguise:");
        for why in &e.reasons {
            ui.label(format!("• {why}"));
        }
        return;
    }
    ui.label(format!(
        "d = {:.2} µm, L = {:.3}, length = {:.0} µm, {} end",
        e.diam_um,
        e.big_l,
        e.length_um,
        match e.end {
            End::Sealed => "sealed",
            End::Killed => "killed",
        }
    ));
    egui::Grid::new("lab_equiv")
        .num_columns(2)
        .striped(true)
        .show(ui, |ui| {
            ui.label("Input resistance of the tree");
            ui.label(format!("{:.2} MΩ", e.rin_tree_mohm));
            ui.end_row();
            ui.label("…of the cylinder (engine)");
            ui.label(format!("{:.2} MΩ", e.rin_cylinder_mohm));
            ui.end_row();
            ui.label("…of the cylinder (closed form)");
            ui.label(format!("{:.2} MΩ", e.rin_closed_mohm));
            ui.end_row();
        });
    if cylinder.is_some() {
        ui.label(
            RichText::new(
                "The cylinder is drawn under the tree, to scale and in the same colours.",
            )
            .small(),
        );
    }
}

/// The x axis of the lab's plots: tick labels allowed closer together than the default, so that
/// narrow plots keep their numbers.
fn x_axis(label: &str) -> AxisHints<'static> {
    AxisHints::new_x()
        .label(label.to_string())
        .label_spacing(24.0..=40.0)
}

/// The key of a plot: a coloured dash and a name per curve, and a note on the dashed curves.
fn key(ui: &mut egui::Ui, entries: &[(Color32, &str)], dashed: Option<&str>) {
    ui.horizontal_wrapped(|ui| {
        for (c, name) in entries {
            ui.colored_label(*c, RichText::new(format!("— {name}")).small());
        }
        if let Some(what) = dashed {
            ui.label(RichText::new(format!("(dashed: {what})")).small());
        }
    });
}

/// The y axis of the lab's plots, with tick labels a little closer than the default.
fn y_axis(label: &str) -> AxisHints<'static> {
    AxisHints::new_y()
        .label(label.to_string())
        .label_spacing(14.0..=24.0)
}
