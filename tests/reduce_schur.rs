//! The two facts every reduced tree keeps exact at DC, checked on the sample cells and the real
//! cells at several budgets (junction cascades of multifurcations included): the soma's input
//! resistance, and the soma's transfer resistance to every compartment named after a point of
//! the cell, Z_k0. Reference: the full kept cell's DC network solved by nalgebra-sparse's Cholesky (the
//! Schur complement of the full network onto the kept nodes keeps exactly these entries of
//! Z = Y⁻¹; Kron reduction), against the reduced tree's own network, solved the same way.
//! Only the public API is used: `Reducer::new`, `tree(b)`, `ReducedTree::network(0.0)`.

mod common;

use common::{flat_as_a_user_would, real_cell_paths, z_columns};
use pollard::Morphology;
use pollard::cable::{Network, Params};
use pollard::reduce::{ReduceOptions, Reducer, Role};
use std::collections::HashMap;

/// Largest relative differences (soma R_in, Z_k0 over named compartments) at each budget.
fn check(name: &str, m: &Morphology, budgets: &[usize]) -> usize {
    let flat = flat_as_a_user_would(m);
    let p = Params::default();
    // default junction links (1e-4 of the radius): they change the cell by about 1e-8, and
    // stiffer links make the reference solve ill-conditioned (its error is ~1e-7 here)
    let reducer = Reducer::new(&flat, &p, &ReduceOptions::default()).unwrap();
    let kept = reducer.kept_flat();
    let full = Network::build(kept, &p, 0.0).unwrap();
    let z_full = &z_columns(&full, &[0])[0];
    let node_of_line: HashMap<usize, usize> =
        kept.line.iter().enumerate().map(|(k, &l)| (l, k)).collect();
    let mut junctions = 0;
    for &b in budgets {
        let tree = reducer.tree(b);
        let z_red = &z_columns(&tree.network(0.0), &[0])[0];
        let rin = (z_red[0] - z_full[0]).abs() / z_full[0];
        assert!(rin < 1e-6, "{name} at {b}: soma R_in off by {rin:e}");
        let mut worst: f64 = 0.0;
        let mut named = 0;
        for c in &tree.compartments {
            let k = match c.role {
                Role::Soma => 0,
                Role::Junction | Role::SomaLeaf => {
                    junctions += 1;
                    continue;
                }
                _ => node_of_line[&c.swc_line],
            };
            named += 1;
            let e = (z_red[c.id as usize] - z_full[k]).abs() / z_full[k];
            worst = worst.max(e);
        }
        assert!(worst < 1e-6, "{name} at {b}: Z_k0 off by {worst:e}");
        assert!(named >= 1);
        eprintln!(
            "{name} budget {b}: R_in {rin:.1e}, worst Z_k0 {worst:.1e} over {named} compartments"
        );
    }
    junctions
}

/// One compartment, budgets in between, and the maximal tree (every node kept).
fn budgets(m: &Morphology) -> Vec<usize> {
    vec![1, 3, 7, 15, 63, 255, 2 * m.len()]
}

fn sample_cells(budgets: &dyn Fn(&Morphology) -> Vec<usize>) -> usize {
    let mut junctions = 0;
    for s in pollard::samples::SAMPLES {
        let m = Morphology::parse(s.text, s.file_name).unwrap();
        junctions += check(s.name, &m, &budgets(&m));
    }
    junctions
}

fn real_cells(budgets: &dyn Fn(&Morphology) -> Vec<usize>) -> usize {
    let mut junctions = 0;
    let paths = real_cell_paths();
    assert!(paths.len() >= 3);
    for path in paths {
        let m = Morphology::read(&path).unwrap();
        junctions += check(&path.display().to_string(), &m, &budgets(&m));
    }
    junctions
}

#[test]
fn sample_cells_at_several_budgets() {
    sample_cells(&budgets);
}

#[test]
fn real_cells_at_several_budgets() {
    // the fly cell has multifurcations: their junction cascades are in the trees checked
    assert!(real_cells(&budgets) > 0);
}
