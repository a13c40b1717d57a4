//! Options shared by the commands that compute: the passive membrane, and the fixes a file may
//! need before cable work (units, missing radii).

use anyhow::Context as _;
use pollard::Morphology;
use pollard::cable::{Params, PrepOptions, prepare};
use pollard::fidelity::FidelityOptions;
use pollard::reduce::{ReduceOptions, Reducer, Sites, parse_sites_csv};
use pollard::transient::PieceRule;
use std::path::PathBuf;

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

/// The EPSP fidelity check: an alpha current at each site, soma voltage, full cell vs reduced
/// tree (one simulation of each by reciprocity).
#[derive(clap::Args, Debug, Clone)]
pub struct FidelityArgs {
    /// Time constant (ms) of the alpha current (t/τ)·e^(1−t/τ) of the EPSP check.
    #[arg(long = "epsp-tau", allow_negative_numbers = true, value_name = "MS",
          default_value_t = FidelityOptions::default().tau_ms)]
    pub epsp_tau: f64,
    /// Time step (ms) of the EPSP simulations [default: τ/20].
    #[arg(long = "dt", allow_negative_numbers = true, value_name = "MS")]
    pub dt: Option<f64>,
    /// Length (ms) of the EPSP simulations [default: until every site's EPSP has peaked, at
    /// most 500 ms].
    #[arg(long = "duration", allow_negative_numbers = true, value_name = "MS")]
    pub duration: Option<f64>,
    /// Largest piece of the full cell's network, as a fraction of its segment's length constant.
    #[arg(long = "piece-fraction", allow_negative_numbers = true, value_name = "F",
          default_value_t = FidelityOptions::default().pieces.lambda_fraction)]
    pub piece_fraction: f64,
}

impl FidelityArgs {
    pub fn options(&self) -> FidelityOptions {
        FidelityOptions {
            tau_ms: self.epsp_tau,
            dt_ms: self.dt,
            duration_ms: self.duration,
            pieces: PieceRule {
                lambda_fraction: self.piece_fraction,
            },
            ..FidelityOptions::default()
        }
    }
}

/// The budget of one reduced tree, for the commands that judge one (fidelity, trace).
#[derive(clap::Args, Debug, Clone)]
pub struct BudgetArg {
    /// Number of compartments of the reduced tree, soma included (an even number is rounded
    /// down; above the maximum gives the maximum).
    #[arg(long, short = 'n', value_name = "N")]
    pub compartments: usize,
}

/// The reduction's own options, for the commands that reduce on the way (fidelity, trace,
/// budgets).
#[derive(clap::Args, Debug, Clone)]
pub struct ReduceArgs {
    /// Site list of the reduction: one SWC id, or one x,y,z position, per line. Default: every
    /// dendritic point, weighted by membrane area.
    #[arg(long = "sites", value_name = "FILE")]
    pub sites: Option<PathBuf>,
    /// SWC types to keep, comma-separated, as codes or names (e.g. 1,3,4 or soma,basal,apical);
    /// the soma is always kept.
    #[arg(long, value_delimiter = ',', value_name = "LIST", value_parser = parse_type)]
    pub types: Option<Vec<i32>>,
    /// Junction link length as a fraction of the branch point's radius.
    #[arg(long = "junction-fraction", value_name = "F",
          default_value_t = ReduceOptions::default().junction_length_fraction)]
    pub junction_fraction: f64,
    /// How compartments get their capacitance, as for `pollard reduce`: `timed` (default;
    /// polished on the full cell's EPSP run with the default fidelity options), `fitted` or
    /// `uniform`.
    #[arg(long, value_enum, value_name = "RULE")]
    pub capacitance: Option<super::reduce::Capacitance>,
    /// Give each site's input to one compartment: no split inputs (the `timed` rule's last
    /// step), for codes that take one compartment per synapse.
    #[arg(long)]
    pub one_compartment_per_site: bool,
}

/// One entry of `--types`: an SWC type code or its name (soma, axon, basal, apical, …).
pub fn parse_type(s: &str) -> Result<i32, String> {
    pollard::morphology::kind_code(s).ok_or_else(|| {
        format!(
            "`{s}` is neither an SWC type code nor a type name \
             (undefined, soma, axon, basal, apical, dendrite, fork-point, end-point)"
        )
    })
}

/// The cell and what makes its reduction, for the commands that reduce on the way (fidelity,
/// trace, budgets).
#[derive(clap::Args, Debug, Clone)]
pub struct ReducedCellArgs {
    /// The SWC file to read.
    pub cell: PathBuf,
    #[command(flatten)]
    pub membrane: MembraneArgs,
    #[command(flatten)]
    pub geometry: GeometryArgs,
    #[command(flatten)]
    pub reduce: ReduceArgs,
}

impl ReducedCellArgs {
    /// The files read (the cell, and the site list if one is given): outputs must not be these.
    pub fn inputs(&self) -> Vec<&std::path::Path> {
        let mut v = vec![self.cell.as_path()];
        v.extend(self.reduce.sites.as_deref());
        v
    }

    /// Reads the cell, prepares it and builds the reducer (as `pollard reduce` does).
    pub fn reducer(&self) -> anyhow::Result<(Morphology, Reducer)> {
        let (cell, r) = (self.cell.as_path(), &self.reduce);
        let params = self.membrane.params();
        let name = cell.display().to_string();
        let m = Morphology::read(cell)?;
        let flat = prepare(&m, &self.geometry.prep()).with_context(|| name.clone())?;
        let sites = match &r.sites {
            None => Sites::Default,
            Some(p) => {
                let text = std::fs::read_to_string(p)
                    .with_context(|| format!("{}: cannot read the site list", p.display()))?;
                Sites::List(
                    parse_sites_csv(&text, &m, &flat).with_context(|| p.display().to_string())?,
                )
            }
        };
        let opts = ReduceOptions {
            types: r.types.clone(),
            sites,
            junction_length_fraction: r.junction_fraction,
            capacitance: super::reduce::Capacitance::rule(r.capacitance, true)?,
            split_inputs: !r.one_compartment_per_site,
            ..ReduceOptions::default()
        };
        let reducer = Reducer::new(&flat, &params, &opts).with_context(|| name.clone())?;
        Ok((m, reducer))
    }
}
