//! The hearing-safety guard on a real sound card (issue 5): through the CI sound server
//! (PulseAudio's null sink, a bit-exact loopback; `tests/soundcard/pulse.sh`), a loud
//! sound that arrives at the "microphone" while the sweep plays trips the guard in the
//! rig's callbacks: the output is faded to silence, the unit is a retest and its record
//! says why. The pilot tone runs first and reads the loopback's level.
//!
//! The reference is the loopback itself: the input carries exactly what was played plus
//! what another program plays into the same sink (the server mixes at unity gain), so a
//! full-scale tone added to the sweep passes the input's clipping point, which every
//! guard limit sits under.
#![cfg(feature = "soundcard")]

use crate::support::soundcard;

use soundcard::{playback_streams, root, server_up, wait_for_playback_streams, SERVER};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// A calibration of the loopback as a bench: 0.1 FS/Pa "microphones" and 0.1 V/FS
/// "drives" (invented; they only set what the levels mean).
const CALIBRATION: &str = "\
station: larkspur-sc-guard
date_utc: \"2026-12-01T08:00:00Z\"
due_date: \"2999-12-31\"
operator: t.engineer
instruments:
  - {role: calibrator, model: \"Fernhill SC-2 class 1\", serial: \"FH-40117\"}
microphone:
  1: {fs_per_pa: 0.1}
  2: {fs_per_pa: 0.1}
drive:
  1: {volts_peak_per_fs: 0.1}
  2: {volts_peak_per_fs: 0.1}
";

fn wait_until(what: &str, cond: impl Fn() -> bool) {
    let t0 = Instant::now();
    while !cond() {
        assert!(t0.elapsed() < Duration::from_secs(20), "timed out: {what}");
        std::thread::sleep(Duration::from_millis(10));
    }
}

#[test]
fn a_loud_sound_during_the_sweep_trips_the_guard_and_the_unit_is_a_retest() {
    let _lock = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("cal.yaml"), CALIBRATION).unwrap();
    let station = dir.path().join("station.yaml");
    std::fs::write(
        &station,
        "station: larkspur-sc-guard\nmode: engineering\nrig: soundcard\naudio:\n  buffer_frames: 4096\ncalibration: cal.yaml\n",
    )
    .unwrap();
    // A full-scale 1 kHz tone, 3 s, stereo float32, to play into the sink over the sweep.
    let tone: Vec<u8> = (0..48_000 * 3)
        .flat_map(|k| {
            let v = (2.0 * std::f32::consts::PI * 1000.0 * k as f32 / 48_000.0).sin();
            [v.to_le_bytes(), v.to_le_bytes()].concat()
        })
        .collect();
    let tone_path = dir.path().join("tone.raw");
    std::fs::write(&tone_path, tone).unwrap();

    let json = dir.path().join("result.json");
    let store = dir.path().join("store");
    let child = Command::new(env!("CARGO_BIN_EXE_tragus"))
        .arg("run")
        .arg("tests/data/plans/soundcard/long.yaml")
        .args(["--serial", "SC-GUARD-1", "--station"])
        .arg(&station)
        .arg("--store")
        .arg(&store)
        .arg("--json")
        .arg(&json)
        .current_dir(root())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn tragus");
    // First the pilot's playback stream comes and goes, then the sweep's.
    assert!(wait_for_playback_streams(1), "the pilot never played");
    wait_until("the pilot's stream to end", || playback_streams() == 0);
    assert!(wait_for_playback_streams(1), "the sweep never played");
    std::thread::sleep(Duration::from_millis(800));
    let loud = Command::new("pacat")
        .args([
            "--playback",
            "--raw",
            "--format=float32le",
            "--rate=48000",
            "--channels=2",
        ])
        .arg(&tone_path)
        .status()
        .expect("pacat");
    assert!(loud.success());
    let out = child.wait_with_output().expect("wait");
    let stderr = String::from_utf8_lossy(&out.stderr);
    let result: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap_or_default())
            .unwrap_or(serde_json::Value::Null);
    assert_eq!(out.status.code(), Some(3), "{stderr}\n{result:#}");
    assert_eq!(result["verdict"], "retest");
    // The pilot read the loopback: −36 dBFS played, −36 dBFS back (a digital copy), i.e.
    // 0.015849 FS / 0.1 FS/Pa = 0.15849 Pa peak, 0.11207 Pa rms, 74.97 dB SPL (ISO 1683
    // reference 20 µPa), written out here.
    let pilot = &result["safety"]["pilot"]["channels"][0];
    let spl = pilot["spl_db"].as_f64().unwrap();
    let want = 20.0 * (10f64.powf(-36.0 / 20.0) / 0.1 / 2f64.sqrt() / 20e-6).log10();
    assert!((want - 74.969).abs() < 0.001);
    assert!((spl - want).abs() < 0.05, "{spl}");
    let trip = &result["safety"]["guard_trip"];
    assert!(trip.is_object(), "{result:#}");
    eprintln!("guard trip: {trip}");
    assert!(trip["peak_fs"].as_f64().unwrap() > trip["limit_fs"].as_f64().unwrap());
    let reasons = result["retest_reasons"].to_string() + &result["channels"].to_string();
    assert!(
        reasons.contains("hearing-safety guard tripped"),
        "{reasons}"
    );
    // The fade began within the sweep (the output was still playing when it tripped).
    let n_sweep = 48_000.0 * 4.0;
    assert!(trip["fade_start_sample"].as_f64().unwrap() < n_sweep + 48_000.0);
    // Recorded, with the trip inside the hashed result.
    let records = tragus_records(&store);
    assert_eq!(records.len(), 1);
    assert_eq!(records[0]["verdict"], "retest");
}

fn tragus_records(store: &std::path::Path) -> Vec<serde_json::Value> {
    let out = Command::new(env!("CARGO_BIN_EXE_tragus"))
        .args(["records", "--json", "-", "--store"])
        .arg(store)
        .output()
        .unwrap();
    serde_json::from_slice::<serde_json::Value>(&out.stdout)
        .ok()
        .and_then(|v| v.as_array().cloned())
        .unwrap_or_default()
}
