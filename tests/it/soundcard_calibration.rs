//! `tragus calibrate mic|drive --record` through the real sound server (PulseAudio's null
//! sink, `tests/soundcard/pulse.sh`; CI runs it in `.ci/run`). Without a reachable server
//! every test prints why and skips; with `CI=true` a skip is a failure.
//!
//! The sound calibrator is simulated by a second client: `pacat` plays a 1 kHz sine of
//! known amplitude into the null sink, whose monitor is our input. The null sink mixes in
//! float32 at unity gain, so what the microphone input reads is exactly that sine: the
//! truth is the amplitude the test wrote.
#![cfg(feature = "soundcard")]

use crate::support::soundcard;

use soundcard::{server_up, wait_for_playback_streams, BUFFER_FRAMES, SERVER};
use std::path::Path;
use std::process::{Child, Command, Output, Stdio};
use tragus::calibration::load_calibration;

const RATE_HZ: u32 = 48_000;

/// The simulated microphone's sensitivity, full scale (rms) per pascal (rms): an invented
/// value of the order a measurement microphone and preamplifier give.
const TRUE_FS_PER_PA: f64 = 0.05;

/// Sound pressure of the calibrator, Pa rms: 94 dB re 20 µPa, i.e. 20 µPa · 10^(94/20) =
/// 1.00238 Pa (ISO 1683:2015 reference pressure; IEC 60942's nominal 94 dB calibrator).
/// 1 Pa would be 93.98 dB.
fn calibrator_pa() -> f64 {
    20e-6 * 10f64.powf(94.0 / 20.0)
}

/// `pacat` playing `seconds` of a `freq_hz` sine of rms `rms_fs` on channel 1 (channel 2
/// silent) into the server's null sink, in the background. Killed by the caller.
fn play_calibrator(dir: &Path, freq_hz: f64, rms_fs: f64, seconds: f64) -> Child {
    let n = (seconds * f64::from(RATE_HZ)) as usize;
    let amp = rms_fs * std::f64::consts::SQRT_2;
    let w = 2.0 * std::f64::consts::PI * freq_hz / f64::from(RATE_HZ);
    let mut bytes = Vec::with_capacity(n * 8);
    for k in 0..n {
        let v = (amp * (w * k as f64).sin()) as f32;
        bytes.extend_from_slice(&v.to_le_bytes());
        bytes.extend_from_slice(&0f32.to_le_bytes());
    }
    let raw = dir.join("calibrator.f32");
    std::fs::write(&raw, bytes).unwrap();
    Command::new("pacat")
        .args([
            "--playback",
            "--raw",
            "--format=float32le",
            "--rate=48000",
            "--channels=2",
            "--device=tragus_loop",
        ])
        .arg(&raw)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("run pacat")
}

fn calibrate(args: &[&str], out: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_tragus"))
        .arg("calibrate")
        .args(args)
        .args(["--buffer-frames", BUFFER_FRAMES, "--out"])
        .arg(out)
        .output()
        .expect("run tragus")
}

#[test]
fn mic_record_reads_a_simulated_calibrator_to_0_02_db() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let rms_fs = TRUE_FS_PER_PA * calibrator_pa();
    // 30 s: outlasts start-up, the 3 s recording and its tail with room to spare.
    let mut calibrator = play_calibrator(dir.path(), 1000.0, rms_fs, 30.0);
    let playing = wait_for_playback_streams(1);
    let cal_path = dir.path().join("cal.yaml");
    let out = calibrate(
        &[
            "mic",
            "--record",
            "3",
            "--input",
            "1",
            "--calibrator-model",
            "Fernhill SC-2 class 1",
            "--calibrator-serial",
            "FH-40117",
            "--station-id",
            "larkspur-sc-bench",
        ],
        &cal_path,
    );
    let _ = calibrator.kill();
    let _ = calibrator.wait();
    assert!(playing, "the simulated calibrator never started playing");
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let cal = load_calibration(&cal_path).unwrap();
    let err_db = 20.0 * (cal.microphone[&1].fs_per_pa / TRUE_FS_PER_PA).log10();
    eprintln!("calibrate mic --record: {err_db:+.2e} dB from the truth");
    // 0.02 dB: the acceptance for a simulated calibrator tone at 94 dB.
    assert!(err_db.abs() < 0.02, "{err_db} dB");
    assert_eq!(cal.station, "larkspur-sc-bench");
    assert_eq!(cal.instruments[0].serial, "FH-40117");
}

#[test]
fn mic_record_with_nothing_playing_is_refused_and_writes_nothing() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let cal_path = dir.path().join("cal.yaml");
    // The null sink with no client playing: its monitor is digital silence.
    let out = calibrate(
        &[
            "mic",
            "--record",
            "2",
            "--input",
            "1",
            "--calibrator-model",
            "m",
            "--calibrator-serial",
            "s",
        ],
        &cal_path,
    );
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("sound card input 1: no tone: the recording is silent")
            && err.contains("nothing was written"),
        "{err}"
    );
    assert!(!cal_path.exists());
}

#[test]
fn drive_record_through_the_loopback_gives_the_inputs_volts_per_fs_to_0_01_db() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let cal_path = dir.path().join("cal.yaml");
    // Output 1 comes back bit-exact on input 1 (null sink monitor), so the output's volts
    // per full scale equal the input's: whatever the input reads, scaled by its known
    // 0.5 V/FS, is what the output put out for the −20 dBFS sine.
    let out = calibrate(
        &[
            "drive",
            "--record",
            "2",
            "--output",
            "1",
            "--input",
            "1",
            "--input-volts-peak-per-fs",
            "0.5",
            "--tone-dbfs",
            "-20",
        ],
        &cal_path,
    );
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let cal = load_calibration(&cal_path).unwrap();
    let g = cal.drive[&1].volts_peak_per_fs;
    let err_db = 20.0 * (g / 0.5).log10();
    eprintln!("calibrate drive --record: {err_db:+.2e} dB from the truth");
    // 0.01 dB: the brief's bound for a digital loopback (the band-pass reading of a clean
    // sine is far better; this leaves room for the edges of the cut-out tone).
    assert!(err_db.abs() < 0.01, "{g} V/FS, {err_db} dB");
    let reading = cal.drive[&1].reading.as_ref().expect("reading details");
    assert_eq!(reading.method, "input");
    assert_eq!(reading.input_volts_peak_per_fs, Some(0.5));
}

#[test]
fn drive_record_refuses_a_tone_that_does_not_come_back() {
    let _guard = SERVER.lock().unwrap_or_else(|e| e.into_inner());
    if !server_up() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let cal_path = dir.path().join("cal.yaml");
    // Played on output 2, recorded on input 1: the null sink keeps channels apart, so the
    // input is silent and the tone is not found. Refused, nothing written.
    let out = calibrate(
        &[
            "drive",
            "--record",
            "2",
            "--output",
            "2",
            "--input",
            "1",
            "--input-volts-peak-per-fs",
            "0.5",
        ],
        &cal_path,
    );
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("the tone played on output 2 is not in the recording")
            && err.contains("nothing was written"),
        "{err}"
    );
    assert!(!cal_path.exists());
}
