//! Store schema 1 → 2: a store written before calibrations were recorded migrates, its
//! records keep verifying under the v1 form, and new records chain after them in the v2
//! form — all against `tests/reference/store_record_hash.py` (Python `hashlib`).

use rusqlite::Connection;
use tragus::store::{NewRecord, RecordFilter, Store, DB_FILE, SCHEMA_VERSION};
use tragus::Verdict;

fn reference() -> serde_json::Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/store_record_hash.json"
    );
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn s(v: &serde_json::Value, key: &str) -> String {
    v[key].as_str().unwrap().to_owned()
}

/// The schema-1 table exactly as tragus 0.1 created it (a historical fact, copied here so
/// the test does not depend on the migration code it checks).
const SCHEMA_1: &str = r#"
CREATE TABLE records (
    id INTEGER PRIMARY KEY, time_utc TEXT NOT NULL, time_unix_ns INTEGER NOT NULL,
    serial TEXT NOT NULL, plan_id TEXT NOT NULL, plan_revision INTEGER NOT NULL,
    plan_sha256 TEXT NOT NULL, software_version TEXT NOT NULL, station TEXT NOT NULL,
    operator TEXT NOT NULL, rig TEXT NOT NULL,
    verdict TEXT NOT NULL CHECK (verdict IN ('pass', 'fail', 'retest')),
    result_json TEXT NOT NULL, capture_sha256 TEXT NOT NULL, prev_hash TEXT NOT NULL,
    record_hash TEXT NOT NULL, signature BLOB
) STRICT;
CREATE INDEX records_by_serial ON records (serial);
CREATE INDEX records_by_plan   ON records (plan_id);
CREATE INDEX records_by_time   ON records (time_unix_ns);
CREATE TRIGGER records_no_update BEFORE UPDATE ON records
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: records cannot be updated');
END;
CREATE TRIGGER records_no_delete BEFORE DELETE ON records
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: records cannot be deleted');
END;
CREATE TRIGGER records_chain_linear BEFORE INSERT ON records
WHEN NEW.id IS NOT (SELECT COALESCE(MAX(id), 0) + 1 FROM records)
  OR NEW.prev_hash IS NOT COALESCE(
        (SELECT record_hash FROM records ORDER BY id DESC LIMIT 1),
        '0000000000000000000000000000000000000000000000000000000000000000')
BEGIN
    SELECT RAISE(ABORT, 'tragus store chain: a record must follow the last record');
END;
PRAGMA application_id = 1414678355;
PRAGMA user_version = 1;
"#;

/// The time index of the reference records (Unix ns), computed with Python's datetime.
fn time_unix_ns(t: &str) -> i64 {
    match t {
        "2025-03-14T09:26:53.589Z" => 1_741_944_413_589_000_000,
        "2025-03-14T09:27:41Z" => 1_741_944_461_000_000_000,
        other => panic!("no time index for {other}"),
    }
}

#[test]
fn v1_store_migrates_and_keeps_verifying() {
    // Schemas 3 (safety events, exposures) and 4 (provenance, signatures) leave records as
    // schema 2 made them.
    assert_eq!(SCHEMA_VERSION, 4);
    let reference = reference();
    let tmp = tempfile::tempdir().unwrap();
    std::fs::create_dir_all(tmp.path().join("captures")).unwrap();
    let conn = Connection::open(tmp.path().join(DB_FILE)).unwrap();
    conn.execute_batch(SCHEMA_1).unwrap();
    // The v1 records with the hashes Python computed over the v1 form.
    for r in reference["records_v1"].as_array().unwrap() {
        let capture = hex::decode(s(r, "capture_hex")).unwrap();
        std::fs::write(
            tmp.path()
                .join("captures")
                .join(format!("{}.wav", s(r, "capture_sha256"))),
            &capture,
        )
        .unwrap();
        conn.execute(
            "INSERT INTO records VALUES (?1, ?2, ?16, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, \
             ?12, ?13, ?14, ?15, NULL)",
            rusqlite::params![
                r["id"].as_i64().unwrap(),
                s(r, "time_utc"),
                s(r, "serial"),
                s(r, "plan_id"),
                r["plan_revision"].as_i64().unwrap(),
                s(r, "plan_sha256"),
                s(r, "software_version"),
                s(r, "station"),
                s(r, "operator"),
                s(r, "rig"),
                s(r, "verdict"),
                s(r, "result_json"),
                s(r, "capture_sha256"),
                s(r, "prev_hash"),
                s(r, "record_hash"),
                time_unix_ns(&s(r, "time_utc")),
            ],
        )
        .unwrap();
    }
    drop(conn);

    let mut store = Store::open(tmp.path()).unwrap();
    let version: i64 = Connection::open(tmp.path().join(DB_FILE))
        .unwrap()
        .pragma_query_value(None, "user_version", |r| r.get(0))
        .unwrap();
    assert_eq!(version, SCHEMA_VERSION);
    let old = store.list(&RecordFilter::default()).unwrap();
    assert_eq!(old.len(), 2);
    for (rec, r) in old.iter().zip(reference["records_v1"].as_array().unwrap()) {
        assert_eq!(rec.calibration_mode, None);
        // The v1 form, byte for byte as Python wrote it; exact (digests).
        assert_eq!(rec.canonical_bytes(), s(r, "canonical").into_bytes());
        assert_eq!(rec.computed_hash(), s(r, "record_hash"));
    }

    // A record appended after the migration: v3 form (schema 4), chained on the last v1
    // record.
    let after = &reference["after_migration"][0];
    let new = NewRecord {
        time_utc: s(after, "time_utc"),
        serial: s(after, "serial"),
        plan_id: s(after, "plan_id"),
        plan_revision: 3,
        plan_sha256: s(after, "plan_sha256"),
        software_version: s(after, "software_version"),
        station: s(after, "station"),
        operator: s(after, "operator"),
        rig: s(after, "rig"),
        verdict: Verdict::Pass,
        result_json: s(after, "result_json"),
        calibration_mode: s(after, "calibration_mode"),
        calibration_sha256: after["calibration_sha256"].as_str().map(str::to_owned),
        build: s(after, "build"),
        inputs_json: s(after, "inputs_json"),
        playback_json: s(after, "playback_json"),
    };
    let stored = store
        .append(&new, &hex::decode(s(after, "capture_hex")).unwrap())
        .unwrap();
    assert_eq!(stored.id, 3);
    assert_eq!(stored.canonical_bytes(), s(after, "canonical").into_bytes());
    assert_eq!(stored.record_hash, s(after, "record_hash"));

    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
}

#[test]
fn dropping_the_mode_of_a_v2_record_breaks_its_hash() {
    // A v2 record rewritten to look like a v1 record (mode NULL) no longer verifies.
    let tmp = tempfile::tempdir().unwrap();
    let reference = reference();
    let mut store = Store::open(tmp.path()).unwrap();
    let r = &reference["records"][0];
    let new = NewRecord {
        time_utc: s(r, "time_utc"),
        serial: s(r, "serial"),
        plan_id: s(r, "plan_id"),
        plan_revision: 3,
        plan_sha256: s(r, "plan_sha256"),
        software_version: s(r, "software_version"),
        station: s(r, "station"),
        operator: s(r, "operator"),
        rig: s(r, "rig"),
        verdict: Verdict::Pass,
        result_json: s(r, "result_json"),
        calibration_mode: s(r, "calibration_mode"),
        calibration_sha256: r["calibration_sha256"].as_str().map(str::to_owned),
        build: s(r, "build"),
        inputs_json: s(r, "inputs_json"),
        playback_json: s(r, "playback_json"),
    };
    store
        .append(&new, &hex::decode(s(r, "capture_hex")).unwrap())
        .unwrap();
    assert!(store.verify().unwrap().is_intact());
    drop(store);
    let conn = Connection::open(tmp.path().join(DB_FILE)).unwrap();
    conn.execute_batch(
        "DROP TRIGGER records_no_update;
         UPDATE records SET calibration_mode = NULL, calibration_sha256 = NULL;",
    )
    .unwrap();
    drop(conn);
    let report = Store::open(tmp.path()).unwrap().verify().unwrap();
    assert!(
        format!("{:?}", report.problems).contains("HashMismatch"),
        "{:?}",
        report.problems
    );
}

/// Write the two v2 records of the Python reference into the store at `dir` (opened and
/// created by the caller) through a raw connection, as schema 2 wrote them; returns their
/// record hashes.
pub(crate) fn write_reference_v2_records(dir: &std::path::Path) -> Vec<String> {
    let reference = reference();
    let conn = Connection::open(dir.join(DB_FILE)).unwrap();
    let mut hashes = Vec::new();
    for r in reference["records_v2"].as_array().unwrap() {
        let capture = hex::decode(s(r, "capture_hex")).unwrap();
        std::fs::write(
            dir.join("captures")
                .join(format!("{}.wav", s(r, "capture_sha256"))),
            capture,
        )
        .unwrap();
        conn.execute(
            "INSERT INTO records (id, time_utc, time_unix_ns, serial, plan_id, plan_revision, \
             plan_sha256, software_version, station, operator, rig, verdict, result_json, \
             capture_sha256, prev_hash, record_hash, calibration_mode, calibration_sha256) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18)",
            rusqlite::params![
                r["id"].as_i64().unwrap(),
                s(r, "time_utc"),
                time_unix_ns(&s(r, "time_utc")),
                s(r, "serial"),
                s(r, "plan_id"),
                r["plan_revision"].as_i64().unwrap(),
                s(r, "plan_sha256"),
                s(r, "software_version"),
                s(r, "station"),
                s(r, "operator"),
                s(r, "rig"),
                s(r, "verdict"),
                s(r, "result_json"),
                s(r, "capture_sha256"),
                s(r, "prev_hash"),
                s(r, "record_hash"),
                s(r, "calibration_mode"),
                r["calibration_sha256"].as_str(),
            ],
        )
        .unwrap();
        hashes.push(s(r, "record_hash"));
    }
    hashes
}
