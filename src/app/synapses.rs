//! The synapse table of the open cell: open one ([`SynapsePanel`]), colour points and
//! compartments by synapse count ([`super::state::ColourBy::Synapses`]), choose an input and see
//! its synapses on the original arbor and their compartments on the reduced tree (markers drawn
//! by [`mark_original`] and [`mark_reduced`]).
//!
//! The table is read and snapped by the library ([`crate::synapses`]) onto the whole cell, with
//! the cell's scale; while it is open the app's reduction serves its synapses ([`on_model`]), and
//! the map to compartments goes through the points each compartment stands for
//! (`DrawingExtras::node_comp`), as [`crate::synapses::SynapseMap`] does.

use super::files::{Dialogs, Purpose};
use super::state::{CellState, ColourBy};
use crate::morphology::NONE;
use crate::synapses::{SnapOptions, Snapped, Synapse, parse_table, snap};
use eframe::egui::{self, Color32, Pos2, Stroke};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::mpsc::Receiver;

const MARK: Color32 = Color32::from_rgb(255, 236, 120);

/// A table placed on the open cell, with the chosen input.
#[derive(Debug)]
pub struct Layer {
    /// Unique among the layers of this run (the app rebuilds the reduction when it changes).
    pub id: u64,
    pub snapped: Snapped,
    /// Per whole-tree node: synapses of every input.
    all: Vec<u32>,
    /// Per whole-tree node: synapses of the chosen input.
    chosen: Vec<u32>,
    /// The chosen input (index into the table's inputs), or every input.
    pub selected: Option<u32>,
    /// Inputs by synapse count, most first (the picker's order).
    pub order: Vec<(u32, u32)>,
    /// Per compartment counts, kept for the reduced tree they were made for.
    comp_cache: Mutex<Option<(CompKey, Vec<f64>)>>,
}

type CompKey = (u64, u64, usize, usize);

impl Layer {
    /// Places `snapped` (made on the whole cell of `n_nodes` nodes).
    pub fn new(snapped: Snapped, n_nodes: usize) -> Layer {
        let mut all = vec![0u32; n_nodes];
        let mut per_input = vec![0u32; snapped.inputs.len()];
        for s in &snapped.synapses {
            if let Some(a) = all.get_mut(s.node as usize) {
                *a += 1;
            }
            per_input[s.input as usize] += 1;
        }
        let mut order: Vec<(u32, u32)> = (0..per_input.len() as u32)
            .map(|i| (i, per_input[i as usize]))
            .collect();
        order.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
        static NEXT: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(1);
        Layer {
            id: NEXT.fetch_add(1, std::sync::atomic::Ordering::Relaxed),
            chosen: all.clone(),
            all,
            snapped,
            selected: None,
            order,
            comp_cache: Mutex::new(None),
        }
    }

    /// Chooses an input (`None`: every input).
    pub fn select(&mut self, input: Option<u32>) {
        self.selected = input;
        self.chosen = match input {
            None => self.all.clone(),
            Some(i) => {
                let mut v = vec![0u32; self.all.len()];
                for s in self.snapped.synapses.iter().filter(|s| s.input == i) {
                    v[s.node as usize] += 1;
                }
                v
            }
        };
        if let Ok(mut c) = self.comp_cache.lock() {
            *c = None;
        }
    }

    /// Synapses (of the chosen input, or all) on whole-tree node `k`.
    pub fn node_count(&self, k: usize) -> u32 {
        self.chosen.get(k).copied().unwrap_or(0)
    }

    /// Synapses (of the chosen input, or all) on each compartment of the state's reduced tree.
    pub fn comp_counts(&self, state: &CellState) -> Vec<f64> {
        let Some(r) = &state.reduced else {
            return Vec::new();
        };
        let key = (
            state.colour_version,
            state.geometry_version,
            r.tree.len(),
            state.budget,
        );
        if let Ok(c) = self.comp_cache.lock()
            && let Some((k, v)) = c.as_ref()
            && *k == key
        {
            return v.clone();
        }
        let mut out = vec![0.0; r.tree.len()];
        for (k, &n) in self.chosen.iter().enumerate() {
            if n == 0 {
                continue;
            }
            let m = state.model.of_full.get(k).copied().unwrap_or(NONE);
            let c = r.extras.node_comp.get(m as usize).copied().unwrap_or(NONE);
            if let Some(x) = out.get_mut(c as usize) {
                *x += n as f64;
            }
        }
        if let Ok(mut c) = self.comp_cache.lock() {
            *c = Some((key, out.clone()));
        }
        out
    }

    pub fn input_name(&self, i: u32) -> &str {
        self.snapped
            .inputs
            .get(i as usize)
            .map_or("", |s| s.as_str())
    }
}

/// The colour value of whole-tree node `k` under [`ColourBy::Synapses`].
pub fn value_full(state: &CellState, k: usize) -> f64 {
    state
        .synapses
        .as_ref()
        .map_or(f64::NAN, |l| l.node_count(k) as f64)
}

/// The colour value of compartment `c` under [`ColourBy::Synapses`].
pub fn value_comp(state: &CellState, c: usize) -> f64 {
    state
        .synapses
        .as_ref()
        .and_then(|l| l.comp_counts(state).get(c).copied())
        .unwrap_or(f64::NAN)
}

/// The colour bar's label under [`ColourBy::Synapses`].
pub fn value_label(state: &CellState) -> String {
    match state
        .synapses
        .as_ref()
        .and_then(|l| l.selected.map(|i| l.input_name(i)))
    {
        Some(name) => format!("synapses of {name}"),
        None => "synapses (count)".into(),
    }
}

/// Reads the table at `path` and places it on the state's whole cell; on success the state is
/// coloured by synapse count.
pub fn load(state: &mut CellState, path: &Path) -> Result<(), String> {
    let name = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|e| format!("{name}: cannot read: {e}"))?;
    let table = parse_table(&bytes, &name).map_err(|e| e.to_string())?;
    let cell = &state.cell;
    // the table is in the cell file's units: the cell's scale applies to it too
    let opts = SnapOptions {
        scale: cell.scale,
        ..SnapOptions::default()
    };
    let snapped = snap(&table, &cell.morph, &cell.flat, &opts).map_err(|e| e.to_string())?;
    state.synapses = Some(Layer::new(snapped, cell.flat.len()));
    state.colour_by = ColourBy::Synapses;
    state.colour_version += 1;
    Ok(())
}

/// What the reduction serves while a table is open: its synapses on the kept neurite types, each
/// one site of its weight ([`Snapped::sites`], as `pollard reduce --synapses` makes them). None
/// without a table, or when no synapse is on a kept type (the default sites then).
pub fn on_model(state: &CellState) -> Option<Snapped> {
    let l = state.synapses.as_ref()?;
    let of_full = &state.model.of_full;
    let mut on_model = l.snapped.clone();
    on_model
        .synapses
        .retain(|s: &Synapse| of_full.get(s.node as usize).is_some_and(|&m| m != NONE));
    (!on_model.synapses.is_empty()).then_some(on_model)
}

/// Chooses an input by name (`None`: every input).
pub fn select(state: &mut CellState, input: Option<&str>) -> Result<(), String> {
    let Some(layer) = &mut state.synapses else {
        return Err("no synapse table is open".into());
    };
    let i = match input {
        None => None,
        Some(name) => Some(
            layer
                .snapped
                .inputs
                .iter()
                .position(|n| n == name)
                .ok_or_else(|| format!("the synapse table has no input `{name}`"))?
                as u32,
        ),
    };
    layer.select(i);
    state.colour_version += 1;
    Ok(())
}

/// Rings around the chosen input's synapses on the original arbor (`screen`: per whole-tree
/// node, as drawn).
pub fn mark_original(painter: &egui::Painter, state: &CellState, screen: &[Pos2]) {
    let Some(l) = &state.synapses else { return };
    let Some(i) = l.selected else { return };
    for s in l.snapped.synapses.iter().filter(|s| s.input == i) {
        if let Some(&p) = screen.get(s.node as usize) {
            painter.circle_stroke(p, 5.0, Stroke::new(1.8, MARK));
        }
    }
}

/// Rings and counts on the compartments that hold the chosen input's synapses
/// (`comp_screen`: per compartment, centre and radius as drawn).
pub fn mark_reduced(painter: &egui::Painter, state: &CellState, comp_screen: &[(Pos2, f32)]) {
    let Some(l) = &state.synapses else { return };
    if l.selected.is_none() {
        return;
    }
    let font = egui::FontId::proportional(13.0);
    // counts of nearby compartments would overlap: each label moves down until it is clear
    let mut placed: Vec<egui::Rect> = Vec::new();
    for (c, n) in l.comp_counts(state).into_iter().enumerate() {
        if n > 0.0
            && let Some(&(p, r)) = comp_screen.get(c)
        {
            painter.circle_stroke(p, r.max(4.0) + 4.0, Stroke::new(2.0, MARK));
            let galley = painter.layout_no_wrap(format!("{n:.0}"), font.clone(), MARK);
            let mut rect = egui::Rect::from_min_size(
                p + egui::vec2(r.max(4.0) + 6.0, -8.0 - 0.5 * galley.size().y),
                galley.size(),
            );
            for _ in 0..8 {
                if !placed.iter().any(|q| q.intersects(rect)) {
                    break;
                }
                rect = rect.translate(egui::vec2(0.0, galley.size().y));
            }
            placed.push(rect);
            painter.galley(rect.min, galley, MARK);
        }
    }
}

/// The side-panel section: open a table, pick an input, read what the reduction did to it.
#[derive(Default)]
pub struct SynapsePanel {
    pending: Option<Receiver<Option<PathBuf>>>,
    pub error: Option<String>,
}

impl SynapsePanel {
    pub fn ui(&mut self, ui: &mut egui::Ui, state: Option<&mut CellState>, dialogs: &Dialogs) {
        let Some(state) = state else { return };
        if let Some(rx) = &self.pending {
            match rx.try_recv() {
                Ok(answer) => {
                    self.pending = None;
                    if let Some(path) = answer {
                        self.error = load(state, &path).err();
                    }
                }
                Err(std::sync::mpsc::TryRecvError::Empty) => ui.ctx().request_repaint(),
                Err(_) => self.pending = None,
            }
        }
        ui.separator();
        ui.strong("Synapse table");
        if ui
            .button("Open synapse table…")
            .on_hover_text("CSV: input, then swc_id or x,y,z, optional weight (see the README)")
            .clicked()
            && self.pending.is_none()
        {
            self.pending = Some(dialogs.ask(Purpose::OpenSynapses, ""));
        }
        if let Some(e) = &self.error {
            ui.colored_label(Color32::from_rgb(255, 120, 110), e);
        }
        self.summary(ui, state);
    }

    fn summary(&mut self, ui: &mut egui::Ui, state: &mut CellState) {
        let Some(l) = &state.synapses else { return };
        let s = &l.snapped;
        ui.label(format!(
            "{} synapses from {} inputs{}",
            s.synapses.len(),
            s.inputs.len(),
            if s.left_out.is_empty() {
                String::new()
            } else {
                format!(" ({} left out: too far)", s.left_out.len())
            }
        ));
        if state.colour_by != ColourBy::Synapses && ui.button("Colour by synapse count").clicked() {
            state.colour_by = ColourBy::Synapses;
            state.colour_version += 1;
        }
        let current = match l.selected {
            Some(i) => l.input_name(i).to_string(),
            None => "every input".into(),
        };
        let mut pick: Option<Option<u32>> = None;
        egui::ComboBox::from_label("Input")
            .selected_text(current)
            .height(400.0)
            .show_ui(ui, |ui| {
                if ui
                    .selectable_label(l.selected.is_none(), "every input")
                    .clicked()
                {
                    pick = Some(None);
                }
                for &(i, n) in &l.order {
                    let text = format!("{} ({n})", l.input_name(i));
                    if ui.selectable_label(l.selected == Some(i), text).clicked() {
                        pick = Some(Some(i));
                    }
                }
            });
        if let Some(i) = l.selected {
            let counts = l.comp_counts(state);
            let reached = counts.iter().filter(|&&n| n > 0.0).count();
            let sharing: f64 = counts.iter().filter(|&&n| n > 1.0).sum();
            let total = l.order.iter().find(|o| o.0 == i).map_or(0, |o| o.1);
            ui.label(format!(
                "{total} synapses on {reached} compartments; {sharing:.0} share a compartment with another of this input"
            ));
        }
        if let Some(p) = pick
            && let Some(l) = &mut state.synapses
        {
            l.select(p);
            state.colour_version += 1;
        }
    }
}
