//! Time-domain polish of a reduced tree's capacitances (`CapacitanceRule::Timed`).
//!
//! The reducer fits capacitances in the frequency domain, where one compartment's response is a
//! compromise over all its sites and the time to peak is only seen through phase. This stage
//! starts from that tree and minimises the per-site soma-EPSP errors themselves, in the time
//! domain (a site with a split input answers with the mix of its two compartments' responses):
//! J = mean over sites of (3·(ln ttp ratio)² + (ln peak ratio)²) + 30·(excess of the
//! soma's own |ln peak ratio| beyond 0.01 Np)² + 300·(excess of ln τ_slow/τ beyond ±10 %)², by
//! steepest descent on ln C with forward-difference gradients (one run of the reduced tree per
//! compartment, in parallel) and a backtracking step (Armijo 1966). The sites' part is summed per group of sites with the
//! same input ([`Targets`]), so a trial costs O(groups) after its run, not O(sites). The conductances, and so
//! everything at DC, do not change.
//!
//! What this stage does not do: touch the full cell (its per-site numbers come from
//! [`Fidelity::new`]), or run on trees above [`POLISH_MAX_COMPARTMENTS`].

use super::{Fidelity, FidelityError};
use crate::reduce::{CapacitanceRule, ReducedTree};
use crate::transient::{RcNetwork, simulate};
use rayon::prelude::*;

/// Descent steps of the polish.
pub const POLISH_ITERATIONS: usize = 30;

/// Largest tree polished (each step runs the tree once per compartment).
pub const POLISH_MAX_COMPARTMENTS: usize = 127;

/// Weight of the time-to-peak errors against the peak errors (both as logs of ratios).
const TIME_WEIGHT: f64 = 3.0;

/// Weight of the soma's own EPSP peak error beyond a band of 0.01 Np (1 %), and of the slowest
/// time constant outside a ±10 % band around Rm·Cm (a 2 % band, as the frequency fit holds,
/// leaves most of the timing gain out of reach; measured on the real cells: 5 time-to-peak
/// targets met instead of 3, τ within 11 %). Without the soma's band (its error pinned near 0)
/// the real cells meet 16 time-to-peak targets of 24, with it 18, the soma's own error then
/// 0.0–1.6 % (bands 0.005 / 0.007 / 0.015 / 0.02 Np: 16 / 18 / 17 / 17; measured).
const SOMA_WEIGHT: f64 = 30.0;
const SOMA_BAND_NP: f64 = 0.01;
const TAU_WEIGHT: f64 = 300.0;
const TAU_BAND: f64 = 0.10;

/// Relative step of the forward differences in ln C.
const FD_STEP: f64 = 1e-3;

/// What the polish did.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct PolishSummary {
    /// Steps taken, over both polishes of a tree with split inputs.
    pub steps: usize,
    pub objective_before: f64,
    /// After the last polish (before the last split, on a tree with split inputs).
    pub objective_after: f64,
    /// Sites served by a neighbour of the compartment the reducer gave them
    /// ([`Fidelity::serve_sites`], [`Fidelity::split_sites`]).
    pub sites_moved: usize,
    /// Sites whose input is split between two compartments ([`Fidelity::split_sites`]).
    pub sites_split: usize,
}

/// Largest tree whose sites' inputs are split (the step records every node's trace once).
pub const SPLIT_MAX_COMPARTMENTS: usize = 1023;

impl Fidelity {
    /// Finishes a tree of this fidelity's reducer by its capacitance rule: when the rule is
    /// `Timed`, serves the sites by the tree's responses ([`Fidelity::serve_sites`]), polishes
    /// the capacitances, serves them again and splits their inputs ([`Fidelity::split_sites`],
    /// trees up to [`SPLIT_MAX_COMPARTMENTS`], unless the reducer's options say
    /// `split_inputs: false`), then polishes once more with the splits in place and splits
    /// again, returning what was done; leaves the tree as built otherwise.
    pub fn apply_capacitance_rule(
        &self,
        tree: &mut ReducedTree,
    ) -> Result<Option<PolishSummary>, FidelityError> {
        if self.rule == CapacitanceRule::Timed {
            // serve by the fitted tree's responses, polish on that map, serve again by the
            // polished tree's (one more polish and serve meets one more time-to-peak target of
            // 24 for twice the polish's cost, measured; not done)
            let built = tree.site_compartment.clone();
            self.serve_sites(tree)?;
            let mut done = self.polish(tree)?;
            self.serve_sites(tree)?;
            if self.split_inputs && tree.len() <= SPLIT_MAX_COMPARTMENTS {
                self.split_sites(tree)?;
                // the capacitances chosen again with the split sites answering by their mixes
                // (the polish's `Targets` group sites by input), then the splits again on the
                // new responses: 118 → 120 of the 120 real-cell targets with the weights of
                // `split` and `reduce::order` (docs/fidelity.md, session 7); a third round
                // meets none more
                let again = self.polish(tree)?;
                done.steps += again.steps;
                done.objective_after = again.objective_after;
                done.sites_split = self.split_sites(tree)?;
            }
            done.sites_moved = built
                .iter()
                .zip(&tree.site_compartment)
                .filter(|(a, b)| a != b)
                .count();
            Ok(Some(done))
        } else {
            Ok(None)
        }
    }

    /// Polishes `tree`'s capacitances in the time domain (see the module documentation). Trees
    /// of one compartment or above [`POLISH_MAX_COMPARTMENTS`] are left as they are; a tree
    /// from another reducer (its site count differs) is refused, as [`Fidelity::sites`] does.
    pub fn polish(&self, tree: &mut ReducedTree) -> Result<PolishSummary, FidelityError> {
        if tree.site_compartment.len() != self.peak.len() {
            return Err(FidelityError::Mismatch {
                what: "number of sites",
            });
        }
        let n = tree.len();
        let mut net = RcNetwork::from_reduced(tree);
        let tau_ms = tree.params.tau_ms();
        let targets = Targets::new(self, tree);
        let mut f = self.objective(&targets, &net, tau_ms)?;
        let before = f;
        let mut steps = 0;
        if !(2..=POLISH_MAX_COMPARTMENTS).contains(&n) {
            return Ok(PolishSummary {
                steps,
                objective_before: before,
                objective_after: f,
                sites_moved: 0,
                sites_split: 0,
            });
        }
        let mut step = 0.3;
        for _ in 0..POLISH_ITERATIONS {
            let grad: Vec<f64> = (0..n)
                .into_par_iter()
                .map(|c| {
                    let mut probe = net.clone();
                    probe.cap_pf[c] *= FD_STEP.exp();
                    let fc = self
                        .objective(&targets, &probe, tau_ms)
                        .unwrap_or(f64::INFINITY);
                    (fc - f) / FD_STEP
                })
                .collect();
            let norm = grad.iter().map(|g| g * g).sum::<f64>().sqrt();
            if !(norm.is_finite() && norm > 0.0) {
                break;
            }
            let base = net.cap_pf.clone();
            let mut improved = false;
            for _ in 0..8 {
                for c in 0..n {
                    net.cap_pf[c] = base[c] * (-step * grad[c] / norm).exp();
                }
                let fnew = self.objective(&targets, &net, tau_ms)?;
                if fnew < f {
                    f = fnew;
                    improved = true;
                    step *= 1.5;
                    break;
                }
                step *= 0.4;
            }
            if !improved {
                net.cap_pf = base;
                break;
            }
            steps += 1;
        }
        for (c, cap) in tree.compartments.iter_mut().zip(&net.cap_pf) {
            c.capacitance_pf = *cap;
        }
        Ok(PolishSummary {
            steps,
            objective_before: before,
            objective_after: f,
            sites_moved: 0,
            sites_split: 0,
        })
    }

    /// J of the module documentation for `net` (the tree's network with trial capacitances),
    /// the sites' part summed per group of sites with the same input ([`Targets`]): O(groups),
    /// not O(sites).
    fn objective(
        &self,
        targets: &Targets,
        net: &RcNetwork,
        tau_ms: f64,
    ) -> Result<f64, FidelityError> {
        // split inputs answer with mixes of two nodes' responses: then one run records every
        // node (and tracks the peaks too)
        let (mixes, run_peaks) = match targets.groups.iter().any(|g| g.split.is_some()) {
            true => (Some(super::split::Responses::run(self, net)?), None),
            false => {
                let run = simulate(net, &self.opts.drive(), &[], &self.opts.run_options())?;
                (None, run.peaks)
            }
        };
        let peaks = match (&mixes, &run_peaks) {
            (Some(m), _) => &m.peaks,
            (None, p) => p.as_ref().expect("peaks tracked"),
        };
        let mut sum = targets.spread;
        for g in &targets.groups {
            let (peak, ttp) = match (&mixes, g.split) {
                (Some(m), Some(sp)) => m.peak(g.compartment as usize, Some(sp)),
                _ => (
                    peaks.value_mv[g.compartment as usize],
                    peaks.time_ms[g.compartment as usize],
                ),
            };
            let et = ln_floor(ttp) - g.mean_ln_ttp;
            let ep = ln_floor(peak) - g.mean_ln_peak;
            sum += g.sites * (TIME_WEIGHT * et * et + ep * ep);
        }
        let es = beyond(
            ln_floor(peaks.value_mv[0]) - ln_floor(self.soma_peak),
            SOMA_BAND_NP,
        );
        let et = beyond(
            ln_floor(slowest_ms(net)) - ln_floor(tau_ms),
            TAU_BAND.ln_1p(),
        );
        Ok(sum / targets.sites + SOMA_WEIGHT * es * es + TAU_WEIGHT * et * et)
    }
}

/// How far `x` lies outside the band ±`band` (0 inside it).
fn beyond(x: f64, band: f64) -> f64 {
    (x.abs() - band).max(0.0)
}

/// ln of a positive value, floored at 1e-300 (a zero peak stays finite).
pub(super) fn ln_floor(x: f64) -> f64 {
    x.max(1e-300).ln()
}

/// The sites' targets of the polish, per group of sites with the same input (a compartment, or
/// a split: two compartments and a weight): Σ over a group's sites of w·(x_g − a_i)² is
/// n·w·(x_g − mean a)² + w·Σ(a_i − mean a)² (the parallel-axis identity, common practice, no
/// source), so an objective costs O(groups) however many sites.
struct Targets {
    groups: Vec<GroupTargets>,
    /// The constant part: Σ over sites of 3·(ln ttp − mean)² + (ln peak − mean)².
    spread: f64,
    /// Number of sites (at least 1).
    sites: f64,
}

#[derive(Clone, Copy)]
struct GroupTargets {
    compartment: u32,
    split: Option<crate::reduce::Split>,
    sites: f64,
    mean_ln_ttp: f64,
    mean_ln_peak: f64,
}

impl Targets {
    fn new(fid: &Fidelity, tree: &ReducedTree) -> Targets {
        let mut index = std::collections::HashMap::new();
        let mut groups: Vec<GroupTargets> = Vec::new();
        let mut of_site = Vec::with_capacity(tree.site_compartment.len());
        for (i, &c) in tree.site_compartment.iter().enumerate() {
            let split = tree.site_split(i);
            let key = (c, split.map(|s| (s.compartment, s.weight.to_bits())));
            let g = *index.entry(key).or_insert_with(|| {
                groups.push(GroupTargets {
                    compartment: c,
                    split,
                    sites: 0.0,
                    mean_ln_ttp: 0.0,
                    mean_ln_peak: 0.0,
                });
                groups.len() - 1
            });
            of_site.push(g);
            let t = &mut groups[g];
            t.sites += 1.0;
            t.mean_ln_ttp += ln_floor(fid.ttp[i]);
            t.mean_ln_peak += ln_floor(fid.peak[i]);
        }
        for t in &mut groups {
            t.mean_ln_ttp /= t.sites;
            t.mean_ln_peak /= t.sites;
        }
        let mut spread = 0.0;
        for (i, &g) in of_site.iter().enumerate() {
            let t = &groups[g];
            let et = ln_floor(fid.ttp[i]) - t.mean_ln_ttp;
            let ep = ln_floor(fid.peak[i]) - t.mean_ln_peak;
            spread += TIME_WEIGHT * et * et + ep * ep;
        }
        Targets {
            groups,
            spread,
            sites: tree.site_compartment.len().max(1) as f64,
        }
    }
}

/// The slowest time constant (ms) of an RC network, by the reducer's inverse iteration.
fn slowest_ms(net: &RcNetwork) -> f64 {
    crate::reduce::slowest_time_constant_ms(
        &net.parent,
        &net.g_axial_ns,
        &net.g_leak_ns,
        &net.cap_pf,
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_per_compartment_objective_is_the_sum_over_sites() {
        // reference: J written as the module documentation states it, one term per site
        let (red, fid) = crate::fidelity::demo_reduction();
        for budget in [3, 15, 31] {
            let tree = red.tree(budget);
            let net = RcNetwork::from_reduced(&tree);
            let tau = tree.params.tau_ms();
            let fast = fid
                .objective(&Targets::new(&fid, &tree), &net, tau)
                .unwrap();
            let run = simulate(&net, &fid.opts.drive(), &[], &fid.opts.run_options()).unwrap();
            let p = run.peaks.unwrap();
            let r = |a: f64, b: f64| (a / b).ln();
            let mut sum = 0.0;
            for (i, &c) in tree.site_compartment.iter().enumerate() {
                let (et, ep) = (
                    r(p.time_ms[c as usize], fid.ttp[i]),
                    r(p.value_mv[c as usize], fid.peak[i]),
                );
                sum += 3.0 * et * et + ep * ep;
            }
            let es = (r(p.value_mv[0], fid.soma_peak).abs() - 0.01).max(0.0);
            let d = r(slowest_ms(&net), tau);
            let excess = (d.abs() - 1.1f64.ln()).max(0.0);
            let slow =
                sum / tree.site_compartment.len() as f64 + 30.0 * es * es + 300.0 * excess * excess;
            assert!(
                (fast - slow).abs() <= 1e-12 * slow.abs(),
                "budget {budget}: {fast} vs {slow}"
            );
        }
    }

    #[test]
    fn with_split_inputs_the_objective_is_the_sum_over_the_report_rows() {
        // reference: the per-site rows of the report (each split site's own mixed answer)
        let (red, fid) = crate::fidelity::demo_reduction();
        let mut tree = red.tree(15);
        assert!(fid.split_sites(&mut tree).unwrap() > 0);
        let net = RcNetwork::from_reduced(&tree);
        let tau = tree.params.tau_ms();
        let grouped = fid
            .objective(&Targets::new(&fid, &tree), &net, tau)
            .unwrap();
        let (rows, own) = fid.sites(&tree, None).unwrap();
        let r = |a: f64, b: f64| (a / b).ln();
        let sum: f64 = rows
            .iter()
            .map(|x| {
                let et = r(x.time_to_peak_reduced_ms, x.time_to_peak_full_ms);
                let ep = r(x.epsp_peak_reduced_mv, x.epsp_peak_full_mv);
                3.0 * et * et + ep * ep
            })
            .sum();
        let es = (r(own.soma_peak_mv, fid.soma_peak).abs() - 0.01).max(0.0);
        let excess = (r(slowest_ms(&net), tau).abs() - 1.1f64.ln()).max(0.0);
        let want = sum / rows.len() as f64 + 30.0 * es * es + 300.0 * excess * excess;
        assert!(
            (grouped - want).abs() <= 1e-10 * want,
            "{grouped} vs {want}"
        );
    }
}
