//! Store: tampering by someone with write access to the files is named by `verify`, with
//! the record it concerns. Each attacker here drops the triggers, edits, and (where it says)
//! puts the triggers back so that only the hash chain can tell.

use crate::support::store_support;

use std::path::Path;

use store_support::{capture, raw, record};
use tragus::store::{Notice, Problem, ProblemKind, Store, StoredRecord};

/// A store with records 1..=n and the records as appended.
fn store_with(dir: &Path, n: u32) -> Vec<StoredRecord> {
    let mut store = Store::open(dir).unwrap();
    (1..=n)
        .map(|i| store.append(&record(i), &capture(i)).unwrap())
        .collect()
}

fn problems(dir: &Path) -> Vec<Problem> {
    let report = Store::open(dir).unwrap().verify().unwrap();
    report.problems
}

/// Run `sql` as an attacker: save the triggers' SQL, drop them, run, and put them back
/// when `restore` is set.
fn tamper(dir: &Path, sql: &str, restore: bool) {
    let conn = raw(dir);
    let triggers: Vec<(String, String)> = conn
        .prepare(
            "SELECT name, sql FROM sqlite_schema WHERE type = 'trigger' AND tbl_name = 'records'",
        )
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert_eq!(
        triggers.len(),
        3,
        "the store creates three triggers on records"
    );
    for (name, _) in &triggers {
        conn.execute_batch(&format!("DROP TRIGGER {name}")).unwrap();
    }
    conn.execute_batch(sql).unwrap();
    if restore {
        for (_, trigger_sql) in &triggers {
            conn.execute_batch(trigger_sql).unwrap();
        }
    }
}

#[test]
fn edited_field_is_named_by_record() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = store_with(tmp.path(), 5);
    // Turn the failed unit 3 into a pass, triggers put back afterwards.
    tamper(
        tmp.path(),
        "UPDATE records SET verdict = 'pass' WHERE id = 3",
        true,
    );
    let mut edited = recs[2].clone();
    edited.verdict = tragus::Verdict::Pass;
    let found = problems(tmp.path());
    assert_eq!(
        found,
        [Problem {
            record_id: Some(3),
            kind: ProblemKind::RecordHashMismatch {
                stored: recs[2].record_hash.clone(),
                computed: edited.computed_hash(),
            },
        }]
    );
    assert!(found[0].to_string().starts_with(
        "record 3: record hash does not match its fields (edited after it was written)"
    ));
}

#[test]
fn dropped_triggers_are_reported() {
    let tmp = tempfile::tempdir().unwrap();
    store_with(tmp.path(), 2);
    tamper(
        tmp.path(),
        "UPDATE records SET operator = 'someone.else' WHERE id = 1",
        false,
    );
    let found = problems(tmp.path());
    let kinds: Vec<_> = found.iter().map(|p| (p.record_id, &p.kind)).collect();
    assert_eq!(kinds.len(), 4, "{found:?}");
    assert!(matches!(
        kinds[0],
        (
            None,
            ProblemKind::TriggerMissing {
                name: "records_no_update"
            }
        )
    ));
    assert!(matches!(
        kinds[1],
        (
            None,
            ProblemKind::TriggerMissing {
                name: "records_no_delete"
            }
        )
    ));
    assert!(matches!(
        kinds[2],
        (
            None,
            ProblemKind::TriggerMissing {
                name: "records_chain_linear"
            }
        )
    ));
    assert!(matches!(
        kinds[3],
        (Some(1), ProblemKind::RecordHashMismatch { .. })
    ));
    assert_eq!(
        found[0].to_string(),
        "store: append-only trigger `records_no_update` is missing (dropped)"
    );
}

#[test]
fn neutered_trigger_is_reported_as_altered() {
    let tmp = tempfile::tempdir().unwrap();
    store_with(tmp.path(), 2);
    raw(tmp.path())
        .execute_batch(
            "DROP TRIGGER records_no_delete;
             CREATE TRIGGER records_no_delete BEFORE DELETE ON records BEGIN SELECT 1; END;",
        )
        .unwrap();
    let found = problems(tmp.path());
    assert_eq!(
        found,
        [Problem {
            record_id: None,
            kind: ProblemKind::TriggerAltered {
                name: "records_no_delete"
            },
        }]
    );
}

#[test]
fn deleted_middle_record_is_named() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = store_with(tmp.path(), 5);
    tamper(tmp.path(), "DELETE FROM records WHERE id = 3", true);
    let found = problems(tmp.path());
    assert_eq!(
        found,
        [
            Problem {
                record_id: Some(4),
                kind: ProblemKind::RecordsMissing { first: 3, last: 3 },
            },
            Problem {
                record_id: Some(4),
                kind: ProblemKind::ChainBroken {
                    expected: recs[1].record_hash.clone(),
                    found: recs[2].record_hash.clone(),
                },
            },
        ]
    );
    assert_eq!(
        found[0].to_string(),
        "record 4: record 3 is missing (deleted)"
    );
    // Its capture is now referenced by nobody: reported, as information only.
    let report = Store::open(tmp.path()).unwrap().verify().unwrap();
    assert_eq!(
        report.notices,
        [Notice::OrphanCapture {
            path: tmp
                .path()
                .join("captures")
                .join(format!("{}.wav", recs[2].capture_sha256)),
        }]
    );
}

#[test]
fn rewritten_record_with_recomputed_hash_breaks_the_next_link() {
    // An attacker who knows the canonical form rewrites record 2 with a fresh, correct hash;
    // record 3 still points at the old one.
    let tmp = tempfile::tempdir().unwrap();
    let recs = store_with(tmp.path(), 3);
    let mut forged = recs[1].clone();
    forged.serial = "E2-999999".into();
    let forged_hash = forged.computed_hash();
    tamper(
        tmp.path(),
        &format!(
            "UPDATE records SET serial = 'E2-999999', record_hash = '{forged_hash}' WHERE id = 2"
        ),
        true,
    );
    assert_eq!(
        problems(tmp.path()),
        [Problem {
            record_id: Some(3),
            kind: ProblemKind::ChainBroken {
                expected: forged_hash,
                found: recs[1].record_hash.clone(),
            },
        }]
    );
}

#[test]
fn edited_time_index_is_named() {
    let tmp = tempfile::tempdir().unwrap();
    store_with(tmp.path(), 3);
    tamper(
        tmp.path(),
        "UPDATE records SET time_unix_ns = time_unix_ns + 3600000000000 WHERE id = 2",
        true,
    );
    assert_eq!(
        problems(tmp.path()),
        [Problem {
            record_id: Some(2),
            kind: ProblemKind::TimeIndexMismatch,
        }]
    );
}

#[test]
fn altered_capture_bytes_are_named() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = store_with(tmp.path(), 4);
    let path = tmp
        .path()
        .join("captures")
        .join(format!("{}.wav", recs[1].capture_sha256));
    let mut bytes = std::fs::read(&path).unwrap();
    // One sample's low byte, well inside the data chunk (header is 44 bytes).
    bytes[60] ^= 0x01;
    std::fs::write(&path, &bytes).unwrap();
    let found = problems(tmp.path());
    assert_eq!(
        found,
        [Problem {
            record_id: Some(2),
            kind: ProblemKind::CaptureAltered {
                path: path.clone(),
                computed: tragus::store::sha256_hex(&bytes),
            },
        }]
    );
    assert!(found[0].to_string().starts_with(&format!(
        "record 2: capture file altered: {} now hashes to ",
        path.display()
    )));
    let err = Store::open(tmp.path())
        .unwrap()
        .read_capture(&recs[1].capture_sha256)
        .unwrap_err();
    assert!(matches!(
        err,
        tragus::store::StoreError::CaptureAltered { .. }
    ));
}

#[test]
fn deleted_capture_file_is_named() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = store_with(tmp.path(), 4);
    let path = tmp
        .path()
        .join("captures")
        .join(format!("{}.wav", recs[2].capture_sha256));
    std::fs::remove_file(&path).unwrap();
    let found = problems(tmp.path());
    assert_eq!(
        found,
        [Problem {
            record_id: Some(3),
            kind: ProblemKind::CaptureMissing { path: path.clone() },
        }]
    );
    assert_eq!(
        found[0].to_string(),
        format!("record 3: capture file missing: {}", path.display())
    );
    let err = Store::open(tmp.path())
        .unwrap()
        .read_capture(&recs[2].capture_sha256)
        .unwrap_err();
    assert_eq!(
        err.to_string(),
        format!(
            "{}: capture file missing; restore it from a backup and run verify on the store",
            path.display()
        )
    );
}

#[test]
fn capture_hash_pointing_outside_the_store_is_damage_not_a_path() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = store_with(tmp.path(), 2);
    tamper(
        tmp.path(),
        "UPDATE records SET capture_sha256 = '../../etc/passwd' WHERE id = 1",
        true,
    );
    let found = problems(tmp.path());
    assert_eq!(found.len(), 2, "{found:?}");
    assert!(matches!(
        found[0].kind,
        ProblemKind::RecordHashMismatch { .. }
    ));
    assert_eq!(
        found[1],
        Problem {
            record_id: Some(1),
            kind: ProblemKind::FieldDamaged {
                column: "capture_sha256",
                detail: "expected 64 lowercase hex digits".into(),
            },
        }
    );
    // Record 1's real capture is now unreferenced.
    let report = Store::open(tmp.path()).unwrap().verify().unwrap();
    assert_eq!(report.notices.len(), 1);
    assert!(report.notices[0]
        .to_string()
        .contains(&recs[0].capture_sha256));
}

#[test]
fn stray_files_in_capture_dir_are_notices_not_problems() {
    let tmp = tempfile::tempdir().unwrap();
    store_with(tmp.path(), 1);
    let captures = tmp.path().join("captures");
    std::fs::write(captures.join("notes.txt"), b"cleaned coupler").unwrap();
    std::fs::write(captures.join(format!("{}.wav", "ab".repeat(32))), b"RIFF").unwrap();
    let report = Store::open(tmp.path()).unwrap().verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(
        report.notices,
        [
            Notice::OrphanCapture {
                path: captures.join(format!("{}.wav", "ab".repeat(32)))
            },
            Notice::UnexpectedFile {
                path: captures.join("notes.txt")
            },
        ]
    );
}

#[test]
fn values_no_record_can_hold_are_reported_without_panic() {
    // The attacker rebuilds the table without STRICT and CHECK to store impossible values.
    let tmp = tempfile::tempdir().unwrap();
    store_with(tmp.path(), 3);
    raw(tmp.path())
        .execute_batch(
            "ALTER TABLE records RENAME TO old_records;
             CREATE TABLE records (id INTEGER PRIMARY KEY, time_utc, time_unix_ns, serial,
                 plan_id, plan_revision, plan_sha256, software_version, station, operator,
                 rig, verdict, result_json, capture_sha256, prev_hash, record_hash, signature,
                 calibration_mode, calibration_sha256, key_id, build, inputs_json,
                 playback_json);
             INSERT INTO records SELECT * FROM old_records;
             DROP TABLE old_records;
             UPDATE records SET plan_revision = 'three', verdict = 'maybe' WHERE id = 2;",
        )
        .unwrap();
    let store = Store::open(tmp.path()).unwrap();
    let err = store.get(2).unwrap_err();
    assert!(
        err.to_string()
            .starts_with("record 2: stored field `plan_revision` is damaged ("),
        "{err}"
    );
    assert!(
        err.to_string().ends_with("); run verify on the store"),
        "{err}"
    );

    let found = store.verify().unwrap().problems;
    let for_record_2: Vec<_> = found.iter().filter(|p| p.record_id == Some(2)).collect();
    assert_eq!(
        for_record_2,
        [
            &Problem {
                record_id: Some(2),
                kind: ProblemKind::FieldDamaged {
                    column: "plan_revision",
                    detail: "expected an integer, found Text".into(),
                },
            },
            &Problem {
                record_id: Some(2),
                kind: ProblemKind::FieldDamaged {
                    column: "verdict",
                    detail: "expected pass, fail or retest, found \"maybe\"".into(),
                },
            },
        ]
    );
    // Dropping the old table took its triggers with it.
    assert_eq!(
        found
            .iter()
            .filter(|p| matches!(p.kind, ProblemKind::TriggerMissing { .. }))
            .count(),
        3
    );
    // Records 1 and 3 are untouched and still read back.
    assert_eq!(store.get(3).unwrap().unwrap().id, 3);
}
