//! Store: appending, reading back, filters, append-only triggers, refusing bad input and
//! foreign files, and the SHA-256 the chain rests on.

use crate::support::store_support;

use std::time::Duration;

use store_support::{capture, raw, record};
use tragus::store::{
    sha256_hex, NewRecord, RecordFilter, Store, StoreError, DB_FILE, GENESIS_PREV_HASH,
};
use tragus::Verdict;

fn open(dir: &std::path::Path) -> Store {
    Store::open(dir).expect("open store")
}

#[test]
fn sha256_matches_fips_180_2_vectors() {
    // FIPS 180-2, Appendix B.1 (one block), B.2 (two blocks), B.3 (one million 'a').
    assert_eq!(
        sha256_hex(b"abc"),
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    );
    assert_eq!(
        sha256_hex(b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq"),
        "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"
    );
    assert_eq!(
        sha256_hex(&vec![b'a'; 1_000_000]),
        "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"
    );
}

#[test]
fn appended_records_survive_reopen_and_chain_verifies() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("tragus-data");
    let mut stored = Vec::new();
    {
        let mut store = open(&dir);
        for i in 1..=5 {
            stored.push(store.append(&record(i), &capture(i)).unwrap());
        }
    }
    // Chain rule from the module doc: ids 1, 2, …; genesis prev_hash is 64 zeros; each
    // prev_hash is the previous record_hash.
    assert_eq!(stored[0].prev_hash, GENESIS_PREV_HASH);
    assert_eq!(GENESIS_PREV_HASH, "0".repeat(64));
    for (k, pair) in stored.windows(2).enumerate() {
        assert_eq!(pair[1].prev_hash, pair[0].record_hash, "record {}", k + 2);
    }
    for (k, r) in stored.iter().enumerate() {
        assert_eq!(r.id, k as i64 + 1);
        // The capture hash is the SHA-256 of the bytes handed in (checked above against
        // FIPS vectors) and the file holds exactly those bytes.
        let bytes = capture(k as u32 + 1);
        assert_eq!(r.capture_sha256, sha256_hex(&bytes));
        let store_dir_file = dir
            .join("captures")
            .join(format!("{}.wav", r.capture_sha256));
        assert_eq!(std::fs::read(&store_dir_file).unwrap(), bytes);
    }

    let store = open(&dir);
    assert!(dir.join(DB_FILE).is_file());
    assert_eq!(
        store.capture_path(&stored[2].capture_sha256),
        dir.join("captures")
            .join(format!("{}.wav", stored[2].capture_sha256))
    );
    for r in &stored {
        assert_eq!(store.get(r.id).unwrap().as_ref(), Some(r));
        assert_eq!(r.computed_hash(), r.record_hash);
    }
    assert_eq!(store.get(6).unwrap(), None);
    assert_eq!(
        store.read_capture(&stored[1].capture_sha256).unwrap(),
        capture(2)
    );

    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert!(report.notices.is_empty(), "{:?}", report.notices);
    assert_eq!(report.n_records, 5);
    assert_eq!(report.n_captures_checked, 5);
    assert_eq!(report.head_hash, stored[4].record_hash);

    // The database is in WAL mode (docs/architecture.md "Store"); journal_mode persists in the file.
    let mode: String = raw(&dir)
        .query_row("PRAGMA journal_mode", [], |r| r.get(0))
        .unwrap();
    assert_eq!(mode, "wal");
}

#[test]
fn empty_store_verifies_with_genesis_head() {
    let tmp = tempfile::tempdir().unwrap();
    let report = open(tmp.path()).verify().unwrap();
    assert!(report.is_intact());
    assert_eq!(report.n_records, 0);
    assert_eq!(report.head_hash, GENESIS_PREV_HASH);
}

#[test]
fn same_capture_twice_is_stored_once_and_reused() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    let a = store.append(&record(1), &capture(7)).unwrap();
    let b = store.append(&record(2), &capture(7)).unwrap();
    assert_eq!(a.capture_sha256, b.capture_sha256);
    let n_files = std::fs::read_dir(tmp.path().join("captures"))
        .unwrap()
        .count();
    assert_eq!(n_files, 1);
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(report.n_captures_checked, 1);
}

#[test]
fn existing_capture_with_wrong_content_is_refused_and_kept() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    let bytes = capture(1);
    let path = store.capture_path(&sha256_hex(&bytes));
    let mut damaged = bytes.clone();
    damaged[50] ^= 0xff;
    std::fs::write(&path, &damaged).unwrap();

    let err = store.append(&record(1), &bytes).unwrap_err();
    assert!(matches!(err, StoreError::CaptureAltered { .. }), "{err:?}");
    assert_eq!(
        err.to_string(),
        format!(
            "{}: capture file content does not match its SHA-256 name (damaged or altered); keep it for the audit, restore the original from a backup and run verify on the store",
            path.display()
        )
    );
    // The evidence is left as it was and no record was written.
    assert_eq!(std::fs::read(&path).unwrap(), damaged);
    assert!(store.list(&RecordFilter::default()).unwrap().is_empty());
}

#[test]
fn list_filters_by_serial_plan_verdict_time_and_limit() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    for i in 1..=9 {
        let mut rec = record(i);
        if i >= 7 {
            rec.plan_id = "demo-earbud-night".into();
        }
        store.append(&rec, &capture(i)).unwrap();
    }
    let ids =
        |f: RecordFilter| -> Vec<i64> { store.list(&f).unwrap().iter().map(|r| r.id).collect() };
    assert_eq!(ids(RecordFilter::default()), (1..=9).collect::<Vec<_>>());
    assert_eq!(
        ids(RecordFilter {
            serial: Some("E2-000104".into()),
            ..Default::default()
        }),
        [4]
    );
    assert_eq!(
        ids(RecordFilter {
            plan_id: Some("demo-earbud-night".into()),
            ..Default::default()
        }),
        [7, 8, 9]
    );
    // record(i) fails every third unit.
    assert_eq!(
        ids(RecordFilter {
            verdict: Some(Verdict::Fail),
            ..Default::default()
        }),
        [3, 6, 9]
    );
    // Unit i is measured at 09:i:00.250Z; since is inclusive, until exclusive.
    let since = time::macros::datetime!(2025-03-14 09:03:00.250 UTC);
    let until = time::macros::datetime!(2025-03-14 09:06:00.250 UTC);
    assert_eq!(
        ids(RecordFilter {
            since: Some(since),
            until: Some(until),
            ..Default::default()
        }),
        [3, 4, 5]
    );
    assert_eq!(
        ids(RecordFilter {
            limit: Some(2),
            newest_first: true,
            ..Default::default()
        }),
        [9, 8]
    );
    assert_eq!(
        ids(RecordFilter {
            verdict: Some(Verdict::Pass),
            plan_id: Some("demo-earbud".into()),
            limit: Some(3),
            ..Default::default()
        }),
        [1, 2, 4]
    );
}

#[test]
fn raw_update_and_delete_are_refused_by_triggers() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    for i in 1..=3 {
        store.append(&record(i), &capture(i)).unwrap();
    }
    let conn = raw(tmp.path());
    let err = conn
        .execute("UPDATE records SET verdict = 'pass' WHERE id = 3", [])
        .unwrap_err();
    assert!(
        err.to_string()
            .contains("tragus store is append-only: records cannot be updated"),
        "{err}"
    );
    let err = conn
        .execute("DELETE FROM records WHERE id = 2", [])
        .unwrap_err();
    assert!(
        err.to_string()
            .contains("tragus store is append-only: records cannot be deleted"),
        "{err}"
    );
    // INSERT OR REPLACE over an existing id would delete without firing the delete trigger.
    let err = conn
        .execute(
            "INSERT OR REPLACE INTO records SELECT * FROM records WHERE id = 2",
            [],
        )
        .unwrap_err();
    assert!(
        err.to_string()
            .contains("tragus store chain: a record must follow the last record"),
        "{err}"
    );
    // A hand-made record that does not continue the chain is refused too.
    let err = conn
        .execute(
            "INSERT INTO records SELECT 4, time_utc, time_unix_ns, serial, plan_id, \
             plan_revision, plan_sha256, software_version, station, operator, rig, verdict, \
             result_json, capture_sha256, prev_hash, record_hash, NULL, calibration_mode, \
             calibration_sha256, key_id, build, inputs_json, playback_json FROM records \
             WHERE id = 3",
            [],
        )
        .unwrap_err();
    assert!(
        err.to_string()
            .contains("a record must follow the last record"),
        "{err}"
    );
    drop(conn);

    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(report.n_records, 3);
}

#[test]
fn two_handles_appending_alternately_keep_one_linear_chain() {
    let tmp = tempfile::tempdir().unwrap();
    let mut a = open(tmp.path());
    let mut b = open(tmp.path());
    let mut all = Vec::new();
    for i in 1..=8 {
        let store = if i % 2 == 1 { &mut a } else { &mut b };
        all.push(store.append(&record(i), &capture(i)).unwrap());
    }
    for (k, r) in all.iter().enumerate() {
        assert_eq!(r.id, k as i64 + 1);
        if k > 0 {
            assert_eq!(r.prev_hash, all[k - 1].record_hash);
        }
    }
    // Each handle sees the other's records.
    assert_eq!(a.list(&RecordFilter::default()).unwrap(), all);
    let report = b.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(report.n_records, 8);
}

#[test]
fn locked_store_says_retry_and_leaves_no_record() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    store.append(&record(1), &capture(1)).unwrap();
    store.set_busy_timeout(Duration::ZERO).unwrap();

    let holder = raw(tmp.path());
    holder.execute_batch("BEGIN IMMEDIATE").unwrap();
    let err = store.append(&record(2), &capture(2)).unwrap_err();
    assert!(matches!(err, StoreError::Locked { .. }), "{err:?}");
    assert_eq!(
        err.to_string(),
        format!(
            "{}: store is locked by another process, retry",
            tmp.path().join(DB_FILE).display()
        )
    );
    holder.execute_batch("ROLLBACK").unwrap();
    drop(holder);

    // The capture was made durable before the lock was tried: an orphan, not a problem.
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(report.n_records, 1);
    assert_eq!(report.notices.len(), 1, "{:?}", report.notices);
    // Retrying succeeds and adopts the orphan capture.
    let rec = store.append(&record(2), &capture(2)).unwrap();
    assert_eq!(rec.id, 2);
    assert!(store.verify().unwrap().notices.is_empty());
}

fn invalid(mutate: impl FnOnce(&mut NewRecord)) -> String {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    let mut rec = record(1);
    mutate(&mut rec);
    let err = store.append(&rec, &capture(1)).unwrap_err();
    assert!(matches!(err, StoreError::InvalidRecord { .. }), "{err:?}");
    // Nothing at all is written for an invalid record, not even the capture.
    assert!(store.list(&RecordFilter::default()).unwrap().is_empty());
    assert_eq!(
        std::fs::read_dir(tmp.path().join("captures"))
            .unwrap()
            .count(),
        0
    );
    err.to_string()
}

#[test]
fn invalid_records_are_refused_with_what_was_expected() {
    assert_eq!(
        invalid(|r| r.serial = String::new()),
        r#"record field `serial`: expected non-empty text, found """#
    );
    assert_eq!(
        invalid(|r| r.operator = "j.okafor\n".into()),
        r#"record field `operator`: expected text without control characters, found "j.okafor\n""#
    );
    assert_eq!(
        invalid(|r| r.time_utc = "2025-03-14T10:26:53+01:00".into()),
        r#"record field `time_utc`: expected a UTC time like 2025-03-14T09:26:53.589Z, found "2025-03-14T10:26:53+01:00""#
    );
    // February 30th does not exist; the calendar is checked, not only the digits.
    assert!(invalid(|r| r.time_utc = "2025-02-30T10:00:00Z".into()).contains("time_utc"));
    assert!(
        invalid(|r| r.time_utc = "2025-03-14T10:00:00.1234567891Z".into()).contains("time_utc")
    );
    assert_eq!(
        invalid(|r| r.plan_sha256 = "A".repeat(64)),
        format!(
            r#"record field `plan_sha256`: expected 64 lowercase hex digits, found "{}"…"#,
            "A".repeat(40)
        )
    );
    assert_eq!(
        invalid(|r| r.result_json = "{\"verdict\": pass}".into()),
        r#"record field `result_json`: expected a JSON document, found "{\"verdict\": pass}""#
    );
}

#[test]
fn capture_that_is_not_wav_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    let err = store.append(&record(1), b"abc").unwrap_err();
    assert_eq!(
        err.to_string(),
        r#"record field `capture_wav`: expected a WAV file (RIFF....WAVE), found 3 bytes starting "abc""#
    );
}

#[test]
fn time_fractions_of_one_to_nine_digits_are_accepted() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = open(tmp.path());
    for (i, t) in [
        "2025-03-14T09:00:00Z",
        "2025-03-14T09:00:00.5Z",
        "2025-03-14T09:00:00.123456789Z",
    ]
    .into_iter()
    .enumerate()
    {
        let mut rec = record(i as u32 + 1);
        rec.time_utc = t.into();
        store.append(&rec, &capture(i as u32 + 1)).unwrap();
    }
    // ".5" is half a second: after 09:00:00.25 and before 09:00:00.6 only record 2 lies.
    let ids: Vec<i64> = store
        .list(&RecordFilter {
            since: Some(time::macros::datetime!(2025-03-14 09:00:00.25 UTC)),
            until: Some(time::macros::datetime!(2025-03-14 09:00:00.6 UTC)),
            ..Default::default()
        })
        .unwrap()
        .iter()
        .map(|r| r.id)
        .collect();
    assert_eq!(ids, [2]);
}

#[test]
fn non_sqlite_file_is_not_a_tragus_store() {
    let tmp = tempfile::tempdir().unwrap();
    let db = tmp.path().join(DB_FILE);
    for content in [
        b"station notes: line 3, coupler B cleaned\n".repeat(100),
        b"hello".to_vec(),
    ] {
        std::fs::write(&db, &content).unwrap();
        let err = Store::open(tmp.path()).unwrap_err();
        assert!(matches!(err, StoreError::NotAStore { .. }), "{err:?}");
        assert_eq!(
            err.to_string(),
            format!(
                "{}: database is not a tragus store (the file is not a SQLite database); point the store option at a tragus data directory or move this file aside",
                db.display()
            )
        );
        // The file is left as it was.
        assert_eq!(std::fs::read(&db).unwrap(), content);
    }
}

#[test]
fn another_programs_sqlite_database_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let db = tmp.path().join(DB_FILE);
    let conn = rusqlite::Connection::open(&db).unwrap();
    conn.execute_batch("CREATE TABLE inventory (part TEXT, qty INTEGER)")
        .unwrap();
    drop(conn);
    let err = Store::open(tmp.path()).unwrap_err();
    assert_eq!(
        err.to_string(),
        format!(
            "{}: database is not a tragus store (it is a SQLite database with 1 schema objects but no tragus mark); point the store option at a tragus data directory or move this file aside",
            db.display()
        )
    );

    let conn = rusqlite::Connection::open(&db).unwrap();
    conn.execute_batch("PRAGMA application_id = 1234").unwrap();
    drop(conn);
    let err = Store::open(tmp.path()).unwrap_err();
    assert!(
        err.to_string()
            .contains("its application id is 0x000004d2, a tragus store's is 0x54524753"),
        "{err}"
    );
}

#[test]
fn store_from_a_newer_tragus_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    drop(open(tmp.path()));
    raw(tmp.path())
        .execute_batch("PRAGMA user_version = 5")
        .unwrap();
    let err = Store::open(tmp.path()).unwrap_err();
    assert_eq!(
        err.to_string(),
        format!(
            "{}: store schema version 5 is newer than this tragus supports (4); upgrade tragus",
            tmp.path().join(DB_FILE).display()
        )
    );
}

#[test]
fn store_directory_that_is_a_file_gives_an_io_error() {
    let tmp = tempfile::tempdir().unwrap();
    let not_dir = tmp.path().join("tragus-data");
    std::fs::write(&not_dir, b"x").unwrap();
    let err = Store::open(&not_dir).unwrap_err();
    assert!(matches!(err, StoreError::Io { .. }), "{err:?}");
    assert!(
        err.to_string().starts_with(&format!(
            "{}: could not create the store directory: ",
            not_dir.join("captures").display()
        )),
        "{err}"
    );
}
