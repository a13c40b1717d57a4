//! The desktop app (behind the default `gui` feature).
//!
//! [`PollardApp`] owns small views, each with its own state and a `ui()` method: two
//! [`canvas::ArborCanvas`]es sharing one camera, the [`panels::ControlsPanel`], the
//! [`panels::PlotsPanel`], and the branching lab. The data behind them is a plain
//! [`state::CellState`] with no egui in it. Loading and building the reduction run on background
//! threads; a panic there is caught and shown as an error, and the previous cell stays.

pub mod axis;
pub mod canvas;
pub mod colour;
pub mod electrical;
pub mod files;
pub mod jobs;
pub mod lab;
pub mod mesh;
pub mod panels;
pub mod picture;
pub mod polish;
pub mod reduction;
mod saving;
pub mod state;
pub mod sweep;
pub mod synapses;
pub mod terms;
pub mod traces;

use canvas::{ArborCanvas, Camera, ReducedLayout, Side};
use eframe::egui::{self, Color32, Vec2};
use files::{Dialogs, Purpose, RecentFiles};
use jobs::Job;
use panels::{Action, ControlsPanel, PlotsPanel};
use state::{Cell, CellState};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// What the window opens on.
pub enum Start {
    /// The embedded demo cell.
    Demo,
    /// A file.
    File(PathBuf),
    /// The branching lab.
    Lab,
}

/// Choices applied once the first cell has loaded (from `pollard view` options).
#[derive(Debug, Clone, Default)]
pub struct StartOptions {
    pub budget: Option<usize>,
    /// SWC id of the injection point (`pollard view --injection-point`).
    pub injection_point_id: Option<i64>,
    pub freq_hz: Option<f64>,
    pub colour_by: Option<state::ColourBy>,
    pub dendrogram: bool,
    /// Measure the EPSP error per budget for the error plot (its checkbox ticked).
    pub epsp_curve: bool,
    /// Save a PNG of the figure once the reduced tree is drawn.
    pub save_png: Option<PathBuf>,
    /// A synapse table to open for the cell, and the input to choose in it.
    pub synapses: Option<PathBuf>,
    pub synapse_input: Option<String>,
    /// Factor for the start file's coordinates and radii and its synapse tables' positions.
    pub scale: Option<f64>,
    /// The capacitance rule (None: the default, `timed`).
    pub capacitance: Option<crate::reduce::CapacitanceRule>,
}

/// Opens the window.
pub fn run(start: Start) -> anyhow::Result<()> {
    run_with(start, StartOptions::default())
}

/// Opens the window and applies `opts` once the cell has loaded.
pub fn run_with(start: Start, opts: StartOptions) -> anyhow::Result<()> {
    let options = eframe::NativeOptions {
        viewport: egui::ViewportBuilder::default()
            .with_inner_size([1560.0, 960.0])
            .with_min_inner_size([900.0, 600.0])
            .with_title("pollard")
            .with_drag_and_drop(true),
        ..Default::default()
    };
    eframe::run_native(
        "pollard",
        options,
        Box::new(move |cc| {
            let recent = RecentFiles::from_config();
            let mut app = PollardApp::new_scaled(start, Dialogs::Native, recent, opts.scale);
            app.ctx = Some(cc.egui_ctx.clone());
            app.start_options = Some(opts);
            Ok(Box::new(app))
        }),
    )
    .map_err(|e| anyhow::anyhow!("cannot open the window: {e}"))
}

/// Which screen is shown.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Screen {
    Cell,
    Lab,
}

/// The app.
pub struct PollardApp {
    pub screen: Screen,
    pub lab: lab::LabView,
    /// The current cell and its maps (None only before the first load finishes).
    pub state: Option<CellState>,
    pub camera: Camera,
    pub layout: ReducedLayout,
    pub left: ArborCanvas,
    pub right: ArborCanvas,
    pub controls: ControlsPanel,
    pub synapse_panel: synapses::SynapsePanel,
    pub plots: PlotsPanel,
    /// The soma voltage traces for the clicked site.
    pub traces: traces::TracesView,
    /// The `timed` rule's background polish of the shown tree.
    pub polisher: polish::Polisher,
    /// The EPSP error per budget of the shown reduction, measured in the background.
    pub sweeper: sweep::Sweeper,
    pub scale: colour::Scale,
    colours: Option<colour::Colours>,
    colours_version: (u64, usize),
    pub dialogs: Dialogs,
    pending_dialog: Option<(Purpose, std::sync::mpsc::Receiver<Option<PathBuf>>)>,
    pub recent: RecentFiles,
    load_job: Option<Job<CellState>>,
    reduce_job: Option<(u64, Job<Arc<state::Reduction>>)>,
    reduce_generation: u64,
    /// The synapse table ([`synapses::Layer::id`]) the last reduction was started for.
    reduced_for_table: Option<u64>,
    /// The last error (file, line, what) or other failure; shown until dismissed.
    pub error: Option<String>,
    /// The last thing done (a file saved, a cell opened).
    pub notice: Option<String>,
    /// Waiting for a screenshot to crop into a PNG.
    pending_png: Option<(PathBuf, std::sync::mpsc::Receiver<Arc<egui::ColorImage>>)>,
    /// The rect of the figure (canvases and colour bar) last drawn.
    figure_rect: egui::Rect,
    ctx: Option<egui::Context>,
    /// Applied when the next cell finishes loading.
    pub start_options: Option<StartOptions>,
    /// A PNG to save once the reduced tree has been drawn for a few frames.
    png_when_ready: Option<(PathBuf, u32)>,
    /// The next load keeps the error shown (the demo cell loaded after a failed first file).
    keep_error: bool,
}

impl PollardApp {
    /// A new app; the first cell loads in the background.
    pub fn new(start: Start, dialogs: Dialogs, recent: RecentFiles) -> PollardApp {
        PollardApp::new_scaled(start, dialogs, recent, None)
    }

    /// [`PollardApp::new`] with a start file whose coordinates and radii are multiplied by
    /// `scale` (a file in nm: 0.001); its synapse tables get the same factor.
    pub fn new_scaled(
        start: Start,
        dialogs: Dialogs,
        recent: RecentFiles,
        scale: Option<f64>,
    ) -> PollardApp {
        let mut app = PollardApp {
            screen: Screen::Cell,
            lab: lab::LabView::new(),
            state: None,
            camera: Camera::default(),
            layout: ReducedLayout::InPlace,
            left: ArborCanvas::new(Side::Original),
            right: ArborCanvas::new(Side::Reduced),
            controls: ControlsPanel::default(),
            synapse_panel: synapses::SynapsePanel::default(),
            plots: PlotsPanel::default(),
            traces: traces::TracesView::default(),
            polisher: polish::Polisher::default(),
            sweeper: sweep::Sweeper::default(),
            scale: colour::Scale::new(),
            colours: None,
            colours_version: (0, 0),
            dialogs: dialogs.clone(),
            pending_dialog: None,
            recent,
            load_job: None,
            reduce_job: None,
            reduce_generation: 0,
            reduced_for_table: None,
            error: None,
            notice: None,
            pending_png: None,
            figure_rect: egui::Rect::NOTHING,
            ctx: None,
            start_options: None,
            png_when_ready: None,
            keep_error: false,
        };
        app.lab.dialogs = dialogs;
        match start {
            Start::Demo => app.open_demo(),
            Start::File(p) => app.open_path_scaled(&p, scale),
            Start::Lab => {
                app.open_demo();
                app.screen = Screen::Lab;
            }
        }
        app
    }

    /// Loads the built-in demo cell (in the background).
    pub fn open_demo(&mut self) {
        self.start_load(
            crate::samples::SAMPLES[0].file_name.into(),
            Box::new(|| Ok(Cell::demo())),
        );
    }

    /// Loads a file (in the background); on failure the current cell stays and the error shows.
    pub fn open_path(&mut self, path: &Path) {
        self.open_path_scaled(path, None);
    }

    /// [`PollardApp::open_path`] with coordinates and radii × `scale` (None: the file is in µm).
    pub fn open_path_scaled(&mut self, path: &Path, scale: Option<f64>) {
        let p = path.to_path_buf();
        self.start_load(
            path.display().to_string(),
            Box::new(move || Cell::read(&p, scale)),
        );
    }

    /// Loads one of the sample cells.
    pub fn open_sample(&mut self, i: usize) {
        if let Some(s) = files::samples().get(i) {
            let (name, text) = (s.0.clone(), s.1.clone());
            self.start_load(
                name.clone(),
                Box::new(move || {
                    let m = crate::Morphology::parse(&text, &name)?;
                    Ok(Cell::new(name, None, m))
                }),
            );
        }
    }

    /// Loads a tree handed over by the lab.
    pub fn open_morphology(&mut self, name: String, m: crate::Morphology) {
        self.start_load(name.clone(), Box::new(move || Ok(Cell::new(name, None, m))));
    }

    fn start_load(&mut self, what: String, make: Box<dyn FnOnce() -> anyhow::Result<Cell> + Send>) {
        let params = self.state.as_ref().map(|s| s.params).unwrap_or_default();
        let freq = self.state.as_ref().map(|s| s.freq_hz).unwrap_or(0.0);
        self.load_job = Some(Job::spawn(
            format!("opening {what}"),
            self.ctx.clone(),
            move |progress| {
                progress.set("reading the file");
                let cell = make()?;
                progress.set("computing the electrical maps");
                CellState::new(Arc::new(cell), params, freq)
            },
        ));
    }

    fn start_reduction(&mut self) {
        let Some(s) = &self.state else { return };
        self.reduce_generation += 1;
        let cell = s.cell.clone();
        let kept = s.kept_types();
        let params = s.params;
        let rule = s.capacitance;
        let table = synapses::on_model(s);
        self.reduced_for_table = s.synapses.as_ref().map(|l| l.id);
        let job = Job::spawn(
            "building the reduction".into(),
            self.ctx.clone(),
            move |p| {
                p.set("building the collapse order");
                state::build_reduction_for(&cell, kept, &params, table, rule)
                    .map_err(|e| anyhow::anyhow!(e))
            },
        );
        self.reduce_job = Some((self.reduce_generation, job));
    }

    /// True while something runs in the background.
    pub fn busy(&self) -> bool {
        self.load_job.is_some()
            || self.reduce_job.is_some()
            || self.pending_dialog.is_some()
            || self.traces.busy()
            || self.polisher.busy()
    }

    /// Applies finished background work. Called every frame.
    pub fn poll(&mut self) {
        if let Some(job) = &self.load_job
            && let Some(r) = job.try_take()
        {
            let what = job.what.clone();
            self.load_job = None;
            match r {
                Ok(s) => {
                    if let Some(p) = &s.cell.path {
                        self.recent.add(p);
                    }
                    let n_warn = s.cell.warnings.len();
                    self.notice = Some(format!(
                        "Opened {} ({} points{})",
                        s.cell.name,
                        s.cell.morph.len(),
                        if n_warn > 0 {
                            format!(", {n_warn} warning(s) listed under Warnings")
                        } else {
                            String::new()
                        }
                    ));
                    self.controls.sync_from(&s);
                    self.state = Some(s);
                    self.camera = Camera::default();
                    if !std::mem::take(&mut self.keep_error) {
                        self.error = None;
                    }
                    self.start_reduction();
                    if self.state.as_ref().is_some_and(|s| s.cell.path.is_some()) {
                        self.apply_start_options();
                    }
                }
                Err(e) => {
                    self.start_options = None;
                    self.error = Some(format!(
                        "Could not open {}: {e}",
                        what.trim_start_matches("opening ")
                    ));
                    if self.state.is_none() {
                        // the first file failed: show the demo cell under the message
                        self.keep_error = true;
                        self.open_demo();
                    }
                }
            }
        }
        if let Some((generation, job)) = &self.reduce_job
            && let Some(r) = job.try_take()
        {
            let generation = *generation;
            self.reduce_job = None;
            if generation == self.reduce_generation
                && let Some(s) = &mut self.state
            {
                s.set_reduction(r.map_err(|e| e.to_string()));
            }
        }
        if let Some((purpose, rx)) = &self.pending_dialog
            && let Ok(answer) = rx.try_recv()
        {
            let purpose = *purpose;
            self.pending_dialog = None;
            if let Some(path) = answer {
                self.dialog_answered(purpose, path);
            }
        }
        // a synapse table opened (or replaced): the reduction serves its synapses
        if let Some(s) = &self.state
            && s.synapses.as_ref().map(|l| l.id) != self.reduced_for_table
        {
            self.start_reduction();
        }
        if let Some(s) = &mut self.state {
            self.polisher.update(s, self.ctx.clone());
            if let Some(e) = self.polisher.error.take() {
                self.error = Some(e);
            }
        }
        self.traces.poll();
        let others = self.busy();
        if let Some(s) = &self.state {
            self.sweeper.update(s, others, self.ctx.clone());
        }
        if let Some(lab_tree) = self.lab.take_send_to_main() {
            self.open_morphology(lab_tree.0, lab_tree.1);
            self.screen = Screen::Cell;
        }
    }

    fn apply_start_options(&mut self) {
        let Some(o) = self.start_options.take() else {
            return;
        };
        if o.dendrogram {
            self.layout = ReducedLayout::Dendrogram;
        }
        self.sweeper.wanted |= o.epsp_curve;
        self.png_when_ready = o.save_png.map(|p| (p, 0));
        let Some(s) = &mut self.state else { return };
        if let Some(f) = o.freq_hz {
            let p = s.params;
            if let Err(e) = s.set_electrical(p, f) {
                self.error = Some(format!("{e:#}"));
            }
            self.controls.freq_hz = s.freq_hz;
        }
        if let Some(c) = o.colour_by {
            s.colour_by = c;
            s.colour_version += 1;
        }
        if let Some(id) = o.injection_point_id {
            let node = s
                .cell
                .morph
                .points
                .iter()
                .position(|p| p.id == id)
                .map(|i| s.cell.flat.point_node[i])
                .filter(|&k| k != crate::morphology::NONE);
            match node {
                Some(k) => s.set_site(Some(k as usize)),
                None => self.error = Some(format!("there is no point with id {id} in the cell")),
            }
        }
        if let Some(b) = o.budget {
            s.budget = b.max(1);
            self.controls.budget = s.budget;
        }
        let new_rule = o.capacitance.filter(|&r| r != s.capacitance);
        if let Some(rule) = new_rule {
            s.capacitance = rule;
            self.start_reduction();
        }
        let Some(s) = &mut self.state else { return };
        if let Some(p) = &o.synapses {
            let done =
                synapses::load(s, p).and_then(|_| synapses::select(s, o.synapse_input.as_deref()));
            self.error = done.err().or(self.error.take());
        }
    }

    /// Blocks until background work is done and applied (for tests and scripted starts).
    pub fn wait_idle(&mut self) {
        let start = std::time::Instant::now();
        while self.busy() {
            self.poll();
            std::thread::sleep(std::time::Duration::from_millis(2));
            if start.elapsed().as_secs() > 300 {
                break;
            }
        }
    }

    fn apply(&mut self, action: Action) {
        let mut rebuild_reduction = false;
        let result: anyhow::Result<()> = (|| {
            match action {
                Action::Open => self.ask(Purpose::Open),
                Action::OpenRecent(p) => self.open_path(&p),
                Action::OpenSample(i) => self.open_sample(i),
                Action::OpenDemo => self.open_demo(),
                Action::Save(p) => self.ask(p),
                Action::Camera(c) => self.camera = c,
                Action::Layout(l) => self.layout = l,
                Action::ClearRecent => self.recent.clear(),
                other => {
                    let Some(s) = &mut self.state else {
                        return Ok(());
                    };
                    match other {
                        Action::Electrical {
                            params,
                            freq_hz,
                            settle,
                        } => {
                            let params_changed = params != s.params;
                            s.set_electrical(params, freq_hz)?;
                            if params_changed && settle {
                                rebuild_reduction = true;
                            } else if params_changed {
                                self.controls.unsettled = true;
                            }
                        }
                        Action::Settle if s.reduction.is_none() && self.reduce_job.is_none() => {
                            rebuild_reduction = true;
                        }
                        Action::Budget(b) => s.set_budget(b),
                        Action::Capacitance(rule) if rule != s.capacitance => {
                            s.capacitance = rule;
                            rebuild_reduction = true;
                        }
                        Action::Kept(k, on) => {
                            s.set_kept(k, on)?;
                            rebuild_reduction = true;
                        }
                        Action::ColourBy(c) => {
                            s.colour_by = c;
                            s.colour_version += 1;
                        }
                        Action::Unit(u) => {
                            s.unit = u;
                            s.colour_version += 1;
                        }
                        _ => {}
                    }
                }
            }
            Ok(())
        })();
        if let Err(e) = result {
            self.error = Some(format!("{e:#}"));
        }
        if rebuild_reduction {
            self.start_reduction();
        }
    }

    /// Sets the injection point (a whole-tree node), as a click on the original does.
    pub fn click_site(&mut self, node: usize) {
        if let Some(s) = &mut self.state {
            s.set_site(Some(node));
        }
    }

    fn colours(&mut self) -> Option<&colour::Colours> {
        let s = self.state.as_ref()?;
        let key = (s.colour_version, s.geometry_version as usize);
        if self.colours.is_none() || self.colours_version != key {
            self.colours = Some(colour::colours(s, &self.scale));
            self.colours_version = key;
        }
        self.colours.as_ref()
    }

    /// Draws the whole app into `ui` (the eframe entry point and the tests call this).
    pub fn show(&mut self, ui: &mut egui::Ui) {
        if self.ctx.is_none() {
            self.ctx = Some(ui.ctx().clone());
        }
        self.poll();
        self.handle_drops(ui);
        self.handle_screenshot(ui);
        let mut actions = Vec::new();

        egui::Panel::top("top_bar").show(ui, |ui| {
            self.top_bar(ui);
        });

        if self.screen == Screen::Lab {
            egui::CentralPanel::default().show(ui, |ui| self.lab.ui(ui));
            for a in actions {
                self.apply(a);
            }
            return;
        }

        egui::Panel::left("controls")
            .resizable(true)
            .default_size(300.0)
            .show(ui, |ui| {
                egui::ScrollArea::vertical().show(ui, |ui| {
                    self.controls.ui(
                        ui,
                        self.state.as_ref(),
                        &self.recent,
                        self.layout,
                        &self.camera,
                        &mut actions,
                    );
                    self.synapse_panel
                        .ui(ui, self.state.as_mut(), &self.dialogs);
                });
            });

        egui::Panel::bottom("plots")
            .resizable(true)
            .default_size(250.0)
            .min_size(160.0)
            .show(ui, |ui| match &self.state {
                Some(s) => {
                    // at most 40 % of the width, so the three plots beside it keep theirs
                    let most = 0.4 * ui.available_width();
                    egui::Panel::right("traces")
                        .resizable(true)
                        .default_size(430.0f32.min(most))
                        .max_size(most)
                        .show(ui, |ui| self.traces.ui(ui, s));
                    self.plots.ui(ui, s, &mut self.sweeper);
                }
                None => {
                    ui.allocate_space(ui.available_size());
                }
            });

        egui::CentralPanel::default().show(ui, |ui| {
            self.central(ui);
        });

        for a in actions {
            self.apply(a);
        }
        if let Some((path, frames)) = self.png_when_ready.take() {
            let ready = self.load_job.is_none()
                && self.reduce_job.is_none()
                && self
                    .state
                    .as_ref()
                    .and_then(|s| s.reduced.as_ref())
                    .is_some_and(|r| r.finished);
            if ready && frames >= 3 {
                self.dialog_answered(Purpose::SavePng, path);
            } else {
                self.png_when_ready = Some((path, if ready { frames + 1 } else { 0 }));
                ui.ctx().request_repaint();
            }
        }
        if self.busy()
            && let Some(ctx) = &self.ctx
        {
            ctx.request_repaint_after(std::time::Duration::from_millis(50));
        }
    }

    fn top_bar(&mut self, ui: &mut egui::Ui) {
        ui.horizontal(|ui| {
            ui.heading("pollard");
            ui.separator();
            ui.selectable_value(&mut self.screen, Screen::Cell, "Cell view");
            ui.selectable_value(&mut self.screen, Screen::Lab, "Branching lab");
            ui.separator();
            if let Some(s) = self.state.as_ref().filter(|_| self.screen == Screen::Cell) {
                ui.label(format!(
                    "{} — {} points, {} in the electrical model",
                    s.cell.name,
                    s.cell.morph.len(),
                    s.model.points
                ));
            }
            let busy: Option<String> = self
                .load_job
                .as_ref()
                .map(|j| j.status())
                .or_else(|| self.reduce_job.as_ref().map(|j| j.1.status()));
            if let Some(b) = busy {
                ui.spinner();
                ui.label(b);
            }
        });
        if let Some(e) = self.error.clone() {
            ui.horizontal(|ui| {
                ui.colored_label(Color32::from_rgb(255, 110, 100), format!("Problem: {e}"));
                if ui.button("Dismiss").clicked() {
                    self.error = None;
                }
            });
        } else if let Some(n) = &self.notice {
            ui.label(n);
        }
    }

    fn central(&mut self, ui: &mut egui::Ui) {
        if self.state.is_none() {
            ui.centered_and_justified(|ui| {
                ui.spinner();
            });
            return;
        }
        let top = ui.cursor().min;
        self.colours();
        let colours = self.colours.take();
        let Some(colours) = colours else { return };
        let s = self.state.as_ref().expect("checked above");
        canvas::colour_bar(ui, s, &colours, &self.scale);
        let avail = ui.available_size();
        let w = ((avail.x - 8.0) / 2.0).max(50.0);
        let h = (avail.y - 4.0).max(50.0);
        let mut clicked = None;
        ui.horizontal(|ui| {
            let e = self.left.ui(
                ui,
                s,
                &colours,
                &mut self.camera,
                self.layout,
                Vec2::new(w, h),
            );
            clicked = e.clicked_node;
            self.right.ui(
                ui,
                s,
                &colours,
                &mut self.camera,
                self.layout,
                Vec2::new(w, h),
            );
        });
        self.figure_rect = egui::Rect::from_min_max(top, self.right.last_rect.max).expand(4.0);
        self.colours = Some(colours);
        if let Some(k) = clicked {
            self.click_site(k);
        }
    }

    fn handle_drops(&mut self, ui: &mut egui::Ui) {
        let (dropped, hovering) = ui.input(|i| {
            (
                i.raw
                    .dropped_files
                    .iter()
                    .map(|f| f.path().to_path_buf())
                    .find(|p| !p.as_os_str().is_empty()),
                !i.raw.hovered_files.is_empty(),
            )
        });
        if let Some(p) = dropped {
            self.screen = Screen::Cell;
            self.open_path(&p);
        }
        if hovering {
            let painter = ui.ctx().layer_painter(egui::LayerId::new(
                egui::Order::Foreground,
                egui::Id::unique("pollard-drop-overlay"),
            ));
            let r = ui.ctx().content_rect();
            painter.rect_filled(r, 0.0, Color32::from_black_alpha(170));
            painter.text(
                r.center(),
                egui::Align2::CENTER_CENTER,
                "Drop an SWC file to open it",
                egui::FontId::proportional(26.0),
                Color32::WHITE,
            );
        }
    }
}

impl eframe::App for PollardApp {
    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        self.show(ui);
    }
}
