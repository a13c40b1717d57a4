//! The side panel of controls and the plots under the drawings.

use super::axis;
use super::canvas::{AxisView, Camera, ReducedLayout};
use super::files::{Purpose, RecentFiles};
use super::state::{CellState, ColourBy, LogUnit};
use crate::cable::Params;
use crate::morphology::kind_name;
use crate::reduce::CapacitanceRule;
use eframe::egui::{self, Color32};
use egui_plot::{Legend, Line, Plot, Points, VLine};
use std::path::PathBuf;

/// Something the user asked for; the app applies it after drawing.
#[derive(Debug, Clone)]
pub enum Action {
    Open,
    OpenRecent(PathBuf),
    OpenSample(usize),
    OpenDemo,
    ClearRecent,
    Save(Purpose),
    Camera(Camera),
    Layout(ReducedLayout),
    /// New membrane parameters or frequency; `settle` is false while a value is being dragged.
    Electrical {
        params: Params,
        freq_hz: f64,
        settle: bool,
    },
    /// A drag ended: rebuild what waits on settled values.
    Settle,
    Budget(usize),
    /// How compartments get their capacitance (the reduction is rebuilt).
    Capacitance(CapacitanceRule),
    Kept(i32, bool),
    ColourBy(ColourBy),
    Unit(LogUnit),
}

/// The controls: files, membrane, frequency, budget, types, colouring, view and export.
#[derive(Debug, Clone)]
pub struct ControlsPanel {
    pub params: Params,
    pub freq_hz: f64,
    pub budget: usize,
    /// A parameter changed during a drag; the reduction is rebuilt when it ends.
    pub unsettled: bool,
}

impl Default for ControlsPanel {
    fn default() -> Self {
        ControlsPanel {
            params: Params::default(),
            freq_hz: 0.0,
            budget: 63,
            unsettled: false,
        }
    }
}

impl ControlsPanel {
    /// Takes the values of a freshly loaded state.
    pub fn sync_from(&mut self, s: &CellState) {
        self.params = s.params;
        self.freq_hz = s.freq_hz;
        self.budget = s.budget;
    }

    /// The whole panel: one sub-view per section.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        state: Option<&CellState>,
        recent: &RecentFiles,
        layout: ReducedLayout,
        cam: &Camera,
        out: &mut Vec<Action>,
    ) {
        ui.spacing_mut().slider_width = 150.0;
        ui.add_space(4.0);
        ui.strong("Cell");
        files_section(ui, recent, out);
        let Some(s) = state else {
            ui.label("Opening…");
            return;
        };
        if !s.cell.warnings.is_empty() {
            egui::CollapsingHeader::new(format!("Warnings ({})", s.cell.warnings.len()))
                .default_open(true)
                .show(ui, |ui| {
                    for w in &s.cell.warnings {
                        ui.colored_label(Color32::from_rgb(240, 200, 90), w);
                    }
                });
        }

        ui.separator();
        ui.strong("Membrane and cytoplasm");
        self.electrical_section(ui, out);
        ui.separator();
        ui.strong("Reduction");
        self.reduction_section(ui, s, out);
        ui.separator();
        ui.strong("Neurite types in the model");
        for (&k, &on) in &s.kept {
            let mut v = on;
            if ui.checkbox(&mut v, capitalised(kind_name(k))).changed() {
                out.push(Action::Kept(k, v));
            }
        }

        ui.separator();
        ui.strong("Colour the arbors by");
        colour_section(ui, s, out);
        ui.separator();
        ui.strong("View");
        view_section(ui, layout, cam, out);
        ui.separator();
        ui.strong("Save");
        save_section(ui, s, out);
    }

    /// Rm, Ra, Cm and the frequency; a drag sends unsettled values, its end a settle.
    fn electrical_section(&mut self, ui: &mut egui::Ui, out: &mut Vec<Action>) {
        let mut p = self.params;
        let mut any_drag_end = false;
        let mut changed = false;
        let mut dragging = false;
        egui::Grid::new("membrane").num_columns(2).show(ui, |ui| {
            for (label, hint, v, lo, hi, unit) in [
                (
                    "Membrane resistance",
                    "Rm: how leaky the membrane is; higher means less current lost",
                    &mut p.rm_ohm_cm2,
                    100.0,
                    1e6,
                    " Ω·cm²",
                ),
                (
                    "Axial resistivity",
                    "Ra: resistance of the cytoplasm along the neurites",
                    &mut p.ra_ohm_cm,
                    10.0,
                    1000.0,
                    " Ω·cm",
                ),
                (
                    "Membrane capacitance",
                    "Cm: charge stored per area; matters above DC",
                    &mut p.cm_uf_cm2,
                    0.1,
                    10.0,
                    " µF/cm²",
                ),
            ] {
                ui.label(label).on_hover_text(hint);
                let speed = *v * 0.005;
                let r = ui.add(
                    egui::DragValue::new(v)
                        .range(lo..=hi)
                        .speed(speed)
                        .max_decimals(2)
                        .suffix(unit),
                );
                let r = r.on_hover_text(hint);
                changed |= r.changed();
                dragging |= r.dragged();
                any_drag_end |= r.drag_stopped();
                ui.end_row();
            }
        });
        ui.label(format!("Membrane time constant {:.1} ms", p.tau_ms()));

        ui.add_space(4.0);
        let mut f = self.freq_hz;
        let r = ui.add(
            egui::Slider::new(&mut f, 0.0..=1000.0)
                .logarithmic(true)
                .smallest_positive(1.0)
                .text("Frequency")
                .custom_formatter(|v, _| {
                    if v < 0.5 {
                        "0 Hz (DC)".into()
                    } else {
                        format!("{v:.0} Hz")
                    }
                })
                .custom_parser(|t| {
                    let t = t
                        .trim()
                        .trim_end_matches("(DC)")
                        .trim()
                        .trim_end_matches("Hz");
                    t.trim().parse::<f64>().ok()
                }),
        );
        let r = r.on_hover_text("0 is a steady current (DC); higher frequencies attenuate more");
        changed |= r.changed();
        dragging |= r.dragged();
        any_drag_end |= r.drag_stopped();
        if changed {
            self.params = p;
            self.freq_hz = f;
            out.push(Action::Electrical {
                params: p,
                freq_hz: f,
                settle: !dragging,
            });
        }
        if any_drag_end || (self.unsettled && !dragging && !changed) {
            self.unsettled = false;
            out.push(Action::Settle);
        }
    }

    /// The compartment budget (or why there is no reduction).
    fn reduction_section(&mut self, ui: &mut egui::Ui, s: &CellState, out: &mut Vec<Action>) {
        match &s.reduction {
            Some(r) => {
                let (lo, hi) = (r.min_compartments(), r.max_compartments().max(1));
                let mut b = s.budget.clamp(lo, hi);
                let resp = ui.add(
                    egui::Slider::new(&mut b, lo..=hi)
                        .logarithmic(hi > 64)
                        .text("Compartments"),
                );
                resp.on_hover_text(format!(
                    "How many compartments the reduced tree may use, soma included.\n\n{}",
                    super::terms::JUNCTION_FRACTION
                ));
                if b != s.budget {
                    self.budget = b;
                    out.push(Action::Budget(b));
                }
                if let Some(red) = &s.reduced {
                    ui.label(format!("{} compartments drawn", red.tree.len()));
                }
                capacitance_choice(ui, s, out);
            }
            None => {
                ui.add_enabled(
                    false,
                    egui::Slider::new(&mut self.budget, 1..=16).text("Compartments"),
                );
                ui.label(&s.reduction_note);
            }
        }
    }
}

/// The capacitance rule, and the status line while a `timed` tree is being polished.
fn capacitance_choice(ui: &mut egui::Ui, s: &CellState, out: &mut Vec<Action>) {
    ui.horizontal(|ui| {
        ui.label("Capacitances").on_hover_text(
            "timed: fitted, then adjusted so every injection point's soma EPSP peaks when and \
             as high as in the cell (slowest time constant within about 10 % of Rm·Cm).\n\
             fitted: to the cell's transfer impedances (slowest time constant within 2 %).\n\
             uniform: Rm·Cm × leak (slowest time constant exactly Rm·Cm).\n\
             The conductances are the same under all three.",
        );
        for (rule, name) in [
            (CapacitanceRule::Timed, "timed"),
            (CapacitanceRule::Fitted, "fitted"),
            (CapacitanceRule::Uniform, "uniform"),
        ] {
            if ui.selectable_label(s.capacitance == rule, name).clicked() && s.capacitance != rule {
                out.push(Action::Capacitance(rule));
            }
        }
    });
    if s.reduced.as_ref().is_some_and(|r| !r.finished) {
        ui.horizontal(|ui| {
            ui.spinner();
            ui.weak(super::polish::STATUS).on_hover_text(
                "The fitted tree is shown meanwhile; the timed one replaces it when ready.",
            );
        });
    }
}

/// Open, recent files, samples.
fn files_section(ui: &mut egui::Ui, recent: &RecentFiles, out: &mut Vec<Action>) {
    ui.horizontal_wrapped(|ui| {
        if ui
            .button("Open file…")
            .on_hover_text("Open an SWC reconstruction (you can also drop a file on the window)")
            .clicked()
        {
            out.push(Action::Open);
        }
        ui.menu_button("Recent", |ui| {
            if recent.list.is_empty() {
                ui.label("No files opened yet");
            }
            for p in &recent.list {
                let name = p
                    .file_name()
                    .map(|n| n.to_string_lossy().into_owned())
                    .unwrap_or_default();
                if ui
                    .button(name)
                    .on_hover_text(p.display().to_string())
                    .clicked()
                {
                    out.push(Action::OpenRecent(p.clone()));
                    ui.close();
                }
            }
            if !recent.list.is_empty() && ui.button("Forget these").clicked() {
                out.push(Action::ClearRecent);
                ui.close();
            }
        });
        ui.menu_button("Samples", |ui| {
            for (i, (name, _)) in super::files::samples().iter().enumerate() {
                if ui.button(name).clicked() {
                    out.push(Action::OpenSample(i));
                    ui.close();
                }
            }
        });
    });
}

/// What colours the arbors, and the log unit.
fn colour_section(ui: &mut egui::Ui, s: &CellState, out: &mut Vec<Action>) {
    for c in ColourBy::ALL {
        let r = ui.radio(s.colour_by == c, c.label());
        let r = match c {
            ColourBy::Strahler => r.on_hover_text(super::terms::STRAHLER),
            _ => r,
        };
        if r.clicked() && s.colour_by != c {
            out.push(Action::ColourBy(c));
        }
    }
    ui.horizontal(|ui| {
        ui.label("Attenuation in")
            .on_hover_text(super::terms::LOG_UNITS);
        for (u, name) in [(LogUnit::Decibel, "dB"), (LogUnit::Neper, "Np")] {
            let r = ui
                .radio(s.unit == u, name)
                .on_hover_text(super::terms::LOG_UNITS);
            if r.clicked() && s.unit != u {
                out.push(Action::Unit(u));
            }
        }
    });
    ui.label("Click a point on the original to make it the injection point.");
}

/// Camera presets and the reduced tree's layout.
fn view_section(ui: &mut egui::Ui, layout: ReducedLayout, cam: &Camera, out: &mut Vec<Action>) {
    ui.horizontal_wrapped(|ui| {
        if ui
            .button("Reset")
            .on_hover_text("Whole cell, seen from the front")
            .clicked()
        {
            out.push(Action::Camera(Camera::default()));
        }
        for (v, name, hint) in [
            (AxisView::Front, "Front", "x to the right, y up"),
            (AxisView::Side, "Side", "z to the right, y up"),
            (AxisView::Top, "Top", "x to the right, z up"),
        ] {
            if ui.button(name).on_hover_text(hint).clicked() {
                out.push(Action::Camera(Camera {
                    zoom: cam.zoom,
                    pan: cam.pan,
                    ..Camera::axis(v)
                }));
            }
        }
    });
    ui.label(
        "Drag to turn, right-drag or shift-drag to shift, scroll to zoom, double-click to reset.",
    );
    ui.horizontal(|ui| {
        ui.label("Draw the reduction");
        for (l, name) in [
            (ReducedLayout::InPlace, "in place"),
            (ReducedLayout::Dendrogram, "as a dendrogram"),
        ] {
            let r = ui.radio(layout == l, name);
            let r = match l {
                ReducedLayout::Dendrogram => r.on_hover_text(super::terms::DENDROGRAM),
                _ => r,
            };
            if r.clicked() && layout != l {
                out.push(Action::Layout(l));
            }
        }
    });
}

/// The export buttons.
fn save_section(ui: &mut egui::Ui, s: &CellState, out: &mut Vec<Action>) {
    ui.horizontal_wrapped(|ui| {
        let has_tree = s.reduction.is_some();
        if ui
            .add_enabled(has_tree, egui::Button::new("Reduced tree (JSON)…"))
            .clicked()
        {
            out.push(Action::Save(Purpose::SaveJson));
        }
        if ui
            .add_enabled(has_tree, egui::Button::new("Reduced tree (SWC)…"))
            .clicked()
        {
            out.push(Action::Save(Purpose::SaveSwc));
        }
        if ui
            .add_enabled(has_tree, egui::Button::new("Reduced tree (NeuroML)…"))
            .clicked()
        {
            out.push(Action::Save(Purpose::SaveNeuroml));
        }
        if ui.button("Figure (SVG)…").clicked() {
            out.push(Action::Save(Purpose::SaveSvg));
        }
        if ui.button("Figure (PNG)…").clicked() {
            out.push(Action::Save(Purpose::SavePng));
        }
    });
}

fn capitalised(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

/// The three plots under the drawings, side by side.
#[derive(Debug, Clone, Default)]
pub struct PlotsPanel {
    /// Number of original points drawn in the attenuation plot last frame (after thinning).
    pub points_drawn: usize,
}

/// At most this many original points go into the attenuation plot (evenly thinned).
const PLOT_POINTS: usize = 10_000;

impl PlotsPanel {
    pub fn ui(&mut self, ui: &mut egui::Ui, s: &CellState, sweep: &mut super::sweep::Sweeper) {
        ui.columns(3, |cols| {
            self.attenuation(&mut cols[0], s);
            error_plot(&mut cols[1], s, sweep);
            sholl_plot(&mut cols[2], s);
        });
    }

    fn attenuation(&mut self, ui: &mut egui::Ui, s: &CellState) {
        let (orig, red) = s.attenuation_profile();
        let step = orig.len().div_ceil(PLOT_POINTS).max(1);
        let thinned: Vec<[f64; 2]> = orig.iter().step_by(step).copied().collect();
        self.points_drawn = thinned.len();
        let what = if s.colour_by == ColourBy::ToSoma {
            "Voltage at the soma, current at each point"
        } else {
            "Voltage, current at the injection point"
        };
        plot_title(
            ui,
            format!("{what} vs path distance (reduced tree: current at the compartment, or on a link between two)"),
        )
        .on_hover_text(
            "Orange: the reduced tree with the current injected at the injection point's \
             compartment (not at the point itself), so its offset is not a reduction error.",
        );
        // µm or mm by the farthest point of the model, so the unit stays while the site moves
        let far = s.model.path_distance.iter().copied().fold(0.0, f64::max);
        let unit = axis::DistanceUnit::for_extent(far);
        let to_axis = |v: Vec<[f64; 2]>| -> Vec<[f64; 2]> {
            v.into_iter().map(|[d, y]| [d / unit.um(), y]).collect()
        };
        let (thinned, red) = (to_axis(thinned), to_axis(red));
        let plot = Plot::new("attenuation")
            .legend(Legend::default().position(egui_plot::Corner::RightBottom));
        axis::readable_x(plot, unit.title())
            .y_axis_label(s.unit.suffix())
            .show(ui, |pu| {
                pu.points(
                    Points::new("original points", thinned)
                        .radius(1.2)
                        .color(Color32::from_rgb(150, 150, 160)),
                );
                if !red.is_empty() {
                    pu.points(
                        Points::new("reduced tree", red)
                            .radius(3.5)
                            .color(Color32::from_rgb(250, 170, 60)),
                    );
                }
            });
    }
}

fn error_plot(ui: &mut egui::Ui, s: &CellState, sweep: &mut super::sweep::Sweeper) {
    let (note, label) = match sweep.result(s) {
        Some(Ok(_)) => (
            "measured on one tree per budget, each finished by the capacitance rule",
            "EPSP error too".to_string(),
        ),
        Some(Err(e)) => ("could not be measured", format!("EPSP error too ({e})")),
        None if sweep.wanted => (
            "being measured in the background",
            "EPSP error too (measuring…)".to_string(),
        ),
        None => (
            "tick the box to measure it (a few seconds, in the background)",
            "EPSP error too".to_string(),
        ),
    };
    plot_title(ui, "Reduction error vs number of compartments").on_hover_text(format!(
        "DC: the collapse order's estimate of the weighted RMS error, over the sites, of the \
         DC attenuation to the soma (Np).\nEPSP: the 95th percentile over the sites of the \
         soma EPSP's peak error |ln(reduced/cell)| for a brief current at the site (Np); {note}."
    ));
    ui.checkbox(&mut sweep.wanted, label).on_hover_text(
        "Also measure the soma EPSP's peak error (95th percentile over the sites) at 1, 3, 7, \
         15, … compartments: one reduced tree per budget, finished by the capacitance rule",
    );
    let epsp = sweep.curve(s).filter(|_| sweep.wanted);
    match &s.reduction {
        Some(r) => {
            let curve: Vec<[f64; 2]> = r
                .error_curve()
                .into_iter()
                .filter(|(_, e)| e.is_finite())
                .map(|(b, e)| [b as f64, e])
                .collect();
            let current = s.reduced.as_ref().map(|t| t.tree.len()).unwrap_or(s.budget);
            let plot = Plot::new("error").legend(Legend::default());
            axis::readable_x(plot, "compartments")
                .y_axis_label("error (Np)")
                .show(ui, |pu| {
                    pu.line(
                        Line::new("DC attenuation, RMS", curve)
                            .color(Color32::from_rgb(120, 200, 235)),
                    );
                    if let Some(e) = epsp {
                        pu.line(
                            Line::new("EPSP peak, p95", e.to_vec())
                                .color(Color32::from_rgb(235, 120, 170)),
                        );
                        pu.points(
                            Points::new("EPSP peak, p95", e.to_vec())
                                .radius(2.5)
                                .color(Color32::from_rgb(235, 120, 170)),
                        );
                    }
                    pu.vline(
                        VLine::new(format!("now: {current}"), current as f64)
                            .color(Color32::from_rgb(250, 170, 60)),
                    );
                });
        }
        None => {
            ui.label(&s.reduction_note);
        }
    }
}

fn sholl_plot(ui: &mut egui::Ui, s: &CellState) {
    plot_title(ui, "Sholl profile").on_hover_text(super::terms::SHOLL);
    let pts: Vec<[f64; 2]> = s.cell.sholl.iter().map(|&(r, c)| [r, c as f64]).collect();
    axis::readable_x(Plot::new("sholl"), "distance from the soma centre (µm)")
        .y_axis_label(format!("crossings, every {} µm", s.cell.sholl_step))
        .show(ui, |pu| {
            pu.line(Line::new("crossings", pts).color(Color32::from_rgb(110, 215, 140)));
        });
}

/// A plot's title: left-aligned and wrapped with normal spacing (the plot columns are justified
/// layouts, where egui stretches the spaces of a wrapped label to the column's width).
pub(super) fn plot_title(ui: &mut egui::Ui, text: impl Into<egui::WidgetText>) -> egui::Response {
    ui.with_layout(egui::Layout::top_down(egui::Align::Min), |ui| {
        ui.label(text)
    })
    .inner
}
