//! Store: `verify` is a pure, complete reader. It opens the database read-only and never
//! migrates (stores of schema 2, 3 and 4 verified as they are), writes no byte into the store
//! directory (every file hashed before and after), works on read-only media, checks
//! signatures against a keyring and checkpoints, names schema objects that are not the
//! store's own and goes on after each problem. Also `tragus checkpoint`'s file and
//! `tragus store migrate`.

use crate::store_tamper_matrix::{fresh, station_key, write_keyring, Case, STATION};
use crate::support::{common, store_support};

use std::collections::BTreeMap;
use std::path::Path;

use common::{assert_exit, tragus};
use store_support::{capture, raw, record};
use time::macros::datetime;
use tragus::keys::{Keyring, KeyringEntry, SignatureProblem, StationKey};
use tragus::store::{
    verify_dir, ChainHead, ChainHeads, Checkpoint, CheckpointProblem, FileProblem, NewSafetyEvent,
    Notice, ProblemKind, RowProblem, SafetyKind, SignatureCount, Store, VerifyOptions, DB_FILE,
};

/// Every entry under `dir`: relative path → SHA-256 of a file's bytes, `dir` for a
/// directory, the link target for a link.
fn snapshot(dir: &Path) -> BTreeMap<String, String> {
    fn walk(root: &Path, dir: &Path, out: &mut BTreeMap<String, String>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let e = e.unwrap();
            let path = e.path();
            let rel = path.strip_prefix(root).unwrap().display().to_string();
            let t = e.file_type().unwrap();
            if t.is_dir() {
                out.insert(rel, "dir".into());
                walk(root, &path, out);
            } else if t.is_symlink() {
                out.insert(
                    rel,
                    format!("link {:?}", std::fs::read_link(&path).unwrap()),
                );
            } else {
                out.insert(
                    rel,
                    tragus::store::sha256_hex(&std::fs::read(&path).unwrap()),
                );
            }
        }
    }
    let mut out = BTreeMap::new();
    walk(dir, dir, &mut out);
    out
}

fn user_version(dir: &Path) -> i64 {
    // Read through a read-only connection, so looking does not change what is looked at.
    let conn = rusqlite::Connection::open_with_flags(
        dir.join(DB_FILE),
        rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY,
    )
    .unwrap();
    conn.pragma_query_value(None, "user_version", |r| r.get(0))
        .unwrap()
}

/// A schema-2 store: the two v2 records of the Python reference, later tables and columns
/// taken away, the version set back (as tests/it/store_safety.rs makes one).
fn schema_2_store(dir: &Path) {
    drop(Store::open(dir).unwrap());
    crate::calibration_store::write_reference_v2_records(dir);
    raw(dir)
        .execute_batch(
            "DROP TABLE safety_events; DROP TABLE exposures; DROP TABLE store_meta;
             ALTER TABLE records DROP COLUMN key_id; ALTER TABLE records DROP COLUMN build;
             ALTER TABLE records DROP COLUMN inputs_json;
             ALTER TABLE records DROP COLUMN playback_json; PRAGMA user_version = 2;",
        )
        .unwrap();
}

/// A schema-3 store: the reference v2 records, a safety event of record 1, the schema-4
/// columns and table taken away.
fn schema_3_store(dir: &Path) {
    drop(Store::open(dir).unwrap());
    crate::calibration_store::write_reference_v2_records(dir);
    let mut store = Store::open(dir).unwrap();
    store.append_safety_event(&event(Some(1))).unwrap();
    drop(store);
    raw(dir)
        .execute_batch(
            "DROP TABLE store_meta;
             ALTER TABLE records DROP COLUMN key_id; ALTER TABLE records DROP COLUMN build;
             ALTER TABLE records DROP COLUMN inputs_json;
             ALTER TABLE records DROP COLUMN playback_json;
             ALTER TABLE safety_events DROP COLUMN signature;
             ALTER TABLE safety_events DROP COLUMN key_id;
             ALTER TABLE exposures DROP COLUMN signature;
             ALTER TABLE exposures DROP COLUMN key_id; PRAGMA user_version = 3;",
        )
        .unwrap();
}

fn event(record_id: Option<i64>) -> NewSafetyEvent {
    NewSafetyEvent {
        time_utc: "2025-03-14T09:26:54Z".into(),
        station: STATION.into(),
        operator: "j.okafor".into(),
        serial: Some("E2-000123".into()),
        plan_id: "demo-earbud".into(),
        plan_sha256: None,
        kind: SafetyKind::SweepScaledDown,
        message: "the sweep was played 3 dB lower".into(),
        detail_json: "{}".into(),
        record_id,
    }
}

fn keyring_of(
    entries: &[(
        &StationKey,
        time::OffsetDateTime,
        Option<time::OffsetDateTime>,
    )],
) -> Keyring {
    Keyring {
        entries: entries
            .iter()
            .map(|(k, from, until)| KeyringEntry {
                key_id: k.key_id().to_string(),
                station: k.station().to_string(),
                public_key: k.public_key(),
                valid_from: *from,
                valid_until: *until,
            })
            .collect(),
    }
}

fn verify_cli(dir: &Path, extra: &[&str]) -> (i32, String) {
    let out = tragus()
        .arg("verify")
        .arg("--store")
        .arg(dir)
        .args(extra)
        .output()
        .unwrap();
    (
        out.status.code().unwrap(),
        String::from_utf8_lossy(&out.stdout).into_owned() + &String::from_utf8_lossy(&out.stderr),
    )
}

fn no_sqlite_sidecars(dir: &Path) {
    for s in ["-wal", "-shm", "-journal"] {
        assert!(
            !dir.join(format!("{DB_FILE}{s}")).exists(),
            "{DB_FILE}{s} was created"
        );
    }
}

#[test]
fn verify_writes_nothing_into_a_schema_4_store() {
    let case = fresh();
    let before = snapshot(&case.store);
    let (code, text) = case.verify(&[]);
    assert_eq!(code, 0, "{text}");
    let keyring = keyring_of(&[(&station_key(), datetime!(2025-01-01 0:00 UTC), None)]);
    let report = verify_dir(
        &case.store,
        &VerifyOptions {
            keyring: Some(&keyring),
            checkpoints: vec![],
        },
    )
    .unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(snapshot(&case.store), before);
    no_sqlite_sidecars(&case.store);
}

#[test]
fn verify_writes_nothing_into_a_schema_2_store_and_never_migrates_it() {
    let tmp = tempfile::tempdir().unwrap();
    schema_2_store(tmp.path());
    let before = snapshot(tmp.path());
    let (code, text) = verify_cli(tmp.path(), &[]);
    assert_eq!(code, 0, "{text}");
    assert!(
        text.starts_with("2 record(s), 2 capture file(s) rehashed"),
        "{text}"
    );
    assert!(
        text.contains("notice  schema 2: verified as it is; run `tragus store migrate` to bring it to schema 4"),
        "{text}"
    );
    assert_eq!(snapshot(tmp.path()), before);
    no_sqlite_sidecars(tmp.path());
    assert_eq!(user_version(tmp.path()), 2);
}

#[test]
fn schema_3_store_is_verified_as_it_is() {
    let tmp = tempfile::tempdir().unwrap();
    schema_3_store(tmp.path());
    let before = snapshot(tmp.path());
    let report = verify_dir(tmp.path(), &VerifyOptions::default()).unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert_eq!(report.schema_version, 3);
    assert_eq!((report.n_records, report.n_safety_events), (2, 1));
    assert_eq!(report.store_id, None);
    assert_eq!(
        report.signatures.safety_events,
        SignatureCount {
            signed: 0,
            unsigned: 1
        }
    );
    assert!(report.notices.contains(&Notice::OlderSchema {
        found: 3,
        current: 4
    }));
    assert_eq!(snapshot(tmp.path()), before);
    assert_eq!(user_version(tmp.path()), 3);
    // With a keyring every row of an unsigned store is named.
    let keyring = keyring_of(&[(&station_key(), datetime!(2025-01-01 0:00 UTC), None)]);
    let report = verify_dir(
        tmp.path(),
        &VerifyOptions {
            keyring: Some(&keyring),
            checkpoints: vec![],
        },
    )
    .unwrap();
    assert_eq!(report.problems.len(), 3, "{:?}", report.problems);
    assert!(report.problems.iter().all(|p| matches!(
        &p.kind,
        ProblemKind::Signature {
            problem: SignatureProblem::Unsigned
        } | ProblemKind::ChainRow {
            problem: RowProblem::Signature(SignatureProblem::Unsigned),
            ..
        }
    )));
}

#[cfg(unix)]
#[test]
fn verify_reads_a_store_on_read_only_media() {
    use std::os::unix::fs::PermissionsExt;
    let case = fresh();
    let copy = case.tmp.path().join("read-only");
    copy_tree(&case.store, &copy);
    let set_mode = |file_mode: u32, dir_mode: u32| {
        fn walk(p: &Path, f: u32, d: u32) {
            for e in std::fs::read_dir(p).unwrap() {
                let path = e.unwrap().path();
                if path.is_dir() {
                    walk(&path, f, d);
                    std::fs::set_permissions(&path, std::fs::Permissions::from_mode(d)).unwrap();
                } else {
                    std::fs::set_permissions(&path, std::fs::Permissions::from_mode(f)).unwrap();
                }
            }
        }
        walk(&copy, file_mode, dir_mode);
        std::fs::set_permissions(&copy, std::fs::Permissions::from_mode(dir_mode)).unwrap();
    };
    set_mode(0o444, 0o555);
    let before = snapshot(&copy);
    let keys = case.keyring.to_str().unwrap();
    let (code, text) = verify_cli(&copy, &["--keys", keys]);
    // Root ignores the modes; then this shows at least that nothing was written or created.
    let after = snapshot(&copy);
    let sidecars: Vec<bool> = ["-wal", "-shm"]
        .iter()
        .map(|s| copy.join(format!("{DB_FILE}{s}")).exists())
        .collect();
    set_mode(0o644, 0o755);
    assert_eq!(code, 0, "{text}");
    assert!(text.starts_with("14 record(s)"), "{text}");
    assert_eq!(after, before);
    assert_eq!(sidecars, [false, false]);
}

fn copy_tree(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        if e.file_type().unwrap().is_dir() {
            copy_tree(&e.path(), &to.join(e.file_name()));
        } else {
            std::fs::copy(e.path(), to.join(e.file_name())).unwrap();
        }
    }
}

#[test]
fn verify_reads_commits_still_in_the_write_ahead_log() {
    // A station holds the store open: its last record is only in the log, and verify must
    // see it (read under SQLite's locks, not as an immutable file).
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    for i in 1..=3 {
        store.append(&record(i), &capture(i)).unwrap();
    }
    assert!(tmp.path().join(format!("{DB_FILE}-wal")).exists());
    let (code, text) = verify_cli(tmp.path(), &[]);
    assert_eq!(code, 0, "{text}");
    assert!(text.starts_with("3 record(s)"), "{text}");
    store.append(&record(4), &capture(4)).unwrap();
    let (code, text) = verify_cli(tmp.path(), &[]);
    assert_eq!(code, 0, "{text}");
    assert!(text.starts_with("4 record(s)"), "{text}");
}

#[test]
fn without_a_keyring_signatures_are_counted_not_checked() {
    let case = fresh();
    let report = verify_dir(&case.store, &VerifyOptions::default()).unwrap();
    assert!(report.is_intact());
    assert!(!report.signatures_checked);
    assert_eq!(
        report.signatures.records,
        SignatureCount {
            signed: 14,
            unsigned: 0
        }
    );
    assert_eq!(report.signatures.safety_events.signed, 6);
    assert_eq!(report.signatures.exposures.signed, 6);
    assert_eq!(
        report.notices,
        [Notice::SignaturesNotChecked { signed: 26 }]
    );
}

#[test]
fn unsigned_expired_and_other_station_signatures_are_named() {
    let tmp = tempfile::tempdir().unwrap();
    let key = station_key();
    let st2 = StationKey::from_secret("larkspur-line3-st2", &[11u8; 32]);
    let mut store = Store::open(tmp.path()).unwrap();
    // Records 1-3 by the station's key; 4 unsigned; 5 by another station's key.
    store.set_signer(key.clone());
    for i in 1..=3 {
        store.append(&record(i), &capture(i)).unwrap();
    }
    let mut unsigned = Store::open(tmp.path()).unwrap();
    unsigned.append(&record(4), &capture(4)).unwrap();
    drop(unsigned);
    store.set_signer(st2.clone());
    store.append(&record(5), &capture(5)).unwrap();
    store.append_safety_event(&event(Some(5))).unwrap();
    drop(store);
    // The station's key was retired at 09:03 (record 3 is stamped 09:03:00.250).
    let keyring = keyring_of(&[
        (
            &key,
            datetime!(2025-01-01 0:00 UTC),
            Some(datetime!(2025-03-14 9:03 UTC)),
        ),
        (&st2, datetime!(2025-01-01 0:00 UTC), None),
    ]);
    let report = verify_dir(
        tmp.path(),
        &VerifyOptions {
            keyring: Some(&keyring),
            checkpoints: vec![],
        },
    )
    .unwrap();
    let named: Vec<(Option<i64>, String)> = report
        .problems
        .iter()
        .map(|p| (p.record_id, p.to_string()))
        .collect();
    assert_eq!(named.len(), 4, "{named:#?}");
    assert_eq!(
        named[0].1,
        format!(
            "record 3: signature: signed by key {}, which was not valid at 2025-03-14T09:03:00.25Z",
            key.key_id()
        )
    );
    assert_eq!(named[1].1, "record 4: signature: not signed");
    assert_eq!(
        named[2].1,
        format!(
            "record 5: signature: signed by key {} of station larkspur-line3-st2, but the row is from station {STATION}",
            st2.key_id()
        )
    );
    assert!(
        named[3]
            .1
            .starts_with("safety_events row 1: signature: signed by key"),
        "{}",
        named[3].1
    );
}

#[test]
fn every_problem_is_reported_and_verification_goes_on() {
    let case = fresh();
    let conn = raw(&case.store);
    conn.execute_batch(
        "CREATE INDEX by_operator ON records (operator);
         DROP TRIGGER exposures_no_delete;
         DROP TABLE safety_events;
         DROP TRIGGER records_no_update;
         UPDATE records SET inputs_json = 'plan', playback_json = '[1]' WHERE id = 9;",
    )
    .unwrap();
    drop(conn);
    std::fs::write(case.store.join("archive").join("notes.txt"), b"x").unwrap();
    let report = verify_dir(&case.store, &VerifyOptions::default()).unwrap();
    let kinds: Vec<&ProblemKind> = report.problems.iter().map(|p| &p.kind).collect();
    for want in [
        ProblemKind::TriggerMissing {
            name: "records_no_update",
        },
        ProblemKind::TriggerMissing {
            name: "safety_events_no_update",
        },
        ProblemKind::TriggerMissing {
            name: "exposures_no_delete",
        },
        ProblemKind::ForeignObject {
            object_type: "index".into(),
            name: "by_operator".into(),
        },
        ProblemKind::TableMissing {
            table: "safety_events",
        },
        ProblemKind::FieldDamaged {
            column: "inputs_json",
            detail: "expected a JSON object of role → SHA-256".into(),
        },
        ProblemKind::FieldDamaged {
            column: "playback_json",
            detail: "expected a JSON object".into(),
        },
    ] {
        assert!(kinds.contains(&&want), "{want:?} not in {kinds:#?}");
    }
    // The exposures chain was still walked, and the stray file is a notice.
    assert_eq!(report.n_exposures, 6);
    assert!(report.notices.contains(&Notice::UnexpectedFile {
        path: case.store.join("archive").join("notes.txt")
    }));
}

#[test]
fn archived_input_gone_or_replaced_by_a_directory_is_named() {
    let case = fresh();
    let archive = case.store.join("archive");
    let cal = archive.join(format!("{}.json", case.built.calibration_sha));
    std::fs::remove_file(&cal).unwrap();
    let report = verify_dir(&case.store, &VerifyOptions::default()).unwrap();
    assert_eq!(report.problems.len(), 1);
    assert_eq!(report.problems[0].record_id, Some(7));
    assert_eq!(
        report.problems[0].kind,
        ProblemKind::ArchivedInput {
            role: "calibration".into(),
            path: cal.clone(),
            problem: FileProblem::Missing,
        }
    );
    std::fs::create_dir(&cal).unwrap();
    let report = verify_dir(&case.store, &VerifyOptions::default()).unwrap();
    assert_eq!(
        report.problems[0].kind,
        ProblemKind::ArchivedInput {
            role: "calibration".into(),
            path: cal,
            problem: FileProblem::NotRegular("a directory"),
        }
    );
}

#[test]
fn checkpoint_canonical_bytes_are_the_documented_form() {
    // The statement of src/store/checkpoint.rs's module documentation, field by field.
    let heads = ChainHeads {
        records: ChainHead {
            count: 12,
            head_hash: "ab".repeat(32),
        },
        safety_events: ChainHead {
            count: 3,
            head_hash: "cd".repeat(32),
        },
        exposures: ChainHead::empty(),
    };
    let c = Checkpoint::sign(
        "0123456789abcdef0123456789abcdef",
        "2025-03-14T17:00:00.000Z",
        heads,
        &station_key(),
    );
    let expected = format!(
        "tragus-checkpoint-v1\nstore_id:32:0123456789abcdef0123456789abcdef\n\
         time_utc:24:2025-03-14T17:00:00.000Z\nstation:18:larkspur-line3-st1\n\
         records_count:2:12\nrecords_head:64:{}\nsafety_events_count:1:3\n\
         safety_events_head:64:{}\nexposures_count:1:0\nexposures_head:64:{}\n",
        "ab".repeat(32),
        "cd".repeat(32),
        "0".repeat(64)
    );
    assert_eq!(String::from_utf8(c.canonical_bytes()).unwrap(), expected);
    let keyring = keyring_of(&[(&station_key(), datetime!(2025-01-01 0:00 UTC), None)]);
    assert_eq!(c.check_signature(&keyring), Ok(()));
    // Any change to the statement breaks the signature.
    let mut changed = c.clone();
    changed.chains.records.count = 11;
    assert!(matches!(
        changed.check_signature(&keyring),
        Err(SignatureProblem::Mismatch { .. })
    ));
    // The file reads back as written.
    assert_eq!(
        Checkpoint::parse(&c.to_json()).unwrap(),
        Checkpoint {
            source: String::new(),
            ..c
        }
    );
}

#[test]
fn checkpoint_files_are_never_overwritten_and_bad_ones_are_explained() {
    let case = fresh();
    let cp = case.checkpoint("cp.json");
    let first = std::fs::read(&cp).unwrap();
    // `tragus checkpoint` refuses an existing file and leaves it as it was.
    let out = tragus()
        .arg("checkpoint")
        .arg("--store")
        .arg(&case.store)
        .arg("--out")
        .arg(&cp)
        .arg("--key")
        .arg(case.tmp.path().join("station.key"))
        .output()
        .unwrap();
    assert_exit(&out, 2);
    assert!(String::from_utf8_lossy(&out.stderr)
        .contains("already exists; a checkpoint is never overwritten"));
    assert_eq!(std::fs::read(&cp).unwrap(), first);

    let bad = case.tmp.path().join("bad.json");
    std::fs::write(
        &bad,
        "{\n  \"form\": \"tragus-checkpoint/1\",\n  \"store_id\": 5\n}\n",
    )
    .unwrap();
    let err = Checkpoint::load(&bad).unwrap_err().to_string();
    assert!(err.starts_with(&format!("{}:3:", bad.display())), "{err}");
    let text = std::fs::read_to_string(&cp)
        .unwrap()
        .replace("tragus-checkpoint/1", "tragus-checkpoint/9");
    std::fs::write(&bad, text).unwrap();
    assert_eq!(
        Checkpoint::load(&bad).unwrap_err().to_string(),
        format!(
            "{}: `form`: expected \"tragus-checkpoint/1\", found \"tragus-checkpoint/9\"",
            bad.display()
        )
    );
    // Given to verify, a bad file is bad input (exit 2); so is a checkpoint without keys.
    let keys = case.keyring.to_str().unwrap();
    let (code, text) = verify_cli(
        &case.store,
        &["--keys", keys, "--checkpoint", bad.to_str().unwrap()],
    );
    assert_eq!(code, 2, "{text}");
    assert!(text.contains("`form`: expected"), "{text}");
    let (code, text) = verify_cli(&case.store, &["--checkpoint", cp.to_str().unwrap()]);
    assert_eq!(code, 2, "{text}");
    assert!(text.contains("give the keyring with --keys"), "{text}");
}

#[test]
fn checkpoint_of_another_store_is_named() {
    let case = fresh();
    let other = fresh();
    let cp = other.checkpoint("other.json");
    let store_id = Store::open_read_only(&case.store)
        .unwrap()
        .store_id()
        .unwrap();
    let keyring = keyring_of(&[(&station_key(), datetime!(2025-01-01 0:00 UTC), None)]);
    let c = Checkpoint::load(&cp).unwrap();
    let report = verify_dir(
        &case.store,
        &VerifyOptions {
            keyring: Some(&keyring),
            checkpoints: vec![c.clone()],
        },
    )
    .unwrap();
    assert_eq!(
        report.problems[0].kind,
        ProblemKind::Checkpoint {
            source: cp.display().to_string(),
            problem: CheckpointProblem::OtherStore {
                checkpoint: c.store_id.clone(),
                store: Some(store_id),
            },
        }
    );
    assert!(!report.checkpoints[0].matched);
}

#[test]
fn store_migrate_is_explicit_and_reports_from_and_to() {
    let tmp = tempfile::tempdir().unwrap();
    schema_2_store(tmp.path());
    // Readers refuse to migrate.
    let out = tragus()
        .arg("records")
        .arg("--store")
        .arg(tmp.path())
        .output()
        .unwrap();
    assert_exit(&out, 2);
    assert!(String::from_utf8_lossy(&out.stderr).contains("run `tragus store migrate"));
    assert_eq!(user_version(tmp.path()), 2);
    let migrate = || {
        tragus()
            .args(["store", "migrate", "--store"])
            .arg(tmp.path())
            .output()
            .unwrap()
    };
    let out = migrate();
    assert_exit(&out, 0);
    assert!(String::from_utf8_lossy(&out.stdout).contains("migrated from schema 2 to schema 4"));
    assert_eq!(user_version(tmp.path()), 4);
    let out = migrate();
    assert_exit(&out, 0);
    assert!(String::from_utf8_lossy(&out.stdout).contains("schema 4 already"));
    let (code, text) = verify_cli(tmp.path(), &[]);
    assert_eq!(code, 0, "{text}");
    assert!(!text.contains("notice  schema"), "{text}");
    // A directory without a store is bad input, and nothing is created there.
    let empty = tmp.path().join("nothing");
    std::fs::create_dir(&empty).unwrap();
    let out = tragus()
        .args(["store", "migrate", "--store"])
        .arg(&empty)
        .output()
        .unwrap();
    assert_exit(&out, 2);
    assert_eq!(std::fs::read_dir(&empty).unwrap().count(), 0);
}

#[test]
fn keyring_file_problems_are_bad_input_with_their_position() {
    let case: Case = fresh();
    std::fs::write(
        &case.keyring,
        format!(
            "keyring: tragus-keyring/1\nkeys:\n  - key_id: {}\n    station: {STATION}\n    public_key: 12\n    valid_from: 2025-01-01T00:00:00Z\n",
            station_key().key_id()
        ),
    )
    .unwrap();
    let out = tragus()
        .arg("verify")
        .arg("--store")
        .arg(&case.store)
        .arg("--keys")
        .arg(&case.keyring)
        .output()
        .unwrap();
    assert_exit(&out, 2);
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains(&format!(
            "{}:5:17: keys[1].public_key: expected 64 lowercase hex digits",
            case.keyring.display()
        )),
        "{err}"
    );
    // A keyring naming only another station's key: every row is named.
    write_keyring(
        &case.keyring,
        &[(
            StationKey::from_secret("larkspur-line3-st2", &[7u8; 32]),
            "2025-01-01T00:00:00Z",
            None,
        )],
    );
    let (code, text) = case.verify(&[]);
    assert_eq!(code, 1);
    assert_eq!(text.matches("PROBLEM").count(), 26, "{text}");
}
