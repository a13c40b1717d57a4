//! The EPSP error against the budget in the app, on request (a checkbox under the error plot):
//! one background sweep per reduction ([`Reduction::epsp_curve`]: the soma-EPSP peak error's
//! 95th percentile at 1, 3, 7, 15, … compartments and the largest), drawn beside the collapse
//! order's DC curve. It starts when nothing else runs (the shown tree's polish comes first),
//! and a sweep whose reduction is no longer shown, or no longer wanted, stops at its next budget.
//!
//! What it does not do: block the window, take part in [`super::PollardApp::busy`] (a figure
//! or a test never waits for it), or measure a reduction twice.

use super::jobs::Job;
use super::reduction::Reduction;
use super::state::CellState;
use eframe::egui;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

/// A running sweep: its reduction, its stop flag, the job.
struct Running {
    reduction: Arc<Reduction>,
    cancel: Arc<AtomicBool>,
    job: Job<Vec<[f64; 2]>>,
}

/// A measured curve ((compartments, EPSP p95 in Np) points) or why it could not be.
type Measured = Result<Vec<[f64; 2]>, String>;

/// The sweep job and the last reduction's curve.
#[derive(Default)]
pub struct Sweeper {
    /// The user asked for the EPSP curve (off at start).
    pub wanted: bool,
    running: Option<Running>,
    done: Option<(Arc<Reduction>, Measured)>,
}

impl Drop for Sweeper {
    fn drop(&mut self) {
        if let Some(r) = &self.running {
            r.cancel.store(true, Ordering::Relaxed);
        }
    }
}

impl Sweeper {
    /// Takes a finished sweep, stops one no longer needed, and starts the one the shown
    /// reduction needs when it is wanted and nothing else runs (`others_busy`). Every frame.
    pub fn update(&mut self, s: &CellState, others_busy: bool, ctx: Option<egui::Context>) {
        if let Some(r) = &self.running
            && let Some(res) = r.job.try_take()
        {
            if !r.cancel.load(Ordering::Relaxed) {
                self.done = Some((r.reduction.clone(), res.map_err(|e| format!("{e:#}"))));
            }
            self.running = None;
        }
        let shown = s.reduction.as_ref();
        if let Some(r) = &self.running
            && !(self.wanted && shown.is_some_and(|x| Arc::ptr_eq(x, &r.reduction)))
        {
            r.cancel.store(true, Ordering::Relaxed);
        }
        let Some(shown) = shown else {
            return;
        };
        let measured = self
            .done
            .as_ref()
            .is_some_and(|(d, _)| Arc::ptr_eq(d, shown));
        if !self.wanted || measured || others_busy || self.running.is_some() {
            return;
        }
        let (reduction, cancel) = (shown.clone(), Arc::new(AtomicBool::new(false)));
        let (r2, c2) = (reduction.clone(), cancel.clone());
        let job = Job::spawn("EPSP error per budget".into(), ctx, move |p| {
            p.set("the full cell's EPSP run");
            r2.fidelity()?;
            p.set("one tree per budget");
            Ok(r2
                .epsp_curve(&c2)?
                .into_iter()
                .map(|(b, e)| [b as f64, e])
                .filter(|p| p[1].is_finite())
                .collect())
        });
        self.running = Some(Running {
            reduction,
            cancel,
            job,
        });
    }

    /// The shown reduction's sweep, once it has ended: its curve, or why it failed.
    pub fn result(&self, s: &CellState) -> Option<Result<&[[f64; 2]], &str>> {
        let r = s.reduction.as_ref()?;
        match &self.done {
            Some((d, m)) if Arc::ptr_eq(d, r) => Some(m.as_deref().map_err(String::as_str)),
            _ => None,
        }
    }

    /// The shown reduction's curve, once measured.
    pub fn curve(&self, s: &CellState) -> Option<&[[f64; 2]]> {
        self.result(s)?.ok()
    }
}
