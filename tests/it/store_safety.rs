//! Store schema 3: safety events and listening exposures are appended, read back, hash
//! chained exactly as `tests/reference/store_safety_hash.py` (Python `hashlib`) computes,
//! refused by triggers when edited in place, named by `verify` when tampered with, and added
//! to a schema-2 store without disturbing its records.

use crate::support::store_support;

use std::path::Path;

use store_support::{capture, raw, record};
use tragus::store::{
    ChainTable, NewExposure, NewSafetyEvent, Problem, ProblemKind, RowProblem, SafetyEventFilter,
    SafetyKind, Store, StoreError, DB_FILE, GENESIS_PREV_HASH, SCHEMA_VERSION,
};

fn reference() -> serde_json::Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/store_safety_hash.json"
    );
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn opt_s(v: &serde_json::Value, key: &str) -> Option<String> {
    v[key].as_str().map(str::to_owned)
}

fn s(v: &serde_json::Value, key: &str) -> String {
    opt_s(v, key).unwrap()
}

fn event_from(v: &serde_json::Value) -> NewSafetyEvent {
    NewSafetyEvent {
        time_utc: s(v, "time_utc"),
        station: s(v, "station"),
        operator: s(v, "operator"),
        serial: opt_s(v, "serial"),
        plan_id: s(v, "plan_id"),
        plan_sha256: opt_s(v, "plan_sha256"),
        kind: SafetyKind::from_word(&s(v, "kind")).unwrap(),
        message: s(v, "message"),
        detail_json: s(v, "detail_json"),
        record_id: v["record_id"].as_i64(),
    }
}

fn exposure_from(v: &serde_json::Value) -> NewExposure {
    NewExposure {
        operator: s(v, "operator"),
        station: s(v, "station"),
        start_unix_s: v["start_unix_s"].as_i64().unwrap(),
        level_dba: v["level_dba"].as_f64().unwrap(),
        duration_s: v["duration_s"].as_f64().unwrap(),
        serial: s(v, "serial"),
        plan_id: s(v, "plan_id"),
        record_id: v["record_id"].as_i64(),
    }
}

/// A store with one record and the reference's safety events and exposures.
fn reference_store(dir: &Path) -> Store {
    let mut store = Store::open(dir).unwrap();
    store.append(&record(1), &capture(1)).unwrap();
    let reference = reference();
    for e in reference["safety_events"].as_array().unwrap() {
        store.append_safety_event(&event_from(e)).unwrap();
    }
    for x in reference["exposures"].as_array().unwrap() {
        store.append_exposure(&exposure_from(x)).unwrap();
    }
    store
}

#[test]
fn rows_hash_as_the_python_reference_computes() {
    let reference = reference();
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    store.append(&record(1), &capture(1)).unwrap();
    for e in reference["safety_events"].as_array().unwrap() {
        let stored = store.append_safety_event(&event_from(e)).unwrap();
        // Exact: digests and the bytes they are taken over (store_safety_hash.py).
        assert_eq!(stored.id, e["id"].as_i64().unwrap());
        assert_eq!(stored.canonical_bytes(), s(e, "canonical").into_bytes());
        assert_eq!(stored.prev_hash, s(e, "prev_hash"));
        assert_eq!(stored.row_hash, s(e, "row_hash"));
    }
    for x in reference["exposures"].as_array().unwrap() {
        let stored = store.append_exposure(&exposure_from(x)).unwrap();
        assert_eq!(stored.canonical_bytes(), s(x, "canonical").into_bytes());
        assert_eq!(stored.prev_hash, s(x, "prev_hash"));
        assert_eq!(stored.row_hash, s(x, "row_hash"));
    }
    // The first row of each chain links to the genesis value (module doc).
    assert_eq!(
        reference["exposures"][0]["prev_hash"].as_str().unwrap(),
        GENESIS_PREV_HASH
    );
}

#[test]
fn events_and_exposures_read_back_as_appended() {
    let tmp = tempfile::tempdir().unwrap();
    let reference = reference();
    let store = reference_store(tmp.path());

    let all = store.safety_events(&SafetyEventFilter::default()).unwrap();
    assert_eq!(all.len(), 2);
    for (got, want) in all
        .iter()
        .zip(reference["safety_events"].as_array().unwrap())
    {
        let want_new = event_from(want);
        assert_eq!(got.kind, want_new.kind);
        assert_eq!(got.serial, want_new.serial);
        assert_eq!(got.message, want_new.message);
        assert_eq!(got.record_id, want_new.record_id);
        assert_eq!(got.row_hash, s(want, "row_hash"));
    }
    let tripped = store
        .safety_events(&SafetyEventFilter {
            kind: Some(SafetyKind::GuardTripped),
            ..SafetyEventFilter::default()
        })
        .unwrap();
    assert_eq!(tripped.len(), 1);
    assert_eq!(tripped[0].serial.as_deref(), Some("E2-000123"));
    let for_record = store
        .safety_events(&SafetyEventFilter {
            record_id: Some(1),
            ..SafetyEventFilter::default()
        })
        .unwrap();
    assert_eq!(for_record, tripped);
    let newest = store
        .safety_events(&SafetyEventFilter {
            newest_first: true,
            limit: Some(1),
            ..SafetyEventFilter::default()
        })
        .unwrap();
    assert_eq!(newest[0].id, 2);

    // Exposures come back as the dose ledger takes them, per operator.
    let mine = store.exposures_for("j.okafor", 0).unwrap();
    assert_eq!(mine.len(), 1);
    assert_eq!(mine[0].level_dba, 94.0);
    assert_eq!(mine[0].duration_s, 1800.0);
    assert_eq!(mine[0].start_unix_s, 1_741_942_800);
    // 0.1 + 0.2 keeps every bit through the REAL column and the canonical text.
    let theirs = store.exposures_for("m.lindqvist", -100).unwrap();
    assert_eq!(theirs[0].level_dba, 0.1 + 0.2);
}

#[test]
fn exposures_for_keeps_what_ends_after_since() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    let at = |start_unix_s: i64, duration_s: f64| NewExposure {
        operator: "j.okafor".into(),
        station: "larkspur-line3-st1".into(),
        start_unix_s,
        level_dba: 85.0,
        duration_s,
        serial: "E2-000200".into(),
        plan_id: "demo-earbud".into(),
        record_id: None,
    };
    store.append_exposure(&at(1000, 100.0)).unwrap(); // ends at 1100, before since
    store.append_exposure(&at(1900, 200.0)).unwrap(); // crosses since = 2000
    store.append_exposure(&at(5000, 10.0)).unwrap(); // after
    let got: Vec<i64> = store
        .exposures_for("j.okafor", 2000)
        .unwrap()
        .iter()
        .map(|e| e.start_unix_s)
        .collect();
    assert_eq!(got, [1900, 5000]);
    assert!(store.exposures_for("nobody", 0).unwrap().is_empty());
}

#[test]
fn fresh_store_verifies_with_both_chains_counted() {
    let tmp = tempfile::tempdir().unwrap();
    let reference = reference();
    let store = reference_store(tmp.path());
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(report.n_records, 1);
    assert_eq!(report.n_safety_events, 2);
    assert_eq!(report.n_exposures, 2);
    assert_eq!(
        report.safety_events_head_hash,
        s(&reference["safety_events"][1], "row_hash")
    );
    assert_eq!(
        report.exposures_head_hash,
        s(&reference["exposures"][1], "row_hash")
    );

    let empty = tempfile::tempdir().unwrap();
    let report = Store::open(empty.path()).unwrap().verify().unwrap();
    assert_eq!(report.safety_events_head_hash, GENESIS_PREV_HASH);
    assert_eq!(report.exposures_head_hash, GENESIS_PREV_HASH);
}

#[test]
fn raw_update_and_delete_are_refused_by_triggers() {
    let tmp = tempfile::tempdir().unwrap();
    drop(reference_store(tmp.path()));
    let conn = raw(tmp.path());
    for (sql, words) in [
        (
            "UPDATE exposures SET level_dba = 70 WHERE id = 1",
            "exposures cannot be updated",
        ),
        (
            "DELETE FROM exposures WHERE id = 2",
            "exposures cannot be deleted",
        ),
        (
            "UPDATE safety_events SET kind = 'dose_warning' WHERE id = 1",
            "safety events cannot be updated",
        ),
        (
            "DELETE FROM safety_events WHERE id = 1",
            "safety events cannot be deleted",
        ),
        (
            "INSERT INTO exposures VALUES (7, 'x', 's', 0, 80.0, 1.0, 'E', 'p', NULL, 'a', 'b', NULL, NULL)",
            "an exposure must follow the last exposure",
        ),
    ] {
        let err = conn.execute_batch(sql).unwrap_err();
        assert!(err.to_string().contains(words), "{sql}: {err}");
    }
}

/// As the attacker of `tests/store_tamper.rs`: drop `table`'s triggers, run `sql`, put them
/// back so only the hash chain can tell.
fn tamper(dir: &Path, table: &str, sql: &str) {
    let conn = raw(dir);
    let triggers: Vec<(String, String)> = conn
        .prepare("SELECT name, sql FROM sqlite_schema WHERE type = 'trigger' AND tbl_name = ?1")
        .unwrap()
        .query_map([table], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert_eq!(triggers.len(), 3, "three triggers on {table}");
    for (name, _) in &triggers {
        conn.execute_batch(&format!("DROP TRIGGER {name}")).unwrap();
    }
    conn.execute_batch(sql).unwrap();
    for (_, trigger_sql) in &triggers {
        conn.execute_batch(trigger_sql).unwrap();
    }
}

fn problems(dir: &Path) -> Vec<Problem> {
    Store::open(dir).unwrap().verify().unwrap().problems
}

#[test]
fn edited_exposure_is_named_by_table_and_id() {
    let tmp = tempfile::tempdir().unwrap();
    let reference = reference();
    drop(reference_store(tmp.path()));
    // Halve a 94 dB(A) exposure's time: the operator's dose drops from 50 % to 25 %.
    tamper(
        tmp.path(),
        "exposures",
        "UPDATE exposures SET duration_s = 900 WHERE id = 1",
    );
    let found = problems(tmp.path());
    assert_eq!(found.len(), 1, "{found:?}");
    let Problem {
        record_id: None,
        kind:
            ProblemKind::ChainRow {
                table: ChainTable::Exposures,
                id: 1,
                problem: RowProblem::HashMismatch { stored, .. },
            },
    } = &found[0]
    else {
        panic!("expected a hash mismatch on exposures row 1, found {found:?}");
    };
    assert_eq!(stored, &s(&reference["exposures"][0], "row_hash"));
    assert!(found[0].to_string().starts_with(
        "exposures row 1: row hash does not match its fields (edited after it was written)"
    ));
}

#[test]
fn deleted_safety_event_breaks_the_chain() {
    let tmp = tempfile::tempdir().unwrap();
    let reference = reference();
    drop(reference_store(tmp.path()));
    // Hide the refused plan: delete event 1.
    tamper(
        tmp.path(),
        "safety_events",
        "DELETE FROM safety_events WHERE id = 1",
    );
    let found = problems(tmp.path());
    let kinds: Vec<_> = found.iter().map(|p| p.kind.clone()).collect();
    assert_eq!(
        kinds,
        [
            ProblemKind::ChainRow {
                table: ChainTable::SafetyEvents,
                id: 2,
                problem: RowProblem::RowsMissing { first: 1, last: 1 },
            },
            ProblemKind::ChainRow {
                table: ChainTable::SafetyEvents,
                id: 2,
                problem: RowProblem::ChainBroken {
                    expected: GENESIS_PREV_HASH.into(),
                    found: s(&reference["safety_events"][1], "prev_hash"),
                },
            },
        ]
    );
    assert_eq!(
        found[0].to_string(),
        "safety_events row 2: row 1 is missing (deleted)"
    );
}

#[test]
fn dropped_and_damaged_safety_rows_are_reported() {
    let tmp = tempfile::tempdir().unwrap();
    drop(reference_store(tmp.path()));
    raw(tmp.path())
        .execute_batch(
            "DROP TRIGGER exposures_no_delete;
             DROP TRIGGER safety_events_no_update;
             UPDATE safety_events SET kind = 'all_fine', time_unix_ns = 0 WHERE id = 2;",
        )
        .unwrap();
    let found: Vec<String> = problems(tmp.path())
        .iter()
        .map(ToString::to_string)
        .collect();
    assert!(found.contains(
        &"store: append-only trigger `exposures_no_delete` is missing (dropped)".to_owned()
    ));
    assert!(found.contains(
        &"store: append-only trigger `safety_events_no_update` is missing (dropped)".to_owned()
    ));
    assert!(found
        .iter()
        .any(|p| p.starts_with("safety_events row 2: row hash does not match")));
    assert!(found.contains(
        &"safety_events row 2: field `kind` is damaged: expected a safety event kind, found \"all_fine\""
            .to_owned()
    ));
    assert!(found
        .contains(&"safety_events row 2: time index does not match time_utc (edited)".to_owned()));
    assert_eq!(found.len(), 5, "{found:#?}");
}

#[test]
fn schema_2_store_migrates_and_its_records_keep_verifying() {
    let tmp = tempfile::tempdir().unwrap();
    // A schema-2 store: the tables of later schemas (with their triggers and indexes) and
    // the later columns taken away, the version set back, and the two v2 records of the
    // Python reference (tests/reference/store_record_hash.py) written as schema 2 wrote
    // them, hashes and all.
    drop(Store::open(tmp.path()).unwrap());
    let hashes = crate::calibration_store::write_reference_v2_records(tmp.path());
    raw(tmp.path())
        .execute_batch(
            "DROP TABLE safety_events; DROP TABLE exposures; DROP TABLE store_meta;
             ALTER TABLE records DROP COLUMN key_id; ALTER TABLE records DROP COLUMN build;
             ALTER TABLE records DROP COLUMN inputs_json;
             ALTER TABLE records DROP COLUMN playback_json; PRAGMA user_version = 2;",
        )
        .unwrap();
    let tables: i64 = raw(tmp.path())
        .query_row(
            "SELECT COUNT(*) FROM sqlite_schema WHERE name IN ('safety_events', 'exposures')",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(tables, 0);
    let before: Vec<String> = hashes;

    let mut store = Store::open(tmp.path()).unwrap();
    let version: i64 = rusqlite::Connection::open(tmp.path().join(DB_FILE))
        .unwrap()
        .pragma_query_value(None, "user_version", |r| r.get(0))
        .unwrap();
    assert_eq!(version, SCHEMA_VERSION);
    assert_eq!(SCHEMA_VERSION, 4);
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(report.n_records, 2);
    assert_eq!(report.head_hash, before[1]);
    assert_eq!((report.n_safety_events, report.n_exposures), (0, 0));

    // The new chains work on the migrated store and link to its records.
    let reference = reference();
    let mut event = event_from(&reference["safety_events"][1]);
    event.record_id = Some(2);
    store.append_safety_event(&event).unwrap();
    store
        .append_exposure(&exposure_from(&reference["exposures"][0]))
        .unwrap();
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!((report.n_safety_events, report.n_exposures), (1, 1));
}

#[test]
fn bad_rows_are_refused_and_nothing_is_written() {
    let tmp = tempfile::tempdir().unwrap();
    let reference = reference();
    let mut store = Store::open(tmp.path()).unwrap();
    let good_event = event_from(&reference["safety_events"][0]);
    let good_exposure = exposure_from(&reference["exposures"][1]);

    let cases_event: Vec<(NewSafetyEvent, &str)> = vec![
        (
            NewSafetyEvent {
                serial: Some(String::new()),
                ..good_event.clone()
            },
            "record field `serial`: expected non-empty text, found \"\"",
        ),
        (
            NewSafetyEvent {
                record_id: Some(9),
                ..good_event.clone()
            },
            "record field `record_id`: expected the id of a record in this store, found 9, which no record has",
        ),
        (
            NewSafetyEvent {
                detail_json: "{level: 3".into(),
                ..good_event.clone()
            },
            "record field `detail_json`: expected a JSON document, found \"{level: 3\"",
        ),
        (
            NewSafetyEvent {
                time_utc: "2025-03-14 09:30".into(),
                ..good_event.clone()
            },
            "record field `time_utc`: expected a UTC time like 2025-03-14T09:26:53.589Z, found \"2025-03-14 09:30\"",
        ),
    ];
    for (event, message) in cases_event {
        let err = store.append_safety_event(&event).unwrap_err();
        assert!(matches!(err, StoreError::InvalidRecord { .. }), "{err:?}");
        assert_eq!(err.to_string(), message);
    }
    let cases_exposure: Vec<(NewExposure, &str)> = vec![
        (
            NewExposure {
                level_dba: f64::NAN,
                ..good_exposure.clone()
            },
            "record field `level_dba`: expected a finite level in dB(A), found NaN",
        ),
        (
            NewExposure {
                duration_s: -1.0,
                ..good_exposure.clone()
            },
            "record field `duration_s`: expected a finite duration of 0 s or more, found -1",
        ),
        (
            NewExposure {
                operator: " ".into(),
                ..good_exposure.clone()
            },
            "record field `operator`: expected non-empty text, found \" \"",
        ),
    ];
    for (exposure, message) in cases_exposure {
        let err = store.append_exposure(&exposure).unwrap_err();
        assert_eq!(err.to_string(), message);
    }
    let report = store.verify().unwrap();
    assert_eq!((report.n_safety_events, report.n_exposures), (0, 0));
}
