//! [`Flat`]: the main tree as the flat arrays every numerical routine uses.

use super::{Morphology, NONE, Segment};

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
    pub(super) fn new(m: &Morphology) -> Flat {
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
