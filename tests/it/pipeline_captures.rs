//! Captures of every kind a station meets, through the real binary: delayed, inverted,
//! silent, clipped, short, damaged. Each gives the right verdict or a clear error, never a
//! panic.

use crate::support::common;

use common::*;

fn plan() -> std::path::PathBuf {
    root().join("tests/data/e2e/sweep-1s.yaml")
}

fn run_analyze(channels: Vec<Vec<f32>>, rate: u32) -> (i32, serde_json::Value) {
    let dir = tempfile::tempdir().unwrap();
    let cap = dir.path().join("capture.wav");
    write_f32_wav(&cap, rate, &channels);
    analyze(&plan(), &cap)
}

fn stim() -> (u32, Vec<f32>) {
    let dir = tempfile::tempdir().unwrap();
    let (rate, ch) = stimulus_of(&plan(), dir.path());
    (rate, ch[0].clone())
}

// Pure delays: the list (0, 1, 137, 4801 samples) must come back exactly.
#[test]
fn latency_of_pure_delays_is_exact() {
    let (rate, s) = stim();
    for d in [0usize, 1, 137, 4801] {
        let mut y = vec![0f32; d];
        y.extend_from_slice(&s);
        y.truncate(s.len());
        let (code, json) = run_analyze(vec![y], rate);
        assert_eq!(code, 0, "delay {d}: {}", json["verdict"]);
        assert_eq!(json["channels"][0]["latency_samples"], d as i64);
        assert_eq!(json["channels"][0]["polarity"], "positive");
    }
}

// An inverted channel reads negative and fails the plan's polarity check (exit 1).
#[test]
fn inverted_channel_fails_polarity() {
    let (rate, s) = stim();
    let y: Vec<f32> = s.iter().map(|v| -v).collect();
    let (code, json) = run_analyze(vec![y], rate);
    assert_eq!(code, 1);
    assert_eq!(json["verdict"], "fail");
    assert_eq!(json["channels"][0]["polarity"], "negative");
    let pol = json["checks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["id"] == "pol")
        .unwrap();
    assert_eq!(pol["verdict"], "fail");
}

// Digital silence: no signal → retest (exit 3), never a pass.
#[test]
fn silence_is_a_retest() {
    let (rate, s) = stim();
    let (code, json) = run_analyze(vec![vec![0.0; s.len()]], rate);
    assert_eq!(code, 3);
    assert_eq!(json["verdict"], "retest");
    let reasons = json["channels"][0]["retest_reasons"].as_array().unwrap();
    assert!(
        reasons.iter().any(|r| r["kind"] == "no_signal"),
        "{reasons:?}"
    );
}

// Noise only (a dead channel with a live converter) is no signal too.
#[test]
fn noise_only_is_a_retest() {
    let (rate, s) = stim();
    let y: Vec<f32> = gaussian_noise(s.len(), 1e-4, 3)
        .into_iter()
        .map(|v| v as f32)
        .collect();
    let (code, json) = run_analyze(vec![y], rate);
    assert_eq!(code, 3, "{}", json["verdict"]);
    let reasons = json["channels"][0]["retest_reasons"].as_array().unwrap();
    assert!(
        reasons.iter().any(|r| r["kind"] == "no_signal"),
        "{reasons:?}"
    );
}

// A capture driven 12 dB into full scale and clipped there: retest with the clip count.
#[test]
fn clipped_capture_is_a_retest() {
    let (rate, s) = stim();
    let y: Vec<f32> = s.iter().map(|v| (v * 8.0).clamp(-1.0, 1.0)).collect();
    let (code, json) = run_analyze(vec![y], rate);
    assert_eq!(code, 3);
    let reasons = json["channels"][0]["retest_reasons"].as_array().unwrap();
    let clip = reasons
        .iter()
        .find(|r| r["kind"] == "clipping")
        .expect("clipping");
    assert!(clip["n_samples"].as_u64().unwrap() > 1000);
}

// A capture shorter than the stimulus (the recorder stopped early) is a retest, with both
// lengths in the reason.
#[test]
fn short_capture_is_a_retest() {
    let (rate, s) = stim();
    let n = s.len() / 2;
    let (code, json) = run_analyze(vec![s[..n].to_vec()], rate);
    assert_eq!(code, 3);
    let reasons = json["channels"][0]["retest_reasons"].as_array().unwrap();
    let t = reasons
        .iter()
        .find(|r| r["kind"] == "truncated")
        .expect("truncated");
    assert_eq!(t["n_captured"], n as u64);
    assert_eq!(t["n_needed"], s.len() as u64);
}

fn analyze_file_stderr(cap: &std::path::Path) -> (i32, String) {
    let out = tragus()
        .arg("analyze")
        .arg(plan())
        .arg("--capture")
        .arg(cap)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

// A WAV file cut off in the middle of its data (a copy that did not finish): a clear error
// naming the file, exit 2, no panic.
#[test]
fn damaged_wav_is_bad_input_with_a_clear_message() {
    let (rate, s) = stim();
    let dir = tempfile::tempdir().unwrap();
    let cap = dir.path().join("capture.wav");
    write_f32_wav(&cap, rate, &[s]);
    let bytes = std::fs::read(&cap).unwrap();
    for cut in [10usize, 44, 1000, bytes.len() / 2 + 1] {
        let bad = dir.path().join(format!("cut-{cut}.wav"));
        std::fs::write(&bad, &bytes[..cut]).unwrap();
        let (code, err) = analyze_file_stderr(&bad);
        assert!(code == 2 || code == 3, "cut {cut}: exit {code}, {err}");
        assert!(err.starts_with("tragus: "), "cut {cut}: {err}");
        assert!(err.contains(&bad.display().to_string()), "cut {cut}: {err}");
        assert!(!err.contains("panicked"), "cut {cut}: {err}");
    }
}

// The wrong sample rate or too few channels: exit 2, the message names both sides.
#[test]
fn wrong_rate_and_missing_channel_are_bad_input() {
    let (_, s) = stim();
    let dir = tempfile::tempdir().unwrap();
    let cap = dir.path().join("capture-44k.wav");
    write_f32_wav(&cap, 44_100, std::slice::from_ref(&s));
    let (code, err) = analyze_file_stderr(&cap);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("44100") && err.contains("48000"), "{err}");

    let plan2 = dir.path().join("two.yaml");
    let text = std::fs::read_to_string(plan()).unwrap().replace(
        "  - {name: dut, output: 1, input: 1}",
        "  - {name: dut, output: 1, input: 1}\n  - {name: other, output: 2, input: 2}",
    );
    std::fs::write(&plan2, text).unwrap();
    let cap = dir.path().join("mono.wav");
    write_f32_wav(&cap, 48_000, &[s]);
    let out = tragus()
        .arg("analyze")
        .arg(&plan2)
        .arg("--capture")
        .arg(&cap)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains('2') && err.contains('1'), "{err}");
}

// The result JSON keeps the contract's field names (docs/architecture.md, "Result JSON").
#[test]
fn result_json_has_the_contract_fields() {
    let (rate, s) = stim();
    let (_, json) = run_analyze(vec![s], rate);
    for k in ["tool", "plan", "serial", "verdict", "channels", "checks"] {
        assert!(json.get(k).is_some(), "missing {k}");
    }
    assert_eq!(json["tool"]["name"], "tragus");
    for k in ["id", "revision", "sha256"] {
        assert!(json["plan"].get(k).is_some(), "missing plan.{k}");
    }
    let ch = &json["channels"][0];
    for k in [
        "name",
        "unit",
        "latency_samples",
        "polarity",
        "snr_db",
        "peak_dbfs",
        "frequencies_hz",
        "response_db",
        "phase_deg",
        "thd_percent",
        "thd_iec_percent",
        "harmonics_db",
        "rub_buzz_db",
    ] {
        assert!(ch.get(k).is_some(), "missing channels[0].{k}");
    }
    assert_eq!(ch["unit"], "dB FS/FS");
    for k in ["2", "3", "4", "5"] {
        assert!(ch["harmonics_db"].get(k).is_some(), "missing HD{k}");
    }
    let c = &json["checks"][0];
    for k in ["id", "channel", "verdict", "worst_margin_db", "at_hz"] {
        assert!(c.get(k).is_some(), "missing checks[0].{k}");
    }
}
