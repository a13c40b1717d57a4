//! Inputs at the edge of what a reader must survive: huge ids, a 100 MB line, a million roots,
//! a 10-million-point tree. Each ends in a result or a located error, with memory bounded by
//! the file (no array sized by an id).

use pollard::Morphology;
use pollard::swc::Fault;

#[test]
fn an_id_of_ten_to_the_eighteen_is_just_an_id() {
    let text = "1000000000000000000 1 0 0 0 5 -1\n7 3 10 0 0 1 1000000000000000000\n";
    let m = Morphology::parse(text, "big-id.swc").unwrap();
    assert_eq!(m.len(), 2);
    assert_eq!(m.points[1].parent, 1_000_000_000_000_000_000);
}

#[test]
fn a_line_of_100_mb_gives_a_short_located_error() {
    let mut text = String::from("1 1 0 0 0 5 -1\n2 3 ");
    text.push_str(&"7".repeat(100 * 1024 * 1024));
    text.push_str("x 0 0 1 1\n");
    let e = Morphology::parse(&text, "long.swc").unwrap_err();
    assert_eq!(e.line, Some(2));
    assert!(matches!(e.fault, Fault::NotANumber { column: 3, .. }));
    // the message quotes the field, cut short
    assert!(e.to_string().len() < 200, "{} bytes", e.to_string().len());
}

#[test]
fn a_million_roots_load_as_separate_trees() {
    let mut text = String::with_capacity(25_000_000);
    text.push_str("1 1 0 0 0 5 -1\n");
    for i in 2..=1_000_000u32 {
        text.push_str(&format!("{i} 3 {i} 0 0 1 -1\n"));
    }
    let m = Morphology::parse(&text, "roots.swc").unwrap();
    assert_eq!(m.trees.len(), 1_000_000);
    assert!(m.warnings.iter().any(|w| w.code == "several-trees"));
    assert_eq!(m.main_len, 1);
}

#[test]
fn a_ten_million_point_tree_loads() {
    // one unbranched tree of 10⁷ points (the big-file case of the catalogue, generated here
    // rather than stored: about 300 MB of text)
    let n = 10_000_000u32;
    let mut text = String::with_capacity(n as usize * 30);
    text.push_str("1 1 0 0 0 5 -1\n");
    for i in 2..=n {
        let parent = if i % 3 == 0 { i / 2 } else { i - 1 };
        text.push_str(&format!("{i} 3 {} {} 0 1 {parent}\n", i % 1000, i / 1000));
    }
    let m = Morphology::parse(&text, "ten-million.swc").unwrap();
    assert_eq!(m.len(), n as usize);
    assert_eq!(m.trees.len(), 1);
    for i in 1..m.len() {
        assert!((m.parent[i] as usize) < i);
    }
}
