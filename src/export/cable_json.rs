//! The JSON document of `pollard cable --json`: the whole-cell summary and the maps at every
//! point, as typed serde members. Every number is checked when the document is made, before a
//! byte is written: a value that is not finite is an error naming the point and the quantity,
//! never a `null`. The per-point values are read from the maps twice rather than copied: once
//! by the check (in parallel), once as serde writes them in order.

use crate::cable::{CellMaps, Summary};
use crate::swc::Warning;
use serde::ser::{SerializeSeq, Serializer};
use std::io::Write;

/// Why the cable maps could not be written.
#[derive(Debug, thiserror::Error)]
pub enum CableJsonError {
    #[error(
        "{file}: {what} is not a finite number ({value}); the cell is outside the range the maps can represent: check the radii and the units (--scale)"
    )]
    NotFinite {
        file: String,
        what: String,
        value: f64,
    },
    #[error("cannot write the maps: {0}")]
    Io(#[from] std::io::Error),
}

/// One tip in the summary: its SWC id, Σ l/λ of its path to the soma and its path length.
#[derive(serde::Serialize)]
pub struct TipOut {
    pub id: i64,
    pub electrotonic_length: f64,
    pub path_length_um: f64,
}

/// The whole document: the summary members, then `points` (see [`PointsOut`]).
#[derive(serde::Serialize)]
pub struct CableDoc<'a> {
    pub file: &'a str,
    pub freq_hz: f64,
    pub rm_ohm_cm2: f64,
    pub ra_ohm_cm: f64,
    pub cm_uf_cm2: f64,
    pub soma_input_resistance_mohm: f64,
    pub soma_input_phase_deg: f64,
    pub tau_ms: f64,
    pub electrotonic_extent: f64,
    pub mean_tip_electrotonic_length: f64,
    pub max_attenuation_to_soma: f64,
    pub max_attenuation_from_soma: f64,
    /// SWC id of the injection point (`--injection-point`), when the maps include one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub injection_point: Option<i64>,
    pub warnings: &'a [Warning],
    pub tips: Vec<TipOut>,
    pub points: PointsOut<'a>,
}

/// The `points` array: one object per SWC point, in the morphology's order, with the point's
/// id and, for points of the main tree, its input resistance (MΩ), attenuations to and from the
/// soma and (with an injection point) |V_k/V_inj| as `v_over_v_injection_point`. Points outside
/// the main tree carry their id only. The values are read from the maps as they are written (no
/// per-point copy of the maps is kept).
pub struct PointsOut<'a> {
    ids: &'a [i64],
    maps: &'a CellMaps,
    injection: Option<&'a [f64]>,
}

/// One point's object: `id`, then the maps when the point is in the main tree.
struct PointOut {
    id: i64,
    values: Option<PointValues>,
}

struct PointValues {
    input_resistance_mohm: f64,
    attenuation_to_soma: f64,
    attenuation_from_soma: f64,
    v_over_v_inj: Option<f64>,
}

impl serde::Serialize for PointOut {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeStruct;
        let v = self.values.as_ref();
        let n = 1 + v.map_or(0, |v| 3 + v.v_over_v_inj.is_some() as usize);
        let mut st = s.serialize_struct("Point", n)?;
        st.serialize_field("id", &self.id)?;
        if let Some(v) = v {
            st.serialize_field("input_resistance_mohm", &v.input_resistance_mohm)?;
            st.serialize_field("attenuation_to_soma", &v.attenuation_to_soma)?;
            st.serialize_field("attenuation_from_soma", &v.attenuation_from_soma)?;
            if let Some(r) = v.v_over_v_inj {
                st.serialize_field("v_over_v_injection_point", &r)?;
            }
        }
        st.end()
    }
}

impl<'a> PointsOut<'a> {
    fn new(ids: &'a [i64], maps: &'a CellMaps, injection: Option<&'a [f64]>) -> PointsOut<'a> {
        PointsOut {
            ids,
            maps,
            injection,
        }
    }

    /// Point `i`'s object.
    fn point(&self, i: usize) -> PointOut {
        let m = self.maps;
        PointOut {
            id: self.ids[i],
            values: m.node_of_point(i).map(|k| PointValues {
                input_resistance_mohm: m.input_resistance_mohm(k),
                attenuation_to_soma: m.attenuation_to_soma(k),
                attenuation_from_soma: m.attenuation_from_soma(k),
                v_over_v_inj: self.injection.map(|v| v[k]),
            }),
        }
    }

    /// |V_k/V_inj| at every node, when the document has an injection point.
    pub fn injection_point(&self) -> Option<&[f64]> {
        self.injection
    }

    /// SWC id of morphology point `i`.
    pub fn id(&self, i: usize) -> i64 {
        self.ids[i]
    }

    /// The first point value that is not finite: (what, at which id, value). The points are
    /// checked in parallel (rayon).
    fn first_non_finite(&self) -> Option<(String, f64)> {
        use rayon::prelude::*;
        (0..self.ids.len())
            .into_par_iter()
            .with_min_len(4096)
            .find_map_first(|i| {
                let p = self.point(i);
                let v = p.values?;
                [
                    ("input resistance", v.input_resistance_mohm),
                    ("attenuation to the soma", v.attenuation_to_soma),
                    ("attenuation from the soma", v.attenuation_from_soma),
                    ("V/V at the injection point", v.v_over_v_inj.unwrap_or(0.0)),
                ]
                .into_iter()
                .find(|x| !x.1.is_finite())
                .map(|(what, x)| (format!("the {what} at point {}", p.id), x))
            })
    }
}

impl serde::Serialize for PointsOut<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(self.ids.len()))?;
        for i in 0..self.ids.len() {
            seq.serialize_element(&self.point(i))?;
        }
        seq.end()
    }
}

impl<'a> CableDoc<'a> {
    /// The document for maps computed from a file: `ids[i]` is the SWC id of morphology point
    /// i; `site` is the injection point's SWC id and |V_k/V_inj| at every node. Refuses a document with a
    /// number that is not finite (it names the first one).
    pub fn new(
        file: &'a str,
        ids: &'a [i64],
        maps: &'a CellMaps,
        summary: &Summary,
        site: Option<(i64, &'a [f64])>,
        warnings: &'a [Warning],
    ) -> Result<CableDoc<'a>, CableJsonError> {
        let p = &maps.params;
        let doc = CableDoc {
            file,
            freq_hz: maps.freq_hz,
            rm_ohm_cm2: p.rm_ohm_cm2,
            ra_ohm_cm: p.ra_ohm_cm,
            cm_uf_cm2: p.cm_uf_cm2,
            soma_input_resistance_mohm: summary.soma_input_resistance_mohm,
            soma_input_phase_deg: summary.soma_input_phase_deg,
            tau_ms: summary.tau_ms,
            electrotonic_extent: summary.electrotonic_extent,
            mean_tip_electrotonic_length: summary.mean_tip_electrotonic_length,
            max_attenuation_to_soma: summary.max_attenuation_to_soma,
            max_attenuation_from_soma: summary.max_attenuation_from_soma,
            injection_point: site.map(|s| s.0),
            warnings,
            tips: summary
                .tips
                .iter()
                .map(|t| TipOut {
                    id: ids[t.point],
                    electrotonic_length: t.electrotonic_length,
                    path_length_um: t.path_length_um,
                })
                .collect(),
            points: PointsOut::new(ids, maps, site.map(|s| s.1)),
        };
        match doc.first_non_finite() {
            Some((what, value)) => Err(CableJsonError::NotFinite {
                file: file.to_string(),
                what,
                value,
            }),
            None => Ok(doc),
        }
    }

    /// The first number of the document that is not finite, named for a reader.
    fn first_non_finite(&self) -> Option<(String, f64)> {
        let whole = [
            (
                "the soma input resistance (MΩ)",
                self.soma_input_resistance_mohm,
            ),
            ("the soma input phase (°)", self.soma_input_phase_deg),
            ("τ (ms)", self.tau_ms),
            ("the electrotonic extent", self.electrotonic_extent),
            (
                "the mean tip electrotonic length",
                self.mean_tip_electrotonic_length,
            ),
            (
                "the largest attenuation to the soma",
                self.max_attenuation_to_soma,
            ),
            (
                "the largest attenuation from the soma",
                self.max_attenuation_from_soma,
            ),
        ];
        if let Some((what, v)) = whole.iter().find(|w| !w.1.is_finite()) {
            return Some((what.to_string(), *v));
        }
        for t in &self.tips {
            for (what, v) in [
                ("electrotonic length", t.electrotonic_length),
                ("path length", t.path_length_um),
            ] {
                if !v.is_finite() {
                    return Some((format!("the {what} of tip {}", t.id), v));
                }
            }
        }
        self.points.first_non_finite()
    }

    /// Writes the document (one line, then a line break).
    /// Generic over the writer so that serde's many small writes are inlined.
    pub fn write<W: Write>(&self, mut w: W) -> Result<(), CableJsonError> {
        let mut ser = serde_json::Serializer::new(&mut w);
        serde::Serialize::serialize(self, &mut ser).map_err(std::io::Error::from)?;
        w.write_all(b"\n")?;
        Ok(())
    }
}
