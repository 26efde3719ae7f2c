//! `tragus exposure` against hand arithmetic of the NIOSH REL dose (NIOSH 98-126 ch. 1:
//! T = 480 / 2^((L − 85)/3) min) and the WHO/ITU-T H.870 weekly sound dose (E = p_A²·t,
//! adult reference 1.6 Pa²h = 80 dB(A) for 40 h); `tragus verify` on the new chains; bad
//! arguments exit 2 with words that say what was expected.

use crate::support::common;

use std::path::Path;

use common::tragus;
use tragus::store::{NewExposure, Store};

/// 2025-03-14T06:00:00Z, the start of the test shift (unix seconds, from Python's
/// `datetime(2025, 3, 14, 6, tzinfo=timezone.utc).timestamp()`).
const SHIFT_START_UNIX_S: i64 = 1_741_932_000;
const SHIFT_START: &str = "2025-03-14T06:00:00Z";
/// 2025-03-14T14:00:00Z, the end of the 8 h shift and "now" for the tests.
const NOW: &str = "2025-03-14T14:00:00Z";
const DAY_S: i64 = 86_400;

fn exposure(operator: &str, start_unix_s: i64, level_dba: f64, duration_s: f64) -> NewExposure {
    NewExposure {
        operator: operator.into(),
        station: "larkspur-line3-st1".into(),
        start_unix_s,
        level_dba,
        duration_s,
        serial: "E2-000300".into(),
        plan_id: "demo-earbud".into(),
        record_id: None,
    }
}

fn run_json(dir: &Path, extra: &[&str]) -> serde_json::Value {
    let out = tragus()
        .args(["exposure", "--store"])
        .arg(dir)
        .args(["--now", NOW, "--json", "-"])
        .args(extra)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

fn close(found: f64, expected: f64, what: &str) {
    // 1e-9 relative: the arithmetic is a handful of f64 operations, far below this.
    assert!(
        (found - expected).abs() <= 1e-9 * expected.abs().max(1.0),
        "{what}: found {found}, expected {expected}"
    );
}

#[test]
fn half_an_hour_at_94_dba_is_half_the_niosh_dose() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    // 30 min at 94 dB(A) two hours into the shift; another operator's exposure must not count.
    store
        .append_exposure(&exposure(
            "j.okafor",
            SHIFT_START_UNIX_S + 7200,
            94.0,
            1800.0,
        ))
        .unwrap();
    store
        .append_exposure(&exposure(
            "m.lindqvist",
            SHIFT_START_UNIX_S + 7200,
            100.0,
            3600.0,
        ))
        .unwrap();
    drop(store);

    let doc = run_json(
        tmp.path(),
        &["--operator", "j.okafor", "--shift-start", SHIFT_START],
    );
    // NIOSH 98-126: T(94) = 480 / 2^3 = 60 min, so 30 min is 50 %.
    close(
        doc["status"]["niosh_percent"].as_f64().unwrap(),
        50.0,
        "NIOSH dose",
    );
    // H.870: p_A² = (20 µPa)²·10^9.4 Pa², for 0.5 h; against 1.6 Pa²h.
    let weekly_pa2h = 4e-10 * 10f64.powf(9.4) * 0.5;
    close(
        doc["status"]["weekly_pa2h"].as_f64().unwrap(),
        weekly_pa2h,
        "weekly Pa²h",
    );
    close(
        doc["status"]["weekly_percent"].as_f64().unwrap(),
        100.0 * weekly_pa2h / 1.6,
        "weekly %",
    );
    // At 85 dB(A) the NIOSH half left is 0.5 × 480 min = 240 min; the weekly figure leaves
    // more ((1 − 0.314) × 1.6 / 0.1265 h ≈ 520 min), so 240 min governs.
    close(
        doc["minutes_left_at_level"].as_f64().unwrap(),
        240.0,
        "minutes left at 85 dB(A)",
    );
    assert_eq!(doc["n_exposures"], 1);
    assert_eq!(doc["shift"]["end_utc"], NOW);

    // At 100 dB(A): T = 480 / 2^5 = 15 min (NIOSH 98-126), half of it left = 7.5 min.
    let doc = run_json(
        tmp.path(),
        &[
            "--operator",
            "j.okafor",
            "--shift-start",
            SHIFT_START,
            "--at-dba",
            "100",
        ],
    );
    close(
        doc["niosh_allowed_min_at_level"].as_f64().unwrap(),
        15.0,
        "NIOSH allowed time at 100 dB(A)",
    );
    close(
        doc["minutes_left_at_level"].as_f64().unwrap(),
        7.5,
        "minutes left at 100 dB(A)",
    );
}

#[test]
fn forty_hours_at_80_dba_in_a_week_is_the_adult_weekly_reference() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    // Five 8 h shifts at 80 dB(A) ending today: 40 h in the last 7 days.
    for day in 0..5 {
        store
            .append_exposure(&exposure(
                "j.okafor",
                SHIFT_START_UNIX_S - day * DAY_S,
                80.0,
                8.0 * 3600.0,
            ))
            .unwrap();
    }
    // Eight days ago: outside the weekly window, must not count.
    store
        .append_exposure(&exposure(
            "j.okafor",
            SHIFT_START_UNIX_S - 8 * DAY_S,
            90.0,
            3600.0,
        ))
        .unwrap();
    drop(store);
    let doc = run_json(tmp.path(), &["--operator", "j.okafor"]);
    // H.870: (20 µPa)²·10^8 = 0.04 Pa², × 40 h = 1.6 Pa²h = 100 % of the adult reference.
    close(
        doc["status"]["weekly_pa2h"].as_f64().unwrap(),
        1.6,
        "weekly Pa²h",
    );
    close(
        doc["status"]["weekly_percent"].as_f64().unwrap(),
        100.0,
        "weekly %",
    );
    // Default shift, the 8 h up to now, holds exactly today's 8 h at 80 dB(A):
    // NIOSH T(80) = 480·2^(5/3) min, so the dose is 100 % / 2^(5/3) = 31.50 %.
    close(
        doc["status"]["niosh_percent"].as_f64().unwrap(),
        100.0 / 2f64.powf(5.0 / 3.0),
        "NIOSH dose",
    );
    assert_eq!(doc["shift"]["start_utc"], SHIFT_START);
    // The weekly dose is at the refusal threshold: nothing left at any level.
    assert_eq!(doc["minutes_left_at_level"].as_f64().unwrap(), 0.0);
    assert_eq!(doc["decision"]["verdict"], "refuse");

    // The sensitive-listener reference is 0.51 Pa²h (H.870): 1.6 / 0.51 = 313.7 %.
    let doc = run_json(
        tmp.path(),
        &["--operator", "j.okafor", "--weekly-reference", "sensitive"],
    );
    close(
        doc["status"]["weekly_percent"].as_f64().unwrap(),
        100.0 * 1.6 / 0.51,
        "weekly % (sensitive)",
    );
}

#[test]
fn human_output_says_the_doses_in_words() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    store
        .append_exposure(&exposure("j.okafor", SHIFT_START_UNIX_S + 60, 94.0, 1800.0))
        .unwrap();
    drop(store);
    let out = tragus()
        .args(["exposure", "--store"])
        .arg(tmp.path())
        .args(["--operator", "j.okafor", "--now", NOW])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8(out.stdout).unwrap();
    // 50.0 %: hand arithmetic above (NIOSH 98-126); 50 % is the warning threshold (issue 5).
    assert!(
        text.contains("NIOSH shift dose: 50.0 % (30.0 min listened in the shift"),
        "{text}"
    );
    assert!(
        text.contains("at 85.0 dB(A): 240.0 min of listening left"),
        "{text}"
    );
    assert!(text.contains("hearing dose warning: "), "{text}");
}

#[test]
fn verify_names_a_tampered_exposure_and_counts_both_chains() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    store
        .append_exposure(&exposure("j.okafor", SHIFT_START_UNIX_S, 94.0, 1800.0))
        .unwrap();
    store
        .append_exposure(&exposure(
            "j.okafor",
            SHIFT_START_UNIX_S + 3600,
            90.0,
            600.0,
        ))
        .unwrap();
    drop(store);
    let verify = || {
        tragus()
            .args(["verify", "--store"])
            .arg(tmp.path())
            .output()
            .unwrap()
    };
    let out = verify();
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("0 safety event(s), head hash "), "{text}");
    assert!(text.contains("; 2 exposure(s), head hash "), "{text}");

    // Someone lowers the logged level to hide an exposure.
    rusqlite::Connection::open(tmp.path().join(tragus::store::DB_FILE))
        .unwrap()
        .execute_batch(
            "DROP TRIGGER exposures_no_update;
             UPDATE exposures SET level_dba = 70 WHERE id = 1;",
        )
        .unwrap();
    let out = verify();
    assert_eq!(out.status.code(), Some(1));
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("PROBLEM store: append-only trigger `exposures_no_update` is missing"),
        "{text}"
    );
    assert!(
        text.contains("PROBLEM exposures row 1: row hash does not match its fields"),
        "{text}"
    );
    assert!(text.contains("NOT INTACT: 2 problem(s)"), "{text}");
}

#[test]
fn bad_arguments_exit_2_with_what_was_expected() {
    let tmp = tempfile::tempdir().unwrap();
    drop(Store::open(tmp.path()).unwrap());
    let store = tmp.path().to_str().unwrap().to_owned();
    let missing = tmp.path().join("nowhere");
    let missing = missing.to_str().unwrap().to_owned();
    let cases: Vec<(Vec<&str>, String)> = vec![
        (
            vec!["--store", &store, "--operator", "j.okafor", "--shift-hours", "0"],
            "tragus: --shift-hours: expected a shift length above 0 h and at most 24 h, found 0"
                .into(),
        ),
        (
            vec!["--store", &store, "--operator", "j.okafor", "--shift-hours", "30"],
            "tragus: --shift-hours: expected a shift length above 0 h and at most 24 h, found 30"
                .into(),
        ),
        (
            vec!["--store", &store, "--operator", "j.okafor", "--shift-start", "2025-03-14 06:00"],
            "tragus: --shift-start: expected a UTC time like 2025-03-14T06:00:00Z, found \"2025-03-14 06:00\""
                .into(),
        ),
        (
            vec!["--store", &store, "--operator", "j.okafor", "--shift-start", "2025-03-14T06:00:00+02:00"],
            "tragus: --shift-start: expected a UTC time like 2025-03-14T06:00:00Z, found \"2025-03-14T06:00:00+02:00\""
                .into(),
        ),
        (
            vec!["--store", &store, "--operator", "j.okafor", "--at-dba", "NaN"],
            "tragus: --at-dba: expected a level from 0 to 150 dB(A), found NaN".into(),
        ),
        (
            vec!["--store", &store, "--operator", ""],
            "tragus: --operator: expected an operator id, found an empty one".into(),
        ),
        (
            vec!["--store", &missing, "--operator", "j.okafor"],
            format!("tragus: {missing}: expected a tragus store (a directory holding tragus.db), found none"),
        ),
    ];
    for (args, message) in cases {
        let out = tragus().arg("exposure").args(&args).output().unwrap();
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8(out.stderr).unwrap();
        assert_eq!(err.trim_end(), message, "{args:?}");
    }
    // Parse errors from clap: missing --operator, a word where a level belongs.
    for args in [
        vec!["--store", store.as_str()],
        vec![
            "--store",
            store.as_str(),
            "--operator",
            "x",
            "--at-dba",
            "loud",
        ],
        vec![
            "--store",
            store.as_str(),
            "--operator",
            "x",
            "--weekly-reference",
            "child",
        ],
    ] {
        let out = tragus().arg("exposure").args(&args).output().unwrap();
        assert_eq!(out.status.code(), Some(2), "{args:?}");
    }
}
