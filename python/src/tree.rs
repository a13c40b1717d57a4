//! `pollard.reduce` and the `ReducedTree` it returns (also loaded back with `from_json`).

use crate::synapses::{Matrix, TableOptions, load as table_load};
use crate::{arr, arr3, cell_of, fail, flat_of, json_to_py, work};
use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyArray1, PyArray2};
use pollard::cable::Params;
use pollard::export::{TreeExtras, TreeSource, reduced_tree_json_with, write_atomic};
use pollard::fidelity::{Fidelity, FidelityOptions, default_budgets};
use pollard::morphology::NONE;
use pollard::reduce::{
    CapacitanceRule, Compartment, ReduceOptions, Reducer, Report, Role, Sites, parse_sites_csv,
};
use pollard::synapses::{Snapped, SynapseJson, SynapseMap};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

/// How the tree's JSON is had: made from the reducer, or as it was read.
enum Origin {
    Made {
        reducer: Arc<Reducer>,
        report: Box<Report>,
        morph: Arc<pollard::Morphology>,
        source: String,
        inputs: Vec<PathBuf>,
        /// The full cell's side of the fidelity report, for the options it was made with.
        fidelity: Mutex<Option<(FidelityOptions, Arc<Fidelity>)>>,
        /// The synapse table the tree was reduced for, mapped onto it (budget curve included).
        synapses: Option<Box<(Snapped, SynapseMap)>>,
        /// The cell's `scale` (positions in the file are in µm after it).
        scale: Option<f64>,
    },
    Loaded {
        text: String,
        path: PathBuf,
    },
}

/// A strict binary compartment tree: per compartment (ids parents-first, the soma is 0) numpy
/// arrays of its parent, children, axial and leak conductance (nS), capacitance (pF), position
/// (µm), membrane area (µm²) and depth; the point → compartment and site → compartment maps;
/// the exact DC feed-forward form; and the report.
#[pyclass(module = "pollard._pollard", frozen)]
pub struct ReducedTree {
    tree: pollard::reduce::ReducedTree,
    report_json: String,
    point_ids: Vec<i64>,
    /// The input × compartment matrix, when the tree was reduced for a synapse table.
    matrix: Option<Matrix>,
    origin: Origin,
}

fn opt_index(v: Option<u32>) -> i64 {
    v.map_or(-1, |x| x as i64)
}

#[pymethods]
impl ReducedTree {
    fn __len__(&self) -> usize {
        self.tree.len()
    }
    fn __repr__(&self) -> String {
        format!("<pollard.ReducedTree ({} compartments)>", self.tree.len())
    }
    /// Parent compartment of each compartment, -1 at the soma (int64).
    #[getter]
    fn parent<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        arr(py, self.col(|c| opt_index(c.parent)))
    }
    /// The two children of each compartment, -1 -1 for a leaf (int64, shape (n, 2)).
    #[getter]
    fn children<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<i64>>> {
        let flat: Vec<i64> = self
            .tree
            .compartments
            .iter()
            .flat_map(|c| c.children.map_or([-1, -1], |k| k.map(|x| x as i64)))
            .collect();
        let a = Array2::from_shape_vec((self.tree.len(), 2), flat).map_err(fail)?;
        Ok(a.into_pyarray(py))
    }
    /// Axial conductance to the parent (nS); 0 at the soma.
    #[getter]
    fn g_axial_ns<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        arr(py, self.col(|c| c.g_axial_ns))
    }
    /// Leak conductance (nS).
    #[getter]
    fn g_leak_ns<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        arr(py, self.col(|c| c.g_leak_ns))
    }
    /// Capacitance (pF).
    #[getter]
    fn capacitance_pf<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        arr(py, self.col(|c| c.capacitance_pf))
    }
    /// Position of the point each compartment is named after (µm, shape (n, 3)).
    #[getter]
    fn position_um<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<f64>>> {
        arr3(py, &self.col(|c| c.position_um))
    }
    /// Membrane area of the points mapped to each compartment (µm²).
    #[getter]
    fn membrane_area_um2<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        arr(py, self.col(|c| c.membrane_area_um2))
    }
    /// Links to the soma (int64; the soma 0).
    #[getter]
    fn depth<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        arr(py, self.col(|c| c.depth as i64))
    }
    /// SWC type of the point each compartment is named after (int32).
    #[getter]
    fn swc_type<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i32>> {
        arr(py, self.col(|c| c.swc_type))
    }
    /// What each compartment is named after: soma, branch_point, tip, junction, soma_second_child.
    #[getter]
    fn role(&self) -> Vec<&'static str> {
        self.col(|c| role_name(c.role))
    }
    /// SWC id of every point of the cell (the order of `point_compartment`).
    #[getter]
    fn point_ids<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        arr(py, self.point_ids.clone())
    }
    /// Compartment of every point, -1 for points left out (other trees, type filter).
    #[getter]
    fn point_compartment<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        let v = self.tree.point_compartment.iter();
        arr(
            py,
            v.map(|&c| if c == NONE { -1 } else { c as i64 }).collect(),
        )
    }
    /// Compartment of every synapse site, in the order of the report's sites.
    #[getter]
    fn site_compartment<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        arr(
            py,
            self.tree
                .site_compartment
                .iter()
                .map(|&c| c as i64)
                .collect(),
        )
    }
    /// Per site: the compartment that takes the smaller part of its input when the input is
    /// split between two adjacent compartments (capacitance "timed"), -1 when it is not.
    #[getter]
    fn site_split_compartment<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        let n = self.tree.site_compartment.len();
        let v = (0..n).map(|i| self.tree.site_split(i).map_or(-1, |s| s.compartment as i64));
        arr(py, v.collect())
    }
    /// Per site: that smaller part (0 < w <= 0.5; 0 when not split). The site sits on the link
    /// between the two, at fraction w of its resistance R from its own compartment, which takes
    /// 1 - w of its current; its voltage is the two compartments' mix plus w(1 - w)R times its
    /// current.
    #[getter]
    fn site_split_weight<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        let n = self.tree.site_compartment.len();
        let v = (0..n).map(|i| self.tree.site_split(i).map_or(0.0, |s| s.weight));
        arr(py, v.collect())
    }
    /// The exact DC feed-forward form: `current_ratio_to_parent` (w, NaN at the soma),
    /// `subtree_conductance_ns`, `root_input_conductance_ns` and `compartments_by_depth`. The
    /// soma voltage for injected currents I is
    /// sum_k I_k * prod(w on k's path) / root_input_conductance_ns (pA / nS = mV).
    #[getter]
    fn feed_forward<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let f = self.tree.feed_forward();
        let d = PyDict::new(py);
        d.set_item(
            "current_ratio_to_parent",
            arr(py, f.w.iter().map(|w| w.unwrap_or(f64::NAN)).collect()),
        )?;
        d.set_item("subtree_conductance_ns", arr(py, f.subtree_conductance_ns))?;
        d.set_item("root_input_conductance_ns", f.root_input_conductance_ns)?;
        let layers = PyList::empty(py);
        for l in f.layers {
            layers.append(arr(py, l.into_iter().map(|x| x as i64).collect()))?;
        }
        d.set_item("compartments_by_depth", layers)?;
        Ok(d)
    }
    /// What was lost (the report of `pollard reduce --json`), as a dict.
    #[getter]
    fn report<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        json_to_py(py, &self.report_json)
    }
    /// Writes the tree exactly as `pollard reduce --out` does (atomically; never over the
    /// input cell).
    fn to_json(&self, py: Python<'_>, path: PathBuf) -> PyResult<()> {
        work(py, || {
            let (text, inputs) = self.json_text()?;
            let ins: Vec<&Path> = inputs.iter().map(|p| p.as_path()).collect();
            write_atomic(&path, text.as_bytes(), &ins).map_err(|e| e.to_string())
        })
    }
    /// Writes the tree as a NeuroML v2 cell, as `pollard reduce --neuroml` does.
    #[pyo3(signature = (path, cell_id=None, rest_mv=-65.0))]
    fn to_neuroml(
        &self,
        py: Python<'_>,
        path: PathBuf,
        cell_id: Option<String>,
        rest_mv: f64,
    ) -> PyResult<()> {
        work(py, || {
            let (source, inputs) = match &self.origin {
                Origin::Made { source, inputs, .. } => (source.clone(), inputs.clone()),
                Origin::Loaded { path, .. } => (path.display().to_string(), vec![path.clone()]),
            };
            let id = cell_id.unwrap_or_else(|| pollard::neuroml::cell_id_from(&source));
            let nml = pollard::neuroml::reduced_tree_neuroml(&self.tree, &id, &source, rest_mv)
                .map_err(|e| format!("{}: {e}", path.display()))?;
            let ins: Vec<&Path> = inputs.iter().map(|p| p.as_path()).collect();
            write_atomic(&path, nml.as_bytes(), &ins).map_err(|e| e.to_string())
        })
    }
    /// How well the tree behaves like the cell, per synapse site: the soma EPSP for an alpha
    /// current at each site (peak and time to peak, full cell against this tree) and the DC log
    /// attenuations, summarised (a dict). The full cell is simulated once per tree and set of
    /// options (the slow part); only trees made by `reduce` have the cell to compare with.
    #[pyo3(signature = (epsp_tau_ms=0.5, peak_pa=10.0, dt_ms=None, duration_ms=None, max_duration_ms=500.0))]
    fn fidelity<'py>(
        &self,
        py: Python<'py>,
        epsp_tau_ms: f64,
        peak_pa: f64,
        dt_ms: Option<f64>,
        duration_ms: Option<f64>,
        max_duration_ms: f64,
    ) -> PyResult<Bound<'py, PyAny>> {
        let opts = fidelity_options(epsp_tau_ms, peak_pa, dt_ms, duration_ms, max_duration_ms);
        let text = work(py, || {
            let (f, m) = self.fidelity_of(&opts)?;
            let r = f.report(&self.tree, Some(&m)).map_err(|e| e.to_string())?;
            serde_json::to_string(&r).map_err(|e| e.to_string())
        })?;
        json_to_py(py, &text)
    }
    /// The fidelity summary at several budgets of this tree's reduction (the command `pollard
    /// budgets`): a list of dicts, one per distinct tree, ascending by compartments
    /// (`compartments`, `requested`, `slowest_time_constant_ms`, `polish`, `report` as
    /// `fidelity()` gives it). Default budgets 1, 3, 7, 15, … below the cell's maximum, then the
    /// maximum; each tree is finished by this reduction's capacitance rule on one run of the cell.
    #[pyo3(signature = (budgets=None))]
    fn budget_sweep<'py>(
        &self,
        py: Python<'py>,
        budgets: Option<Vec<usize>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        let text = work(py, || {
            let (f, m) = self.fidelity_of(&FidelityOptions::default())?;
            let Origin::Made { reducer, .. } = &self.origin else {
                return Err("budget_sweep: a tree read from JSON has no cell".into());
            };
            let b = budgets
                .clone()
                .unwrap_or_else(|| default_budgets(reducer.max_compartments()));
            if b.is_empty() {
                return Err("budget_sweep: give at least one budget".into());
            }
            let rows = f
                .budget_sweep(reducer, &b, Some(&m))
                .map_err(|e| e.to_string())?;
            serde_json::to_string(&rows).map_err(|e| e.to_string())
        })?;
        json_to_py(py, &text)
    }
    /// The per-site table behind `fidelity` (same options): a dict of numpy arrays, one entry
    /// per site (swc_id, compartment, epsp_peak_full_mv, epsp_peak_reduced_mv, …).
    #[pyo3(signature = (epsp_tau_ms=0.5, peak_pa=10.0, dt_ms=None, duration_ms=None, max_duration_ms=500.0))]
    fn fidelity_sites<'py>(
        &self,
        py: Python<'py>,
        epsp_tau_ms: f64,
        peak_pa: f64,
        dt_ms: Option<f64>,
        duration_ms: Option<f64>,
        max_duration_ms: f64,
    ) -> PyResult<Bound<'py, PyDict>> {
        let opts = fidelity_options(epsp_tau_ms, peak_pa, dt_ms, duration_ms, max_duration_ms);
        let rows = work(py, || {
            let (f, m) = self.fidelity_of(&opts)?;
            Ok(f.sites(&self.tree, Some(&m)).map_err(|e| e.to_string())?.0)
        })?;
        let d = PyDict::new(py);
        let f64s = |g: &dyn Fn(&pollard::fidelity::SiteFidelity) -> f64| {
            arr(py, rows.iter().map(g).collect::<Vec<f64>>())
        };
        d.set_item(
            "swc_id",
            arr(py, rows.iter().map(|r| r.swc_id.unwrap_or(-1)).collect()),
        )?;
        d.set_item(
            "swc_line",
            arr(py, rows.iter().map(|r| r.swc_line as i64).collect()),
        )?;
        d.set_item(
            "compartment",
            arr(py, rows.iter().map(|r| r.compartment as i64).collect()),
        )?;
        d.set_item("epsp_peak_full_mv", f64s(&|r| r.epsp_peak_full_mv))?;
        d.set_item("epsp_peak_reduced_mv", f64s(&|r| r.epsp_peak_reduced_mv))?;
        d.set_item("epsp_peak_error_np", f64s(&|r| r.epsp_peak_error_np))?;
        d.set_item("time_to_peak_full_ms", f64s(&|r| r.time_to_peak_full_ms))?;
        d.set_item(
            "time_to_peak_reduced_ms",
            f64s(&|r| r.time_to_peak_reduced_ms),
        )?;
        d.set_item(
            "attenuation_to_soma_full_np",
            f64s(&|r| r.ln_attenuation_to_soma_full),
        )?;
        d.set_item(
            "attenuation_to_soma_reduced_np",
            f64s(&|r| r.ln_attenuation_to_soma_reduced),
        )?;
        d.set_item(
            "attenuation_from_soma_full_np",
            f64s(&|r| r.ln_attenuation_from_soma_full),
        )?;
        d.set_item(
            "attenuation_from_soma_reduced_np",
            f64s(&|r| r.ln_attenuation_from_soma_reduced),
        )?;
        Ok(d)
    }
    /// The input × compartment matrix of the synapse table the tree was reduced for (a dict):
    /// `row` (input), `column` (compartment), `count` (synapses) and `weight` (their summed
    /// weight) as numpy arrays, one entry per non-zero pair, sorted by row then column; `shape`
    /// (inputs, compartments); `inputs`, the inputs' names by row. Ready for
    /// `scipy.sparse.coo_matrix((count, (row, column)), shape=shape)`.
    fn synapse_matrix<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        match &self.matrix {
            Some(m) => m.to_py(py),
            None => Err(fail(
                "synapse_matrix: the tree was reduced without a synapse table (reduce(cell, n, synapses=TABLE))",
            )),
        }
    }
    /// Reads a tree written by `pollard reduce --out` or `to_json`.
    #[staticmethod]
    fn from_json(py: Python<'_>, path: PathBuf) -> PyResult<ReducedTree> {
        work(py, || {
            load(&path).map_err(|e| format!("{}: {e}", path.display()))
        })
    }
}

impl ReducedTree {
    fn col<T>(&self, f: impl Fn(&Compartment) -> T) -> Vec<T> {
        self.tree.compartments.iter().map(f).collect()
    }

    fn json_text(&self) -> Result<(String, Vec<PathBuf>), String> {
        match &self.origin {
            Origin::Made {
                reducer,
                report,
                morph,
                source,
                inputs,
                synapses,
                scale,
                ..
            } => {
                let ids: Vec<i64> = morph.points.iter().map(|p| p.id).collect();
                let pos = pollard::export::point_positions_um(morph, *scale);
                let src = TreeSource {
                    source,
                    point_ids: &ids,
                    point_pos: &pos,
                };
                // the fidelity summary with the defaults of `pollard reduce`, so that the file
                // is the command's byte for byte
                let (f, m) = self.fidelity_of(&FidelityOptions::default())?;
                let fid = f.report(&self.tree, Some(&m)).map_err(|e| e.to_string())?;
                let extras = TreeExtras::<()> {
                    fidelity: Some(&fid),
                    synapses: synapses
                        .as_deref()
                        .map(|(s, m)| SynapseJson::new(s, m, self.tree.len())),
                    ..TreeExtras::default()
                };
                let text = reduced_tree_json_with(&src, reducer, &self.tree, report, extras, true)
                    .map_err(|e| e.to_string())?;
                Ok((text, inputs.clone()))
            }
            Origin::Loaded { text, path } => Ok((text.clone(), vec![path.clone()])),
        }
    }
}

fn fidelity_options(
    tau_ms: f64,
    peak_pa: f64,
    dt_ms: Option<f64>,
    duration_ms: Option<f64>,
    max_duration_ms: f64,
) -> FidelityOptions {
    FidelityOptions {
        tau_ms,
        peak_pa,
        dt_ms,
        duration_ms,
        max_duration_ms,
        ..FidelityOptions::default()
    }
}

impl ReducedTree {
    /// The full cell's fidelity run for `opts` (made once, then kept) and the cell.
    fn fidelity_of(
        &self,
        opts: &FidelityOptions,
    ) -> Result<(Arc<Fidelity>, Arc<pollard::Morphology>), String> {
        let Origin::Made {
            reducer,
            morph,
            source,
            fidelity,
            ..
        } = &self.origin
        else {
            return Err(
                "fidelity: a tree read from JSON has no cell to compare with; reduce the cell"
                    .into(),
            );
        };
        opts.validate().map_err(|e| format!("fidelity: {e}"))?;
        let mut slot = fidelity.lock().unwrap_or_else(|p| p.into_inner());
        if let Some((o, f)) = slot.as_ref()
            && o == opts
        {
            return Ok((f.clone(), morph.clone()));
        }
        let f = Arc::new(Fidelity::new(reducer, opts).map_err(|e| format!("{source}: {e}"))?);
        *slot = Some((*opts, f.clone()));
        Ok((f, morph.clone()))
    }
}

fn role_name(r: Role) -> &'static str {
    match r {
        Role::Soma => "soma",
        Role::BranchPoint => "branch_point",
        Role::Tip => "tip",
        Role::Junction => "junction",
        Role::SomaLeaf => "soma_second_child",
        Role::SectionPoint => "section_point",
    }
}

/// The site list as the text `parse_sites_csv` reads: a path, SWC ids, or x,y,z positions.
fn sites_text(sites: &Bound<'_, PyAny>) -> PyResult<(String, Option<PathBuf>)> {
    if let Ok(ids) = sites.extract::<Vec<i64>>() {
        let t: Vec<String> = ids.iter().map(|i| i.to_string()).collect();
        return Ok((t.join("\n"), None));
    }
    if let Ok(xyz) = sites.extract::<Vec<[f64; 3]>>() {
        let t: Vec<String> = xyz
            .iter()
            .map(|p| format!("{:?},{:?},{:?}", p[0], p[1], p[2]))
            .collect();
        return Ok((t.join("\n"), None));
    }
    if let Ok(p) = sites.extract::<PathBuf>() {
        let text = std::fs::read_to_string(&p)
            .map_err(|e| fail(format!("{}: cannot read the site list: {e}", p.display())))?;
        return Ok((text, Some(p)));
    }
    Err(fail(
        "sites: expected a path to a site list, a list of SWC ids, or a list of (x, y, z)",
    ))
}

/// Reduces a cell to a strict binary compartment tree of `compartments` compartments (the
/// command `pollard reduce`; `split_inputs=False` is its `--one-compartment-per-site`).
#[pyfunction]
#[pyo3(signature = (cell, compartments, sites=None, types=None, rm=20000.0, ra=150.0, cm=1.0, impedance_freq=100.0, junction_fraction=1e-4, capacitance="timed", scale=None, default_diameter=None, synapses=None, snap_limit=pollard::synapses::DEFAULT_SNAP_LIMIT_UM, skip_far=false, split_inputs=true))]
#[allow(clippy::too_many_arguments)]
pub fn reduce(
    py: Python<'_>,
    cell: &Bound<'_, PyAny>,
    compartments: usize,
    sites: Option<&Bound<'_, PyAny>>,
    types: Option<Vec<i32>>,
    rm: f64,
    ra: f64,
    cm: f64,
    impedance_freq: f64,
    junction_fraction: f64,
    capacitance: &str,
    scale: Option<f64>,
    default_diameter: Option<f64>,
    synapses: Option<PathBuf>,
    snap_limit: f64,
    skip_far: bool,
    split_inputs: bool,
) -> PyResult<ReducedTree> {
    if sites.is_some() && synapses.is_some() {
        return Err(fail(
            "reduce: give sites or synapses, not both (a synapse table's synapses are the sites)",
        ));
    }
    let table_opts = TableOptions {
        snap_limit_um: snap_limit,
        skip_far,
    };
    let capacitance = match capacitance {
        "fitted" => CapacitanceRule::Fitted,
        "uniform" => CapacitanceRule::Uniform,
        "timed" => CapacitanceRule::Timed,
        other => {
            return Err(fail(format!(
                "capacitance: {other:?} is not \"fitted\", \"uniform\" or \"timed\""
            )));
        }
    };
    let (m, prep) = cell_of(py, cell, scale, default_diameter)?;
    let site_text = sites.map(sites_text).transpose()?;
    let params = Params {
        rm_ohm_cm2: rm,
        ra_ohm_cm: ra,
        cm_uf_cm2: cm,
    };
    work(py, move || {
        let name = m.source.clone();
        let flat = flat_of(&m, &prep)?;
        let mut inputs = vec![PathBuf::from(&name)];
        let snapped = synapses
            .as_ref()
            .map(|p| table_load(p, &m, &flat, prep.scale, types.clone(), &table_opts))
            .transpose()?;
        inputs.extend(synapses.iter().cloned());
        let sites = match (&site_text, &snapped) {
            (_, Some(s)) => s.sites(),
            (None, None) => Sites::Default,
            (Some((text, file)), None) => {
                let label = file
                    .as_ref()
                    .map_or("sites".to_string(), |p| p.display().to_string());
                inputs.extend(file.iter().cloned());
                Sites::List(parse_sites_csv(text, &m, &flat).map_err(|e| format!("{label}: {e}"))?)
            }
        };
        let opts = ReduceOptions {
            types,
            sites,
            freq_hz: impedance_freq,
            junction_length_fraction: junction_fraction,
            capacitance,
            split_inputs,
        };
        let reducer = Reducer::new(&flat, &params, &opts).map_err(|e| format!("{name}: {e}"))?;
        let mut tree = reducer.tree(compartments);
        // `timed`: polished on the full cell's run with `pollard reduce`'s fidelity options,
        // kept for the tree's `fidelity` and `to_json` (which use those options too)
        let fidelity = if capacitance == CapacitanceRule::Timed {
            let o = FidelityOptions::default();
            let f = Fidelity::new(&reducer, &o).map_err(|e| format!("{name}: {e}"))?;
            f.apply_capacitance_rule(&mut tree)
                .map_err(|e| format!("{name}: {e}"))?;
            Some((o, Arc::new(f)))
        } else {
            None
        };
        let report = reducer.report(&tree).map_err(|e| format!("{name}: {e}"))?;
        let report_json = serde_json::to_string(&report).map_err(|e| e.to_string())?;
        let synapses = match snapped {
            Some(s) => {
                let map = SynapseMap::new(&s, &tree)
                    .and_then(|mp| mp.with_curve(&s, &reducer))
                    .map_err(|e| e.to_string())?;
                Some(Box::new((s, map)))
            }
            None => None,
        };
        let matrix = synapses
            .as_deref()
            .map(|(s, mp)| Matrix::of_map(s, mp, tree.len()));
        Ok(ReducedTree {
            tree,
            report_json,
            point_ids: m.points.iter().map(|p| p.id).collect(),
            matrix,
            origin: Origin::Made {
                reducer: Arc::new(reducer),
                report: Box::new(report),
                morph: m,
                source: name,
                inputs,
                fidelity: Mutex::new(fidelity),
                synapses,
                scale: prep.scale,
            },
        })
    })
}

fn num(v: &Value, what: &str) -> Result<f64, String> {
    v.as_f64()
        .ok_or_else(|| format!("{what} is not a number: {v}"))
}

fn int(v: &Value, what: &str) -> Result<u64, String> {
    v.as_u64()
        .ok_or_else(|| format!("{what} is not a whole number: {v}"))
}

/// A site's or point's split (absent or null: none); its weight must lie in (0, 0.5].
fn split_of(v: &Value, what: &str) -> Result<Option<pollard::reduce::Split>, String> {
    if v.is_null() {
        return Ok(None);
    }
    let weight = num(&v["weight"], &format!("{what}.weight"))?;
    if !(weight > 0.0 && weight <= 0.5) {
        return Err(format!("{what}.weight = {weight} is outside (0, 0.5]"));
    }
    let compartment = int(&v["compartment"], &format!("{what}.compartment"))?;
    let compartment =
        u32::try_from(compartment).map_err(|_| format!("{what}.compartment is too large"))?;
    Ok(Some(pollard::reduce::Split {
        compartment,
        weight,
    }))
}

fn role_of(s: &str) -> Result<Role, String> {
    Ok(match s {
        "soma" => Role::Soma,
        "branch_point" => Role::BranchPoint,
        "tip" => Role::Tip,
        "junction" => Role::Junction,
        "soma_second_child" => Role::SomaLeaf,
        "section_point" => Role::SectionPoint,
        _ => return Err(format!("unknown compartment role {s:?}")),
    })
}

fn compartment(c: &Value, k: usize) -> Result<Compartment, String> {
    let at = |f: &str| format!("compartment {k}: {f}");
    let get = |f: &str| c.get(f).ok_or_else(|| at(&format!("{f} is missing")));
    let parent = match get("parent")? {
        Value::Null => None,
        v => Some(int(v, &at("parent"))? as u32),
    };
    let kids = get("children")?
        .as_array()
        .ok_or_else(|| at("children is not a list"))?;
    let children = match kids.as_slice() {
        [] => None,
        [a, b] => Some([int(a, &at("child"))? as u32, int(b, &at("child"))? as u32]),
        _ => return Err(at("has neither 0 nor 2 children")),
    };
    let pos = get("position_um")?
        .as_array()
        .filter(|p| p.len() == 3)
        .ok_or_else(|| at("position_um is not 3 numbers"))?;
    let mut position_um = [0.0; 3];
    for (x, v) in position_um.iter_mut().zip(pos) {
        *x = num(v, &at("position_um"))?;
    }
    Ok(Compartment {
        id: int(get("id")?, &at("id"))? as u32,
        parent,
        children,
        g_axial_ns: num(get("g_axial_ns")?, &at("g_axial_ns"))?,
        g_leak_ns: num(get("g_leak_ns")?, &at("g_leak_ns"))?,
        capacitance_pf: num(get("capacitance_pf")?, &at("capacitance_pf"))?,
        position_um,
        membrane_area_um2: num(get("membrane_area_um2")?, &at("membrane_area_um2"))?,
        site_count: int(get("site_count")?, &at("site_count"))? as u32,
        depth: int(get("depth")?, &at("depth"))? as u32,
        swc_type: get("swc_type")?.as_i64().unwrap_or(0) as i32,
        role: role_of(get("role")?.as_str().unwrap_or(""))?,
        swc_line: int(get("swc_line")?, &at("swc_line"))? as usize,
    })
}

/// A reduced-tree JSON file back into a tree (errors name the fault; serde's name the line).
fn load(path: &Path) -> Result<ReducedTree, String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("cannot read the file: {e}"))?;
    let doc: Value = serde_json::from_str(&text).map_err(|e| e.to_string())?;
    if doc.get("format").and_then(Value::as_str) != Some(pollard::export::REDUCED_TREE_FORMAT) {
        return Err(
            "not a pollard reduced tree (its \"format\" is not pollard.reduced-tree)".into(),
        );
    }
    let version = doc.get("schema_version").and_then(Value::as_u64);
    if version != Some(pollard::export::REDUCED_TREE_SCHEMA_VERSION as u64) {
        return Err(format!(
            "schema_version {version:?} is not one this version reads"
        ));
    }
    let field = |f: &str| doc.get(f).ok_or_else(|| format!("{f} is missing"));
    let p = field("parameters")?;
    let params = Params {
        rm_ohm_cm2: num(&p["rm_ohm_cm2"], "parameters.rm_ohm_cm2")?,
        ra_ohm_cm: num(&p["ra_ohm_cm"], "parameters.ra_ohm_cm")?,
        cm_uf_cm2: num(&p["cm_uf_cm2"], "parameters.cm_uf_cm2")?,
    };
    let comps = field("compartments")?
        .as_array()
        .ok_or("compartments is not a list")?;
    let compartments = comps
        .iter()
        .enumerate()
        .map(|(k, c)| compartment(c, k))
        .collect::<Result<Vec<_>, _>>()?;
    for (k, c) in compartments.iter().enumerate() {
        if c.id as usize != k
            || c.parent.is_some_and(|q| q as usize >= k)
            || (k == 0) != c.parent.is_none()
        {
            return Err(format!(
                "compartment {k}: ids are not parents-first from the soma"
            ));
        }
    }
    let points = field("point_map")?;
    let ids = points["swc_id"]
        .as_array()
        .ok_or("point_map.swc_id is not a list")?;
    let point_ids = ids
        .iter()
        .map(|v| v.as_i64().ok_or("point_map.swc_id holds a non-integer"))
        .collect::<Result<Vec<_>, _>>()?;
    let pc = points["compartment"]
        .as_array()
        .ok_or("point_map.compartment is not a list")?;
    let point_compartment = pc
        .iter()
        .map(|v| v.as_u64().map_or(NONE, |c| c as u32))
        .collect();
    let sites = field("site_map")?
        .as_array()
        .ok_or("site_map is not a list")?;
    let site_compartment = sites
        .iter()
        .map(|s| int(&s["compartment"], "site_map[].compartment").map(|c| c as u32))
        .collect::<Result<Vec<_>, _>>()?;
    let site_split = sites
        .iter()
        .map(|s| split_of(&s["split"], "site_map[].split"))
        .collect::<Result<Vec<_>, _>>()?;
    let mut point_split = Vec::new();
    if let Some(list) = points.get("splits").and_then(Value::as_array) {
        point_split = vec![None; point_ids.len()];
        for e in list {
            let i = int(&e["point"], "point_map.splits[].point")? as usize;
            let slot = point_split
                .get_mut(i)
                .ok_or("point_map.splits[].point is beyond the point map")?;
            *slot = split_of(e, "point_map.splits[]")?;
        }
    }
    let report = field("report")?.to_string();
    let matrix = Matrix::of_json(&doc)?;
    let tree = pollard::reduce::ReducedTree {
        requested: int(
            &p["compartments_requested"],
            "parameters.compartments_requested",
        )? as usize,
        rounded_down: doc["report"]["rounded_down"].as_bool().unwrap_or(false),
        clamped: doc["report"]["clamped"].as_bool().unwrap_or(false),
        params,
        compartments,
        point_compartment,
        site_compartment,
        site_split: if site_split.iter().any(Option::is_some) {
            site_split
        } else {
            Vec::new()
        },
        point_split,
    };
    if let Some(e) = tree.bad_split() {
        return Err(e);
    }
    Ok(ReducedTree {
        tree,
        report_json: report,
        point_ids,
        matrix,
        origin: Origin::Loaded {
            text,
            path: path.to_path_buf(),
        },
    })
}
