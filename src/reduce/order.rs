//! Stages 3–4 of the reduction: the maximal tree's skeleton and the greedy order of steps.
//!
//! The *maximal tree* keeps the soma, every node with two children (branch points, junctions)
//! and every tip of the binarised fine network; each other node lies on one *section*, the path
//! from a kept node up to the next. A *region* is what one leaf compartment stands for: at the
//! maximal tree a tip's section; after collapses, the union of a cherry's section and its two
//! leaves' regions. Each step removes two compartments and keeps the tree strict binary:
//! - a **cherry collapse**: a compartment whose two children are leaves becomes a leaf (their
//!   regions merge). A leaf may sit at any node of its region (the rest folds onto the path by
//!   Kron reduction, exactly), so its sites are costed about their own centre;
//! - a **splice**: a compartment with one leaf child and one internal child leaves the tree with
//!   that leaf; the internal child hangs from its parent by the Kron-reduced path (exact), and the
//!   moved sites are served by whichever end of that link is closer. Without splices, a large
//!   distal group (a tuft) could keep its own fork only as long as every fork on its path to the
//!   soma stayed, each with a leaf of its own.
//!
//! The cost of a step is the increase of Σ_sites w·‖f_site − f_served‖² over two coordinates:
//! the DC log attenuation to the soma (Np) and a timing coordinate ([`timing_coordinate`]) that
//! tracks the log of each site's soma-EPSP time to peak, so groups of sites that answer at the
//! soma at very different times are kept apart. Sites of an internal section are costed at the
//! section's lower end; sites moved by a splice stay costed at the end chosen then. Costs come
//! from per-node sums (weight, means, centred second moments) and change only for the nodes a
//! step touches, so a heap with lazy invalidation gives the whole order in O(N log N).
//! The error curve tracks the DC part only (a prediction: the tree built at each budget serves
//! each point by the closer end of its link).
//!
//! What this stage does not do: place leaves or build conductances (that is `build`, per budget).

use super::CurvePoint;
use super::fine::Fine;
use crate::cable::C64;
use crate::morphology::NONE;
use std::cmp::Ordering;
use std::collections::BinaryHeap;

/// Weighted sites of a region, centred: total weight, weighted means of ln A and of the timing
/// coordinate, and the weighted sums of squared deviations from them (Chan, Golub & LeVeque
/// 1979 pairwise update).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(super) struct Moments {
    pub w: f64,
    pub mean: f64,
    pub m2: f64,
    /// The same for the timing coordinate (already scaled by its weight).
    pub mt: f64,
    pub m2t: f64,
}

impl Moments {
    pub fn add(&mut self, w: f64, x: f64, t: f64) {
        self.merge(&Moments {
            w,
            mean: x,
            m2: 0.0,
            mt: t,
            m2t: 0.0,
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
        let dt = o.mt - self.mt;
        self.m2t += o.m2t + dt * dt * self.w * o.w / w;
        self.mt += dt * o.w / w;
        self.w = w;
    }

    /// Squared error when every site is served at ln A = `at`.
    pub fn sse_at(&self, at: f64) -> f64 {
        self.m2 + self.w * (self.mean - at).powi(2)
    }

    /// Squared error in both coordinates when every site is served at (ln A, t) = (`at`, `tt`).
    pub fn sse2_at(&self, at: f64, tt: f64) -> f64 {
        self.sse_at(at) + self.m2t + self.w * (self.mt - tt).powi(2)
    }

    /// Squared error in both coordinates with the centre free.
    pub fn sse2(&self) -> f64 {
        self.m2 + self.m2t
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
    /// The retained nodes, ascending (parents first); a section's number is its place here.
    pub rnodes: Vec<u32>,
    /// Each site's section number (budget-independent: a budget then finds a site's leaf
    /// through its section in one small table).
    pub site_section: Vec<u32>,

    /// The greedy order's steps.
    pub order: Vec<Step>,
    /// The region of a cherry step's node once it has collapsed (its section, its leaves'
    /// regions and the sites attached to them); unused for splices.
    pub merged: Vec<Moments>,
    /// For every node: its cherry step in `order`, or NONE if it never collapses.
    pub step_of: Vec<u32>,
    /// Predicted error for every odd budget, ascending.
    pub curve: Vec<CurvePoint>,
}

/// Weight of the timing coordinate against the DC log attenuation in the collapse cost.
/// Measured on the eight shared real cells at 15/31/63 compartments with the default (timed)
/// capacitances, targets met of 24 (DC median / DC p95 / EPSP peak p95 / time-to-peak p95):
/// 2: 21/20/16/13; 4: 21/21/16/16; 6: 21/20/17/16; 8: 21/20/18/16; 12 and 16: as 8. With
/// today's whole timed rule (split sites on their links, second polish and split; session 7):
/// 4 and 5 (kept): 120 of 120; 8: 119 (interneuron_ca1_pv 31's DC p95 0.47 against 0.46).
const TIME_WEIGHT: f64 = 5.0;

/// Reference time added to each delay before its logarithm (ms): the order of a site's own
/// time to peak for a brief synaptic current; 0.5 or 2 ms change the result by at most one
/// target row of 24 (measured).
const TIME_REF_MS: f64 = 1.0;

/// Per fine node, the timing coordinate of the collapse cost: TIME_WEIGHT·ln(t_ref + Δφ/ω), where
/// Δφ is the phase lag of the node's transfer impedance to the soma behind the soma's own input
/// impedance at the timing frequency (ln Z from `lz`, per kept-cell node), so Δφ/ω is the
/// extra delay of a synaptic potential from there (phase delay). Its log tracks the log of the
/// soma EPSP's time to peak with correlation 0.95–0.997 on the shared real cells (measured),
/// where the DC log attenuation alone gives 0.41–0.97. All zero when `lz` is missing.
pub(super) fn timing_coordinate(fine: &Fine, lz: Option<&[C64]>, hz: f64) -> Vec<f64> {
    let Some(lz) = lz.filter(|v| !v.is_empty()) else {
        return vec![0.0; fine.len()];
    };
    let w_per_ms = 2.0 * std::f64::consts::PI * hz * 1e-3;
    let lag0 = lz[0].im;
    fine.flat_node
        .iter()
        .map(|&k| {
            let delay_ms = (lag0 - lz[k as usize].im).max(0.0) / w_per_ms;
            let t = TIME_WEIGHT * (TIME_REF_MS + delay_ms).ln();
            if t.is_finite() { t } else { 0.0 }
        })
        .collect()
}

/// f64 with a total order, for the heap.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Key(f64, u32, u32);
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
pub(super) fn skeleton(fine: &Fine, sites: &[(u32, f64)], lt: &[f64]) -> Skeleton {
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
        own[section_of[x as usize] as usize].add(w, fine.ln_att[x as usize], lt[x as usize]);
    }
    let rnodes: Vec<u32> = (0..n as u32).filter(|&k| retained[k as usize]).collect();
    let mut number = vec![NONE; n];
    for (i, &k) in rnodes.iter().enumerate() {
        number[k as usize] = i as u32;
    }
    let site_section = sites
        .iter()
        .map(|&(x, _)| number[section_of[x as usize] as usize])
        .collect();
    Skeleton {
        retained,
        rnodes,
        site_section,
        rparent,
        kids,
        section_of,
        own,
        ..Skeleton::default()
    }
}

/// One step of the greedy order: a cherry collapse (`splice` false: `node`'s two leaf children
/// `kids` fold into it, it becomes a leaf) or a splice (`node` and its leaf child `kids[0]` leave
/// the tree; its other child `kids[1]` hangs from `node`'s parent `up`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) struct Step {
    pub node: u32,
    pub kids: [u32; 2],
    pub splice: bool,
    pub up: u32,
}

/// State of the greedy order while it runs (indexed by fine node, retained nodes only).
struct Greedy<'a> {
    sk: &'a Skeleton,
    a: &'a [f64],
    lt: &'a [f64],
    alive: Vec<bool>,
    leaf: Vec<bool>,
    parent: Vec<u32>,
    kids: Vec<Option<[u32; 2]>>,
    region: Vec<Moments>,
    /// Sites attached to a node by a splice: from below it (it was the upper end) and from
    /// above it (it was the lower end), served at its level.
    below: Vec<Moments>,
    above: Vec<Moments>,
    version: Vec<u32>,
}

/// A candidate's cost: (2-D cost, DC-only cost).
type Cost = (f64, f64);

impl Greedy<'_> {
    fn at(&self, m: &Moments, k: usize, both: bool) -> f64 {
        if both {
            m.sse2_at(self.a[k], self.lt[k])
        } else {
            m.sse_at(self.a[k])
        }
    }
    fn free(m: &Moments, both: bool) -> f64 {
        if both { m.sse2() } else { m.m2 }
    }
    /// What cherry c's collapse merges into one region.
    fn cherry_region(&self, c: usize) -> Moments {
        let [x, y] = self.kids[c].expect("cherry");
        let mut m = self.sk.own[c];
        m.merge(&self.below[c]);
        for z in [x as usize, y as usize] {
            m.merge(&self.region[z]);
            m.merge(&self.above[z]);
        }
        m
    }
    fn cherry_cost(&self, c: usize, both: bool) -> f64 {
        let [x, y] = self.kids[c].expect("cherry");
        let m = self.cherry_region(c);
        // the soma cannot move: its sites are served at its own level
        let after = if c == 0 {
            self.at(&m, 0, both)
        } else {
            Self::free(&m, both)
        };
        let mut before = self.at(&self.sk.own[c], c, both) + self.at(&self.below[c], c, both);
        for z in [x as usize, y as usize] {
            before += Self::free(&self.region[z], both) + self.at(&self.above[z], z, both);
        }
        after - before
    }
    /// For a splice of c (children: leaf l, internal d): the moved sites, their cost before,
    /// and the end (c's parent or d) that serves them best in both coordinates.
    fn splice_parts(&self, c: usize, l: usize, d: usize) -> (Moments, usize) {
        let mut m = self.sk.own[c];
        m.merge(&self.below[c]);
        m.merge(&self.above[c]);
        m.merge(&self.region[l]);
        m.merge(&self.above[l]);
        let p = self.parent[c] as usize;
        let e = if self.at(&m, p, true) <= self.at(&m, d, true) {
            p
        } else {
            d
        };
        (m, e)
    }
    fn splice_cost(&self, c: usize, l: usize, d: usize, both: bool) -> f64 {
        let (m, e) = self.splice_parts(c, l, d);
        let before = self.at(&self.sk.own[c], c, both)
            + self.at(&self.below[c], c, both)
            + self.at(&self.above[c], c, both)
            + Self::free(&self.region[l], both)
            + self.at(&self.above[l], l, both);
        self.at(&m, e, both) - before
    }
    /// The move available at c, if any: (leaf child for a splice or NONE, costs).
    fn candidate(&self, c: usize) -> Option<(u32, Cost)> {
        if !self.alive[c] || self.leaf[c] {
            return None;
        }
        let [x, y] = self.kids[c]?;
        let (lx, ly) = (self.leaf[x as usize], self.leaf[y as usize]);
        if lx && ly {
            return Some((
                NONE,
                (self.cherry_cost(c, true), self.cherry_cost(c, false)),
            ));
        }
        if c == 0 || (!lx && !ly) {
            return None;
        }
        let (l, d) = if lx { (x, y) } else { (y, x) };
        let (l, d) = (l as usize, d as usize);
        Some((
            l as u32,
            (
                self.splice_cost(c, l, d, true),
                self.splice_cost(c, l, d, false),
            ),
        ))
    }
    /// Cherry c becomes a leaf; its parent's move changes.
    fn collapse(&mut self, heap: &mut BinaryHeap<Key>, c: usize) {
        self.region[c] = self.cherry_region(c);
        self.below[c] = Moments::default();
        let [x, y] = self.kids[c].expect("cherry");
        self.alive[x as usize] = false;
        self.alive[y as usize] = false;
        self.kids[c] = None;
        self.leaf[c] = true;
        self.version[c] += 1;
        if self.parent[c] != NONE {
            self.push(heap, self.parent[c] as usize);
        }
    }

    /// c and its leaf child l leave; c's other child d hangs from c's parent p, the moved sites
    /// attach to the end chosen; the moves of p and d change.
    fn splice(&mut self, heap: &mut BinaryHeap<Key>, c: usize, l: usize) {
        let [x, y] = self.kids[c].expect("splice");
        let d = if x as usize == l { y } else { x } as usize;
        let (m, e) = self.splice_parts(c, l, d);
        if e == d {
            self.above[d].merge(&m);
        } else {
            self.below[e].merge(&m);
        }
        self.alive[c] = false;
        self.alive[l] = false;
        self.version[c] += 1;
        let p = self.parent[c] as usize;
        self.parent[d] = p as u32;
        if let Some(k) = self.kids[p].as_mut() {
            k.iter_mut()
                .filter(|z| **z == c as u32)
                .for_each(|z| *z = d as u32);
        }
        self.push(heap, p);
        self.push(heap, d);
    }

    fn push(&mut self, heap: &mut BinaryHeap<Key>, c: usize) {
        self.version[c] += 1;
        if let Some((_, (cost, _))) = self.candidate(c) {
            heap.push(Key(cost, c as u32, self.version[c]));
        }
    }
}

/// The greedy order of steps (see the module documentation) and the predicted error curve:
/// weighted RMS over the sites of the change in DC log attenuation to the soma (Np).
pub(super) fn collapse_order(fine: &Fine, sk: &mut Skeleton, lt: &[f64]) {
    let n = fine.len();
    let a = &fine.ln_att;
    let mut g = Greedy {
        sk,
        a,
        lt,
        alive: sk.retained.clone(),
        leaf: sk.kids.iter().map(|k| k.is_none()).collect(),
        parent: sk.rparent.clone(),
        kids: sk.kids.clone(),
        region: sk.own.clone(),
        below: vec![Moments::default(); n],
        above: vec![Moments::default(); n],
        version: vec![0; n],
    };
    let mut total = 0.0;
    let mut w_total = 0.0;
    let mut alive = 0usize;
    for k in 0..n {
        if !sk.retained[k] {
            continue;
        }
        alive += 1;
        w_total += sk.own[k].w;
        total += if g.leaf[k] {
            Greedy::free(&sk.own[k], false)
        } else {
            g.at(&sk.own[k], k, false)
        };
    }
    let mut heap = BinaryHeap::new();
    for c in 0..n {
        if sk.retained[c] {
            g.push(&mut heap, c);
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
    let mut merged = Vec::with_capacity(alive / 2);
    let mut step_of = vec![NONE; n];
    while let Some(Key(_, c, v)) = heap.pop() {
        let c = c as usize;
        if v != g.version[c] {
            continue;
        }
        let Some((l, (_, dc))) = g.candidate(c) else {
            continue;
        };
        total += dc;
        let [x, y] = g.kids[c].expect("a step's node has two children");
        let step = Step {
            node: c as u32,
            kids: if l == y { [y, x] } else { [x, y] },
            splice: l != NONE,
            up: g.parent[c],
        };
        if l == NONE {
            step_of[c] = order.len() as u32;
            g.collapse(&mut heap, c);
            merged.push(g.region[c]);
        } else {
            merged.push(Moments::default());
            g.splice(&mut heap, c, l as usize);
        }
        order.push(step);
        alive -= 2;
        curve.push(CurvePoint {
            compartments: alive,
            rms_ln_attenuation_error: rms(total),
        });
    }
    curve.reverse();
    sk.order = order;
    sk.merged = merged;
    sk.step_of = step_of;
    sk.curve = curve;
}
