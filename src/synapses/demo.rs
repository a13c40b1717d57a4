//! The invented synapse table of the demo cell (sample_cells/practice_pyramidal.synapses.csv).
//!
//! Scenario (fiction, see sample_cells/README.md): on day three of the Larkspur course the
//! students get a made-up "annotation" of the inputs of practice cell P-11: which invented axon
//! ("afferent") makes each synapse. Nothing here comes from any recording or reconstruction.
//!
//! Each afferent draws how many synapses it makes from four classes (common practice for a
//! heavy-tailed count, no source): 45 % one, 30 % two to four, 18 % five to fifteen, 7 % sixteen
//! to forty-eight. A few afferents (one in fifteen) are perisomatic and put all their synapses on
//! the soma. The others pick a home point on the dendrites (types 3 and 4); three quarters of
//! their synapses land within 25 points of it in file order (the same or a neighbouring branch),
//! the rest anywhere on the dendrites. A synapse sits on the membrane (the point's radius along a
//! random direction) plus up to 0.2 µm of jitter; weights are uniform in 0.5–2.0. Randomness is
//! [`crate::synth::Rng`] and the geometry uses only + − × ÷ and sqrt, so the bytes never change.

use crate::swc::SwcPoint;
use crate::synth::Rng;
use std::fmt::Write as _;

/// Seed and number of afferents of the demo table.
pub const DEMO_SEED: u64 = 311;
pub const DEMO_AFFERENTS: usize = 160;

fn round3(v: f64) -> f64 {
    (v * 1000.0).round() / 1000.0
}

fn synapse_count(rng: &mut Rng) -> usize {
    let u = rng.unit();
    let (lo, hi) = if u < 0.45 {
        (1, 1)
    } else if u < 0.75 {
        (2, 4)
    } else if u < 0.93 {
        (5, 15)
    } else {
        (16, 48)
    };
    lo + rng.below((hi - lo + 1) as u64) as usize
}

/// The demo table for `points` (a cell from [`crate::synth`], soma first) with `afferents`
/// inputs: CSV with a header `synapse,input,x,y,z,weight`, positions in µm to 0.001.
pub fn demo_table(points: &[SwcPoint], afferents: usize, seed: u64, header: &[&str]) -> String {
    let mut rng = Rng::new(seed);
    let dend: Vec<usize> = (0..points.len())
        .filter(|&i| matches!(points[i].kind, 3 | 4))
        .collect();
    let mut out = String::new();
    for h in header {
        let _ = writeln!(out, "# {h}");
    }
    out.push_str("synapse,input,x,y,z,weight\n");
    if dend.is_empty() || points.is_empty() {
        return out;
    }
    let mut id = 0usize;
    for a in 0..afferents {
        let n = synapse_count(&mut rng);
        let perisomatic = rng.below(15) == 0;
        let home = rng.below(dend.len() as u64) as usize;
        for _ in 0..n {
            let p = if perisomatic {
                &points[0]
            } else if rng.chance(0.75) {
                let j = home as i64 + rng.below(51) as i64 - 25;
                &points[dend[j.clamp(0, dend.len() as i64 - 1) as usize]]
            } else {
                &points[dend[rng.below(dend.len() as u64) as usize]]
            };
            let r = p.radius.unwrap_or(0.0);
            let dir = rng.unit_vector();
            let jit = rng.unit_vector();
            let j = rng.range(0.0, 0.2);
            let xyz = [0, 1, 2].map(|k| round3(p.pos[k] + dir[k] * r + jit[k] * j));
            let w = (rng.range(0.5, 2.0) * 100.0).round() / 100.0;
            id += 1;
            let _ = writeln!(
                out,
                "s{id:05},afferent-{:03},{:.3},{:.3},{:.3},{w:.2}",
                a + 1,
                xyz[0],
                xyz[1],
                xyz[2]
            );
        }
    }
    out
}
