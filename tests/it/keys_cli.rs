//! `tragus keys new|show` end to end through the binary (issue 12), and a signature by a
//! key it made verified by an outside library (Python `cryptography`,
//! tests/reference/ed25519_check.py) with the public key read from the keyring it wrote.

use crate::keys::{at, expect, rfc_key, STATION};
use crate::support::common::*;
use std::path::PathBuf;
use std::process::Command;
use time::macros::datetime;
use tragus::keys::{Keyring, KeyringEntry, StationKey};
use tragus::station::load_station;

fn hash_of(text: &str) -> String {
    tragus::digest::sha256_hex(text.as_bytes())
}

/// A station file in its own directory, beside a store directory `data/`.
fn station_dir(extra: &str) -> (tempfile::TempDir, PathBuf, String) {
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir(dir.path().join("data")).unwrap();
    let text = format!(
        "# Line 3, station 1 (demo)\nstation: {STATION}\nmode: engineering   # no calibration \
         yet\nstore: data\n{extra}"
    );
    let path = dir.path().join("st1.yaml");
    std::fs::write(&path, &text).unwrap();
    (dir, path, text)
}

fn keys(args: &[&str]) -> std::process::Output {
    tragus().arg("keys").args(args).output().unwrap()
}

fn stderr(out: &std::process::Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

#[test]
fn keys_new_writes_a_private_key_its_keyring_entry_and_the_station_line() {
    let (dir, station, before) = station_dir("");
    let s = station.to_str().unwrap();
    let out = keys(&["new", "--station", s, "--valid-days", "365"]);
    assert_exit(&out, 0);
    let key_path = dir.path().join(format!("{STATION}.key"));
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let mode = std::fs::metadata(&key_path).unwrap().permissions().mode() & 0o777;
        assert_eq!(mode, 0o600, "key file mode {mode:o}");
    }
    // Everything else in the station file is byte for byte as it was.
    let after = std::fs::read_to_string(&station).unwrap();
    assert_eq!(after, format!("{before}signing_key: {STATION}.key\n"));
    let loaded = load_station(&station).unwrap();
    let named = loaded.signing_key.clone().expect("signing_key");
    assert!(named.is_absolute(), "{}", named.display());
    assert_eq!(
        std::fs::canonicalize(&named).unwrap(),
        std::fs::canonicalize(&key_path).unwrap()
    );

    let key = StationKey::load(&named).unwrap();
    assert_eq!(key.station(), STATION);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains(key.key_id()), "{stdout}");
    let ring = Keyring::load(&dir.path().join("keyring.yaml")).unwrap();
    assert_eq!(ring.entries.len(), 1);
    let e = &ring.entries[0];
    assert_eq!(
        (e.key_id.as_str(), e.station.as_str(), e.public_key),
        (key.key_id(), STATION, key.public_key())
    );
    assert_eq!(
        e.valid_until.map(|u| u - e.valid_from),
        Some(time::Duration::days(365))
    );

    // A second key is refused without --replace, and nothing changes.
    let other = dir.path().join("other.key");
    let again = keys(&["new", "--station", s, "--key-out", other.to_str().unwrap()]);
    assert_exit(&again, 2);
    assert!(stderr(&again).contains("--replace"), "{}", stderr(&again));
    assert!(
        stderr(&again).contains(&format!("{}:5:1:", station.display())),
        "{}",
        stderr(&again)
    );
    assert_eq!(std::fs::read_to_string(&station).unwrap(), after);
    assert!(!other.exists());

    // --replace with the default path: the existing key file is never overwritten.
    let key_text = std::fs::read_to_string(&key_path).unwrap();
    let over = keys(&["new", "--station", s, "--replace"]);
    assert_exit(&over, 2);
    assert!(
        stderr(&over).contains("never written over"),
        "{}",
        stderr(&over)
    );
    assert_eq!(std::fs::read_to_string(&key_path).unwrap(), key_text);

    // --replace with a new file: that one line changes, the keyring gains the entry.
    let k2 = dir.path().join("k2.key");
    let out = keys(&[
        "new",
        "--station",
        s,
        "--replace",
        "--key-out",
        k2.to_str().unwrap(),
    ]);
    assert_exit(&out, 0);
    assert_eq!(
        std::fs::read_to_string(&station).unwrap(),
        format!("{before}signing_key: k2.key\n")
    );
    let ring = Keyring::load(&dir.path().join("keyring.yaml")).unwrap();
    assert_eq!(ring.entries.len(), 2);
    assert_eq!(
        ring.entries[1].key_id,
        StationKey::load(&k2).unwrap().key_id()
    );
    assert_eq!(ring.entries[1].valid_until, None);

    // A lost key (its file gone, so the station file no longer loads) is still replaced.
    std::fs::remove_file(&k2).unwrap();
    assert!(load_station(&station).is_err());
    let k3 = dir.path().join("k3.key");
    let out = keys(&[
        "new",
        "--station",
        s,
        "--replace",
        "--key-out",
        k3.to_str().unwrap(),
    ]);
    assert_exit(&out, 0);
    assert_eq!(
        std::fs::read_to_string(&station).unwrap(),
        format!("{before}signing_key: k3.key\n")
    );
    assert!(load_station(&station).is_ok());
    let ring = Keyring::load(&dir.path().join("keyring.yaml")).unwrap();
    assert_eq!(ring.entries.len(), 3);

    let show = keys(&[
        "show",
        "--keyring",
        dir.path().join("keyring.yaml").to_str().unwrap(),
    ]);
    assert_exit(&show, 0);
    let listed = String::from_utf8_lossy(&show.stdout);
    for e in &ring.entries {
        assert!(listed.contains(&e.key_id), "{listed}");
    }
    assert!(listed.contains("(no end)"), "{listed}");
}

#[test]
fn keys_new_refuses_a_key_inside_the_store() {
    let (dir, station, before) = station_dir("");
    std::fs::create_dir(dir.path().join("data/keys")).unwrap();
    for inside in ["data/st1.key", "data/keys/st1.key"] {
        let key = dir.path().join(inside);
        let out = keys(&[
            "new",
            "--station",
            station.to_str().unwrap(),
            "--key-out",
            key.to_str().unwrap(),
        ]);
        assert_exit(&out, 2);
        assert!(
            stderr(&out).contains("outside the station's store"),
            "{}",
            stderr(&out)
        );
        assert!(!key.exists());
    }
    // The same directory reached through `..` is still the store.
    let sneaky = dir.path().join("data/keys/../st1.key");
    let out = keys(&[
        "new",
        "--station",
        station.to_str().unwrap(),
        "--key-out",
        sneaky.to_str().unwrap(),
    ]);
    assert_exit(&out, 2);
    assert_eq!(std::fs::read_to_string(&station).unwrap(), before);
    assert!(!dir.path().join("keyring.yaml").exists());
}

#[test]
fn keys_new_appends_to_an_existing_keyring_keeping_its_text() {
    let (dir, station, _) = station_dir("");
    let other = rfc_key(1);
    let entry = KeyringEntry::for_key(&other, datetime!(2026-01-01 00:00:00 UTC), None);
    let ring_path = dir.path().join("auditor.yaml");
    let ring_text = format!(
        "# Larkspur Audio Works: keys of line 3 (kept by quality)\nkeyring: tragus-keyring/1\n\
         keys:\n{}    # retired in March\n",
        entry.to_yaml_item(2)
    );
    std::fs::write(&ring_path, &ring_text).unwrap();
    let out = keys(&[
        "new",
        "--station",
        station.to_str().unwrap(),
        "--keyring",
        ring_path.to_str().unwrap(),
    ]);
    assert_exit(&out, 0);
    let after = std::fs::read_to_string(&ring_path).unwrap();
    assert!(after.starts_with(&ring_text), "{after}");
    let ring = Keyring::load(&ring_path).unwrap();
    assert_eq!(ring.entries.len(), 2);
    assert_eq!(ring.entries[0], entry);
}

#[test]
fn a_keyring_that_cannot_take_an_appended_entry_is_left_alone() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("ring.yaml");
    // Flow style: an entry appended as a block item would not belong to the list.
    let text = "keyring: tragus-keyring/1\nkeys: []\n";
    std::fs::write(&path, text).unwrap();
    let entry = KeyringEntry::for_key(&rfc_key(0), datetime!(2026-12-05 00:00:00 UTC), None);
    let e = Keyring::append_to_file(&path, &entry).unwrap_err();
    assert!(e.to_string().contains("by hand"), "{e}");
    assert!(e.to_string().contains(&entry.key_id), "{e}");
    assert_eq!(std::fs::read_to_string(&path).unwrap(), text);
    // A new file is created; the same key twice is refused.
    let fresh = dir.path().join("new.yaml");
    assert!(Keyring::append_to_file(&fresh, &entry).unwrap());
    let e = Keyring::append_to_file(&fresh, &entry).unwrap_err();
    assert!(e.to_string().contains("not yet in the keyring"), "{e}");
    assert_eq!(Keyring::load(&fresh).unwrap().entries, vec![entry]);
}

// ---- An outside library verifies a tragus signature ----

#[test]
fn python_cryptography_verifies_a_station_signature_from_the_keyring() {
    let Some(python) = crate::support::common::reference_python("cryptography, yaml") else {
        return;
    };
    let (dir, station, _) = station_dir("");
    assert_exit(&keys(&["new", "--station", station.to_str().unwrap()]), 0);
    let key = StationKey::load(&load_station(&station).unwrap().signing_key.unwrap()).unwrap();
    let hash = hash_of("E2-000123 pass");
    let mut sig = key.sign_hash("records", &hash);
    let ring = dir.path().join("keyring.yaml");
    let check = |purpose: &str, sig: &[u8]| {
        let out = Command::new(&python)
            .arg(root().join("tests/reference/ed25519_check.py"))
            .arg(&ring)
            .args([key.key_id(), purpose, &hash, &hex::encode(sig)])
            .output()
            .unwrap();
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stdout).trim().to_string(),
        )
    };
    // Source: the `cryptography` package's Ed25519PublicKey.verify (RFC 8032), on the
    // public key as the keyring file holds it and the message rebuilt from the documented
    // form.
    assert_eq!(check("records", &sig), (Some(0), "ok".to_string()));
    assert_eq!(
        check("exposures", &sig),
        (Some(1), "bad signature".to_string())
    );
    sig[17] ^= 0x01;
    assert_eq!(
        check("records", &sig),
        (Some(1), "bad signature".to_string())
    );
}

#[test]
fn a_station_naming_a_missing_key_is_refused_at_the_line() {
    let (_dir, station, text) = station_dir("signing_key: keys/none.key\n");
    match load_station(&station) {
        Err(tragus::station::StationError::Invalid(p)) => {
            let found: Vec<String> = p.iter().map(|p| p.to_string()).collect();
            expect(
                &found,
                &station,
                &at(&text, "keys/none.key"),
                &["signing_key:", "existing file"],
            );
        }
        other => panic!("expected a problem, found {other:?}"),
    }
}
