//! Per-point metrics (path distance, branch order, Strahler order), the geometry warnings,
//! the summary [`Metrics`] and the Sholl profile: loops over the parents-first order.

use super::{IMPLAUSIBLE_EXTENT_UM, Metrics, Morphology, NONE, TypeMetrics, dist, kind_name};
use crate::swc::Warning;

/// Strahler order of every node of a parents-first tree (Strahler 1957): a tip is 1; a node
/// whose highest child order occurs at least twice is one more than it, else equal to it.
/// `merged(i)`: node i is part of its parent (a soma drawn as a chain of points), so its
/// children count as its parent's. Children before parents, one loop.
pub fn strahler(parent: &[u32], merged: impl Fn(usize) -> bool) -> Vec<u32> {
    let n = parent.len();
    let mut n_children = vec![0u32; n];
    for &p in parent {
        if p != NONE {
            n_children[p as usize] += 1;
        }
    }
    let mut strahler = vec![0u32; n];
    let mut best = vec![0u32; n];
    let mut count_best = vec![0u32; n];
    for i in (0..n).rev() {
        let s = if n_children[i] == 0 {
            1
        } else if count_best[i] >= 2 {
            best[i] + 1
        } else {
            best[i]
        };
        strahler[i] = s;
        if parent[i] == NONE {
            continue;
        }
        let p = parent[i] as usize;
        // a merged node hands its children's best order and count to its parent
        let (s, c) = if merged(i) {
            (best[i], count_best[i])
        } else {
            (s, 1)
        };
        if s > best[p] {
            best[p] = s;
            count_best[p] = c;
        } else if s == best[p] {
            count_best[p] += c;
        }
    }
    strahler
}

impl Morphology {
    pub(super) fn compute_point_metrics(&mut self) {
        let n = self.len();
        let mut n_children = vec![0u32; n];
        for i in 0..n {
            if self.parent[i] != NONE {
                n_children[self.parent[i] as usize] += 1;
            }
        }
        let mut path = vec![0.0; n];
        let mut order = vec![0u32; n];
        for i in 0..n {
            let p = self.parent[i];
            if p == NONE || self.is_soma[i] {
                continue;
            }
            let p = p as usize;
            path[i] = path[p] + dist(&self.points[i].pos, &self.points[p].pos);
            order[i] = if self.is_soma[p] || self.parent[p] == NONE {
                1
            } else if n_children[p] >= 2 {
                order[p] + 1
            } else {
                order[p]
            };
        }
        let is_soma = &self.is_soma;
        let parent = &self.parent;
        let strahler = strahler(parent, |i| {
            parent[i] != NONE && is_soma[i] && is_soma[parent[i] as usize]
        });
        self.n_children = n_children;
        self.path_distance = path;
        self.branch_order = order;
        self.strahler = strahler;
    }

    pub(super) fn geometry_warnings(&mut self) {
        let mut zero_r = (0usize, None);
        let mut zero_neurite = 0usize;
        let mut zero_len = (0usize, None);
        for i in 0..self.len() {
            if self.points[i].radius == Some(0.0) {
                zero_r.0 += 1;
                zero_r.1.get_or_insert(self.points[i].line);
                if !self.is_soma[i] {
                    zero_neurite += 1;
                }
            }
            if let Some(seg) = self.segment(i)
                && seg.length == 0.0
            {
                zero_len.0 += 1;
                zero_len.1.get_or_insert(self.points[i].line);
            }
        }
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        for p in &self.points {
            for c in 0..3 {
                lo[c] = lo[c].min(p.pos[c]);
                hi[c] = hi[c].max(p.pos[c]);
            }
        }
        let extent = (0..3).map(|c| hi[c] - lo[c]).fold(0.0, f64::max);
        if extent > IMPLAUSIBLE_EXTENT_UM {
            self.warnings.push(Warning::new(
                "implausible-size",
                None,
                format!(
                    "the cell is {:.1} mm across: coordinates may be in nanometres or voxels rather than µm",
                    extent / 1000.0
                ),
            ));
        }
        // every neurite point (not only every point but the soma's) has radius 0
        if zero_neurite > 0 && zero_neurite + self.soma.len() >= self.len() {
            self.warnings.push(Warning::new(
                "all-radii-zero",
                zero_r.1,
                "every neurite radius is 0: the file holds the skeleton only, so cable work needs a default diameter",
            ));
        } else if zero_r.0 > 0 {
            self.warnings.push(Warning::new(
                "zero-radius",
                zero_r.1,
                format!("{} point(s) have radius 0", zero_r.0),
            ));
        }
        if zero_len.0 > 0 {
            self.warnings.push(Warning::new(
                "zero-length",
                zero_len.1,
                format!(
                    "{} segment(s) have zero length (a point at its parent's place)",
                    zero_len.0
                ),
            ));
        }
    }

    /// Summary metrics of the whole file (all trees).
    pub fn metrics(&self) -> Metrics {
        let n = self.len();
        let mut total_len = 0.0;
        let mut area = 0.0;
        let mut vol = 0.0;
        let mut by: std::collections::BTreeMap<i32, TypeMetrics> = Default::default();
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        let mut stems = 0;
        let mut branch_points = 0;
        let mut tips = 0;
        for i in 0..n {
            let p = &self.points[i];
            for c in 0..3 {
                lo[c] = lo[c].min(p.pos[c]);
                hi[c] = hi[c].max(p.pos[c]);
            }
            if self.is_soma[i] {
                continue;
            }
            let e = by.entry(p.kind).or_insert_with(|| TypeMetrics {
                type_code: p.kind,
                name: kind_name(p.kind),
                points: 0,
                length_um: 0.0,
                membrane_area_um2: 0.0,
                tips: 0,
            });
            e.points += 1;
            if let Some(seg) = self.segment(i) {
                let a = seg.lateral_area();
                total_len += seg.length;
                e.length_um += seg.length;
                if a.is_finite() {
                    area += a;
                    vol += seg.volume();
                    e.membrane_area_um2 += a;
                }
                if self.is_soma[self.parent[i] as usize] {
                    stems += 1;
                }
            }
            if self.n_children[i] >= 2 && !(self.soma.is_empty() && i == 0) {
                branch_points += 1;
            }
            if self.n_children[i] == 0 {
                tips += 1;
                e.tips += 1;
            }
        }
        if self.soma.is_empty() && n > 0 {
            // without a soma the root's children are the stems
            stems = (1..self.main_len).filter(|&i| self.parent[i] == 0).count();
        }
        let (soma_area, soma_vol) = self.soma_area_volume();
        Metrics {
            points: n,
            trees: self.trees.len(),
            stems,
            branch_points,
            tips,
            total_length_um: total_len,
            membrane_area_um2: area + soma_area,
            volume_um3: vol + soma_vol,
            soma_points: self.soma.len(),
            soma_area_um2: soma_area,
            max_path_distance_um: self.path_distance.iter().cloned().fold(0.0, f64::max),
            max_branch_order: self.branch_order.iter().cloned().max().unwrap_or(0),
            max_strahler_order: self.strahler.first().cloned().unwrap_or(0),
            extent_um: [0, 1, 2].map(|c| (hi[c] - lo[c]).max(0.0)),
            by_type: by.into_values().collect(),
        }
    }

    /// Sholl analysis: number of neurite segments crossing each sphere of radius `step`, 2·`step`,
    /// … around the soma centre. Returns (radius µm, intersections).
    pub fn sholl(&self, step: f64) -> Vec<(f64, usize)> {
        if step.is_nan() || step <= 0.0 || self.is_empty() {
            return Vec::new();
        }
        let c = self.soma_centre();
        let mut rmax: f64 = 0.0;
        for p in &self.points {
            rmax = rmax.max(dist(&p.pos, &c));
        }
        let n_shells = ((rmax / step).floor() as usize).min(1_000_000);
        let mut diff = vec![0i64; n_shells + 2];
        for i in 0..self.len() {
            let p = self.parent[i];
            if p == NONE || self.is_soma[i] {
                continue;
            }
            let a = dist(&self.points[i].pos, &c);
            let b = dist(&self.points[p as usize].pos, &c);
            let (lo, hi) = if a < b { (a, b) } else { (b, a) };
            // shells k·step with lo < k·step <= hi are crossed (radial distance is monotone
            // enough along a short segment; this is the usual counting)
            let k0 = (lo / step).floor() as usize + 1;
            let k1 = ((hi / step).floor() as usize).min(n_shells);
            if k0 <= k1 {
                diff[k0] += 1;
                diff[k1 + 1] -= 1;
            }
        }
        let mut out = Vec::with_capacity(n_shells);
        let mut run = 0i64;
        for (k, d) in diff.iter().enumerate().take(n_shells + 1).skip(1) {
            run += d;
            out.push((k as f64 * step, run.max(0) as usize));
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::super::Morphology;

    #[test]
    fn sholl_counts_match_a_hand_count() {
        // Sholl 1953 (J. Anat.; citation from memory): the number of neurite crossings of
        // spheres of radius 10, 20, 30 µm around the soma, counted by hand on this drawing:
        // three straight stems of length 25 (x), 15 (y) and 5 (−z) µm, and a stem of 12 µm
        // (−y) that forks into two branches ending √(10² + 30²) ≈ 31.6 µm out.
        // r = 10: stems x, y, −y → 3; r = 20: stem x and both branches → 3; r = 30: branches → 2.
        let text = "1 1 0 0 0 1 -1\n2 3 25 0 0 1 1\n3 3 0 15 0 1 1\n4 3 0 0 -5 1 1\n\
                    5 3 0 -12 0 1 1\n6 3 10 -30 0 1 5\n7 3 -10 -30 0 1 5\n";
        let m = Morphology::parse(text, "sholl.swc").unwrap();
        assert_eq!(m.sholl(10.0), vec![(10.0, 3), (20.0, 3), (30.0, 2)]);
        // a coarser step sees only the first sphere
        assert_eq!(m.sholl(25.0), vec![(25.0, 3)]);
    }

    #[test]
    fn strahler_orders_match_a_hand_count() {
        // Strahler 1952 (Geol. Soc. Am. Bull.; citation from memory): tips are order 1; where
        // two branches of the highest order k meet the order is k + 1, otherwise the highest.
        // Counted by hand: stem 2 forks into 3 and 4; 3 forks into tips 5, 6 (→ 3 is 2); 4 forks
        // into tips 7, 8 (→ 4 is 2); so 2 is 3. Stem 9 is a tip (1); stem 10 forks into tip 11
        // and 12, which forks into tips 13, 14 (12 is 2, so 10 is max(1, 2) = 2). The soma
        // gathers 3, 1 and 2: its order is 3 (one branch of order 3 only).
        let text = "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 20 5 0 1 2\n4 3 20 -5 0 1 2\n\
                    5 3 30 8 0 1 3\n6 3 30 2 0 1 3\n7 3 30 -2 0 1 4\n8 3 30 -8 0 1 4\n\
                    9 3 -10 0 0 1 1\n10 3 0 10 0 1 1\n11 3 -5 20 0 1 10\n12 3 5 20 0 1 10\n\
                    13 3 0 30 0 1 12\n14 3 10 30 0 1 12\n";
        let m = Morphology::parse(text, "strahler.swc").unwrap();
        let order_of = |id: i64| {
            let i = m.points.iter().position(|p| p.id == id).unwrap();
            m.strahler[i]
        };
        let expected = [
            (1, 3),
            (2, 3),
            (3, 2),
            (4, 2),
            (5, 1),
            (6, 1),
            (7, 1),
            (8, 1),
            (9, 1),
            (10, 2),
            (11, 1),
            (12, 2),
            (13, 1),
            (14, 1),
        ];
        for (id, s) in expected {
            assert_eq!(order_of(id), s, "point {id}");
        }
        assert_eq!(m.metrics().max_strahler_order, 3);
        // two stems of order 3 meeting at the soma would make it 4: add a copy of stem 2's tree
        let more = format!(
            "{text}15 3 -10 -10 0 1 1\n16 3 -20 -5 0 1 15\n17 3 -20 -15 0 1 15\n\
             18 3 -30 -2 0 1 16\n19 3 -30 -8 0 1 16\n20 3 -30 -12 0 1 17\n21 3 -30 -18 0 1 17\n"
        );
        let m = Morphology::parse(&more, "strahler2.swc").unwrap();
        assert_eq!(m.metrics().max_strahler_order, 4);
    }
}
