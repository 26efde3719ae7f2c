//! `tragus coupler` against outside references: lumped-cavity and closed-tube formulas
//! (docs/reference-values.md sources named per test), the docs/architecture.md JSON contract, bad models.

use crate::support::common;

use common::*;

fn coupler_json(model: &str, extra: &[&str]) -> serde_json::Value {
    let out = tragus()
        .arg("coupler")
        .arg(root().join(model))
        .args(["--json", "-"])
        .args(extra)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    serde_json::from_slice(&out.stdout).unwrap()
}

fn mag_db(v: &serde_json::Value, i: usize) -> f64 {
    let re = v["re"][i].as_f64().unwrap();
    let im = v["im"][i].as_f64().unwrap();
    10.0 * (re * re + im * im).log10()
}

// Lumped cavity C = V/(ρc²) (Beranek & Mellow 2012; Kinsler et al.): 2 cm³ at 500 Hz gives
// |Z| = 147.07 dB re 1 Pa·s/m³. The shipped 2 cm³ model is a short wide lossy tube, so a
// lumped cavity is an approximation of it: 0.1 dB at 500 Hz (the example check).
#[test]
fn two_cc_coupler_is_a_2cm3_compliance_at_500_hz() {
    let j = coupler_json(
        "reference/couplers/iec-60318-5-2cc.yaml",
        &["--frequencies-hz", "500"],
    );
    let z = mag_db(&j["input_impedance"], 0);
    assert!((z - 147.07).abs() < 0.1, "|Z_in| = {z:.3} dB");
}

// Closed tube, a = 3.75 mm, L = 25 mm, 20 °C (docs/reference-values.md, visco-thermal tube):
// lossy Z_in at 1 kHz = 2.032e5 − j1.8789e7 Pa·s/m³, and |Z_in| has its quarter-wave minimum
// near c/(4L) = 3432.8 Hz (lossless); losses pull the minimum slightly down, so within 2 %.
#[test]
fn closed_tube_matches_the_worked_example_and_quarter_wave() {
    let j = coupler_json(
        "tests/data/couplers/closed-tube-25mm.yaml",
        &["--frequencies-hz", "1000"],
    );
    let re = j["input_impedance"]["re"][0].as_f64().unwrap();
    let im = j["input_impedance"]["im"][0].as_f64().unwrap();
    assert!((re / 2.032e5 - 1.0).abs() < 1e-3, "Re {re}");
    assert!((im / -1.8789e7 - 1.0).abs() < 1e-4, "Im {im}");
    let freqs: Vec<String> = (0..=400)
        .map(|i| format!("{}", 3200.0 + i as f64))
        .collect();
    let list = freqs.join(",");
    let j = coupler_json(
        "tests/data/couplers/closed-tube-25mm.yaml",
        &["--frequencies-hz", &list],
    );
    let (mut best, mut at) = (f64::INFINITY, 0.0);
    for i in 0..freqs.len() {
        let m = mag_db(&j["input_impedance"], i);
        if m < best {
            best = m;
            at = j["frequencies_hz"][i].as_f64().unwrap();
        }
    }
    assert!((at / 3432.8 - 1.0).abs() < 0.02, "minimum at {at} Hz");
}

// docs/architecture.md contract keys for every shipped model, on the default grid.
#[test]
fn every_shipped_model_gives_the_contract_json() {
    for m in [
        "iec-60318-5-2cc.yaml",
        "occluded-ear.yaml",
        "fixture-line3-a.yaml",
        "fixture-line3-b.yaml",
    ] {
        let j = coupler_json(&format!("reference/couplers/{m}"), &[]);
        assert!(j["coupler"].is_string(), "{m}");
        let n = j["frequencies_hz"].as_array().unwrap().len();
        assert_eq!(n, 240, "{m}: IEC 61260-1 1/24-octave grid, 20 Hz–20 kHz");
        assert_eq!(j["input_impedance"]["re"].as_array().unwrap().len(), n);
        let taps = j["taps"].as_object().unwrap();
        assert!(!taps.is_empty(), "{m}");
        for (name, t) in taps {
            for k in ["transfer_impedance", "pressure_transfer"] {
                assert_eq!(t[k]["re"].as_array().unwrap().len(), n, "{m} {name} {k}");
                assert_eq!(t[k]["im"].as_array().unwrap().len(), n, "{m} {name} {k}");
            }
        }
        // A passive coupler absorbs power: Re Z_in ≥ 0 at every frequency.
        for v in j["input_impedance"]["re"].as_array().unwrap() {
            assert!(v.as_f64().unwrap() >= 0.0, "{m}: Re Z_in < 0");
        }
    }
}

// Every problem of a bad model at once, with positions; exit 2.
#[test]
fn bad_model_reports_every_problem() {
    let p = root().join("tests/data/couplers/bad-several.yaml");
    let out = tragus().arg("coupler").arg(&p).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("(10 problem(s))"), "{err}");
    assert!(err.contains(
        "bad-several.yaml:3:1: unknown key `temprature_c`, did you mean `temperature_c`?"
    ));
    assert!(err.contains(
        "bad-several.yaml:6:5: elements[2]: unknown element `cavty`, did you mean `cavity`?"
    ));
}

// The SVG is well formed (balanced tags) and has its two panels' labels.
#[test]
fn svg_plot_is_well_formed() {
    let dir = tempfile::tempdir().unwrap();
    let svg = dir.path().join("z.svg");
    let out = tragus()
        .arg("coupler")
        .arg(root().join("reference/couplers/fixture-line3-a.yaml"))
        .arg("--svg")
        .arg(&svg)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let text = std::fs::read_to_string(&svg).unwrap();
    assert!(text.starts_with("<?xml") || text.starts_with("<svg"));
    let mut stack: Vec<String> = Vec::new();
    let mut rest = text.as_str();
    while let Some(i) = rest.find('<') {
        rest = &rest[i + 1..];
        let end = rest.find('>').expect("unclosed tag");
        let tag = &rest[..end];
        rest = &rest[end + 1..];
        if tag.starts_with('?') || tag.starts_with('!') || tag.ends_with('/') {
            continue;
        }
        let name: String = tag
            .trim_start_matches('/')
            .split_whitespace()
            .next()
            .unwrap()
            .into();
        if tag.starts_with('/') {
            assert_eq!(
                stack.pop().as_deref(),
                Some(name.as_str()),
                "unbalanced </{name}>"
            );
        } else {
            stack.push(name);
        }
    }
    assert!(stack.is_empty(), "unclosed: {stack:?}");
    assert!(text.contains("Hz"));
    assert!(text.contains("fixture-line3-a"));
}
