//! The response-trace plot under the drawings: the soma voltage over time for a brief current
//! at the clicked site, full cell vs reduced tree, with the peak error beside it.
//!
//! Each run lasts until every node of its network has passed its peak (at least
//! [`SHORTEST_MS`], at most [`LONGEST_MS`], the step growing in the slow tail as the fidelity
//! report's runs): a far tip of a large cell can peak at the soma long after 40 ms. A trace
//! still rising at the end gets no peak error, only a plain note. The voltage axis is in the unit
//! of the larger peak ([`axis::VoltageUnit`]).
//!
//! The full cell's half (its fine network, [`full_cell_traces`]) is the expensive one and does
//! not depend on the budget: it runs on a background thread and is kept per site for the current
//! reduction (a new membrane or new kept types make a new reduction, which empties the store).
//! The reduced half is redone, in the same job, when the budget moves. One job at a time: a
//! click during a run waits for it, then the latest wish is computed.

use super::axis::{self, VoltageUnit};
use super::jobs::Job;
use super::state::{CellState, Reduction};
use crate::fidelity::{
    Input, SideTraces, TraceOptions, UntilPeaked, full_cell_traces, reduced_tree_traces,
};
use crate::morphology::NONE;
use crate::reduce::ReducedTree;
use crate::transient::Waveform;
use eframe::egui::{self, Color32};
use egui_plot::{Legend, Line, Plot};
use std::sync::Arc;

/// The test input: an alpha current I = I₀·(t/τ)·e^(1−t/τ) (τ = 0.5 ms, I₀ = 10 pA) flowing
/// into the cell at the site (depolarising), as the fidelity report uses.
pub const INPUT: Input = Input::Current {
    waveform: Waveform::Alpha {
        tau_ms: INPUT_TAU_MS,
        peak_pa: 10.0,
    },
};
const INPUT_TAU_MS: f64 = 0.5;

/// The shortest run (ms): a near injection point's traces still show their decay.
pub const SHORTEST_MS: f64 = 40.0;
/// The longest run (ms): 25 membrane time constants at the default 20 ms.
pub const LONGEST_MS: f64 = 500.0;

/// How many sites' full-cell traces are kept.
const KEEP: usize = 32;

/// What the traces are of: a reduction (by identity), a morphology point, a budget and the
/// state's tree at that budget (by identity), which the job runs.
#[derive(Clone)]
struct Key {
    reduction: Arc<Reduction>,
    point: u32,
    budget: usize,
    tree: Arc<ReducedTree>,
}

impl PartialEq for Key {
    /// The same tree too: a `timed` tree's polish replaces the fitted one at the same budget.
    fn eq(&self, o: &Key) -> bool {
        Arc::ptr_eq(&self.reduction, &o.reduction)
            && self.point == o.point
            && self.budget == o.budget
            && Arc::ptr_eq(&self.tree, &o.tree)
    }
}

/// Traces for one site at one budget.
pub struct Shown {
    key: Key,
    /// Morphology point of the site.
    pub point: u32,
    pub budget: usize,
    pub full: Arc<SideTraces>,
    pub reduced: SideTraces,
    /// The compartment serving the site, and how many the tree has.
    pub compartment: u32,
    pub compartments: usize,
    /// The part of the site's input given to a neighbouring compartment, if any.
    pub split: Option<crate::reduce::Split>,
}

impl Shown {
    /// ln(peak_reduced/peak_full) of the soma traces (Np, signed: < 0 when the tree answers
    /// too weakly); `None` unless both have peaked inside their runs.
    pub fn peak_error_np(&self) -> Option<f64> {
        if !(self.full.soma_peaked() && self.reduced.soma_peaked()) {
            return None;
        }
        let (pf, _) = self.full.soma_peak();
        let (pr, _) = self.reduced.soma_peak();
        Some((pr.abs() / pf.abs()).ln())
    }
}

/// The trace plot and what feeds it.
pub struct TracesView {
    pub shown: Option<Shown>,
    pub error: Option<String>,
    pub opts: TraceOptions,
    job: Option<(Key, Job<Shown>)>,
    /// Full-cell traces per morphology point, for `store_of`.
    store: Vec<(u32, Arc<SideTraces>)>,
    store_of: Option<Arc<Reduction>>,
}

impl Default for TracesView {
    fn default() -> Self {
        TracesView {
            shown: None,
            error: None,
            opts: TraceOptions {
                duration_ms: LONGEST_MS,
                until_peaked: Some(UntilPeaked {
                    min_ms: SHORTEST_MS,
                    // the alpha current is below 0.2 % of its peak after 10τ
                    grow_after_ms: 10.0 * INPUT_TAU_MS,
                }),
                ..TraceOptions::default()
            },
            job: None,
            store: Vec::new(),
            store_of: None,
        }
    }
}

/// The traces the state asks for: its reduction, site and budget (None while there is none).
fn wanted(s: &CellState) -> Option<Key> {
    let r = s.reduction.as_ref()?;
    let point = *s.cell.flat.node_point.get(s.site?)?;
    if point == NONE {
        return None;
    }
    let budget = s
        .budget
        .clamp(r.min_compartments(), r.max_compartments().max(1));
    Some(Key {
        reduction: r.clone(),
        point,
        budget,
        tree: s.reduced.as_ref()?.tree.clone(),
    })
}

impl TracesView {
    /// True while traces are being computed.
    pub fn busy(&self) -> bool {
        self.job.is_some()
    }

    /// Takes a finished job's traces.
    pub fn poll(&mut self) {
        let Some((_, job)) = &self.job else { return };
        let Some(r) = job.try_take() else { return };
        self.job = None;
        match r {
            Ok(shown) => {
                let of = &shown.key.reduction;
                if !self.store_of.as_ref().is_some_and(|o| Arc::ptr_eq(o, of)) {
                    self.store.clear();
                    self.store_of = Some(of.clone());
                }
                if !self.store.iter().any(|(p, _)| *p == shown.point) {
                    if self.store.len() >= KEEP {
                        self.store.remove(0);
                    }
                    self.store.push((shown.point, shown.full.clone()));
                }
                self.error = None;
                self.shown = Some(shown);
            }
            Err(e) => self.error = Some(format!("{e:#}")),
        }
    }

    /// Starts the job the state asks for, unless it is shown, running, or another runs.
    pub fn update(&mut self, s: &CellState, ctx: Option<egui::Context>) {
        self.poll();
        let Some(key) = wanted(s) else { return };
        if self.job.is_some() || self.shown.as_ref().is_some_and(|sh| sh.key == key) {
            return;
        }
        let stored = self
            .store_of
            .as_ref()
            .filter(|o| Arc::ptr_eq(o, &key.reduction))
            .and_then(|_| self.store.iter().find(|(p, _)| *p == key.point))
            .map(|(_, f)| f.clone());
        let (k, opts) = (key.clone(), self.opts);
        let job = Job::spawn("computing the traces".into(), ctx, move |p| {
            let reducer = k.reduction.reducer();
            let full = match stored {
                Some(f) => f,
                None => {
                    p.set("the full cell");
                    Arc::new(full_cell_traces(reducer, k.point, &INPUT, &opts)?)
                }
            };
            p.set("the reduced tree");
            let tree = k.tree.clone();
            // at least as long as the cell's run, so both lines span the plot
            let opts = TraceOptions {
                until_peaked: opts.until_peaked.map(|u| UntilPeaked {
                    min_ms: u.min_ms.max(full.end_ms()),
                    ..u
                }),
                ..opts
            };
            let (compartment, reduced) = reduced_tree_traces(&tree, k.point, &INPUT, &opts)?;
            Ok(Shown {
                point: k.point,
                budget: k.budget,
                full,
                reduced,
                compartment,
                compartments: tree.len(),
                split: tree.point_split(k.point as usize),
                key: k,
            })
        });
        self.job = Some((key, job));
    }

    /// The plot with its title and the peak error.
    pub fn ui(&mut self, ui: &mut egui::Ui, s: &CellState) {
        self.update(s, Some(ui.ctx().clone()));
        ui.horizontal(|ui| {
            super::panels::plot_title(
                ui,
                "Soma voltage for a brief inward current at the injection point",
            )
                .on_hover_text(
                    "A 10 pA alpha current (peak at τ = 0.5 ms) flows into the cell at the injection point; \
                     the reduced tree gets it at the injection point's compartment (or at a point on the \
                     link between two adjacent compartments, which splits it). Voltage above rest; \
                     each run lasts until the whole cell has passed its peak (40 to 500 ms).",
                );
            if let Some((_, job)) = &self.job {
                ui.spinner();
                ui.weak(job.status());
            }
        });
        if let Some(e) = &self.error {
            ui.colored_label(Color32::from_rgb(255, 110, 100), e);
        }
        if s.reduction.is_none() {
            ui.weak(&s.reduction_note);
        }
        let Some(sh) = &self.shown else {
            return;
        };
        let (pf, pr) = (sh.full.soma_peak().0, sh.reduced.soma_peak().0);
        let unit = VoltageUnit::for_peak(pf.abs().max(pr.abs()));
        peak_line(ui, sh, unit);
        let line = |t: &SideTraces| -> Vec<[f64; 2]> {
            t.times_ms
                .iter()
                .zip(&t.soma_mv)
                .map(|(&x, &y)| [x, y * unit.per_mv()])
                .collect()
        };
        let plot =
            Plot::new("traces").legend(Legend::default().position(egui_plot::Corner::RightTop));
        let plot = axis::readable_x(plot, "time (ms)");
        let plot = axis::readable_y(plot, format!("above rest ({})", unit.symbol()));
        plot.show(ui, |pu| {
            pu.line(
                Line::new("cell", line(&sh.full))
                    .color(Color32::from_rgb(175, 175, 185))
                    .width(4.0),
            );
            pu.line(
                Line::new("reduced tree", line(&sh.reduced))
                    .color(Color32::from_rgb(250, 170, 60))
                    .width(1.5),
            );
        });
    }
}

/// The peak error line (signed relative difference (e^x − 1)·100 of the peaks, with a
/// typographic minus), or which soma trace is still rising at the end of its run.
fn peak_line(ui: &mut egui::Ui, sh: &Shown, unit: VoltageUnit) {
    let (pf, tf) = sh.full.soma_peak();
    let (pr, tr) = sh.reduced.soma_peak();
    let minus = |t: String| t.replace('-', "−");
    let rising = |t: &SideTraces| (!t.soma_peaked()).then(|| t.end_ms());
    ui.horizontal_wrapped(|ui| match sh.peak_error_np() {
        Some(np) => {
            let pct = np.exp_m1() * 100.0;
            let digits = if pct.abs() < 10.0 { 1 } else { 0 };
            ui.strong(minus(format!(
                "peak: reduced {pct:+.digits$} % vs cell ({np:+.2} Np)"
            )));
            ui.weak(format!("(cell {} at {tf:.1} ms)", unit.show(pf)));
        }
        None => {
            let who = match (rising(&sh.full), rising(&sh.reduced)) {
                (Some(t), Some(_)) => format!("both soma traces are still rising at {t:.0} ms"),
                (Some(t), None) => format!("the cell's soma is still rising at {t:.0} ms"),
                (None, Some(t)) => format!("the reduced tree's soma is still rising at {t:.0} ms"),
                (None, None) => "a soma trace stays at rest".to_string(),
            };
            ui.strong(format!("no peak to compare: {who}"));
        }
    })
    .response
    .on_hover_text(format!(
        "cell {} at {tf:.1} ms; reduced tree {} at {tr:.1} ms, current at compartment {} of {}{}",
        unit.show(pf),
        unit.show(pr),
        sh.compartment,
        sh.compartments,
        match sh.split {
            Some(x) => format!(
                " ({:.0} % of it at compartment {}: the point lies on the link between them)",
                100.0 * x.weight,
                x.compartment
            ),
            None => String::new(),
        }
    ));
}
