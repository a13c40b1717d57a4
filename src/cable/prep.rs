//! From a [`Morphology`] to the [`Flat`] arrays the cable engine uses, with the fixes a file may
//! need: a unit scale (files in nm or voxels) and a default diameter for points whose radius is
//! 0 or unknown. Also refuses cells too large to be in µm.

use super::CableError;
use crate::morphology::{Flat, IMPLAUSIBLE_EXTENT_UM, Morphology, NONE, kind};
use crate::swc::{SwcError, SwcFile, SwcPoint, Warning};

/// Largest accepted cell extent (µm) when no scale is given: 20 mm. Longer than any single
/// neuron's reconstruction we expect in µm (common practice, no source); a larger number almost
/// always means nm or voxel coordinates.
pub const MAX_EXTENT_UM: f64 = 20_000.0;

/// How to turn a file into cable geometry.
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PrepOptions {
    /// Diameter (µm, after scaling) for neurite points whose radius is 0 or unknown (`NA`).
    /// Without it such points are an error ([`CableError::MissingRadii`]).
    pub default_diameter_um: Option<f64>,
    /// Multiply coordinates and radii by this factor (e.g. 0.001 for nm → µm). When given, the
    /// extent check ([`MAX_EXTENT_UM`]) is skipped.
    pub scale: Option<f64>,
}

impl PrepOptions {
    /// Checks the options' values.
    pub fn validate(&self) -> Result<(), CableError> {
        if let Some(s) = self.scale {
            super::in_range("scale", s, 1e-9, 1e9, "(a factor)")?;
        }
        if let Some(d) = self.default_diameter_um {
            super::in_range("default diameter", d, 1e-4, 1e4, "µm")?;
        }
        Ok(())
    }
}

/// Largest side of the bounding box of the main tree's nodes (µm).
pub fn extent_um(flat: &Flat) -> f64 {
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for p in &flat.pos {
        for c in 0..3 {
            lo[c] = lo[c].min(p[c]);
            hi[c] = hi[c].max(p[c]);
        }
    }
    (0..3).map(|c| hi[c] - lo[c]).fold(0.0, f64::max)
}

/// Applies a scale factor to flat arrays: lengths, radii and positions × s, soma area × s².
pub fn scale_flat(flat: &mut Flat, s: f64) {
    for x in flat
        .length_um
        .iter_mut()
        .chain(flat.r_prox_um.iter_mut())
        .chain(flat.r_dist_um.iter_mut())
    {
        *x *= s;
    }
    for p in &mut flat.pos {
        for c in p.iter_mut() {
            *c *= s;
        }
    }
    flat.soma_area_um2 *= s * s;
}

/// Gives every segment end whose radius is 0, negative or unknown the radius `d/2` (node 0, the
/// soma, has no segment and is left alone). Returns how many segment ends changed.
pub fn fill_radii(flat: &mut Flat, diameter_um: f64) -> usize {
    let r = 0.5 * diameter_um;
    let mut changed = 0;
    for k in 1..flat.len() {
        for x in [&mut flat.r_prox_um[k], &mut flat.r_dist_um[k]] {
            if !(*x > 0.0 && x.is_finite()) {
                *x = r;
                changed += 1;
            }
        }
    }
    changed
}

/// Flat arrays of the main tree ready for the cable engine: scaled, radii filled, extent
/// checked ([`CableError::Implausible`] above [`MAX_EXTENT_UM`] unless a scale is given).
/// Missing radii without a default diameter are reported later, by the network builder.
pub fn prepare(m: &Morphology, opts: &PrepOptions) -> Result<Flat, CableError> {
    opts.validate()?;
    if m.main_len == 0 {
        return Err(CableError::Empty);
    }
    prepare_flat(m.flatten(), opts)
}

/// [`prepare`] on flat arrays already made: scale, extent check, default diameter.
pub fn prepare_flat(mut flat: Flat, opts: &PrepOptions) -> Result<Flat, CableError> {
    opts.validate()?;
    if flat.is_empty() {
        return Err(CableError::Empty);
    }
    if let Some(s) = opts.scale {
        scale_flat(&mut flat, s);
    } else {
        let e = extent_um(&flat);
        if e > MAX_EXTENT_UM {
            return Err(CableError::Implausible {
                extent_mm: e / 1000.0,
            });
        }
    }
    if let Some(d) = opts.default_diameter_um {
        fill_radii(&mut flat, d);
    }
    Ok(flat)
}

/// Flat arrays straight from the points of a plain file, without building the [`Morphology`]
/// (which re-orders, hashes ids and computes per-point metrics; the big cost on a 1M-point file).
/// Only for files where that route gives the same cell: ids consecutive in file order, one root,
/// the first line, which is the only soma point (type 1); every parent listed before its child;
/// every radius known and > 0; no zero-length segment; extent within [`IMPLAUSIBLE_EXTENT_UM`]
/// (so the morphology would add no warning). Otherwise `None`: use [`Morphology::from_swc`].
///
/// The nodes are in file order (node k = point k; node 0 the soma point, a sphere 4πr²), which is
/// parents-first as well; per-point values are the same as on the full route (tested).
pub fn flat_from_plain_points(points: &[SwcPoint]) -> Option<Flat> {
    let n = points.len();
    let first = points.first()?;
    if first.kind != kind::SOMA || first.parent != -1 || n >= NONE as usize {
        return None;
    }
    let r0 = first.radius.filter(|r| r.is_finite() && *r > 0.0)?;
    let id0 = first.id;
    let mut f = Flat {
        parent: Vec::with_capacity(n),
        length_um: Vec::with_capacity(n),
        r_prox_um: Vec::with_capacity(n),
        r_dist_um: Vec::with_capacity(n),
        kind: Vec::with_capacity(n),
        pos: Vec::with_capacity(n),
        soma_area_um2: 4.0 * std::f64::consts::PI * r0 * r0,
        point_node: (0..n as u32).collect(),
        node_point: (0..n as u32).collect(),
        line: Vec::with_capacity(n),
    };
    f.parent.push(NONE);
    f.length_um.push(0.0);
    f.r_prox_um.push(0.0);
    f.r_dist_um.push(0.0);
    f.kind.push(first.kind);
    f.pos.push(first.pos);
    f.line.push(first.line);
    let mut lo = first.pos;
    let mut hi = first.pos;
    for (i, p) in points.iter().enumerate().skip(1) {
        if p.id != id0.checked_add(i as i64)? || p.kind == kind::SOMA {
            return None;
        }
        let q = p.parent.checked_sub(id0)?;
        if q < 0 || q >= i as i64 {
            return None;
        }
        let q = q as usize;
        let r = p.radius.filter(|r| r.is_finite() && *r > 0.0)?;
        let pp = &points[q];
        let h = ((p.pos[0] - pp.pos[0]).powi(2)
            + (p.pos[1] - pp.pos[1]).powi(2)
            + (p.pos[2] - pp.pos[2]).powi(2))
        .sqrt();
        if !(h > 0.0 && h.is_finite()) {
            return None;
        }
        for c in 0..3 {
            lo[c] = lo[c].min(p.pos[c]);
            hi[c] = hi[c].max(p.pos[c]);
        }
        f.parent.push(q as u32);
        f.length_um.push(h);
        // a point joined to the soma is a cylinder of its own radius (morphology convention)
        f.r_prox_um.push(if q == 0 {
            r
        } else {
            pp.radius.unwrap_or(f64::NAN)
        });
        f.r_dist_um.push(r);
        f.kind.push(p.kind);
        f.pos.push(p.pos);
        f.line.push(p.line);
    }
    let extent = (0..3).map(|c| hi[c] - lo[c]).fold(0.0, f64::max);
    (extent <= IMPLAUSIBLE_EXTENT_UM).then_some(f)
}

/// A cell read for cable work: the SWC ids (per point), the file's warnings and the prepared
/// flat arrays; `morphology` is kept when the full route was taken.
#[derive(Debug, Clone)]
pub struct CableInput {
    /// SWC id of each point; `flat.point_node` is indexed the same way.
    pub ids: Vec<i64>,
    pub warnings: Vec<Warning>,
    pub flat: Flat,
    pub morphology: Option<Morphology>,
}

/// Why a file cannot be read for cable work.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ReadError {
    #[error(transparent)]
    Swc(#[from] SwcError),
    #[error("{file}: {fault}")]
    Cable { file: String, fault: CableError },
}

/// Reads parsed SWC points for cable work: the direct route of [`flat_from_plain_points`] when
/// the file allows it, otherwise the full [`Morphology`]; then [`prepare_flat`].
pub fn cable_input(file: SwcFile, opts: &PrepOptions) -> Result<CableInput, ReadError> {
    let source = file.source.clone();
    let wrap = |fault: CableError| ReadError::Cable {
        file: source.clone(),
        fault,
    };
    opts.validate().map_err(wrap)?;
    if let Some(flat) = flat_from_plain_points(&file.points) {
        let flat = prepare_flat(flat, opts).map_err(wrap)?;
        return Ok(CableInput {
            ids: file.points.iter().map(|p| p.id).collect(),
            warnings: file.warnings,
            flat,
            morphology: None,
        });
    }
    let m = Morphology::from_swc(file)?;
    let flat = prepare(&m, opts).map_err(wrap)?;
    Ok(CableInput {
        ids: m.points.iter().map(|p| p.id).collect(),
        warnings: m.warnings.clone(),
        flat,
        morphology: Some(m),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scale_and_default_diameter() {
        // lengths in nm: a 100 µm stem written as 100 000 nm with radius NA
        let text = "1 1 0 0 0 0 -1\n2 3 100000 0 0 NA 1\n";
        let m = Morphology::parse(text, "t.swc").unwrap();
        let e = prepare(&m, &PrepOptions::default()).unwrap_err();
        assert!(matches!(e, CableError::Implausible { .. }), "{e}");
        let opts = PrepOptions {
            scale: Some(1e-3),
            default_diameter_um: None,
        };
        let f = prepare(&m, &opts).unwrap();
        assert!((f.length_um[1] - 100.0).abs() < 1e-9);
        let e = crate::cable::Network::build(&f, &Default::default(), 0.0).unwrap_err();
        assert!(
            matches!(e, CableError::MissingRadii { count: 1, .. }),
            "{e}"
        );
        assert!(e.to_string().contains("--default-diameter"));
        let opts = PrepOptions {
            scale: Some(1e-3),
            default_diameter_um: Some(2.0),
        };
        let f = prepare(&m, &opts).unwrap();
        assert_eq!((f.r_prox_um[1], f.r_dist_um[1]), (1.0, 1.0));
        let bad = PrepOptions {
            scale: Some(-1.0),
            default_diameter_um: None,
        };
        assert!(matches!(
            prepare(&m, &bad),
            Err(CableError::ParamRange { name: "scale", .. })
        ));
    }
}
