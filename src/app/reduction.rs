//! The app's hold on the library's reduction: [`Reduction`] wraps the [`Reducer`] of the model
//! (shared through `Arc`); one budget's tree is the library's [`ReducedTree`] itself (shared
//! through `Arc`), with [`DrawingExtras`] beside it. Nothing here reduces, re-orders or
//! re-solves: ids, order, conductances and types are the reducer's; only drawing's extras (model
//! node → compartment, mean path distance, Strahler order) are added.

use crate::cable::Params;
use crate::fidelity::{Fidelity, FidelityOptions};
use crate::morphology::{Flat, NONE};
use crate::reduce::{CapacitanceRule, ReducedTree, Reducer, Sites};
use crate::synapses::{Snapped, SynapseJson, SynapseMap};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, OnceLock};

/// What drawing needs of one budget's [`ReducedTree`] besides the tree: which compartment each
/// model node belongs to, how many model nodes each compartment stands for and their mean path
/// distance, and each compartment's Strahler order in the compartment tree. Entry c is the
/// tree's compartment c (the reducer numbers them parents-first).
#[derive(Debug, Clone, Default)]
pub struct DrawingExtras {
    /// Model node (see [`super::state::CellState::model`]) → compartment (`NONE`: none).
    pub node_comp: Vec<u32>,
    /// Model node → the split of its point's input, if any (empty when the tree has none).
    pub node_split: Vec<Option<crate::reduce::Split>>,
    /// Number of model nodes each compartment stands for.
    pub n_points: Vec<usize>,
    /// Mean path distance (µm) of the points each compartment stands for.
    pub path_distance: Vec<f64>,
    /// Strahler order of each compartment in the compartment tree.
    pub strahler: Vec<u32>,
}

impl DrawingExtras {
    /// The extras of `t` for the app's model (`model` and `path_distance` are the model the
    /// reducer saw). None if the compartments are not numbered parents-first (the reducer's
    /// promise).
    pub fn new(t: &ReducedTree, model: &Flat, path_distance: &[f64]) -> Option<DrawingExtras> {
        let cs = &t.compartments;
        let n = cs.len();
        let ordered = cs.iter().enumerate().all(|(c, x)| {
            x.id as usize == c
                && x.parent.is_none_or(|p| (p as usize) < c)
                && (c == 0) == x.parent.is_none()
        });
        if !ordered {
            return None;
        }
        let node_comp: Vec<u32> = model
            .node_point
            .iter()
            .map(|&p| t.point_compartment.get(p as usize).copied().unwrap_or(NONE))
            .map(|c| if (c as usize) < n { c } else { NONE })
            .collect();
        // mean path distance of the model nodes each compartment stands for
        let mut sum = vec![0.0; n];
        let mut n_points = vec![0usize; n];
        for (k, &c) in node_comp.iter().enumerate() {
            if c != NONE {
                sum[c as usize] += path_distance.get(k).copied().unwrap_or(0.0);
                n_points[c as usize] += 1;
            }
        }
        let path_distance = (0..n)
            .map(|c| {
                if n_points[c] > 0 {
                    sum[c] / n_points[c] as f64
                } else {
                    0.0
                }
            })
            .collect();
        let node_split = match t.point_split.is_empty() {
            true => Vec::new(),
            false => (model.node_point.iter())
                .map(|&p| {
                    t.point_split(p as usize)
                        .filter(|x| (x.compartment as usize) < n)
                })
                .collect(),
        };
        Some(DrawingExtras {
            node_comp,
            node_split,
            n_points,
            path_distance,
            strahler: crate::morphology::strahler(&t.parents(), |_| false),
        })
    }
}

/// Drawn radius (px) of each compartment's disc of `t` in a view `view_px` across
/// ([`disc_radii`] of the membrane areas).
pub fn tree_disc_radii(t: &ReducedTree, view_px: f32) -> Vec<f32> {
    let areas: Vec<f64> = t.compartments.iter().map(|c| c.membrane_area_um2).collect();
    disc_radii(&areas, view_px)
}

/// The reduction of one model: the library's [`Reducer`] plus what its exports name (source,
/// point ids and positions). Every budget is a replay of the reducer. The full cell's EPSP run
/// ([`Fidelity`], what the `timed` polish and the saved report need) is made once, on first
/// use, and kept with it: a new membrane, new sites or new kept types make a new reduction.
pub struct Reduction {
    reducer: Reducer,
    source: String,
    ids: Vec<i64>,
    pos: Vec<[f64; 3]>,
    /// The synapse table whose synapses are the sites (the saved JSON gets its map).
    table: Option<Snapped>,
    fidelity: OnceLock<Result<Arc<Fidelity>, String>>,
}

/// Builds the reduction of a cell keeping the neurite types in `kept` (None: all), with the
/// library's default capacitance rule (`timed`), or says why it cannot.
pub fn build_reduction(
    cell: &super::state::Cell,
    kept: Option<Vec<i32>>,
    params: &Params,
) -> Result<Arc<Reduction>, String> {
    build_reduction_for(cell, kept, params, None, CapacitanceRule::default())
}

/// [`build_reduction`] serving the synapses of `table` (the open table's synapses on the model,
/// [`super::synapses::on_model`]) as its sites, as `pollard reduce --synapses` does, with the
/// capacitance rule `rule` (the reducer records it; `timed` trees are polished by the caller).
pub fn build_reduction_for(
    cell: &super::state::Cell,
    kept: Option<Vec<i32>>,
    params: &Params,
    table: Option<Snapped>,
    rule: CapacitanceRule,
) -> Result<Arc<Reduction>, String> {
    let opts = crate::reduce::ReduceOptions {
        types: kept,
        sites: table.as_ref().map_or(Sites::Default, Snapped::sites),
        capacitance: rule,
        ..Default::default()
    };
    match Reducer::new(&cell.flat, params, &opts) {
        Ok(reducer) => Ok(Arc::new(Reduction {
            reducer,
            source: cell.name.clone(),
            ids: cell.morph.points.iter().map(|p| p.id).collect(),
            pos: cell.morph.points.iter().map(|p| p.pos).collect(),
            table,
            fidelity: OnceLock::new(),
        })),
        Err(e) => Err(format!("no reduction: {e}")),
    }
}

impl Reduction {
    /// The library's reducer.
    pub fn reducer(&self) -> &Reducer {
        &self.reducer
    }

    pub fn max_compartments(&self) -> usize {
        self.reducer.max_compartments()
    }

    pub fn min_compartments(&self) -> usize {
        1
    }

    /// The library's tree at `budget` as the reducer builds it (a replay of its collapse
    /// order; a `timed` tree still unpolished, see [`Reduction::finished_tree`]).
    pub fn tree(&self, budget: usize) -> Arc<ReducedTree> {
        Arc::new(self.reducer.tree(budget))
    }

    /// The capacitance rule of this reduction.
    pub fn rule(&self) -> CapacitanceRule {
        self.reducer.options().capacitance
    }

    /// The full cell's EPSP run with `pollard reduce`'s default options, made on first use and
    /// kept (about 0.3 s on a 100,000-point cell; several threads asking at once wait for one).
    pub fn fidelity(&self) -> anyhow::Result<Arc<Fidelity>> {
        self.fidelity
            .get_or_init(|| {
                Fidelity::new(&self.reducer, &FidelityOptions::default())
                    .map(Arc::new)
                    .map_err(|e| e.to_string())
            })
            .clone()
            .map_err(|e| anyhow::anyhow!(e))
    }

    /// `fitted`, finished by this reduction's capacitance rule: the same tree for `fitted` and
    /// `uniform`, polished on [`Reduction::fidelity`] for `timed` (what `pollard reduce` writes
    /// with its default fidelity options).
    pub fn finish(&self, fitted: &ReducedTree) -> anyhow::Result<ReducedTree> {
        let mut t = fitted.clone();
        if self.rule() == CapacitanceRule::Timed {
            self.fidelity()?.apply_capacitance_rule(&mut t)?;
        }
        Ok(t)
    }

    /// The tree at `budget` with its capacitance rule applied (blocking; the app polishes in
    /// the background, [`super::polish`]).
    pub fn finished_tree(&self, budget: usize) -> anyhow::Result<ReducedTree> {
        self.finish(&self.reducer.tree(budget))
    }

    pub fn error_curve(&self) -> Vec<(usize, f64)> {
        self.reducer.error_curve()
    }

    /// The soma-EPSP peak error's 95th percentile over the sites (Np) at 1, 3, 7, 15, …
    /// compartments and the largest, each tree finished by this reduction's rule (blocking:
    /// seconds on a large cell; the app runs it in the background, [`super::sweep`]). Stops
    /// between budgets once `cancel` is set.
    pub fn epsp_curve(&self, cancel: &AtomicBool) -> anyhow::Result<Vec<(usize, f64)>> {
        let fid = self.fidelity()?;
        let mut curve = Vec::new();
        for b in crate::fidelity::default_budgets(self.reducer.max_compartments()) {
            if cancel.load(Ordering::Relaxed) {
                anyhow::bail!("cancelled");
            }
            for r in fid.budget_sweep(&self.reducer, &[b], None)? {
                curve.push((r.compartments, r.report.epsp_peak_error_np.p95));
            }
        }
        Ok(curve)
    }

    /// A finished tree of this reduction ([`Reduction::finished_tree`]) as JSON text.
    pub fn export_json(&self, t: &ReducedTree) -> anyhow::Result<String> {
        let report = self.reducer.report(t)?;
        let src = crate::export::TreeSource {
            source: &self.source,
            point_ids: &self.ids,
            point_pos: &self.pos,
        };
        // the saved file carries the same fidelity summary as `pollard reduce` writes
        let fidelity = self.fidelity()?.report(t, None)?;
        // and, with a synapse table, the same `synapses` member
        let map = match &self.table {
            Some(s) => Some(SynapseMap::new(s, t)?.with_curve(s, &self.reducer)?),
            None => None,
        };
        let extras = crate::export::TreeExtras::<()> {
            fidelity: Some(&fidelity),
            synapses: (self.table.as_ref().zip(map.as_ref()))
                .map(|(s, m)| SynapseJson::new(s, m, t.len())),
            ..Default::default()
        };
        Ok(crate::export::reduced_tree_json_with(
            &src,
            &self.reducer,
            t,
            &report,
            extras,
            true,
        )?)
    }

    /// A finished tree as a NeuroML cell (rest at the CLI's default).
    pub fn export_neuroml(&self, t: &ReducedTree) -> anyhow::Result<String> {
        let id = crate::neuroml::cell_id_from(&self.source);
        let rest = crate::neuroml::DEFAULT_REST_MV;
        Ok(crate::neuroml::reduced_tree_neuroml(
            t,
            &id,
            &self.source,
            rest,
        )?)
    }

    /// A finished tree as SWC text.
    pub fn export_swc(&self, t: &ReducedTree) -> anyhow::Result<String> {
        let header = vec![
            format!("reduced tree of {}: {} compartments", self.source, t.len()),
            format!("made by pollard {}", env!("CARGO_PKG_VERSION")),
        ];
        Ok(crate::export::reduced_tree_swc(t, &header))
    }
}

/// Drawn radius (px) of each disc in a view `view_px` across: the disc's area
/// follows the compartment's membrane area relative to the largest one, and the largest
/// disc shrinks as 1/√n with the count, so that n discs cover a bounded share of the view at
/// any budget (a rule of this app, no source). Always at least 2 px.
pub fn disc_radii(area_um2: &[f64], view_px: f32) -> Vec<f32> {
    let n = area_um2.len().max(1) as f32;
    let largest = area_um2.iter().copied().fold(0.0, f64::max);
    let r_max = (0.06 * view_px / n.sqrt()).clamp(3.0, 14.0);
    area_um2
        .iter()
        .map(|&a| {
            let share = if largest > 0.0 && a.is_finite() {
                (a / largest).sqrt()
            } else {
                1.0
            };
            (r_max * share as f32).max(2.0)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::disc_radii;

    /// Share of a square view covered by the discs (overlaps counted twice).
    fn covered(r: &[f32], view: f32) -> f32 {
        r.iter().map(|r| std::f32::consts::PI * r * r).sum::<f32>() / (view * view)
    }

    #[test]
    fn discs_stay_readable_at_any_budget() {
        // common practice, no source: n discs of a 600 px view cover at most ~3 % of it above
        // the 3 px floor, and never grow into one blob as n grows
        let view = 600.0;
        for n in [1usize, 15, 63, 255, 1023] {
            let areas: Vec<f64> = (0..n).map(|i| 1e3 * (1.0 + i as f64)).collect();
            let r = disc_radii(&areas, view);
            assert!(r.iter().all(|&x| (2.0..=14.0).contains(&x)), "{n}: {r:?}");
            let floor = n as f32 * std::f32::consts::PI * 9.0 / (view * view);
            assert!(
                covered(&r, view) <= 0.035f32.max(floor),
                "{n}: {}",
                covered(&r, view)
            );
        }
        // a thousandfold larger area than the rest does not change the others' floor of 2 px,
        // and the largest disc is the largest
        let r = disc_radii(&[1e9, 1.0, 1.0], view);
        assert_eq!(r[1], 2.0);
        assert!(r[0] > r[1]);
    }
}
