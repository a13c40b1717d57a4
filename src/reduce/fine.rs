//! Stages 1–2 of the reduction: the kept cell as one *binarised fine network* at DC.
//!
//! Every kept point is a node (the cable engine's exact DC π network per segment); a node with
//! m > 2 children gets m − 2 junction nodes below it (a cascade of bifurcations), a soma with a
//! single stem gets a soma-leaf node, so every node has 0, 1 or 2 children and the soma 0 or 2.
//! Every reduced tree of any budget is a Kron reduction of this one network onto a set of its
//! nodes, which is why the DC relations between the soma and every compartment are exact.
//!
//! What this stage does not do: choose which nodes are kept (see `order` and `build`).

use super::{ReduceError, ReduceOptions, Role};
use crate::cable::solve::TreeMaps;
use crate::cable::{Network, Params};
use crate::morphology::{Flat, NONE};

/// The binarised fine network and its DC analysis, parents-first (`parent[k] < k`, node 0 the
/// soma).
#[derive(Debug, Clone, Default)]
pub(super) struct Fine {
    pub parent: Vec<u32>,
    /// Series conductance to the parent (S); 0 at the soma.
    pub g: Vec<f64>,
    /// Leak to ground (S).
    pub shunt: Vec<f64>,
    /// Membrane area carried by the node (µm²): its segment's, shared with its junctions.
    pub area: Vec<f64>,
    /// Node of the kept `Flat` it stands for (junctions and soma leaf: their node's).
    pub flat_node: Vec<u32>,
    /// Fine node of each kept-`Flat` node.
    pub of_flat: Vec<u32>,
    /// What the node is (a point inside a section is `Role::SectionPoint`).
    pub role: Vec<Role>,
    /// Number of children (0, 1 or 2).
    pub nkids: Vec<u8>,
    /// Subtree conductance D_k seen at k (S).
    pub d: Vec<f64>,
    /// What k's whole branch presents at its parent, g_k·D_k/(g_k + D_k) (S); 0 at the soma.
    pub branch: Vec<f64>,
    /// DC log attenuation to the soma, ln(Z_kk/Z_k0) (Np); additive along paths:
    /// ln A_k = ln A_parent + ln(1 + P_k/g_k) (Zador, Agmon-Snir & Segev 1995).
    pub ln_att: Vec<f64>,
    /// The same on the kept cell itself (no junction links), per kept-`Flat` node.
    pub flat_ln_att: Vec<f64>,
    /// Soma DC input resistance of the kept cell (Ω).
    pub r_in_full_ohm: f64,
}

impl Fine {
    pub fn len(&self) -> usize {
        self.parent.len()
    }

    fn push(&mut self, n: FineNode) {
        self.parent.push(n.parent);
        self.g.push(n.g);
        self.shunt.push(n.shunt);
        self.area.push(n.area);
        self.flat_node.push(n.flat_node);
        self.role.push(n.role);
        self.nkids.push(0);
        if n.parent != NONE {
            self.nkids[n.parent as usize] += 1;
        }
    }
}

/// One node to append (see [`Fine`]).
struct FineNode {
    parent: u32,
    g: f64,
    shunt: f64,
    area: f64,
    flat_node: u32,
    role: Role,
}

/// Stage 1: the types filter. Returns the kept cell and, per node of `flat`, its kept node.
pub(super) fn filter_types(flat: &Flat, opts: &ReduceOptions) -> (Flat, Vec<u32>) {
    let n0 = flat.len();
    let mut keep = vec![false; n0];
    keep[0] = true;
    for k in 1..n0 {
        keep[k] = keep[flat.parent[k] as usize]
            && opts
                .types
                .as_ref()
                .is_none_or(|t| t.contains(&flat.kind[k]));
    }
    flat.restrict(&keep)
}

/// Junction link conductance at a kept node: a cylinder of the node's radius r and length
/// fraction·r, g = π·r/(Ra·fraction) (Ohm's law for a uniform core conductor).
fn junction_conductances(kept: &Flat, params: &Params, fraction: f64) -> Vec<f64> {
    let n = kept.len();
    let soma_r = {
        let r = (kept.soma_area_um2 / (4.0 * std::f64::consts::PI)).sqrt();
        if r > 0.0 && r.is_finite() {
            r
        } else {
            (1..n)
                .filter(|&k| kept.parent[k] == 0)
                .map(|k| kept.r_prox_um[k])
                .fold(0.0, f64::max)
                .max(1.0)
        }
    };
    // the thickest process meeting at the node
    let mut r = kept.r_dist_um.clone();
    if n > 0 {
        r[0] = soma_r;
    }
    for k in 1..n {
        let q = kept.parent[k] as usize;
        if q != 0 {
            r[q] = r[q].max(kept.r_prox_um[k]);
        }
    }
    r.iter()
        .map(|&r_um| std::f64::consts::PI * r_um * crate::cable::UM / (params.ra_ohm_cm * fraction))
        .collect()
}

/// Stage 2: the binarised fine network of the kept cell. Children of a node are ordered by the
/// admittance their branch presents (largest first): the largest stays on the node, the others
/// go down the junction cascade, whose m − 2 links together are one piece of length
/// fraction·r. Each junction (and the soma leaf) takes an equal share of its node's leak and area.
pub(super) fn build(kept: &Flat, params: &Params, fraction: f64) -> Result<Fine, ReduceError> {
    let net = Network::build(kept, params, 0.0)?;
    let n = kept.len();
    let g: Vec<f64> = net.g.iter().map(|z| z.re).collect();
    let shunt: Vec<f64> = net.shunt.iter().map(|z| z.re).collect();
    let flat_maps = TreeMaps::new(&kept.parent, &g, &shunt);
    let d = flat_maps.subtree_admittance().to_vec();
    let flat_ln_att = flat_maps.ln_attenuations_to_soma();
    let gj = junction_conductances(kept, params, fraction);
    let (start, kids) = crate::cable::children_csr(&kept.parent);
    let mut area = vec![0.0; n];
    area[0] = kept.soma_area_um2;
    for (k, a) in area.iter_mut().enumerate().skip(1) {
        *a = kept.segment_area(k);
    }
    let mut f = Fine {
        r_in_full_ohm: 1.0 / d[0],
        flat_ln_att,
        ..Fine::default()
    };
    f.of_flat = vec![NONE; n];
    // where each kept node's children attach (fine index), filled when the node is emitted
    let mut attach = vec![NONE; n];
    for k in 0..n {
        let ch = &kids[start[k] as usize..start[k + 1] as usize];
        let m = ch.len();
        let shares = match m {
            1 if k == 0 => 2.0,
            m if m > 2 => (m - 1) as f64,
            _ => 1.0,
        };
        let me = f.len() as u32;
        let role = if k == 0 {
            Role::Soma
        } else if m == 0 {
            Role::Tip
        } else if m == 1 {
            Role::SectionPoint
        } else {
            Role::BranchPoint
        };
        f.push(FineNode {
            parent: if k == 0 { NONE } else { attach[k] },
            g: if k == 0 { 0.0 } else { g[k] },
            shunt: shunt[k] / shares,
            area: area[k] / shares,
            flat_node: k as u32,
            role,
        });
        f.of_flat[k] = me;
        if m == 1 && k == 0 {
            attach[ch[0] as usize] = me;
            f.push(FineNode {
                parent: me,
                g: gj[0],
                shunt: shunt[0] / 2.0,
                area: area[0] / 2.0,
                flat_node: 0,
                role: Role::SomaLeaf,
            });
        } else if m <= 2 {
            for &c in ch {
                attach[c as usize] = me;
            }
        } else {
            let branch = |c: u32| {
                let c = c as usize;
                g[c] * d[c] / (g[c] + d[c])
            };
            let mut ch = ch.to_vec();
            ch.sort_by(|&x, &y| branch(y).total_cmp(&branch(x)).then(x.cmp(&y)));
            attach[ch[0] as usize] = me;
            let mut up = me;
            for &c in &ch[1..m - 1] {
                let j = f.len() as u32;
                f.push(FineNode {
                    parent: up,
                    g: gj[k] * (m - 2) as f64,
                    shunt: shunt[k] / shares,
                    area: area[k] / shares,
                    flat_node: k as u32,
                    role: Role::Junction,
                });
                attach[c as usize] = j;
                up = j;
            }
            attach[ch[m - 1] as usize] = up;
        }
    }
    let maps = TreeMaps::new(&f.parent, &f.g, &f.shunt);
    f.d = maps.subtree_admittance().to_vec();
    f.branch = (0..f.len())
        .map(|k| {
            if k == 0 {
                0.0
            } else {
                f.g[k] * f.d[k] / (f.g[k] + f.d[k])
            }
        })
        .collect();
    f.ln_att = maps.ln_attenuations_to_soma();
    Ok(f)
}
