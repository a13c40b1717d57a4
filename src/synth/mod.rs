//! Invented cells, made by deterministic generators (see sample_cells/README.md).
//!
//! Every generator returns plain [`SwcPoint`]s: ids `1..=n` in order, every parent listed before
//! its children, `line` = index + 1, the soma first. Nothing recurses: branches waiting to be
//! drawn sit on an explicit stack or queue.
//!
//! Randomness comes from [`Rng`], a small hand-written splitmix64 generator, and not from a
//! crate: the sample cells in `sample_cells/` must stay byte-identical across crate upgrades
//! (a random-number crate may change its streams between versions). For the same reason the
//! geometry uses only `+ − × ÷` and `sqrt`, which IEEE 754 rounds exactly, and no `sin`, `cos`,
//! `exp` or `powf` (whose last bit may differ between platforms' maths libraries): the same seed
//! gives the same bytes everywhere.
//!
//! Geometry convention (see [`crate::morphology`]): a point joined to the soma forms a cylinder of
//! its own radius from the soma point; every other segment is a frustum from the parent's radius
//! to the child's. So in the symmetric trees below the first segment of each daughter branch
//! tapers from the parent's radius to the daughter's; all its other segments are cylinders.

use crate::swc::SwcPoint;
use std::collections::VecDeque;

mod neurons;
pub use neurons::{pyramidal, stellate};

/// 2^(−2/3), the daughter/parent diameter ratio of a symmetric bifurcation that obeys the 3/2
/// power rule, d_p^{3/2} = 2·d_c^{3/2} (Rall 1959). Written as a literal (the double nearest to
/// 0.62996052494743658238…) so that it does not depend on a platform's `powf`.
pub const RALL_RATIO: f64 = 0.6299605249474366;

/// splitmix64 (Steele, Lea & Flood 2014): a tiny, well-mixed 64-bit generator, written out here
/// so that its stream never changes (see the module doc).
#[derive(Debug, Clone)]
pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Rng {
        Rng(seed)
    }

    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1) with 53 random bits.
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform in [lo, hi).
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }

    /// Uniform integer in 0..n (0 when n is 0).
    pub fn below(&mut self, n: u64) -> u64 {
        ((self.next_u64() as u128 * n as u128) >> 64) as u64
    }

    /// True with probability p.
    pub fn chance(&mut self, p: f64) -> bool {
        self.unit() < p
    }

    /// A uniformly random unit vector (rejection from the cube; only sqrt is used).
    pub fn unit_vector(&mut self) -> [f64; 3] {
        loop {
            let v = [
                self.range(-1.0, 1.0),
                self.range(-1.0, 1.0),
                self.range(-1.0, 1.0),
            ];
            let n2 = dot(v, v);
            if n2 > 1e-6 && n2 <= 1.0 {
                return scale(v, 1.0 / n2.sqrt());
            }
        }
    }
}

fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

fn scale(a: [f64; 3], s: f64) -> [f64; 3] {
    [a[0] * s, a[1] * s, a[2] * s]
}

fn add(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2]]
}

fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

fn normalize(a: [f64; 3]) -> [f64; 3] {
    let n = dot(a, a).sqrt();
    if n > 0.0 {
        scale(a, 1.0 / n)
    } else {
        [1.0, 0.0, 0.0]
    }
}

/// A unit vector perpendicular to unit `d`, in a random direction.
fn random_perp(rng: &mut Rng, d: [f64; 3]) -> [f64; 3] {
    loop {
        let c = cross(d, rng.unit_vector());
        let n2 = dot(c, c);
        if n2 > 1e-6 {
            return scale(c, 1.0 / n2.sqrt());
        }
    }
}

/// `d` turned by the angle whose cosine is `cos_a` towards the unit vector `perp` (⊥ d).
fn turn(d: [f64; 3], perp: [f64; 3], cos_a: f64) -> [f64; 3] {
    let s = (1.0 - cos_a * cos_a).max(0.0).sqrt();
    normalize(add(scale(d, cos_a), scale(perp, s)))
}

/// `d` nudged by a random vector of length up to `amount` (a wandering direction).
fn wiggle(rng: &mut Rng, d: [f64; 3], amount: f64) -> [f64; 3] {
    normalize(add(d, scale(rng.unit_vector(), amount * rng.unit())))
}

/// Rounds to 1 nm (3 decimals in µm), so that written files stay short.
fn round3(x: f64) -> f64 {
    (x * 1000.0).round() / 1000.0
}

/// Points under construction.
struct Cell {
    pts: Vec<SwcPoint>,
    round: bool,
}

impl Cell {
    fn new(capacity: usize, round: bool) -> Cell {
        Cell {
            pts: Vec::with_capacity(capacity),
            round,
        }
    }

    /// Appends a point and returns its id.
    fn push(&mut self, kind: i32, pos: [f64; 3], radius: f64, parent: i64) -> i64 {
        let (pos, radius) = if self.round {
            (pos.map(round3), round3(radius))
        } else {
            (pos, radius)
        };
        SwcPoint::append(&mut self.pts, kind, pos, radius, parent)
    }

    fn pos(&self, id: i64) -> [f64; 3] {
        self.pts[id as usize - 1].pos
    }

    /// A straight cable of `segs` segments from `start` (the position of point `parent`) along
    /// unit `dir` for `len` µm, radius `r` at every point. Returns the last point's id.
    #[allow(clippy::too_many_arguments)]
    fn cable(
        &mut self,
        kind: i32,
        parent: i64,
        start: [f64; 3],
        dir: [f64; 3],
        len: f64,
        r: f64,
        segs: usize,
    ) -> i64 {
        let mut last = parent;
        for k in 1..=segs {
            let t = len * (k as f64 / segs as f64);
            last = self.push(kind, add(start, scale(dir, t)), r, last);
        }
        last
    }
}

/// A soma point of radius 0 at the origin and a straight unbranched cable of `n_segments`
/// segments (type 3, basal dendrite) along +x, from x = 0 to x = `length_um`, diameter
/// `diam_um` throughout. Under our convention the soma then has zero area and the first segment
/// is a cylinder from the soma point, so the whole cable is one uniform cylinder of length
/// `length_um` sealed at its far end: the closed-form sealed-end cable (Rall 1959). At least one
/// segment is drawn.
pub fn cylinder(length_um: f64, diam_um: f64, n_segments: usize) -> Vec<SwcPoint> {
    let segs = n_segments.max(1);
    let mut c = Cell::new(segs + 1, false);
    let soma = c.push(1, [0.0; 3], 0.0, -1);
    c.cable(
        3,
        soma,
        [0.0; 3],
        [1.0, 0.0, 0.0],
        length_um,
        diam_um / 2.0,
        segs,
    );
    c.pts
}

/// A zero-area soma and one straight parent cable along +x (`parent_len` µm, diameter
/// `parent_d`) that splits into two equal daughters (`child_len`, `child_d`) at ±45° in the
/// x–y plane; each of the three branches is drawn in `segs` segments (at least 1). Type 3.
pub fn y_junction(
    parent_len: f64,
    parent_d: f64,
    child_len: f64,
    child_d: f64,
    segs: usize,
) -> Vec<SwcPoint> {
    let segs = segs.max(1);
    let mut c = Cell::new(3 * segs + 1, false);
    let soma = c.push(1, [0.0; 3], 0.0, -1);
    let fork = c.cable(
        3,
        soma,
        [0.0; 3],
        [1.0, 0.0, 0.0],
        parent_len,
        parent_d / 2.0,
        segs,
    );
    let at = c.pos(fork);
    let h = 0.5f64.sqrt();
    for dir in [[h, h, 0.0], [h, -h, 0.0]] {
        c.cable(3, fork, at, dir, child_len, child_d / 2.0, segs);
    }
    c.pts
}

/// A branch waiting to be drawn in the planar trees: (parent point, start position, direction,
/// level, diameter, length).
type Pending = (i64, [f64; 3], [f64; 2], usize, f64, f64);

/// Half-angle cosines and sines of the layout: level 1 branches leave at ±45°, and each deeper
/// level at half the previous angle (so that drawings stay readable). Only sqrt is used.
fn layout_angles(levels: usize) -> Vec<(f64, f64)> {
    let mut out = Vec::with_capacity(levels);
    let mut c = 0.5f64.sqrt();
    for _ in 0..levels {
        let s = (1.0 - c * c).max(0.0).sqrt();
        out.push((c, s));
        c = ((1.0 + c) / 2.0).sqrt();
    }
    out
}

fn rotate2(d: [f64; 2], c: f64, s: f64) -> [f64; 2] {
    [d[0] * c - d[1] * s, d[0] * s + d[1] * c]
}

/// A zero-area soma and a symmetric binary tree in the x–y plane: level 0 is one trunk along
/// +x from the soma, every branch of level k < levels − 1 ends in a fork into two branches of
/// level k + 1. Branches of level k have diameter `diams[k]` and length `lengths[k]` (µm) and
/// are drawn in `segs` segments (at least 1); all points are type 3. Levels beyond the shorter
/// slice are dropped (empty slices or `levels` 0 give the soma alone). Branches are emitted
/// breadth first, so the file lists the tree level by level.
pub fn symmetric_tree(levels: usize, diams: &[f64], lengths: &[f64], segs: usize) -> Vec<SwcPoint> {
    let levels = levels.min(diams.len()).min(lengths.len());
    branching_tree(levels, segs, |level, _parent_d, _side| {
        (diams[level], lengths[level])
    })
}

/// Shared body of the planar trees: `size(level, parent_d, side)` gives the (diameter, length)
/// of a branch of `level` (≥ 1) whose parent has diameter `parent_d`; `side` is 0 for the
/// first daughter and 1 for the second. Level 0 is `size(0, NaN, 0)`.
fn branching_tree(
    levels: usize,
    segs: usize,
    size: impl Fn(usize, f64, usize) -> (f64, f64),
) -> Vec<SwcPoint> {
    let segs = segs.max(1);
    let n_branches = if levels == 0 {
        0
    } else {
        (1usize << levels.min(40)) - 1
    };
    let mut c = Cell::new(1 + n_branches.saturating_mul(segs).min(1 << 26), false);
    let soma = c.push(1, [0.0; 3], 0.0, -1);
    if levels == 0 {
        return c.pts;
    }
    let angles = layout_angles(levels);
    let (d0, l0) = size(0, f64::NAN, 0);
    let mut queue: VecDeque<Pending> = VecDeque::new();
    queue.push_back((soma, [0.0; 3], [1.0, 0.0], 0, d0, l0));
    while let Some((parent, start, dir, level, d, len)) = queue.pop_front() {
        let dir3 = [dir[0], dir[1], 0.0];
        let end = c.cable(3, parent, start, dir3, len, d / 2.0, segs);
        if level + 1 < levels {
            let (ca, sa) = angles[level];
            let end_pos = c.pos(end);
            for (side, sign) in [(0usize, 1.0), (1usize, -1.0)] {
                let (dc, lc) = size(level + 1, d, side);
                let nd = rotate2(dir, ca, sign * sa);
                queue.push_back((end, end_pos, nd, level + 1, dc, lc));
            }
        }
    }
    c.pts
}

/// Rall's equivalent-cylinder tree (Rall 1962): a zero-area soma, a trunk (level 0) of diameter
/// `d0_um` and length `l0_um`, and a symmetric binary tree with `levels` levels in all (the trunk
/// included; `levels` = 1 is the trunk alone, 2^(levels−1) tips). Daughter diameters follow the
/// 3/2 power rule exactly, d_child = d_parent·2^(−2/3), so Σ d_child^{3/2} = d_parent^{3/2} at
/// every fork; daughter lengths are l_child = l_parent·√(d_child/d_parent), so every branch has
/// the trunk's electrotonic length l/λ (λ ∝ √d; Rall 1959) and all tips lie at the same
/// electrotonic distance. Each branch is drawn in 10 segments; type 3.
pub fn rall_tree(levels: usize, d0_um: f64, l0_um: f64) -> Vec<SwcPoint> {
    let mut diams = Vec::with_capacity(levels);
    let mut lengths = Vec::with_capacity(levels);
    let (mut d, mut l) = (d0_um, l0_um);
    for _ in 0..levels {
        diams.push(d);
        lengths.push(l);
        let dc = d * RALL_RATIO;
        l *= (dc / d).sqrt();
        d = dc;
    }
    symmetric_tree(levels, &diams, &lengths, 10)
}

/// An asymmetric binary tree that still meets Rall's conditions: at every fork the parent's
/// d^{3/2} is shared in the fractions `split` and 1 − `split` between the two daughters
/// (d_1^{3/2} = split·d_p^{3/2}, d_2^{3/2} = (1 − split)·d_p^{3/2}, so the 3/2 power rule holds
/// exactly), and every branch's length is `l0_um`·√(d/`d0_um`), giving each branch the trunk's
/// electrotonic length (Rall 1962). Daughters differ in thickness and length, yet all tips are at
/// one electrotonic distance: a teaching case showing that symmetry is not what the equivalent
/// cylinder needs. `split` is clamped to [0.01, 0.99]; `levels` and `segs` as in
/// [`symmetric_tree`]. d_1 = d_p·split^{2/3}, with the power found by Newton's method on
/// x³ = split² (no `powf`, see the module doc).
pub fn asymmetric_tree(
    levels: usize,
    d0_um: f64,
    l0_um: f64,
    split: f64,
    segs: usize,
) -> Vec<SwcPoint> {
    let split = if split.is_finite() {
        split.clamp(0.01, 0.99)
    } else {
        0.5
    };
    let f = [two_thirds_power(split), two_thirds_power(1.0 - split)];
    branching_tree(levels, segs, |level, parent_d, side| {
        if level == 0 {
            (d0_um, l0_um)
        } else {
            let d = parent_d * f[side];
            (d, l0_um * (d / d0_um).sqrt())
        }
    })
}

/// s^{2/3} for s in (0, 1] by Newton's method on x³ = s² (deterministic: ÷ and × only).
fn two_thirds_power(s: f64) -> f64 {
    let target = s * s;
    let mut x = s.sqrt(); // between s and 1, a fine start
    for _ in 0..60 {
        let next = x - (x * x * x - target) / (3.0 * x * x);
        if next == x {
            break;
        }
        x = next;
    }
    x
}

/// A random cell for property tests and cross-checks: exactly `n_points` points (at least 1):
/// one soma point (radius 5–10 µm), 2–6 stems (fewer if the points run out), each of type 2, 3
/// or 4 (the first three stems are 3, 4 and 2), random branching with occasional trifurcations,
/// radii tapering within 0.2–3 µm, every segment 1–20 µm long. Positions are not rounded, so
/// the written file exercises full-precision numbers. Points are added one at a time at a
/// random growing tip, so branches interleave in the file (parents still come first).
pub fn random_tree(n_points: usize, seed: u64) -> Vec<SwcPoint> {
    let n = n_points.max(1);
    let mut rng = Rng::new(seed);
    let mut c = Cell::new(n, false);
    let centre = [
        rng.range(-100.0, 100.0),
        rng.range(-100.0, 100.0),
        rng.range(-100.0, 100.0),
    ];
    let soma = c.push(1, centre, rng.range(5.0, 10.0), -1);
    struct Tip {
        id: i64,
        dir: [f64; 3],
        r: f64,
        kind: i32,
    }
    let mut tips: Vec<Tip> = Vec::new();
    let stems = (2 + rng.below(5) as usize).min(n - 1);
    for s in 0..stems {
        let kind = match s {
            0 => 3,
            1 => 4,
            2 => 2,
            _ => 2 + rng.below(3) as i32,
        };
        let dir = rng.unit_vector();
        let r = rng.range(1.0, 3.0);
        let id = c.push(kind, add(centre, scale(dir, rng.range(1.0, 20.0))), r, soma);
        tips.push(Tip { id, dir, r, kind });
    }
    while c.pts.len() < n {
        let j = rng.below(tips.len() as u64) as usize;
        if tips.len() > 1 && rng.chance(0.04) {
            tips.swap_remove(j);
            continue;
        }
        let u = rng.unit();
        let room = n - c.pts.len();
        let children = if u < 0.03 {
            3
        } else if u < 0.15 {
            2
        } else {
            1
        }
        .min(room);
        let (parent, dir, r, kind) = (tips[j].id, tips[j].dir, tips[j].r, tips[j].kind);
        let from = c.pos(parent);
        for k in 0..children {
            let (nd, nr) = if children == 1 {
                (wiggle(&mut rng, dir, 0.4), r * rng.range(0.9, 1.0))
            } else {
                let perp = random_perp(&mut rng, dir);
                (
                    turn(dir, perp, rng.range(0.5, 0.95)),
                    r * rng.range(0.55, 0.85),
                )
            };
            let nr = nr.clamp(0.2, 3.0);
            let id = c.push(kind, add(from, scale(nd, rng.range(1.0, 20.0))), nr, parent);
            let tip = Tip {
                id,
                dir: nd,
                r: nr,
                kind,
            };
            if k == 0 {
                tips[j] = tip;
            } else {
                tips.push(tip);
            }
        }
    }
    c.pts
}

/// A one-point soma (radius 5 µm, at the origin) and an unbranched chain of `n_points` more
/// points (type 3, radius 0.5 µm, 1 µm apart along +x): `n_points` + 1 points in all, a tree
/// `n_points` deep. For checking that nothing recurses.
pub fn chain(n_points: usize) -> Vec<SwcPoint> {
    let mut c = Cell::new(n_points + 1, false);
    let mut last = c.push(1, [0.0; 3], 5.0, -1);
    for k in 1..=n_points {
        last = c.push(3, [k as f64, 0.0, 0.0], 0.5, last);
    }
    c.pts
}

/// Daughter radii at a fork of parent radius `r`: the parent's r^{3/2} is shared in random
/// proportions (3/2 power rule, Rall 1959), then each is jittered by up to ±`noise`.
fn fork_radii(rng: &mut Rng, r: f64, k: usize, noise: f64, min_r: f64) -> Vec<f64> {
    let w: Vec<f64> = (0..k).map(|_| rng.range(0.6, 1.4)).collect();
    let total: f64 = w.iter().sum();
    w.iter()
        .map(|wi| {
            let share = wi / total;
            (r * two_thirds_power(share) * (1.0 + rng.range(-noise, noise))).max(min_r)
        })
        .collect()
}

/// A section waiting to be drawn: (parent point, start, direction, radius, order or type).
type Section = (i64, [f64; 3], [f64; 3], f64, u32);

/// A large cell for benchmarks: exactly `n_points` points (at least 1), O(n) time and memory,
/// rounded to 1 nm so the file looks like a real reconstruction. A one-point soma, 4–8 stems
/// (one apical, one axon, the rest basal), sections of 8–40 segments of 1.5–4 µm grown breadth
/// first (so the tree is wide, not one deep path), forks with 3/2-rule radii and tapering down
/// to 0.15 µm. When every branch has ended before the points run out, a new branch starts from
/// a random existing point.
pub fn big_cell(n_points: usize, seed: u64) -> Vec<SwcPoint> {
    let n = n_points.max(1);
    let mut rng = Rng::new(seed);
    let mut c = Cell::new(n, true);
    let soma_r = rng.range(7.0, 11.0);
    let soma = c.push(1, [0.0; 3], soma_r, -1);
    // (parent, start, dir, radius, kind)
    let mut queue: VecDeque<Section> = VecDeque::new();
    let stems = 4 + rng.below(5) as usize;
    for s in 0..stems {
        let kind = match s {
            0 => 4,
            1 => 2,
            _ => 3,
        };
        let d = match s {
            0 => wiggle(&mut rng, [0.0, 1.0, 0.0], 0.2),
            1 => wiggle(&mut rng, [0.0, -1.0, 0.0], 0.2),
            _ => rng.unit_vector(),
        };
        let r = if s == 0 {
            rng.range(2.0, 3.0)
        } else {
            rng.range(0.6, 1.5)
        };
        queue.push_back((soma, scale(d, soma_r), d, r, kind as u32));
    }
    while c.pts.len() < n {
        let Some((parent, start, mut d, mut r, kind)) = queue.pop_front() else {
            // restart from a random non-soma point (or the soma when there is none)
            let j = if c.pts.len() > 1 {
                1 + rng.below(c.pts.len() as u64 - 1) as usize
            } else {
                0
            };
            let p = &c.pts[j];
            let kind = if p.kind == 1 { 3 } else { p.kind };
            let r = p.radius.unwrap_or(0.5).min(0.5);
            queue.push_back((p.id, p.pos, rng.unit_vector(), r, kind as u32));
            continue;
        };
        let kind = kind as i32;
        let segs = 8 + rng.below(33) as usize;
        let mut at = parent;
        let mut pos = start;
        if parent == soma {
            at = c.push(kind, start, r, soma);
        }
        for _ in 0..segs {
            if c.pts.len() >= n {
                break;
            }
            let step = rng.range(1.5, 4.0);
            d = wiggle(&mut rng, d, 0.15);
            pos = add(pos, scale(d, step));
            r = (r * (1.0 - 0.002 * step)).max(0.15);
            at = c.push(kind, pos, r, at);
            pos = c.pos(at);
        }
        let u = rng.unit();
        let k = if u < 0.03 {
            3
        } else if u < 0.62 {
            2
        } else {
            0
        };
        if k > 0 {
            let radii = fork_radii(&mut rng, r, k, 0.1, 0.15);
            for &cr in &radii {
                let perp = random_perp(&mut rng, d);
                let nd = turn(d, perp, rng.range(0.6, 0.9));
                queue.push_back((at, pos, nd, cr, kind as u32));
            }
        }
    }
    c.pts
}

/// SWC text of `points` with `header_lines` as comment lines (each written as `# line`).
pub fn to_swc(points: &[SwcPoint], header_lines: &[&str]) -> String {
    let header: Vec<String> = header_lines.iter().map(|h| format!(" {h}")).collect();
    crate::swc::write_string(points, &header)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn check_order(pts: &[SwcPoint]) {
        for (i, p) in pts.iter().enumerate() {
            assert_eq!(p.id, i as i64 + 1);
            assert_eq!(p.line, i + 1);
            assert!(p.parent < p.id, "point {} has parent {}", p.id, p.parent);
            assert!(p.parent >= 1 || (i == 0 && p.parent == -1));
        }
    }

    #[test]
    fn generators_list_parents_first() {
        check_order(&cylinder(100.0, 2.0, 7));
        check_order(&y_junction(100.0, 2.0, 50.0, 1.26, 4));
        check_order(&rall_tree(4, 4.0, 100.0));
        check_order(&asymmetric_tree(4, 4.0, 100.0, 0.3, 5));
        check_order(&random_tree(500, 1));
        check_order(&chain(100));
        check_order(&pyramidal(1));
        check_order(&stellate(1));
        check_order(&big_cell(20_000, 1));
    }

    #[test]
    fn counts() {
        assert_eq!(cylinder(1.0, 1.0, 7).len(), 8);
        assert_eq!(random_tree(1234, 9).len(), 1234);
        assert_eq!(random_tree(1, 9).len(), 1);
        assert_eq!(big_cell(12_345, 3).len(), 12_345);
        assert_eq!(chain(10).len(), 11);
        // 2^4 − 1 = 15 branches of 10 segments, plus the soma
        assert_eq!(rall_tree(4, 4.0, 100.0).len(), 151);
    }

    #[test]
    fn two_thirds_power_matches_cube_relation() {
        for s in [0.01, 0.3, 0.5, 0.77, 1.0] {
            let x = two_thirds_power(s);
            assert!((x * x * x - s * s).abs() < 1e-15, "{s}");
        }
        // the literal: (2^(−2/3))³ = 1/4
        assert!((RALL_RATIO.powi(3) - 0.25).abs() < 1e-16);
    }
}
