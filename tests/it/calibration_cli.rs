//! `tragus calibrate mic|drive|tone` as a user meets them: files written atomically with
//! their instruments and dates, refusals with exit 2 and nothing written.

use crate::support::common;

use common::{assert_exit, tragus, write_f32_wav};
use std::path::Path;
use tragus::calibration::{load_calibration, Calibration};

const RATE_HZ: u32 = 48_000;

/// Two input channels: a calibrator tone (94 dB SPL at `freq_hz` through `fs_per_pa`) on
/// input 2, silence on input 1.
fn calibrator_wav(path: &Path, freq_hz: f64, fs_per_pa: f64) {
    // 94 dB SPL = 20 µPa · 10^(94/20) = 1.00237 Pa rms (ISO 1683 reference pressure).
    let amp = fs_per_pa * 20e-6 * 10f64.powf(94.0 / 20.0) * std::f64::consts::SQRT_2;
    let n = 2 * RATE_HZ as usize;
    let tone: Vec<f32> = (0..n)
        .map(|i| {
            (amp * (2.0 * std::f64::consts::PI * freq_hz * i as f64 / f64::from(RATE_HZ)).sin())
                as f32
        })
        .collect();
    write_f32_wav(path, RATE_HZ, &[vec![0.0; n], tone]);
}

fn mic(dir: &Path, wav: &Path, extra: &[&str]) -> std::process::Output {
    tragus()
        .args(["calibrate", "mic", "--capture"])
        .arg(wav)
        .args([
            "--input",
            "2",
            "--calibrator-model",
            "Fernhill SC-2 class 1",
            "--calibrator-serial",
            "FH-40117",
            "--station-id",
            "larkspur-line3-st1",
            "--operator",
            "j.okafor",
            "--out",
        ])
        .arg(dir.join("cal.yaml"))
        .args(extra)
        .output()
        .unwrap()
}

#[test]
fn mic_then_drive_make_a_complete_calibration() {
    let dir = tempfile::tempdir().unwrap();
    let wav = dir.path().join("cal-tone.wav");
    calibrator_wav(&wav, 1000.0, 0.04);
    let out = mic(dir.path(), &wav, &["--due-days", "7"]);
    assert_exit(&out, 0);
    let cal = load_calibration(&dir.path().join("cal.yaml")).unwrap();
    // 0.02 dB: the acceptance for a simulated calibrator tone.
    let err_db = 20.0 * (cal.microphone[&2].fs_per_pa / 0.04).log10();
    assert!(err_db.abs() < 0.02, "{err_db}");
    assert_eq!(cal.instruments[0].serial, "FH-40117");
    assert_eq!(cal.operator, "j.okafor");
    let today = Calibration::today_utc();
    assert_eq!(cal.due_date, today + time::Duration::days(7));

    // Drive by meter: −20 dBFS sine read as 0.2 V rms → √2 · 0.2 / 0.1 = 2.828 V/FS.
    let out = tragus()
        .args([
            "calibrate",
            "drive",
            "--output",
            "1",
            "--tone-dbfs",
            "-20",
            "--measured-v-rms",
            "0.2",
            "--meter-model",
            "Quillon DM-6",
            "--meter-serial",
            "QD-2290",
            "--due-days",
            "30",
            "--out",
        ])
        .arg(dir.path().join("cal.yaml"))
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let cal = load_calibration(&dir.path().join("cal.yaml")).unwrap();
    // 1e-12 relative: arithmetic only.
    assert!((cal.drive[&1].volts_peak_per_fs / (2f64.sqrt() * 2.0) - 1.0).abs() < 1e-12);
    // The microphone entry stays; the due date never moves later than the older reading's.
    assert!(cal.microphone.contains_key(&2));
    assert_eq!(cal.due_date, today + time::Duration::days(7));
    assert_eq!(cal.instruments.len(), 2);
}

#[test]
fn a_250_hz_tone_is_refused_and_nothing_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let wav = dir.path().join("wrong.wav");
    calibrator_wav(&wav, 250.0, 0.04);
    let out = mic(dir.path(), &wav, &[]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("not a calibrator tone at 1000 Hz: the strongest tone is at 250.0 Hz"),
        "{err}"
    );
    assert!(err.contains("nothing was written"), "{err}");
    assert!(!dir.path().join("cal.yaml").exists());
    // Silence on input 1.
    let out = tragus()
        .args(["calibrate", "mic", "--capture"])
        .arg(&wav)
        .args([
            "--input",
            "1",
            "--calibrator-model",
            "m",
            "--calibrator-serial",
            "s",
            "--out",
        ])
        .arg(dir.path().join("cal.yaml"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no tone: the recording is silent"));
}

#[test]
fn drive_through_a_calibrated_input() {
    // `calibrate tone` writes the sine; the "recording" is that sine through an input of
    // 0.5 V per FS, with an output gain of 3 V/FS: the input sees the tone scaled by 3/0.5.
    let dir = tempfile::tempdir().unwrap();
    let tone = dir.path().join("tone.wav");
    let out = tragus()
        .args([
            "calibrate",
            "tone",
            "--tone-dbfs",
            "-30",
            "--duration-s",
            "2",
            "--out",
        ])
        .arg(&tone)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let (rate, ch) = common::read_f32_wav(&tone);
    let rec: Vec<f32> = ch[0].iter().map(|&x| x * 6.0).collect();
    let rec_path = dir.path().join("rec.wav");
    write_f32_wav(&rec_path, rate, &[rec]);
    let out = tragus()
        .args([
            "calibrate",
            "drive",
            "--output",
            "1",
            "--tone-dbfs",
            "-30",
            "--capture",
        ])
        .arg(&rec_path)
        .args(["--input", "1", "--input-volts-peak-per-fs", "0.5", "--out"])
        .arg(dir.path().join("cal.yaml"))
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let cal = load_calibration(&dir.path().join("cal.yaml")).unwrap();
    let g = cal.drive[&1].volts_peak_per_fs;
    // 0.02 dB, the same acceptance as a microphone reading (band-pass level of a sine).
    assert!((20.0 * (g / 3.0).log10()).abs() < 0.02, "{g}");
}

#[test]
fn station_file_names_the_station_and_the_calibration_file() {
    // `--station FILE` as `run` takes it: the calibration gets the file's station id and
    // is written where the station's `calibration:` points (relative to the station file).
    let dir = tempfile::tempdir().unwrap();
    let wav = dir.path().join("cal-tone.wav");
    calibrator_wav(&wav, 1000.0, 0.04);
    std::fs::create_dir(dir.path().join("cal")).unwrap();
    let station = dir.path().join("st.yaml");
    std::fs::write(
        &station,
        "station: larkspur-line3-st9\nmode: production\ncalibration: cal/st9.yaml\n",
    )
    .unwrap();
    // The station loader wants its calibration file to exist, so the first reading names
    // the file and the id; the next ones come from the station file.
    let out = tragus()
        .args([
            "calibrate",
            "drive",
            "--output",
            "1",
            "--measured-v-rms",
            "0.2",
        ])
        .args(["--meter-model", "m", "--meter-serial", "s", "--station-id"])
        .arg("larkspur-line3-st9")
        .arg("--out")
        .arg(dir.path().join("cal/st9.yaml"))
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let out = tragus()
        .args(["calibrate", "mic", "--capture"])
        .arg(&wav)
        .args([
            "--input",
            "2",
            "--calibrator-model",
            "m",
            "--calibrator-serial",
            "s",
        ])
        .arg("--station")
        .arg(&station)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let cal = load_calibration(&dir.path().join("cal/st9.yaml")).unwrap();
    assert_eq!(cal.station, "larkspur-line3-st9");
    // Both readings are in the station's file: the default --out was that file.
    assert!(cal.microphone.contains_key(&2) && cal.drive.contains_key(&1));
    // A calibration of another station is not overwritten through this station's file.
    let other = dir.path().join("other.yaml");
    std::fs::write(
        &other,
        "station: larkspur-line3-st8\nmode: production\ncalibration: cal/st9.yaml\n",
    )
    .unwrap();
    let out = tragus()
        .args(["calibrate", "mic", "--capture"])
        .arg(&wav)
        .args([
            "--input",
            "2",
            "--calibrator-model",
            "m",
            "--calibrator-serial",
            "s",
        ])
        .arg("--station")
        .arg(&other)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("belongs to station `larkspur-line3-st9`"),
        "{err}"
    );
    // A station file and a bare id together are a contradiction (clap refuses: exit 2).
    let out = tragus()
        .args(["calibrate", "mic", "--capture"])
        .arg(&wav)
        .args([
            "--input",
            "2",
            "--calibrator-model",
            "m",
            "--calibrator-serial",
            "s",
        ])
        .arg("--station")
        .arg(&station)
        .args(["--station-id", "other"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("--station-id") && err.contains("cannot be used with"),
        "{err}"
    );
    // A station without `calibration:` and no --out: told what is missing, nothing written.
    let bare = dir.path().join("bare.yaml");
    std::fs::write(&bare, "station: bench-7\nmode: engineering\n").unwrap();
    let out = tragus()
        .args(["calibrate", "mic", "--capture"])
        .arg(&wav)
        .args([
            "--input",
            "2",
            "--calibrator-model",
            "m",
            "--calibrator-serial",
            "s",
        ])
        .arg("--station")
        .arg(&bare)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("names no `calibration:`"), "{err}");
}

#[test]
fn record_and_capture_are_one_or_the_other() {
    let dir = tempfile::tempdir().unwrap();
    let wav = dir.path().join("cal-tone.wav");
    calibrator_wav(&wav, 1000.0, 0.04);
    let out = mic(dir.path(), &wav, &["--record", "3"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("--record") && err.contains("cannot be used with"),
        "{err}"
    );
    assert!(!dir.path().join("cal.yaml").exists());
    // Neither: clap names what is required.
    let out = tragus()
        .args([
            "calibrate",
            "mic",
            "--input",
            "1",
            "--calibrator-model",
            "m",
        ])
        .args(["--calibrator-serial", "s", "--out"])
        .arg(dir.path().join("cal.yaml"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--capture"));
}

/// Without the `soundcard` feature `--record` says how to get a build that can record
/// (the README's set-up commands build without it).
#[cfg(not(feature = "soundcard"))]
#[test]
fn record_without_the_feature_says_how_to_get_it() {
    let dir = tempfile::tempdir().unwrap();
    let out = tragus()
        .args(["calibrate", "mic", "--record", "3", "--input", "1"])
        .args([
            "--calibrator-model",
            "m",
            "--calibrator-serial",
            "s",
            "--out",
        ])
        .arg(dir.path().join("cal.yaml"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("--features soundcard"), "{err}");
    assert!(!dir.path().join("cal.yaml").exists());
}
