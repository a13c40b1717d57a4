//! Synapses on a reduced tree: the sparse input × compartment matrix and how each input's
//! repetition survives the reduction.

use super::{Snapped, SynapseError};
use crate::morphology::NONE;
use crate::reduce::{ReducedTree, Reducer};

/// One non-zero entry of the input × compartment matrix.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct MatrixEntry {
    /// Row: index into the inputs.
    pub input: u32,
    /// Column: compartment id.
    pub compartment: u32,
    /// Synapses of this input on this compartment (for a split synapse: the compartment taking
    /// the larger part of it).
    pub count: u32,
    /// Their summed weight, with the parts of split synapses: a synapse split with weight w
    /// gives (1 − w) of its weight here and w to its second compartment's entry (whose count may
    /// then be 0).
    pub weight: f64,
}

/// How one input lands on the reduced tree.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct InputStats {
    pub synapses: u32,
    pub weight: f64,
    /// Distinct compartments its synapses reach.
    pub compartments: u32,
    /// Its synapses that share a compartment with another synapse of the same input.
    pub sharing: u32,
    /// The most of its synapses on one compartment.
    pub most_on_one: u32,
}

/// Over all inputs.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct Summary {
    pub inputs: usize,
    pub synapses: usize,
    pub weight: f64,
    /// Synapses left out as too far from the cell.
    pub left_out: usize,
    /// Non-zero entries of the matrix (input, compartment pairs).
    pub pairs: usize,
    /// Synapses sharing a compartment with another synapse of their input.
    pub sharing: usize,
    /// Inputs with more than one synapse.
    pub inputs_repeated: usize,
    /// Inputs with two or more synapses on one compartment.
    pub inputs_sharing: usize,
}

/// The matrix's shape at one budget (for the budget curve).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct CurveEntry {
    pub compartments: usize,
    pub pairs: usize,
    pub sharing: usize,
}

/// A snapped synapse table mapped onto one reduced tree.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SynapseMap {
    /// Per synapse (in [`Snapped::synapses`] order): its compartment (the larger part when
    /// split).
    pub compartment: Vec<u32>,
    /// Per synapse: the part of it given to a second compartment, if split (from the tree's
    /// point map).
    pub split: Vec<Option<crate::reduce::Split>>,
    /// Non-zero entries, sorted by input, then compartment.
    pub matrix: Vec<MatrixEntry>,
    /// Per input (index = row).
    pub per_input: Vec<InputStats>,
    pub summary: Summary,
    /// Pairs and sharing along the budget curve (empty until [`SynapseMap::with_curve`]).
    pub curve: Vec<CurveEntry>,
}

/// Each synapse's compartment: the compartment holding its snapped point.
fn compartments(snapped: &Snapped, tree: &ReducedTree) -> Result<Vec<u32>, SynapseError> {
    snapped
        .synapses
        .iter()
        .map(|s| {
            let c = tree
                .point_compartment
                .get(s.point as usize)
                .copied()
                .unwrap_or(NONE);
            if c == NONE {
                Err(SynapseError::Row {
                    file: snapped.file.clone(),
                    line: s.line,
                    message: "the synapse's point is not in the reduced tree (left out by the type filter?)"
                        .into(),
                })
            } else {
                Ok(c)
            }
        })
        .collect()
}

/// Synapse indices sorted by (input, compartment), ties in table order.
fn sorted_keys(snapped: &Snapped, comp: &[u32]) -> Vec<(u64, u32)> {
    let mut keys: Vec<(u64, u32)> = snapped
        .synapses
        .iter()
        .zip(comp)
        .enumerate()
        .map(|(i, (s, &c))| (((s.input as u64) << 32) | c as u64, i as u32))
        .collect();
    keys.sort_by_key(|k| k.0); // stable: weights add in table order
    keys
}

/// The matrix's entries, sorted by input, then compartment: each synapse counts on its
/// compartment with its weight, less the part a split gives to its second compartment (which
/// gets an entry of count 0 when the input has no synapse of its own there). Parts add in
/// table order.
fn matrix_entries(snapped: &Snapped, tree: &ReducedTree, comp: &[u32]) -> Vec<MatrixEntry> {
    let mut parts: Vec<MatrixEntry> = Vec::with_capacity(snapped.synapses.len());
    for (s, &c) in snapped.synapses.iter().zip(comp) {
        let split = tree.point_split(s.point as usize);
        let w = split.map_or(0.0, |sp| sp.weight);
        parts.push(MatrixEntry {
            input: s.input,
            compartment: c,
            count: 1,
            weight: s.weight * (1.0 - w),
        });
        if let Some(sp) = split {
            parts.push(MatrixEntry {
                input: s.input,
                compartment: sp.compartment,
                count: 0,
                weight: s.weight * w,
            });
        }
    }
    parts.sort_by_key(|e| (e.input, e.compartment)); // stable
    parts
        .chunk_by(|a, b| (a.input, a.compartment) == (b.input, b.compartment))
        .map(|run| MatrixEntry {
            input: run[0].input,
            compartment: run[0].compartment,
            count: run.iter().map(|e| e.count).sum(),
            weight: run.iter().map(|e| e.weight).sum(),
        })
        .collect()
}

/// (pairs, sharing) of one assignment: one pass over the sorted keys.
fn pairs_and_sharing(keys: &[(u64, u32)]) -> (usize, usize) {
    let (mut pairs, mut sharing) = (0, 0);
    for run in keys.chunk_by(|a, b| a.0 == b.0) {
        pairs += 1;
        if run.len() > 1 {
            sharing += run.len();
        }
    }
    (pairs, sharing)
}

impl SynapseMap {
    /// Maps the synapses onto `tree` (any reduction of the cell they were snapped to).
    pub fn new(snapped: &Snapped, tree: &ReducedTree) -> Result<SynapseMap, SynapseError> {
        let comp = compartments(snapped, tree)?;
        let matrix = matrix_entries(snapped, tree, &comp);
        let mut per_input = vec![InputStats::default(); snapped.inputs.len()];
        for e in &matrix {
            let s = &mut per_input[e.input as usize];
            s.synapses += e.count;
            s.weight += e.weight;
            s.compartments += 1;
            if e.count > 1 {
                s.sharing += e.count;
            }
            s.most_on_one = s.most_on_one.max(e.count);
        }
        let summary = Summary {
            inputs: per_input.iter().filter(|s| s.synapses > 0).count(),
            synapses: snapped.synapses.len(),
            weight: snapped.synapses.iter().map(|s| s.weight).sum(),
            left_out: snapped.left_out.len(),
            pairs: matrix.len(),
            sharing: per_input.iter().map(|s| s.sharing as usize).sum(),
            inputs_repeated: per_input.iter().filter(|s| s.synapses > 1).count(),
            inputs_sharing: per_input.iter().filter(|s| s.sharing > 0).count(),
        };
        Ok(SynapseMap {
            split: snapped
                .synapses
                .iter()
                .map(|s| tree.point_split(s.point as usize))
                .collect(),
            compartment: comp,
            matrix,
            per_input,
            summary,
            curve: Vec::new(),
        })
    }

    /// Adds the budget curve: pairs and sharing at budgets 1, 3, 7, 15, … and the maximum.
    pub fn with_curve(
        mut self,
        snapped: &Snapped,
        reducer: &Reducer,
    ) -> Result<SynapseMap, SynapseError> {
        let max = reducer.max_compartments();
        let mut budgets = Vec::new();
        let mut b = 1usize;
        while b < max {
            budgets.push(b);
            b = 2 * b + 1;
        }
        budgets.push(max);
        for b in budgets {
            let tree = reducer.tree(b);
            let comp = compartments(snapped, &tree)?;
            let (pairs, sharing) = pairs_and_sharing(&sorted_keys(snapped, &comp));
            self.curve.push(CurveEntry {
                compartments: tree.len(),
                pairs,
                sharing,
            });
        }
        Ok(self)
    }
}
