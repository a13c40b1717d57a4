//! Python bindings of pollard: the native module `pollard._pollard`, re-exported by
//! `pollard/__init__.py` (type stubs in `pollard/_pollard.pyi`).
//!
//! Every call that reads, solves or writes runs with the GIL released ([`work`]); library errors
//! and panics alike come out as `pollard.PollardError` (a `ValueError`) whose message names the
//! file, the line where there is one, and the fault, as the command line's one-line errors do.

mod synapses;
mod tree;

use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyArray1, PyArray2};
use pollard::cable::{CellMaps, Params, PrepOptions, prepare};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};
use std::path::PathBuf;
use std::sync::Arc;

pub use tree::ReducedTree;

pyo3::create_exception!(
    _pollard,
    PollardError,
    pyo3::exceptions::PyValueError,
    "A cell, option or file pollard cannot use; the message names the file, the line and the fault."
);

pub(crate) fn fail(msg: impl std::fmt::Display) -> PyErr {
    PollardError::new_err(msg.to_string())
}

/// Runs `f` with the GIL released; an error or a panic inside becomes a `PollardError`.
pub(crate) fn work<T: Send>(
    py: Python<'_>,
    f: impl FnOnce() -> Result<T, String> + Send,
) -> PyResult<T> {
    let r = py.detach(|| std::panic::catch_unwind(std::panic::AssertUnwindSafe(f)));
    match r {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(m)) => Err(fail(m)),
        Err(p) => {
            let what = p
                .downcast_ref::<String>()
                .cloned()
                .or_else(|| p.downcast_ref::<&str>().map(|s| s.to_string()))
                .unwrap_or_default();
            Err(fail(format!("internal error, please report it: {what}")))
        }
    }
}

/// A JSON text as Python objects (dicts, lists, numbers, None).
pub(crate) fn json_to_py<'py>(py: Python<'py>, text: &str) -> PyResult<Bound<'py, PyAny>> {
    py.import("json")?.call_method1("loads", (text,))
}

pub(crate) fn arr<'py, T: numpy::Element>(py: Python<'py>, v: Vec<T>) -> Bound<'py, PyArray1<T>> {
    v.into_pyarray(py)
}

pub(crate) fn arr3<'py>(py: Python<'py>, v: &[[f64; 3]]) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let flat: Vec<f64> = v.iter().flatten().copied().collect();
    let a = Array2::from_shape_vec((v.len(), 3), flat).map_err(fail)?;
    Ok(a.into_pyarray(py))
}

/// A reconstructed cell read from an SWC file: its points in parents-first order (the soma
/// first), as numpy arrays, with its summary metrics and the reader's warnings.
#[pyclass(module = "pollard._pollard", frozen)]
pub struct Morphology {
    pub(crate) m: Arc<pollard::Morphology>,
    pub(crate) prep: PrepOptions,
}

#[pymethods]
impl Morphology {
    /// The file it was read from.
    #[getter]
    fn source(&self) -> String {
        self.m.source.clone()
    }
    /// SWC id of every point (int64).
    #[getter]
    fn ids<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        arr(py, self.m.points.iter().map(|p| p.id).collect())
    }
    /// SWC type code of every point (int32).
    #[getter]
    fn types<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i32>> {
        arr(py, self.m.points.iter().map(|p| p.kind).collect())
    }
    /// Positions (µm, shape (n, 3)), multiplied by `scale` when one was given.
    #[getter]
    fn xyz<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let s = self.prep.scale.unwrap_or(1.0);
        let v: Vec<[f64; 3]> = self.m.points.iter().map(|p| p.pos.map(|x| x * s)).collect();
        arr3(py, &v)
    }
    /// Radii (µm), multiplied by `scale`; where the file says NA: half of `default_diameter`,
    /// or NaN when none was given.
    #[getter]
    fn radii<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        let s = self.prep.scale.unwrap_or(1.0);
        let fill = self.prep.default_diameter_um.map_or(f64::NAN, |d| d / 2.0);
        arr(
            py,
            self.m
                .points
                .iter()
                .map(|p| p.radius.map_or(fill, |r| r * s))
                .collect(),
        )
    }
    /// Index of every point's parent in these arrays, -1 for a root (int64).
    #[getter]
    fn parent<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        let none = pollard::morphology::NONE;
        arr(
            py,
            self.m
                .parent
                .iter()
                .map(|&q| if q == none { -1 } else { q as i64 })
                .collect(),
        )
    }
    /// Line of the file each point is on (int64).
    #[getter]
    fn lines<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
        arr(py, self.m.points.iter().map(|p| p.line as i64).collect())
    }
    /// Summary metrics (points, stems, tips, lengths, areas, Strahler order, per type …).
    #[getter]
    fn metrics<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        let m = self.m.clone();
        let text = work(py, move || {
            serde_json::to_string(&m.metrics()).map_err(|e| e.to_string())
        })?;
        json_to_py(py, &text)
    }
    /// The reader's warnings: dicts with `code`, `line` (or None) and `message`.
    #[getter]
    fn warnings<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyList>> {
        let out = PyList::empty(py);
        for w in &self.m.warnings {
            let d = PyDict::new(py);
            d.set_item("code", w.code)?;
            d.set_item("line", w.line)?;
            d.set_item("message", &w.message)?;
            out.append(d)?;
        }
        Ok(out)
    }
    fn __len__(&self) -> usize {
        self.m.points.len()
    }
    fn __repr__(&self) -> String {
        format!(
            "<pollard.Morphology {} ({} points)>",
            self.m.source,
            self.m.points.len()
        )
    }
}

fn prep_options(scale: Option<f64>, default_diameter: Option<f64>) -> PrepOptions {
    PrepOptions {
        default_diameter_um: default_diameter,
        scale,
    }
}

/// Reads an SWC file (the checks of `pollard inspect`).
#[pyfunction]
#[pyo3(signature = (path, scale=None, default_diameter=None))]
fn read_swc(
    py: Python<'_>,
    path: PathBuf,
    scale: Option<f64>,
    default_diameter: Option<f64>,
) -> PyResult<Morphology> {
    let prep = prep_options(scale, default_diameter);
    let m = work(py, || {
        prep.validate()
            .map_err(|e| format!("{}: {e}", path.display()))?;
        pollard::Morphology::read(&path).map_err(|e| e.to_string())
    })?;
    Ok(Morphology {
        m: Arc::new(m),
        prep,
    })
}

/// A path or an already read cell, with the geometry options that apply to it.
pub(crate) fn cell_of(
    py: Python<'_>,
    cell: &Bound<'_, PyAny>,
    scale: Option<f64>,
    default_diameter: Option<f64>,
) -> PyResult<(Arc<pollard::Morphology>, PrepOptions)> {
    if let Ok(m) = cell.cast::<Morphology>() {
        let m = m.get();
        let mut prep = m.prep;
        if scale.is_some() {
            prep.scale = scale;
        }
        if default_diameter.is_some() {
            prep.default_diameter_um = default_diameter;
        }
        return Ok((m.m.clone(), prep));
    }
    let path: PathBuf = cell
        .extract()
        .map_err(|_| fail("cell: expected a path (str or os.PathLike) or a pollard.Morphology"))?;
    let m = read_swc(py, path, scale, default_diameter)?;
    Ok((m.m, m.prep))
}

/// The prepared flat arrays of a cell, with its name in the error.
pub(crate) fn flat_of(
    m: &pollard::Morphology,
    prep: &PrepOptions,
) -> Result<pollard::Flat, String> {
    prepare(m, prep).map_err(|e| format!("{}: {e}", m.source))
}

/// Passive cable maps at every point of a cell (the numbers of `pollard cable`).
#[pyfunction]
#[pyo3(signature = (cell, rm=20000.0, ra=150.0, cm=1.0, freq=0.0, injection_point=None, scale=None, default_diameter=None))]
#[allow(clippy::too_many_arguments)]
fn cable_maps<'py>(
    py: Python<'py>,
    cell: &Bound<'py, PyAny>,
    rm: f64,
    ra: f64,
    cm: f64,
    freq: f64,
    injection_point: Option<i64>,
    scale: Option<f64>,
    default_diameter: Option<f64>,
) -> PyResult<Bound<'py, PyDict>> {
    let (m, prep) = cell_of(py, cell, scale, default_diameter)?;
    let params = Params {
        rm_ohm_cm2: rm,
        ra_ohm_cm: ra,
        cm_uf_cm2: cm,
    };
    let name = m.source.clone();
    let (maps, summary, site_v) = work(py, || {
        params.validate(freq).map_err(|e| e.to_string())?;
        let flat = flat_of(&m, &prep)?;
        let maps = CellMaps::compute(&flat, &params, freq).map_err(|e| format!("{name}: {e}"))?;
        let site_v = match injection_point {
            None => None,
            Some(id) => {
                let i = m.points.iter().position(|p| p.id == id).ok_or_else(|| {
                    format!("{name}: injection point {id}: no point with that id in the file")
                })?;
                let k = maps.node_of_point(i).ok_or_else(|| {
                    format!(
                        "{name}: injection point {id}: that point is not connected to the main tree"
                    )
                })?;
                maps.site_ratio_abs(k)
            }
        };
        let summary = serde_json::to_string(&maps.summary(&flat)).map_err(|e| e.to_string())?;
        Ok((maps, summary, site_v))
    })?;
    let n = m.points.len();
    let per_point = |f: &dyn Fn(usize) -> f64| -> Vec<f64> {
        (0..n)
            .map(|i| maps.node_of_point(i).map_or(f64::NAN, f))
            .collect()
    };
    let d = PyDict::new(py);
    d.set_item("ids", arr(py, m.points.iter().map(|p| p.id).collect()))?;
    d.set_item("freq_hz", freq)?;
    d.set_item(
        "input_impedance_mohm",
        arr(py, per_point(&|k| maps.input_resistance_mohm(k))),
    )?;
    d.set_item(
        "attenuation_to_soma",
        arr(py, per_point(&|k| maps.attenuation_to_soma(k))),
    )?;
    d.set_item(
        "attenuation_from_soma",
        arr(py, per_point(&|k| maps.attenuation_from_soma(k))),
    )?;
    if let Some(v) = site_v {
        d.set_item("v_over_v_injection_point", arr(py, per_point(&|k| v[k])))?;
    }
    d.set_item("summary", json_to_py(py, &summary)?)?;
    Ok(d)
}

/// Writes an invented cell of about `points` points (the project's deterministic generator).
#[pyfunction]
#[pyo3(signature = (path, points, seed=1))]
fn synth_cell(py: Python<'_>, path: PathBuf, points: usize, seed: u64) -> PyResult<()> {
    work(py, || {
        let cell = pollard::synth::big_cell(points, seed);
        let text = pollard::synth::to_swc(&cell, &["invented cell (pollard.synth_cell)"]);
        pollard::export::write_atomic(&path, text.as_bytes(), &[]).map_err(|e| e.to_string())
    })
}

#[pymodule]
fn _pollard(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("PollardError", m.py().get_type::<PollardError>())?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add_class::<Morphology>()?;
    m.add_class::<ReducedTree>()?;
    m.add_function(wrap_pyfunction!(read_swc, m)?)?;
    m.add_function(wrap_pyfunction!(cable_maps, m)?)?;
    m.add_function(wrap_pyfunction!(tree::reduce, m)?)?;
    m.add_function(wrap_pyfunction!(synth_cell, m)?)?;
    Ok(())
}
