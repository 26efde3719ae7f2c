//! The calibration file: loading, the canonical SHA-256 against an independent
//! implementation, round trip through what `calibrate` writes, problems with positions,
//! the due date, and the dB SPL/V and dB SPL/mW conversions.

use std::path::Path;
use tragus::calibration::{
    canonical_json, db_per_v_to_db_per_mw, load_calibration, load_calibration_str, parse_date,
    response_offset_db, CalibrationError,
};

const EXAMPLE: &str = "tests/data/calibration/example.yaml";

#[test]
fn canonical_form_matches_an_independent_implementation() {
    // expected.txt was written by tests/reference/calibration_canonical.py (PyYAML, json,
    // hashlib) from the contract in src/calibration/file.rs alone.
    let expected = std::fs::read_to_string("tests/data/calibration/expected.txt").unwrap();
    let mut lines = expected.lines();
    let (json, sha) = (lines.next().unwrap(), lines.next().unwrap());
    let cal = load_calibration(Path::new(EXAMPLE)).unwrap();
    assert_eq!(canonical_json(&cal), json);
    assert_eq!(cal.sha256(), sha);
}

#[test]
fn drive_monitors_join_the_canonical_form_as_the_independent_implementation_says() {
    // expected-monitor.txt: tests/reference/calibration_canonical.py on the same file.
    let expected = std::fs::read_to_string("tests/data/calibration/expected-monitor.txt").unwrap();
    let mut lines = expected.lines();
    let (json, sha) = (lines.next().unwrap(), lines.next().unwrap());
    let cal = load_calibration(Path::new("tests/data/calibration/example-monitor.yaml")).unwrap();
    assert_eq!(cal.monitor[&3].volts_peak_per_fs, 2.5);
    assert_eq!(canonical_json(&cal), json);
    assert_eq!(cal.sha256(), sha);
    // Written and read back: the same values, so the same hash.
    let back = load_calibration_str(&cal.to_yaml(), Path::new("b.yaml")).unwrap();
    assert_eq!(back.monitor, cal.monitor);
    assert_eq!(back.sha256(), cal.sha256());
    // A gain that is not a positive number is a problem at its position.
    let text = std::fs::read_to_string("tests/data/calibration/example-monitor.yaml").unwrap();
    let bad = text.replace(
        "3: {volts_peak_per_fs: 2.5}",
        "3: {volts_peak_per_fs: -2.5}",
    );
    let err = load_calibration_str(&bad, Path::new("m.yaml"))
        .unwrap_err()
        .to_string();
    let line = bad.lines().position(|l| l.contains("-2.5")).unwrap() + 1;
    assert!(err.starts_with(&format!("m.yaml:{line}:")), "{err}");
    assert!(err.contains("monitor.3.volts_peak_per_fs"), "{err}");
}

#[test]
fn written_file_reads_back_to_the_same_values_and_hash() {
    let cal = load_calibration(Path::new(EXAMPLE)).unwrap();
    let text = cal.to_yaml();
    let back = load_calibration_str(&text, Path::new(EXAMPLE)).unwrap();
    assert_eq!(back, cal);
    assert_eq!(back.sha256(), cal.sha256());
}

#[test]
fn layout_does_not_change_the_hash_and_a_value_does() {
    let text = std::fs::read_to_string(EXAMPLE).unwrap();
    let base = load_calibration_str(&text, Path::new("a.yaml"))
        .unwrap()
        .sha256();
    // Keys reordered, flow style, a comment, 0.05 written as 5e-2: same values.
    let moved = text
        .replace("    fs_per_pa: 0.05\n", "    fs_per_pa: 5.0e-2   # moved\n")
        .replace("station: larkspur-line3-st1\n", "")
        + "station: \"larkspur-line3-st1\"\n";
    assert_eq!(
        load_calibration_str(&moved, Path::new("b.yaml"))
            .unwrap()
            .sha256(),
        base
    );
    let changed = text.replace("fs_per_pa: 0.0625", "fs_per_pa: 0.0626");
    assert_ne!(
        load_calibration_str(&changed, Path::new("c.yaml"))
            .unwrap()
            .sha256(),
        base
    );
}

#[test]
fn problems_are_reported_with_file_line_and_column() {
    let text = "station: s\ndate_utc: \"2026-11-30 06:12\"\ndue_date: 2026-13-01\noperator: o\nmicrophone:\n  0:\n    fs_per_pa: 0.05\n  2:\n    fs_per_pa: -1\n    gain: 3\ndrive:\n  1: {volts_peak_per_fs: 2, reading: {method: guess, tone_hz: 1000, tone_dbfs: -20, measured_v_rms: 0.1, measured_utc: \"2026-11-30T06:12:00Z\"}}\n";
    let Err(CalibrationError::Invalid(problems)) =
        load_calibration_str(text, Path::new("cal.yaml"))
    else {
        panic!("expected problems")
    };
    let lines: Vec<String> = problems.iter().map(|p| p.to_string()).collect();
    let want = [
        "cal.yaml:2:11: date_utc: expected a UTC time YYYY-MM-DDTHH:MM:SSZ, found `2026-11-30 06:12`",
        "cal.yaml:3:11: due_date: expected a date YYYY-MM-DD, found `2026-13-01`",
        "cal.yaml:6:3: microphone: expected a channel number from 1 to 1024 (1-based), found `0`",
        "cal.yaml:9:16: microphone.2.fs_per_pa: expected a value above 0 FS/Pa, found -1",
        "cal.yaml:10:5: microphone.2: unknown key `gain`, expected one of fs_per_pa, reading",
    ];
    for w in want {
        assert!(lines.iter().any(|l| l == w), "missing {w:?} in {lines:#?}");
    }
    assert!(
        lines.iter().any(|l| l.starts_with("cal.yaml:12:")
            && l.contains("expected `meter` or `input`, found `guess`")),
        "{lines:#?}"
    );
}

#[test]
fn due_date_is_the_last_valid_day() {
    let cal = load_calibration(Path::new(EXAMPLE)).unwrap();
    assert!(cal.check_due(parse_date("2026-12-30").unwrap()).is_ok());
    let e = cal
        .check_due(parse_date("2026-12-31").unwrap())
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("calibration past due: it was due on 2026-12-30 and today is 2026-12-31"),
        "{e}"
    );
}

#[test]
fn offset_on_an_analytic_example() {
    // A unit whose digital transfer is 0.1 (−20 dB) through an input of 0.05 FS/Pa and an
    // output of 2 V per FS: p/v = 0.1 / (0.05 · 2) = 1 Pa/V, i.e. 20·lg(1 / 20 µPa) =
    // 93.9794 dB SPL/V (ISO 1683 reference pressure). 1e-9 dB: floating point only.
    let level = -20.0 + response_offset_db(0.05, 2.0);
    assert!(
        (level - 20.0 * (1.0f64 / 20e-6).log10()).abs() < 1e-9,
        "{level}"
    );
    // The example file's channel 1 has exactly these values.
    let cal = load_calibration(Path::new(EXAMPLE)).unwrap();
    let o = cal.offset_db("left", 0, 0).unwrap();
    assert!((o - response_offset_db(0.05, 2.0)).abs() < 1e-12);
    // A channel the file does not cover is named in the error.
    let e = cal.offset_db("third", 2, 0).unwrap_err().to_string();
    assert!(
        e.contains("no drive calibration for output 3 (channel `third`)"),
        "{e}"
    );
}

#[test]
fn per_milliwatt_at_32_ohm() {
    // 1 mW into 32 Ω takes √(0.032) V = 0.17889 V, 20·lg(0.17889) = −14.949 dB; published as
    // −14.95 dB for 32 Ω (sensitivity per mW vs per V, 10·lg(R/1000 Ω)). 0.005 dB: the
    // rounding of the published value.
    assert!((db_per_v_to_db_per_mw(0.0, 32.0) + 14.95).abs() < 0.005);
    assert!(
        (db_per_v_to_db_per_mw(100.0, 32.0) - (100.0 + 20.0 * 0.032f64.sqrt().log10())).abs()
            < 1e-12
    );
    // 1000 Ω: 1 mW is 1 V.
    assert_eq!(db_per_v_to_db_per_mw(100.0, 1000.0), 100.0);
}
