//! The app's data, with no egui in it: the loaded cell, the electrical maps at the current
//! parameters and frequency, the synapse site, the reduced tree at the current budget, and the
//! values that colour both drawings. Tests and benchmarks drive this directly.

pub use super::electrical::Electrical;
pub use super::reduction::{DrawingExtras, Reduction, build_reduction, build_reduction_for};
use crate::cable::Params;
use crate::morphology::{Flat, Morphology, NONE, kind};
use crate::reduce::ReducedTree;
use std::collections::BTreeMap;
use std::sync::Arc;

/// Diameter given to points whose radius is zero or unknown (µm); common practice, no source.
pub const DEFAULT_DIAMETER_UM: f64 = 1.0;

/// A cell as read from disk (or built in), with the things computed once per file.
#[derive(Debug, Clone)]
pub struct Cell {
    /// Short name shown in the title bar (file name or sample name).
    pub name: String,
    /// The file it came from, when it came from one.
    pub path: Option<std::path::PathBuf>,
    pub morph: Morphology,
    /// The whole main tree as flat arrays (what the drawings show).
    pub flat: Flat,
    /// Warnings from reading, one line each.
    pub warnings: Vec<String>,
    /// Sholl profile (radius µm, crossings) at `sholl_step` µm.
    pub sholl: Vec<(f64, usize)>,
    pub sholl_step: f64,
    /// Soma radius for drawing (µm).
    pub soma_radius_um: f64,
    /// Centre and radius of the bounding sphere of the main tree (µm), for framing.
    pub centre: [f64; 3],
    pub extent_radius_um: f64,
    /// Neurite type codes present in the main tree (soma excluded), sorted.
    pub kinds: Vec<i32>,
    /// The factor the file's coordinates and radii were multiplied by (`pollard view --scale`;
    /// None: the file is in µm). Everything here is in µm; a synapse table of the cell is in the
    /// file's units and gets the same factor.
    pub scale: Option<f64>,
}

impl Cell {
    /// Computes the per-file things from a morphology.
    pub fn new(name: String, path: Option<std::path::PathBuf>, morph: Morphology) -> Cell {
        let mut flat = morph.flatten();
        let mut warnings: Vec<String> = morph.warnings.iter().map(|w| w.to_string()).collect();
        let filled = crate::cable::prep::fill_radii(&mut flat, DEFAULT_DIAMETER_UM);
        if filled > 0 {
            warnings.push(format!(
                "{filled} segment end(s) have no usable radius (zero or unknown); they are drawn and computed with a {DEFAULT_DIAMETER_UM} µm diameter"
            ));
        }
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        for p in &flat.pos {
            for c in 0..3 {
                lo[c] = lo[c].min(p[c]);
                hi[c] = hi[c].max(p[c]);
            }
        }
        let centre = if flat.is_empty() {
            [0.0; 3]
        } else {
            [0, 1, 2].map(|c| 0.5 * (lo[c] + hi[c]))
        };
        let mut rad: f64 = 0.0;
        for p in &flat.pos {
            let d = ((p[0] - centre[0]).powi(2)
                + (p[1] - centre[1]).powi(2)
                + (p[2] - centre[2]).powi(2))
            .sqrt();
            rad = rad.max(d);
        }
        let soma_radius_um = (flat.soma_area_um2 / (4.0 * std::f64::consts::PI)).sqrt();
        let rad = rad.max(soma_radius_um).max(1.0);
        let sholl_step = nice_step(rad / 40.0);
        let sholl = morph.sholl(sholl_step);
        let mut kinds: Vec<i32> = flat.kind.iter().skip(1).copied().collect();
        kinds.sort_unstable();
        kinds.dedup();
        Cell {
            name,
            path,
            morph,
            flat,
            warnings,
            sholl,
            sholl_step,
            soma_radius_um,
            centre,
            extent_radius_um: rad,
            kinds,
            scale: None,
        }
    }

    /// [`Cell::new`] for a file whose units are not µm: coordinates, radii and path distances
    /// are multiplied by `scale` first (as `--scale` does for the commands).
    pub fn new_scaled(
        name: String,
        path: Option<std::path::PathBuf>,
        mut morph: Morphology,
        scale: Option<f64>,
    ) -> Cell {
        if let Some(s) = scale {
            for p in &mut morph.points {
                p.pos = p.pos.map(|x| x * s);
                p.radius = p.radius.map(|r| r * s);
            }
            for d in &mut morph.path_distance {
                *d *= s;
            }
        }
        Cell {
            scale,
            ..Cell::new(name, path, morph)
        }
    }

    /// Reads and prepares a file (its coordinates and radii × `scale`, when given).
    pub fn read(path: &std::path::Path, scale: Option<f64>) -> anyhow::Result<Cell> {
        if let Some(s) = scale {
            crate::cable::PrepOptions {
                scale: Some(s),
                default_diameter_um: None,
            }
            .validate()?;
        }
        let morph = Morphology::read(path)?;
        let name = path
            .file_name()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| path.display().to_string());
        Ok(Cell::new_scaled(
            name,
            Some(path.to_path_buf()),
            morph,
            scale,
        ))
    }

    /// The built-in demo cell.
    pub fn demo() -> Cell {
        Cell::new(
            crate::samples::SAMPLES[0].file_name.into(),
            None,
            crate::samples::demo(),
        )
    }

    /// Number of nodes in the whole main tree.
    pub fn len(&self) -> usize {
        self.flat.len()
    }

    pub fn is_empty(&self) -> bool {
        self.flat.is_empty()
    }
}

/// 1, 2 or 5 times a power of ten, at least `x`.
pub fn nice_step(x: f64) -> f64 {
    if x.is_nan() || x <= 0.0 || !x.is_finite() {
        return 1.0;
    }
    let p = 10f64.powf(x.log10().floor());
    for m in [1.0, 2.0, 5.0, 10.0] {
        if m * p >= x {
            return m * p;
        }
    }
    10.0 * p
}

/// What colours the drawings.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColourBy {
    /// Voltage at each point for a current injected at the synapse site, relative to the
    /// voltage at the site.
    FromSite,
    /// Voltage at the soma for a current injected at each point, relative to the voltage there.
    ToSoma,
    /// Local input resistance.
    InputResistance,
    Strahler,
    NeuriteType,
    /// Synapses of the open synapse table (of the chosen input, or all) per point and per
    /// compartment (see [`super::synapses`]).
    Synapses,
}

impl ColourBy {
    pub const ALL: [ColourBy; 6] = [
        ColourBy::FromSite,
        ColourBy::ToSoma,
        ColourBy::InputResistance,
        ColourBy::Strahler,
        ColourBy::NeuriteType,
        ColourBy::Synapses,
    ];

    pub fn label(self) -> &'static str {
        match self {
            ColourBy::FromSite => "Voltage, current at the injection point",
            ColourBy::ToSoma => "Voltage at the soma, current at each point",
            ColourBy::InputResistance => "Local input resistance",
            ColourBy::Strahler => "Strahler order",
            ColourBy::NeuriteType => "Neurite type",
            ColourBy::Synapses => "Synapse count (open a table)",
        }
    }

    /// Whether the values are continuous (a colour bar) or categories (a key).
    pub fn is_continuous(self) -> bool {
        matches!(
            self,
            ColourBy::FromSite | ColourBy::ToSoma | ColourBy::InputResistance | ColourBy::Synapses
        )
    }
}

/// Units of attenuation.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LogUnit {
    /// 20·log10 of the voltage ratio.
    Decibel,
    /// Natural log of the voltage ratio.
    Neper,
}

impl LogUnit {
    pub fn from_ln(self, ln: f64) -> f64 {
        match self {
            LogUnit::Decibel => crate::cable::solve::db_from_neper(ln),
            LogUnit::Neper => ln,
        }
    }
    pub fn suffix(self) -> &'static str {
        match self {
            LogUnit::Decibel => "dB",
            LogUnit::Neper => "Np",
        }
    }
}

/// The electrical model: the main tree restricted to the kept neurite types.
#[derive(Debug, Clone)]
pub struct Model {
    pub flat: Flat,
    /// Whole-tree node → model node (NONE if dropped).
    pub of_full: Vec<u32>,
    /// Model node → whole-tree node.
    pub full: Vec<u32>,
    /// Path distance of each model node (µm).
    pub path_distance: Vec<f64>,
    /// Number of morphology points in the model.
    pub points: usize,
}

impl Model {
    /// Keeps node 0 and every node whose type is kept and whose parent is kept.
    pub fn new(cell: &Cell, keep: &dyn Fn(i32) -> bool) -> Model {
        let f = &cell.flat;
        let mut flags = vec![false; f.len()];
        for k in 0..f.len() {
            flags[k] = k == 0 || (keep(f.kind[k]) && flags[f.parent[k] as usize]);
        }
        let (m, of_full) = f.restrict(&flags);
        let full: Vec<u32> = (0..f.len() as u32)
            .filter(|&k| of_full[k as usize] != NONE)
            .collect();
        let path_distance = full
            .iter()
            .map(|&k| cell.morph.path_distance[f.node_point[k as usize] as usize])
            .collect();
        let points = m.point_node.iter().filter(|&&k| k != NONE).count();
        Model {
            points,
            flat: m,
            of_full,
            full,
            path_distance,
        }
    }
}

/// The reduced tree at the current budget with its own maps.
#[derive(Clone)]
pub struct Reduced {
    /// The library's tree (shared with the jobs that need it, e.g. the traces).
    pub tree: Arc<ReducedTree>,
    /// What drawing needs besides the tree.
    pub extras: DrawingExtras,
    pub elec: Electrical,
    /// ln|V_c / V_site| for the current site (injected at the site's compartment, or split as
    /// its point's input is; ≤ 0 but near the split's two ends).
    pub ln_from_site: Vec<f64>,
    /// The compartment the site maps to.
    pub site_comp: Option<usize>,
    /// The tree has its capacitance rule applied: at once for `fitted` and `uniform`; a `timed`
    /// tree is shown fitted until its polish arrives ([`super::polish`]).
    pub finished: bool,
}

impl Reduced {
    pub(super) fn new(
        tree: Arc<ReducedTree>,
        extras: DrawingExtras,
        freq_hz: f64,
        finished: bool,
    ) -> Reduced {
        let elec = Electrical::from_maps(tree.network(freq_hz).maps());
        Reduced {
            tree,
            extras,
            elec,
            ln_from_site: Vec::new(),
            site_comp: None,
            finished,
        }
    }

    pub(super) fn set_site(&mut self, site_model_node: Option<usize>) {
        self.site_comp = site_model_node
            .and_then(|k| self.extras.node_comp.get(k).copied())
            .filter(|&c| c != NONE)
            .map(|c| c as usize);
        let split = site_model_node.and_then(|k| self.extras.node_split.get(k).copied().flatten());
        self.ln_from_site = match (self.site_comp, split) {
            (Some(c), Some(sp)) => self.elec.ln_from_split(c, sp),
            (Some(c), None) => self.elec.ln_from_site(c),
            (None, _) => vec![f64::NAN; self.tree.len()],
        };
    }
}

/// A version number no other state has used: each new state starts a million above the last,
/// so caches keyed on versions never mistake one cell for another.
fn fresh_version() -> u64 {
    static NEXT: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(1);
    NEXT.fetch_add(1 << 20, std::sync::atomic::Ordering::Relaxed)
}

/// Everything the app shows about the current cell, independent of egui.
pub struct CellState {
    pub cell: Arc<Cell>,
    pub params: Params,
    pub freq_hz: f64,
    /// Neurite types kept in the model (type code → kept).
    pub kept: BTreeMap<i32, bool>,
    pub model: Model,
    pub elec: Electrical,
    /// The synapse site: a whole-tree node.
    pub site: Option<usize>,
    /// ln|V/V_site| per model node for the current site.
    pub ln_from_site: Vec<f64>,
    pub colour_by: ColourBy,
    pub unit: LogUnit,
    /// The reduction of the current model (None while it is being built or if unavailable).
    pub reduction: Option<Arc<Reduction>>,
    /// Why there is no reduction (shown in place of the reduced tree).
    pub reduction_note: String,
    pub budget: usize,
    pub reduced: Option<Reduced>,
    /// Bumped whenever the model (and so the geometry drawn) changes.
    pub geometry_version: u64,
    /// Bumped whenever any colour may change.
    pub colour_version: u64,
    /// The open synapse table, placed on this cell.
    pub synapses: Option<super::synapses::Layer>,
    /// The capacitance rule the reduction is built with (default `timed`).
    pub capacitance: crate::reduce::CapacitanceRule,
}

impl CellState {
    /// Prepares the maps of a cell at the given parameters, with every type kept and the site
    /// at the tip farthest from the soma.
    pub fn new(cell: Arc<Cell>, params: Params, freq_hz: f64) -> anyhow::Result<CellState> {
        let kept: BTreeMap<i32, bool> = cell.kinds.iter().map(|&k| (k, true)).collect();
        let model = Model::new(&cell, &|_| true);
        let elec = Electrical::new(&model.flat, &params, freq_hz)?;
        let mut s = CellState {
            cell,
            params,
            freq_hz,
            kept,
            model,
            elec,
            site: None,
            ln_from_site: Vec::new(),
            colour_by: ColourBy::FromSite,
            unit: LogUnit::Decibel,
            reduction: None,
            reduction_note: "preparing the reduction…".into(),
            budget: 63,
            reduced: None,
            geometry_version: fresh_version(),
            colour_version: fresh_version(),
            synapses: None,
            capacitance: crate::reduce::CapacitanceRule::default(),
        };
        let far = s.farthest_tip();
        s.set_site(far);
        Ok(s)
    }

    /// The kept point with the longest path to the soma (a whole-tree node), on a dendrite if
    /// the model has one (a synapse site is usually on a dendrite).
    pub fn farthest_tip(&self) -> Option<usize> {
        let mut best = None;
        let mut best_d = -1.0;
        let has_dendrite = self
            .model
            .flat
            .kind
            .iter()
            .skip(1)
            .any(|&k| k != kind::AXON);
        for (m, &d) in self.model.path_distance.iter().enumerate() {
            if has_dendrite && self.model.flat.kind[m] == kind::AXON {
                continue;
            }
            if d > best_d {
                best_d = d;
                best = Some(self.model.full[m] as usize);
            }
        }
        best
    }

    /// Makes a whole-tree node the synapse site (ignored if the node is not in the model).
    pub fn set_site(&mut self, node: Option<usize>) {
        let m = node
            .and_then(|k| self.model.of_full.get(k).copied())
            .filter(|&m| m != NONE);
        self.site = m.map(|m| self.model.full[m as usize] as usize);
        self.ln_from_site = match m {
            Some(m) => self.elec.ln_from_site(m as usize),
            None => vec![f64::NAN; self.model.flat.len()],
        };
        let mm = m.map(|m| m as usize);
        if let Some(r) = &mut self.reduced {
            r.set_site(mm);
        }
        self.colour_version += 1;
    }

    pub(super) fn site_model(&self) -> Option<usize> {
        self.site
            .and_then(|k| self.model.of_full.get(k).copied())
            .filter(|&m| m != NONE)
            .map(|m| m as usize)
    }

    /// Changes Rm, Ra, Cm or the frequency: recomputes the maps (the reduction depends on the
    /// parameters too; the caller rebuilds it).
    pub fn set_electrical(&mut self, params: Params, freq_hz: f64) -> anyhow::Result<()> {
        let elec = Electrical::new(&self.model.flat, &params, freq_hz)?;
        let params_changed = params != self.params;
        self.params = params;
        self.freq_hz = freq_hz;
        self.elec = elec;
        let site = self.site;
        if params_changed {
            self.reduction = None;
            self.reduced = None;
            self.reduction_note = "updating the reduction…".into();
        } else {
            self.rebuild_reduced();
        }
        self.set_site(site);
        Ok(())
    }

    /// Keeps or drops a neurite type: rebuilds the model and its maps; the reduction is
    /// dropped (the caller rebuilds it).
    pub fn set_kept(&mut self, kind_code: i32, keep: bool) -> anyhow::Result<()> {
        let mut kept = self.kept.clone();
        kept.insert(kind_code, keep);
        let model = Model::new(&self.cell, &|k| kept.get(&k).copied().unwrap_or(true));
        let elec = Electrical::new(&model.flat, &self.params, self.freq_hz)?;
        self.kept = kept;
        self.model = model;
        self.elec = elec;
        self.reduction = None;
        self.reduced = None;
        self.reduction_note = "updating the reduction…".into();
        self.geometry_version += 1;
        let site = if self.site_model().is_some() || self.site.is_none() {
            self.site
        } else {
            None
        };
        let site = site.or_else(|| self.farthest_tip());
        // the old site may have been dropped
        let site = site
            .filter(|&k| self.model.of_full[k] != NONE)
            .or_else(|| self.farthest_tip());
        self.set_site(site);
        Ok(())
    }

    /// Installs a freshly built reduction (budget clamped to its range).
    pub fn set_reduction(&mut self, r: Result<Arc<Reduction>, String>) {
        match r {
            Ok(r) => {
                self.budget = self
                    .budget
                    .clamp(r.min_compartments(), r.max_compartments().max(1));
                self.reduction = Some(r);
                self.reduction_note.clear();
                self.rebuild_reduced();
            }
            Err(e) => {
                self.reduction = None;
                self.reduced = None;
                self.reduction_note = e;
            }
        }
        self.colour_version += 1;
    }

    /// Moves the budget: the reducer replays its collapse order, the reduced maps are solved.
    pub fn set_budget(&mut self, budget: usize) {
        self.budget = budget.max(1);
        self.rebuild_reduced();
    }

    fn rebuild_reduced(&mut self) {
        let n_model = self.model.flat.len();
        self.reduced = self.reduction.as_ref().and_then(|r| {
            let b = self
                .budget
                .clamp(r.min_compartments(), r.max_compartments().max(1));
            let tree = r.tree(b);
            let mut extras =
                DrawingExtras::new(&tree, &self.model.flat, &self.model.path_distance)?;
            extras.node_comp.resize(n_model, NONE);
            let finished = r.rule() != crate::reduce::CapacitanceRule::Timed;
            Some(Reduced::new(tree, extras, self.freq_hz, finished))
        });
        let mm = self.site_model();
        if let Some(r) = &mut self.reduced {
            r.set_site(mm);
        }
        self.colour_version += 1;
    }

    /// The kept neurite types for the reducer (None when every type is kept).
    pub fn kept_types(&self) -> Option<Vec<i32>> {
        if self.kept.values().all(|&on| on) {
            None
        } else {
            let mut v: Vec<i32> = self
                .kept
                .iter()
                .filter(|(_, on)| **on)
                .map(|(k, _)| *k)
                .collect();
            v.push(kind::SOMA);
            Some(v)
        }
    }

    /// The value that colours whole-tree node k (NaN when it is not in the model).
    /// Attenuations are in the chosen log unit; input resistance in MΩ.
    pub fn value_full(&self, k: usize) -> f64 {
        let m = self.model.of_full[k];
        if m == NONE {
            return f64::NAN;
        }
        let m = m as usize;
        match self.colour_by {
            ColourBy::FromSite => self.unit.from_ln(self.ln_from_site[m]),
            ColourBy::ToSoma => self.unit.from_ln(self.elec.ln_to_soma[m]),
            ColourBy::InputResistance => self.elec.input_mohm[m],
            ColourBy::Strahler => {
                self.cell.morph.strahler[self.cell.flat.node_point[k] as usize] as f64
            }
            ColourBy::NeuriteType => self.cell.flat.kind[k] as f64,
            ColourBy::Synapses => super::synapses::value_full(self, k),
        }
    }

    /// The value that colours compartment c.
    pub fn value_comp(&self, c: usize) -> f64 {
        let Some(r) = &self.reduced else {
            return f64::NAN;
        };
        match self.colour_by {
            ColourBy::FromSite => self.unit.from_ln(r.ln_from_site[c]),
            ColourBy::ToSoma => self.unit.from_ln(r.elec.ln_to_soma[c]),
            ColourBy::InputResistance => r.elec.input_mohm[c],
            ColourBy::Strahler => r.extras.strahler[c] as f64,
            ColourBy::NeuriteType => r.tree.compartments[c].swc_type as f64,
            ColourBy::Synapses => super::synapses::value_comp(self, c),
        }
    }

    /// The shared colour range over both trees (finite values only).
    pub fn value_range(&self) -> (f64, f64) {
        let nodes: Vec<f64> = (0..self.cell.flat.len())
            .map(|k| self.value_full(k))
            .collect();
        let comps: Vec<f64> = match &self.reduced {
            Some(r) => (0..r.tree.len()).map(|c| self.value_comp(c)).collect(),
            None => Vec::new(),
        };
        self.range_of(&nodes, &comps)
    }

    /// The colour range of given node and compartment values (finite values only;
    /// attenuations end at 0).
    pub fn range_of(&self, nodes: &[f64], comps: &[f64]) -> (f64, f64) {
        let mut lo = f64::INFINITY;
        let mut hi = f64::NEG_INFINITY;
        for &v in nodes.iter().chain(comps) {
            if v.is_finite() {
                lo = lo.min(v);
                hi = hi.max(v);
            }
        }
        if !lo.is_finite() {
            return (0.0, 1.0);
        }
        if matches!(self.colour_by, ColourBy::FromSite | ColourBy::ToSoma) {
            hi = 0.0;
        }
        if hi - lo < 1e-9 {
            lo = hi - 1.0;
        }
        (lo, hi)
    }

    /// Human-readable description of the colour values.
    pub fn value_label(&self) -> String {
        match self.colour_by {
            ColourBy::FromSite => format!("V / V at the injection point, {}", self.unit.suffix()),
            ColourBy::ToSoma => format!("V at soma / V at point, {}", self.unit.suffix()),
            ColourBy::InputResistance => "input resistance, MΩ".into(),
            ColourBy::Strahler => "Strahler order".into(),
            ColourBy::NeuriteType => "neurite type".into(),
            ColourBy::Synapses => super::synapses::value_label(self),
        }
    }

    /// Facts about whole-tree node k for the hover box.
    pub fn describe_node(&self, k: usize) -> String {
        let f = &self.cell.flat;
        let p = f.node_point[k] as usize;
        let pt = &self.cell.morph.points[p];
        let mut s = format!(
            "point {} ({}), line {}\npath distance {:.1} µm",
            if k == 0 {
                "soma".to_string()
            } else {
                pt.id.to_string()
            },
            crate::morphology::kind_name(f.kind[k]),
            f.line[k],
            self.cell.morph.path_distance[p]
        );
        let m = self.model.of_full[k];
        if m == NONE {
            s.push_str("\nnot in the model (type switched off)");
            return s;
        }
        let m = m as usize;
        s.push_str(&format!(
            "\ninput resistance {:.1} MΩ\nto the soma {:.2} {}",
            self.elec.input_mohm[m],
            self.unit.from_ln(self.elec.ln_to_soma[m]),
            self.unit.suffix()
        ));
        if self.site.is_some() {
            s.push_str(&format!(
                "\nfrom the injection point {:.2} {}",
                self.unit.from_ln(self.ln_from_site[m]),
                self.unit.suffix()
            ));
        }
        s
    }

    /// Facts about compartment c for the hover box.
    pub fn describe_comp(&self, c: usize) -> String {
        let Some(r) = &self.reduced else {
            return String::new();
        };
        let t = &r.tree.compartments[c];
        let mut s = format!("compartment {}\n", t.id);
        if t.parent.is_some() {
            s.push_str(&format!("axial conductance {:.3} nS\n", t.g_axial_ns));
        }
        s.push_str(&format!(
            "leak conductance {:.4} nS\ncapacitance {:.3} pF\narea {:.0} µm²\nstands for {} point(s), {} site(s)\ninput resistance {:.1} MΩ",
            t.g_leak_ns,
            t.capacitance_pf,
            t.membrane_area_um2,
            r.extras.n_points.get(c).copied().unwrap_or(0),
            t.site_count,
            r.elec.input_mohm[c]
        ));
        if r.site_comp.is_some() {
            s.push_str(&format!(
                "\nfrom the injection point {:.2} {}",
                self.unit.from_ln(r.ln_from_site[c]),
                self.unit.suffix()
            ));
        }
        s
    }

    /// (path distance, attenuation) for every model node, in the current log unit, for the
    /// current colouring choice of attenuation (from the site unless "to the soma" is chosen).
    pub fn attenuation_profile(&self) -> (Vec<[f64; 2]>, Vec<[f64; 2]>) {
        let to_soma = self.colour_by == ColourBy::ToSoma;
        let orig = (0..self.model.flat.len())
            .filter_map(|m| {
                let v = if to_soma {
                    self.elec.ln_to_soma[m]
                } else {
                    self.ln_from_site[m]
                };
                v.is_finite()
                    .then(|| [self.model.path_distance[m], self.unit.from_ln(v)])
            })
            .collect();
        let red = match &self.reduced {
            Some(r) => (0..r.tree.len())
                .filter_map(|c| {
                    let v = if to_soma {
                        r.elec.ln_to_soma[c]
                    } else {
                        r.ln_from_site[c]
                    };
                    v.is_finite()
                        .then(|| [r.extras.path_distance[c], self.unit.from_ln(v)])
                })
                .collect(),
            None => Vec::new(),
        };
        (orig, red)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn y_cell() -> Arc<Cell> {
        let text = "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 20 0 0 1 2\n4 3 30 10 0 0.5 3\n5 3 30 -10 0 0.5 3\n6 2 -10 0 0 0.5 1\n";
        let m = Morphology::parse(text, "y.swc").unwrap();
        Arc::new(Cell::new("y".into(), None, m))
    }

    #[test]
    fn site_voltage_ratio_is_one_at_the_site_and_falls_towards_the_soma() {
        let s = CellState::new(y_cell(), Params::default(), 0.0).unwrap();
        let site = s.site.unwrap();
        let m = s.model.of_full[site] as usize;
        assert!(s.ln_from_site[m].abs() < 1e-12);
        // passive cable: voltage falls monotonically from the site towards the soma (Rall 1959)
        assert!(s.ln_from_site[0] < 0.0);
        assert!(s.ln_from_site.iter().all(|v| *v <= 1e-12));
    }

    #[test]
    fn dropping_a_type_removes_its_nodes_and_keeps_the_site_valid() {
        let mut s = CellState::new(y_cell(), Params::default(), 0.0).unwrap();
        let n_all = s.model.flat.len();
        s.set_kept(kind::AXON, false).unwrap();
        assert_eq!(s.model.flat.len(), n_all - 1);
        let site = s.site.unwrap();
        assert_ne!(s.model.of_full[site], NONE);
        let axon = (0..s.cell.flat.len())
            .find(|&k| s.cell.flat.kind[k] == kind::AXON)
            .unwrap();
        assert!(s.value_full(axon).is_nan());
        assert_eq!(s.model.of_full[axon], NONE);
    }

    #[test]
    fn drawing_extras_follow_the_reducers_tree_and_strahler() {
        let s = CellState::new(y_cell(), Params::default(), 0.0).unwrap();
        let r = crate::reduce::Reducer::new(
            &s.model.flat,
            &s.params,
            &crate::reduce::ReduceOptions::default(),
        )
        .unwrap();
        let rt = r.tree(3);
        let t = DrawingExtras::new(&rt, &s.model.flat, &s.model.path_distance).expect("a tree");
        assert_eq!(t.n_points.len(), rt.compartments.len());
        // every model node stands in the compartment the reducer put its point in
        for (k, &c) in t.node_comp.iter().enumerate() {
            let p = s.model.flat.node_point[k] as usize;
            assert_eq!(c, rt.point_compartment[p]);
        }
        assert_eq!(t.n_points.iter().sum::<usize>(), s.model.flat.len());
        // a root with two leaves: orders 2, 1, 1 (Strahler 1957, counted by hand)
        assert_eq!(t.strahler, vec![2, 1, 1]);
    }

    #[test]
    fn a_split_injection_point_maps_as_a_dense_solve_says() {
        // reference: the tree's conductance matrix with the injection point as an extra node x
        // on its link (the link g cut into g/w towards c and g/(1 − w) towards k), inverted by
        // nalgebra; current at x, read at every compartment and at x
        let flat = Cell::demo().flat;
        let red =
            crate::reduce::Reducer::new(&flat, &Params::default(), &Default::default()).unwrap();
        let fid = crate::fidelity::Fidelity::new(&red, &Default::default()).unwrap();
        let mut t = red.tree(15);
        assert!(fid.split_sites(&mut t).unwrap() > 0);
        let elec = Electrical::from_maps(t.network(0.0).maps());
        let n = t.len();
        let mut checked = 0;
        for i in (0..t.site_compartment.len()).step_by(97) {
            let (c, Some(sp)) = (t.site_compartment[i] as usize, t.site_split(i)) else {
                continue;
            };
            let (k, w) = (sp.compartment as usize, sp.weight);
            let mut g = nalgebra::DMatrix::<f64>::zeros(n + 1, n + 1);
            let mut link = |a: usize, b: usize, y: f64| {
                g[(a, a)] += y;
                g[(b, b)] += y;
                g[(a, b)] -= y;
                g[(b, a)] -= y;
            };
            for (j, cj) in t.compartments.iter().enumerate() {
                let Some(p) = cj.parent.map(|p| p as usize) else {
                    continue;
                };
                if (j, p) == (c, k) || (j, p) == (k, c) {
                    link(n, c, cj.g_axial_ns / w);
                    link(n, k, cj.g_axial_ns / (1.0 - w));
                } else {
                    link(j, p, cj.g_axial_ns);
                }
            }
            for (j, cj) in t.compartments.iter().enumerate() {
                g[(j, j)] += cj.g_leak_ns;
            }
            let v = g.try_inverse().unwrap().column(n).into_owned();
            let mine = elec.ln_from_split(c, sp);
            for m in 0..n {
                let want = (v[m] / v[n]).abs().ln();
                assert!(
                    (mine[m] - want).abs() < 1e-7,
                    "site {i} node {m}: {} vs {want}",
                    mine[m]
                );
            }
            checked += 1;
        }
        assert!(checked > 3, "{checked}");
    }

    #[test]
    fn reduced_maps_match_the_reducers_own_dc_site_ratio() {
        // the app's maps of the reduced tree come from its network at the app's frequency
        // (complex sweeps); the tree also has its own real DC solve (site_ratio_dc). Both must
        // agree compartment by compartment, which also checks the site → compartment bookkeeping.
        let cell = Arc::new(Cell::demo());
        let mut s = CellState::new(cell, Params::default(), 0.0).unwrap();
        s.set_reduction(build_reduction(&s.cell, None, &s.params));
        for budget in [1, 7, 31] {
            s.set_budget(budget);
            let red = s.reduced.as_ref().expect("reduced tree");
            let sc = red.site_comp.expect("the site maps to a compartment");
            // every model point belongs to exactly one compartment
            assert_eq!(
                red.extras.n_points.iter().sum::<usize>(),
                s.model.flat.len()
            );
            let r = crate::reduce::Reducer::new(
                &s.model.flat,
                &s.params,
                &crate::reduce::ReduceOptions::default(),
            )
            .unwrap();
            let t = r.tree(budget);
            let id = red.tree.compartments[sc].id as usize;
            let theirs = t.site_ratio_dc(id);
            for c in 0..red.tree.len() {
                let mine = red.ln_from_site[c];
                let other = theirs[red.tree.compartments[c].id as usize].ln();
                assert!(
                    (mine - other).abs() < 1e-9,
                    "budget {budget} c {c}: {mine} vs {other}"
                );
            }
        }
    }
}
