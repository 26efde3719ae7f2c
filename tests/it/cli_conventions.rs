//! Command-line conventions (issue 11, point 8): a closed pipe ends the output quietly, no
//! colour off a terminal (log lines included), every message said once, success lines
//! without the error prefix, `--json` on validate/verify/calibrate, `records` newest first
//! with its filters, and one serial-number rule for `run` and `station`.

use crate::support::{common, store_support};

use common::{assert_exit, root, stimulus_of, tragus, write_f32_wav};
use std::io::{BufRead, BufReader, Write};
use std::path::Path;
use std::process::{Command, Output, Stdio};

fn demo_plan() -> std::path::PathBuf {
    root().join("plans/demo-earbud.yaml")
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

/// A panic is exit code 101 with `panicked` on stderr; a quiet end is neither.
fn assert_quiet_end(code: Option<i32>, stderr: &str) {
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert_ne!(code, Some(101), "{stderr}");
    assert!(!stderr.contains("Broken pipe"), "{stderr}");
}

fn run_unit(store: &Path, serial: &str, extra: &[&str]) -> Command {
    let mut c = tragus();
    c.arg("run")
        .arg(demo_plan())
        .args(["--serial", serial, "--store"])
        .arg(store)
        .args(extra);
    c
}

fn records_json(store: &Path, extra: &[&str]) -> Vec<serde_json::Value> {
    let out = tragus()
        .arg("records")
        .arg("--store")
        .arg(store)
        .args(extra)
        .args(["--json", "-"])
        .output()
        .unwrap();
    assert_exit(&out, 0);
    serde_json::from_slice::<Vec<serde_json::Value>>(&out.stdout).unwrap()
}

fn ids(records: &[serde_json::Value]) -> Vec<i64> {
    records.iter().map(|r| r["id"].as_i64().unwrap()).collect()
}

// --- 1. a closed pipe -------------------------------------------------------------------

#[test]
fn records_into_a_pipe_closed_after_one_line_ends_quietly() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    // More than a pipe holds (64 KiB on Linux): the listing is still being written when the
    // reader goes away, so the write really meets the closed pipe.
    {
        let mut s = tragus::store::Store::open(&store).unwrap();
        for i in 1..=8 {
            let mut r = store_support::record(i);
            r.plan_id = format!("demo-{}", "x".repeat(20_000));
            s.append(&r, &store_support::capture(i)).unwrap();
        }
    }
    let mut child = tragus()
        .arg("records")
        .arg("--store")
        .arg(&store)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut first = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut first)
        .unwrap();
    assert!(first.contains("record hash"), "{first}");
    let out = child.wait_with_output().unwrap();
    assert_quiet_end(out.status.code(), &text(&out.stderr));
    assert_eq!(out.status.code(), Some(0));
}

#[test]
fn run_into_a_closed_pipe_ends_quietly_and_still_records_the_unit() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    let mut child = run_unit(&store, "E2-000700", &["--sim-unit", "design"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // `run` prints only once the unit is recorded, all at once: the reader leaves before
    // that (as `| head -0` would), so the first write meets the closed pipe.
    drop(child.stdout.take());
    let out = child.wait_with_output().unwrap();
    assert_quiet_end(out.status.code(), &text(&out.stderr));
    // The design unit passes: the verdict's exit code, not a write error's.
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    assert_eq!(records_json(&store, &[]).len(), 1);
}

// --- 2. no colour off a terminal ---------------------------------------------------------

#[test]
fn log_lines_carry_no_colour_when_stderr_is_not_a_terminal() {
    let dir = tempfile::tempdir().unwrap();
    // -v logs info lines; too-loud logs a hearing-safety warning as well. Neither stream
    // is a terminal here, with and without --no-color and NO_COLOR.
    for extra in [&[][..], &["--no-color"][..]] {
        let out = run_unit(
            &dir.path().join("store"),
            "E2-000701",
            &[&["--verbose", "--sim-unit", "too-loud"][..], extra].concat(),
        )
        .output()
        .unwrap();
        assert_exit(&out, 3);
        let err = text(&out.stderr);
        assert!(err.contains("INFO"), "the run must log: {err}");
        assert!(!out.stderr.contains(&0x1b), "ESC on stderr: {err:?}");
        assert!(!out.stdout.contains(&0x1b), "ESC on stdout");
    }
    let out = run_unit(&dir.path().join("store"), "E2-000702", &["-v"])
        .env("NO_COLOR", "1")
        .output()
        .unwrap();
    assert!(!out.stderr.contains(&0x1b), "{:?}", text(&out.stderr));
}

// --- 3. every message once ---------------------------------------------------------------

fn count(haystack: &str, needle: &str) -> usize {
    haystack.matches(needle).count()
}

#[test]
fn run_says_a_hearing_safety_note_and_retest_reason_once() {
    let dir = tempfile::tempdir().unwrap();
    let json = dir.path().join("unit.json");
    let out = run_unit(
        &dir.path().join("store"),
        "E2-000703",
        &["--sim-unit", "too-loud", "--json", json.to_str().unwrap()],
    )
    .output()
    .unwrap();
    assert_exit(&out, 3);
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let event = j["safety"]["events"][0].as_str().unwrap();
    let reason = j["retest_reasons"][0].as_str().unwrap();
    // The abandoned sweep is both a retest reason and a safety event, with the same words.
    assert!(reason.contains(event), "{reason} / {event}");
    let (stdout, stderr) = (text(&out.stdout), text(&out.stderr));
    assert_eq!(count(&stdout, event), 1, "{stdout}");
    // The log's copy of the event (src/cli/unit.rs) is to go; never more than it.
    assert!(count(&stderr, event) == 0, "{stderr}");
}

#[test]
fn station_says_each_note_once_on_the_operator_screen() {
    let dir = tempfile::tempdir().unwrap();
    let lines = dir.path().join("lines.jsonl");
    let out = station_scans(
        &dir.path().join("store"),
        &[
            "--json",
            lines.to_str().unwrap(),
            "--sim-unit",
            "E2-000704=too-loud",
            "--sim-unit",
            "E2-000705=clipping",
        ],
        "E2-000704\nE2-000705\n",
    );
    assert_exit(&out, 0);
    let (stdout, stderr) = (text(&out.stdout), text(&out.stderr));
    let docs: Vec<serde_json::Value> = std::fs::read_to_string(&lines)
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let mut events = Vec::new();
    for d in docs.iter().filter(|d| d["kind"] == "unit") {
        for e in d["result"]["safety"]["events"].as_array().unwrap() {
            events.push(e.as_str().unwrap().to_string());
        }
    }
    // An abandoned sweep (too loud) and a scaled-down one (clipping): the operator sees
    // each, once, on the screen they read.
    assert_eq!(events.len(), 2, "{events:?}");
    assert!(events[1].contains("scaled down"), "{}", events[1]);
    for e in &events {
        assert_eq!(count(&stdout, e), 1, "`{e}` in:\n{stdout}");
        assert!(count(&stderr, e) == 0, "{stderr}");
    }
}

#[test]
fn a_channel_retest_reason_is_listed_once() {
    let dir = tempfile::tempdir().unwrap();
    // A capture with the right channel's own stimulus and a dead left microphone.
    let (rate, stimulus) = stimulus_of(&demo_plan(), dir.path());
    let capture = dir.path().join("capture.wav");
    write_f32_wav(
        &capture,
        rate,
        &[vec![0.0; stimulus[1].len()], stimulus[1].clone()],
    );
    let json = dir.path().join("result.json");
    let out = tragus()
        .arg("analyze")
        .arg(demo_plan())
        .arg("--capture")
        .arg(&capture)
        .arg("--json")
        .arg(&json)
        .output()
        .unwrap();
    assert_exit(&out, 3);
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let reason = j["retest_reasons"][0].as_str().unwrap();
    assert!(reason.starts_with("left: no signal"), "{j:#}");
    let stdout = text(&out.stdout);
    assert_eq!(count(&stdout, reason), 1, "{stdout}");
    // Nor repeated by the checks it left unjudged.
    let bare = reason.trim_start_matches("left: ");
    assert_eq!(count(&stdout, bare), 1, "{stdout}");
    assert!(stdout.contains("not judged: measurement of left not valid (retest reasons)"));
}

// --- 4. success lines --------------------------------------------------------------------

#[test]
fn success_lines_have_no_error_prefix() {
    let dir = tempfile::tempdir().unwrap();
    let wav = dir.path().join("stimulus.wav");
    let out = tragus()
        .arg("stimulus")
        .arg(demo_plan())
        .arg("--out")
        .arg(&wav)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    assert!(
        text(&out.stdout).starts_with("wrote "),
        "{}",
        text(&out.stdout)
    );
    assert!(out.stderr.is_empty(), "{}", text(&out.stderr));

    let tone = dir.path().join("tone.wav");
    let validate = tragus().arg("validate").arg(demo_plan()).output().unwrap();
    let calibrate = tragus()
        .args(["calibrate", "tone", "--out"])
        .arg(&tone)
        .output()
        .unwrap();
    for out in [validate, calibrate] {
        assert_exit(&out, 0);
        let all = text(&out.stdout) + &text(&out.stderr);
        assert!(!all.contains("tragus:"), "{all}");
    }
}

// --- 5. --json on validate, verify, calibrate --------------------------------------------

#[test]
fn validate_json_gives_each_file_with_its_problems() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("bad.yaml");
    std::fs::write(
        &bad,
        "plan: bad\nrevision: 1\nsample_rate_hz: 48000\nstimulus:\n  start_hz: 20\n  stop_hz: 30000\n  duration_s: 1\n  level_dbfs: -12\n  fade_in_s: 0.01\nchannels:\n  - {name: left, output: 1, input: 1}\n",
    )
    .unwrap();
    let missing = dir.path().join("missing.yaml");
    let out = tragus()
        .arg("validate")
        .arg(demo_plan())
        .arg(&bad)
        .arg(&missing)
        .args(["--json", "-"])
        .output()
        .unwrap();
    assert_exit(&out, 2);
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(j["valid"], false);
    let files = j["files"].as_array().unwrap();
    assert_eq!(files.len(), 3);
    assert_eq!(files[0]["valid"], true);
    assert_eq!(files[0]["kind"], "plan");
    assert_eq!(files[0]["plan"]["id"], "demo-earbud");
    assert_eq!(files[0]["problems"].as_array().unwrap().len(), 0);
    assert_eq!(files[1]["valid"], false);
    assert_eq!(files[1]["path"], bad.to_str().unwrap());
    let problems = files[1]["problems"].as_array().unwrap();
    // stop_hz above Nyquist, at its value (line 6, column 12), as the line form says.
    let stop = problems
        .iter()
        .find(|p| p["line"] == 6 && p["col"] == 12)
        .unwrap_or_else(|| panic!("{problems:#?}"));
    assert_eq!(stop["path"], bad.to_str().unwrap());
    assert!(!stop["message"].as_str().unwrap().is_empty());
    // An unreadable file: a problem with no position.
    assert_eq!(files[2]["valid"], false);
    let p = &files[2]["problems"][0];
    assert_eq!((p["line"].as_u64(), p["col"].as_u64()), (Some(0), Some(0)));
    assert!(
        p["message"].as_str().unwrap().contains("cannot read"),
        "{p}"
    );

    // A plan on a station: allowed, with the station's mode.
    let out = tragus()
        .arg("validate")
        .arg(demo_plan())
        .arg("--station")
        .arg(root().join("stations/line3-st1.yaml"))
        .args(["--json", "-"])
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(j["valid"], true);
    assert_eq!(j["files"][1]["kind"], "station");
    assert_eq!(j["files"][1]["station"]["id"], "line3-st1");
    assert_eq!(j["on_station"][0]["allowed"], true);
    assert_eq!(j["on_station"][0]["mode"], "engineering");
}

#[test]
fn verify_json_reports_counts_head_hashes_and_problems() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    let stored: Vec<_> = {
        let mut s = tragus::store::Store::open(&store).unwrap();
        (1..=3)
            .map(|i| {
                s.append(&store_support::record(i), &store_support::capture(i))
                    .unwrap()
            })
            .collect()
    };
    let verify = |extra: &[&str]| -> Output {
        tragus()
            .arg("verify")
            .arg("--store")
            .arg(&store)
            .args(extra)
            .output()
            .unwrap()
    };
    let out = verify(&["--json", "-"]);
    assert_exit(&out, 0);
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(j["intact"], true);
    assert_eq!(j["records"]["count"], 3);
    assert_eq!(j["records"]["head_hash"], stored[2].record_hash.as_str());
    assert_eq!(j["captures_checked"], 3);
    assert_eq!(j["safety_events"]["count"], 0);
    assert_eq!(j["problems"].as_array().unwrap().len(), 0);

    // A capture gone: not intact (exit 1), the problem named with its record.
    std::fs::remove_file(
        store
            .join("captures")
            .join(format!("{}.wav", stored[1].capture_sha256)),
    )
    .unwrap();
    let file = dir.path().join("verify.json");
    let out = verify(&["--json", file.to_str().unwrap()]);
    assert_exit(&out, 1);
    assert!(text(&out.stdout).contains("NOT INTACT"), "human report too");
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&file).unwrap()).unwrap();
    assert_eq!(j["intact"], false);
    let p = &j["problems"][0];
    assert_eq!(p["kind"], "capture_missing");
    assert_eq!(p["record_id"], 2);
    assert!(p["message"]
        .as_str()
        .unwrap()
        .contains("capture file missing"));
}

/// Two input channels: silence on input 1, a 94 dB SPL calibrator tone through
/// `fs_per_pa` on input 2.
fn calibrator_wav(path: &Path, fs_per_pa: f64) {
    let rate = 48_000u32;
    // 94 dB SPL = 20 µPa · 10^(94/20) = 1.00237 Pa rms (ISO 1683 reference pressure).
    let amp = fs_per_pa * 20e-6 * 10f64.powf(94.0 / 20.0) * std::f64::consts::SQRT_2;
    let n = 2 * rate as usize;
    let tone: Vec<f32> = (0..n)
        .map(|i| {
            (amp * (2.0 * std::f64::consts::PI * 1000.0 * i as f64 / f64::from(rate)).sin()) as f32
        })
        .collect();
    write_f32_wav(path, rate, &[vec![0.0; n], tone]);
}

#[test]
fn calibrate_json_gives_the_reading_and_the_file_written() {
    let dir = tempfile::tempdir().unwrap();
    let wav = dir.path().join("cal-tone.wav");
    calibrator_wav(&wav, 0.04);
    let cal = dir.path().join("cal.yaml");
    let out = tragus()
        .args(["calibrate", "mic", "--capture"])
        .arg(&wav)
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
            "--due-days",
            "7",
            "--json",
            "-",
            "--out",
        ])
        .arg(&cal)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let loaded = tragus::calibration::load_calibration(&cal).unwrap();
    let m = &j["measured"];
    assert_eq!(m["kind"], "microphone");
    assert_eq!(m["input"], 2);
    assert_eq!(
        m["fs_per_pa"].as_f64(),
        Some(loaded.microphone[&2].fs_per_pa)
    );
    // 0.02 dB: the calibration tests' acceptance for a simulated calibrator tone.
    let err_db = 20.0 * (m["fs_per_pa"].as_f64().unwrap() / 0.04).log10();
    assert!(err_db.abs() < 0.02, "{err_db}");
    assert_eq!(m["reading"]["level_db_spl"], 94.0);
    let c = &j["calibration"];
    assert_eq!(c["path"], cal.to_str().unwrap());
    assert_eq!(c["sha256"], loaded.sha256().as_str());
    assert_eq!(c["station"], "larkspur-line3-st1");
    assert_eq!(c["operator"], "j.okafor");
    assert_eq!(
        c["due_date"],
        tragus::calibration::format_date(loaded.due_date).as_str()
    );
    assert_eq!(c["instruments"][0]["serial"], "FH-40117");
    assert_eq!(c["microphone"][0]["input"], 2);

    // A drive reading by meter, JSON to a file and the human lines on stdout:
    // −20 dBFS read as 0.2 V rms → √2 · 0.2 / 0.1 = 2.828 V peak per FS.
    let doc = dir.path().join("drive.json");
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
            "--json",
            doc.to_str().unwrap(),
            "--out",
        ])
        .arg(&cal)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    assert!(
        text(&out.stdout).contains("wrote "),
        "{}",
        text(&out.stdout)
    );
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&doc).unwrap()).unwrap();
    assert_eq!(j["measured"]["kind"], "drive");
    assert_eq!(j["measured"]["output"], 1);
    assert_eq!(j["measured"]["reading"]["method"], "meter");
    let v = j["measured"]["volts_peak_per_fs"].as_f64().unwrap();
    assert!((v / (2f64.sqrt() * 2.0) - 1.0).abs() < 1e-12, "{v}");
    // The file keeps the microphone reading beside the new drive one.
    assert_eq!(j["calibration"]["microphone"][0]["input"], 2);
    assert_eq!(j["calibration"]["drive"][0]["output"], 1);
    let loaded = tragus::calibration::load_calibration(&cal).unwrap();
    assert_eq!(j["calibration"]["sha256"], loaded.sha256().as_str());
}

// --- 6. records: order, limit, filters ---------------------------------------------------

/// Twelve units, record id = i, measured i minutes after 09:00 on 2025-03-14; plan
/// `demo-headset` for even i, `demo-earbud` for odd; retest when i is a multiple of 5,
/// else fail when a multiple of 3, else pass.
fn twelve_units(store: &Path) {
    let mut s = tragus::store::Store::open(store).unwrap();
    for i in 1..=12u32 {
        let mut r = store_support::record(i);
        r.time_utc = format!("2025-03-14T09:{i:02}:00.250Z");
        if i % 2 == 0 {
            r.plan_id = "demo-headset".into();
        }
        r.verdict = match (i % 5, i % 3) {
            (0, _) => tragus::Verdict::Retest,
            (_, 0) => tragus::Verdict::Fail,
            _ => tragus::Verdict::Pass,
        };
        let stored = s.append(&r, &store_support::capture(i)).unwrap();
        assert_eq!(stored.id, i64::from(i));
    }
}

#[test]
fn records_are_newest_first_and_limit_keeps_the_newest() {
    let dir = tempfile::tempdir().unwrap();
    twelve_units(dir.path());
    assert_eq!(
        ids(&records_json(dir.path(), &[])),
        (1..=12).rev().collect::<Vec<_>>()
    );
    assert_eq!(
        ids(&records_json(dir.path(), &["--limit", "3"])),
        [12, 11, 10]
    );
    // The human listing in the same order.
    let out = tragus()
        .arg("records")
        .arg("--store")
        .arg(dir.path())
        .args(["--limit", "2"])
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let rows: Vec<String> = text(&out.stdout)
        .lines()
        .skip(1)
        .map(|l| l.split_whitespace().next().unwrap().to_string())
        .collect();
    assert_eq!(rows, ["12", "11"]);
}

#[test]
fn records_filters_by_time_plan_and_verdict() {
    let dir = tempfile::tempdir().unwrap();
    twelve_units(dir.path());
    let at = |i: u32| format!("2025-03-14T09:{i:02}:00.250Z");
    // --since is inclusive, --until exclusive: unit 5 was measured exactly at 09:05:00.250.
    assert_eq!(
        ids(&records_json(dir.path(), &["--since", &at(5)])),
        (5..=12).rev().collect::<Vec<_>>()
    );
    assert_eq!(
        ids(&records_json(dir.path(), &["--until", &at(5)])),
        [4, 3, 2, 1]
    );
    assert_eq!(
        ids(&records_json(
            dir.path(),
            &["--since", &at(3), "--until", "2025-03-14T09:07:00Z"]
        )),
        [6, 5, 4, 3]
    );
    assert_eq!(
        ids(&records_json(dir.path(), &["--plan", "demo-headset"])),
        [12, 10, 8, 6, 4, 2]
    );
    assert_eq!(
        ids(&records_json(dir.path(), &["--verdict", "fail"])),
        [12, 9, 6, 3]
    );
    assert_eq!(
        ids(&records_json(dir.path(), &["--verdict", "retest"])),
        [10, 5]
    );
    assert_eq!(
        ids(&records_json(dir.path(), &["--verdict", "pass"])),
        [11, 8, 7, 4, 2, 1]
    );
    // Together, the limit applied last: the newest passing headset unit.
    assert_eq!(
        ids(&records_json(
            dir.path(),
            &[
                "--plan",
                "demo-headset",
                "--verdict",
                "pass",
                "--limit",
                "1"
            ]
        )),
        [8]
    );
    // A time that is not UTC, or a verdict that is none: bad input.
    for bad in [
        &["--since", "2025-03-14T09:05:00+01:00"][..],
        &["--verdict", "maybe"][..],
    ] {
        let out = tragus()
            .arg("records")
            .arg("--store")
            .arg(dir.path())
            .args(bad)
            .output()
            .unwrap();
        assert_exit(&out, 2);
    }
}

// --- 7. one serial rule ------------------------------------------------------------------

#[test]
fn run_refuses_a_bad_serial_before_anything_happens() {
    let dir = tempfile::tempdir().unwrap();
    let long = "A".repeat(200);
    for (serial, what) in [
        ("E2 000123", "a space at character 3"),
        (" E2-000123", "a space at character 1"),
        (long.as_str(), "at most 64 characters, found 200"),
        (
            "E2-\u{202E}321",
            "bidirectional control U+202E at character 4",
        ),
        ("E2-\u{7}321", "control character U+0007 at character 4"),
    ] {
        let store = dir.path().join("store");
        let out = run_unit(&store, serial, &["--sim-unit", "design"])
            .output()
            .unwrap();
        assert_exit(&out, 2);
        let err = text(&out.stderr);
        assert!(err.starts_with("tragus: --serial: expected"), "{err}");
        assert!(err.contains(what), "{serial:?}: {err}");
        // Refused before the plan was set up: no caution shown, no store made, nothing
        // recorded.
        assert!(!err.contains("CAUTION"), "{err}");
        assert!(!store.exists(), "{serial:?}: the store was created");
        assert!(out.stdout.is_empty());
    }
}

#[test]
fn station_refuses_the_same_serials_and_names_the_character() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    let out = station_scans(&store, &[], "E2-\u{202E}321\nE2 000123\n");
    assert_exit(&out, 0);
    let stdout = text(&out.stdout);
    assert!(
        stdout.contains("refused input line 1: expected letters, digits and -_./+ only, found the bidirectional control U+202E at character 4"),
        "{stdout}"
    );
    assert!(
        !stdout.contains('\u{202E}'),
        "the raw character must not reach the screen"
    );
    assert!(stdout.contains("refused input line 2: expected letters, digits and -_./+ only, found a space at character 3"), "{stdout}");
    assert!(stdout.contains("refused input lines: 2"), "{stdout}");
    // Nothing tested, nothing recorded.
    let recorded =
        store.join(tragus::store::DB_FILE).exists() && !records_json(&store, &[]).is_empty();
    assert!(!recorded);
    // And `--sim-unit` keys follow the rule too.
    let out = tragus()
        .arg("station")
        .arg("--station")
        .arg(root().join("stations/line3-st1.yaml"))
        .arg("--plan")
        .arg(demo_plan())
        .arg("--store")
        .arg(&store)
        .args(["--sim-unit", "E2\u{7}1=too-loud"])
        .stdin(Stdio::null())
        .output()
        .unwrap();
    assert_exit(&out, 2);
    assert!(
        text(&out.stderr).contains("control character U+0007"),
        "{}",
        text(&out.stderr)
    );
}

/// The demo station (`stations/line3-st1.yaml`, demo plan, store `store`, `extra` options)
/// fed `scans` as the scanner's lines; its output once it has ended.
fn station_scans(store: &Path, extra: &[&str], scans: &str) -> Output {
    let mut child = tragus()
        .arg("station")
        .arg("--station")
        .arg(root().join("stations/line3-st1.yaml"))
        .arg("--plan")
        .arg(demo_plan())
        .arg("--store")
        .arg(store)
        .args(extra)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(scans.as_bytes())
        .unwrap();
    child.wait_with_output().unwrap()
}
