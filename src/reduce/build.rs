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

/// Replays the first `steps` collapses; returns, per retained node, whether it is alive, whether
/// it is a leaf, and the alive node that stands for it (its representative).
pub(super) fn replay(
    sk: &Skeleton,
    steps: usize,
) -> (Vec<bool>, Vec<bool>, Vec<u32>, Vec<Moments>) {
    let n = sk.retained.len();
    let mut alive = sk.retained.clone();
    let mut leaf: Vec<bool> = sk.kids.iter().map(|k| k.is_none()).collect();
    let mut region = sk.own.clone();
    for &c in &sk.order[..steps] {
        let c = c as usize;
        if let Some([x, y]) = sk.kids[c] {
            for x in [x as usize, y as usize] {
                alive[x] = false;
                let r = region[x];
                region[c].merge(&r);
            }
        }
        leaf[c] = true;
    }
    let mut rep = vec![NONE; n];
    for k in 0..n {
        if !sk.retained[k] {
            continue;
        }
        rep[k] = if alive[k] {
            k as u32
        } else {
            rep[sk.rparent[k] as usize]
        };
    }
    (alive, leaf, rep, region)
}

/// Where each alive leaf sits: the node of its region whose DC log attenuation to the soma is
/// closest to its target level (see [`leaf_targets`]); exact placement is free: Kron reduction
/// keeps the chosen node's relations to the soma exactly. A leaf without sites stays at its own
/// node, and the soma stays the soma.
pub(super) fn place_leaves(
    fine: &Fine,
    sk: &Skeleton,
    alive_leaf: &[bool],
    rep: &[u32],
    region: &[Moments],
    sites: &[(u32, f64)],
) -> Vec<u32> {
    let n = fine.len();
    let a = &fine.ln_att;
    let in_region = |y: usize, l: usize| rep[sk.section_of[y] as usize] as usize == l;
    // the leaves to place, numbered compactly, and each site's leaf number
    let mut lid = vec![NONE; n];
    let mut leaves: Vec<usize> = Vec::new();
    for l in 1..n {
        if alive_leaf[l] && region[l].w > 0.0 {
            lid[l] = leaves.len() as u32;
            leaves.push(l);
        }
    }
    let site_leaf: Vec<(u32, u32, f64)> = sites
        .iter()
        .filter(|&&(_, w)| w > 0.0)
        .filter_map(|&(x, w)| {
            let i = lid[rep[sk.section_of[x as usize] as usize] as usize];
            (i != NONE).then_some((i, x, w))
        })
        .collect();
    let target = leaf_targets(a, sk, &leaves, region, &site_leaf);
    // the site with the smallest ln A at or above the target, and the highest, per leaf
    let mut best = vec![NONE; leaves.len()];
    let mut top = vec![NONE; leaves.len()];
    for &(i, x, _) in &site_leaf {
        let (i, xa) = (i as usize, a[x as usize]);
        if xa >= target[i] && (best[i] == NONE || xa < a[best[i] as usize]) {
            best[i] = x;
        }
        if top[i] == NONE || xa > a[top[i] as usize] {
            top[i] = x;
        }
    }
    let mut place: Vec<u32> = (0..n as u32).collect();
    for (i, &l) in leaves.iter().enumerate() {
        let t = target[i];
        let mut u = if best[i] != NONE { best[i] } else { top[i] } as usize;
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
        place[l] = u as u32;
    }
    place
}

/// The DC log attenuation each leaf should sit at. A leaf's sites are served by the leaf or by
/// its parent, whichever is closer in ln A, so the best level is the weighted mean of the sites
/// the leaf itself serves: a one-dimensional two-centre k-means with one centre fixed at the
/// parent (Lloyd 1982), started from the mean of all the region's sites. `site_leaf` holds
/// (leaf number, fine node, weight) per site of a leaf in `leaves`.
fn leaf_targets(
    a: &[f64],
    sk: &Skeleton,
    leaves: &[usize],
    region: &[Moments],
    site_leaf: &[(u32, u32, f64)],
) -> Vec<f64> {
    let mut t: Vec<f64> = leaves.iter().map(|&l| region[l].mean).collect();
    let parent_level: Vec<f64> = leaves
        .iter()
        .map(|&l| {
            let p = sk.rparent[l];
            if p == NONE { 0.0 } else { a[p as usize] }
        })
        .collect();
    // plain weighted sums (Σw, Σw·lnA): no division per site, so the pass is memory-bound
    let lna: Vec<f64> = site_leaf.iter().map(|&(_, x, _)| a[x as usize]).collect();
    let mut acc = vec![(0.0, 0.0); leaves.len()];
    for _ in 0..6 {
        acc.iter_mut().for_each(|m| *m = (0.0, 0.0));
        for (&(i, _, w), &xa) in site_leaf.iter().zip(&lna) {
            let i = i as usize;
            if (xa - t[i]).abs() < (xa - parent_level[i]).abs() {
                acc[i].0 += w;
                acc[i].1 += w * xa;
            }
        }
        let mut moved = false;
        for (ti, &(w, wx)) in t.iter_mut().zip(&acc) {
            if w > 0.0 && *ti != wx / w {
                *ti = wx / w;
                moved = true;
            }
        }
        if !moved {
            break;
        }
    }
    t
}

/// Kron reduction (Schur complement of the conductance matrix) of the fine network onto `kept`
/// nodes whose connecting tree branches only at kept nodes. Subtrees without a kept node fold
/// into the node they hang from (g·D/(g + D)); each path node x between kept a and b is
/// eliminated top-down: S = g_up + g_dn + G_x, new link g_up·g_dn/S, a gains g_up·G_x/S and the
/// next node down g_dn·G_x/S. All values stay ≥ 0. O(N).
pub(super) fn kron(fine: &Fine, kept: &[bool], dynamics: &[&[C64]]) -> Kept {
    let n = fine.len();
    let (p, g) = (&fine.parent, &fine.g);
    let mut has = kept.to_vec();
    let mut kept_child = vec![NONE; n];
    let mut fold = vec![0.0; n];
    for k in (1..n).rev() {
        let q = p[k] as usize;
        if has[k] {
            has[q] = true;
            kept_child[q] = k as u32;
        } else {
            fold[q] += g[k] * fine.d[k] / (g[k] + fine.d[k]);
        }
    }
    let mut out = Kept {
        comp: vec![NONE; n],
        serves: vec![NONE; n],
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
    let mut top = vec![NONE; n];
    let mut grun = vec![0.0; n];
    let mut add = vec![0.0; n];
    for k in 0..n {
        if !has[k] {
            continue;
        }
        if k > 0 && kept[p[k] as usize] {
            top[k] = p[k];
            grun[k] = g[k];
        }
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
    out.serves = serving(fine, kept, dynamics, (&has, &kept_child, &top), &out);
    out
}

/// For every fine node, the compartment that serves it: of the two ends of the reduced link its
/// path hangs from (below a leaf: the leaf and its parent), the one whose DC log attenuation to
/// the soma is closest to the node's own. `dynamics` holds, per fine node, its complex log
/// transfer to the soma at the serving frequencies.
fn serving(
    fine: &Fine,
    kept: &[bool],
    dynamics: &[&[C64]],
    (has, kept_child, top): (&[bool], &[u32], &[u32]),
    out: &Kept,
) -> Vec<u32> {
    use rayon::prelude::*;
    let n = fine.len();
    let a = &fine.ln_att;
    // distance between two nodes: DC log attenuation to the soma (Np) plus the difference of
    // their transfer impedances to the soma (complex log) at the frequencies of a synaptic
    // potential, so a node is served by the end whose response at the soma is most like its own
    let score = |x: usize, c: usize| -> f64 {
        (a[x] - a[c]).abs()
            + dynamics
                .iter()
                // |Δ| as √(re² + im²): these are logs, far from overflow, and hypot is slow
                .map(|lz| (lz[x] - lz[c]).norm_sqr().sqrt())
                .sum::<f64>()
    };
    // lower end of the path through each node that leads to a kept node
    let mut lower = vec![NONE; n];
    for k in (0..n).rev() {
        if kept[k] {
            lower[k] = k as u32;
        } else if has[k] {
            lower[k] = lower[kept_child[k] as usize];
        }
    }
    // attachment: the nearest ancestor-or-self on a path to a kept node
    let mut att = vec![NONE; n];
    for k in 0..n {
        att[k] = if has[k] {
            k as u32
        } else {
            att[fine.parent[k] as usize]
        };
    }
    // the choice itself is independent per node: in parallel
    (0..n)
        .into_par_iter()
        .with_min_len(4096)
        .map(|k| {
            let h = att[k] as usize;
            let (u, l) = if kept[h] {
                if h == k {
                    (h, h)
                } else {
                    // below a leaf: the leaf or its parent
                    let pc = out.parent[out.comp[h] as usize];
                    let up = if pc == NONE {
                        h
                    } else {
                        out.node[pc as usize] as usize
                    };
                    (up, h)
                }
            } else {
                (top[h] as usize, lower[h] as usize)
            };
            let pick = if u == l || score(k, u) <= score(k, l) {
                u
            } else {
                l
            };
            out.comp[pick]
        })
        .collect()
}
