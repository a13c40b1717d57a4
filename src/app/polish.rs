//! The `timed` capacitance rule in the app: the reducer's (fitted) tree is shown at once, and its
//! time-domain polish ([`crate::fidelity::Fidelity::polish`]) runs in a background job; the
//! polished tree replaces it when it arrives, if the reduction and the budget are still those it
//! was made for (a result for a budget the user has left is kept for a return, never shown).
//!
//! The full cell's EPSP run the polish needs is the reduction's own ([`Reduction::fidelity`],
//! made once per membrane, sites and kept types). The traces panel keeps its own full-cell runs:
//! those inject at the clicked point, this one at the soma, so neither can serve the other.
//! One job at a time; polished trees are kept per budget for the current reduction.

use super::jobs::Job;
use super::state::{CellState, DrawingExtras, Reduced, Reduction};
use crate::morphology::NONE;
use crate::reduce::{CapacitanceRule, ReducedTree};
use eframe::egui;
use std::sync::Arc;

/// How many polished trees (budgets) of the current reduction are kept.
const KEEP: usize = 16;

/// The status line while a polish runs.
pub const STATUS: &str = "timing polish…";

/// A reduction (by identity) and a budget.
#[derive(Clone)]
struct Key {
    reduction: Arc<Reduction>,
    budget: usize,
}

impl Key {
    fn same(&self, reduction: &Arc<Reduction>, budget: usize) -> bool {
        Arc::ptr_eq(&self.reduction, reduction) && self.budget == budget
    }
}

/// The polish job and the polished trees of the current reduction.
#[derive(Default)]
pub struct Polisher {
    job: Option<(Key, Job<Arc<ReducedTree>>)>,
    done: Vec<(usize, Arc<ReducedTree>)>,
    done_of: Option<Arc<Reduction>>,
    /// Why the last polish failed (the fitted tree stays shown), and for what (not retried).
    pub error: Option<String>,
    failed: Option<Key>,
}

impl Polisher {
    /// True while a polish runs.
    pub fn busy(&self) -> bool {
        self.job.is_some()
    }

    /// The running job's status ("timing polish…: stage (n s)").
    pub fn status(&self) -> Option<String> {
        self.job.as_ref().map(|(_, j)| j.status())
    }

    /// Takes a finished job, swaps a polished tree into `s` when it is the one `s` waits for,
    /// and starts the polish `s` needs when nothing runs. Called every frame.
    pub fn update(&mut self, s: &mut CellState, ctx: Option<egui::Context>) {
        if let Some((key, job)) = &self.job
            && let Some(r) = job.try_take()
        {
            let key = key.clone();
            self.job = None;
            match r {
                Ok(tree) => self.keep(key, tree),
                Err(e) => {
                    self.error = Some(format!("the timing polish failed: {e:#}"));
                    self.failed = Some(key);
                }
            }
        }
        let Some((reduction, budget, fitted)) = s.wants_polish() else {
            return;
        };
        let stored = self
            .done_of
            .as_ref()
            .filter(|o| Arc::ptr_eq(o, &reduction))
            .and_then(|_| self.done.iter().find(|(b, _)| *b == budget));
        if let Some((_, tree)) = stored {
            s.set_polished(&reduction, budget, tree.clone());
            return;
        }
        let failed = self.failed.as_ref();
        if self.job.is_some() || failed.is_some_and(|k| k.same(&reduction, budget)) {
            return;
        }
        let key = Key {
            reduction: reduction.clone(),
            budget,
        };
        let job = Job::spawn(STATUS.into(), ctx, move |p| {
            p.set("the full cell's EPSP run");
            reduction.fidelity()?;
            p.set("the capacitances");
            Ok(Arc::new(reduction.finish(&fitted)?))
        });
        self.job = Some((key, job));
    }

    fn keep(&mut self, key: Key, tree: Arc<ReducedTree>) {
        if !self
            .done_of
            .as_ref()
            .is_some_and(|o| Arc::ptr_eq(o, &key.reduction))
        {
            self.done.clear();
            self.done_of = Some(key.reduction.clone());
        }
        if self.done.len() >= KEEP {
            self.done.remove(0);
        }
        self.done.retain(|(b, _)| *b != key.budget);
        self.done.push((key.budget, tree));
    }
}

impl CellState {
    /// The budget the reduction is replayed at (clamped to its range).
    fn clamped_budget(&self, r: &Reduction) -> usize {
        self.budget
            .clamp(r.min_compartments(), r.max_compartments().max(1))
    }

    /// What the shown tree waits for: its reduction, budget and fitted tree, when it is a
    /// `timed` tree not yet polished.
    pub fn wants_polish(&self) -> Option<(Arc<Reduction>, usize, Arc<ReducedTree>)> {
        let r = self.reduction.as_ref()?;
        let red = self.reduced.as_ref()?;
        if red.finished || r.rule() != CapacitanceRule::Timed {
            return None;
        }
        Some((r.clone(), self.clamped_budget(r), red.tree.clone()))
    }

    /// Shows `tree`, the polish of the shown tree, if the reduction and the budget are still
    /// those it was made for (else nothing changes). The conductances are the fitted tree's,
    /// but the rule may serve some sites (and their points) by a neighbouring compartment, so
    /// the drawing's extras are made again, and the maps too (they depend on the capacitances
    /// above DC).
    pub fn set_polished(
        &mut self,
        reduction: &Arc<Reduction>,
        budget: usize,
        tree: Arc<ReducedTree>,
    ) -> bool {
        let current = self
            .reduction
            .as_ref()
            .is_some_and(|r| Arc::ptr_eq(r, reduction) && self.clamped_budget(r) == budget);
        if !(current && self.reduced.as_ref().is_some_and(|r| !r.finished)) {
            return false;
        }
        let Some(mut extras) =
            DrawingExtras::new(&tree, &self.model.flat, &self.model.path_distance)
        else {
            return false;
        };
        extras.node_comp.resize(self.model.flat.len(), NONE);
        let mut red = Reduced::new(tree, extras, self.freq_hz, true);
        red.set_site(self.site_model());
        self.reduced = Some(red);
        self.colour_version += 1;
        true
    }

    /// The shown tree with its capacitance rule applied: the shown one when finished, else
    /// polished now (blocking; for saving while the polish still runs).
    pub fn finished_tree(&self) -> anyhow::Result<Arc<ReducedTree>> {
        let r = self.reduction.as_ref().ok_or_else(|| {
            anyhow::anyhow!("there is no reduced tree yet ({})", self.reduction_note)
        })?;
        match &self.reduced {
            Some(red) if red.finished => Ok(red.tree.clone()),
            Some(red) => Ok(Arc::new(r.finish(&red.tree)?)),
            None => Ok(Arc::new(r.finished_tree(self.clamped_budget(r))?)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::app::state::{Cell, build_reduction};
    use crate::cable::Params;

    #[test]
    fn a_polish_is_shown_only_for_the_reduction_and_budget_it_was_made_for() {
        let mut s = CellState::new(Arc::new(Cell::demo()), Params::default(), 0.0).unwrap();
        s.set_reduction(build_reduction(&s.cell, None, &s.params));
        s.set_budget(15);
        let (r, b, fitted) = s.wants_polish().expect("a timed tree waits for its polish");
        assert_eq!(b, 15);
        let polished = Arc::new(r.finish(&fitted).unwrap());
        // the user moved on: a stale polish is not shown
        s.set_budget(7);
        assert!(!s.set_polished(&r, 15, polished.clone()));
        assert!(!s.reduced.as_ref().unwrap().finished);
        assert_eq!(s.reduced.as_ref().unwrap().tree.len(), 7);
        // another reduction (a new membrane) is not this one
        let other = build_reduction(&s.cell, None, &s.params).unwrap();
        s.set_budget(15);
        assert!(!s.set_polished(&other, 15, polished.clone()));
        // back at 15 on the same reduction: shown, finished, no longer waited for
        assert!(s.set_polished(&r, 15, polished.clone()));
        let shown = s.reduced.as_ref().unwrap();
        assert!(shown.finished && Arc::ptr_eq(&shown.tree, &polished));
        assert!(s.wants_polish().is_none());
        assert!(Arc::ptr_eq(&s.finished_tree().unwrap(), &polished));
    }
}
