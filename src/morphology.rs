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

use crate::swc::{Fault, SwcError, SwcFile, SwcPoint, Warning};
use petgraph::graph::{DiGraph, NodeIndex};
use std::collections::HashMap;
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
    pub surface_area_um2: f64,
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
    pub surface_area_um2: f64,
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

/// Point ids → file index. Ids that fill a compact range 0..=max (the usual case: 1..n) use a
/// plain table, which is several times faster than hashing for a million points; others use a
/// hash map.
enum IdIndex {
    Dense(Vec<u32>),
    Sparse(HashMap<i64, u32>),
}

impl IdIndex {
    fn new(raw: &[SwcPoint]) -> IdIndex {
        let n = raw.len();
        let (lo, hi) = raw.iter().fold((i64::MAX, i64::MIN), |(lo, hi), p| {
            (lo.min(p.id), hi.max(p.id))
        });
        if lo >= 0 && (hi as u64) < 4 * n as u64 + 1024 {
            IdIndex::Dense(vec![NONE; hi as usize + 1])
        } else {
            IdIndex::Sparse(HashMap::with_capacity(n))
        }
    }

    /// Records `id` at `index`; returns the earlier index if the id was seen before.
    fn insert(&mut self, id: i64, index: u32) -> Option<u32> {
        match self {
            IdIndex::Dense(t) => {
                let slot = &mut t[id as usize];
                if *slot != NONE {
                    return Some(*slot);
                }
                *slot = index;
                None
            }
            IdIndex::Sparse(m) => match m.entry(id) {
                std::collections::hash_map::Entry::Occupied(e) => Some(*e.get()),
                std::collections::hash_map::Entry::Vacant(e) => {
                    e.insert(index);
                    None
                }
            },
        }
    }

    fn get(&self, id: i64) -> Option<u32> {
        match self {
            IdIndex::Dense(t) => usize::try_from(id)
                .ok()
                .and_then(|i| t.get(i))
                .copied()
                .filter(|&j| j != NONE),
            IdIndex::Sparse(m) => m.get(&id).copied(),
        }
    }
}

/// The first point (in file order) of a cycle of parent links, if there is one. Every point has
/// at most one parent, so walking up from each point either reaches a root, a point already
/// known to lead to a root, or comes back to the current walk: a cycle. Each point is walked
/// once: O(n), no recursion.
fn find_cycle(parent: &[u32]) -> Option<usize> {
    const NEW: u8 = 0;
    const WALKING: u8 = 1;
    const DONE: u8 = 2;
    let mut state = vec![NEW; parent.len()];
    let mut path: Vec<usize> = Vec::new();
    for s in 0..parent.len() {
        let mut j = s;
        while state[j] == NEW {
            state[j] = WALKING;
            path.push(j);
            match parent[j] {
                NONE => break,
                p => j = p as usize,
            }
        }
        if state[j] == WALKING && parent[j] != NONE {
            // j is on the cycle; go round it once for its first point in file order
            let mut first = j;
            let mut k = parent[j] as usize;
            while k != j {
                first = first.min(k);
                k = parent[k] as usize;
            }
            return Some(first);
        }
        for &k in &path {
            state[k] = DONE;
        }
        path.clear();
    }
    None
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
    /// Builds the tree from parsed SWC points: checks ids, parents and cycles, finds the soma,
    /// orders points parents-first from the soma, computes per-point metrics.
    pub fn from_swc(file: SwcFile) -> Result<Morphology, SwcError> {
        let SwcFile {
            source,
            points: raw,
            warnings: mut warns,
            ..
        } = file;
        let err = |line: usize, fault: Fault| SwcError {
            file: source.clone(),
            line: Some(line),
            fault,
        };
        let n = raw.len();
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
        // ids → file index
        let mut by_id = IdIndex::new(&raw);
        for (i, p) in raw.iter().enumerate() {
            if let Some(first) = by_id.insert(p.id, i as u32) {
                return Err(err(
                    p.line,
                    Fault::DuplicateId {
                        id: p.id,
                        first_line: raw[first as usize].line,
                    },
                ));
            }
        }
        // parent links in file order
        let mut file_parent = vec![NONE; n];
        for (i, p) in raw.iter().enumerate() {
            if p.parent == -1 {
                continue;
            }
            match by_id.get(p.parent) {
                Some(j) => {
                    file_parent[i] = j;
                }
                None => {
                    return Err(err(
                        p.line,
                        Fault::MissingParent {
                            id: p.id,
                            parent: p.parent,
                        },
                    ));
                }
            }
        }
        drop(by_id);
        // Each point has at most one parent, so the links are a forest unless there is a cycle.
        if let Some(i) = find_cycle(&file_parent) {
            return Err(err(raw[i].line, Fault::Cycle(raw[i].id)));
        }
        // undirected adjacency (CSR) for re-rooting and ordering
        let mut deg = vec![0u32; n + 1];
        for (i, &p) in file_parent.iter().enumerate() {
            if p != NONE {
                deg[i] += 1;
                deg[p as usize] += 1;
            }
        }
        let mut start = vec![0u32; n + 1];
        for i in 0..n {
            start[i + 1] = start[i] + deg[i];
        }
        let mut fill = start.clone();
        let mut adj = vec![0u32; start[n] as usize];
        for (i, &p) in file_parent.iter().enumerate() {
            if p != NONE {
                adj[fill[i] as usize] = p;
                fill[i] += 1;
                adj[fill[p as usize] as usize] = i as u32;
                fill[p as usize] += 1;
            }
        }
        let neighbours = |i: u32| &adj[start[i as usize] as usize..start[i as usize + 1] as usize];
        // soma flags in file order (a compact array: the searches below jump around)
        let soma_kind: Vec<bool> = raw.iter().map(|p| p.kind == kind::SOMA).collect();
        // connected trees in file order
        let mut tree_of = vec![NONE; n];
        let mut tree_sizes: Vec<usize> = Vec::new();
        let mut tree_soma: Vec<usize> = Vec::new();
        let mut stack: Vec<u32> = Vec::new();
        for s in 0..n {
            if tree_of[s] != NONE {
                continue;
            }
            let t = tree_sizes.len() as u32;
            tree_sizes.push(0);
            tree_soma.push(0);
            tree_of[s] = t;
            stack.push(s as u32);
            while let Some(k) = stack.pop() {
                tree_sizes[t as usize] += 1;
                if soma_kind[k as usize] {
                    tree_soma[t as usize] += 1;
                }
                for &m in neighbours(k) {
                    if tree_of[m as usize] == NONE {
                        tree_of[m as usize] = t;
                        stack.push(m);
                    }
                }
            }
        }
        let n_trees = tree_sizes.len();
        let has_soma = tree_soma.iter().any(|&c| c > 0);
        let main = (0..n_trees)
            .max_by_key(|&t| {
                (
                    tree_soma[t] > 0,
                    if has_soma { tree_soma[t] } else { 0 },
                    tree_sizes[t],
                    std::cmp::Reverse(t),
                )
            })
            .unwrap_or(0);
        // where to root the main tree: its file root if that is a soma point (or there is no
        // soma), else its first soma point in file order
        let file_root = (0..n)
            .find(|&i| tree_of[i] == main as u32 && file_parent[i] == NONE)
            .unwrap_or(0);
        let soma_root = if raw[file_root].kind == kind::SOMA || tree_soma[main] == 0 {
            file_root
        } else {
            let s = (0..n)
                .find(|&i| tree_of[i] == main as u32 && raw[i].kind == kind::SOMA)
                .unwrap_or(file_root);
            warns.push(Warning::new(
                "re-rooted",
                Some(raw[s].line),
                format!(
                    "the tree's root (line {}) is not a soma point; the tree is re-rooted at the soma point on line {}",
                    raw[file_root].line, raw[s].line
                ),
            ));
            s
        };
        // soma set: soma points connected to soma_root through soma points
        let mut in_soma = vec![false; n];
        let mut soma_file: Vec<u32> = Vec::new();
        if raw[soma_root].kind == kind::SOMA {
            in_soma[soma_root] = true;
            stack.push(soma_root as u32);
            while let Some(k) = stack.pop() {
                soma_file.push(k);
                for &m in neighbours(k) {
                    if !in_soma[m as usize] && soma_kind[m as usize] {
                        in_soma[m as usize] = true;
                        stack.push(m);
                    }
                }
            }
            soma_file.sort_unstable();
        }
        let stray_soma = (0..n)
            .filter(|&i| raw[i].kind == kind::SOMA && !in_soma[i])
            .count();
        if stray_soma > 0 {
            let first = (0..n)
                .find(|&i| raw[i].kind == kind::SOMA && !in_soma[i])
                .map(|i| raw[i].line);
            warns.push(Warning::new(
                "soma-elsewhere",
                first,
                format!(
                    "{stray_soma} soma point(s) are not joined to the main soma; they are treated as neurite points"
                ),
            ));
        }
        if !has_soma {
            warns.push(Warning::new(
                "no-soma",
                None,
                format!(
                    "the file has no soma point (type 1); the root on line {} stands in for the soma",
                    raw[file_root].line
                ),
            ));
        }
        if n_trees > 1 {
            warns.push(Warning::new(
                "several-trees",
                None,
                format!(
                    "the file holds {n_trees} separate trees; all are kept, the one with {} (root on line {}, {} points) is the cell's main tree",
                    if has_soma { "the soma" } else { "the most points" },
                    raw[soma_root].line,
                    tree_sizes[main]
                ),
            ));
        }
        // parents-first order: BFS from the soma set (or root), then other trees
        let mut order: Vec<u32> = Vec::with_capacity(n);
        let mut new_parent_file: Vec<u32> = vec![NONE; n];
        let mut seen = vec![false; n];
        let mut trees = Vec::with_capacity(n_trees);
        let bfs = |seeds: &[u32],
                   order: &mut Vec<u32>,
                   new_parent_file: &mut Vec<u32>,
                   seen: &mut Vec<bool>| {
            let begin = order.len();
            for &s in seeds {
                seen[s as usize] = true;
                order.push(s);
            }
            // soma points first and in file order; a soma point's parent is the previous
            // soma point on its path (BFS within the soma set)
            let mut head = begin;
            while head < order.len() {
                let k = order[head];
                head += 1;
                for &m in neighbours(k) {
                    if !seen[m as usize] {
                        seen[m as usize] = true;
                        new_parent_file[m as usize] = k;
                        order.push(m);
                    }
                }
            }
            order.len() - begin
        };
        let main_len = if soma_file.len() > 1 {
            // BFS inside the soma first so that soma points lead and link to soma parents
            let mut soma_order: Vec<u32> = vec![soma_root as u32];
            let mut seen_s = vec![false; n];
            seen_s[soma_root] = true;
            let mut h = 0;
            while h < soma_order.len() {
                let k = soma_order[h];
                h += 1;
                for &m in neighbours(k) {
                    if in_soma[m as usize] && !seen_s[m as usize] {
                        seen_s[m as usize] = true;
                        new_parent_file[m as usize] = k;
                        soma_order.push(m);
                    }
                }
            }
            // keep those parents; BFS the rest from all soma points
            let saved: Vec<(u32, u32)> = soma_order
                .iter()
                .map(|&s| (s, new_parent_file[s as usize]))
                .collect();
            let len = bfs(&soma_order, &mut order, &mut new_parent_file, &mut seen);
            for (s, p) in saved {
                new_parent_file[s as usize] = p;
            }
            len
        } else {
            bfs(
                &[soma_root as u32],
                &mut order,
                &mut new_parent_file,
                &mut seen,
            )
        };
        trees.push(TreeInfo {
            root: 0,
            points: main_len,
        });
        for s in 0..n {
            if !seen[s] && file_parent[s] == NONE {
                let begin = order.len() as u32;
                let len = bfs(&[s as u32], &mut order, &mut new_parent_file, &mut seen);
                trees.push(TreeInfo {
                    root: begin,
                    points: len,
                });
            }
        }
        debug_assert_eq!(order.len(), n);
        // renumber
        let mut new_index = vec![NONE; n];
        for (ni, &fi) in order.iter().enumerate() {
            new_index[fi as usize] = ni as u32;
        }
        let mut parent = vec![NONE; n];
        let mut is_soma = vec![false; n];
        for (ni, &fi) in order.iter().enumerate() {
            let pf = new_parent_file[fi as usize];
            if pf != NONE {
                parent[ni] = new_index[pf as usize];
            }
            is_soma[ni] = in_soma[fi as usize];
        }
        // Move the points into the new order in place (no second copy of a large file): the
        // point now at slot i belongs at new_index[i]; each swap puts one point in its place.
        let mut points = raw;
        let mut dest = new_index;
        for i in 0..n {
            while dest[i] as usize != i {
                let j = dest[i] as usize;
                points.swap(i, j);
                dest.swap(i, j);
            }
        }
        drop(dest);
        for i in 0..n {
            points[i].parent = match parent[i] {
                NONE => -1,
                p => points[p as usize].id,
            };
        }
        let mut graph2: DiGraph<u32, ()> = DiGraph::with_capacity(n, n);
        for i in 0..n {
            graph2.add_node(i as u32);
        }
        for (i, &p) in parent.iter().enumerate() {
            if p != NONE {
                graph2.add_edge(NodeIndex::new(p as usize), NodeIndex::new(i), ());
            }
        }
        let soma: Vec<u32> = (0..main_len as u32)
            .filter(|&i| is_soma[i as usize])
            .collect();

        let mut m = Morphology {
            source,
            points,
            parent,
            graph: graph2,
            trees,
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

    fn compute_point_metrics(&mut self) {
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
        // Strahler: children before parents (reverse order)
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
            let p = self.parent[i];
            if p != NONE && !(self.is_soma[p as usize] && self.is_soma[i]) {
                let p = p as usize;
                if s > best[p] {
                    best[p] = s;
                    count_best[p] = 1;
                } else if s == best[p] {
                    count_best[p] += 1;
                }
            } else if p != NONE {
                // soma chain: pass the soma's children's orders up to the soma root
                let p = p as usize;
                if best[i] > best[p] {
                    best[p] = best[i];
                    count_best[p] = count_best[i];
                } else if best[i] == best[p] {
                    count_best[p] += count_best[i];
                }
            }
        }
        self.n_children = n_children;
        self.path_distance = path;
        self.branch_order = order;
        self.strahler = strahler;
    }

    fn geometry_warnings(&mut self) {
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
                surface_area_um2: 0.0,
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
                    e.surface_area_um2 += a;
                }
                if self.is_soma[self.parent[i] as usize] {
                    stems += 1;
                }
            } else if self.soma.is_empty() && i == 0 {
                // the root standing in for a missing soma
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
            surface_area_um2: area + soma_area,
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
/// it. Radii that are unknown are NaN; callers that need radii check them.
#[derive(Debug, Clone, Default)]
pub struct Flat {
    /// Parent node of each node; `NONE` for node 0.
    pub parent: Vec<u32>,
    /// Segment geometry per node (node 0: zeros).
    pub length_um: Vec<f64>,
    pub r_prox_um: Vec<f64>,
    pub r_dist_um: Vec<f64>,
    /// Type code per node (node 0: soma, or the root's type).
    pub kind: Vec<i32>,
    /// Position per node (node 0: the soma centre).
    pub pos: Vec<[f64; 3]>,
    /// Soma membrane area lumped at node 0 (µm²; 0 without a soma).
    pub soma_area_um2: f64,
    /// For each morphology point: its node, or `NONE` outside the main tree.
    pub point_node: Vec<u32>,
    /// For each node: one morphology point it stands for (node 0: the first soma point).
    pub node_point: Vec<u32>,
    /// For each node: the SWC line of that point (for messages).
    pub line: Vec<usize>,
}

impl Flat {
    fn new(m: &Morphology) -> Flat {
        let n_soma = m.soma.len().max(1);
        let n_nodes = m.main_len + 1 - n_soma;
        let mut f = Flat {
            parent: Vec::with_capacity(n_nodes),
            length_um: Vec::with_capacity(n_nodes),
            r_prox_um: Vec::with_capacity(n_nodes),
            r_dist_um: Vec::with_capacity(n_nodes),
            kind: Vec::with_capacity(n_nodes),
            pos: Vec::with_capacity(n_nodes),
            soma_area_um2: m.soma_area(),
            point_node: vec![NONE; m.len()],
            node_point: Vec::with_capacity(n_nodes),
            line: Vec::with_capacity(n_nodes),
        };
        // soma points lead the order, so points[..n_soma] are node 0
        f.parent.push(NONE);
        f.length_um.push(0.0);
        f.r_prox_um.push(0.0);
        f.r_dist_um.push(0.0);
        f.kind.push(m.points[0].kind);
        f.pos.push(m.soma_centre());
        f.node_point.push(0);
        f.line.push(m.points[0].line);
        for i in 0..n_soma.min(m.main_len) {
            f.point_node[i] = 0;
        }
        for i in n_soma..m.main_len {
            let node = f.parent.len() as u32;
            f.point_node[i] = node;
            let p = m.parent[i] as usize;
            f.parent.push(f.point_node[p]);
            let seg = m
                .segment(i)
                .expect("non-soma main-tree point has a segment");
            f.length_um.push(seg.length);
            f.r_prox_um.push(seg.r_prox);
            f.r_dist_um.push(seg.r_dist);
            f.kind.push(m.points[i].kind);
            f.pos.push(m.points[i].pos);
            f.node_point.push(i as u32);
            f.line.push(m.points[i].line);
        }
        f
    }

    pub fn len(&self) -> usize {
        self.parent.len()
    }

    pub fn is_empty(&self) -> bool {
        self.parent.is_empty()
    }

    /// The nodes whose `keep` flag is set, as flat arrays of their own (node 0 and the parent of
    /// every kept node must be kept), and the map old node → new node (`NONE` if dropped). The
    /// order, and so the parents-first property, is kept.
    pub fn restrict(&self, keep: &[bool]) -> (Flat, Vec<u32>) {
        let n = self.len();
        let mut map = vec![NONE; n];
        let mut f = Flat {
            soma_area_um2: self.soma_area_um2,
            ..Flat::default()
        };
        for k in 0..n {
            if !keep[k] {
                continue;
            }
            map[k] = f.parent.len() as u32;
            f.parent.push(if k == 0 {
                NONE
            } else {
                map[self.parent[k] as usize]
            });
            f.length_um.push(self.length_um[k]);
            f.r_prox_um.push(self.r_prox_um[k]);
            f.r_dist_um.push(self.r_dist_um[k]);
            f.kind.push(self.kind[k]);
            f.pos.push(self.pos[k]);
            f.node_point.push(self.node_point[k]);
            f.line.push(self.line[k]);
        }
        f.point_node = self
            .point_node
            .iter()
            .map(|&k| if k == NONE { NONE } else { map[k as usize] })
            .collect();
        (f, map)
    }

    /// Lateral area of node k's segment (µm²).
    pub fn segment_area(&self, k: usize) -> f64 {
        if k == 0 {
            return 0.0;
        }
        Segment {
            length: self.length_um[k],
            r_prox: self.r_prox_um[k],
            r_dist: self.r_dist_um[k],
        }
        .lateral_area()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
        assert!((met.surface_area_um2 - (cyl + fr + soma)).abs() < 1e-9);
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
