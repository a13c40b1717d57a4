//! Snapping a table's synapses to the points of the kept cell.

use super::{Location, SynapseError, SynapseTable};
use crate::morphology::{Flat, Morphology, NONE};
use crate::reduce::{SiteSpec, Sites};
use kiddo::{ImmutableKdTree, SquaredEuclidean};
use rayon::prelude::*;
use std::collections::HashMap;

/// How synapses are placed on the cell.
#[derive(Debug, Clone, PartialEq)]
pub struct SnapOptions {
    /// Factor applied to the table's positions (the cell's `--scale`); `None` is 1.
    pub scale: Option<f64>,
    /// Largest accepted snap distance (µm outside the nearest point's sphere).
    pub limit_um: f64,
    /// List and leave out synapses beyond the limit instead of refusing the table.
    pub skip_far: bool,
    /// SWC types kept by the reduction (`None`: all); synapses snap to kept points only.
    pub types: Option<Vec<i32>>,
}

impl Default for SnapOptions {
    fn default() -> Self {
        SnapOptions {
            scale: None,
            limit_um: super::DEFAULT_SNAP_LIMIT_UM,
            skip_far: false,
            types: None,
        }
    }
}

/// One synapse placed on the cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Synapse {
    /// Line of the table (1-based).
    pub line: usize,
    /// Index into the table's inputs.
    pub input: u32,
    pub weight: f64,
    /// Node of the caller's [`Flat`].
    pub node: u32,
    /// Morphology point (index into `Morphology::points`) it snapped to.
    pub point: u32,
    /// Distance outside that point's sphere (µm; 0 for synapses given by SWC id).
    pub distance_um: f64,
}

/// A synapse left out because it lies farther than the limit from the cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LeftOut {
    pub line: usize,
    pub input: u32,
    pub distance_um: f64,
}

/// A table placed on a cell: the synapses kept, in table order, and those left out.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Snapped {
    pub file: String,
    pub inputs: Vec<String>,
    pub synapses: Vec<Synapse>,
    pub left_out: Vec<LeftOut>,
    /// The options used (recorded in the exports).
    pub scale: Option<f64>,
    pub limit_um: f64,
}

impl Snapped {
    /// The synapses as the reduction's sites, one per synapse, in order, each with its weight.
    pub fn sites(&self) -> Sites {
        Sites::List(
            self.synapses
                .iter()
                .map(|s| SiteSpec::Weighted {
                    node: s.node,
                    weight: s.weight,
                    line: s.line,
                })
                .collect(),
        )
    }
}

fn dist(a: [f64; 3], b: [f64; 3]) -> f64 {
    ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt()
}

/// The nodes the reduction keeps under a type filter (the same rule as the reducer's).
fn kept_nodes(flat: &Flat, types: Option<&[i32]>) -> Vec<bool> {
    let mut keep = vec![false; flat.len()];
    if keep.is_empty() {
        return keep;
    }
    keep[0] = true;
    for k in 1..flat.len() {
        keep[k] = keep[flat.parent[k] as usize] && types.is_none_or(|t| t.contains(&flat.kind[k]));
    }
    keep
}

/// Where each row goes: Ok((node, point, snap distance)) or the row's fault. Positions are
/// placed in parallel through a k-d tree of the kept points.
fn place_all(
    table: &SynapseTable,
    morph: &Morphology,
    flat: &Flat,
    opts: &SnapOptions,
) -> Vec<Result<(u32, u32, f64), String>> {
    let keep = kept_nodes(flat, opts.types.as_deref());
    let radius: Vec<f64> = (0..flat.len())
        .map(|k| {
            if k == 0 {
                // a sphere of the soma's area
                (flat.soma_area_um2 / (4.0 * std::f64::consts::PI)).sqrt()
            } else {
                flat.r_dist_um[k]
            }
        })
        .collect();
    let by_id: HashMap<i64, u32> = if table
        .rows
        .iter()
        .any(|r| matches!(r.location, Location::Id(_)))
    {
        (morph.points.iter().enumerate())
            .map(|(i, p)| (p.id, i as u32))
            .collect()
    } else {
        HashMap::new()
    };
    // a k-d tree over the kept points' centres (the soma is checked by its surface); what a
    // query needs of its point sits in one array, in the tree's item order
    let items: Vec<(u32, u32, f64)> = (1..flat.len())
        .filter(|&k| keep[k])
        .map(|k| (k as u32, flat.node_point[k], radius[k]))
        .collect();
    let centres: Vec<[f64; 3]> = items.iter().map(|it| flat.pos[it.0 as usize]).collect();
    let tree = (!centres.is_empty()).then(|| ImmutableKdTree::<f64, 3>::new_from_slice(&centres));
    let s = opts.scale.unwrap_or(1.0);
    let (soma_pos, soma_r, soma_point) = (flat.pos[0], radius[0], flat.node_point[0]);
    let outside = |d: f64, r: f64| {
        let x = d - r;
        if x < 0.0 { 0.0 } else { x } // NaN stays NaN
    };
    // Ok((node, point, distance)) or Err(message)
    table
        .rows
        .par_iter()
        .map(|r| match r.location {
            Location::Id(id) => {
                let p = *by_id
                    .get(&id)
                    .ok_or_else(|| format!("there is no point with SWC id {id}"))?;
                let node = flat.point_node.get(p as usize).copied().unwrap_or(NONE);
                if node == NONE {
                    return Err(format!(
                        "SWC id {id} is not in the cell's main tree (it belongs to a separate tree)"
                    ));
                }
                if !keep[node as usize] {
                    return Err(format!("SWC id {id} is left out by the type filter"));
                }
                Ok((node, p, 0.0))
            }
            Location::Pos(p) => {
                let q = p.map(|v| v * s);
                // the soma by its surface, the rest by the nearest centre
                let mut best = (0u32, soma_point, outside(dist(q, soma_pos), soma_r));
                if let Some(t) = &tree {
                    let near = t.nearest_one::<SquaredEuclidean>(&q);
                    let (k, point, rk) = items[near.item as usize];
                    let d = outside(near.distance.sqrt(), rk);
                    if d < best.2 || best.2.is_nan() {
                        best = (k, point, d);
                    }
                }
                if best.2.is_nan() {
                    return Err("the position is too large to place".into());
                }
                Ok(best)
            }
        })
        .collect()
}

/// Places every synapse of `table` on `flat` (the prepared cell of `morph`, already scaled).
pub fn snap(
    table: &SynapseTable,
    morph: &Morphology,
    flat: &Flat,
    opts: &SnapOptions,
) -> Result<Snapped, SynapseError> {
    let file = &table.file;
    let row_err = |line: usize, message: String| SynapseError::Row {
        file: file.clone(),
        line,
        message,
    };
    let limit = opts.limit_um;
    if !(limit.is_finite() && limit >= 0.0) {
        return Err(SynapseError::Table {
            file: file.clone(),
            message: format!("the snap limit {limit} µm is not a finite number ≥ 0"),
        });
    }
    let placed = place_all(table, morph, flat, opts);
    let mut out = Snapped {
        file: file.clone(),
        inputs: table.inputs.clone(),
        synapses: Vec::with_capacity(table.rows.len()),
        left_out: Vec::new(),
        scale: opts.scale,
        limit_um: limit,
    };
    for (r, p) in table.rows.iter().zip(placed) {
        let (node, point, d) = p.map_err(|m| row_err(r.line, m))?;
        if d > limit {
            if !opts.skip_far {
                return Err(row_err(
                    r.line,
                    format!(
                        "the synapse lies {d:.3} µm from the cell (limit {limit} µm); check the units (--scale) or list and leave out such synapses (--skip-far)"
                    ),
                ));
            }
            out.left_out.push(super::LeftOut {
                line: r.line,
                input: r.input,
                distance_um: d,
            });
            continue;
        }
        out.synapses.push(Synapse {
            line: r.line,
            input: r.input,
            weight: r.weight,
            node,
            point,
            distance_um: d,
        });
    }
    if out.synapses.is_empty() {
        return Err(SynapseError::Table {
            file: file.clone(),
            message: format!(
                "all {} synapses lie farther than {limit} µm from the cell; check the units (--scale)",
                table.rows.len()
            ),
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn many_points_at_one_place_do_not_trouble_the_index() {
        // 3000 points on one spot (a k-d tree splitting on equal values must cope)
        let mut swc = String::from("1 1 0 0 0 5 -1\n");
        for i in 2..=3000 {
            swc.push_str(&format!("{i} 3 10 0 0 1 {}\n", i - 1));
        }
        let m = Morphology::parse(&swc, "spot.swc").unwrap();
        let flat = m.flatten();
        let t = super::super::parse_table(b"input,x,y,z\na,10,0,1.5\nb,0,6,0\n", "t.csv").unwrap();
        let s = snap(&t, &m, &flat, &SnapOptions::default()).unwrap();
        assert_eq!(flat.pos[s.synapses[0].node as usize], [10.0, 0.0, 0.0]);
        assert!((s.synapses[0].distance_um - 0.5).abs() < 1e-12);
        // the soma by its surface: 6 µm from the centre of a 5 µm soma is 1 µm out
        assert_eq!(s.synapses[1].node, 0);
        assert!((s.synapses[1].distance_um - 1.0).abs() < 1e-12);
    }
}
