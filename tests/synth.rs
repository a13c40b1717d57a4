//! The invented-cell generators: valid trees, deterministic, and the geometry they promise.

use pollard::Morphology;
use pollard::swc::SwcPoint;
use pollard::synth;

fn parse(points: &[SwcPoint], name: &str) -> Morphology {
    let text = synth::to_swc(points, &["test"]);
    match Morphology::parse(&text, name) {
        Ok(m) => m,
        Err(e) => panic!("{name} does not parse: {e}"),
    }
}

#[test]
fn every_generator_gives_a_valid_single_tree() {
    let cells: Vec<(&str, Vec<SwcPoint>)> = vec![
        ("cylinder", synth::cylinder(500.0, 2.0, 50)),
        ("y_junction", synth::y_junction(200.0, 2.0, 150.0, 1.26, 10)),
        ("rall_tree", synth::rall_tree(5, 4.0, 150.0)),
        (
            "symmetric_tree",
            synth::symmetric_tree(3, &[3.0, 2.0, 1.0], &[100.0, 80.0, 60.0], 4),
        ),
        (
            "asymmetric_tree",
            synth::asymmetric_tree(5, 4.0, 150.0, 0.3, 6),
        ),
        ("random_tree", synth::random_tree(3000, 17)),
        ("chain", synth::chain(1000)),
        ("pyramidal", synth::pyramidal(7)),
        ("stellate", synth::stellate(7)),
        ("big_cell", synth::big_cell(50_000, 7)),
    ];
    for (name, pts) in &cells {
        let m = parse(pts, name);
        assert_eq!(m.len(), pts.len(), "{name}");
        assert_eq!(m.trees.len(), 1, "{name}: {:?}", m.warnings);
        assert!(!m.soma.is_empty(), "{name}");
        // no warnings other than the radius-0 soma point of the zero-area cells
        for w in &m.warnings {
            assert_eq!(w.code, "zero-radius", "{name}: unexpected warning {w}");
        }
    }
}

#[test]
fn same_seed_same_bytes_other_seed_other_bytes() {
    type Gen = fn(u64) -> Vec<SwcPoint>;
    let gens: [(&str, Gen); 4] = [
        ("random_tree", |s| synth::random_tree(2000, s)),
        ("pyramidal", synth::pyramidal),
        ("stellate", synth::stellate),
        ("big_cell", |s| synth::big_cell(20_000, s)),
    ];
    for (name, g) in gens {
        let a = synth::to_swc(&g(42), &[]);
        let b = synth::to_swc(&g(42), &[]);
        let c = synth::to_swc(&g(43), &[]);
        assert_eq!(a, b, "{name} is not deterministic");
        assert_ne!(a, c, "{name} ignores its seed");
    }
}

/// Diameter of point i of a parsed morphology.
fn diam(m: &Morphology, i: usize) -> f64 {
    2.0 * m.points[i].radius.expect("generated radii are known")
}

#[test]
fn rall_tree_obeys_the_three_halves_rule_at_every_fork() {
    // Rall 1959: at each fork Σ d_child^{3/2} = d_parent^{3/2}, read back from the written file.
    let pts = synth::rall_tree(6, 4.0, 150.0);
    let m = parse(&pts, "rall.swc");
    let mut sums = vec![0.0; m.len()];
    for i in 1..m.len() {
        let p = m.parent[i] as usize;
        if !m.is_soma[p] {
            sums[p] += diam(&m, i).powf(1.5);
        }
    }
    let mut forks = 0;
    for (i, sum) in sums.iter().enumerate() {
        if m.n_children[i] >= 2 && !m.is_soma[i] {
            forks += 1;
            let ratio = sum / diam(&m, i).powf(1.5);
            assert!(
                (ratio - 1.0).abs() < 1e-12,
                "fork at line {}: {ratio}",
                m.points[i].line
            );
        }
    }
    // 2^(6−1) − 1 = 31 forks in a 6-level binary tree
    assert_eq!(forks, 31);
    assert_eq!(m.metrics().tips, 32);
}

#[test]
fn rall_tree_tips_are_at_one_electrotonic_distance() {
    // λ ∝ √d (Rall 1959), so the electrotonic distance of a tip is Σ l/√d along its path (up
    // to a common factor). Each branch is counted with its own diameter, which the branch's
    // points carry.
    let pts = synth::rall_tree(5, 3.0, 120.0);
    let m = parse(&pts, "rall.swc");
    let mut e = vec![0.0; m.len()];
    let mut tips = Vec::new();
    for i in 1..m.len() {
        let p = m.parent[i] as usize;
        let seg = m.segment(i).expect("neurite point");
        e[i] = e[p] + seg.length / diam(&m, i).sqrt();
        if m.n_children[i] == 0 {
            tips.push(e[i]);
        }
    }
    assert_eq!(tips.len(), 16);
    // the trunk alone: 120/√3; five levels of equal electrotonic length
    let expect = 5.0 * 120.0 / 3.0f64.sqrt();
    for t in tips {
        assert!((t - expect).abs() < 1e-9 * expect, "{t} vs {expect}");
    }
}

#[test]
fn asymmetric_tree_keeps_the_rule_with_unequal_daughters() {
    let pts = synth::asymmetric_tree(5, 4.0, 100.0, 0.3, 5);
    let m = parse(&pts, "asym.swc");
    let mut kids: Vec<Vec<usize>> = vec![Vec::new(); m.len()];
    for i in 1..m.len() {
        let p = m.parent[i] as usize;
        if !m.is_soma[p] {
            kids[p].push(i);
        }
    }
    let mut forks = 0;
    for (i, k) in kids.iter().enumerate() {
        if k.len() == 2 {
            forks += 1;
            let dp = diam(&m, i).powf(1.5);
            let (a, b) = (diam(&m, k[0]).powf(1.5), diam(&m, k[1]).powf(1.5));
            assert!(((a + b) / dp - 1.0).abs() < 1e-12);
            // the shares are 0.3 and 0.7 of the parent's d^{3/2}
            let small = a.min(b) / dp;
            assert!((small - 0.3).abs() < 1e-12, "{small}");
        }
    }
    assert_eq!(forks, 15);
}

#[test]
fn cylinder_matches_its_closed_form_geometry() {
    // A cylinder of length L and diameter d: lateral area πdL, volume πd²L/4; the soma point has
    // radius 0, so it adds no area under our convention.
    let (l, d) = (750.0, 1.6);
    let m = parse(&synth::cylinder(l, d, 75), "cyl.swc");
    let met = m.metrics();
    let pi = std::f64::consts::PI;
    assert_eq!(met.soma_area_um2, 0.0);
    assert!((met.total_length_um - l).abs() < 1e-9);
    assert!((met.membrane_area_um2 - pi * d * l).abs() < 1e-9 * pi * d * l);
    assert!((met.volume_um3 - pi * d * d * l / 4.0).abs() < 1e-9 * l);
    assert_eq!((met.tips, met.branch_points, met.stems), (1, 0, 1));
    let flat = m.flatten();
    assert_eq!(flat.len(), 76);
    assert!(flat.r_prox_um[1..].iter().all(|&r| r == d / 2.0));
}

#[test]
fn y_junction_has_one_fork_and_two_equal_daughters() {
    let m = parse(&synth::y_junction(200.0, 2.0, 150.0, 1.26, 10), "y.swc");
    let met = m.metrics();
    assert_eq!((met.tips, met.branch_points, met.stems), (2, 1, 1));
    assert!((met.total_length_um - 500.0).abs() < 1e-9);
    assert!((met.max_path_distance_um - 350.0).abs() < 1e-9);
}

#[test]
fn random_tree_keeps_its_promises() {
    for seed in 0..20u64 {
        let pts = synth::random_tree(800, seed);
        let m = parse(&pts, "random.swc");
        assert_eq!(m.len(), 800);
        assert_eq!(m.soma.len(), 1);
        let r_soma = m.points[0].radius.unwrap();
        assert!((5.0..=10.0).contains(&r_soma));
        let met = m.metrics();
        assert!((2..=6).contains(&met.stems), "stems {}", met.stems);
        for i in 1..m.len() {
            let r = m.points[i].radius.unwrap();
            assert!((0.2..=3.0).contains(&r), "radius {r}");
            let seg = m.segment(i).unwrap();
            assert!(
                (1.0 - 1e-9..=20.0 + 1e-9).contains(&seg.length),
                "{}",
                seg.length
            );
            assert!([2, 3, 4].contains(&m.points[i].kind));
        }
    }
    // over many seeds, every type and some three-way forks appear
    let mut kinds = std::collections::BTreeSet::new();
    let mut trifurcations = 0;
    for seed in 0..10u64 {
        let m = parse(&synth::random_tree(2000, seed), "random.swc");
        for i in 1..m.len() {
            kinds.insert(m.points[i].kind);
            if m.n_children[i] == 3 {
                trifurcations += 1;
            }
        }
    }
    assert_eq!(kinds.into_iter().collect::<Vec<_>>(), vec![2, 3, 4]);
    assert!(trifurcations > 0);
}

#[test]
fn invented_cells_look_like_cells() {
    for seed in 0..5u64 {
        let p = parse(&synth::pyramidal(seed), "pyr.swc");
        assert!((300..=3000).contains(&p.len()), "pyramidal {}", p.len());
        let met = p.metrics();
        let types: Vec<i32> = met.by_type.iter().map(|t| t.type_code).collect();
        assert_eq!(types, vec![2, 3, 4], "pyramidal types");
        // 4–6 basal stems + apical + axon
        assert!(
            (6..=8).contains(&met.stems),
            "pyramidal stems {}",
            met.stems
        );
        let s = parse(&synth::stellate(seed), "stel.swc");
        assert!((300..=3000).contains(&s.len()), "stellate {}", s.len());
        assert_eq!(s.soma.len(), 3);
        // 5–8 dendrites + axon
        assert!((6..=9).contains(&s.metrics().stems));
        // extent in all three dimensions
        assert!(s.metrics().extent_um.iter().all(|&e| e > 50.0));
    }
}

#[test]
fn a_million_deep_chain_loads() {
    let pts = synth::chain(1_000_000);
    let m = parse(&pts, "chain.swc");
    assert_eq!(m.len(), 1_000_001);
    let met = m.metrics();
    assert_eq!((met.tips, met.branch_points), (1, 0));
    assert!((met.max_path_distance_um - 1_000_000.0).abs() < 1e-6);
    assert_eq!(m.flatten().len(), 1_000_001);
}

#[test]
fn big_cell_keeps_its_promises() {
    for (n, seed) in [(1usize, 1u64), (2, 1), (50, 2), (30_000, 3)] {
        let pts = synth::big_cell(n, seed);
        assert_eq!(pts.len(), n);
        let m = parse(&pts, "big.swc");
        assert_eq!(m.trees.len(), 1);
        assert_eq!(m.soma.len(), 1);
        for i in 1..m.len() {
            let r = m.points[i].radius.unwrap();
            assert!((0.15 - 1e-12..=3.0).contains(&r), "radius {r}");
            assert!([2, 3, 4].contains(&m.points[i].kind));
        }
        if n > 1000 {
            let met = m.metrics();
            assert!((4..=8).contains(&met.stems), "stems {}", met.stems);
            assert!(met.branch_points > 100);
            // grown breadth first: the deepest point is far fewer steps away than the count
            assert!(met.max_branch_order < 60, "order {}", met.max_branch_order);
        }
    }
}
