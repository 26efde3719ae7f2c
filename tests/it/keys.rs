//! Station keys (issue 12): Ed25519 against RFC 8032's own vectors, every way the keyring
//! refuses a signature, and bad key and keyring files reported at their `path:line:col`.
//! `tragus keys` end to end and the outside-library check: keys_cli.rs.

use std::path::Path;
use time::macros::datetime;
use time::OffsetDateTime;
use tragus::keys::{
    key_id_of, signature_message, KeyError, Keyring, KeyringEntry, SignatureProblem, StationKey,
};

pub(crate) const STATION: &str = "larkspur-line3-st1";

/// RFC 8032 section 7.1 (Test Vectors for Ed25519), TEST 1, TEST 2 and TEST 3:
/// (SECRET KEY, PUBLIC KEY, MESSAGE, SIGNATURE), hex as printed there.
const RFC8032_7_1: [(&str, &str, &str, &str); 3] = [
    (
        "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60",
        "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a",
        "",
        "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bac\
         c61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b",
    ),
    (
        "4ccd089b28ff96da9db6c346ec114e0f5b8a319f35aba624da8cf6ed4fb8a6fb",
        "3d4017c3e843895a92b70aa74d1b7ebc9c982ccf2ec4968cc0cd55f12af4660c",
        "72",
        "92a009a9f0d4cab8720e820b5f642540a2b27b5416503f8fb3762223ebdb69da085ac1e43e15996e\
         458f3613d0f11d8c387b2eaeb4302aeeb00d291612bb0c00",
    ),
    (
        "c5aa8df43f9f837bedb7442f31dcb7b166d38535076f094b85ce3a2e0b4458f7",
        "fc51cd8e6218a1a38da47ed00230f0580816ed13ba3303ac5deb911548908025",
        "af82",
        "6291d657deec24024827e69c3abe01a30ce548a284743a445e3680d7db5ac3ac18ff9b538d16f290\
         ae67f760984dc6594a7c15e9716ed28dc027beceea1ec40a",
    ),
];

pub(crate) fn rfc_key(i: usize) -> StationKey {
    let secret: [u8; 32] = hex::decode(RFC8032_7_1[i].0).unwrap().try_into().unwrap();
    StationKey::from_secret(STATION, &secret)
}

fn ring_of(entries: Vec<KeyringEntry>) -> Keyring {
    Keyring { entries }
}

#[test]
fn rfc8032_section_7_1_test_1_to_3_sign_and_check() {
    for (i, (_, public, message, signature)) in RFC8032_7_1.iter().enumerate() {
        let key = rfc_key(i);
        let message = hex::decode(message).unwrap();
        // Source: RFC 8032 section 7.1, TEST i+1: the public key and the signature.
        assert_eq!(hex::encode(key.public_key()), *public, "TEST {}", i + 1);
        let sig = key.sign(&message);
        assert_eq!(hex::encode(sig), *signature, "TEST {}", i + 1);
        let from = datetime!(2026-12-05 00:00:00 UTC);
        let ring = ring_of(vec![KeyringEntry::for_key(&key, from, None)]);
        assert_eq!(
            ring.check(Some(key.key_id()), Some(&sig), STATION, from, &message),
            Ok(()),
            "TEST {}",
            i + 1
        );
    }
}

// ---- Keyring::check: every way a signature does not count ----

fn hash_of(text: &str) -> String {
    tragus::digest::sha256_hex(text.as_bytes())
}

#[test]
fn the_keyring_refuses_each_kind_of_bad_signature() {
    let (a, b) = (rfc_key(0), rfc_key(1));
    let from = datetime!(2026-12-05 00:00:00 UTC);
    let until = datetime!(2027-12-05 00:00:00 UTC);
    let ring = ring_of(vec![KeyringEntry::for_key(&a, from, Some(until))]);
    let hash = hash_of("record 1");
    let msg = signature_message("records", &hash);
    let sig = a.sign(&msg);
    let at = datetime!(2027-01-10 08:00:00 UTC);
    let check = |id: Option<&str>, sig: Option<&[u8]>, station: &str, at: OffsetDateTime| {
        ring.check(id, sig, station, at, &msg)
    };
    assert_eq!(check(Some(a.key_id()), Some(&sig), STATION, at), Ok(()));
    // Validity is [valid_from, valid_until): the first instant counts, the last does not.
    assert_eq!(check(Some(a.key_id()), Some(&sig), STATION, from), Ok(()));
    let not_valid = |t: &str| SignatureProblem::NotValidAt {
        key_id: a.key_id().to_string(),
        at: t.to_string(),
    };
    assert_eq!(
        check(Some(a.key_id()), Some(&sig), STATION, until),
        Err(not_valid("2027-12-05T00:00:00Z")),
        "expired"
    );
    assert_eq!(
        check(
            Some(a.key_id()),
            Some(&sig),
            STATION,
            from - time::Duration::SECOND
        ),
        Err(not_valid("2026-12-04T23:59:59Z")),
        "not yet valid"
    );
    assert_eq!(
        check(None, None, STATION, at),
        Err(SignatureProblem::Unsigned)
    );
    assert_eq!(
        check(Some(a.key_id()), None, STATION, at),
        Err(SignatureProblem::Unsigned)
    );
    assert_eq!(
        check(None, Some(&sig), STATION, at),
        Err(SignatureProblem::Unsigned)
    );
    assert_eq!(
        check(Some(b.key_id()), Some(&b.sign(&msg)), STATION, at),
        Err(SignatureProblem::UnknownKey {
            key_id: b.key_id().to_string()
        })
    );
    assert_eq!(
        check(Some(a.key_id()), Some(&sig), "larkspur-line3-st2", at),
        Err(SignatureProblem::WrongStation {
            key_id: a.key_id().to_string(),
            key_station: STATION.to_string(),
            row_station: "larkspur-line3-st2".to_string(),
        })
    );
    let mismatch = Err(SignatureProblem::Mismatch {
        key_id: a.key_id().to_string(),
    });
    // Another key's signature under this key's id.
    assert_eq!(
        check(Some(a.key_id()), Some(&b.sign(&msg)), STATION, at),
        mismatch
    );
    // The same hash signed for another table: the purpose is part of the message.
    let moved = a.sign_hash("safety_events", &hash);
    assert_eq!(check(Some(a.key_id()), Some(&moved), STATION, at), mismatch);
    assert_eq!(
        check(Some(a.key_id()), Some(&sig[..63]), STATION, at),
        mismatch
    );
}

#[test]
fn the_signed_message_is_header_purpose_and_hash() {
    // The form documented in src/keys (and rebuilt by tests/reference/ed25519_check.py).
    assert_eq!(
        signature_message("checkpoint", "ab12"),
        b"tragus-signature-v1\ncheckpoint\nab12".to_vec()
    );
}

// ---- Bad key and keyring files: where and what ----

/// 1-based (line, column) of the first `needle` in `text` (found by search: the oracle).
pub(crate) fn at(text: &str, needle: &str) -> String {
    let i = text
        .find(needle)
        .unwrap_or_else(|| panic!("`{needle}` not in text"));
    let before = &text[..i];
    let line = before.matches('\n').count() + 1;
    let col = before.rsplit('\n').next().unwrap().chars().count() + 1;
    format!("{line}:{col}")
}

fn problems(e: KeyError) -> Vec<String> {
    match e {
        KeyError::Invalid(p) => p.iter().map(|p| p.to_string()).collect(),
        other => panic!("expected problems, found {other}"),
    }
}

#[track_caller]
pub(crate) fn expect(found: &[String], path: &Path, pos: &str, words: &[&str]) {
    let prefix = format!("{}:{pos}: ", path.display());
    assert!(
        found
            .iter()
            .any(|p| p.starts_with(&prefix) && words.iter().all(|w| p.contains(w))),
        "expected a problem at {prefix} with {words:?}, found:\n{}",
        found.join("\n")
    );
}

fn key_text(key: &StationKey) -> String {
    key.to_file_text()
}

#[test]
fn bad_key_files_are_reported_where_they_are_wrong() {
    let path = Path::new("st1.key");
    let good = key_text(&rfc_key(0));
    assert_eq!(
        StationKey::load_str(&good, path).unwrap().key_id(),
        key_id_of(&rfc_key(0).public_key())
    );
    let other_id = rfc_key(1).key_id().to_string();
    let text = good
        .replace("tragus-station-key/1", "tragus-station-key/2")
        .replace(rfc_key(0).key_id(), &other_id);
    let found = problems(StationKey::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, "tragus-station-key/2"),
        &["key:", "tragus-station-key/1"],
    );

    let text = good.replace(rfc_key(0).key_id(), &other_id);
    let found = problems(StationKey::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, &other_id),
        &["key_id:", rfc_key(0).key_id()],
    );

    // A short secret: located, and its digits are not echoed.
    let secret = RFC8032_7_1[0].0;
    let text = good.replace(secret, &secret[..60]);
    let found = problems(StationKey::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, &secret[..60]),
        &["secret_hex:", "64 lowercase hex"],
    );
    assert!(!found.join("\n").contains(&secret[..20]), "{found:?}");

    let text = good.replace("station:", "staton:");
    let found = problems(StationKey::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, "staton"),
        &["did you mean `station`"],
    );
}

#[cfg(unix)]
#[test]
fn a_key_file_others_may_read_is_refused() {
    use std::os::unix::fs::PermissionsExt;
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("st1.key");
    rfc_key(0).write_new(&path).unwrap();
    assert!(StationKey::load(&path).is_ok());
    for mode in [0o640, 0o604, 0o660] {
        std::fs::set_permissions(&path, std::fs::Permissions::from_mode(mode)).unwrap();
        match StationKey::load(&path) {
            Err(KeyError::Exposed { mode: m, .. }) => assert_eq!(m, mode),
            other => panic!("mode {mode:o}: expected Exposed, found {other:?}"),
        }
    }
    // Never written over, even with the same content.
    assert!(matches!(
        rfc_key(0).write_new(&path),
        Err(KeyError::Exists { .. })
    ));
}

fn entry_text(key: &StationKey, extra: &str) -> String {
    format!(
        "keyring: tragus-keyring/1\nkeys:\n{}{extra}",
        KeyringEntry::for_key(key, datetime!(2026-12-05 00:00:00 UTC), None).to_yaml_item(2)
    )
}

#[test]
fn bad_keyrings_are_reported_where_they_are_wrong() {
    let path = Path::new("ring.yaml");
    let (a, b) = (rfc_key(0), rfc_key(1));
    let pk_a = hex::encode(a.public_key());

    let text = entry_text(&a, "").replace(&pk_a, &pk_a.to_uppercase());
    let found = problems(Keyring::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, &pk_a.to_uppercase()),
        &["keys[1].public_key:", "64 lowercase"],
    );

    let text = entry_text(&a, "").replace(a.key_id(), b.key_id());
    let found = problems(Keyring::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, b.key_id()),
        &["keys[1].key_id:", a.key_id()],
    );

    let dup = KeyringEntry::for_key(&a, datetime!(2027-01-01 00:00:00 UTC), None).to_yaml_item(2);
    let text = entry_text(&a, &dup);
    let second = text.rfind(a.key_id()).unwrap();
    let line = text[..second].matches('\n').count() + 1;
    let found = problems(Keyring::load_str(&text, path).unwrap_err());
    // "  - key_id: " is 12 characters: the value starts in column 13.
    expect(
        &found,
        path,
        &format!("{line}:13"),
        &["keys[2].key_id:", "also keys[1], line 3"],
    );

    let text = entry_text(&a, "    valid_until: 2026-12-05T00:00:00Z\n");
    let found = problems(Keyring::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        "7:18",
        &["keys[1].valid_until:", "after valid_from"],
    );

    let text = entry_text(&a, "").replace("2026-12-05T00:00:00Z", "2026-12-05 00:00");
    let found = problems(Keyring::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, "2026-12-05 00:00"),
        &["keys[1].valid_from:", "UTC time"],
    );

    let text = entry_text(&a, "").replace("tragus-keyring/1", "tragus-keyring/0");
    let found = problems(Keyring::load_str(&text, path).unwrap_err());
    expect(&found, path, "1:10", &["keyring:", "tragus-keyring/1"]);

    // 32 bytes that are not a point of the curve (chosen with ed25519-dalek's own
    // decompression, RFC 8032 section 5.1.3).
    let not_a_point = (0u8..=255)
        .map(|y| {
            let mut b = [0u8; 32];
            b[0] = y;
            b
        })
        .find(|b| ed25519_dalek::VerifyingKey::from_bytes(b).is_err())
        .unwrap();
    let bad_id = key_id_of(&not_a_point);
    let text = entry_text(&a, "")
        .replace(&pk_a, &hex::encode(not_a_point))
        .replace(a.key_id(), &bad_id);
    let found = problems(Keyring::load_str(&text, path).unwrap_err());
    expect(
        &found,
        path,
        &at(&text, &hex::encode(not_a_point)),
        &["Ed25519 public key"],
    );
}
