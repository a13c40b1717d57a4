//! `pollard cable` end to end: JSON keys and values on a cylinder with a closed form, the
//! injection point's map, and clear refusals.

use std::process::Command;

fn pollard() -> Command {
    Command::new(env!("CARGO_BIN_EXE_pollard"))
}

/// A zero-area soma point and a 1 µm cylinder of 500 µm in 50 segments, ids 1..=51.
fn cylinder_file(dir: &std::path::Path) -> std::path::PathBuf {
    let text = pollard::synth::to_swc(&pollard::synth::cylinder(500.0, 1.0, 50), &[]);
    let path = dir.join("cyl.swc");
    std::fs::write(&path, text).unwrap();
    path
}

#[test]
fn json_holds_every_point_and_the_closed_form() {
    let dir = tempfile::tempdir().unwrap();
    let cell = cylinder_file(dir.path());
    let out = pollard()
        .args([
            "cable",
            cell.to_str().unwrap(),
            "--json",
            "--injection-point",
            "51",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    // sealed-end cylinder seen from its end: R_in = R∞·coth(L) (Rall 1959), R∞ and λ from
    // the defaults Rm 20 000 Ω·cm², Ra 150 Ω·cm
    let (rm, ra, d) = (20_000.0f64, 150.0f64, 1e-4f64);
    let lambda = (rm * d / (4.0 * ra)).sqrt();
    let r_inf = 2.0 / std::f64::consts::PI * (rm * ra).sqrt() * d.powf(-1.5);
    let l = 500e-4 / lambda;
    let want = r_inf / l.tanh() / 1e6;
    let got = v["soma_input_resistance_mohm"].as_f64().unwrap();
    assert!((got / want - 1.0).abs() < 1e-6, "{got} vs {want}");
    let points = v["points"].as_array().unwrap();
    assert_eq!(points.len(), 51);
    let tip = points.iter().find(|p| p["id"] == 51).unwrap();
    assert!((tip["attenuation_from_soma"].as_f64().unwrap() - l.cosh()).abs() < 1e-6);
    assert_eq!(v["injection_point"], 51);
    assert_eq!(tip["v_over_v_injection_point"].as_f64().unwrap(), 1.0);
    // current at the tip: V_soma/V_tip = 1/cosh(L) on a sealed cylinder
    let soma = points.iter().find(|p| p["id"] == 1).unwrap();
    assert!((soma["v_over_v_injection_point"].as_f64().unwrap() - 1.0 / l.cosh()).abs() < 1e-6);
    assert_eq!(soma["attenuation_to_soma"].as_f64().unwrap(), 1.0);
    for p in points {
        for key in [
            "input_resistance_mohm",
            "attenuation_to_soma",
            "attenuation_from_soma",
        ] {
            assert!(p[key].as_f64().unwrap() >= 0.0, "{p}");
        }
    }
    assert_eq!(v["tips"].as_array().unwrap().len(), 1);
    assert!((v["electrotonic_extent"].as_f64().unwrap() - l).abs() < 1e-9);
}

#[test]
fn impedance_magnitudes_at_100_hz_and_refusals() {
    let dir = tempfile::tempdir().unwrap();
    let cell = cylinder_file(dir.path());
    let c = cell.to_str().unwrap();
    let dc = pollard().args(["cable", c, "--json"]).output().unwrap();
    let ac = pollard()
        .args(["cable", c, "--json", "--freq", "100"])
        .output()
        .unwrap();
    let r = |o: &std::process::Output| {
        let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        v["soma_input_resistance_mohm"].as_f64().unwrap()
    };
    // membrane capacitance shunts current at 100 Hz: |Z| falls below R_in (Koch 1999 ch. 2)
    assert!(r(&ac) < r(&dc));
    let bad = pollard().args(["cable", c, "--rm", "-5"]).output().unwrap();
    assert!(!bad.status.success());
    assert!(String::from_utf8_lossy(&bad.stderr).contains("Rm"));
    let bad = pollard()
        .args(["cable", c, "--injection-point", "999"])
        .output()
        .unwrap();
    assert!(!bad.status.success());
    assert!(String::from_utf8_lossy(&bad.stderr).contains("999"));
    // the clicked point has one name: the old `--site` spelling is gone, not a second name
    let old = pollard()
        .args(["cable", c, "--site", "51"])
        .output()
        .unwrap();
    assert!(!old.status.success());
    assert!(String::from_utf8_lossy(&old.stderr).contains("--site"));
    // no radii: the message names the fix; with it, the run succeeds
    let path = dir.path().join("noradius.swc");
    std::fs::write(&path, "1 1 0 0 0 5 -1\n2 3 10 0 0 0 1\n3 3 20 0 0 0 2\n").unwrap();
    let p = path.to_str().unwrap();
    let bad = pollard().args(["cable", p]).output().unwrap();
    assert!(String::from_utf8_lossy(&bad.stderr).contains("--default-diameter"));
    let ok = pollard()
        .args(["cable", p, "--default-diameter", "1"])
        .output()
        .unwrap();
    assert!(ok.status.success());
    // written to a file atomically with -o
    let out = dir.path().join("maps.json");
    let ok = pollard()
        .args(["cable", c, "--json", "-o", out.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(ok.status.success());
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&out).unwrap()).unwrap();
    assert_eq!(v["points"].as_array().unwrap().len(), 51);
}
