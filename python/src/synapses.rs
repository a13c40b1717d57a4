//! Synapse tables in Python: `reduce(..., synapses=TABLE)` and `ReducedTree.synapse_matrix()`,
//! the input × compartment matrix as arrays ready for a sparse-matrix constructor.

use crate::arr;
use pollard::synapses::{SnapOptions, Snapped, SynapseMap, read_table, snap};
use pyo3::prelude::*;
use pyo3::types::PyDict;
use serde_json::Value;
use std::path::Path;

/// The sparse input × compartment matrix in coordinate form, with the inputs' names (rows).
#[derive(Debug, Clone, Default)]
pub struct Matrix {
    pub inputs: Vec<String>,
    pub shape: [usize; 2],
    pub row: Vec<u32>,
    pub column: Vec<u32>,
    pub count: Vec<u32>,
    pub weight: Vec<f64>,
}

impl Matrix {
    /// The matrix of a table mapped onto a tree of `compartments` compartments.
    pub fn of_map(snapped: &Snapped, map: &SynapseMap, compartments: usize) -> Matrix {
        let m = &map.matrix;
        Matrix {
            inputs: snapped.inputs.clone(),
            shape: [snapped.inputs.len(), compartments],
            row: m.iter().map(|e| e.input).collect(),
            column: m.iter().map(|e| e.compartment).collect(),
            count: m.iter().map(|e| e.count).collect(),
            weight: m.iter().map(|e| e.weight).collect(),
        }
    }

    /// The matrix of a tree JSON's `synapses` member (None when the tree has none).
    pub fn of_json(doc: &Value) -> Result<Option<Matrix>, String> {
        let Some(s) = doc.get("synapses") else {
            return Ok(None);
        };
        let m = &s["matrix"];
        let ints = |f: &str| -> Result<Vec<u32>, String> {
            let v = m[f]
                .as_array()
                .ok_or(format!("synapses.matrix.{f} is not a list"))?;
            v.iter()
                .map(|x| {
                    x.as_u64()
                        .and_then(|x| u32::try_from(x).ok())
                        .ok_or(format!("synapses.matrix.{f} holds {x}, not a count"))
                })
                .collect()
        };
        let weight = m["weight"]
            .as_array()
            .ok_or("synapses.matrix.weight is not a list")?
            .iter()
            .map(|x| {
                x.as_f64()
                    .ok_or(format!("synapses.matrix.weight holds {x}"))
            })
            .collect::<Result<Vec<_>, _>>()?;
        let shape = ints("shape")?;
        let [r, c] = shape[..] else {
            return Err("synapses.matrix.shape is not two numbers".into());
        };
        let inputs = s["inputs"]
            .as_array()
            .ok_or("synapses.inputs is not a list")?
            .iter()
            .map(|i| i["name"].as_str().map(str::to_string))
            .collect::<Option<Vec<_>>>()
            .ok_or("synapses.inputs[].name is not text")?;
        Ok(Some(Matrix {
            inputs,
            shape: [r as usize, c as usize],
            row: ints("row")?,
            column: ints("column")?,
            count: ints("count")?,
            weight,
        }))
    }

    /// As a dict: `row`, `column`, `count` (int64), `weight` (float64), `shape` and `inputs`.
    pub fn to_py<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let i64s = |v: &[u32]| arr(py, v.iter().map(|&x| x as i64).collect());
        let d = PyDict::new(py);
        d.set_item("row", i64s(&self.row))?;
        d.set_item("column", i64s(&self.column))?;
        d.set_item("count", i64s(&self.count))?;
        d.set_item("weight", arr(py, self.weight.clone()))?;
        d.set_item("shape", (self.shape[0], self.shape[1]))?;
        d.set_item("inputs", self.inputs.clone())?;
        Ok(d)
    }
}

/// How `reduce` places a table's synapses.
pub struct TableOptions {
    pub snap_limit_um: f64,
    pub skip_far: bool,
}

/// Reads the synapse table at `path` and places it on the cell (`scale` and `types` as the
/// cell's, as `pollard reduce --synapses` does).
pub fn load(
    path: &Path,
    m: &pollard::Morphology,
    flat: &pollard::Flat,
    scale: Option<f64>,
    types: Option<Vec<i32>>,
    o: &TableOptions,
) -> Result<Snapped, String> {
    let opts = SnapOptions {
        scale,
        limit_um: o.snap_limit_um,
        skip_far: o.skip_far,
        types,
    };
    let table = read_table(path).map_err(|e| e.to_string())?;
    snap(&table, m, flat, &opts).map_err(|e| e.to_string())
}
