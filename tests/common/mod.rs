//! Shared by several test files: an independent sparse direct solve of a network, and the cells the
//! tests run on. (Each test file compiles this module on its own, so not every file uses all.)
#![allow(dead_code)]

use nalgebra::DVector;
use nalgebra_sparse::factorization::CscCholesky;
use nalgebra_sparse::{CooMatrix, CscMatrix};
use pollard::cable::Network;
use pollard::morphology::{Flat, Morphology};
use std::path::PathBuf;

/// The DC nodal conductance matrix of a network as a sparse matrix: series conductance g[k]
/// between k and its parent, shunt conductance at k (Kirchhoff's current law; common practice,
/// no source). Rows and columns are numbered backwards (node k is row n-1-k), so that every
/// child comes before its parent and the Cholesky factor of this tree matrix has no fill-in
/// (Parter 1961; elimination from the leaves).
pub fn dc_matrix(net: &Network) -> CscMatrix<f64> {
    let n = net.parent.len();
    let row = |k: usize| n - 1 - k;
    let mut y = CooMatrix::<f64>::new(n, n);
    for k in 0..n {
        let mut diag = net.shunt[k].re;
        if k > 0 {
            let (p, g) = (net.parent[k] as usize, net.g[k].re);
            diag += g;
            y.push(row(p), row(p), g);
            y.push(row(k), row(p), -g);
            y.push(row(p), row(k), -g);
        }
        y.push(row(k), row(k), diag);
    }
    CscMatrix::from(&y)
}

/// Columns `cols` of the DC impedance matrix Z = Y⁻¹ (Ω), by nalgebra-sparse's Cholesky
/// factorisation of the symmetric positive definite nodal matrix: the voltages at every node
/// (in the network's own numbering) for 1 A injected at each node of `cols`. Sparse, so the
/// 34,000-point cells of the shared set take milliseconds, not a dense O(n³) solve.
pub fn z_columns(net: &Network, cols: &[usize]) -> Vec<DVector<f64>> {
    let n = net.parent.len();
    let chol = CscCholesky::factor(&dc_matrix(net)).expect("the nodal matrix is positive definite");
    cols.iter()
        .map(|&c| {
            let mut e = nalgebra::DMatrix::<f64>::zeros(n, 1);
            e[(n - 1 - c, 0)] = 1.0;
            let x = chol.solve(&e);
            DVector::from_fn(n, |k, _| x[(n - 1 - k, 0)])
        })
        .collect()
}

/// The real cells kept in tests/data/real, and the shared set (POLLARD_CELLS) when set.
pub fn real_cell_paths() -> Vec<PathBuf> {
    let mut dirs = vec![PathBuf::from(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/real"
    ))];
    if let Ok(extra) = std::env::var("POLLARD_CELLS") {
        dirs.push(extra.into());
    }
    let mut out: Vec<PathBuf> = dirs
        .iter()
        .flat_map(|d| std::fs::read_dir(d).unwrap())
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "swc"))
        .collect();
    out.sort();
    out
}

/// Flat arrays of a morphology ready for cable work, as a user would make them: files in
/// nanometres or voxels scaled to µm (`--scale 0.001`), missing radii set to 0.25 µm
/// (`--default-diameter 0.5`).
pub fn flat_as_a_user_would(m: &Morphology) -> Flat {
    let opts = pollard::cable::PrepOptions {
        scale: m
            .warnings
            .iter()
            .any(|w| w.code == "implausible-size")
            .then_some(0.001),
        default_diameter_um: Some(0.5),
    };
    pollard::cable::prepare(m, &opts).unwrap()
}
