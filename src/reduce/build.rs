//! Stage 5 of the reduction, once per budget: replay the collapse order, place each leaf, Kron-
//! reduce the fine network onto the kept nodes, and send every point and site to a compartment.
//!
//! What this stage does not do: choose the order (that is `order`) or the capacitances (that is
//! `capacitance`).

use super::fine::Fine;
use super::order::{Moments, Skeleton};
use crate::cable::C64;
use crate::morphology::NONE;

/// The kept fine nodes at one budget and the Kron-reduced network on them.
#[derive(Debug, Clone, Default)]
pub(super) struct Kept {
    /// Fine node of each compartment, ascending (so parents come first).
    pub node: Vec<u32>,
    /// Compartment of each fine node that is kept (NONE otherwise).
    pub comp: Vec<u32>,
    /// Parent compartment (NONE at the soma), axial conductance (S), leak (S).
    pub parent: Vec<u32>,
    pub g: Vec<f64>,
    pub shunt: Vec<f64>,
    /// For every fine node: the compartment that serves it.
    pub serves: Vec<u32>,
}

/// The maximal tree after the first `steps` collapses, on the retained nodes (entries of other
/// nodes unused).
pub(super) struct Replayed {
    pub alive: Vec<bool>,
    pub leaf: Vec<bool>,
    /// The alive node that stands for each retained node (its representative).
    pub rep: Vec<u32>,
    /// The alive leaves other than the soma whose regions hold sites, ascending, with their
    /// regions' sites.
    pub leaves: Vec<(u32, Moments)>,
    /// The alive parent of each alive retained node (NONE at the soma).
    pub parent: Vec<u32>,
}

/// Replays the first `steps` steps (cherry collapses and splices): O(retained nodes + steps),
/// the regions read from the order's record.
pub(super) fn replay(sk: &Skeleton, steps: usize) -> Replayed {
    let n = sk.retained.len();
    let mut alive = sk.retained.clone();
    let mut leaf = vec![false; n];
    for &k in &sk.rnodes {
        leaf[k as usize] = sk.kids[k as usize].is_none();
    }
    let mut parent = sk.rparent.clone();
    for st in &sk.order[..steps] {
        let c = st.node as usize;
        let [x, y] = st.kids;
        alive[x as usize] = false;
        if st.splice {
            // c leaves with its leaf child x; y hangs from c's parent
            alive[c] = false;
            parent[y as usize] = st.up;
        } else {
            alive[y as usize] = false;
            leaf[c] = true;
        }
    }
    let mut rep = vec![NONE; n];
    let mut leaves = Vec::new();
    for &k in &sk.rnodes {
        let k = k as usize;
        rep[k] = if alive[k] {
            k as u32
        } else {
            rep[sk.rparent[k] as usize]
        };
        if k > 0 && alive[k] && leaf[k] {
            let s = sk.step_of[k];
            let region = if s != NONE && (s as usize) < steps {
                sk.merged[s as usize]
            } else {
                sk.own[k]
            };
            if region.w > 0.0 {
                leaves.push((k as u32, region));
            }
        }
    }
    Replayed {
        alive,
        leaf,
        rep,
        leaves,
        parent,
    }
}

/// Where each alive leaf with sites sits (NONE for every other node): the node of its region
/// whose DC log attenuation to the soma is closest to its target level (see [`leaf_targets`]);
/// exact placement is free: Kron reduction keeps the chosen node's relations to the soma
/// exactly. A leaf without sites stays at its own node, and the soma stays the soma.
pub(super) fn place_leaves(
    fine: &Fine,
    sk: &Skeleton,
    rp: &Replayed,
    sites: &[(u32, f64)],
) -> Vec<u32> {
    let n = fine.len();
    let a = &fine.ln_att;
    let rep = &rp.rep;
    let in_region = |y: usize, l: usize| rep[sk.section_of[y] as usize] as usize == l;
    // each leaf's number in `rp.leaves`, for the sites
    let mut lid = vec![NONE; n];
    for (i, &(l, _)) in rp.leaves.iter().enumerate() {
        lid[l as usize] = i as u32;
    }
    // each section's leaf number (NONE outside the leaves' regions), by section number
    let section_leaf: Vec<u32> = sk
        .rnodes
        .iter()
        .map(|&k| lid[rep[k as usize] as usize])
        .collect();
    let groups = LeafSites::new(a, rp.leaves.len(), sites, |i| {
        section_leaf[sk.site_section[i] as usize]
    });
    let target = leaf_targets(a, &rp.parent, &rp.leaves, &groups);
    // each leaf's node, independently: in parallel
    use rayon::prelude::*;
    let spots: Vec<u32> = rp
        .leaves
        .par_iter()
        .enumerate()
        .map(|(i, &(l, _))| {
            let (l, t) = (l as usize, target[i]);
            let mut u = best_site(&groups, i, t) as usize;
            // walk up while the parent is still at or above the target and inside the region
            loop {
                let p = fine.parent[u] as usize;
                if u == 0 || !in_region(p, l) || a[p] < t {
                    break;
                }
                u = p;
            }
            let p = fine.parent[u] as usize;
            if u != 0 && in_region(p, l) && (t - a[p]).abs() < (a[u] - t).abs() {
                u = p;
            }
            u as u32
        })
        .collect();
    let mut place = vec![NONE; n];
    for (&(l, _), &u) in rp.leaves.iter().zip(&spots) {
        place[l as usize] = u;
    }
    place
}

/// Of leaf i's sites, the one with the smallest ln A at or above `t`, else the highest (the
/// first such in site order); branch-free selects (ln A is finite: a site always beats the
/// infinite starts).
fn best_site(groups: &LeafSites, i: usize, t: f64) -> u32 {
    let (mut best, mut best_a) = (NONE, f64::INFINITY);
    let (mut top, mut top_a) = (NONE, f64::NEG_INFINITY);
    for (nodes, lna, _) in groups.leaf(i) {
        for (&x, &xa) in nodes.iter().zip(lna) {
            let better = xa >= t && xa < best_a;
            best = if better { x } else { best };
            best_a = if better { xa } else { best_a };
            let higher = xa > top_a;
            top = if higher { x } else { top };
            top_a = if higher { xa } else { top_a };
        }
    }
    if best != NONE { best } else { top }
}

/// The sites (weight > 0) of each leaf to place, grouped by leaf and in site order within a
/// leaf (a stable counting sort), so each leaf's passes read short contiguous runs: the site
/// list is cut into two halves sorted side by side, and a leaf's sites are its run in the first
/// half, then its run in the second (still site order).
struct LeafSites {
    halves: Vec<LeafRuns>,
}

/// One half's counting sort: leaf i's sites are `start[i]..start[i + 1]`.
struct LeafRuns {
    start: Vec<usize>,
    node: Vec<u32>,
    lna: Vec<f64>,
    w: Vec<f64>,
}

impl LeafSites {
    /// `leaf_of(i)` is the leaf number of site i, or NONE.
    fn new(
        a: &[f64],
        leaves: usize,
        sites: &[(u32, f64)],
        leaf_of: impl Fn(usize) -> u32 + Sync,
    ) -> Self {
        use rayon::prelude::*;
        let half = sites.len().div_ceil(2).max(1);
        let halves = sites
            .par_chunks(half)
            .enumerate()
            .map(|(h, part)| LeafRuns::new(a, leaves, part, |i| leaf_of(h * half + i)))
            .collect();
        LeafSites { halves }
    }

    /// Leaf i's sites as (fine node, ln A, weight) slices, in site order.
    fn leaf(&self, i: usize) -> impl Iterator<Item = (&[u32], &[f64], &[f64])> {
        self.halves.iter().map(move |h| {
            let r = h.start[i]..h.start[i + 1];
            (&h.node[r.clone()], &h.lna[r.clone()], &h.w[r])
        })
    }
}

impl LeafRuns {
    fn new(a: &[f64], leaves: usize, sites: &[(u32, f64)], leaf_of: impl Fn(usize) -> u32) -> Self {
        let of: Vec<u32> = sites
            .iter()
            .enumerate()
            .map(|(i, &(_, w))| if w > 0.0 { leaf_of(i) } else { NONE })
            .collect();
        let mut start = vec![0usize; leaves + 1];
        for &i in of.iter().filter(|&&i| i != NONE) {
            start[i as usize + 1] += 1;
        }
        for i in 0..leaves {
            start[i + 1] += start[i];
        }
        let m = start[leaves];
        let mut next = start.clone();
        let (mut node, mut lna, mut w) = (vec![0u32; m], vec![0.0; m], vec![0.0; m]);
        for (&(x, wx), &i) in sites.iter().zip(&of) {
            if i != NONE {
                let j = next[i as usize];
                next[i as usize] += 1;
                (node[j], lna[j], w[j]) = (x, a[x as usize], wx);
            }
        }
        LeafRuns {
            start,
            node,
            lna,
            w,
        }
    }
}

/// The DC log attenuation each leaf should sit at. A leaf's sites are served by the leaf or by
/// its parent, whichever is closer in ln A, so the best level is the weighted mean of the sites
/// the leaf itself serves: a one-dimensional two-centre k-means with one centre fixed at the
/// parent (Lloyd 1982), started from the mean of all the region's sites, at most six steps.
/// Each leaf iterates on its own sites only, until its level stops moving.
fn leaf_targets(
    a: &[f64],
    parent: &[u32],
    leaves: &[(u32, Moments)],
    groups: &LeafSites,
) -> Vec<f64> {
    use rayon::prelude::*;
    leaves
        .par_iter()
        .enumerate()
        .map(|(i, &(l, region))| {
            let p = parent[l as usize];
            let parent_level = if p == NONE { 0.0 } else { a[p as usize] };
            let mut t = region.mean;
            for _ in 0..6 {
                // plain weighted sums (Σw, Σw·lnA), branch-free: adding 0 changes no sum
                let (mut w, mut wx) = (0.0, 0.0);
                for (_, lna, ws) in groups.leaf(i) {
                    for (&xa, &wi) in lna.iter().zip(ws) {
                        let on = if (xa - t).abs() < (xa - parent_level).abs() {
                            1.0
                        } else {
                            0.0
                        };
                        w += wi * on;
                        wx += wi * xa * on;
                    }
                }
                if w > 0.0 && t != wx / w {
                    t = wx / w;
                } else {
                    break;
                }
            }
            t
        })
        .collect()
}

/// Kron reduction (Schur complement of the conductance matrix) of the fine network onto `kept`
/// nodes whose connecting tree branches only at kept nodes. Subtrees without a kept node fold
/// into the node they hang from (g·D/(g + D)); each path node x between kept a and b is
/// eliminated top-down: S = g_up + g_dn + G_x, new link g_up·g_dn/S, a gains g_up·G_x/S and the
/// next node down g_dn·G_x/S. All values stay ≥ 0. O(N): one pass up, one pass down.
pub(super) fn kron(fine: &Fine, kept: &[bool], dynamics: &[&[C64]]) -> Kept {
    let n = fine.len();
    let (p, g) = (&fine.parent, &fine.g);
    // upwards: which nodes lead to a kept node (`has`), the child that leads there, the folded
    // subtrees, and the lower end of the path through each node that leads to a kept node
    let mut has = kept.to_vec();
    let mut kept_child = vec![NONE; n];
    let mut fold = vec![0.0; n];
    let mut lower = vec![NONE; n];
    for k in (0..n).rev() {
        // k's children (all > k) are done
        if kept[k] {
            lower[k] = k as u32;
        } else if has[k] {
            lower[k] = lower[kept_child[k] as usize];
        }
        if k == 0 {
            break;
        }
        let q = p[k] as usize;
        if has[k] {
            has[q] = true;
            kept_child[q] = k as u32;
        } else {
            fold[q] += fine.branch[k];
        }
    }
    let mut out = Kept {
        comp: vec![NONE; n],
        ..Kept::default()
    };
    for (k, _) in kept.iter().enumerate().filter(|(_, on)| **on) {
        out.comp[k] = out.node.len() as u32;
        out.node.push(k as u32);
    }
    let m = out.node.len();
    out.parent = vec![NONE; m];
    out.g = vec![0.0; m];
    out.shunt = vec![0.0; m];
    // downwards: the eliminations, and each node's candidate servers
    let mut top = vec![NONE; n];
    let mut grun = vec![0.0; n];
    let mut add = vec![0.0; n];
    // each node's pair of candidate servers (upper, lower end), pushed in order: a kept node
    // serves itself; a node hanging below a kept node h is served by h or h's parent in the
    // tree (the soma: itself); a path node and what hangs below it by the path's two ends
    let mut ends: Vec<[u32; 2]> = Vec::with_capacity(n);
    for k in 0..n {
        if !has[k] {
            let q = p[k] as usize;
            let e = if kept[q] {
                [if q == 0 { 0 } else { top[q] }, q as u32]
            } else {
                ends[q]
            };
            ends.push(e);
            continue;
        }
        if k > 0 && kept[p[k] as usize] {
            top[k] = p[k];
            grun[k] = g[k];
        }
        ends.push(if kept[k] {
            [k as u32; 2]
        } else {
            [top[k], lower[k]]
        });
        let gx = fine.shunt[k] + fold[k] + add[k];
        if kept[k] {
            let c = out.comp[k] as usize;
            out.shunt[c] += gx;
            if k > 0 {
                out.parent[c] = out.comp[top[k] as usize];
                out.g[c] = grun[k];
            }
        } else {
            let a = out.comp[top[k] as usize] as usize;
            let c = kept_child[k] as usize;
            let (gu, gd) = (grun[k], g[c]);
            let s = gu + gd + gx;
            out.shunt[a] += gu * gx / s;
            add[c] += gd * gx / s;
            grun[c] = gu * gd / s;
            top[c] = top[k];
        }
    }
    out.serves = serving(fine, dynamics, &ends, &out);
    out
}

/// For every fine node, the compartment that serves it: of the two ends of the reduced link its
/// path hangs from (`ends`, from [`kron`]'s downward pass; below a leaf: the leaf and its
/// parent), the one whose DC log attenuation to the soma is closest to the node's own.
/// `dynamics` holds, per fine node, its complex log transfer to the soma at the serving
/// frequencies.
fn serving(fine: &Fine, dynamics: &[&[C64]], ends: &[[u32; 2]], out: &Kept) -> Vec<u32> {
    use rayon::prelude::*;
    let a = &fine.ln_att;
    // distance between two nodes: DC log attenuation to the soma (Np) plus the difference of
    // their transfer impedances to the soma (complex log) at the frequencies of a synaptic
    // potential, so a node is served by the end whose response at the soma is most like its own
    // (|Δ| as √(re² + im²): these are logs, far from overflow, and hypot is slow)
    let score = |x: usize, c: usize| -> f64 {
        (a[x] - a[c]).abs()
            + dynamics
                .iter()
                .map(|lz| (lz[x] - lz[c]).norm_sqr().sqrt())
                .sum::<f64>()
    };
    // whether x goes to u rather than l; with the usual two frequencies the four square roots
    // are taken side by side (the same numbers as `score`)
    let prefers_upper = |x: usize, u: usize, l: usize| -> bool {
        if let [d0, d1] = dynamics {
            let q = [
                (d0[x] - d0[u]).norm_sqr(),
                (d1[x] - d1[u]).norm_sqr(),
                (d0[x] - d0[l]).norm_sqr(),
                (d1[x] - d1[l]).norm_sqr(),
            ]
            .map(f64::sqrt);
            (a[x] - a[u]).abs() + (q[0] + q[1]) <= (a[x] - a[l]).abs() + (q[2] + q[3])
        } else {
            score(x, u) <= score(x, l)
        }
    };
    // the choice itself is independent per node: in parallel
    (0..fine.len())
        .into_par_iter()
        .with_min_len(4096)
        .map(|k| {
            let [u, l] = ends[k].map(|e| e as usize);
            let pick = if u == l || prefers_upper(k, u, l) {
                u
            } else {
                l
            };
            out.comp[pick]
        })
        .collect()
}

/// Membrane area (µm²) of each of `m` compartments: the areas of the fine nodes it serves.
/// Consecutive fine nodes mostly share a compartment, so each run is summed in a register (the
/// same additions in the same order as one node at a time).
pub(super) fn compartment_areas(serves: &[u32], area: &[f64], m: usize) -> Vec<f64> {
    let mut out = vec![0.0; m];
    let mut run = (NONE, 0.0);
    for (&c, &ax) in serves.iter().zip(area) {
        if c != run.0 {
            if run.0 != NONE {
                out[run.0 as usize] = run.1;
            }
            run = (c, out[c as usize]);
        }
        run.1 += ax;
    }
    if run.0 != NONE {
        out[run.0 as usize] = run.1;
    }
    out
}

/// Number of sites of each of `m` compartments.
pub(super) fn site_counts(site_compartment: &[u32], m: usize) -> Vec<u32> {
    let mut count = vec![0u32; m];
    for &c in site_compartment {
        count[c as usize] += 1;
    }
    count
}
