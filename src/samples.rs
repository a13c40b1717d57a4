//! The invented sample cells shipped in sample_cells/ and embedded in the binary.
//!
//! All four are made up by the generators in [`crate::synth`]; none is a reconstruction of a real
//! neuron. `cargo run --example make_sample_cells` rewrites the files from [`generate`], and a test
//! checks that the embedded files equal what the generators give today.

use crate::morphology::Morphology;
use crate::synth;

/// One embedded sample cell.
#[derive(Debug, Clone, Copy)]
pub struct Sample {
    /// A short name for menus.
    pub name: &'static str,
    /// The file name under sample_cells/.
    pub file_name: &'static str,
    /// The SWC text.
    pub text: &'static str,
}

/// Every sample cell; the first is the app's default.
pub const SAMPLES: &[Sample] = &[
    Sample {
        name: "practice_pyramidal.swc: the demo cell (pyramidal-like, invented)",
        file_name: "practice_pyramidal.swc",
        text: include_str!("../sample_cells/practice_pyramidal.swc"),
    },
    Sample {
        name: "Stellate cell (invented)",
        file_name: "practice_stellate.swc",
        text: include_str!("../sample_cells/practice_stellate.swc"),
    },
    Sample {
        name: "Rall tree, 3/2 rule (invented)",
        file_name: "rall_tree.swc",
        text: include_str!("../sample_cells/rall_tree.swc"),
    },
    Sample {
        name: "Y junction (invented)",
        file_name: "y_junction.swc",
        text: include_str!("../sample_cells/y_junction.swc"),
    },
];

/// Seeds and parameters of the sample cells (also listed in sample_cells/README.md).
pub const PYRAMIDAL_SEED: u64 = 11;
pub const STELLATE_SEED: u64 = 5;
/// rall_tree(levels, d0 µm, l0 µm)
pub const RALL: (usize, f64, f64) = (4, 4.0, 150.0);
/// y_junction(parent length µm, parent diameter µm, child length µm, child diameter µm, segments)
pub const Y: (f64, f64, f64, f64, usize) = (200.0, 2.0, 150.0, 1.26, 10);

/// File name and text of the demo cell's invented synapse table (beside the cell, by the
/// batch naming rule `CELL.synapses.csv`).
pub const DEMO_SYNAPSES: (&str, &str) = (
    "practice_pyramidal.synapses.csv",
    include_str!("../sample_cells/practice_pyramidal.synapses.csv"),
);

/// The demo synapse table as the generator makes it now (see [`crate::synapses::demo_table`]).
pub fn generate_synapses() -> (&'static str, String) {
    use crate::synapses::{DEMO_AFFERENTS, DEMO_SEED, demo_table};
    let call = format!(
        "generator: pollard::synapses::demo_table(synth::pyramidal({PYRAMIDAL_SEED}), afferents = {DEMO_AFFERENTS}, seed = {DEMO_SEED})"
    );
    let text = demo_table(
        &synth::pyramidal(PYRAMIDAL_SEED),
        DEMO_AFFERENTS,
        DEMO_SEED,
        &[
            "INVENTED SYNAPSE TABLE for practice cell 'Larkspur P-11' (practice_pyramidal.swc): made up by a program, not from any recording.",
            "Part of the Larkspur practice set (a fictional teaching set; see sample_cells/README.md).",
            &call,
            "Units: micrometres. Columns: synapse id (ignored by pollard), input, x, y, z, weight.",
            "Regenerate with: cargo run --example make_sample_cells",
        ],
    );
    (DEMO_SYNAPSES.0, text)
}

/// The text of the default sample (the pyramidal-like cell).
pub fn demo_text() -> &'static str {
    SAMPLES[0].text
}

/// The default sample as a morphology (the pyramidal-like cell).
pub fn demo() -> Morphology {
    // The embedded file is part of the program, not user input; a test parses every sample.
    Morphology::parse(SAMPLES[0].text, SAMPLES[0].file_name)
        .expect("the embedded demo cell parses (checked by a test)")
}

/// The sample files as the generators make them now: (file name, SWC text), in the order of
/// [`SAMPLES`]. Deterministic: the same bytes on every run.
pub fn generate() -> Vec<(&'static str, String)> {
    const INVENTED: &str =
        "INVENTED CELL: made up by a program, not a reconstruction of any real neuron.";
    const REGEN: &str = "Regenerate with: cargo run --example make_sample_cells";
    const SET: &str =
        "Part of the Larkspur practice set (a fictional teaching set; see sample_cells/README.md).";
    let pyr = format!("generator: pollard::synth::pyramidal(seed = {PYRAMIDAL_SEED})");
    let stel = format!("generator: pollard::synth::stellate(seed = {STELLATE_SEED})");
    let (levels, d0, l0) = RALL;
    let rall = format!(
        "generator: pollard::synth::rall_tree(levels = {levels}, d0_um = {d0}, l0_um = {l0}) (no randomness, seed: none)"
    );
    let (pl, pd, cl, cd, segs) = Y;
    let y = format!(
        "generator: pollard::synth::y_junction(parent_len = {pl}, parent_d = {pd}, child_len = {cl}, child_d = {cd}, segs = {segs}) (no randomness, seed: none)"
    );
    vec![
        (
            SAMPLES[0].file_name,
            synth::to_swc(
                &synth::pyramidal(PYRAMIDAL_SEED),
                &[
                    "Practice cell 'Larkspur P-11': pyramidal-like (apical tree with tuft, basal dendrites, short axon).",
                    INVENTED,
                    SET,
                    &pyr,
                    "Units: micrometres. Columns: id type x y z radius parent.",
                    REGEN,
                ],
            ),
        ),
        (
            SAMPLES[1].file_name,
            synth::to_swc(
                &synth::stellate(STELLATE_SEED),
                &[
                    "Practice cell 'Larkspur S-5': stellate (three-point soma, radiating dendrites, thin axon).",
                    INVENTED,
                    SET,
                    &stel,
                    "Units: micrometres. Columns: id type x y z radius parent.",
                    REGEN,
                ],
            ),
        ),
        (
            SAMPLES[2].file_name,
            synth::to_swc(
                &synth::rall_tree(levels, d0, l0),
                &[
                    "Teaching tree: symmetric binary tree obeying the 3/2 power rule exactly, all tips at one electrotonic distance.",
                    "The soma point has radius 0 (no soma membrane). Rall's conditions for one equivalent cylinder hold;",
                    "each daughter's first segment tapers from its parent's diameter (pollard's frustum convention).",
                    INVENTED,
                    SET,
                    &rall,
                    "Units: micrometres. Columns: id type x y z radius parent.",
                    REGEN,
                ],
            ),
        ),
        (
            SAMPLES[3].file_name,
            synth::to_swc(
                &synth::y_junction(pl, pd, cl, cd, segs),
                &[
                    "Teaching cell: one parent cable splitting into two equal daughters (a Y junction); soma of radius 0.",
                    INVENTED,
                    SET,
                    &y,
                    "Units: micrometres. Columns: id type x y z radius parent.",
                    REGEN,
                ],
            ),
        ),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_sample_parses_without_error() {
        for s in SAMPLES {
            let m = Morphology::parse(s.text, s.file_name)
                .unwrap_or_else(|e| panic!("{}: {e}", s.file_name));
            assert!(m.len() > 10, "{}", s.file_name);
            assert_eq!(m.trees.len(), 1, "{}", s.file_name);
            assert!(!m.soma.is_empty(), "{}", s.file_name);
        }
        assert!(demo().len() > 300);
        assert_eq!(demo_text(), SAMPLES[0].text);
    }

    #[test]
    fn embedded_files_equal_what_the_generators_make() {
        let now = generate();
        assert_eq!(now.len(), SAMPLES.len());
        for ((name, text), s) in now.iter().zip(SAMPLES) {
            assert_eq!(*name, s.file_name);
            assert!(
                text == s.text,
                "{name} differs from its generator: run cargo run --example make_sample_cells"
            );
        }
    }

    #[test]
    fn demo_synapse_table_equals_what_the_generator_makes() {
        let (name, text) = generate_synapses();
        assert_eq!(name, DEMO_SYNAPSES.0);
        assert!(
            text == DEMO_SYNAPSES.1,
            "{name} differs from its generator: run cargo run --example make_sample_cells"
        );
    }

    #[test]
    fn samples_say_they_are_invented() {
        for s in SAMPLES {
            assert!(s.text.contains("INVENTED CELL"), "{}", s.file_name);
            assert!(
                s.text.contains("generator: pollard::synth::"),
                "{}",
                s.file_name
            );
        }
    }
}
