//! The branching lab: small parametric trees for teaching, computed live with the cable engine
//! (the model lives in [`crate::lab`]; this module only draws it and reads the controls:
//! [`lessons`] holds the lesson texts and trees, `drawing` the tree picture, `plots` the plots
//! and the numbers).
//!
//! Left: lessons, shape, geometry by level and by branch, ends, soma, membrane, frequency.
//! Centre: the lesson text, a drawing of the tree (coloured with the main view's heat scale), the
//! numbers (input resistances, attenuations, 3/2 ratios, the equivalent cylinder), and three
//! plots along the path from the chosen tip to the soma.

mod drawing;
pub mod lessons;
mod plots;

pub use lessons::{LabColour, Preset, XAxis};

use super::colour::Scale;
use super::files::{Dialogs, Purpose};
use crate::Morphology;
use crate::lab::{End, LabResult, MAX_LEVELS, PathSeries, Piece, Shape, TreeSpec};
use eframe::egui::{self, Color32, Pos2, RichText, Vec2};
use std::path::PathBuf;
use std::sync::mpsc::Receiver;

/// The lab view: owns its state, draws itself with `ui()`.
pub struct LabView {
    pub spec: TreeSpec,
    /// The chosen branch (its sliders, and the path runs from the tip below it to the soma).
    pub chosen: usize,
    pub preset: Option<Preset>,
    pub colour_by: LabColour,
    pub x_axis: XAxis,
    /// Where "Export as SWC" asks for a file name (the app's own dialogs; scripted in tests).
    pub dialogs: Dialogs,
    /// The last thing done or the last failure, shown under the buttons.
    pub notice: Option<String>,
    result: Option<LabResult>,
    /// The dashed curves: the same tree at DC when the frequency is above 0, or, in the
    /// sealed-versus-killed lesson, with the other end condition; with their name.
    compare: Option<(&'static str, LabResult)>,
    error: Option<String>,
    computed: Option<(TreeSpec, usize)>,
    pending_export: Option<Receiver<Option<PathBuf>>>,
    /// Where the middle of each branch was drawn last frame (screen points).
    branch_mids: Vec<Pos2>,
    /// Frames drawn so far (the first few are repainted so that plots settle their axes).
    frames: u32,
    send: Option<(String, Morphology)>,
    scale: Scale,
}

impl Default for LabView {
    fn default() -> Self {
        Self::new()
    }
}

impl LabView {
    pub fn new() -> Self {
        let mut v = LabView {
            spec: TreeSpec::default(),
            chosen: 0,
            preset: None,
            colour_by: LabColour::FromSoma,
            x_axis: XAxis::Micrometres,
            dialogs: Dialogs::Native,
            notice: None,
            result: None,
            compare: None,
            error: None,
            computed: None,
            pending_export: None,
            frames: 0,
            branch_mids: Vec::new(),
            send: None,
            scale: Scale::new(),
        };
        // POLLARD_LAB_LESSON=n (1 to 6) opens on lesson n (demos and screenshots)
        let lesson = std::env::var("POLLARD_LAB_LESSON")
            .ok()
            .and_then(|t| t.trim().parse::<usize>().ok())
            .and_then(|n| n.checked_sub(1))
            .and_then(|i| Preset::ALL.get(i).copied());
        v.apply_preset(lesson.unwrap_or(Preset::ThinDaughters));
        v
    }

    /// Loads a lesson's tree.
    pub fn apply_preset(&mut self, p: Preset) {
        let (spec, chosen) = p.setup();
        self.spec = spec;
        self.chosen = chosen;
        self.preset = Some(p);
        self.recompute();
    }

    /// The numbers of the current tree (None only when the parameters are refused).
    pub fn result(&self) -> Option<&LabResult> {
        self.result.as_ref()
    }

    /// The plotted values along the path (what the three plots show).
    pub fn series(&self) -> Option<&PathSeries> {
        self.result.as_ref().map(|r| &r.path)
    }

    /// The same tree at DC (only when the frequency is above 0).
    pub fn series_dc(&self) -> Option<&PathSeries> {
        if self.spec.freq_hz > 0.0 {
            self.compare.as_ref().map(|(_, r)| &r.path)
        } else {
            None
        }
    }

    /// The dashed comparison curves and what they show, if any.
    pub fn series_compare(&self) -> Option<(&'static str, &PathSeries)> {
        self.compare.as_ref().map(|(what, r)| (*what, &r.path))
    }

    /// Where the middle of branch `s` was drawn in the last frame (for clicking it in tests).
    pub fn branch_screen_pos(&self, s: usize) -> Option<Pos2> {
        self.branch_mids.get(s).copied()
    }

    /// Why the parameters were refused, if they were.
    pub fn error(&self) -> Option<&str> {
        self.error.as_deref()
    }

    /// Recomputes if the tree or the path changed since the last time.
    pub fn recompute(&mut self) {
        let n = crate::lab::sections(&self.spec).len();
        if self.chosen >= n {
            self.chosen = 0;
        }
        let key = (self.spec.clone(), self.chosen);
        if self.computed.as_ref() == Some(&key) {
            return;
        }
        self.computed = Some(key);
        match LabResult::compute(&self.spec, self.chosen) {
            Ok(r) => {
                self.compare = if self.spec.freq_hz > 0.0 {
                    let mut dc = self.spec.clone();
                    dc.freq_hz = 0.0;
                    LabResult::compute(&dc, self.chosen)
                        .ok()
                        .map(|r| ("steady current", r))
                } else if self.preset == Some(Preset::SealedKilled) {
                    let mut other = self.spec.clone();
                    other.end_overrides.clear();
                    let what = match self.spec.end {
                        End::Sealed => {
                            other.end = End::Killed;
                            "killed end"
                        }
                        End::Killed => {
                            other.end = End::Sealed;
                            "sealed end"
                        }
                    };
                    LabResult::compute(&other, self.chosen)
                        .ok()
                        .map(|r| (what, r))
                } else {
                    None
                };
                self.result = Some(r);
                self.error = None;
            }
            Err(e) => {
                self.error = Some(e.to_string());
            }
        }
    }

    /// A tree the user asked to open in the main view ("Send to main view"), once.
    pub fn take_send_to_main(&mut self) -> Option<(String, Morphology)> {
        self.send.take()
    }

    fn tree_name(&self) -> String {
        let what = match self.preset {
            Some(p) => p.label().to_string(),
            None => self.spec.shape.label().to_string(),
        };
        format!("lab: {}", what.to_lowercase())
    }

    fn file_stem(&self) -> String {
        let base: String = self
            .tree_name()
            .chars()
            .map(|c| if c.is_ascii_alphanumeric() { c } else { '-' })
            .collect();
        let mut out = String::new();
        for part in base.split('-').filter(|s| !s.is_empty()) {
            if !out.is_empty() {
                out.push('-');
            }
            out.push_str(part);
        }
        out
    }

    /// "Send to main view": hands the current tree over (geometry only; every end is sealed
    /// there).
    pub fn send_to_main(&mut self) {
        if let Some(r) = &self.result {
            let mut m = r.tree.morphology.clone();
            m.source = self.tree_name();
            self.send = Some((self.tree_name(), m));
            self.notice = Some("Sent to the cell view.".into());
        }
    }

    /// The SWC text of the current tree, with its parameters as comments.
    pub fn swc_text(&self) -> Option<String> {
        let r = self.result.as_ref()?;
        let s = &self.spec;
        let mut header = vec![
            format!(" {} — made in the pollard branching lab", self.tree_name()),
            format!(
                " membrane: Rm {} ohm cm2, Ra {} ohm cm, Cm {} uF/cm2",
                s.params.rm_ohm_cm2, s.params.ra_ohm_cm, s.params.cm_uf_cm2
            ),
            " each daughter starts with a joint point 0.01 um from its fork, at its own radius"
                .to_string(),
        ];
        let killed: Vec<&str> = r
            .tree
            .sections
            .iter()
            .filter(|x| x.end == Some(End::Killed))
            .map(|x| x.name.as_str())
            .collect();
        if !killed.is_empty() {
            header.push(format!(
                " killed (held at rest) in the lab, not representable in SWC: {}",
                killed.join(", ")
            ));
        }
        Some(r.tree.morphology.to_swc_string(&header))
    }

    /// "Export as SWC": asks [`Dialogs`] for a path (the system's dialog runs off the UI
    /// thread) and writes when the answer comes.
    pub fn export_swc(&mut self) {
        let rx = self.dialogs.ask(Purpose::ExportLabSwc, &self.file_stem());
        match rx.try_recv() {
            Ok(Some(p)) => self.write_swc(&p),
            Ok(None) => {}
            Err(_) => self.pending_export = Some(rx),
        }
    }

    /// Writes the current tree's SWC text to `path` (through `export::write_atomic`).
    pub fn write_swc(&mut self, path: &std::path::Path) {
        let Some(text) = self.swc_text() else {
            self.notice = Some("Nothing to export: the parameters were refused.".into());
            return;
        };
        self.notice = Some(
            match crate::export::write_atomic(path, text.as_bytes(), &[]) {
                Ok(()) => format!("Wrote {}", path.display()),
                Err(e) => format!("Could not write {}: {e}", path.display()),
            },
        );
    }

    /// Draws the lab.
    pub fn ui(&mut self, ui: &mut egui::Ui) {
        if let Some(rx) = &self.pending_export
            && let Ok(answer) = rx.try_recv()
        {
            self.pending_export = None;
            if let Some(p) = answer {
                self.write_swc(&p);
            }
        }
        if self.frames < 4 {
            self.frames += 1;
            ui.ctx().request_repaint();
        }
        if self.pending_export.is_some() {
            ui.ctx()
                .request_repaint_after(std::time::Duration::from_millis(100));
        }
        egui::Panel::left("lab_controls")
            .resizable(true)
            .default_size(330.0)
            .show(ui, |ui| {
                egui::ScrollArea::vertical().show(ui, |ui| {
                    self.controls(ui);
                });
            });
        self.recompute();
        egui::CentralPanel::default().show(ui, |ui| {
            self.centre(ui);
        });
    }

    fn controls(&mut self, ui: &mut egui::Ui) {
        ui.heading("Branching lab");
        ui.label("Small trees computed with the same cable engine as a real cell.");
        ui.horizontal(|ui| {
            if ui.button("Send to main view").clicked() {
                self.send_to_main();
            }
            if ui.button("Export as SWC").clicked() {
                self.export_swc();
            }
        })
        .response
        .on_hover_text(
            "The cell view gets the geometry only: there every end is sealed and the membrane is \
             the cell view's.",
        );
        if let Some(n) = &self.notice {
            ui.label(RichText::new(n).small());
        }
        ui.separator();
        ui.add_space(4.0);
        ui.label(RichText::new("Lessons").strong());
        for p in Preset::ALL {
            if ui
                .selectable_label(self.preset == Some(p), p.label())
                .clicked()
            {
                self.apply_preset(p);
            }
        }
        ui.separator();
        ui.label(RichText::new("Tree").strong());
        let before = self.spec.shape;
        ui.horizontal_wrapped(|ui| {
            for sh in Shape::ALL {
                ui.radio_value(&mut self.spec.shape, sh, sh.label());
            }
        });
        if matches!(self.spec.shape, Shape::Symmetric | Shape::Asymmetric) {
            ui.add(slider(&mut self.spec.levels, 1..=MAX_LEVELS).text("Levels"));
        }
        if self.spec.shape != before {
            self.spec.overrides.clear();
            self.spec.end_overrides.clear();
            self.chosen = 0;
        }
        ui.add_space(4.0);
        ui.label(RichText::new("Geometry by level").strong());
        let levels = self.spec.levels_used();
        for i in 0..levels {
            let name = level_name(self.spec.shape, i);
            piece_sliders(ui, &name, &mut self.spec.level[i]);
        }
        if self.spec.shape == Shape::Asymmetric && levels > 1 {
            piece_sliders(ui, "Side branches", &mut self.spec.side);
        }
        ui.add_space(4.0);
        self.branch_controls(ui);
        ui.separator();
        ui.label(RichText::new("Ends").strong());
        ui.horizontal(|ui| {
            ui.radio_value(&mut self.spec.end, End::Sealed, "Sealed");
            ui.radio_value(&mut self.spec.end, End::Killed, "Killed (held at rest)");
        });
        ui.add(
            slider(&mut self.spec.soma_diam_um, 0.0..=40.0).text("Soma diameter (µm)"),
        )
        .on_hover_text(
            "A sphere of this diameter at the root, in parallel with the tree. At 0 the tree is \
             seen bare from its root (a pure cable seen from its end).",
        );
        ui.label(
            RichText::new(
                "A sphere at the root, in parallel with the tree; 0 = no soma membrane, the tree \
                 seen bare from its root.",
            )
            .small(),
        );
        ui.separator();
        ui.label(RichText::new("Membrane").strong());
        let p = &mut self.spec.params;
        ui.add(
            slider(&mut p.rm_ohm_cm2, 1000.0..=100_000.0)
                .logarithmic(true)
                .text("Rm (Ω·cm²)"),
        );
        ui.add(
            slider(&mut p.ra_ohm_cm, 30.0..=500.0)
                .logarithmic(true)
                .text("Ra (Ω·cm)"),
        );
        ui.add(slider(&mut p.cm_uf_cm2, 0.3..=3.0).text("Cm (µF/cm²)"));
        ui.add(
            slider(&mut self.spec.freq_hz, 0.0..=1000.0)
                .logarithmic(true)
                .smallest_positive(1.0)
                .text("Frequency (Hz)"),
        );
        ui.label(
            RichText::new(format!(
                "τ = {:.1} ms; λ of the trunk = {:.0} µm",
                self.spec.params.tau_ms(),
                self.spec.params.lambda_um(self.spec.level[0].diam_um)
            ))
            .small(),
        );
    }

    fn branch_controls(&mut self, ui: &mut egui::Ui) {
        let secs = crate::lab::sections(&self.spec);
        if self.chosen >= secs.len() {
            self.chosen = 0;
        }
        ui.label(RichText::new("Chosen branch").strong());
        let label_of = |i: usize| {
            let s = &secs[i];
            let what = if s.parent.is_none() {
                "trunk"
            } else if s.is_tip() {
                "tip branch"
            } else {
                "inner branch"
            };
            format!("{} ({what})", s.name)
        };
        egui::ComboBox::from_label("Branch")
            .selected_text(label_of(self.chosen))
            .show_ui(ui, |ui| {
                for i in 0..secs.len() {
                    ui.selectable_value(&mut self.chosen, i, label_of(i));
                }
            });
        ui.label(
            RichText::new("or click a branch in the drawing. The plots follow the path from its tip to the soma.")
                .small(),
        );
        let i = self.chosen;
        let mut own = self.spec.overrides.contains_key(&i);
        if ui
            .checkbox(&mut own, "Give this branch its own size")
            .changed()
        {
            if own {
                self.spec.overrides.insert(i, secs[i].piece);
            } else {
                self.spec.overrides.remove(&i);
            }
        }
        if let Some(piece) = self.spec.overrides.get_mut(&i) {
            piece_sliders(ui, "This branch", piece);
        }
        if secs[i].is_tip() {
            let mut e = self.spec.end_overrides.get(&i).copied();
            egui::ComboBox::from_label("This tip's end")
                .selected_text(match e {
                    None => "as the others",
                    Some(End::Sealed) => "sealed",
                    Some(End::Killed) => "killed",
                })
                .show_ui(ui, |ui| {
                    ui.selectable_value(&mut e, None, "as the others");
                    ui.selectable_value(&mut e, Some(End::Sealed), "sealed");
                    ui.selectable_value(&mut e, Some(End::Killed), "killed");
                });
            match e {
                Some(x) => {
                    self.spec.end_overrides.insert(i, x);
                }
                None => {
                    self.spec.end_overrides.remove(&i);
                }
            }
        }
    }

    fn centre(&mut self, ui: &mut egui::Ui) {
        if let Some(p) = self.preset {
            egui::Frame::group(ui.style()).show(ui, |ui| {
                ui.set_width(ui.available_width());
                ui.label(RichText::new(p.label()).strong().size(15.0));
                ui.label(p.text());
                ui.label(RichText::new(p.formula()).monospace())
                    .on_hover_text(crate::app::terms::R_INFINITY);
            });
        }
        if let Some(e) = &self.error {
            ui.colored_label(Color32::from_rgb(255, 110, 100), format!("⚠ {e}"));
        }
        // taken out while drawing, so that the controls below may change `self`
        let Some(result) = self.result.take() else {
            return;
        };
        let r = &result;
        let avail = ui.available_size();
        let top_h = (avail.y * 0.5).clamp(220.0, 420.0);
        let mut clicked: Option<usize> = None;
        ui.horizontal(|ui| {
            let draw_w = (avail.x * 0.55).max(300.0);
            ui.vertical(|ui| {
                ui.set_width(draw_w);
                ui.horizontal(|ui| {
                    egui::ComboBox::from_label("Colour of the drawing")
                        .selected_text(self.colour_by.label())
                        .show_ui(ui, |ui| {
                            for c in LabColour::ALL {
                                ui.selectable_value(&mut self.colour_by, c, c.label());
                            }
                        });
                });
                let (c, mids) = self.drawing(ui, r, Vec2::new(draw_w, top_h - 30.0));
                clicked = c;
                self.branch_mids = mids;
            });
            ui.separator();
            ui.vertical(|ui| {
                egui::ScrollArea::vertical()
                    .id_salt("lab_numbers")
                    .max_height(top_h)
                    .show(ui, |ui| {
                        plots::numbers(ui, r, r.equivalent.shown_cylinder())
                    });
            });
        });
        if let Some(s) = clicked {
            self.chosen = s;
            ui.ctx().request_repaint();
        }
        ui.separator();
        ui.horizontal(|ui| {
            ui.label("Plot against:");
            ui.radio_value(
                &mut self.x_axis,
                XAxis::Micrometres,
                "distance from the soma (µm)",
            );
            ui.radio_value(
                &mut self.x_axis,
                XAxis::Electrotonic,
                "electrotonic distance X (in λ, at DC)",
            )
            .on_hover_text(crate::app::terms::ELECTROTONIC);
        });
        self.plots(ui, r);
        self.result = Some(result);
    }
}

fn level_name(shape: Shape, i: usize) -> String {
    match (shape, i) {
        (_, 0) => "Trunk".into(),
        (Shape::YJunction, _) => "Daughters".into(),
        (Shape::Asymmetric, i) => format!("Main line, level {i}"),
        (_, i) => format!("Level {i}"),
    }
}

/// Length and diameter sliders of one piece, labelled "<name> length (µm)" and
/// "<name> diameter (µm)".
fn piece_sliders(ui: &mut egui::Ui, name: &str, p: &mut Piece) {
    ui.add(
        slider(&mut p.length_um, 10.0..=3000.0)
            .logarithmic(true)
            .max_decimals(0)
            .text(format!("{name} length (µm)")),
    );
    ui.add(
        slider(&mut p.diam_um, 0.1..=10.0)
            .logarithmic(true)
            .max_decimals(2)
            .text(format!("{name} diameter (µm)")),
    );
}

/// A slider that clamps and rounds only what the user types or drags, so that the exact values
/// of a lesson (such as 3·2^(−2/3) µm) are kept until touched.
fn slider<'a, N: egui::emath::Numeric>(
    value: &'a mut N,
    range: std::ops::RangeInclusive<N>,
) -> egui::Slider<'a> {
    egui::Slider::new(value, range).clamping(egui::SliderClamping::Edits)
}
