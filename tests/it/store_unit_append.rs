//! Store: a unit (record, safety events, exposures) is appended in one proven transaction,
//! and every row is signed with the station key.
//!
//! Signatures are checked with the keyring code and, independently, against the RFC 8032
//! Ed25519 verification in `ed25519-dalek` directly (the keys tests check tragus's signing
//! against the RFC's own test vectors and Python's `cryptography`).

use crate::support::store_support::{capture, raw, record};
use ed25519_dalek::{Signature, Verifier, VerifyingKey};
use tragus::keys::{signature_message, StationKey};
use tragus::safety::event::SafetyKind;
use tragus::store::{NewExposure, NewSafetyEvent, NewUnit, Store, StoreError};

const STATION: &str = "larkspur-line3-st1";

fn key() -> StationKey {
    StationKey::from_secret(STATION, &[7u8; 32])
}

fn event(kind: SafetyKind) -> NewSafetyEvent {
    NewSafetyEvent {
        time_utc: "2025-03-14T09:01:00.250Z".into(),
        station: STATION.into(),
        operator: "j.okafor".into(),
        serial: Some("E2-000101".into()),
        plan_id: "demo-earbud".into(),
        plan_sha256: Some("5d".repeat(32)),
        kind,
        message: "the sweep was scaled down by 6.5 dB".into(),
        detail_json: "{}".into(),
        // Whatever the caller says, the store links the row to the record it appends.
        record_id: Some(999),
    }
}

fn exposure() -> NewExposure {
    NewExposure {
        operator: "j.okafor".into(),
        station: STATION.into(),
        start_unix_s: 1_741_942_860,
        level_dba: 74.5,
        duration_s: 3.0,
        serial: "E2-000101".into(),
        plan_id: "demo-earbud".into(),
        record_id: None,
    }
}

#[test]
fn record_events_and_exposures_go_in_together_linked_and_signed() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    store.set_signer(key());
    store.append(&record(0), &capture(0)).unwrap();
    let events = [
        event(SafetyKind::SweepScaledDown),
        event(SafetyKind::DoseWarning),
    ];
    let unit = store
        .append_unit(&NewUnit {
            record: &record(1),
            capture_wav: &capture(1),
            archive: &[],
            safety_events: &events,
            exposures: &[exposure()],
        })
        .unwrap();
    assert_eq!(unit.record.id, 2);
    assert_eq!(unit.safety_events.len(), 2);
    assert!(unit.safety_events.iter().all(|e| e.record_id == Some(2)));
    assert_eq!(unit.exposures[0].record_id, Some(2));

    // Every row carries the key id and a signature over its own table's message form.
    let vk = VerifyingKey::from_bytes(&key().public_key()).unwrap();
    let conn = raw(tmp.path());
    for (table, hash_col, n) in [
        ("records", "record_hash", 2),
        ("safety_events", "row_hash", 2),
        ("exposures", "row_hash", 1),
    ] {
        let mut stmt = conn
            .prepare(&format!(
                "SELECT {hash_col}, key_id, signature FROM {table}"
            ))
            .unwrap();
        let rows: Vec<(String, String, Vec<u8>)> = stmt
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
            .unwrap()
            .map(Result::unwrap)
            .collect();
        assert_eq!(rows.len(), n, "{table}");
        for (hash, key_id, sig) in rows {
            assert_eq!(key_id, key().key_id());
            let sig = Signature::from_bytes(&sig.try_into().unwrap());
            vk.verify(&signature_message(table, &hash), &sig).unwrap();
            // A signature does not carry over to another table's message.
            assert!(vk
                .verify(&signature_message("checkpoint", &hash), &sig)
                .is_err());
        }
    }
    assert!(store.verify().unwrap().is_intact());
}

#[test]
fn a_bad_safety_row_leaves_no_record_either() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    let mut bad = event(SafetyKind::SweepScaledDown);
    bad.operator = String::new();
    let err = store
        .append_unit(&NewUnit {
            record: &record(1),
            capture_wav: &capture(1),
            archive: &[],
            safety_events: &[bad],
            exposures: &[],
        })
        .unwrap_err();
    assert!(
        matches!(
            err,
            StoreError::InvalidRecord {
                field: "operator",
                ..
            }
        ),
        "{err}"
    );
    let n: i64 = raw(tmp.path())
        .query_row("SELECT COUNT(*) FROM records", [], |r| r.get(0))
        .unwrap();
    assert_eq!(n, 0);
}

#[test]
fn a_planted_trigger_stops_the_append_before_anything_is_written() {
    // An insider adds a trigger that silently drops every later FAIL record. The append
    // refuses to write into a store with schema objects that are not its own.
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    store.append(&record(1), &capture(1)).unwrap();
    raw(tmp.path())
        .execute_batch(
            "CREATE TRIGGER keep_it_quiet BEFORE INSERT ON records WHEN NEW.verdict = 'fail'
             BEGIN SELECT RAISE(IGNORE); END;",
        )
        .unwrap();
    // record(3) is a FAIL (every third unit).
    let err = store.append(&record(3), &capture(3)).unwrap_err();
    assert!(
        matches!(&err, StoreError::ForeignObjects { objects, .. } if objects == "trigger keep_it_quiet"),
        "{err}"
    );
    let n: i64 = raw(tmp.path())
        .query_row("SELECT COUNT(*) FROM records", [], |r| r.get(0))
        .unwrap();
    assert_eq!(n, 1);
}

#[test]
fn an_archived_input_must_be_given_or_already_there() {
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    let mut rec = record(1);
    rec.inputs_json = format!(r#"{{"plan":"{}"}}"#, "ab".repeat(32));
    let err = store.append(&rec, &capture(1)).unwrap_err();
    assert!(err.to_string().contains("inputs_json"), "{err}");
    rec.inputs_json = r#"{"plan":"not a hash"}"#.into();
    let err = store.append(&rec, &capture(1)).unwrap_err();
    assert!(err.to_string().contains("inputs_json"), "{err}");
}
