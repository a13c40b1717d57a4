//! The invented neurons of the sample cells: a pyramidal-like and a stellate cell, grown
//! from the soma by [`grow`] with one habit per kind of neurite (the [`habits`] table).

use super::{
    Cell, Rng, Section, add, cross, fork_radii, normalize, random_perp, rotate2, scale, turn,
    wiggle,
};
use crate::swc::SwcPoint;

/// How a dendrite or axon grows in [`grow`].
#[derive(Debug, Clone, Copy)]
struct Habit {
    kind: i32,
    /// Segment length range (µm).
    step: (f64, f64),
    /// Unbranched section length range (µm).
    section: (f64, f64),
    /// Sections of this order (stems are 0) end without forking.
    max_order: u32,
    /// Chance that a section below `max_order` ends in a fork (else in a tip).
    p_fork: f64,
    /// Sections of order below this always fork (so that no dendrite is a bare stub).
    sure_fork_below: u32,
    /// Chance that a fork has three daughters.
    p_three: f64,
    /// Fractional radius loss per µm along a section.
    taper: f64,
    min_r: f64,
    /// Direction wander per segment.
    wander: f64,
    /// Cosine range of the angle between a daughter and its parent's direction.
    fork_cos: (f64, f64),
    /// A preferred direction and its pull per segment (0 = none).
    pull: [f64; 3],
    pull_w: f64,
}

/// The growth habits of the invented cells, one row each (a table of data: the numbers are
/// invented, chosen so that the cells look plausible).
#[rustfmt::skip]
mod habits {
    use super::Habit;
    const NONE: [f64; 3] = [0.0; 3];
    const UP: [f64; 3] = [0.0, 1.0, 0.0];
    const DOWN: [f64; 3] = [0.0, -1.0, 0.0];
    pub const BASAL: Habit = Habit { kind: 3, step: (2.0, 5.0), section: (15.0, 60.0), max_order: 4, p_fork: 0.7, sure_fork_below: 1, p_three: 0.04, taper: 0.004, min_r: 0.25, wander: 0.25, fork_cos: (0.6, 0.9), pull: NONE, pull_w: 0.0 };
    pub const OBLIQUE: Habit = Habit { kind: 4, step: (2.0, 5.0), section: (20.0, 70.0), max_order: 2, p_fork: 0.6, sure_fork_below: 0, p_three: 0.0, taper: 0.004, min_r: 0.25, wander: 0.2, fork_cos: (0.6, 0.85), pull: UP, pull_w: 0.03 };
    pub const TUFT: Habit = Habit { kind: 4, step: (2.0, 5.0), section: (25.0, 70.0), max_order: 3, p_fork: 0.8, sure_fork_below: 0, p_three: 0.05, taper: 0.004, min_r: 0.25, wander: 0.25, fork_cos: (0.55, 0.85), pull: UP, pull_w: 0.05 };
    pub const PYRAMIDAL_AXON: Habit = Habit { kind: 2, step: (3.0, 6.0), section: (40.0, 120.0), max_order: 1, p_fork: 1.0, sure_fork_below: 0, p_three: 0.0, taper: 0.001, min_r: 0.2, wander: 0.1, fork_cos: (0.2, 0.5), pull: DOWN, pull_w: 0.05 };
    pub const STELLATE_DENDRITE: Habit = Habit { kind: 3, step: (2.0, 5.0), section: (20.0, 70.0), max_order: 4, p_fork: 0.6, sure_fork_below: 2, p_three: 0.04, taper: 0.004, min_r: 0.25, wander: 0.3, fork_cos: (0.6, 0.9), pull: NONE, pull_w: 0.0 };
    pub const STELLATE_AXON: Habit = Habit { kind: 2, step: (3.0, 6.0), section: (60.0, 150.0), max_order: 1, p_fork: 0.5, sure_fork_below: 0, p_three: 0.0, taper: 0.001, min_r: 0.2, wander: 0.15, fork_cos: (0.3, 0.6), pull: NONE, pull_w: 0.0 };
}

/// Where a neurite starts: (parent point, its position, unit direction, first radius).
struct Sprout(i64, [f64; 3], [f64; 3], f64);

/// Grows a branching neurite from `from` with the habit `h`, adding at most `budget` points. Sections wait on a stack (depth
/// first, no recursion). Returns the number of points added.
fn grow(c: &mut Cell, rng: &mut Rng, from: Sprout, h: &Habit, budget: usize) -> usize {
    let before = c.pts.len();
    let Sprout(parent, start, dir, r) = from;
    let mut stack: Vec<Section> = vec![(parent, start, dir, r, 0)];
    while let Some((mut at, mut pos, mut d, mut r, order)) = stack.pop() {
        let len = rng.range(h.section.0, h.section.1);
        let mut done = 0.0;
        while done < len {
            if c.pts.len() - before >= budget {
                return c.pts.len() - before;
            }
            let step = rng.range(h.step.0, h.step.1);
            d = wiggle(rng, d, h.wander);
            if h.pull_w > 0.0 {
                d = normalize(add(d, scale(h.pull, h.pull_w)));
            }
            pos = add(pos, scale(d, step));
            r = (r * (1.0 - h.taper * step)).max(h.min_r);
            at = c.push(h.kind, pos, r, at);
            pos = c.pos(at);
            done += step;
        }
        if order < h.max_order && (order < h.sure_fork_below || rng.chance(h.p_fork)) {
            let k = if rng.chance(h.p_three) { 3 } else { 2 };
            let radii = fork_radii(rng, r, k, 0.1, h.min_r);
            let perp = random_perp(rng, d);
            let other = cross(d, perp);
            // daughters spread around the parent's axis: 180° apart for two, 120° for three
            let around: &[(f64, f64)] = if k == 2 {
                &[(1.0, 0.0), (-1.0, 0.0)]
            } else {
                &[
                    (1.0, 0.0),
                    (-0.5, 0.866_025_403_784_438_6),
                    (-0.5, -0.866_025_403_784_438_6),
                ]
            };
            for (i, &(ca, sa)) in around.iter().enumerate() {
                let side = add(scale(perp, ca), scale(other, sa));
                let nd = turn(d, normalize(side), rng.range(h.fork_cos.0, h.fork_cos.1));
                stack.push((at, pos, nd, radii[i], order + 1));
            }
        }
    }
    c.pts.len() - before
}

/// A stem out of the soma: its first point at `from`'s position (on the soma's surface, child
/// of the soma point `from.0`), then [`grow`] with `h` on a `1/share` part of the points left
/// under `cap`.
fn stem(c: &mut Cell, rng: &mut Rng, from: Sprout, h: &Habit, cap: usize, share: usize) {
    let Sprout(soma, start, dir, r) = from;
    let first = c.push(h.kind, start, r, soma);
    let budget = cap.saturating_sub(c.pts.len()) / share.max(1);
    grow(c, rng, Sprout(first, start, dir, r), h, budget);
}

/// An invented pyramidal-like cell (a few hundred to ~3000 points, 3-D, rounded to 1 nm): a
/// one-point soma (radius 8–10 µm) at the origin; an apical trunk (type 4) rising along +y for
/// 250–350 µm with oblique branches every 20–45 µm and a branching tuft at its end; 4–6 basal
/// dendrites (type 3) spreading sideways and down; a short axon (type 2) heading down with one
/// or two collaterals. Radii taper along branches and forks roughly follow the 3/2 power rule
/// with ±10 % noise.
pub fn pyramidal(seed: u64) -> Vec<SwcPoint> {
    let mut rng = Rng::new(seed);
    let mut c = Cell::new(3000, true);
    let soma_r = rng.range(8.0, 10.0);
    let soma = c.push(1, [0.0; 3], soma_r, -1);
    let cap: usize = 2800;
    // apical trunk with obliques
    let trunk_len = rng.range(250.0, 350.0);
    let mut r = rng.range(2.0, 2.6);
    let mut d = [0.0, 1.0, 0.0];
    let mut pos = [0.0, soma_r, 0.0];
    let mut at = c.push(4, pos, r, soma);
    let mut climbed = 0.0;
    let mut next_oblique = rng.range(20.0, 45.0);
    let oblique = habits::OBLIQUE;
    while climbed < trunk_len {
        let step = rng.range(3.0, 5.0);
        d = wiggle(&mut rng, d, 0.08);
        d = normalize(add(d, [0.0, 0.3, 0.0]));
        pos = add(pos, scale(d, step));
        r = (r * (1.0 - 0.0015 * step)).max(0.8);
        at = c.push(4, pos, r, at);
        pos = c.pos(at);
        climbed += step;
        if climbed >= next_oblique && climbed < trunk_len - 30.0 {
            next_oblique += rng.range(20.0, 45.0);
            let side = random_perp(&mut rng, d);
            let od = turn(d, side, rng.range(0.1, 0.45));
            let or = (r * rng.range(0.3, 0.45)).max(0.3);
            let budget = cap.saturating_sub(c.pts.len()) / 4;
            grow(&mut c, &mut rng, Sprout(at, pos, od, or), &oblique, budget);
        }
    }
    // tuft
    let tuft = habits::TUFT;
    let n_tuft = 2 + rng.below(2) as usize;
    let radii = fork_radii(&mut rng, r, n_tuft, 0.1, 0.3);
    let axis = random_perp(&mut rng, d);
    for (i, &tr) in radii.iter().enumerate() {
        let side = if i % 2 == 0 { axis } else { scale(axis, -1.0) };
        let side = normalize(add(side, scale(rng.unit_vector(), 0.5)));
        let td = turn(d, normalize(side), rng.range(0.55, 0.8));
        let budget = cap.saturating_sub(c.pts.len()) / 2;
        grow(&mut c, &mut rng, Sprout(at, pos, td, tr), &tuft, budget);
    }
    // basal dendrites
    let n_basal = 4 + rng.below(3) as usize;
    let basal = habits::BASAL;
    for i in 0..n_basal {
        // around the soma's equator, tilted downwards
        let u = rng.unit_vector();
        let mut bd = normalize([u[0], -0.4 - 0.4 * rng.unit(), u[2]]);
        if i % 2 == 1 {
            bd = normalize([-bd[0], bd[1], -bd[2]]);
        }
        let br = rng.range(0.8, 1.3);
        let from = Sprout(soma, scale(bd, soma_r), bd, br);
        stem(&mut c, &mut rng, from, &basal, cap, n_basal - i);
    }
    // axon
    let axon = habits::PYRAMIDAL_AXON;
    let start = [0.0, -soma_r, 0.0];
    let first = c.push(2, start, 0.6, soma);
    let from = Sprout(first, start, [0.0, -1.0, 0.0], 0.5);
    grow(&mut c, &mut rng, from, &axon, 400);
    c.pts
}

/// An invented stellate cell (a few hundred to ~3000 points, 3-D, rounded to 1 nm): a
/// three-point soma (radius 6–8 µm; two points at ±r along y, the usual three-point form),
/// 5–8 dendrites (type 3) radiating in all directions from the soma centre, each forking up to
/// four times with radii roughly following the 3/2 power rule, and a thin axon (type 2).
pub fn stellate(seed: u64) -> Vec<SwcPoint> {
    let mut rng = Rng::new(seed);
    let mut c = Cell::new(2500, true);
    let soma_r = rng.range(6.0, 8.0);
    let soma = c.push(1, [0.0; 3], soma_r, -1);
    c.push(1, [0.0, -soma_r, 0.0], soma_r, soma);
    c.push(1, [0.0, soma_r, 0.0], soma_r, soma);
    let cap: usize = 2400;
    let n_dend = 5 + rng.below(4) as usize;
    let habit = habits::STELLATE_DENDRITE;
    // directions spread over the sphere (a golden-angle spiral, jittered)
    for i in 0..n_dend {
        let y = 1.0 - 2.0 * (i as f64 + 0.5) / n_dend as f64;
        let ring = (1.0 - y * y).max(0.0).sqrt();
        // golden angle steps on the circle, from a 2-D rotation applied i times (no cos/sin)
        let (gc, gs) = (-0.737_368_878_078_319_5, 0.675_490_294_261_523_9);
        let mut p = [1.0, 0.0];
        for _ in 0..i {
            p = rotate2(p, gc, gs);
        }
        let dd = wiggle(&mut rng, normalize([ring * p[0], y, ring * p[1]]), 0.3);
        let dr = rng.range(0.9, 1.5);
        let from = Sprout(soma, scale(dd, soma_r), dd, dr);
        stem(&mut c, &mut rng, from, &habit, cap, n_dend - i);
    }
    let axon = habits::STELLATE_AXON;
    let ad = rng.unit_vector();
    let start = scale(ad, soma_r);
    let first = c.push(2, start, 0.5, soma);
    grow(&mut c, &mut rng, Sprout(first, start, ad, 0.45), &axon, 300);
    c.pts
}
