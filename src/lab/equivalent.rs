//! Rall's equivalent cylinder (Rall 1962): the conditions, the cylinder computed through the
//! engine like any lab tree, and the closed form of its input impedance. The one place the
//! comparison is made; the app only draws what [`Equivalent`] holds.

use super::{End, Junction, LabError, LabResult, LabTree, Piece, RALL_TOLERANCE, Shape};
use crate::cable::{C64, Params, UM};
use std::f64::consts::PI;

/// Rall's equivalent cylinder, when the tree qualifies (Rall 1962).
#[derive(Debug, Clone)]
pub struct Equivalent {
    /// Why the tree does not qualify (empty = it does).
    pub reasons: Vec<String>,
    /// Diameter = the trunk's (µm).
    pub diam_um: f64,
    /// Electrotonic length L (DC) of every soma-to-tip path (the mean when they differ).
    pub big_l: f64,
    /// Physical length L·λ(d) (µm).
    pub length_um: f64,
    /// End condition of the cylinder (that of the tips; sealed when mixed).
    pub end: End,
    /// |Z_in| at the soma of the tree, of the cylinder through the engine, and of the
    /// cylinder's closed form (MΩ).
    pub rin_tree_mohm: f64,
    pub rin_cylinder_mohm: f64,
    pub rin_closed_mohm: f64,
    /// The cylinder computed through the engine like any lab tree (path from its tip); `None`
    /// for the cylinder's own comparison.
    pub cylinder: Option<Box<LabResult>>,
}

impl Equivalent {
    pub fn qualifies(&self) -> bool {
        self.reasons.is_empty()
    }

    /// The cylinder to draw beside the tree: only when the tree qualifies.
    pub fn shown_cylinder(&self) -> Option<&LabResult> {
        self.cylinder.as_deref().filter(|_| self.qualifies())
    }
}

/// Checks Rall's conditions and builds the equivalent cylinder (Rall 1962): every fork obeys
/// the 3/2 power rule, every tip lies at the same electrotonic distance L, every tip has the
/// same end condition; then the tree seen from the soma is one cylinder of the trunk's
/// diameter and electrotonic length L.
pub(super) fn equivalent_cylinder(
    tree: &LabTree,
    junctions: &[Junction],
    x_all: &[f64],
    with_result: bool,
) -> Result<Equivalent, LabError> {
    let spec = &tree.spec;
    let mut reasons = Vec::new();
    for j in junctions {
        if (j.ratio - 1.0).abs() > RALL_TOLERANCE {
            reasons.push(format!(
                "the fork at the end of {} has Σd^3/2 ratio {:.3}, not 1",
                j.name, j.ratio
            ));
        }
    }
    let tips: Vec<usize> = (0..tree.sections.len())
        .filter(|&s| tree.sections[s].is_tip())
        .collect();
    let tip_x: Vec<f64> = tips
        .iter()
        .map(|&s| x_all[tree.section_end_node[s] as usize])
        .collect();
    let lo = tip_x.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = tip_x.iter().cloned().fold(0.0, f64::max);
    let big_l = tip_x.iter().sum::<f64>() / tip_x.len().max(1) as f64;
    if hi - lo > RALL_TOLERANCE * big_l {
        reasons.push(format!(
            "the tips lie at electrotonic distances {lo:.3} to {hi:.3}, not one value"
        ));
    }
    let ends: Vec<End> = tips.iter().filter_map(|&s| tree.sections[s].end).collect();
    let end = ends.first().copied().unwrap_or(End::Sealed);
    if ends.iter().any(|&e| e != end) {
        reasons.push("some tips are sealed and some killed".to_string());
    }
    let diam = tree.sections[0].piece.diam_um;
    let lambda = spec.params.lambda_um(diam);
    let length_um = (big_l * lambda).clamp(1.0, 20_000.0);
    // the cylinder through the same engine
    let mut cyl = spec.clone();
    cyl.shape = Shape::Cable;
    cyl.level[0] = Piece::new(length_um, diam);
    cyl.overrides.clear();
    cyl.end_overrides.clear();
    cyl.end = end;
    let (rin_cylinder_mohm, cylinder) = if with_result {
        let c = LabResult::compute_with(&cyl, 0, false)?;
        (c.tree.soma_rin_mohm(), Some(Box::new(c)))
    } else {
        (LabTree::build(&cyl)?.soma_rin_mohm(), None)
    };
    let rin_closed = closed_form_input_impedance(
        &spec.params,
        spec.freq_hz,
        diam,
        length_um,
        end,
        soma_area_um2(spec.soma_diam_um),
    );
    Ok(Equivalent {
        reasons,
        diam_um: diam,
        big_l,
        length_um,
        end,
        rin_tree_mohm: tree.soma_rin_mohm(),
        rin_cylinder_mohm,
        rin_closed_mohm: rin_closed.norm() * 1e-6,
        cylinder,
    })
}

/// Area of a spherical soma of diameter d (µm²).
pub fn soma_area_um2(diam_um: f64) -> f64 {
    PI * diam_um * diam_um
}

/// Input impedance (Ω) at the start of a uniform cylinder with a soma in parallel:
/// Z = 1 / (y_m·A_soma + Y0·tanh(γℓ)) for a sealed end, coth for a killed end, with
/// Y0 = √(y/r_a), γ = √(r_a·y), r_a = 4Ra/(πd²), y = πd·y_m (Rall 1959; Johnston & Wu 1995
/// eqs. 4.36–4.40; Koch 1999 ch. 2).
pub fn closed_form_input_impedance(
    params: &Params,
    freq_hz: f64,
    diam_um: f64,
    length_um: f64,
    end: End,
    soma_area_um2: f64,
) -> C64 {
    let d = diam_um * UM;
    let ym = params.membrane_admittance(freq_hz);
    let ra = 4.0 * params.ra_ohm_cm / (PI * d * d);
    let y = ym * (PI * d);
    let y0 = (y / ra).sqrt();
    let l = (y * ra).sqrt() * (length_um * UM);
    let t = l.tanh();
    let y_end = match end {
        End::Sealed => y0 * t,
        End::Killed => y0 / t,
    };
    1.0 / (ym * (soma_area_um2 * UM * UM) + y_end)
}
