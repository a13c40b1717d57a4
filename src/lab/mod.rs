//! The branching lab's model: small parametric trees built in memory for teaching, computed with
//! the same engine as a real cell (SWC points → [`Morphology`] → [`Flat`] → [`Network`] →
//! [`TreeMaps`]).
//!
//! A tree is a list of [`Section`]s: uniform cylinders, each made of `segments` equal SWC
//! segments, laid out in a fan in the x–y plane. Shapes: one cable, a Y junction, a symmetric
//! tree of k levels, and an asymmetric tree (a main line with one terminal side branch at each
//! fork). Every level (and, through `overrides`, every single section) has its own length and
//! diameter; every tip is sealed or killed (held at rest).
//!
//! Two things differ from reading the same tree back from its SWC file, both on purpose:
//! - Joints. Under the SWC geometry rule a daughter's first segment would taper from the
//!   parent's radius to its own. Each daughter therefore starts with a joint point
//!   [`JOINT_UM`] from the fork, at its own radius, and the network is built with
//!   [`SegmentRadii::Distal`] (every segment a cylinder of its point's radius), so that short
//!   piece is part of the daughter's cylinder (the ideal tree of the lessons). Read from the file, that piece is a
//!   short frustum whose extra membrane is the annulus π·|r_parent² − r_daughter²|, a fraction of
//!   a percent of a branch's membrane.
//! - Killed ends. A killed tip is held at rest (V = 0), an input of the network builder
//!   ([`NetworkInputs::killed`]). The file cannot say that, so the main view sees every tip
//!   sealed.
//!
//! Nothing recurses: sections are made breadth-first from a queue, and every pass over nodes is a
//! loop over the parents-first order.

use crate::cable::{
    C64, CableError, Network, NetworkInputs, Params, SegmentRadii, TreeMaps, electrotonic_distance,
};
use crate::morphology::{Flat, Morphology, NONE};
use crate::swc::{SwcError, SwcFile, SwcPoint};
use std::collections::{BTreeMap, VecDeque};

mod equivalent;

use equivalent::equivalent_cylinder;
pub use equivalent::{Equivalent, closed_form_input_impedance, soma_area_um2};

/// Deepest symmetric or asymmetric tree the lab builds (levels, trunk included).
pub const MAX_LEVELS: usize = 6;
/// Distance from a fork to a daughter's joint point (µm); see the module doc.
pub const JOINT_UM: f64 = 0.01;
/// Tolerance for "obeys the 3/2 power rule" (|ratio − 1|) and for "all tips at the same
/// electrotonic distance" (relative spread): 2 %, common practice (no source).
pub const RALL_TOLERANCE: f64 = 0.02;

/// Why a lab tree cannot be built or computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LabError {
    #[error("section {0} does not exist in this tree")]
    NoSection(usize),
    #[error(transparent)]
    Cable(#[from] CableError),
    #[error(transparent)]
    Swc(#[from] SwcError),
}

/// The tree's shape.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum Shape {
    /// One unbranched cylinder from the soma.
    Cable,
    /// A trunk that forks into two daughters.
    YJunction,
    /// Every section forks in two, down to `levels` levels.
    Symmetric,
    /// A main line that gives off one terminal side branch at each fork.
    Asymmetric,
}

impl Shape {
    pub const ALL: [Shape; 4] = [
        Shape::Cable,
        Shape::YJunction,
        Shape::Symmetric,
        Shape::Asymmetric,
    ];

    pub fn label(self) -> &'static str {
        match self {
            Shape::Cable => "Single cable",
            Shape::YJunction => "Y junction",
            Shape::Symmetric => "Symmetric tree",
            Shape::Asymmetric => "Asymmetric tree",
        }
    }
}

/// What a tip does with current.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum End {
    /// No current leaves through the end (sealed).
    Sealed,
    /// The end is held at rest, V = 0 (killed, clamped).
    Killed,
}

/// Length and diameter of a cylinder (µm).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Piece {
    pub length_um: f64,
    pub diam_um: f64,
}

impl Piece {
    pub const fn new(length_um: f64, diam_um: f64) -> Piece {
        Piece { length_um, diam_um }
    }
}

/// Everything that defines a lab tree and its membrane.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct TreeSpec {
    pub shape: Shape,
    /// Levels for the symmetric and asymmetric trees (trunk = level 0), 1 to [`MAX_LEVELS`].
    /// A cable has 1 level and a Y junction 2, whatever this says.
    pub levels: usize,
    /// Geometry of each level (the main line of an asymmetric tree); `MAX_LEVELS` entries.
    pub level: Vec<Piece>,
    /// Geometry of the side branches of an asymmetric tree.
    pub side: Piece,
    /// Geometry of single sections, by section index, overriding the level's.
    pub overrides: BTreeMap<usize, Piece>,
    /// End condition of every tip...
    pub end: End,
    /// ...except these tips (by section index).
    pub end_overrides: BTreeMap<usize, End>,
    /// Soma diameter (µm): a sphere of this diameter in parallel at the root; 0 = no soma
    /// membrane (a bare tree seen from its root).
    pub soma_diam_um: f64,
    pub params: Params,
    /// Frequency of the injected sinusoidal current (Hz); 0 = steady current.
    pub freq_hz: f64,
    /// SWC segments per section (resolution of the plots; the numbers are exact at any value).
    pub segments: usize,
}

impl Default for TreeSpec {
    fn default() -> Self {
        TreeSpec {
            shape: Shape::YJunction,
            levels: 3,
            level: vec![
                Piece::new(300.0, 2.0),
                Piece::new(200.0, 1.26),
                Piece::new(150.0, 0.8),
                Piece::new(100.0, 0.5),
                Piece::new(80.0, 0.32),
                Piece::new(60.0, 0.2),
            ],
            side: Piece::new(150.0, 0.5),
            overrides: BTreeMap::new(),
            end: End::Sealed,
            end_overrides: BTreeMap::new(),
            soma_diam_um: 0.0,
            params: Params::default(),
            freq_hz: 0.0,
            segments: 24,
        }
    }
}

impl TreeSpec {
    /// Levels actually used by the shape.
    pub fn levels_used(&self) -> usize {
        match self.shape {
            Shape::Cable => 1,
            Shape::YJunction => 2,
            Shape::Symmetric | Shape::Asymmetric => self.levels.clamp(1, MAX_LEVELS),
        }
    }

    /// Checks every number before anything is built.
    pub fn validate(&self) -> Result<(), LabError> {
        let check = crate::cable::in_range;
        check("levels", self.levels as f64, 1.0, MAX_LEVELS as f64, "")?;
        check("segments per section", self.segments as f64, 1.0, 400.0, "")?;
        check("soma diameter", self.soma_diam_um, 0.0, 100.0, "µm")?;
        if self.level.len() < self.levels_used() {
            return Err(CableError::ParamRange {
                name: "level geometry entries",
                value: self.level.len() as f64,
                lo: self.levels_used() as f64,
                hi: MAX_LEVELS as f64,
                unit: "",
            }
            .into());
        }
        let pieces = self
            .level
            .iter()
            .chain(std::iter::once(&self.side))
            .chain(self.overrides.values());
        for p in pieces {
            check("length", p.length_um, 1.0, 20_000.0, "µm")?;
            check("diameter", p.diam_um, 0.02, 50.0, "µm")?;
        }
        self.params.validate(self.freq_hz)?;
        Ok(())
    }
}

/// One cylinder of the tree.
#[derive(Debug, Clone, PartialEq)]
pub struct Section {
    /// Parent section (`None` for the trunk, which starts at the soma).
    pub parent: Option<usize>,
    pub children: Vec<usize>,
    /// Level (trunk 0).
    pub level: usize,
    /// A side branch of an asymmetric tree.
    pub side: bool,
    /// A short name: "1" for the trunk, "1.2" for its second daughter, and so on.
    pub name: String,
    pub piece: Piece,
    /// End condition (tips only).
    pub end: Option<End>,
    /// Direction in the drawing (radians from the +x axis).
    pub angle: f64,
}

impl Section {
    pub fn is_tip(&self) -> bool {
        self.children.is_empty()
    }
}

/// The sections of a spec, parents before children (breadth-first), with fan angles.
pub fn sections(spec: &TreeSpec) -> Vec<Section> {
    let levels = spec.levels_used();
    let mut out: Vec<Section> = Vec::new();
    let mut queue = VecDeque::new();
    out.push(Section {
        parent: None,
        children: Vec::new(),
        level: 0,
        side: false,
        name: "1".to_string(),
        piece: spec.level[0],
        end: None,
        angle: 0.0,
    });
    queue.push_back(0usize);
    while let Some(s) = queue.pop_front() {
        let level = out[s].level;
        if out[s].side || level + 1 >= levels {
            continue;
        }
        for j in 0..2 {
            let side = spec.shape == Shape::Asymmetric && j == 1;
            let c = out.len();
            let name = format!("{}.{}", out[s].name, j + 1);
            out.push(Section {
                parent: Some(s),
                children: Vec::new(),
                level: level + 1,
                side,
                name,
                piece: if side {
                    spec.side
                } else {
                    spec.level[level + 1]
                },
                end: None,
                angle: 0.0,
            });
            out[s].children.push(c);
            queue.push_back(c);
        }
    }
    for (i, s) in out.iter_mut().enumerate() {
        if let Some(p) = spec.overrides.get(&i) {
            s.piece = *p;
        }
        if s.children.is_empty() {
            s.end = Some(*spec.end_overrides.get(&i).unwrap_or(&spec.end));
        }
    }
    fan_angles(&mut out);
    out
}

/// Fan layout: tips get evenly spaced slots in depth-first order; a section points at the mean
/// slot of its tips. Loops only (an explicit stack for the depth-first order).
fn fan_angles(secs: &mut [Section]) {
    let n = secs.len();
    let mut slot = vec![0.0; n];
    let mut count = vec![0.0f64; n];
    let mut next = 0.0;
    let mut stack = vec![0usize];
    while let Some(s) = stack.pop() {
        if secs[s].children.is_empty() {
            slot[s] = next;
            count[s] = 1.0;
            next += 1.0;
        }
        for &c in secs[s].children.iter().rev() {
            stack.push(c);
        }
    }
    let tips = next;
    // children after parents (breadth-first), so a reverse loop sums subtrees
    for s in (1..n).rev() {
        if let Some(p) = secs[s].parent {
            slot[p] += slot[s];
            count[p] += count[s];
        }
    }
    let spread = if tips > 1.0 { 1.9 } else { 0.0 }; // radians, tip to tip
    for s in 0..n {
        let mean = slot[s] / count[s].max(1.0);
        let t = if tips > 1.0 {
            mean / (tips - 1.0) - 0.5
        } else {
            0.0
        };
        secs[s].angle = -t * spread;
    }
}

/// SWC points of a spec's tree (soma first, ids 1..=n, parents before children) and, for each
/// section, the id of its last point. Type 3 (dendrite) for every neurite point.
pub fn swc_points(spec: &TreeSpec, secs: &[Section]) -> (Vec<SwcPoint>, Vec<i64>) {
    let mut pts: Vec<SwcPoint> = Vec::new();
    let push = SwcPoint::append;
    push(&mut pts, 1, [0.0; 3], spec.soma_diam_um / 2.0, -1);
    let mut last_id = vec![0i64; secs.len()];
    let mut end_pos = vec![[0.0; 3]; secs.len()];
    let nseg = spec.segments.max(1);
    for (i, s) in secs.iter().enumerate() {
        let (start, parent_id) = match s.parent {
            Some(p) => (end_pos[p], last_id[p]),
            None => ([0.0; 3], 1),
        };
        let dir = [s.angle.cos(), s.angle.sin(), 0.0];
        let at = |t: f64| {
            [
                start[0] + dir[0] * t,
                start[1] + dir[1] * t,
                start[2] + dir[2] * t,
            ]
        };
        let r = s.piece.diam_um / 2.0;
        let len = s.piece.length_um;
        let mut prev = parent_id;
        let mut from = 0.0;
        if s.parent.is_some() {
            let joint = JOINT_UM.min(len / (nseg as f64 + 1.0));
            prev = push(&mut pts, 3, at(joint), r, prev);
            from = joint;
        }
        for j in 1..=nseg {
            let t = from + (len - from) * j as f64 / nseg as f64;
            prev = push(&mut pts, 3, at(t), r, prev);
        }
        last_id[i] = prev;
        end_pos[i] = at(len);
    }
    (pts, last_id)
}

/// A lab tree built and solved at one frequency.
#[derive(Debug, Clone)]
pub struct LabTree {
    pub spec: TreeSpec,
    pub sections: Vec<Section>,
    /// The tree as a cell (what "send to main view" and "export as SWC" hand over).
    pub morphology: Morphology,
    /// Flat arrays of the morphology (the network reads them with [`SegmentRadii::Distal`]).
    pub flat: Flat,
    /// The network with killed tips held at rest.
    pub net: Network,
    pub maps: TreeMaps<C64>,
    /// Section of each node (node 0, the soma: `NONE`).
    pub node_section: Vec<u32>,
    /// Last node of each section (its tip or fork).
    pub section_end_node: Vec<u32>,
    /// Nodes held at rest (killed tips).
    pub killed: Vec<bool>,
}

impl LabTree {
    /// Builds the tree and solves its network (O(N)).
    pub fn build(spec: &TreeSpec) -> Result<LabTree, LabError> {
        spec.validate()?;
        let secs = sections(spec);
        let (pts, last_id) = swc_points(spec, &secs);
        let source = format!("<lab: {}>", spec.shape.label().to_lowercase());
        let morphology = Morphology::from_swc(SwcFile {
            source,
            points: pts,
            header: Vec::new(),
            warnings: Vec::new(),
        })?;
        let flat = morphology.flatten();
        // id → node (ids are 1..=n here, so an array indexed by id − 1 is fine)
        let mut id_node = vec![NONE; morphology.len()];
        for (i, p) in morphology.points.iter().enumerate() {
            id_node[(p.id - 1) as usize] = flat.point_node[i];
        }
        let section_end_node: Vec<u32> = last_id
            .iter()
            .map(|&id| id_node[(id - 1) as usize])
            .collect();
        // node → section: walk each section's nodes from its end to its start
        let n = flat.len();
        let mut node_section = vec![NONE; n];
        for (s, sec) in secs.iter().enumerate() {
            let start_node = match sec.parent {
                Some(p) => section_end_node[p],
                None => 0,
            };
            let mut k = section_end_node[s];
            while k != start_node && k != NONE {
                node_section[k as usize] = s as u32;
                k = flat.parent[k as usize];
            }
        }
        let killed_nodes: Vec<u32> = secs
            .iter()
            .enumerate()
            .filter(|(_, sec)| sec.end == Some(End::Killed))
            .map(|(s, _)| section_end_node[s])
            .collect();
        let mut killed = vec![false; n];
        for &k in &killed_nodes {
            killed[k as usize] = true;
        }
        let inputs = NetworkInputs {
            radii: SegmentRadii::Distal,
            killed: killed_nodes,
        };
        let net = Network::build_with(&flat, &spec.params, spec.freq_hz, &inputs)?;
        let maps = net.maps();
        Ok(LabTree {
            spec: spec.clone(),
            sections: secs,
            morphology,
            flat,
            net,
            maps,
            node_section,
            section_end_node,
            killed,
        })
    }

    pub fn len(&self) -> usize {
        self.flat.len()
    }

    pub fn is_empty(&self) -> bool {
        self.flat.is_empty()
    }

    /// Diameter of node k's segment (µm); node 0: the soma's.
    pub fn node_diam_um(&self, k: usize) -> f64 {
        if k == 0 {
            self.spec.soma_diam_um
        } else {
            self.flat.r_dist_um[k] * 2.0
        }
    }

    /// Input impedance at node k (Ω); 0 at a killed tip.
    pub fn input_impedance(&self, k: usize) -> C64 {
        if self.killed[k] {
            C64::new(0.0, 0.0)
        } else {
            self.maps.input_impedance()[k]
        }
    }

    /// Input resistance (magnitude of the input impedance) at the soma (MΩ).
    pub fn soma_rin_mohm(&self) -> f64 {
        self.input_impedance(0).norm() * 1e-6
    }

    /// The tip reached from section `s` by following first daughters (s itself if a tip).
    pub fn tip_below(&self, s: usize) -> usize {
        let mut s = s.min(self.sections.len() - 1);
        while let Some(&c) = self.sections[s].children.first() {
            s = c;
        }
        s
    }

    /// Nodes from the soma (node 0) to the end of section `s`.
    pub fn path_nodes(&self, s: usize) -> Vec<usize> {
        let mut k = self.section_end_node[s] as usize;
        let mut out = vec![k];
        while k != 0 {
            k = self.flat.parent[k] as usize;
            out.push(k);
        }
        out.reverse();
        out
    }

    /// The DC electrotonic distance X = Σ l/λ(d) from the soma at every node (Rall 1959).
    pub fn electrotonic_distance(&self) -> Vec<f64> {
        electrotonic_distance(&self.flat, &self.spec.params, SegmentRadii::Distal)
    }

    /// Path distance from the soma at every node (µm).
    pub fn path_distance(&self) -> Vec<f64> {
        let n = self.len();
        let mut x = vec![0.0; n];
        for k in 1..n {
            x[k] = x[self.flat.parent[k] as usize] + self.flat.length_um[k];
        }
        x
    }
}

/// The 3/2 power rule ratio Σ d_child^(3/2) / d_parent^(3/2) at a fork (Rall 1959).
pub fn rall_ratio(parent_diam: f64, child_diams: &[f64]) -> f64 {
    child_diams.iter().map(|d| d.powf(1.5)).sum::<f64>() / parent_diam.powf(1.5)
}

/// One fork of the tree.
#[derive(Debug, Clone, PartialEq)]
pub struct Junction {
    /// The parent section.
    pub section: usize,
    pub name: String,
    /// Σ d_child^(3/2) / d_parent^(3/2).
    pub ratio: f64,
    /// The fork node.
    pub node: usize,
    /// Distance from the soma (µm).
    pub dist_um: f64,
    /// On the plotted path?
    pub on_path: bool,
}

/// Everything the lab plots along one path, soma first.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct PathSeries {
    /// The tip section at the far end of the path.
    pub tip_section: usize,
    pub nodes: Vec<usize>,
    /// Path distance from the soma (µm) and DC electrotonic distance X.
    pub dist_um: Vec<f64>,
    pub x: Vec<f64>,
    /// |V_k / V_inject| for current injected at the tip (or, for a killed tip, at the last
    /// node before it).
    pub v_from_tip: Vec<f64>,
    /// |V_k / V_soma| for current injected at the soma.
    pub v_from_soma: Vec<f64>,
    /// Local input resistance |Z_kk| (MΩ).
    pub rin_mohm: Vec<f64>,
    /// Morphoelectrotonic distance towards the soma, ln|V_k/V_soma| for current at k, and away
    /// from it, ln|V_soma/V_k| for current at the soma (Zador, Agmon-Snir & Segev 1995); NaN at a
    /// killed tip.
    pub melec_in: Vec<f64>,
    pub melec_out: Vec<f64>,
    /// Where the current for `v_from_tip` goes in (index into `nodes`).
    pub inject_at: usize,
}

/// The lab's numbers for one tree and one chosen path.
#[derive(Debug, Clone)]
pub struct LabResult {
    pub tree: LabTree,
    pub path: PathSeries,
    pub junctions: Vec<Junction>,
    pub equivalent: Equivalent,
    /// Per node, for the drawing: |V/V_soma| for current at the soma, |V/V_inject| for current
    /// at the path's tip, and |Z_kk| (MΩ).
    pub v_from_soma_all: Vec<f64>,
    pub v_from_tip_all: Vec<f64>,
    pub rin_all_mohm: Vec<f64>,
    /// Attenuation |V_inject / V_soma| for current at the tip, and |V_soma / V_tip| for current
    /// at the soma (the tip's "far" value; infinite at a killed tip).
    pub att_tip_to_soma: f64,
    pub att_soma_to_tip: f64,
}

impl LabResult {
    /// Builds, solves and measures along the path to the tip below section `chosen`, and the
    /// equivalent cylinder's own result.
    pub fn compute(spec: &TreeSpec, chosen: usize) -> Result<LabResult, LabError> {
        LabResult::compute_with(spec, chosen, true)
    }

    fn compute_with(spec: &TreeSpec, chosen: usize, cylinder: bool) -> Result<LabResult, LabError> {
        let tree = LabTree::build(spec)?;
        if chosen >= tree.sections.len() {
            return Err(LabError::NoSection(chosen));
        }
        let n = tree.len();
        let tip = tree.tip_below(chosen);
        let nodes = tree.path_nodes(tip);
        let tip_node = *nodes.last().unwrap_or(&0);
        let inject_at = if tree.killed[tip_node] && nodes.len() > 1 {
            nodes.len() - 2
        } else {
            nodes.len() - 1
        };
        let j = nodes[inject_at];
        let zs = tree.maps.soma_transfer();
        let zss = zs[0];
        let from_tip = tree.maps.site_ratio(j).unwrap_or_default();
        let dist_all = tree.path_distance();
        let x_all = tree.electrotonic_distance();
        let v_from_soma_all: Vec<f64> = (0..n).map(|k| (zs[k] / zss).norm()).collect();
        let v_from_tip_all: Vec<f64> = from_tip.iter().map(|v| v.norm()).collect();
        let rin_all_mohm: Vec<f64> = (0..n)
            .map(|k| tree.input_impedance(k).norm() * 1e-6)
            .collect();
        let mut path = PathSeries {
            tip_section: tip,
            inject_at,
            ..Default::default()
        };
        for &k in &nodes {
            path.dist_um.push(dist_all[k]);
            path.x.push(x_all[k]);
            path.v_from_tip.push(v_from_tip_all[k]);
            path.v_from_soma.push(v_from_soma_all[k]);
            path.rin_mohm.push(rin_all_mohm[k]);
            if tree.killed[k] {
                path.melec_in.push(f64::NAN);
                path.melec_out.push(f64::NAN);
            } else {
                path.melec_in.push(tree.maps.ln_attenuation_to_soma(k));
                path.melec_out.push(tree.maps.ln_attenuation_from_soma(k));
            }
        }
        path.nodes = nodes;
        let att_tip_to_soma = 1.0 / v_from_tip_all[0];
        let att_soma_to_tip = 1.0 / v_from_soma_all[tip_node];
        let on_path: Vec<bool> = {
            let mut v = vec![false; n];
            for &k in &path.nodes {
                v[k] = true;
            }
            v
        };
        let junctions = tree
            .sections
            .iter()
            .enumerate()
            .filter(|(_, s)| s.children.len() >= 2)
            .map(|(i, s)| {
                let kids: Vec<f64> = s
                    .children
                    .iter()
                    .map(|&c| tree.sections[c].piece.diam_um)
                    .collect();
                let node = tree.section_end_node[i] as usize;
                Junction {
                    section: i,
                    name: s.name.clone(),
                    ratio: rall_ratio(s.piece.diam_um, &kids),
                    node,
                    dist_um: dist_all[node],
                    on_path: on_path[node],
                }
            })
            .collect::<Vec<_>>();
        let equivalent = equivalent_cylinder(&tree, &junctions, &x_all, cylinder)?;
        Ok(LabResult {
            tree,
            path,
            junctions,
            equivalent,
            v_from_soma_all,
            v_from_tip_all,
            rin_all_mohm,
            att_tip_to_soma,
            att_soma_to_tip,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sections_of_each_shape() {
        let mut s = TreeSpec::default();
        for (shape, levels, want) in [
            (Shape::Cable, 4, 1),
            (Shape::YJunction, 4, 3),
            (Shape::Symmetric, 4, 15),
            (Shape::Asymmetric, 4, 7),
        ] {
            s.shape = shape;
            s.levels = levels;
            let secs = sections(&s);
            assert_eq!(secs.len(), want, "{shape:?}");
            for (i, sec) in secs.iter().enumerate() {
                if let Some(p) = sec.parent {
                    assert!(p < i);
                }
            }
        }
    }
}
