//! A reduced tree as a NeuroML v2 cell (an open standard for simulators).
//!
//! One segment per compartment, the same strict binary tree (segment id = compartment id, the
//! soma is segment 0). Every segment is a cylinder with an explicit proximal point, and the file
//! is meant to be read with this convention (README, "NeuroML"):
//!
//! - length L = |distal − proximal| (µm), diameter d (both points carry the same one);
//! - membrane area A = π·d·L (the side of the cylinder, no end caps);
//! - leak G = A · condDensity and capacitance C = A · specificCapacitance of the segment's group;
//! - the node of a segment is its distal end, and the cable between a segment's parent's node
//!   and its own node is the segment itself: axial conductance g = π·d²/(4·ρ·L), ρ the
//!   resistivity of its group (core-conductor model, Rall 1959). The soma has none.
//!
//! Each compartment is first drawn as its equivalent cylinder under the cell's Rm and Ra (the
//! radius and length that give its g and G: r³ = (g·Ra/π)·(G·Rm/2π), l = G·Rm/(2π·r)). The
//! exporter then measures every segment exactly as a reader will (from the printed coordinates)
//! and, for each of resistivity, leak density and specific capacitance separately, gives a
//! segment whose g, G or C would differ from the tree's by more than 1e-12 (relative) a value of
//! its own (on a group `segment_K`; the others take the cell's value on `all` or
//! `<property>_uniform`). With fitted capacitances that is one capacitance line per segment.

use crate::cable::Params;
use crate::reduce::{Compartment, ReducedTree};
use std::f64::consts::PI;
use std::fmt::Write as _;

/// Why a tree cannot be written as NeuroML.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum NeuromlError {
    #[error("compartment {id}: {what} = {value} cannot be written as a NeuroML segment")]
    BadValue {
        id: u32,
        what: &'static str,
        value: f64,
    },
    #[error("the cell id {0:?} is not a NeuroML id (a letter or _, then letters, digits or _)")]
    BadId(String),
    #[error("resting potential {0} mV is not a finite number")]
    BadRest(f64),
}

/// The resting potential written when none is asked for (mV): the leak's reversal and the
/// initial potential (pollard's own numbers are relative to rest).
pub const DEFAULT_REST_MV: f64 = -65.0;

/// Relative difference above which a segment gets its own group.
const EXACT: f64 = 1e-12;

/// One segment as written: proximal and distal points (µm), diameter (µm), and the resistivity
/// (Ω·cm), leak density (S/cm²) and specific capacitance (µF/cm²) that make it exact.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Segment {
    pub proximal: [f64; 3],
    pub distal: [f64; 3],
    pub diameter_um: f64,
    pub resistivity_ohm_cm: f64,
    pub leak_s_per_cm2: f64,
    pub capacitance_uf_per_cm2: f64,
    /// Which of resistivity, leak density and specific capacitance (in that order) the segment
    /// needs of its own instead of the cell's Ra, 1/Rm and Cm.
    pub own: [bool; 3],
}

impl Segment {
    /// True when the segment needs any property of its own (and so a group of its own).
    pub fn own_group(&self) -> bool {
        self.own.iter().any(|&x| x)
    }

    fn property(&self, k: usize) -> f64 {
        [
            self.resistivity_ohm_cm,
            self.leak_s_per_cm2,
            self.capacitance_uf_per_cm2,
        ][k]
    }
}

/// Length of a segment as a reader computes it from the printed coordinates (µm).
pub fn segment_length_um(s: &Segment) -> f64 {
    let d = [0, 1, 2].map(|k| s.distal[k] - s.proximal[k]);
    (d[0] * d[0] + d[1] * d[1] + d[2] * d[2]).sqrt()
}

fn rel(a: f64, b: f64) -> f64 {
    if a == b {
        0.0
    } else {
        (a - b).abs() / a.abs().max(b.abs())
    }
}

/// Lays out the segments of `tree` (parents first, index = compartment id).
pub fn segments(tree: &ReducedTree) -> Result<Vec<Segment>, NeuromlError> {
    let p = &tree.params;
    // shortest segment drawn: far above the rounding of the coordinates it is added to
    let scale = tree
        .compartments
        .iter()
        .flat_map(|c| c.position_um)
        .fold(
            1.0f64,
            |m, v| if v.is_finite() { m.max(v.abs()) } else { m },
        );
    let l_min_um = 1e-6 * scale;
    let mut out: Vec<Segment> = Vec::with_capacity(tree.len());
    for c in &tree.compartments {
        let gl = c.g_leak_ns * 1e-9;
        let cap = c.capacitance_pf * 1e-12;
        if !(gl.is_finite() && gl >= 0.0) {
            return Err(bad(c, "g_leak_ns", c.g_leak_ns));
        }
        if !(cap.is_finite() && cap >= 0.0) {
            return Err(bad(c, "capacitance_pf", c.capacitance_pf));
        }
        if c.position_um.iter().any(|v| !v.is_finite()) {
            return Err(bad(c, "position_um", f64::NAN));
        }
        let parent = c
            .parent
            .map(|q| (&tree.compartments[q as usize], out[q as usize].distal));
        let (from, dir, len_um, d_um) = first_guess(c, parent, p, l_min_um)?;
        let mut s = Segment {
            proximal: from,
            distal: [0, 1, 2].map(|k| from[k] + dir[k] * len_um),
            diameter_um: d_um,
            resistivity_ohm_cm: p.ra_ohm_cm,
            leak_s_per_cm2: 1.0 / p.rm_ohm_cm2,
            capacitance_uf_per_cm2: p.cm_uf_cm2,
            own: [false; 3],
        };
        fit_properties(&mut s, c, p)?;
        out.push(s);
    }
    Ok(out)
}

fn bad(c: &Compartment, what: &'static str, value: f64) -> NeuromlError {
    NeuromlError::BadValue {
        id: c.id,
        what,
        value,
    }
}

/// The first guess of a compartment's segment (µm): start, unit direction, length, diameter.
/// The root is a cylinder as long as it is wide (the area of a sphere of that diameter);
/// another compartment is the cylinder of Rall 1959's core conductor, from the distal end of
/// its parent's segment (`parent`: the parent compartment and that end) towards its position.
fn first_guess(
    c: &Compartment,
    parent: Option<(&Compartment, [f64; 3])>,
    p: &Params,
    l_min_um: f64,
) -> Result<([f64; 3], [f64; 3], f64, f64), NeuromlError> {
    let um = crate::cable::UM; // cm per µm
    let (rm, ra) = (p.rm_ohm_cm2, p.ra_ohm_cm);
    let g = c.g_axial_ns * 1e-9;
    let gl = c.g_leak_ns * 1e-9;
    let Some((parent, parent_distal)) = parent else {
        let d = if gl > 0.0 {
            (gl * rm / PI).sqrt() / um
        } else {
            1.0
        };
        let from = [
            c.position_um[0] - d / 2.0,
            c.position_um[1],
            c.position_um[2],
        ];
        return Ok((from, [1.0, 0.0, 0.0], d, d));
    };
    if !(g.is_finite() && g > 0.0) {
        return Err(bad(c, "g_axial_ns", c.g_axial_ns));
    }
    let dv = [0, 1, 2].map(|k| c.position_um[k] - parent.position_um[k]);
    let norm = (dv[0] * dv[0] + dv[1] * dv[1] + dv[2] * dv[2]).sqrt();
    let dir = if norm > 0.0 && norm.is_finite() {
        dv.map(|v| v / norm)
    } else {
        [1.0, 0.0, 0.0]
    };
    // Rall 1959's core conductor: g = πr²/(Ra·l) and G = 2πrl/Rm solved for r, l
    let (l, d) = if gl > 0.0 {
        let r = ((g * ra / PI) * (gl * rm / (2.0 * PI))).cbrt();
        (gl * rm / (2.0 * PI * r) / um, 2.0 * r / um)
    } else {
        (1.0, 0.0)
    };
    Ok((parent_distal, dir, l.max(l_min_um), d))
}

/// Measures `s` as the reader will; its diameter then gives the leak with the cell's Rm at that
/// length (or, without leak, the axial conductance with its Ra). A property that the cell's Ra,
/// 1/Rm or Cm cannot make exact gets a value of its own (`own`).
fn fit_properties(s: &mut Segment, c: &Compartment, p: &Params) -> Result<(), NeuromlError> {
    let um = crate::cable::UM; // cm per µm
    let (rm, ra, cm) = (p.rm_ohm_cm2, p.ra_ohm_cm, p.cm_uf_cm2);
    let g = c.g_axial_ns * 1e-9;
    let gl = c.g_leak_ns * 1e-9;
    let cap = c.capacitance_pf * 1e-12;
    let l = segment_length_um(s) * um;
    if !(l > 0.0 && l.is_finite()) {
        return Err(bad(c, "segment length (µm)", l / um));
    }
    if gl > 0.0 {
        s.diameter_um = gl * rm / (PI * l) / um;
    } else if c.parent.is_some() {
        s.diameter_um = (4.0 * ra * l * g / PI).sqrt() / um;
    }
    let d = s.diameter_um * um;
    if !(d > 0.0 && d.is_finite()) {
        return Err(bad(c, "segment diameter (µm)", s.diameter_um));
    }
    let area = PI * d * l;
    let need_leak = gl / area;
    let need_cap = cap / area * 1e6;
    let need_ra = if c.parent.is_some() {
        PI * d * d / (4.0 * g * l)
    } else {
        ra
    };
    s.own = [
        rel(need_ra, ra) > EXACT,
        rel(need_leak, 1.0 / rm) > EXACT,
        rel(need_cap, cm) > EXACT,
    ];
    if s.own[0] {
        s.resistivity_ohm_cm = need_ra;
    }
    if s.own[1] {
        s.leak_s_per_cm2 = need_leak;
    }
    if s.own[2] {
        s.capacitance_uf_per_cm2 = need_cap;
    }
    Ok(())
}

fn is_nml_id(s: &str) -> bool {
    let mut ch = s.chars();
    matches!(ch.next(), Some(c) if c.is_ascii_alphabetic() || c == '_')
        && ch.all(|c| c.is_ascii_alphanumeric() || c == '_')
}

fn xml_text(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace("--", "- -")
}

/// The reduced tree as a NeuroML v2.3 document holding one cell named `cell_id`, with a passive
/// leak reversing at `rest_mv` (also the initial membrane potential). `source` goes into the
/// notes. Numbers are written in the shortest form that reads back to the same double.
pub fn reduced_tree_neuroml(
    tree: &ReducedTree,
    cell_id: &str,
    source: &str,
    rest_mv: f64,
) -> Result<String, NeuromlError> {
    if !is_nml_id(cell_id) {
        return Err(NeuromlError::BadId(cell_id.to_string()));
    }
    if !rest_mv.is_finite() {
        return Err(NeuromlError::BadRest(rest_mv));
    }
    let segs = segments(tree)?;
    let p = &tree.params;
    let mut o = String::with_capacity(400 * segs.len() + 2000);
    let _ = writeln!(o, r#"<?xml version="1.0" encoding="UTF-8"?>"#);
    let _ = writeln!(
        o,
        r#"<neuroml xmlns="http://www.neuroml.org/schema/neuroml2" id="{cell_id}_doc">"#
    );
    let _ = writeln!(
        o,
        "  <notes>Reduced tree of {} ({} compartments), made by pollard {}. Passive membrane: Rm {} ohm cm2, Ra {} ohm cm, Cm {} uF/cm2, leak reversal {} mV. Read every segment as a cylinder of length |distal - proximal| whose node is its distal end: leak = pi d L condDensity, C = pi d L specificCapacitance, axial conductance to the parent's node = pi d^2 / (4 resistivity L).</notes>",
        xml_text(source),
        tree.len(),
        env!("CARGO_PKG_VERSION"),
        p.rm_ohm_cm2,
        p.ra_ohm_cm,
        p.cm_uf_cm2,
        rest_mv
    );
    let _ = writeln!(
        o,
        r#"  <ionChannel id="passive" type="ionChannelPassive" conductance="10pS"/>"#
    );
    let _ = writeln!(o, r#"  <cell id="{cell_id}">"#);
    let _ = writeln!(o, r#"    <morphology id="{cell_id}_morphology">"#);
    let pt = |o: &mut String, tag: &str, x: &[f64; 3], d: f64| {
        let _ = writeln!(
            o,
            r#"        <{tag} x="{:e}" y="{:e}" z="{:e}" diameter="{:e}"/>"#,
            x[0], x[1], x[2], d
        );
    };
    for (c, s) in tree.compartments.iter().zip(&segs) {
        let _ = writeln!(
            o,
            r#"      <segment id="{}" name="{}_{}">"#,
            c.id,
            role_name(c.role),
            c.id
        );
        if let Some(q) = c.parent {
            let _ = writeln!(o, r#"        <parent segment="{q}"/>"#);
        }
        pt(&mut o, "proximal", &s.proximal, s.diameter_um);
        pt(&mut o, "distal", &s.distal, s.diameter_um);
        let _ = writeln!(o, "      </segment>");
    }
    write_groups(&mut o, &segs);
    let _ = writeln!(o, "    </morphology>");
    write_biophysics(&mut o, &segs, &tree.params, cell_id, rest_mv);
    let _ = writeln!(o, "  </cell>");
    let _ = writeln!(o, "</neuroml>");
    Ok(o)
}

/// The three properties: NeuroML element, group name prefix, unit.
const PROPERTIES: [(&str, &str); 3] = [
    ("resistivity", "ohm_cm"),
    ("leak", "S_per_cm2"),
    ("capacitance", "uF_per_cm2"),
];

/// Segment groups: `all`; per property with exceptions, `<property>_uniform` (the segments that
/// take the cell's value); `segment_K` for each segment with a property of its own. So every
/// property's groups partition the segments.
fn write_groups(o: &mut String, segs: &[Segment]) {
    let members = |o: &mut String, id: &str, ks: &mut dyn Iterator<Item = usize>| {
        let _ = writeln!(o, r#"      <segmentGroup id="{id}">"#);
        for k in ks {
            let _ = writeln!(o, r#"        <member segment="{k}"/>"#);
        }
        let _ = writeln!(o, "      </segmentGroup>");
    };
    members(o, "all", &mut (0..segs.len()));
    members(o, "soma_group", &mut std::iter::once(0));
    for (p, (name, _)) in PROPERTIES.iter().enumerate() {
        if segs.iter().any(|s| s.own[p]) && segs.iter().any(|s| !s.own[p]) {
            let id = format!("{name}_uniform");
            members(o, &id, &mut (0..segs.len()).filter(|&k| !segs[k].own[p]));
        }
    }
    for (k, _) in segs.iter().enumerate().filter(|(_, s)| s.own_group()) {
        members(o, &format!("segment_{k}"), &mut std::iter::once(k));
    }
}

/// The (group, value) lines of property `p`: the cell's value on `all` or on
/// `<property>_uniform`, then each segment that has its own.
fn property_lines(segs: &[Segment], p: usize, cell_value: f64) -> Vec<(String, f64)> {
    let name = PROPERTIES[p].0;
    let n_own = segs.iter().filter(|s| s.own[p]).count();
    let mut out = Vec::with_capacity(n_own + 1);
    if n_own == 0 {
        out.push(("all".to_string(), cell_value));
    } else if n_own < segs.len() {
        out.push((format!("{name}_uniform"), cell_value));
    }
    for (k, s) in segs.iter().enumerate().filter(|(_, s)| s.own[p]) {
        out.push((format!("segment_{k}"), s.property(p)));
    }
    out
}

fn write_biophysics(o: &mut String, segs: &[Segment], p: &Params, cell_id: &str, rest_mv: f64) {
    let _ = writeln!(o, "    <biophysicalProperties id=\"{cell_id}_biophysics\">");
    let _ = writeln!(o, "      <membraneProperties>");
    for (g, v) in property_lines(segs, 1, 1.0 / p.rm_ohm_cm2) {
        let _ = writeln!(
            o,
            r#"        <channelDensity id="leak_{g}" ionChannel="passive" condDensity="{v:e} S_per_cm2" erev="{rest_mv:e} mV" segmentGroup="{g}" ion="non_specific"/>"#
        );
    }
    for (g, v) in property_lines(segs, 2, p.cm_uf_cm2) {
        let _ = writeln!(
            o,
            r#"        <specificCapacitance value="{v:e} uF_per_cm2" segmentGroup="{g}"/>"#
        );
    }
    let _ = writeln!(
        o,
        r#"        <initMembPotential value="{rest_mv:e} mV" segmentGroup="all"/>"#
    );
    let _ = writeln!(o, "      </membraneProperties>");
    let _ = writeln!(o, "      <intracellularProperties>");
    for (g, v) in property_lines(segs, 0, p.ra_ohm_cm) {
        let _ = writeln!(
            o,
            r#"        <resistivity value="{v:e} ohm_cm" segmentGroup="{g}"/>"#
        );
    }
    let _ = writeln!(o, "      </intracellularProperties>");
    let _ = writeln!(o, "    </biophysicalProperties>");
}

fn role_name(r: crate::reduce::Role) -> &'static str {
    use crate::reduce::Role;
    match r {
        Role::Soma => "soma",
        Role::BranchPoint => "branch",
        Role::Tip => "tip",
        Role::Junction => "junction",
        Role::SomaLeaf => "soma_second_child",
        Role::SectionPoint => "section_point",
    }
}

/// A NeuroML id made from a file name: its stem with every other character turned into `_`,
/// prefixed with `cell_` when it would not start with a letter.
pub fn cell_id_from(path: &str) -> String {
    let stem = std::path::Path::new(path)
        .file_stem()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_default();
    let stem = stem.split('.').next().unwrap_or("").to_string();
    let id: String = stem
        .chars()
        .map(|c| if c.is_ascii_alphanumeric() { c } else { '_' })
        .collect();
    if is_nml_id(&id) {
        id
    } else {
        format!("cell_{id}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cable::Params;
    use crate::reduce::{Compartment, Role};

    fn comp(id: u32, parent: Option<u32>, g: f64, gl: f64, c: f64, pos: [f64; 3]) -> Compartment {
        Compartment {
            id,
            parent,
            children: None,
            g_axial_ns: g,
            g_leak_ns: gl,
            capacitance_pf: c,
            position_um: pos,
            membrane_area_um2: 1.0,
            site_count: 0,
            depth: 0,
            swc_type: 3,
            role: if parent.is_none() {
                Role::Soma
            } else {
                Role::Tip
            },
            swc_line: 0,
        }
    }

    fn tree(cs: Vec<Compartment>) -> ReducedTree {
        ReducedTree {
            point_compartment: vec![],
            site_compartment: vec![],
            site_split: vec![],
            point_split: vec![],
            requested: cs.len(),
            rounded_down: false,
            clamped: false,
            params: Params::default(),
            compartments: cs,
        }
    }

    /// Conductances (nS, pF) of a segment by the documented convention (core conductor,
    /// Rall 1959): A = πdL, G = A·density, C = A·cm, g = πd²/(4ρL).
    fn read_back(s: &Segment) -> (f64, f64, f64) {
        let (l, d) = (segment_length_um(s) * 1e-4, s.diameter_um * 1e-4);
        let a = PI * d * l;
        (
            PI * d * d / (4.0 * s.resistivity_ohm_cm * l) * 1e9,
            a * s.leak_s_per_cm2 * 1e9,
            a * s.capacitance_uf_per_cm2 * 1e6,
        )
    }

    #[test]
    fn every_conductance_is_reproduced_and_odd_ones_get_groups() {
        let tau_ms = Params::default().tau_ms(); // C = τ·G (pF = ms·nS)
        let t = tree(vec![
            comp(0, None, 0.0, 2.0, 2.0 * tau_ms, [100.0, 50.0, 0.0]),
            comp(1, Some(0), 5.0, 0.5, 0.5 * tau_ms, [300.0, 50.0, 0.0]),
            // a stiff junction-like link far from the origin
            comp(2, Some(0), 4e7, 1e-4, 1e-4 * tau_ms, [9000.0, -7000.0, 3.0]),
            // capacitance that is not τ·G, and a compartment without leak
            comp(3, Some(1), 2.0, 0.3, 7.0, [400.0, 80.0, 0.0]),
            comp(4, Some(1), 3.0, 0.0, 0.0, [400.0, 20.0, 0.0]),
        ]);
        let segs = segments(&t).unwrap();
        for (c, s) in t.compartments.iter().zip(&segs) {
            let (g, gl, cap) = read_back(s);
            if c.parent.is_some() {
                assert!(rel(g, c.g_axial_ns) < 1e-11, "{c:?} {s:?} {g}");
            }
            assert!(
                gl == c.g_leak_ns || rel(gl, c.g_leak_ns) < 1e-11,
                "{c:?} {gl}"
            );
            assert!(cap == c.capacitance_pf || rel(cap, c.capacitance_pf) < 1e-11);
            assert!(s.diameter_um > 0.0 && segment_length_um(s) > 0.0);
        }
        // children start where their parent's node is
        assert_eq!(segs[3].proximal, segs[1].distal);
        assert!(!segs[0].own_group() && !segs[1].own_group());
        // C ≠ τG: only the capacitance is its own; no leak: leak and capacitance
        assert_eq!(segs[3].own, [false, false, true]);
        assert_eq!(segs[4].own, [false, true, true]);
        let nml = reduced_tree_neuroml(&t, "test_cell", "a <test> & more", -70.0).unwrap();
        assert!(nml.contains(r#"<segmentGroup id="segment_3">"#));
        // the cell's Ra holds for most segments (the stiff link far out may need its own)
        assert!(nml.contains(r#"<resistivity value="1.5e2 ohm_cm" segmentGroup=""#));
        assert!(nml.matches("<resistivity ").count() <= 2);
        assert!(nml.contains(r#"segmentGroup="capacitance_uniform"/>"#));
        assert!(nml.contains(r#"condDensity="0e0 S_per_cm2""#));
        assert!(nml.contains("a &lt;test&gt; &amp; more"));
        assert_eq!(nml.matches("<segment id=").count(), 5);
    }

    #[test]
    fn refuses_what_it_cannot_write() {
        let t = tree(vec![
            comp(0, None, 0.0, 1.0, 1.0, [0.0; 3]),
            comp(1, Some(0), f64::NAN, 1.0, 1.0, [1.0, 0.0, 0.0]),
        ]);
        assert!(matches!(
            reduced_tree_neuroml(&t, "x", "s", -65.0),
            Err(NeuromlError::BadValue { id: 1, .. })
        ));
        let ok = tree(vec![comp(0, None, 0.0, 1.0, 1.0, [0.0; 3])]);
        assert!(matches!(
            reduced_tree_neuroml(&ok, "1x", "s", -65.0),
            Err(NeuromlError::BadId(_))
        ));
        assert!(reduced_tree_neuroml(&ok, "x", "s", f64::INFINITY).is_err());
        assert_eq!(cell_id_from("dir/my-cell.v2.swc"), "my_cell");
        assert_eq!(cell_id_from("2cells.swc"), "cell_2cells");
    }
}
