//! The morphology model: a petgraph tree of SWC points, re-ordered parents-first and rooted at the
//! soma, with per-point metrics and the flat arrays that the numerics use.
//!
//! Geometry convention (fixed; cable and reduction depend on it):
//! - all soma points (type 1) connected to one another form one isopotential soma;
//! - a non-soma point whose neighbour towards the soma is a soma point forms a cylinder of its
//!   own radius from that soma point;
//! - every other segment is a frustum from parent to child, lateral area π(r1 + r2)·slant;
//! - links between soma points are not neurite length; they give the soma's area as the sum of
//!   their frustum lateral areas, or, when that is zero (one point, or points at one place), a
//!   sphere 4πr² of the largest soma radius. The three-point soma (two points at ±r from the
//!   centre, same radius) comes out as 4πr², as in the standard three-point convention.
//!
//! Nothing here recurses over the tree: every pass is a loop over the parents-first order.

mod build;
mod flat;
mod metrics;

pub use flat::Flat;
pub use metrics::strahler;

use crate::swc::{Fault, SwcError, SwcFile, SwcPoint, Warning};
use petgraph::graph::{DiGraph, NodeIndex};
use std::f64::consts::PI;

/// A cell wider than this (µm) is taken as having coordinates in other units (nm, voxels).
pub const IMPLAUSIBLE_EXTENT_UM: f64 = 20_000.0;

/// Marks "no parent" / "not in the main tree" in index arrays.
pub const NONE: u32 = u32::MAX;

/// SWC type codes with a fixed meaning.
pub mod kind {
    pub const SOMA: i32 = 1;
    pub const AXON: i32 = 2;
    pub const BASAL: i32 = 3;
    pub const APICAL: i32 = 4;
}

/// A plain-words name for an SWC type code.
pub fn kind_name(k: i32) -> &'static str {
    match k {
        0 => "undefined",
        1 => "soma",
        2 => "axon",
        3 => "basal dendrite",
        4 => "apical dendrite",
        5 => "fork point",
        6 => "end point",
        _ => "custom",
    }
}

/// The SWC type code for a name, as [`kind_name`] and the app show them (case-insensitive;
/// `basal` and `apical` also without "dendrite", `-` or `_` for the space; `dendrite` is 3), or
/// for a code written as a number. `None` for anything else.
pub fn kind_code(name: &str) -> Option<i32> {
    let n = name.trim().to_ascii_lowercase().replace(['-', '_'], " ");
    if let Ok(code) = n.parse::<i32>() {
        return Some(code);
    }
    let code = match n.as_str() {
        "undefined" => 0,
        "soma" => 1,
        "axon" => 2,
        "basal" | "basal dendrite" | "dendrite" => 3,
        "apical" | "apical dendrite" => 4,
        "fork point" => 5,
        "end point" => 6,
        _ => return None,
    };
    Some(code)
}

/// One connected tree of the file.
#[derive(Debug, Clone, serde::Serialize)]
pub struct TreeInfo {
    /// Index (into `Morphology::points`) of the tree's first point in the parents-first order.
    pub root: u32,
    pub points: usize,
}

/// A reconstructed cell: its points in parents-first order, its tree structure and metrics.
#[derive(Debug, Clone)]
pub struct Morphology {
    pub source: String,
    /// Points in parents-first order: the main tree first (soma points leading), then any
    /// other trees. `points[i].parent` is rewritten to the parent's id in this orientation.
    pub points: Vec<SwcPoint>,
    /// Parent index of each point, `NONE` for a root; always `parent[i] < i`.
    pub parent: Vec<u32>,
    /// The tree structure as a petgraph graph (edges parent → child; node weight = point index).
    pub graph: DiGraph<u32, ()>,
    /// Connected trees; `trees[main_tree]` holds the soma (or is the largest when there is none).
    pub trees: Vec<TreeInfo>,
    pub main_tree: usize,
    /// Number of points in the main tree: they are `points[..main_len]`.
    pub main_len: usize,
    /// Point indices of the soma (the connected soma points of the main tree); empty if none.
    pub soma: Vec<u32>,
    /// Per point: is it part of the soma?
    pub is_soma: Vec<bool>,
    /// Per point: path distance to the soma (µm) along neurite segments (0 on the soma).
    pub path_distance: Vec<f64>,
    /// Per point: number of branch points between it and the soma (stems are order 1).
    pub branch_order: Vec<u32>,
    /// Per point: Strahler order (tips are 1).
    pub strahler: Vec<u32>,
    /// Per point: number of children.
    pub n_children: Vec<u32>,
    pub warnings: Vec<Warning>,
}

/// Summary metrics, the content of `pollard inspect`.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Metrics {
    pub points: usize,
    pub trees: usize,
    pub stems: usize,
    pub branch_points: usize,
    pub tips: usize,
    pub total_length_um: f64,
    pub membrane_area_um2: f64,
    pub volume_um3: f64,
    pub soma_points: usize,
    pub soma_area_um2: f64,
    pub max_path_distance_um: f64,
    pub max_branch_order: u32,
    pub max_strahler_order: u32,
    pub extent_um: [f64; 3],
    pub by_type: Vec<TypeMetrics>,
}

/// Length, area and counts of one neurite type.
#[derive(Debug, Clone, serde::Serialize)]
pub struct TypeMetrics {
    pub type_code: i32,
    pub name: &'static str,
    pub points: usize,
    pub length_um: f64,
    pub membrane_area_um2: f64,
    pub tips: usize,
}

/// The geometry of the segment that ends at a non-soma point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Segment {
    /// Axial length h (µm).
    pub length: f64,
    /// Radius at the parent end and at the child end (equal for a cylinder).
    pub r_prox: f64,
    pub r_dist: f64,
}

impl Segment {
    /// Lateral area π(r1 + r2)·√(h² + (r2 − r1)²) (µm²); for a cylinder 2πrh.
    pub fn lateral_area(&self) -> f64 {
        PI * (self.r_prox + self.r_dist) * self.length.hypot(self.r_dist - self.r_prox)
    }
    /// Volume of the frustum πh(r1² + r1r2 + r2²)/3 (µm³).
    pub fn volume(&self) -> f64 {
        PI * self.length
            * (self.r_prox * self.r_prox + self.r_prox * self.r_dist + self.r_dist * self.r_dist)
            / 3.0
    }
}

/// Euclidean distance; coordinates near the top of the f64 range (1e300) are scaled first so
/// that squaring does not overflow to infinity.
fn dist(a: &[f64; 3], b: &[f64; 3]) -> f64 {
    let d = [a[0] - b[0], a[1] - b[1], a[2] - b[2]];
    let s = d[0] * d[0] + d[1] * d[1] + d[2] * d[2];
    if s.is_finite() {
        return s.sqrt();
    }
    let m = d[0].abs().max(d[1].abs()).max(d[2].abs());
    if !m.is_finite() {
        return f64::INFINITY;
    }
    let q = d.map(|x| x / m);
    m * (q[0] * q[0] + q[1] * q[1] + q[2] * q[2]).sqrt()
}

impl Morphology {
    /// Builds the tree from parsed SWC points, one named stage after another (see
    /// [`build`]): id index, parent links, cycle check, adjacency, trees, root choice, soma
    /// set, parents-first order, permutation; then per-point metrics and geometry warnings.
    pub fn from_swc(file: SwcFile) -> Result<Morphology, SwcError> {
        let SwcFile {
            source,
            points: raw,
            warnings: mut warns,
            ..
        } = file;
        let n = raw.len();
        let at_line = |(line, fault): build::LineFault| SwcError {
            file: source.clone(),
            line: Some(line),
            fault,
        };
        if n >= NONE as usize {
            return Err(SwcError {
                file: source.clone(),
                line: None,
                fault: Fault::OutOfRange {
                    name: "point count",
                    text: n.to_string(),
                    rule: "at most 4 294 967 294 points",
                },
            });
        }
        let ids = build::IdIndex::build(&raw).map_err(at_line)?;
        let file_parent = build::parent_links(&raw, &ids).map_err(at_line)?;
        drop(ids);
        if let Some(i) = build::find_cycle(&file_parent) {
            return Err(at_line((raw[i].line, Fault::Cycle(raw[i].id))));
        }
        let adj = build::Adjacency::new(&file_parent);
        // soma flags in file order (a compact array: the searches below jump around)
        let soma_kind: Vec<bool> = raw.iter().map(|p| p.kind == kind::SOMA).collect();
        let trees = build::Trees::find(&adj, &soma_kind);
        let (file_root, root) = build::choose_root(&raw, &file_parent, &trees, &mut warns);
        let (in_soma, soma_file) = build::soma_set(&adj, &soma_kind, root);
        build::shape_warnings(&raw, &trees, &in_soma, (file_root, root), &mut warns);
        let order = build::parents_first(&adj, &file_parent, &in_soma, &soma_file, root);
        drop(adj);
        let (points, parent, is_soma) = build::permute(raw, &order, &in_soma);
        let mut graph: DiGraph<u32, ()> = DiGraph::with_capacity(n, n);
        for i in 0..n {
            graph.add_node(i as u32);
        }
        for (i, &p) in parent.iter().enumerate() {
            if p != NONE {
                graph.add_edge(NodeIndex::new(p as usize), NodeIndex::new(i), ());
            }
        }
        let main_len = order.main_len;
        let soma: Vec<u32> = (0..main_len as u32)
            .filter(|&i| is_soma[i as usize])
            .collect();
        let mut m = Morphology {
            source,
            points,
            parent,
            graph,
            trees: order.trees,
            main_tree: 0,
            main_len,
            soma,
            is_soma,
            path_distance: Vec::new(),
            branch_order: Vec::new(),
            strahler: Vec::new(),
            n_children: Vec::new(),
            warnings: warns,
        };
        m.compute_point_metrics();
        m.geometry_warnings();
        Ok(m)
    }

    /// Reads, checks and builds a morphology from a file.
    pub fn read(path: &std::path::Path) -> Result<Morphology, SwcError> {
        Morphology::from_swc(crate::swc::read_path(path)?)
    }

    /// Parses and builds a morphology from SWC text.
    pub fn parse(text: &str, source: &str) -> Result<Morphology, SwcError> {
        Morphology::from_swc(crate::swc::parse_str(text, source)?)
    }

    pub fn len(&self) -> usize {
        self.points.len()
    }

    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    /// Is point `i` the parent-less start of a tree?
    pub fn is_root(&self, i: usize) -> bool {
        self.parent[i] == NONE
    }

    /// The segment ending at non-soma point `i` (None for soma points and roots).
    /// Radii that are unknown (NA) come out as NaN.
    pub fn segment(&self, i: usize) -> Option<Segment> {
        let p = self.parent[i];
        if p == NONE || self.is_soma[i] {
            return None;
        }
        let p = p as usize;
        let r = self.points[i].radius.unwrap_or(f64::NAN);
        let length = dist(&self.points[i].pos, &self.points[p].pos);
        let r_prox = if self.is_soma[p] {
            r
        } else {
            self.points[p].radius.unwrap_or(f64::NAN)
        };
        Some(Segment {
            length,
            r_prox,
            r_dist: r,
        })
    }

    /// Soma membrane area (µm²): lateral areas of the frusta between connected soma points, or a
    /// sphere of the largest soma radius when that sum is zero. 0 without a soma.
    pub fn soma_area(&self) -> f64 {
        let (area, _) = self.soma_area_volume();
        area
    }

    fn soma_area_volume(&self) -> (f64, f64) {
        if self.soma.is_empty() {
            return (0.0, 0.0);
        }
        if let Some(r) = self.three_point_soma_radius() {
            return (4.0 * PI * r * r, 4.0 / 3.0 * PI * r * r * r);
        }
        let mut area = 0.0;
        let mut vol = 0.0;
        for &s in &self.soma[1..] {
            let s = s as usize;
            let p = self.parent[s] as usize;
            let seg = Segment {
                length: dist(&self.points[s].pos, &self.points[p].pos),
                r_prox: self.points[p].radius.unwrap_or(0.0),
                r_dist: self.points[s].radius.unwrap_or(0.0),
            };
            area += seg.lateral_area();
            vol += seg.volume();
        }
        if area > 0.0 && area.is_finite() {
            (area, vol)
        } else {
            let r = self
                .soma
                .iter()
                .filter_map(|&s| self.points[s as usize].radius)
                .fold(0.0, f64::max);
            (4.0 * PI * r * r, 4.0 / 3.0 * PI * r * r * r)
        }
    }

    /// The radius r of a three-point soma: a centre point and two soma points joined to it, all
    /// of one radius, on opposite sides at a distance of about r (within 5 %). Such a soma stands
    /// for a sphere of area 4πr² (the standard three-point soma convention).
    pub fn three_point_soma_radius(&self) -> Option<f64> {
        if self.soma.len() != 3 {
            return None;
        }
        let c = self.soma[0] as usize;
        let (a, b) = (self.soma[1] as usize, self.soma[2] as usize);
        if self.parent[a] as usize != c || self.parent[b] as usize != c {
            return None;
        }
        let r = self.points[c].radius?;
        let same = |x: usize| {
            self.points[x]
                .radius
                .is_some_and(|rx| (rx - r).abs() <= 1e-6 * r)
        };
        let pc = self.points[c].pos;
        let (da, db) = (
            dist(&self.points[a].pos, &pc),
            dist(&self.points[b].pos, &pc),
        );
        let mid = [0, 1, 2].map(|k| (self.points[a].pos[k] + self.points[b].pos[k]) / 2.0);
        let near = |d: f64| (d - r).abs() <= 0.05 * r;
        (r > 0.0 && same(a) && same(b) && near(da) && near(db) && dist(&mid, &pc) <= 0.05 * r)
            .then_some(r)
    }

    /// Soma centre: mean position of the soma points (the root when there is no soma).
    pub fn soma_centre(&self) -> [f64; 3] {
        if self.soma.is_empty() {
            return self.points[0].pos;
        }
        let mut c = [0.0; 3];
        for &s in &self.soma {
            for (a, b) in c.iter_mut().zip(self.points[s as usize].pos) {
                *a += b;
            }
        }
        c.map(|v| v / self.soma.len() as f64)
    }

    /// SWC text of this morphology (main tree first, parents before children).
    pub fn to_swc_string(&self, header: &[String]) -> String {
        crate::swc::write_string(&self.points, header)
    }

    /// Flat arrays of the main tree for the numerics (see [`Flat`]).
    pub fn flatten(&self) -> Flat {
        Flat::new(self)
    }
}

/// The main tree as flat arrays, one node per electrical point: node 0 is the soma (all soma
/// points; or the root when there is no soma), every other main-tree point is a node of its own,
/// in parents-first order (`parent[k] < k`). Node k > 0 carries the segment from its parent to
#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn type_names_give_the_standard_codes() {
        // SWC type codes of the format's published description (Cannon et al. 1998, J Neurosci
        // Methods 84:49): 1 soma, 2 axon, 3 (basal) dendrite, 4 apical dendrite.
        for (name, code) in [
            ("soma", 1),
            ("Axon", 2),
            ("basal", 3),
            ("basal dendrite", 3),
            ("dendrite", 3),
            ("apical_dendrite", 4),
            ("apical", 4),
            ("undefined", 0),
            ("fork-point", 5),
            ("end point", 6),
            ("7", 7),
            (" 12 ", 12),
        ] {
            assert_eq!(kind_code(name), Some(code), "{name}");
        }
        for bad in ["", "dendrites", "custom", "1.5", "apicals"] {
            assert_eq!(kind_code(bad), None, "{bad}");
        }
        // every name the app shows reads back to its code
        for k in 0..=6 {
            assert_eq!(kind_code(kind_name(k)), Some(k));
        }
    }

    #[test]
    fn huge_coordinates_give_finite_lengths() {
        let m = Morphology::parse("1 1 0 0 0 1 -1\n2 3 1e300 1e300 0 1 1\n", "t.swc").unwrap();
        let len = m.metrics().total_length_um;
        assert!((len - 2f64.sqrt() * 1e300).abs() < 1e-12 * len, "{len}");
    }

    #[test]
    fn three_point_soma_area_is_4_pi_r2() {
        // The standard three-point soma convention: two points at ±r along y, same radius r,
        // stands for a sphere of area 4πr².
        let text = "1 1 0 0 0 5 -1\n2 1 0 -5 0 5 1\n3 1 0 5 0 5 1\n4 3 0 20 0 1 3\n";
        let m = Morphology::parse(text, "t.swc").unwrap();
        let a = m.soma_area();
        assert!((a - 4.0 * PI * 25.0).abs() < 1e-9 * a, "{a}");
        assert_eq!(m.soma.len(), 3);
    }

    #[test]
    fn cylinder_and_frustum_areas() {
        // cylinder from the soma: area 2πrl (r = 1, l = 10); then a frustum r 1 → 0.5 over 10:
        // π(r1 + r2)·√(h² + (r1 − r2)²)
        let text = "1 1 0 0 0 3 -1\n2 3 10 0 0 1 1\n3 3 20 0 0 0.5 2\n";
        let m = Morphology::parse(text, "t.swc").unwrap();
        let met = m.metrics();
        let cyl = 2.0 * PI * 1.0 * 10.0;
        let fr = PI * 1.5 * (100.0f64 + 0.25).sqrt();
        let soma = 4.0 * PI * 9.0;
        assert!((met.membrane_area_um2 - (cyl + fr + soma)).abs() < 1e-9);
        assert_eq!(met.tips, 1);
        assert_eq!(met.stems, 1);
        assert!((met.total_length_um - 20.0).abs() < 1e-12);
    }

    #[test]
    fn re_roots_at_the_soma_and_orders_parents_first() {
        let text = "5 3 0 10 0 1 -1\n1 1 0 0 0 4 5\n7 3 0 -10 0 1 1\n";
        let m = Morphology::parse(text, "t.swc").unwrap();
        assert_eq!(m.points[0].id, 1);
        assert!(m.warnings.iter().any(|w| w.code == "re-rooted"));
        for i in 1..m.len() {
            assert!((m.parent[i] as usize) < i);
        }
        assert_eq!(m.metrics().tips, 2);
    }

    #[test]
    fn deep_chain_builds_without_recursion() {
        let mut s = String::from("1 1 0 0 0 5 -1\n");
        for i in 2..=200_000 {
            s.push_str(&format!("{i} 3 {i} 0 0 1 {}\n", i - 1));
        }
        let m = Morphology::parse(&s, "chain.swc").unwrap();
        assert_eq!(m.metrics().tips, 1);
        assert_eq!(m.flatten().len(), 200_000);
    }

    #[test]
    fn cycle_and_missing_parent_name_their_line() {
        let e = Morphology::parse("1 3 0 0 0 1 2\n2 3 0 0 0 1 1\n", "t.swc").unwrap_err();
        assert!(matches!(e.fault, Fault::Cycle(_)));
        assert!(e.line.is_some());
        let e = Morphology::parse("1 1 0 0 0 1 -1\n2 3 0 0 0 1 9\n", "t.swc").unwrap_err();
        assert_eq!(e.line, Some(2));
        let e = Morphology::parse("1 1 0 0 0 1 -1\n1 3 0 0 0 1 -1\n", "t.swc").unwrap_err();
        assert_eq!(e.line, Some(2));
    }
}
