//! Stages 3–4 of the reduction: the maximal tree's skeleton and the greedy collapse order.
//!
//! The *maximal tree* keeps the soma, every node with two children (branch points, junctions)
//! and every tip of the binarised fine network; each other node lies on one *section*, the path
//! from a kept node up to the next. A *region* is what one leaf compartment stands for: at the
//! maximal tree a tip's section; after collapses, the union of a cherry's section and its two
//! leaves' regions. A leaf may sit at any node of its region (the rest folds onto the path by
//! Kron reduction, exactly), so the collapse cost assumes each leaf sits where the DC log
//! attenuation to the soma equals its sites' weighted mean, and sites of an internal section are
//! served by the section's lower end. Under those rules the squared error of a region depends only
//! on its own sites, so a cherry's cost never changes once it is a cherry and one binary heap gives
//! the whole order in O(N log N).
//!
//! What this stage does not do: place leaves or build conductances (that is `build`, per budget).

use super::CurvePoint;
use super::fine::Fine;
use crate::morphology::NONE;
use std::cmp::Ordering;
use std::collections::BinaryHeap;

/// Weighted sites of a region, centred: total weight, weighted mean of ln A, and the weighted
/// sum of squared deviations from that mean (Chan, Golub & LeVeque 1979 pairwise update).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(super) struct Moments {
    pub w: f64,
    pub mean: f64,
    pub m2: f64,
}

impl Moments {
    pub fn add(&mut self, w: f64, x: f64) {
        self.merge(&Moments {
            w,
            mean: x,
            m2: 0.0,
        });
    }

    pub fn merge(&mut self, o: &Moments) {
        let w = self.w + o.w;
        if w <= 0.0 {
            return;
        }
        let delta = o.mean - self.mean;
        self.m2 += o.m2 + delta * delta * self.w * o.w / w;
        self.mean += delta * o.w / w;
        self.w = w;
    }

    /// Squared error when every site is served at ln A = `at`.
    pub fn sse_at(&self, at: f64) -> f64 {
        self.m2 + self.w * (self.mean - at).powi(2)
    }
}

/// The maximal tree (indexed by fine node; entries of other nodes unused) and its collapse order.
#[derive(Debug, Clone, Default)]
pub(super) struct Skeleton {
    /// Kept in the maximal tree.
    pub retained: Vec<bool>,
    /// Nearest retained ancestor of a retained node (NONE at the soma).
    pub rparent: Vec<u32>,
    /// The two retained children, or None for a tip.
    pub kids: Vec<Option<[u32; 2]>>,
    /// For every fine node: the retained node at the lower end of its section (itself if retained).
    pub section_of: Vec<u32>,
    /// Sites of each retained node's own section.
    pub own: Vec<Moments>,
    /// The retained nodes, ascending (parents first).
    pub rnodes: Vec<u32>,

    /// Cherry parents in collapse order.
    pub order: Vec<u32>,
    /// The region of `order[i]` once it has collapsed (its section and its leaves' regions).
    pub merged: Vec<Moments>,
    /// For every node: its step in `order`, or NONE if it never collapses.
    pub step_of: Vec<u32>,
    /// Predicted error for every odd budget, ascending.
    pub curve: Vec<CurvePoint>,
}

/// f64 with a total order, for the heap.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Key(f64, u32);
impl Eq for Key {}
impl PartialOrd for Key {
    fn partial_cmp(&self, o: &Self) -> Option<Ordering> {
        Some(self.cmp(o))
    }
}
impl Ord for Key {
    // reversed: BinaryHeap is a max-heap, we pop the smallest cost (ties: smallest id)
    fn cmp(&self, o: &Self) -> Ordering {
        o.0.total_cmp(&self.0).then(o.1.cmp(&self.1))
    }
}

/// The maximal tree's skeleton: retained nodes, their links and every node's section.
pub(super) fn skeleton(fine: &Fine, sites: &[(u32, f64)]) -> Skeleton {
    let n = fine.len();
    let retained: Vec<bool> = (0..n).map(|k| k == 0 || fine.nkids[k] != 1).collect();
    let mut section_of: Vec<u32> = (0..n as u32).collect();
    let mut only_child = vec![NONE; n];
    for k in (1..n).rev() {
        let p = fine.parent[k] as usize;
        if !retained[k] {
            section_of[k] = section_of[only_child[k] as usize];
        }
        only_child[p] = k as u32;
    }
    let mut rparent = vec![NONE; n];
    let mut kids: Vec<Option<[u32; 2]>> = vec![None; n];
    let mut first = vec![NONE; n];
    for k in 1..n {
        if !retained[k] {
            continue;
        }
        let mut a = fine.parent[k] as usize;
        while !retained[a] {
            a = fine.parent[a] as usize;
        }
        rparent[k] = a as u32;
        if first[a] == NONE {
            first[a] = k as u32;
        } else {
            kids[a] = Some([first[a], k as u32]);
        }
    }
    let mut own = vec![Moments::default(); n];
    for &(x, w) in sites {
        own[section_of[x as usize] as usize].add(w, fine.ln_att[x as usize]);
    }
    let rnodes = (0..n as u32).filter(|&k| retained[k as usize]).collect();
    Skeleton {
        retained,
        rparent,
        kids,
        section_of,
        own,
        rnodes,
        ..Skeleton::default()
    }
}

/// The greedy collapse order (see the module documentation), each collapsed region's sites,
/// and the predicted error curve: weighted RMS over the sites of the change in DC log
/// attenuation to the soma (Np).
pub(super) fn collapse_order(fine: &Fine, sk: &mut Skeleton) {
    let n = fine.len();
    let a = &fine.ln_att;
    let mut region = sk.own.clone();
    let mut leaf: Vec<bool> = sk.kids.iter().map(|k| k.is_none()).collect();
    let mut total = 0.0;
    let mut w_total = 0.0;
    let mut alive = 0usize;
    for k in 0..n {
        if !sk.retained[k] {
            continue;
        }
        alive += 1;
        w_total += sk.own[k].w;
        total += if leaf[k] {
            sk.own[k].m2
        } else {
            sk.own[k].sse_at(a[k])
        };
    }
    // the sites of cherry c's section and of its two leaves' regions, as one region
    let merged = |c: usize, region: &[Moments]| -> Moments {
        let [x, y] = sk.kids[c].expect("a cherry has two children");
        let mut m = sk.own[c];
        m.merge(&region[x as usize]);
        m.merge(&region[y as usize]);
        m
    };
    // the increase of squared error when cherry c collapses
    let cost = |c: usize, region: &[Moments]| -> f64 {
        let [x, y] = sk.kids[c].expect("a cherry has two children");
        let m = merged(c, region);
        // the soma cannot move: its sites are served at its own level
        let after = if c == 0 { m.sse_at(a[0]) } else { m.m2 };
        after - region[x as usize].m2 - region[y as usize].m2 - sk.own[c].sse_at(a[c])
    };
    let mut heap = BinaryHeap::new();
    for c in 0..n {
        if let Some([x, y]) = sk.kids[c]
            && leaf[x as usize]
            && leaf[y as usize]
        {
            heap.push(Key(cost(c, &region), c as u32));
        }
    }
    let rms = |t: f64| {
        if w_total > 0.0 {
            (t.max(0.0) / w_total).sqrt()
        } else {
            0.0
        }
    };
    let mut curve = vec![CurvePoint {
        compartments: alive,
        rms_ln_attenuation_error: rms(total),
    }];
    let mut order = Vec::with_capacity(alive / 2);
    let mut merged_at = Vec::with_capacity(alive / 2);
    let mut step_of = vec![NONE; n];
    while let Some(Key(k, c)) = heap.pop() {
        let c = c as usize;
        step_of[c] = order.len() as u32;
        order.push(c as u32);
        total += k;
        region[c] = merged(c, &region);
        merged_at.push(region[c]);
        leaf[c] = true;
        alive -= 2;
        curve.push(CurvePoint {
            compartments: alive,
            rms_ln_attenuation_error: rms(total),
        });
        let p = sk.rparent[c];
        if p != NONE
            && let Some([x, y]) = sk.kids[p as usize]
            && leaf[x as usize]
            && leaf[y as usize]
        {
            heap.push(Key(cost(p as usize, &region), p));
        }
    }
    curve.reverse();
    sk.order = order;
    sk.merged = merged_at;
    sk.step_of = step_of;
    sk.curve = curve;
}
