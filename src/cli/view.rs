//! `pollard view`, `pollard lab` and `pollard` with no subcommand: open the desktop app.

use std::path::PathBuf;
use std::process::ExitCode;

/// What the arbors are coloured by when the window opens.
#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum ColourBy {
    /// Voltage spreading from the injection point (the clicked point).
    FromInjectionPoint,
    /// Voltage reaching the soma from each point.
    ToSoma,
    /// Local input resistance.
    InputResistance,
    /// Strahler order.
    Strahler,
    /// Neurite type.
    Type,
}

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The SWC file to open.
    pub cell: PathBuf,
    /// Start with this many compartments in the reduced tree, soma included.
    #[arg(long, short = 'n', value_name = "N")]
    pub compartments: Option<usize>,
    /// Start with the injection point (where the current goes in) at the point with this SWC id.
    #[arg(
        long = "injection-point",
        value_name = "ID",
        allow_negative_numbers = true
    )]
    pub injection_point: Option<i64>,
    /// Frequency (Hz) of the maps at the start (0 = DC; above, resistances are impedance
    /// magnitudes). The reduced tree does not depend on it.
    #[arg(long, value_name = "HZ")]
    pub freq: Option<f64>,
    /// What colours the arbors at the start.
    #[arg(long, value_enum, value_name = "WHAT")]
    pub colour_by: Option<ColourBy>,
    /// Draw the reduced tree as a dendrogram rather than in place.
    #[arg(long)]
    pub dendrogram: bool,
    /// Also measure the soma EPSP's peak error per budget (in the background) and draw it in the
    /// error plot, as its checkbox "EPSP error too" does.
    #[arg(long)]
    pub epsp_curve: bool,
    /// Once both drawings are ready, save them with the colour bar as a PNG picture (the
    /// window stays open).
    #[arg(long, value_name = "FIGURE.png")]
    pub save_png: Option<PathBuf>,
    /// Open this synapse table for the cell (format: `pollard reduce --help`) and colour by
    /// synapse count.
    #[arg(long, value_name = "TABLE.csv")]
    pub synapses: Option<PathBuf>,
    /// Multiply the cell's coordinates and radii by this factor (e.g. 0.001 for a file in nm),
    /// and the synapse table's positions too, as --scale does for `pollard reduce`.
    #[arg(long, value_name = "S")]
    pub scale: Option<f64>,
    /// With --synapses: choose this input (its synapses are ringed on both trees).
    #[arg(long, value_name = "NAME", requires = "synapses")]
    pub input: Option<String>,
    /// How compartments get their capacitance, as for `pollard reduce`: `timed` (default; the
    /// fitted tree is shown at once and the polished one replaces it), `fitted` or `uniform`.
    #[arg(long, value_enum, value_name = "RULE")]
    pub capacitance: Option<super::reduce::Capacitance>,
}

#[cfg(feature = "gui")]
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    use pollard::app::state::ColourBy as C;
    let opts = pollard::app::StartOptions {
        budget: a.compartments,
        injection_point_id: a.injection_point,
        freq_hz: a.freq,
        colour_by: a.colour_by.map(|c| match c {
            ColourBy::FromInjectionPoint => C::FromSite,
            ColourBy::ToSoma => C::ToSoma,
            ColourBy::InputResistance => C::InputResistance,
            ColourBy::Strahler => C::Strahler,
            ColourBy::Type => C::NeuriteType,
        }),
        dendrogram: a.dendrogram,
        epsp_curve: a.epsp_curve,
        save_png: a.save_png,
        synapses: a.synapses,
        synapse_input: a.input,
        scale: a.scale,
        capacitance: a.capacitance.map(Into::into),
    };
    pollard::app::run_with(pollard::app::Start::File(a.cell), opts)?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(feature = "gui")]
pub fn run_demo() -> anyhow::Result<ExitCode> {
    pollard::app::run(pollard::app::Start::Demo)?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(feature = "gui")]
pub fn run_lab() -> anyhow::Result<ExitCode> {
    pollard::app::run(pollard::app::Start::Lab)?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(not(feature = "gui"))]
fn no_gui() -> anyhow::Result<ExitCode> {
    anyhow::bail!(
        "this build has no desktop app (it was built without the `gui` feature); see `pollard --help` for the command-line tools"
    )
}

#[cfg(not(feature = "gui"))]
pub fn run(_a: Args) -> anyhow::Result<ExitCode> {
    no_gui()
}

#[cfg(not(feature = "gui"))]
pub fn run_demo() -> anyhow::Result<ExitCode> {
    no_gui()
}

#[cfg(not(feature = "gui"))]
pub fn run_lab() -> anyhow::Result<ExitCode> {
    no_gui()
}
