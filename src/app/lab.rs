//! The branching lab: small parametric trees for teaching, computed live with the cable engine
//! (the model lives in [`crate::lab`]; this file only draws it and reads the controls).
//!
//! Left: lessons, shape, geometry by level and by branch, ends, soma, membrane, frequency.
//! Centre: the lesson text, a drawing of the tree (coloured with the main view's heat scale), the
//! numbers (input resistances, attenuations, 3/2 ratios, the equivalent cylinder), and three
//! plots along the path from the chosen tip to the soma.

use super::colour::Scale;
use crate::Morphology;
use crate::lab::{End, Equivalent, LabResult, MAX_LEVELS, PathSeries, Piece, Shape, TreeSpec};
use eframe::egui::{self, Color32, Pos2, RichText, Sense, Stroke, Vec2};
use egui_plot::{AxisHints, Line, LineStyle, Plot, VLine};
use std::path::PathBuf;
use std::sync::mpsc::Receiver;

/// One lesson: a tree and a few sentences.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Preset {
    ThinDaughters,
    ThickDaughters,
    RallTree,
    SealedKilled,
    SlowFast,
    ThinTwig,
}

impl Preset {
    pub const ALL: [Preset; 6] = [
        Preset::ThinDaughters,
        Preset::ThickDaughters,
        Preset::RallTree,
        Preset::SealedKilled,
        Preset::SlowFast,
        Preset::ThinTwig,
    ];

    pub fn label(self) -> &'static str {
        match self {
            Preset::ThinDaughters => "Thin daughters on a thick trunk",
            Preset::ThickDaughters => "Thick daughters on a thin trunk",
            Preset::RallTree => "3/2 rule and the equivalent cylinder",
            Preset::SealedKilled => "Sealed end versus killed end",
            Preset::SlowFast => "Steady versus fast signals",
            Preset::ThinTwig => "Why a thin twig has a high input resistance",
        }
    }

    /// Two or three sentences in plain words.
    pub fn text(self) -> &'static str {
        match self {
            Preset::ThinDaughters => {
                "Going out from the soma, the voltage reaches a fork whose two thin daughters draw \
                 little current, so it passes the fork almost unchanged. Coming in from a daughter's \
                 tip, the same fork offers the thick trunk as a huge load: the voltage collapses at \
                 the fork. Compare the two curves at the fork line, and see how far below 1 the 3/2 \
                 ratio is."
            }
            Preset::ThickDaughters => {
                "The reverse mismatch: a thin trunk ends on two thick daughters, and seen from the trunk \
                 the fork is a heavy load, almost a short to rest, so the voltage from the soma \
                 sinks along the trunk as if towards a killed end. Here even the one-sidedness turns \
                 round: the thick tip has a lower input resistance than the start of the thin trunk, \
                 so the tip's signal reaches the soma better than the soma's reaches the tip. Drag \
                 the daughter diameter down and watch the 3/2 ratio come towards 1."
            }
            Preset::RallTree => {
                "When the daughters' d^3/2 add up to the parent's at every fork, the daughters \
                 together load the parent exactly as a longer parent would. If, besides, every tip \
                 sits at the same electrotonic distance L and ends the same way, the whole tree seen \
                 from the soma is one cylinder of the trunk's diameter and length L·λ. The three \
                 input resistances on the right agree; move one diameter and they part."
            }
            Preset::SealedKilled => {
                "A sealed end lets no current out: charge piles up and the profile flattens near \
                 the tip. A killed end (cut open, or clamped to rest) holds the tip at 0 and drains \
                 current, so the voltage falls all the way to zero and the input resistance drops. \
                 The dashed curves show the other end condition; switch it to swap them."
            }
            Preset::SlowFast => {
                "The membrane is a resistor and a capacitor side by side. For a fast signal the \
                 capacitor conducts too, so the membrane leaks more, the cable behaves as if longer, \
                 and attenuation grows. The dashed curves are the same tree under a steady current: \
                 dendrites pass slow signals better than fast ones."
            }
            Preset::ThinTwig => {
                "Current injected into a thin twig far out has little membrane near it to leak \
                 through and a thin core to flow away along, so it makes a large local voltage: the \
                 input resistance climbs towards the tip. The same twig's signal is strongly \
                 attenuated on its way to the soma, while the soma's signal reaches the twig almost \
                 whole; by reciprocity the two attenuations differ exactly by the ratio of input \
                 resistances."
            }
        }
    }

    /// The formula behind the lesson.
    pub fn formula(self) -> &'static str {
        match self {
            Preset::ThinDaughters | Preset::ThickDaughters => {
                "load at the fork  G_L = Σ Y0_c·tanh(L_c),  Y0 = 1/R∞ ∝ d^3/2\n\
                 V_fork / V_soma = 1 / (cosh L_t + (G_L / Y0_t)·sinh L_t)"
            }
            Preset::RallTree => {
                "d_p^3/2 = Σ d_c^3/2 at every fork,  L = Σ ℓ_i/λ_i on every path\n\
                 R_in = R∞(d_trunk)·coth L,  R∞ = (2/π)·√(Rm·Ra)·d^(−3/2)"
            }
            Preset::SealedKilled => {
                "sealed: R_in = R∞·coth L,  V(X)/V(0) = cosh(L−X)/cosh L\n\
                 killed: R_in = R∞·tanh L,  V(X)/V(0) = sinh(L−X)/sinh L"
            }
            Preset::SlowFast => {
                "y_m = 1/Rm + jωCm,  L(ω) = L·√(1 + jωτ),  τ = Rm·Cm\n\
                 |V(X)/V(0)| = |cosh(L(ω)·(1 − X/L)) / cosh L(ω)|"
            }
            Preset::ThinTwig => {
                "A(tip to soma) = Z_tt / Z_ts,  A(soma to tip) = Z_ss / Z_st,  Z_ts = Z_st\n\
                 so  A(tip to soma) / A(soma to tip) = R_in(tip) / R_in(soma)"
            }
        }
    }

    /// The tree and the chosen branch of the lesson.
    pub fn setup(self) -> (TreeSpec, usize) {
        let mut s = TreeSpec::default();
        let mut chosen = 0;
        match self {
            Preset::ThinDaughters => {
                s.shape = Shape::YJunction;
                s.level[0] = Piece::new(250.0, 4.0);
                s.level[1] = Piece::new(250.0, 0.7);
                s.soma_diam_um = 10.0;
                chosen = 1;
            }
            Preset::ThickDaughters => {
                s.shape = Shape::YJunction;
                s.level[0] = Piece::new(250.0, 0.8);
                s.level[1] = Piece::new(250.0, 3.0);
                s.soma_diam_um = 10.0;
                chosen = 1;
            }
            Preset::RallTree => {
                s.shape = Shape::Symmetric;
                s.levels = 3;
                let k = 2f64.powf(-2.0 / 3.0);
                s.level[0] = Piece::new(200.0, 3.0);
                s.level[1] = Piece::new(150.0, 3.0 * k);
                s.level[2] = Piece::new(120.0, 3.0 * k * k);
                s.soma_diam_um = 0.0;
                chosen = 3;
            }
            Preset::SealedKilled => {
                s.shape = Shape::Cable;
                s.level[0] = Piece::new(600.0, 1.0);
                s.end = End::Killed;
            }
            Preset::SlowFast => {
                s.shape = Shape::YJunction;
                s.level[0] = Piece::new(400.0, 2.0);
                s.level[1] = Piece::new(300.0, 1.26);
                s.freq_hz = 100.0;
                s.soma_diam_um = 10.0;
                chosen = 1;
            }
            Preset::ThinTwig => {
                s.shape = Shape::Asymmetric;
                s.levels = 4;
                s.level[0] = Piece::new(150.0, 4.0);
                s.level[1] = Piece::new(150.0, 3.0);
                s.level[2] = Piece::new(150.0, 2.2);
                s.level[3] = Piece::new(150.0, 1.6);
                s.side = Piece::new(200.0, 0.4);
                s.soma_diam_um = 15.0;
                chosen = 4;
            }
        }
        (s, chosen)
    }
}

/// What the drawing's colours show.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LabColour {
    /// |V/V_soma| for current at the soma.
    FromSoma,
    /// |V/V_tip| for current at the chosen tip.
    FromTip,
    /// Local input resistance.
    InputResistance,
}

impl LabColour {
    pub const ALL: [LabColour; 3] = [
        LabColour::FromSoma,
        LabColour::FromTip,
        LabColour::InputResistance,
    ];

    pub fn label(self) -> &'static str {
        match self {
            LabColour::FromSoma => "Voltage, current at the soma",
            LabColour::FromTip => "Voltage, current at the tip",
            LabColour::InputResistance => "Local input resistance",
        }
    }
}

/// The x axis of the plots.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum XAxis {
    Micrometres,
    Electrotonic,
}

/// The lab view: owns its state, draws itself with `ui()`.
pub struct LabView {
    pub spec: TreeSpec,
    /// The chosen branch (its sliders, and the path runs from the tip below it to the soma).
    pub chosen: usize,
    pub preset: Option<Preset>,
    pub colour_by: LabColour,
    pub x_axis: XAxis,
    /// "Export as SWC" writes here without asking when set (tests and scripts).
    pub export_to: Option<PathBuf>,
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
            export_to: None,
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

    /// "Export as SWC": writes to `export_to` if set, else asks for a path (off the UI thread).
    pub fn export_swc(&mut self) {
        if let Some(p) = self.export_to.clone() {
            self.write_swc(&p);
            return;
        }
        let (tx, rx) = std::sync::mpsc::channel();
        let name = format!("{}.swc", self.file_stem());
        std::thread::spawn(move || {
            let a = rfd::FileDialog::new()
                .add_filter("SWC reconstruction", &["swc"])
                .set_file_name(name)
                .save_file();
            let _ = tx.send(a);
        });
        self.pending_export = Some(rx);
    }

    fn write_swc(&mut self, path: &std::path::Path) {
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
                ui.label(RichText::new(p.formula()).monospace());
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
                    .show(ui, |ui| numbers(ui, r, r.equivalent.shown_cylinder()));
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
            );
        });
        self.plots(ui, r);
        self.result = Some(result);
    }

    /// The tree drawing; returns the section clicked, if any.
    fn drawing(&self, ui: &mut egui::Ui, r: &LabResult, size: Vec2) -> (Option<usize>, Vec<Pos2>) {
        let (rect, response) = ui.allocate_exact_size(size, Sense::click());
        let painter = ui.painter_at(rect);
        painter.rect_filled(rect, 4.0, Color32::from_rgb(18, 18, 22));
        let t = &r.tree;
        let n = t.len();
        let (mut lo, mut hi) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
        for p in &t.flat.pos {
            for c in 0..2 {
                lo[c] = lo[c].min(p[c]);
                hi[c] = hi[c].max(p[c]);
            }
        }
        // the equivalent cylinder, when there is one, goes under the tree at the same scale
        let cyl = r.equivalent.shown_cylinder();
        let cyl_y = lo[1] - 0.12 * (hi[0] - lo[0]).max(hi[1] - lo[1]).max(1.0);
        if let Some(c) = cyl {
            for p in &c.tree.flat.pos {
                lo[0] = lo[0].min(p[0]);
                hi[0] = hi[0].max(p[0]);
            }
            lo[1] = cyl_y - 0.02 * (hi[0] - lo[0]);
        }
        let margin = 24.0;
        let w = (hi[0] - lo[0]).max(1.0);
        let h = (hi[1] - lo[1]).max(1.0);
        let k = ((rect.width() as f64 - 2.0 * margin) / w)
            .min((rect.height() as f64 - 2.0 * margin - 20.0) / h);
        let cx = (lo[0] + hi[0]) / 2.0;
        let cy = (lo[1] + hi[1]) / 2.0;
        let centre = rect.center() - Vec2::new(0.0, 10.0);
        let to_screen = |p: &[f64; 3]| {
            Pos2::new(
                centre.x + ((p[0] - cx) * k) as f32,
                centre.y - ((p[1] - cy) * k) as f32,
            )
        };
        let (values, range, log) = self.colour_values(r);
        let colour = |v: f64| {
            if log {
                self.scale
                    .colour(v.max(1e-12).ln(), range.0.ln(), range.1.ln())
            } else {
                self.scale.colour(v, range.0, range.1)
            }
        };
        let width = |d: f64| (d as f32 * 2.5).clamp(1.5, 14.0);
        // the path first, as a pale halo under the branches
        for &q in r.path.nodes.iter().skip(1) {
            let a = to_screen(&t.flat.pos[t.flat.parent[q] as usize]);
            let b = to_screen(&t.flat.pos[q]);
            painter.line_segment(
                [a, b],
                Stroke::new(width(t.node_diam_um(q)) + 5.0, Color32::from_gray(90)),
            );
        }
        for (q, &v) in values.iter().enumerate().skip(1) {
            let a = to_screen(&t.flat.pos[t.flat.parent[q] as usize]);
            let b = to_screen(&t.flat.pos[q]);
            painter.line_segment([a, b], Stroke::new(width(t.node_diam_um(q)), colour(v)));
        }
        if let Some(c) = cyl {
            let (cv, _, _) = self.colour_values(c);
            let ct = &c.tree;
            let shift = |p: &[f64; 3]| [p[0], p[1] + cyl_y, p[2]];
            for (q, &v) in cv.iter().enumerate().skip(1) {
                let a = to_screen(&shift(&ct.flat.pos[ct.flat.parent[q] as usize]));
                let b = to_screen(&shift(&ct.flat.pos[q]));
                painter.line_segment([a, b], Stroke::new(width(ct.node_diam_um(q)), colour(v)));
            }
            let start = to_screen(&shift(&ct.flat.pos[0]));
            painter.text(
                start + Vec2::new(0.0, 10.0),
                egui::Align2::LEFT_TOP,
                "equivalent cylinder",
                egui::FontId::proportional(11.0),
                Color32::from_gray(170),
            );
        }
        // soma
        let soma_r = (t.spec.soma_diam_um as f32 * k as f32 / 2.0).max(4.0);
        painter.circle_filled(to_screen(&t.flat.pos[0]), soma_r, colour(values[0]));
        painter.circle_stroke(
            to_screen(&t.flat.pos[0]),
            soma_r,
            Stroke::new(1.0, Color32::from_gray(200)),
        );
        // killed tips and the injection site
        for q in 0..n {
            if t.killed[q] {
                let p = to_screen(&t.flat.pos[q]);
                painter.line_segment(
                    [p + Vec2::new(-5.0, -5.0), p + Vec2::new(5.0, 5.0)],
                    Stroke::new(2.0, Color32::from_rgb(240, 240, 240)),
                );
                painter.line_segment(
                    [p + Vec2::new(-5.0, 5.0), p + Vec2::new(5.0, -5.0)],
                    Stroke::new(2.0, Color32::from_rgb(240, 240, 240)),
                );
            }
        }
        let inj = to_screen(&t.flat.pos[r.path.nodes[r.path.inject_at]]);
        painter.circle_stroke(inj, 7.0, Stroke::new(2.0, super::colour::SITE));
        // section names at mid-branch (on a big tree only the chosen branch's)
        let all_names = t.sections.len() <= 15;
        for (s, sec) in t.sections.iter().enumerate() {
            if !all_names && s != self.chosen {
                continue;
            }
            let end = t.section_end_node[s] as usize;
            let start = match sec.parent {
                Some(p) => t.section_end_node[p] as usize,
                None => 0,
            };
            let a = to_screen(&t.flat.pos[start]);
            let b = to_screen(&t.flat.pos[end]);
            // a name needs room: short branches stay unnamed unless chosen
            if s != self.chosen && (b - a).length() < 12.0 * sec.name.len() as f32 {
                continue;
            }
            let mid = a + (b - a) * 0.5 + Vec2::new(0.0, -10.0);
            let col = if s == self.chosen {
                Color32::from_rgb(255, 230, 120)
            } else {
                Color32::from_gray(150)
            };
            painter.text(
                mid,
                egui::Align2::CENTER_BOTTOM,
                &sec.name,
                egui::FontId::proportional(11.0),
                col,
            );
        }
        // colour bar
        let bar = egui::Rect::from_min_size(
            Pos2::new(rect.left() + 10.0, rect.bottom() - 18.0),
            Vec2::new(160.0, 8.0),
        );
        for i in 0..64 {
            let x0 = bar.left() + bar.width() * i as f32 / 64.0;
            let x1 = bar.left() + bar.width() * (i + 1) as f32 / 64.0;
            painter.rect_filled(
                egui::Rect::from_min_max(Pos2::new(x0, bar.top()), Pos2::new(x1, bar.bottom())),
                0.0,
                self.scale.at(i as f64 / 63.0),
            );
        }
        let fmt = |v: f64| {
            if log {
                format!("{v:.0} MΩ")
            } else {
                format!("{v:.2}")
            }
        };
        painter.text(
            Pos2::new(bar.right() + 6.0, bar.center().y),
            egui::Align2::LEFT_CENTER,
            format!(
                "{} … {}    ring: injection site    ×: killed tip",
                fmt(range.0),
                fmt(range.1)
            ),
            egui::FontId::proportional(11.0),
            Color32::from_gray(200),
        );
        // the middle of every branch on screen
        let mids: Vec<Pos2> = t
            .sections
            .iter()
            .enumerate()
            .map(|(s, sec)| {
                let start = match sec.parent {
                    Some(p) => t.section_end_node[p] as usize,
                    None => 0,
                };
                let a = to_screen(&t.flat.pos[start]);
                let b = to_screen(&t.flat.pos[t.section_end_node[s] as usize]);
                a + (b - a) * 0.5
            })
            .collect();
        // click: the nearest segment's section
        if response.clicked()
            && let Some(pos) = response.interact_pointer_pos()
        {
            let mut best = (f32::INFINITY, None);
            for q in 1..n {
                let a = to_screen(&t.flat.pos[t.flat.parent[q] as usize]);
                let b = to_screen(&t.flat.pos[q]);
                let d = dist_to_segment(pos, a, b);
                if d < best.0 {
                    best = (d, Some(q));
                }
            }
            if best.0 < 12.0
                && let Some(q) = best.1
            {
                let s = t.node_section[q];
                if s != crate::morphology::NONE {
                    return (Some(s as usize), mids);
                }
            }
        }
        (None, mids)
    }

    /// Per-node values of the drawing, their range, and whether the scale is logarithmic.
    fn colour_values<'a>(&self, r: &'a LabResult) -> (&'a [f64], (f64, f64), bool) {
        match self.colour_by {
            LabColour::FromSoma => (&r.v_from_soma_all, span(&r.v_from_soma_all), false),
            LabColour::FromTip => (&r.v_from_tip_all, span(&r.v_from_tip_all), false),
            LabColour::InputResistance => {
                let (lo, hi) = r
                    .rin_all_mohm
                    .iter()
                    .filter(|v| **v > 0.0 && v.is_finite())
                    .fold((f64::INFINITY, 0.0f64), |(a, b), &v| (a.min(v), b.max(v)));
                let lo = if lo.is_finite() { lo } else { 1.0 };
                (&r.rin_all_mohm, (lo, hi.max(lo * 1.001)), true)
            }
        }
    }

    fn plots(&self, ui: &mut egui::Ui, r: &LabResult) {
        let s = &r.path;
        let xs: &[f64] = match self.x_axis {
            XAxis::Micrometres => &s.dist_um,
            XAxis::Electrotonic => &s.x,
        };
        let x_label = match self.x_axis {
            XAxis::Micrometres => "distance from the soma (µm)",
            XAxis::Electrotonic => "X (λ)",
        };
        let pts = |ys: &[f64]| -> Vec<[f64; 2]> {
            xs.iter()
                .zip(ys)
                .filter(|(_, y)| y.is_finite())
                .map(|(&x, &y)| [x, y])
                .collect()
        };
        // x of every fork on the path
        let forks: Vec<f64> = r
            .junctions
            .iter()
            .filter(|j| j.on_path)
            .filter_map(|j| Some(xs[s.nodes.iter().position(|&q| q == j.node)?]))
            .collect();
        let dc = self.compare.as_ref().map(|(_, d)| &d.path);
        let dashed = self.compare.as_ref().map(|(what, _)| *what);
        let dc_pts = |f: fn(&PathSeries) -> &Vec<f64>| -> Option<Vec<[f64; 2]>> {
            let d = dc?;
            let dxs: &[f64] = match self.x_axis {
                XAxis::Micrometres => &d.dist_um,
                XAxis::Electrotonic => &d.x,
            };
            Some(
                dxs.iter()
                    .zip(f(d))
                    .filter(|(_, y)| y.is_finite())
                    .map(|(&x, &y)| [x, y])
                    .collect(),
            )
        };
        // below the plots' titles and keys (about 50 points)
        let height = (ui.available_height() - 56.0).max(120.0);
        let tip_col = Color32::from_rgb(250, 170, 60);
        let soma_col = Color32::from_rgb(120, 200, 235);
        let fork_col = Color32::from_rgb(190, 110, 230);
        let rin_col = Color32::from_rgb(110, 215, 140);
        let width = (ui.available_width() - 24.0) / 3.0;
        let freq = if self.spec.freq_hz > 0.0 {
            format!(" at {:.0} Hz", self.spec.freq_hz)
        } else {
            String::new()
        };
        ui.horizontal(|ui| {
            ui.vertical(|ui| {
                ui.set_width(width);
                ui.label(RichText::new(format!("Voltage along the path{freq}")).strong());
                key(
                    ui,
                    &[
                        (tip_col, "current at the tip"),
                        (soma_col, "current at the soma"),
                        (fork_col, "forks"),
                    ],
                    dashed,
                );
                Plot::new("lab_voltage")
                    .height(height)
                    .custom_x_axes(vec![x_axis(x_label)])
                    .custom_y_axes(vec![y_axis("V / V at the injection site")])
                    .include_y(0.0)
                    .include_y(1.05)
                    .show(ui, |pu| {
                        pu.line(
                            Line::new("current at the tip", pts(&s.v_from_tip))
                                .color(tip_col)
                                .width(2.0),
                        );
                        pu.line(
                            Line::new("current at the soma", pts(&s.v_from_soma))
                                .color(soma_col)
                                .width(2.0),
                        );
                        if let Some(p) = dc_pts(|d| &d.v_from_tip) {
                            pu.line(
                                Line::new("tip, compared", p)
                                    .color(tip_col)
                                    .style(LineStyle::dashed_loose()),
                            );
                        }
                        if let Some(p) = dc_pts(|d| &d.v_from_soma) {
                            pu.line(
                                Line::new("soma, compared", p)
                                    .color(soma_col)
                                    .style(LineStyle::dashed_loose()),
                            );
                        }
                        for x in &forks {
                            pu.vline(VLine::new("forks", *x).color(fork_col));
                        }
                    });
            });
            ui.vertical(|ui| {
                ui.set_width(width);
                ui.label(RichText::new(format!("Local input resistance{freq}")).strong());
                key(
                    ui,
                    &[(rin_col, "input resistance"), (fork_col, "forks")],
                    dashed,
                );
                Plot::new("lab_rin")
                    .height(height)
                    .custom_x_axes(vec![x_axis(x_label)])
                    .custom_y_axes(vec![y_axis("|Z_in| (MΩ)")])
                    .include_y(0.0)
                    .show(ui, |pu| {
                        pu.line(
                            Line::new("input resistance", pts(&s.rin_mohm))
                                .color(rin_col)
                                .width(2.0),
                        );
                        if let Some(p) = dc_pts(|d| &d.rin_mohm) {
                            pu.line(
                                Line::new("compared", p)
                                    .color(rin_col)
                                    .style(LineStyle::dashed_loose()),
                            );
                        }
                        for x in &forks {
                            pu.vline(VLine::new("forks", *x).color(fork_col));
                        }
                    });
            });
            ui.vertical(|ui| {
                ui.set_width(width);
                ui.label(RichText::new(format!("Morphoelectrotonic distance{freq}")).strong());
                key(
                    ui,
                    &[
                        (tip_col, "towards the soma"),
                        (soma_col, "away from the soma"),
                        (fork_col, "forks"),
                    ],
                    None,
                );
                Plot::new("lab_melec")
                    .height(height)
                    .custom_x_axes(vec![x_axis(x_label)])
                    .custom_y_axes(vec![y_axis("ln(attenuation) to or from the soma")])
                    .include_y(0.0)
                    .show(ui, |pu| {
                        pu.line(
                            Line::new("towards the soma", pts(&s.melec_in))
                                .color(tip_col)
                                .width(2.0),
                        );
                        pu.line(
                            Line::new("away from the soma", pts(&s.melec_out))
                                .color(soma_col)
                                .width(2.0),
                        );
                        for x in &forks {
                            pu.vline(VLine::new("forks", *x).color(fork_col));
                        }
                    });
            });
        });
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

/// The numbers beside the drawing.
fn numbers(ui: &mut egui::Ui, r: &LabResult, cylinder: Option<&LabResult>) {
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
            ui.label("Input resistance at the injection site");
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

fn dist_to_segment(p: Pos2, a: Pos2, b: Pos2) -> f32 {
    let ab = b - a;
    let len2 = ab.length_sq();
    let t = if len2 > 0.0 {
        ((p - a).dot(ab) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (a + ab * t - p).length()
}

/// Smallest and largest finite value (a range of at least 0.01 so that the scale is defined).
fn span(v: &[f64]) -> (f64, f64) {
    let (lo, hi) = v
        .iter()
        .filter(|x| x.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
            (a.min(x), b.max(x))
        });
    if lo.is_finite() {
        (lo, hi.max(lo + 0.01))
    } else {
        (0.0, 1.0)
    }
}

/// A slider that clamps and rounds only what the user types or drags, so that the exact values
/// of a lesson (such as 3·2^(−2/3) µm) are kept until touched.
fn slider<'a, N: egui::emath::Numeric>(
    value: &'a mut N,
    range: std::ops::RangeInclusive<N>,
) -> egui::Slider<'a> {
    egui::Slider::new(value, range).clamping(egui::SliderClamping::Edits)
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
