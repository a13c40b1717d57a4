//! The synapse map as the tree JSON's `synapses` member and as three CSV files.

use super::{CurveEntry, InputStats, Snapped, Summary, SynapseMap};

/// The sparse matrix, columnar: ready for a sparse-matrix constructor
/// (`coo_matrix((count, (row, column)), shape=shape)`).
#[derive(Debug, serde::Serialize)]
struct MatrixJson {
    /// [inputs, compartments].
    shape: [usize; 2],
    row: Vec<u32>,
    column: Vec<u32>,
    count: Vec<u32>,
    weight: Vec<f64>,
}

/// Per synapse, columnar, in table order.
#[derive(Debug, serde::Serialize)]
struct SynapsesJson {
    line: Vec<usize>,
    input: Vec<u32>,
    compartment: Vec<u32>,
    /// The compartment taking the smaller part of a split synapse, −1 when not split.
    split_compartment: Vec<i64>,
    /// That smaller part (0 < w ≤ 0.5), 0 when not split.
    split_weight: Vec<f64>,
    snap_distance_um: Vec<f64>,
}

#[derive(Debug, serde::Serialize)]
struct LeftOutJson {
    line: Vec<usize>,
    input: Vec<u32>,
    snap_distance_um: Vec<f64>,
}

#[derive(Debug, serde::Serialize)]
struct InputJson<'a> {
    name: &'a str,
    #[serde(flatten)]
    stats: InputStats,
}

/// The tree JSON's `synapses` member (see `assets/reduced-tree.schema.json`).
#[derive(Debug, serde::Serialize)]
pub struct SynapseJson<'a> {
    table: &'a str,
    scale: Option<f64>,
    snap_limit_um: f64,
    summary: Summary,
    inputs: Vec<InputJson<'a>>,
    matrix: MatrixJson,
    synapses: SynapsesJson,
    left_out: LeftOutJson,
    budget_curve: &'a [CurveEntry],
}

impl<'a> SynapseJson<'a> {
    /// The member for `map`, a map of `snapped` onto a tree of `compartments` compartments.
    pub fn new(snapped: &'a Snapped, map: &'a SynapseMap, compartments: usize) -> SynapseJson<'a> {
        let m = &map.matrix;
        let s = &snapped.synapses;
        let l = &snapped.left_out;
        SynapseJson {
            table: &snapped.file,
            scale: snapped.scale,
            snap_limit_um: snapped.limit_um,
            summary: map.summary,
            inputs: (snapped.inputs.iter().zip(&map.per_input))
                .map(|(name, &stats)| InputJson { name, stats })
                .collect(),
            matrix: MatrixJson {
                shape: [snapped.inputs.len(), compartments],
                row: m.iter().map(|e| e.input).collect(),
                column: m.iter().map(|e| e.compartment).collect(),
                count: m.iter().map(|e| e.count).collect(),
                weight: m.iter().map(|e| e.weight).collect(),
            },
            synapses: SynapsesJson {
                line: s.iter().map(|x| x.line).collect(),
                input: s.iter().map(|x| x.input).collect(),
                compartment: map.compartment.clone(),
                split_compartment: (map.split.iter())
                    .map(|x| x.map_or(-1, |sp| sp.compartment as i64))
                    .collect(),
                split_weight: map
                    .split
                    .iter()
                    .map(|x| x.map_or(0.0, |sp| sp.weight))
                    .collect(),
                snap_distance_um: s.iter().map(|x| x.distance_um).collect(),
            },
            left_out: LeftOutJson {
                line: l.iter().map(|x| x.line).collect(),
                input: l.iter().map(|x| x.input).collect(),
                snap_distance_um: l.iter().map(|x| x.distance_um).collect(),
            },
            budget_curve: &map.curve,
        }
    }
}

fn csv_text(header: &[&str], rows: impl Iterator<Item = Vec<String>>) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    // writing to memory cannot fail
    let _ = w.write_record(header);
    for r in rows {
        let _ = w.write_record(&r);
    }
    String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default()
}

/// The three CSV files: inputs (`row` = matrix row, name, statistics), matrix (row, column,
/// count, weight) and synapses (table line, row, compartment, split compartment and weight —
/// empty and 0 when not split —, snap distance, SWC id of the snapped point; left-out synapses
/// have an empty compartment and `left_out` = 1).
/// `point_ids`: the SWC id of every morphology point.
pub fn synapse_csvs(snapped: &Snapped, map: &SynapseMap, point_ids: &[i64]) -> [String; 3] {
    let inputs = csv_text(
        &[
            "row",
            "input",
            "synapses",
            "weight",
            "compartments",
            "sharing",
            "most_on_one",
        ],
        (snapped.inputs.iter().zip(&map.per_input).enumerate()).map(|(i, (n, s))| {
            vec![
                i.to_string(),
                n.clone(),
                s.synapses.to_string(),
                s.weight.to_string(),
                s.compartments.to_string(),
                s.sharing.to_string(),
                s.most_on_one.to_string(),
            ]
        }),
    );
    let matrix = csv_text(
        &["row", "column", "count", "weight"],
        map.matrix.iter().map(|e| {
            vec![
                e.input.to_string(),
                e.compartment.to_string(),
                e.count.to_string(),
                e.weight.to_string(),
            ]
        }),
    );
    // kept and left-out synapses merged back into table order
    let kept = snapped.synapses.iter().zip(&map.compartment);
    let mut rows: Vec<(usize, Vec<String>)> = (kept.zip(&map.split))
        .map(|((s, c), sp)| {
            let id = point_ids
                .get(s.point as usize)
                .map_or(String::new(), i64::to_string);
            (
                s.line,
                vec![
                    s.line.to_string(),
                    s.input.to_string(),
                    c.to_string(),
                    sp.map_or(String::new(), |x| x.compartment.to_string()),
                    sp.map_or(0.0, |x| x.weight).to_string(),
                    s.distance_um.to_string(),
                    id,
                    "0".into(),
                ],
            )
        })
        .collect();
    rows.extend(snapped.left_out.iter().map(|s| {
        let r = vec![
            s.line.to_string(),
            s.input.to_string(),
            String::new(),
            String::new(),
            "0".into(),
            s.distance_um.to_string(),
            String::new(),
            "1".into(),
        ];
        (s.line, r)
    }));
    rows.sort_by_key(|r| r.0);
    let synapses = csv_text(
        &[
            "line",
            "row",
            "compartment",
            "split_compartment",
            "split_weight",
            "snap_distance_um",
            "swc_id",
            "left_out",
        ],
        rows.into_iter().map(|r| r.1),
    );
    [inputs, matrix, synapses]
}
