//! Store: the hash chain matches an independent implementation of the documented canonical
//! byte form, `tests/reference/store_record_hash.py` (Python standard library `hashlib`),
//! whose output is committed as `tests/reference/store_record_hash.json`.

use tragus::store::{NewRecord, NewUnit, RecordFilter, Store, StoredRecord, GENESIS_PREV_HASH};
use tragus::Verdict;

fn reference() -> serde_json::Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/store_record_hash.json"
    );
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn s(v: &serde_json::Value, key: &str) -> String {
    v[key]
        .as_str()
        .unwrap_or_else(|| panic!("{key} missing"))
        .to_owned()
}

/// The record the reference describes, as a caller hands it to the store (v3 fields from
/// the reference when present).
pub(crate) fn new_record(r: &serde_json::Value) -> NewRecord {
    let verdict = match s(r, "verdict").as_str() {
        "pass" => Verdict::Pass,
        "fail" => Verdict::Fail,
        other => panic!("verdict {other}"),
    };
    NewRecord {
        time_utc: s(r, "time_utc"),
        serial: s(r, "serial"),
        plan_id: s(r, "plan_id"),
        plan_revision: r["plan_revision"].as_u64().unwrap() as u32,
        plan_sha256: s(r, "plan_sha256"),
        software_version: s(r, "software_version"),
        station: s(r, "station"),
        operator: s(r, "operator"),
        rig: s(r, "rig"),
        verdict,
        result_json: s(r, "result_json"),
        calibration_mode: s(r, "calibration_mode"),
        calibration_sha256: r["calibration_sha256"].as_str().map(str::to_owned),
        build: s(r, "build"),
        inputs_json: s(r, "inputs_json"),
        playback_json: s(r, "playback_json"),
    }
}

#[test]
fn chain_matches_python_reference() {
    let reference = reference();
    let records = reference["records"].as_array().unwrap();
    assert_eq!(records.len(), 2);
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    for r in records {
        let new = new_record(r);
        let capture = hex::decode(s(r, "capture_hex")).unwrap();
        let archive: Vec<Vec<u8>> = r["archive_hex"]
            .as_array()
            .map(|a| {
                a.iter()
                    .map(|h| hex::decode(h.as_str().unwrap()).unwrap())
                    .collect()
            })
            .unwrap_or_default();
        let stored = store
            .append_unit(&NewUnit {
                record: &new,
                capture_wav: &capture,
                archive: &archive,
                safety_events: &[],
                exposures: &[],
            })
            .unwrap()
            .record;
        // Exact equality: hashes are digests, there is no tolerance.
        assert_eq!(stored.id, r["id"].as_i64().unwrap());
        assert_eq!(stored.capture_sha256, s(r, "capture_sha256"));
        assert_eq!(stored.prev_hash, s(r, "prev_hash"));
        assert_eq!(stored.canonical_bytes(), s(r, "canonical").into_bytes());
        assert_eq!(stored.record_hash, s(r, "record_hash"));
    }
    assert_eq!(s(&records[0], "prev_hash"), GENESIS_PREV_HASH);

    // Read back from the database, the same values come out.
    let listed = store.list(&RecordFilter::default()).unwrap();
    for (stored, r) in listed.iter().zip(records) {
        assert_eq!(stored.record_hash, s(r, "record_hash"));
        assert_eq!(stored.computed_hash(), s(r, "record_hash"));
    }
    assert!(store.verify().unwrap().is_intact());

    // The archived plan bundle Python wrote (its compact sorted JSON) is the store's
    // canonical form byte for byte, and reads back under its name.
    let sha = s(&records[1], "plan_bundle_sha256");
    let bundle = store.read_archived(&sha).unwrap();
    let bytes = hex::decode(records[1]["archive_hex"][0].as_str().unwrap()).unwrap();
    assert_eq!(bundle.to_bytes(), bytes);
    assert_eq!(bundle.sha256(), sha);
    assert_eq!(bundle.main, "plans/demo.yaml");
}

#[test]
fn v2_and_v1_forms_match_python_reference() {
    // Records written before schema 4 keep the form they were hashed with.
    let reference = reference();
    for (key, n) in [("records_v2", 2), ("records_v1", 2)] {
        let records = reference[key].as_array().unwrap();
        assert_eq!(records.len(), n);
        for r in records {
            let v2 = key == "records_v2";
            let rec = StoredRecord {
                id: r["id"].as_i64().unwrap(),
                time_utc: s(r, "time_utc"),
                serial: s(r, "serial"),
                plan_id: s(r, "plan_id"),
                plan_revision: r["plan_revision"].as_u64().unwrap() as u32,
                plan_sha256: s(r, "plan_sha256"),
                software_version: s(r, "software_version"),
                station: s(r, "station"),
                operator: s(r, "operator"),
                rig: s(r, "rig"),
                verdict: if s(r, "verdict") == "pass" {
                    Verdict::Pass
                } else {
                    Verdict::Fail
                },
                result_json: s(r, "result_json"),
                calibration_mode: v2.then(|| s(r, "calibration_mode")),
                calibration_sha256: r["calibration_sha256"].as_str().map(str::to_owned),
                capture_sha256: s(r, "capture_sha256"),
                prev_hash: s(r, "prev_hash"),
                record_hash: String::new(),
                build: None,
                inputs_json: None,
                playback_json: None,
                key_id: None,
                signature: None,
            };
            assert_eq!(rec.canonical_bytes(), s(r, "canonical").into_bytes());
            assert_eq!(rec.computed_hash(), s(r, "record_hash"));
        }
    }
}

#[test]
fn module_doc_example_is_the_reference_first_record() {
    // The worked example in src/store/mod.rs must stay the reference's first record.
    let reference = reference();
    let doc = include_str!("../../src/store/mod.rs");
    for first in [&reference["records_v2"][0], &reference["records"][0]] {
        assert!(doc.contains(&s(first, "record_hash")));
        for line in s(first, "canonical").lines() {
            assert!(doc.contains(&format!("//! {line}\n")), "doc lacks {line:?}");
        }
    }
}
