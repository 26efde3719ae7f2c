//! Two stations, two different fixtures, one plan whose limits are written for the
//! reference coupler: the same virtual unit must get the same verdict and the same
//! corrected response on both (issue 3), and a unit that does not seal must fail the
//! low-frequency limit on both. Runs the real binary on the physical simulated rig.
//!
//! The outside reference here is physics, not a file: both stations simulate the same
//! electro-mechano-acoustic unit in two different acoustic loads, and the correction
//! (Thévenin's theorem, docs/architecture.md formula) must take both to the same reference-coupler
//! response.

use crate::support::common;

use common::*;
use std::path::Path;

fn demo() -> std::path::PathBuf {
    root().join("plans/demo-earbud.yaml")
}

fn fixture(name: &str) -> std::path::PathBuf {
    root().join("reference/couplers").join(name)
}

fn run_on(store: &Path, fixture_file: &str, serial: &str, unit: &str) -> serde_json::Value {
    let out = tragus()
        .arg("run")
        .arg(demo())
        .args([
            "--serial",
            serial,
            "--sim-unit",
            unit,
            "--sim-channel",
            "left",
        ])
        .arg("--fixture")
        .arg(fixture(fixture_file))
        .arg("--store")
        .arg(store)
        .args(["--json", "-"])
        .output()
        .expect("run tragus");
    serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&out.stderr)))
}

fn series(json: &serde_json::Value, ch: usize, key: &str) -> Vec<f64> {
    json["channels"][ch][key]
        .as_array()
        .unwrap_or_else(|| panic!("no {key}"))
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect()
}

fn failed(json: &serde_json::Value) -> Vec<(String, String, f64)> {
    json["checks"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|c| c["verdict"] == "fail")
        .map(|c| {
            (
                c["id"].as_str().unwrap().to_string(),
                c["channel"].as_str().unwrap().to_string(),
                c["at_hz"].as_f64().unwrap_or(f64::NAN),
            )
        })
        .collect()
}

/// Lowest and highest frequency of the comparison: the band of the plan's response limits.
const BAND_HZ: (f64, f64) = (50.0, 8_000.0);

/// Worst |corrected A − corrected B| over `BAND_HZ` for every channel, after checking that
/// the raw fixture responses do differ by several dB (else the test would prove nothing).
fn worst_corrected_difference(a: &serde_json::Value, b: &serde_json::Value) -> f64 {
    let mut worst = 0.0f64;
    for ch in 0..2 {
        let f = series(a, ch, "frequencies_hz");
        let (ra, rb) = (series(a, ch, "response_db"), series(b, ch, "response_db"));
        let (fa, fb) = (
            series(a, ch, "fixture_response_db"),
            series(b, ch, "fixture_response_db"),
        );
        let mut raw_diff = 0.0f64;
        for k in 0..f.len() {
            if f[k] < BAND_HZ.0 || f[k] > BAND_HZ.1 {
                continue;
            }
            worst = worst.max((ra[k] - rb[k]).abs());
            raw_diff = raw_diff.max((fa[k] - fb[k]).abs());
        }
        assert!(raw_diff > 3.0, "fixtures differ by only {raw_diff} dB");
    }
    worst
}

// The unit the plan's source model describes (the design, no manufacturing spread) on two
// stations: issue 3 asks for the same verdict and corrected responses within 0.1 dB.
// What is left is converter noise and the nonlinear part of the response, both far below.
#[test]
fn the_design_unit_on_two_fixtures_agrees_within_a_tenth_of_a_db() {
    let dir = tempfile::tempdir().unwrap();
    let a = run_on(dir.path(), "fixture-line3-a.yaml", "E2-000300", "design");
    let b = run_on(dir.path(), "fixture-line3-b.yaml", "E2-000300", "design");
    assert_eq!(a["verdict"], "pass", "on A: {:?}", failed(&a));
    assert_eq!(b["verdict"], "pass", "on B: {:?}", failed(&b));
    let worst = worst_corrected_difference(&a, &b);
    println!("design unit, two stations: worst corrected difference {worst:.4} dB");
    assert!(worst < 0.1, "corrected responses differ by {worst} dB");
}

// Units with manufacturing spread: their source impedance differs from the plan's nominal
// source model, so the correction is no longer exact; the two stations must still agree
// on the verdict, and the difference stays within 2 dB (measured ≈ 1.5 dB at most, at the
// fixtures' 6–7 kHz features, where the fixture and source impedances are comparable).
#[test]
fn units_with_spread_get_the_same_verdict_on_both_fixtures() {
    let dir = tempfile::tempdir().unwrap();
    let mut worst = 0.0f64;
    for i in 0..4 {
        let serial = format!("E2-{:06}", 300 + i);
        let a = run_on(dir.path(), "fixture-line3-a.yaml", &serial, "nominal");
        let b = run_on(dir.path(), "fixture-line3-b.yaml", &serial, "nominal");
        assert_eq!(a["verdict"], "pass", "{serial} on A: {:?}", failed(&a));
        assert_eq!(b["verdict"], "pass", "{serial} on B: {:?}", failed(&b));
        worst = worst.max(worst_corrected_difference(&a, &b));
    }
    println!("spread units, two stations: worst corrected difference {worst:.3} dB");
    assert!(worst < 2.0, "corrected responses differ by {worst} dB");
}

#[test]
fn a_unit_that_does_not_seal_fails_the_low_frequency_limit_on_both() {
    let dir = tempfile::tempdir().unwrap();
    for fx in ["fixture-line3-a.yaml", "fixture-line3-b.yaml"] {
        let json = run_on(dir.path(), fx, "E2-000310", "seal-leak");
        assert_eq!(json["verdict"], "fail", "{fx}");
        let f = failed(&json);
        // `bass` is the plan's low-frequency limit (mean level 50–200 Hz).
        assert!(
            f.iter().any(|(id, ch, _)| id == "bass" && ch == "left"),
            "{fx}: {f:?}"
        );
    }
}
