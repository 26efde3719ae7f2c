//! Drive monitors (issue 5, the drive caps under amplifier faults): the amplifier output
//! read back through an input of known gain. The pilot tone measures the amplifier's real
//! gain and abandons a sweep whose amplifier is off its calibration; the guard watches the
//! monitor while the sweep plays and fades the output when the volts pass the drive cap.
//!
//! References: the gains are the simulated bench's stated constants (0.25 V peak per FS at
//! the amplifier, 1 V peak per FS at the monitor input), so the expected readings follow by
//! hand: a gain fault of G dB reads as 20·lg(10^(G/20)) = G dB. The fade's step bound
//! A·sin(π/2N) is derived in `src/safety/ramp.rs` (a raised-cosine fade of N samples).

use crate::support::common;

use common::{root, tragus};
use std::path::Path;
use tragus::dsp::sweep::Stimulus;
use tragus::rig::simulated::{SimulatedRig, UnitKind, DRIVE_V_PER_FS, MONITOR_V_PER_FS};
use tragus::rig::Rig;
use tragus::safety::monitor::{MonitorPath, DRIVE_GAIN_TOLERANCE_DB};
use tragus::safety::setup::{SafeOutcome, SafetySetup, GUARD_BLOCK_S};
use tragus::station::{load_station_str, Caps};

/// Drive caps low enough that a 6 dB amplifier fault passes them while the sound stays
/// under every acoustic cap: the demo sweep drives 0.0158 V peak (−24 dBFS × 0.25 V/FS);
/// the limit is min(0.03, 0.015·√2) = 0.0212 V peak.
fn tight_caps() -> Caps {
    Caps {
        max_drive_v_rms: 0.015,
        max_drive_v_peak: 0.03,
        ..Caps::default()
    }
}

/// The demo plan's sweep on the simulated bench's own gains, monitors on inputs 3 and 4.
fn setup(caps: Caps) -> (Stimulus, SafetySetup) {
    let monitors = (0..2)
        .map(|o| MonitorPath {
            output: o,
            input: o + 2,
            input_v_peak_per_fs: Some(MONITOR_V_PER_FS),
            calibrated_v_peak_per_fs: Some(DRIVE_V_PER_FS),
        })
        .collect();
    let (stimulus, setup) = common::demo_safety_setup(caps, monitors);
    assert!(
        setup.budget.refusal().is_none(),
        "{:?}",
        setup.budget.refusal()
    );
    (stimulus, setup)
}

fn rig() -> SimulatedRig {
    common::demo_physical_rig("E2-000911", UnitKind::Design)
        .with_drive_monitors(vec![(0, 2), (1, 3)])
}

#[test]
fn an_amplifier_turned_up_during_the_sweep_trips_the_guard_on_its_monitor() {
    let (stimulus, setup) = setup(tight_caps());
    let fs = f64::from(stimulus.sample_rate_hz);
    let guard = setup.guard_for_sweep(&stimulus);
    // The monitor inputs are watched at the drive limit on their own scale.
    let limit_v = 0.015 * std::f64::consts::SQRT_2;
    for input in [2, 3] {
        let l = guard.limits_fs[input].as_ref().unwrap();
        assert!(l
            .iter()
            .all(|x| (x - limit_v / MONITOR_V_PER_FS).abs() < 1e-12));
    }

    // As calibrated, nothing trips.
    let mut ok = rig();
    ok.arm_guard(Some(guard.clone()));
    let capture = ok.play_and_capture(&stimulus, 4).unwrap();
    assert_eq!(capture.guard_trip, None);

    // +6 dB from 1 s on: 0.0316 V peak at the amplifier, over the 0.0212 V limit, while the
    // sound (some 120 dB SPL peak) stays under the acoustic caps: only the monitor sees it.
    let at = 48_000;
    let mut faulty = rig().with_amplifier_change(at, 6.0);
    faulty.arm_guard(Some(guard.clone()));
    let capture = faulty.play_and_capture(&stimulus, 4).unwrap();
    let trip = capture
        .guard_trip
        .clone()
        .expect("the monitor must trip the guard");
    assert!(trip.input == 2 || trip.input == 3, "{trip:?}");
    // Over the limit from the change on (plus the converters' 96-sample latency), not before.
    assert!(trip.first_over_sample >= at as usize + 96, "{trip:?}");
    assert!(trip.first_over_sample < at as usize + 96 + 4800, "{trip:?}");
    let volts = trip.peak_fs * MONITOR_V_PER_FS;
    assert!(volts > limit_v && volts <= 0.0158 * 2.0 * 1.01, "{volts} V");
    // Silent within one watch block plus one fade (docs/architecture.md, hearing safety).
    let documented_s = GUARD_BLOCK_S + tragus::safety::ramp::DEFAULT_FADE_S;
    let took_s = (trip.silent_from_sample - trip.first_over_sample) as f64 / fs;
    assert!(
        took_s > 0.0 && took_s <= documented_s + 1.0 / fs,
        "{took_s}"
    );
    // The fade adds at most A·sin(π/2N) to the signal's own steps; silence after it.
    let n_fade = guard.fade_frames;
    let bound = (std::f64::consts::PI / (2.0 * n_fade as f64)).sin();
    for (out, planned) in faulty.last_played().iter().zip(&stimulus.channels) {
        assert_eq!(
            &out[..trip.fade_start_sample],
            &planned[..trip.fade_start_sample]
        );
        assert!(out[trip.silent_from_sample..].iter().all(|&x| x == 0.0));
        let a = planned
            .iter()
            .map(|x| f64::from(x.abs()))
            .fold(0.0, f64::max);
        let step = |x: &[f32]| {
            x[trip.fade_start_sample..=trip.silent_from_sample]
                .windows(2)
                .map(|w| (f64::from(w[1]) - f64::from(w[0])).abs())
                .fold(0.0, f64::max)
        };
        assert!(step(out) <= step(planned) + a * bound + 1e-6);
    }
}

#[test]
fn the_pilot_reads_the_amplifier_gain_and_abandons_a_sweep_off_its_calibration() {
    let (stimulus, setup) = setup(Caps::default());
    // Within the tolerance (−0.5 dB): swept, and the reading is the fault to 0.05 dB.
    let mut rig_ok = rig().with_amplifier_gain_db(-0.5);
    let SafeOutcome::Swept { safety, .. } = setup.run(&mut rig_ok, &stimulus, 2).unwrap() else {
        panic!("a −0.5 dB amplifier is within the tolerance");
    };
    let pilot = safety.pilot.unwrap();
    assert_eq!(pilot.monitors.len(), 2);
    for m in &pilot.monitors {
        let d = m.deviation_db.unwrap();
        assert!((d + 0.5).abs() < 0.05, "{d}");
        let want = DRIVE_V_PER_FS * 10f64.powf(-0.5 / 20.0);
        let got = m.measured_v_peak_per_fs.unwrap();
        assert!((got / want - 1.0).abs() < 0.006, "{got} vs {want}");
    }

    // +6 dB: abandoned before the sweep, the reason in words with the numbers.
    let mut loud = rig().with_amplifier_gain_db(6.0);
    let outcome = setup.run(&mut loud, &stimulus, 2).unwrap();
    let SafeOutcome::Abandoned { reason, safety, .. } = outcome else {
        panic!("a +6 dB amplifier must not be swept");
    };
    assert!(
        reason.starts_with(
            "output 1: sweep abandoned: output 1's amplifier gives +6.0 dB against its calibration"
        ),
        "{reason}"
    );
    assert!(
        reason.contains(&format!("±{DRIVE_GAIN_TOLERANCE_DB:.1} dB")),
        "{reason}"
    );
    let d = safety.pilot.unwrap().monitors[0].deviation_db.unwrap();
    assert!((d - 6.0).abs() < 0.05, "{d}");
    // Only the pilot played (about 0.3 s), never the sweep.
    assert!(loud.clock_samples() < 48_000 / 2);

    // A monitor that sees nothing (the amplifier off, a broken wire): not swept either.
    let mut silent = rig().with_drive_monitors(vec![(0, 2)]);
    let outcome = setup.run(&mut silent, &stimulus, 2).unwrap();
    let SafeOutcome::Abandoned { reason, .. } = outcome else {
        panic!("an unread drive must not be swept");
    };
    assert!(
        reason.contains("the drive monitor (input 4) shows no pilot tone from output 2"),
        "{reason}"
    );
}

fn run_cli(dir: &Path, serial: &str, extra: &[&str]) -> (i32, serde_json::Value, String) {
    let json = dir.join(format!("{serial}.json"));
    let out = tragus()
        .arg("run")
        .arg(root().join("plans/demo-earbud.yaml"))
        .arg("--station")
        .arg(root().join("stations/line3-st1.yaml"))
        .args(["--serial", serial, "--store"])
        .arg(dir.join("store"))
        .arg("--json")
        .arg(&json)
        .args(extra)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr).to_string();
    let j = serde_json::from_str(&std::fs::read_to_string(&json).unwrap_or_default())
        .unwrap_or_else(|_| panic!("no result: {stderr}"));
    let stdout = String::from_utf8_lossy(&out.stdout).to_string();
    (out.status.code().unwrap(), j, stdout)
}

#[test]
fn the_demo_station_reads_its_drive_and_records_an_amplifier_fault() {
    let dir = tempfile::tempdir().unwrap();
    // As calibrated: the monitors read the simulated bench's own 0.25 V/FS.
    let (code, j, shown) = run_cli(dir.path(), "E2-000912", &[]);
    assert!(code == 0 || code == 1, "{j:#}");
    // The operator's view names each monitor and the gain it read.
    for o in [1, 2] {
        let line = format!("  drive   output {o} (monitor input {}): 0.2", o + 2);
        assert!(shown.contains(&line), "missing `{line}` in:\n{shown}");
    }
    let monitors = j["safety"]["pilot"]["monitors"].as_array().unwrap();
    assert_eq!(monitors.len(), 2);
    for m in monitors {
        let got = m["measured_v_peak_per_fs"].as_f64().unwrap();
        assert!((got / DRIVE_V_PER_FS - 1.0).abs() < 0.006, "{m}");
    }
    // +12 dB: a retest, not swept, the reason and a stored safety event.
    let (code, j, _) = run_cli(dir.path(), "E2-000913", &["--sim-amplifier-db", "12"]);
    assert_eq!(code, 3, "{j:#}");
    assert_eq!(j["verdict"], "retest");
    let reason = j["retest_reasons"][0].as_str().unwrap();
    assert!(
        reason.contains("amplifier gives +12.0 dB against its calibration"),
        "{reason}"
    );
    let store = tragus::store::Store::open(&dir.path().join("store")).unwrap();
    let events = store
        .safety_events(&tragus::store::SafetyEventFilter {
            kind: Some(tragus::store::SafetyKind::SweepAbandoned),
            ..Default::default()
        })
        .unwrap();
    assert_eq!(events.len(), 1);
    assert!(
        events[0].message.contains("+12.0 dB"),
        "{}",
        events[0].message
    );
    assert_eq!(events[0].serial.as_deref(), Some("E2-000913"));
    // A fault out of range is refused as bad input.
    let out = tragus()
        .arg("run")
        .arg(root().join("plans/demo-earbud.yaml"))
        .args([
            "--serial",
            "E2-000914",
            "--sim-amplifier-db",
            "60",
            "--store",
        ])
        .arg(dir.path().join("store"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--sim-amplifier-db: expected"));
}

#[test]
fn drive_monitors_in_the_station_file_are_checked_with_positions() {
    let bad = "\
station: st9
mode: engineering
audio:
  loopback: {input: 5, output: 1}
channels:
  left: {output: 1, input: 1}
drive_monitors:
  - {output: 1, input: 1}
  - {output: 2, input: 5}
  - {output: 2, input: 6}
";
    let err = load_station_str(bad, Path::new("st.yaml"))
        .unwrap_err()
        .to_string();
    for want in [
        "st.yaml:8:24: drive_monitors[0].input: expected an input that no channel records, found 1 (the input of channel left)",
        "st.yaml:9:24: drive_monitors[1].input: expected the loopback input 5 to monitor the loopback's own output 1, found output 2",
        "st.yaml:10:14: drive_monitors[2].output: expected an output no other monitor watches, found 2",
    ] {
        assert!(err.contains(want), "missing `{want}` in:\n{err}");
    }
    let err = load_station_str(
        "station: st9\nmode: engineering\ndrive_monitors: {output: 1}\n",
        Path::new("s.yaml"),
    )
    .unwrap_err()
    .to_string();
    assert!(
        err.starts_with("s.yaml:3:17: drive_monitors: expected a list"),
        "{err}"
    );
}

#[test]
fn production_on_a_sound_card_needs_every_output_monitored() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let cal = "\
station: st9
date_utc: \"2026-12-01T08:00:00Z\"
due_date: \"2999-12-31\"
operator: t.engineer
microphone:
  1: {fs_per_pa: 0.01}
  2: {fs_per_pa: 0.01}
drive:
  1: {volts_peak_per_fs: 0.25}
  2: {volts_peak_per_fs: 0.25}
";
    std::fs::write(d.join("cal.yaml"), cal).unwrap();
    let station = |monitors: &str| {
        let p = d.join("st.yaml");
        std::fs::write(
            &p,
            format!(
                "station: st9\nmode: production\nrig: soundcard\ncalibration: cal.yaml\n{monitors}"
            ),
        )
        .unwrap();
        p
    };
    let validate = |st: &Path| {
        let out = tragus()
            .arg("validate")
            // A plan in dB SPL/V with a declared product: what production accepts.
            .arg(root().join("tests/data/calibration/plan-spl.yaml"))
            .arg("--station")
            .arg(st)
            .output()
            .unwrap();
        (
            out.status.code().unwrap(),
            String::from_utf8_lossy(&out.stdout).to_string()
                + &String::from_utf8_lossy(&out.stderr),
        )
    };
    let (code, err) = validate(&station(""));
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("production needs the drive of every output monitored, but output(s) 1 have no drive monitor"), "{err}");
    // Wired but not calibrated: still refused (a monitor without a gain reads no volts).
    let wired = station("drive_monitors:\n  - {output: 1, input: 3}\n");
    let (code, err) = validate(&wired);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("output(s) 1 have no drive monitor with a calibrated gain"),
        "{err}"
    );
    // `calibrate monitor` gives each input its gain; then the monitor requirement is met.
    for input in ["3", "4"] {
        // Input 4 is no monitor of this station: its gain is kept all the same.
        let out = tragus()
            .args([
                "calibrate",
                "monitor",
                "--input",
                input,
                "--volts-peak-per-fs",
                "2",
                "--station",
            ])
            .arg(&wired)
            .output()
            .unwrap();
        common::assert_exit(&out, 0);
    }
    let written = tragus::calibration::load_calibration(&d.join("cal.yaml")).unwrap();
    assert_eq!(written.monitor[&3].volts_peak_per_fs, 2.0);
    assert_eq!(written.monitor[&4].volts_peak_per_fs, 2.0);
    let (code, err) = validate(&wired);
    assert!(!err.contains("drive of every output monitored"), "{err}");
    assert!(code == 0 || err.contains("sound-card"), "{code}: {err}");
    // A gain that is no gain is refused and nothing is written.
    let out = tragus()
        .args([
            "calibrate",
            "monitor",
            "--input",
            "3",
            "--volts-peak-per-fs",
            "0",
            "--station",
        ])
        .arg(&wired)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr)
        .contains("--volts-peak-per-fs: expected a gain above 0 V"));
}
