//! Numeric guards: extreme but legal parameters, zero-length and zero-radius segments, a 10 cm
//! axon at 10 kHz — finite results or a clear error, never NaN.

use pollard::Morphology;
use pollard::cable::prep::{PrepOptions, prepare};
use pollard::cable::{CellMaps, Params};

/// Input resistances and log attenuations finite; attenuations never NaN (they saturate at +∞
/// only where e^(log attenuation) leaves the range of f64).
fn all_finite(maps: &CellMaps) -> bool {
    (0..maps.len()).all(|k| {
        let p = maps.node(k);
        p.input_resistance_mohm.is_finite()
            && maps.log_attenuation_to_soma(k).is_finite()
            && maps.log_attenuation_from_soma(k).is_finite()
            && !p.attenuation_to_soma.is_nan()
            && !p.attenuation_from_soma.is_nan()
    })
}

#[test]
fn extreme_parameters_give_finite_maps() {
    let m = pollard::samples::demo();
    let flat = prepare(&m, &PrepOptions::default()).unwrap();
    for rm in [1e2, 1e6] {
        for ra in [10.0, 1e4] {
            for f in [0.0, 10.0, 1e4] {
                let p = Params {
                    rm_ohm_cm2: rm,
                    ra_ohm_cm: ra,
                    cm_uf_cm2: 1.0,
                };
                let maps = CellMaps::compute(&flat, &p, f).unwrap();
                assert!(all_finite(&maps), "Rm {rm} Ra {ra} f {f}");
            }
        }
    }
}

#[test]
fn a_ten_centimetre_axon_at_ten_kilohertz_is_finite() {
    // 10 cm of 1 µm axon in 1000 segments of 100 µm: |L| reaches thousands at 10 kHz.
    let mut s = String::from("1 1 0 0 0 10 -1\n");
    for i in 2..=1001 {
        s.push_str(&format!("{i} 2 {} 0 0 0.5 {}\n", (i - 1) * 100, i - 1));
    }
    let m = Morphology::parse(&s, "axon.swc").unwrap();
    // 10 cm is past the size check for nm/voxel files, which is a clear refusal ...
    let e = prepare(&m, &PrepOptions::default()).unwrap_err();
    assert!(e.to_string().contains("--scale"), "{e}");
    // ... and with the scale stated (1: the file is in µm) it computes
    let flat = prepare(
        &m,
        &PrepOptions {
            scale: Some(1.0),
            default_diameter_um: None,
        },
    )
    .unwrap();
    for f in [0.0, 1e3, 1e4] {
        let maps = CellMaps::compute(&flat, &Params::default(), f).unwrap();
        assert!(all_finite(&maps), "f {f}");
        // far down the axon, the soma barely feels anything: attenuation grows, but stays finite
        // or saturates at infinity only through a clear value, never NaN
        let far = maps.node(maps.len() - 1);
        assert!(!far.attenuation_from_soma.is_nan());
    }
}

#[test]
fn zero_length_segments_and_repaired_radii_are_finite() {
    // a point duplicated at its parent's place (zero length), and a zero radius repaired by a
    // default diameter
    let text = "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 10 0 0 1 2\n4 3 20 0 0 0 3\n5 3 30 0 0 0.5 4\n";
    let m = Morphology::parse(text, "z.swc").unwrap();
    assert!(m.warnings.iter().any(|w| w.code == "zero-length"));
    let unrepaired = prepare(&m, &PrepOptions::default()).unwrap();
    let e = CellMaps::compute(&unrepaired, &Params::default(), 0.0).unwrap_err();
    assert!(e.to_string().contains("line 4"), "{e}");
    let flat = prepare(
        &m,
        &PrepOptions {
            default_diameter_um: Some(1.0),
            scale: None,
        },
    )
    .unwrap();
    for f in [0.0, 100.0] {
        let maps = CellMaps::compute(&flat, &Params::default(), f).unwrap();
        assert!(all_finite(&maps));
    }
}

#[test]
fn parameters_out_of_range_are_refused_with_their_name() {
    let m = pollard::samples::demo();
    let flat = prepare(&m, &PrepOptions::default()).unwrap();
    for (p, f, name) in [
        (
            Params {
                rm_ohm_cm2: -1.0,
                ..Params::default()
            },
            0.0,
            "Rm",
        ),
        (
            Params {
                ra_ohm_cm: f64::NAN,
                ..Params::default()
            },
            0.0,
            "Ra",
        ),
        (Params::default(), -5.0, "frequency"),
    ] {
        let e = CellMaps::compute(&flat, &p, f).unwrap_err();
        assert!(e.to_string().contains(name), "{e}");
    }
}

#[test]
fn a_point_hundreds_of_length_constants_away_is_refused_by_the_reduction() {
    // found by fuzzing (tests/data/fuzz/README.md): the reduced SWC held NaN
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/fuzz/y_junction_far_point.swc"
    );
    let m = Morphology::read(path.as_ref()).unwrap();
    let flat = prepare(
        &m,
        &PrepOptions {
            scale: Some(1.0),
            default_diameter_um: None,
        },
    )
    .unwrap();
    let Err(e) = pollard::reduce::Reducer::new(
        &flat,
        &Params::default(),
        &pollard::reduce::ReduceOptions::default(),
    ) else {
        panic!("a cut-off cell was reduced");
    };
    assert!(matches!(
        e,
        pollard::reduce::ReduceError::CutOff { line: 31, .. }
    ));
}
