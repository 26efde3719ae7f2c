//! Store: the tamper matrix of issue 12. A signed store of 14 units (passes, fails, retests;
//! safety events, exposures, archived inputs) is attacked on a fresh copy per case by
//! someone with write access to the files but not the station's private key, and
//! `tragus verify --store DIR --keys KEYRING [--checkpoint FILE]` must exit 1 and name the
//! record or row concerned; the untouched store verifies (exit 0).
//!
//! The re-chained forgeries are made by `tests/reference/store_forge.py`, an independent
//! Python implementation of the documented hash forms (standard library: sqlite3, hashlib),
//! which recomputes every later hash so that the chain is consistent again.

use crate::support::{common, store_support};

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

use common::tragus;
use store_support::{capture, raw, record};
use tragus::keys::StationKey;
use tragus::store::{
    InputBundle, NewExposure, NewSafetyEvent, NewUnit, SafetyKind, Store, StoreError, StoredRecord,
    BUNDLE_FORM,
};
use tragus::Verdict;

/// The station of every row.
pub(crate) const STATION: &str = "larkspur-line3-st1";

/// The station's key (a fixed secret: tests must repeat).
pub(crate) fn station_key() -> StationKey {
    StationKey::from_secret(STATION, &[7u8; 32])
}

/// Another key, never in the keyring.
pub(crate) fn other_key() -> StationKey {
    StationKey::from_secret(STATION, &[9u8; 32])
}

/// Number of units in the matrix store.
const N_UNITS: u32 = 14;

/// A unit's verdict: fails at 3, 4, 8, 13; retests at 7 and 14; passes otherwise.
fn verdict_of(i: u32) -> Verdict {
    match i {
        3 | 4 | 8 | 13 => Verdict::Fail,
        7 | 14 => Verdict::Retest,
        _ => Verdict::Pass,
    }
}

/// An archived input bundle of `role` whose one file holds `text`.
fn bundle(role: &str, text: &str) -> Vec<u8> {
    InputBundle {
        canonical: BUNDLE_FORM.into(),
        files: [(format!("{role}.yaml"), text.to_string())].into(),
        main: format!("{role}.yaml"),
        options: Default::default(),
        role: role.into(),
    }
    .to_bytes()
}

/// What the matrix store holds.
pub(crate) struct Built {
    pub records: Vec<StoredRecord>,
    /// `(record id, safety event id)` of every event.
    pub events: Vec<(i64, i64)>,
    /// `(record id, exposure id)` of every exposure.
    pub exposures: Vec<(i64, i64)>,
    /// SHA-256 of the archived calibration input only unit 7 links to.
    pub calibration_sha: String,
}

/// Build the signed matrix store in `dir` with `Store::append_unit`.
pub(crate) fn build_store(dir: &Path) -> Built {
    let mut store = Store::open(dir).unwrap();
    store.set_signer(station_key());
    let plan = bundle("plan", "plan: demo-earbud\nrevision: 3\n");
    let station = bundle("station", "station: larkspur-line3-st1\n");
    let calibration = bundle("calibration", "calibration: line3 mic 1\n");
    let sha = |b: &[u8]| tragus::store::sha256_hex(b);
    let mut built = Built {
        records: Vec::new(),
        events: Vec::new(),
        exposures: Vec::new(),
        calibration_sha: sha(&calibration),
    };
    for i in 1..=N_UNITS {
        let mut rec = record(i);
        rec.verdict = verdict_of(i);
        rec.result_json = format!(
            r#"{{"serial":"{}","verdict":"{}"}}"#,
            rec.serial,
            rec.verdict.word().to_lowercase()
        );
        let mut inputs = format!(r#""plan":"{}","station":"{}""#, sha(&plan), sha(&station));
        if i == 7 {
            inputs = format!(r#"{inputs},"calibration":"{}""#, sha(&calibration));
        }
        rec.inputs_json = format!("{{{inputs}}}");
        let mut events = Vec::new();
        if i % 4 == 2 || i >= 12 {
            events.push(NewSafetyEvent {
                time_utc: rec.time_utc.clone(),
                station: STATION.into(),
                operator: rec.operator.clone(),
                serial: Some(rec.serial.clone()),
                plan_id: rec.plan_id.clone(),
                plan_sha256: Some(rec.plan_sha256.clone()),
                kind: if rec.verdict == Verdict::Retest {
                    SafetyKind::SweepAbandoned
                } else {
                    SafetyKind::SweepScaledDown
                },
                message: "the sweep was played 3 dB lower".into(),
                detail_json: r#"{"gain_db":-3.0}"#.into(),
                record_id: None,
            });
        }
        let mut exposures = Vec::new();
        if i % 3 == 0 || i >= 12 {
            exposures.push(NewExposure {
                operator: rec.operator.clone(),
                station: STATION.into(),
                start_unix_s: 1_741_942_800 + 60 * i64::from(i),
                level_dba: 78.5,
                duration_s: 12.0,
                serial: rec.serial.clone(),
                plan_id: rec.plan_id.clone(),
                record_id: None,
            });
        }
        let cap = capture(i);
        let archive = [plan.clone(), station.clone(), calibration.clone()];
        let unit = NewUnit {
            record: &rec,
            capture_wav: &cap,
            archive: if i == 7 { &archive } else { &archive[..2] },
            safety_events: &events,
            exposures: &exposures,
        };
        let appended = store.append_unit(&unit).unwrap();
        let id = appended.record.id;
        built
            .events
            .extend(appended.safety_events.iter().map(|e| (id, e.id)));
        built
            .exposures
            .extend(appended.exposures.iter().map(|x| (id, x.id)));
        built.records.push(appended.record);
    }
    built
}

/// Write the auditor's keyring holding the station's key, valid from 2025-01-01.
pub(crate) fn write_keyring(path: &Path, entries: &[(StationKey, &str, Option<&str>)]) {
    // The keyring file form of `tragus keys new` (src/keys/keyring.rs).
    let mut text = String::from("keyring: tragus-keyring/1\nkeys:\n");
    for (key, from, until) in entries {
        text.push_str(&format!(
            "  - key_id: {}\n    station: {}\n    public_key: {}\n    valid_from: {from}\n",
            key.key_id(),
            key.station(),
            hex::encode(key.public_key())
        ));
        if let Some(until) = until {
            text.push_str(&format!("    valid_until: {until}\n"));
        }
    }
    std::fs::write(path, text).unwrap();
}

/// Write a station key file for `tragus checkpoint --key`.
pub(crate) fn write_station_key(path: &Path, secret: &[u8; 32]) {
    // The key file form of `tragus keys new`, created 0600 like the real one.
    StationKey::from_secret(STATION, secret)
        .write_new(path)
        .unwrap();
}

/// A fresh matrix store: its directory (inside the returned temp dir), its keyring, and
/// what it holds.
pub(crate) struct Case {
    pub tmp: tempfile::TempDir,
    pub store: PathBuf,
    pub keyring: PathBuf,
    pub built: Built,
}

pub(crate) fn fresh() -> Case {
    let tmp = tempfile::tempdir().unwrap();
    let store = tmp.path().join("store");
    let built = build_store(&store);
    let keyring = tmp.path().join("keyring.yaml");
    write_keyring(&keyring, &[(station_key(), "2025-01-01T00:00:00Z", None)]);
    Case {
        tmp,
        store,
        keyring,
        built,
    }
}

/// Run `cmd` to its end, killing it if it has not ended after a minute (a hang is a failure
/// of its own, never a wait for ever).
pub(crate) fn run_bounded(mut cmd: Command) -> Output {
    let mut child = cmd
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let start = Instant::now();
    while child.try_wait().unwrap().is_none() {
        if start.elapsed() > Duration::from_secs(60) {
            let _ = child.kill();
            panic!("`{cmd:?}` did not finish: it hangs");
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    child.wait_with_output().unwrap()
}

impl Case {
    /// `tragus verify --store DIR --keys KEYRING` with `extra` arguments; (exit code, stdout).
    pub(crate) fn verify(&self, extra: &[&str]) -> (i32, String) {
        let mut cmd = tragus();
        cmd.arg("verify")
            .arg("--store")
            .arg(&self.store)
            .arg("--keys")
            .arg(&self.keyring)
            .args(extra);
        let out = run_bounded(cmd);
        let text = String::from_utf8_lossy(&out.stdout).into_owned();
        let code = out.status.code().expect("verify ended by a signal");
        assert!(
            code == 0 || code == 1,
            "exit {code}: {}{text}",
            String::from_utf8_lossy(&out.stderr)
        );
        (code, text)
    }

    /// Verify, expecting exit 1 and every one of `lines` (starts of PROBLEM lines).
    fn caught(&self, extra: &[&str], lines: &[&str]) -> String {
        let (code, text) = self.verify(extra);
        assert_eq!(code, 1, "{text}");
        for line in lines {
            assert!(
                text.lines().any(|l| l.starts_with(line)),
                "no line starting {line:?} in:\n{text}"
            );
        }
        assert!(text.contains("NOT INTACT"), "{text}");
        text
    }

    /// Run `sql` as an attacker: the triggers of `tables` saved, dropped, and put back.
    pub(crate) fn attack(&self, tables: &[&str], sql: &str) {
        let conn = raw(&self.store);
        let mut saved: Vec<(String, String)> = Vec::new();
        for table in tables {
            let mut stmt = conn
                .prepare(
                    "SELECT name, sql FROM sqlite_schema WHERE type = 'trigger' AND tbl_name = ?1",
                )
                .unwrap();
            let rows = stmt
                .query_map([table], |r| Ok((r.get(0)?, r.get(1)?)))
                .unwrap();
            saved.extend(rows.map(Result::unwrap));
        }
        for (name, _) in &saved {
            conn.execute_batch(&format!("DROP TRIGGER {name}")).unwrap();
        }
        conn.execute_batch(sql).unwrap();
        for (_, sql) in &saved {
            conn.execute_batch(sql).unwrap();
        }
    }

    /// Run the Python forger on the store's database.
    pub(crate) fn forge(&self, args: &[&str]) -> String {
        let out = Command::new(python())
            .arg(common::root().join("tests/reference/store_forge.py"))
            .arg(self.store.join(tragus::store::DB_FILE))
            .args(args)
            .output()
            .expect("run python3 (tests/reference/store_forge.py)");
        assert!(
            out.status.success(),
            "store_forge.py {args:?}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8(out.stdout).unwrap()
    }

    fn capture_path(&self, record: usize) -> PathBuf {
        self.store.join("captures").join(format!(
            "{}.wav",
            self.built.records[record - 1].capture_sha256
        ))
    }

    /// `tragus checkpoint` signed with the station key; returns the file.
    pub(crate) fn checkpoint(&self, name: &str) -> PathBuf {
        let key_file = self.tmp.path().join("station.key");
        if !key_file.exists() {
            write_station_key(&key_file, &[7u8; 32]);
        }
        let out_file = self.tmp.path().join(name);
        let out = tragus()
            .arg("checkpoint")
            .arg("--store")
            .arg(&self.store)
            .arg("--out")
            .arg(&out_file)
            .arg("--key")
            .arg(&key_file)
            .output()
            .unwrap();
        common::assert_exit(&out, 0);
        out_file
    }
}

/// The interpreter of the reference tools: `./tests/run`'s virtual environment when it is
/// there, else `python3` (the forger needs only the standard library).
pub(crate) fn python() -> PathBuf {
    let venv = common::root().join("target/reference-venv/bin/python");
    if venv.exists() {
        venv
    } else {
        PathBuf::from("python3")
    }
}

#[test]
fn untouched_store_verifies_with_keys_and_checkpoint() {
    let case = fresh();
    assert_eq!(case.built.records.len(), 14);
    let cp = case.checkpoint("cp.json");
    let (code, text) = case.verify(&["--checkpoint", cp.to_str().unwrap()]);
    assert_eq!(code, 0, "{text}");
    assert!(
        text.starts_with("14 record(s), 14 capture file(s) rehashed"),
        "{text}"
    );
    assert!(
        text.contains(
            "signatures: records 14/14 signed, safety events 6/6, exposures 6/6; checked against"
        ),
        "{text}"
    );
    assert!(
        text.contains(": 14 record(s), 6 safety event(s), 6 exposure(s): matches"),
        "{text}"
    );
    assert!(text.contains("INTACT: "), "{text}");
    // The independent implementation agrees with every stored hash and link.
    let check: serde_json::Value = serde_json::from_str(&case.forge(&["check"])).unwrap();
    assert_eq!(check["ok"], true, "{check}");
    assert_eq!(
        check["records"]["head_hash"],
        case.built.records[13].record_hash.as_str()
    );
}

#[test]
fn field_edit_fail_to_pass_is_named() {
    let case = fresh();
    case.attack(
        &["records"],
        "UPDATE records SET verdict = 'pass' WHERE id = 4",
    );
    case.caught(
        &[],
        &["PROBLEM record 4: record hash does not match its fields"],
    );
}

#[test]
fn middle_delete_is_named() {
    let case = fresh();
    case.attack(&["records"], "DELETE FROM records WHERE id = 7");
    case.caught(
        &[],
        &[
            "PROBLEM record 8: record 7 is missing (deleted)",
            "PROBLEM record 8: chain broken",
        ],
    );
}

#[test]
fn swapped_records_are_named() {
    let case = fresh();
    case.attack(
        &["records"],
        "UPDATE records SET id = -5 WHERE id = 5; UPDATE records SET id = 5 WHERE id = 6;
         UPDATE records SET id = 6 WHERE id = -5;",
    );
    case.caught(
        &[],
        &[
            "PROBLEM record 5: chain broken",
            "PROBLEM record 5: record hash does not match its fields",
            "PROBLEM record 6: record hash does not match its fields",
        ],
    );
}

#[test]
fn rechained_forgery_is_caught_by_the_signatures_only() {
    let case = fresh();
    case.forge(&["set-verdict", "4", "pass"]);
    // The Python implementation made every hash and link consistent again.
    let check: serde_json::Value = serde_json::from_str(&case.forge(&["check"])).unwrap();
    assert_eq!(check["ok"], true, "{check}");
    let key = station_key();
    let text = case.caught(
        &[],
        &[&format!(
            "PROBLEM record 4: signature: the signature does not verify with key {}",
            key.key_id()
        )],
    );
    // Nothing else could tell: no hash or link problem, and records before 4 are fine.
    assert!(!text.contains("record hash does not match"), "{text}");
    assert!(!text.contains("chain broken"), "{text}");
    assert!(!text.contains("PROBLEM record 3:"), "{text}");
    // Every re-chained record after it is named too.
    for id in 5..=14 {
        assert!(
            text.contains(&format!("PROBLEM record {id}: signature:")),
            "{text}"
        );
    }
    // Without the keyring the forgery passes the chain check: signatures are the defence.
    let out = tragus()
        .arg("verify")
        .arg("--store")
        .arg(&case.store)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("26 signed row(s): signatures not checked")
    );
}

#[test]
fn rechained_forgery_with_a_copied_signature_is_caught() {
    let case = fresh();
    case.forge(&["set-verdict", "4", "pass"]);
    case.forge(&["copy-signature", "5", "4"]);
    case.caught(
        &[],
        &["PROBLEM record 4: signature: the signature does not verify with key"],
    );
}

#[test]
fn truncation_after_a_checkpoint_is_caught_by_the_checkpoint_only() {
    let case = fresh();
    let cp = case.checkpoint("shift-1.json");
    case.forge(&["truncate", "3"]);
    // A consistent truncation: every chain still verifies on its own.
    let (code, text) = case.verify(&[]);
    assert_eq!(code, 0, "{text}");
    assert!(text.starts_with("11 record(s)"), "{text}");
    let cp_text = cp.to_str().unwrap();
    let text = case.caught(
        &["--checkpoint", cp_text],
        &[&format!(
            "PROBLEM record 12: checkpoint {cp_text}: it counts 14 records rows, the store holds 11 of them: 3 removed since the checkpoint, the first is records row 12"
        )],
    );
    // The safety rows of records 12 to 14 went with them (events 4 to 6, exposures 4 to 6).
    assert!(
        text.contains("it counts 6 safety_events rows, the store holds 3 of them"),
        "{text}"
    );
    assert!(
        text.contains("it counts 6 exposures rows, the store holds 3 of them"),
        "{text}"
    );
    assert!(text.contains("DOES NOT MATCH"), "{text}");
}

#[test]
fn rechained_forgery_before_a_checkpoint_is_caught_by_the_checkpoint() {
    let case = fresh();
    let cp = case.checkpoint("shift-1.json");
    case.forge(&["set-verdict", "4", "pass"]);
    let cp_text = cp.to_str().unwrap();
    case.caught(
        &["--checkpoint", cp_text],
        &[&format!(
            "PROBLEM record 14: checkpoint {cp_text}: records row 14 hashes to {}, the \
             checkpoint's head is {}: a row up to 14 was changed, removed or reordered since \
             the checkpoint",
            // The forger's head: what the Python implementation re-chained to.
            serde_json::from_str::<serde_json::Value>(&case.forge(&["check"])).unwrap()["records"]
                ["head_hash"]
                .as_str()
                .unwrap(),
            case.built.records[13].record_hash
        )],
    );
}

#[test]
fn edit_before_a_checkpoint_without_rechain_is_named_by_the_checkpoint_too() {
    let case = fresh();
    let cp = case.checkpoint("shift-1.json");
    case.attack(
        &["records"],
        "UPDATE records SET verdict = 'pass' WHERE id = 4",
    );
    let cp_text = cp.to_str().unwrap();
    case.caught(
        &["--checkpoint", cp_text],
        &[
            "PROBLEM record 4: record hash does not match its fields",
            &format!(
                "PROBLEM record 4: checkpoint {cp_text}: the records chain up to row 14 does \
                 not verify (first problem at row 4)"
            ),
        ],
    );
}

#[test]
fn last_record_deleted_under_its_safety_event_is_named() {
    let case = fresh();
    let (_, event) = *case.built.events.iter().find(|(r, _)| *r == 14).unwrap();
    let (_, exposure) = *case.built.exposures.iter().find(|(r, _)| *r == 14).unwrap();
    case.attack(&["records"], "DELETE FROM records WHERE id = 14");
    case.caught(
        &[],
        &[
            &format!(
                "PROBLEM safety_events row {event}: belongs to record 14, which the store does not hold (removed)"
            ),
            &format!("PROBLEM exposures row {exposure}: belongs to record 14"),
        ],
    );
}

#[test]
fn planted_ignore_trigger_is_named_and_stops_appends() {
    let case = fresh();
    raw(&case.store)
        .execute_batch(
            "CREATE TRIGGER drop_fails BEFORE INSERT ON records WHEN NEW.verdict = 'fail'
             BEGIN SELECT RAISE(IGNORE); END;",
        )
        .unwrap();
    case.caught(
        &[],
        &["PROBLEM store: foreign schema object: trigger `drop_fails` is not the store's own"],
    );
    // The append refuses to write into it, and writes nothing.
    let mut store = Store::open(&case.store).unwrap();
    store.set_signer(station_key());
    let mut rec = record(15);
    rec.verdict = Verdict::Fail;
    let err = store.append(&rec, &capture(15)).unwrap_err();
    assert!(
        matches!(&err, StoreError::ForeignObjects { objects, .. } if objects == "trigger drop_fails"),
        "{err}"
    );
    drop(store);
    let n: i64 = raw(&case.store)
        .query_row("SELECT COUNT(*) FROM records", [], |r| r.get(0))
        .unwrap();
    assert_eq!(n, 14);
}

#[test]
fn extra_table_is_named() {
    let case = fresh();
    raw(&case.store)
        .execute_batch("CREATE TABLE shadow_records (id INTEGER, verdict TEXT);")
        .unwrap();
    case.caught(
        &[],
        &["PROBLEM store: foreign schema object: table `shadow_records`"],
    );
}

#[test]
fn extra_view_is_named() {
    let case = fresh();
    raw(&case.store)
        .execute_batch("CREATE VIEW passes AS SELECT * FROM records WHERE verdict = 'pass';")
        .unwrap();
    case.caught(
        &[],
        &["PROBLEM store: foreign schema object: view `passes`"],
    );
}

#[test]
fn dropped_append_only_trigger_is_named() {
    let case = fresh();
    raw(&case.store)
        .execute_batch("DROP TRIGGER records_no_delete;")
        .unwrap();
    case.caught(
        &[],
        &["PROBLEM store: append-only trigger `records_no_delete` is missing (dropped)"],
    );
}

#[test]
fn edited_capture_is_named() {
    let case = fresh();
    let path = case.capture_path(3);
    let mut bytes = std::fs::read(&path).unwrap();
    bytes[60] ^= 0x01;
    std::fs::write(&path, &bytes).unwrap();
    case.caught(
        &[],
        &[&format!(
            "PROBLEM record 3: capture file altered: {} now hashes to {}",
            path.display(),
            tragus::store::sha256_hex(&bytes)
        )],
    );
}

#[test]
fn capture_replaced_by_a_good_units_capture_is_named() {
    let case = fresh();
    // Unit 4 failed; the attacker puts unit 5's (a pass) bytes in its place.
    let good = std::fs::read(case.capture_path(5)).unwrap();
    std::fs::write(case.capture_path(4), &good).unwrap();
    case.caught(
        &[],
        &[&format!(
            "PROBLEM record 4: capture file altered: {} now hashes to {}",
            case.capture_path(4).display(),
            case.built.records[4].capture_sha256
        )],
    );
}

#[cfg(unix)]
#[test]
fn capture_replaced_by_a_fifo_is_named_without_hanging() {
    let case = fresh();
    let path = case.capture_path(5);
    std::fs::remove_file(&path).unwrap();
    let c = std::ffi::CString::new(path.to_str().unwrap()).unwrap();
    // SAFETY: a valid NUL-terminated path; mkfifo only creates a file.
    assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o644) }, 0);
    // `run_bounded` fails the test if verify does not finish.
    case.caught(
        &[],
        &[&format!(
            "PROBLEM record 5: capture file {}: not a regular file but a FIFO; not read",
            path.display()
        )],
    );
}

#[cfg(unix)]
#[test]
fn capture_replaced_by_a_link_to_dev_zero_is_named() {
    let case = fresh();
    let path = case.capture_path(6);
    std::fs::remove_file(&path).unwrap();
    std::os::unix::fs::symlink("/dev/zero", &path).unwrap();
    case.caught(
        &[],
        &[&format!(
            "PROBLEM record 6: capture file {}: not a regular file but a symbolic link; not read",
            path.display()
        )],
    );
}

#[test]
fn directory_in_a_captures_place_is_named_and_later_problems_still_reported() {
    let case = fresh();
    let path = case.capture_path(2);
    std::fs::remove_file(&path).unwrap();
    std::fs::create_dir(&path).unwrap();
    // A later problem, to show verification went on.
    std::fs::remove_file(case.capture_path(11)).unwrap();
    case.attack(
        &["records"],
        "UPDATE records SET operator = 'm.nowak' WHERE id = 12",
    );
    case.caught(
        &[],
        &[
            &format!(
                "PROBLEM record 2: capture file {}: not a regular file but a directory; not read",
                path.display()
            ),
            &format!(
                "PROBLEM record 11: capture file missing: {}",
                case.capture_path(11).display()
            ),
            "PROBLEM record 12: record hash does not match its fields",
        ],
    );
}

#[test]
fn signature_by_a_key_outside_the_keyring_is_named() {
    let case = fresh();
    let other = other_key();
    let hash = &case.built.records[3].record_hash;
    let sig = hex::encode(other.sign_hash("records", hash));
    case.attack(
        &["records"],
        &format!(
            "UPDATE records SET key_id = '{}', signature = X'{sig}' WHERE id = 4",
            other.key_id()
        ),
    );
    case.caught(
        &[],
        &[&format!(
            "PROBLEM record 4: signature: signed by key {}, which is not in the keyring",
            other.key_id()
        )],
    );
}

#[test]
fn signature_by_another_key_under_the_stations_key_id_is_named() {
    let case = fresh();
    let other = other_key();
    let hash = &case.built.records[3].record_hash;
    let sig = hex::encode(other.sign_hash("records", hash));
    case.attack(
        &["records"],
        &format!("UPDATE records SET signature = X'{sig}' WHERE id = 4"),
    );
    case.caught(
        &[],
        &[&format!(
            "PROBLEM record 4: signature: the signature does not verify with key {}",
            station_key().key_id()
        )],
    );
}

#[test]
fn edited_archived_input_is_named() {
    let case = fresh();
    let path = case
        .store
        .join("archive")
        .join(format!("{}.json", case.built.calibration_sha));
    let text = std::fs::read_to_string(&path)
        .unwrap()
        .replace("mic 1", "mic 2");
    std::fs::write(&path, &text).unwrap();
    let out = case.caught(
        &[],
        &[&format!(
            "PROBLEM record 7: archived calibration input {}: altered: now hashes to {}",
            path.display(),
            tragus::store::sha256_hex(text.as_bytes())
        )],
    );
    // Only unit 7 links to it.
    assert_eq!(out.matches("PROBLEM").count(), 1, "{out}");
}

#[test]
fn checkpoint_signed_by_a_key_outside_the_keyring_does_not_count() {
    let case = fresh();
    let store = Store::open_read_only(&case.store).unwrap();
    let forged = store.checkpoint(&other_key()).unwrap();
    drop(store);
    let file = case.tmp.path().join("forged.json");
    forged.write(&file).unwrap();
    let f = file.to_str().unwrap();
    case.caught(
        &["--checkpoint", f],
        &[&format!(
            "PROBLEM store: checkpoint {f}: its signature does not count: signed by key {}, which is not in the keyring",
            other_key().key_id()
        )],
    );
}
