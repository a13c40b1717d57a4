//! Options shared by the commands that compute: the passive membrane, and the fixes a file may
//! need before cable work (units, missing radii).

use pollard::cable::{Params, PrepOptions};

/// Passive membrane and cytoplasm. Defaults Rm 20 000 Ω·cm², Ra 150 Ω·cm, Cm 1 µF/cm²: common
/// practice, not from one source.
#[derive(clap::Args, Debug, Clone)]
pub struct MembraneArgs {
    /// Specific membrane resistance Rm (Ω·cm²).
    #[arg(long = "rm", allow_negative_numbers = true, value_name = "OHM_CM2",
          default_value_t = Params::default().rm_ohm_cm2)]
    pub rm: f64,
    /// Axial resistivity Ra (Ω·cm).
    #[arg(long = "ra", allow_negative_numbers = true, value_name = "OHM_CM",
          default_value_t = Params::default().ra_ohm_cm)]
    pub ra: f64,
    /// Specific membrane capacitance Cm (µF/cm²).
    #[arg(long = "cm", allow_negative_numbers = true, value_name = "UF_CM2",
          default_value_t = Params::default().cm_uf_cm2)]
    pub cm: f64,
}

impl MembraneArgs {
    pub fn params(&self) -> Params {
        Params {
            rm_ohm_cm2: self.rm,
            ra_ohm_cm: self.ra,
            cm_uf_cm2: self.cm,
        }
    }
}

/// Fixes for files that are not ready for cable work.
#[derive(clap::Args, Debug, Clone)]
pub struct GeometryArgs {
    /// Diameter (µm) for points whose radius is 0 or unknown (NA); without it such files are
    /// refused by the electrical commands.
    #[arg(
        long = "default-diameter",
        allow_negative_numbers = true,
        value_name = "UM"
    )]
    pub default_diameter: Option<f64>,
    /// Multiply coordinates and radii by this factor, for files in other units than µm
    /// (0.001 for nanometres; the voxel size for voxels).
    #[arg(long, allow_negative_numbers = true, value_name = "FACTOR")]
    pub scale: Option<f64>,
}

impl GeometryArgs {
    pub fn prep(&self) -> PrepOptions {
        PrepOptions {
            default_diameter_um: self.default_diameter,
            scale: self.scale,
        }
    }
}
