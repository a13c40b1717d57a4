//! Part of `CapacitanceRule::Timed` (before and after the polish): each site is served by its
//! compartment or a neighbour of it (the parent or a child), whichever answers most like the
//! cell at the site.
//!
//! The reducer sends a site to an end of the reduced link its point lies on, judged on the full
//! cell's numbers before any capacitance exists. Once the tree is final its compartments' own
//! soma responses are known (one run of the reduced tree), and a site whose neighbour's EPSP is
//! closer to the site's own moves there: cost = 0.5·|ln A_site − ln A_c| (DC, Np) +
//! 5·|ln(ttp_c/ttp_site)| + |ln(peak_c/peak_site)|. The point map follows for the sites'
//! points, and their membrane area moves with them.
//!
//! What this step does not do: change any conductance or capacitance (the DC network and the
//! dynamics stay as built), or move a site more than one link per call.

use super::polish::ln_floor;
use super::{Fidelity, FidelityError};
use crate::morphology::NONE;
use crate::reduce::ReducedTree;
use crate::transient::{RcNetwork, simulate};

/// Weights of the DC and time-to-peak terms against the peak's (all three |log ratios|).
/// Measured on the eight shared real cells at 15/31/63 compartments (targets met of 24:
/// time-to-peak / EPSP peak / DC p95): time 3, DC 1: 14 / 16 / 21; time 5, DC 0.5: 16 / 16 / 21;
/// time 6, DC 0.5: the same; time 12, DC 1: 16 / 15 / 21; time 5, DC 0.25: 16 / 16 / 20.
const TIME_WEIGHT: f64 = 5.0;
const DC_WEIGHT: f64 = 0.5;

impl Fidelity {
    /// Serves each site by the compartment among its own, its parent and its children whose
    /// response is most like the cell's at the site (see the module documentation). Returns how
    /// many sites moved. A tree from another reducer (its site count differs) is refused. Split
    /// inputs ([`Fidelity::split_sites`]) are dropped first: serving decides whole compartments.
    pub fn serve_sites(&self, tree: &mut ReducedTree) -> Result<usize, FidelityError> {
        self.check_site_maps(tree)?;
        let points = tree.point_compartment.len();
        tree.site_split.clear();
        tree.point_split.clear();
        let net = RcNetwork::from_reduced(tree);
        let run = simulate(&net, &self.opts.drive(), &[], &self.opts.run_options())?;
        let peaks = run.peaks.expect("peaks tracked");
        let ln_a = tree.ln_attenuation_dc();
        let cost = |i: usize, c: usize| -> f64 {
            DC_WEIGHT * (self.ln_to[i] - ln_a[c]).abs()
                + TIME_WEIGHT * (ln_floor(peaks.time_ms[c]) - ln_floor(self.ttp[i])).abs()
                + (ln_floor(peaks.value_mv[c]) - ln_floor(self.peak[i])).abs()
        };
        // a point carrying several sites moves once, with its first site
        let mut decided = vec![NONE; points];
        let mut moved = 0;
        for i in 0..tree.site_compartment.len() {
            let (c, p) = (tree.site_compartment[i] as usize, self.point[i] as usize);
            if decided[p] == NONE {
                let pick = cheapest(tree, c, |k| cost(i, k));
                decided[p] = pick as u32;
                let was = tree.point_compartment[p];
                if was != NONE && pick != c {
                    tree.compartments[was as usize].membrane_area_um2 -= self.area[i];
                    tree.compartments[pick].membrane_area_um2 += self.area[i];
                    tree.point_compartment[p] = pick as u32;
                }
            }
            let pick = decided[p] as usize;
            if pick != c {
                moved += 1;
                tree.compartments[c].site_count -= 1;
                tree.compartments[pick].site_count += 1;
                tree.site_compartment[i] = pick as u32;
            }
        }
        Ok(moved)
    }
}

impl Fidelity {
    /// Refuses a tree from another reducer: its site count differs, or a site's point is not
    /// in its point map (the steps that move sites and points need both maps to be this cell's).
    pub(super) fn check_site_maps(&self, tree: &ReducedTree) -> Result<(), FidelityError> {
        let points = tree.point_compartment.len();
        if tree.site_compartment.len() != self.peak.len()
            || self.point.iter().any(|&p| p as usize >= points)
        {
            return Err(FidelityError::Mismatch {
                what: "number of sites",
            });
        }
        Ok(())
    }
}

/// Of compartment c, its parent and its children, the one of least `cost` (c on ties).
fn cheapest(tree: &ReducedTree, c: usize, cost: impl Fn(usize) -> f64) -> usize {
    let comp = &tree.compartments[c];
    let near = comp
        .parent
        .into_iter()
        .chain(comp.children.into_iter().flatten());
    let mut best = (cost(c), c);
    for k in near.map(|k| k as usize) {
        let e = cost(k);
        if e < best.0 {
            best = (e, k);
        }
    }
    best.1
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sites_move_one_link_at_most_and_the_maps_stay_one() {
        let (red, fid) = crate::fidelity::demo_reduction();
        let mut total_moved = 0;
        for budget in [7, 15, 31] {
            let before = red.tree(budget);
            let mut after = before.clone();
            let moved = fid.serve_sites(&mut after).unwrap();
            total_moved += moved;
            let changed = (0..before.site_compartment.len())
                .filter(|&i| before.site_compartment[i] != after.site_compartment[i])
                .count();
            assert_eq!(moved, changed, "budget {budget}");
            for (i, (&c0, &c1)) in before
                .site_compartment
                .iter()
                .zip(&after.site_compartment)
                .enumerate()
            {
                let comp = &before.compartments[c0 as usize];
                let near = c1 == c0
                    || comp.parent == Some(c1)
                    || comp.children.is_some_and(|k| k.contains(&c1));
                assert!(near, "site {i}: {c0} -> {c1} is not a neighbour");
                assert_eq!(after.point_compartment[fid.point[i] as usize], c1);
            }
            // the network itself is untouched; areas and counts only move
            for (a, b) in before.compartments.iter().zip(&after.compartments) {
                assert_eq!(
                    (a.g_axial_ns, a.g_leak_ns, a.capacitance_pf),
                    (b.g_axial_ns, b.g_leak_ns, b.capacitance_pf)
                );
            }
            let area = |t: &ReducedTree| {
                t.compartments
                    .iter()
                    .map(|c| c.membrane_area_um2)
                    .sum::<f64>()
            };
            assert!((area(&before) - area(&after)).abs() <= 1e-9 * area(&before));
            let count = |t: &ReducedTree| t.compartments.iter().map(|c| c.site_count).sum::<u32>();
            assert_eq!(count(&after), after.site_compartment.len() as u32);
            let mut per = vec![0u32; after.len()];
            after
                .site_compartment
                .iter()
                .for_each(|&c| per[c as usize] += 1);
            for (c, n) in after.compartments.iter().zip(per) {
                assert_eq!(c.site_count, n);
            }
        }
        assert!(total_moved > 0, "no site moved at any budget");
    }

    #[test]
    fn serving_a_split_tree_drops_its_splits() {
        let (red, fid) = crate::fidelity::demo_reduction();
        let mut t = red.tree(15);
        assert!(fid.split_sites(&mut t).unwrap() > 0);
        fid.serve_sites(&mut t).unwrap();
        assert!(
            t.site_split
                .iter()
                .chain(&t.point_split)
                .all(Option::is_none)
        );
        assert!(t.bad_split().is_none());
    }
}
