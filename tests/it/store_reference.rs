//! Store: the hash chain matches an independent implementation of the documented canonical
//! byte form, `tests/reference/store_record_hash.py` (Python standard library `hashlib`),
//! whose output is committed as `tests/reference/store_record_hash.json`.

use tragus::store::{NewRecord, RecordFilter, Store, GENESIS_PREV_HASH};
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

#[test]
fn chain_matches_python_reference() {
    let reference = reference();
    let records = reference["records"].as_array().unwrap();
    assert_eq!(records.len(), 2);
    let tmp = tempfile::tempdir().unwrap();
    let mut store = Store::open(tmp.path()).unwrap();
    for r in records {
        let verdict = match s(r, "verdict").as_str() {
            "pass" => Verdict::Pass,
            "fail" => Verdict::Fail,
            other => panic!("verdict {other}"),
        };
        let new = NewRecord {
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
        };
        let capture = hex::decode(s(r, "capture_hex")).unwrap();
        let stored = store.append(&new, &capture).unwrap();
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
}

#[test]
fn module_doc_example_is_the_reference_first_record() {
    // The worked example in src/store/mod.rs must stay the reference's first record.
    let reference = reference();
    let first = &reference["records"][0];
    let doc = include_str!("../../src/store/mod.rs");
    assert!(doc.contains(&s(first, "record_hash")));
    for line in s(first, "canonical").lines() {
        assert!(doc.contains(&format!("//! {line}\n")), "doc lacks {line:?}");
    }
}
