//! Shared by several test files: an independent dense solve of a network, and the cells the
//! tests run on. (Each test file compiles this module on its own, so not every file uses all.)
#![allow(dead_code)]

use nalgebra::{DMatrix, DVector};
use pollard::cable::Network;
use pollard::morphology::{Flat, Morphology};
use std::path::PathBuf;

/// The DC nodal conductance matrix of a network: series conductance g[k] between k and its
/// parent, shunt conductance at k (Kirchhoff's current law; common practice, no source).
pub fn dc_matrix(net: &Network) -> DMatrix<f64> {
    let n = net.parent.len();
    let mut y = DMatrix::<f64>::zeros(n, n);
    for k in 0..n {
        y[(k, k)] += net.shunt[k].re;
        if k > 0 {
            let (p, g) = (net.parent[k] as usize, net.g[k].re);
            y[(k, k)] += g;
            y[(p, p)] += g;
            y[(k, p)] -= g;
            y[(p, k)] -= g;
        }
    }
    y
}

/// Columns `cols` of the DC impedance matrix Z = Y⁻¹ (Ω), by nalgebra's dense LU: the voltages
/// at every node for 1 A injected at each node of `cols`.
pub fn dense_z_columns(net: &Network, cols: &[usize]) -> Vec<DVector<f64>> {
    let lu = dc_matrix(net).lu();
    cols.iter()
        .map(|&c| {
            let mut e = DVector::<f64>::zeros(net.parent.len());
            e[c] = 1.0;
            lu.solve(&e).expect("the nodal matrix is not singular")
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
