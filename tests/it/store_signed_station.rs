//! A station with a key, end to end through the binary: `keys new`, the station loop signing
//! every row and writing a checkpoint at the end of the shift, `verify --keys --checkpoint`
//! accepting the untouched store and catching a cut at the end that only the checkpoint can
//! show (the signatures of the rows left are all still good).

use crate::support::common::{root, tragus};
use std::io::Write;
use std::path::Path;
use std::process::Stdio;

/// A copy of the demo station 1 in `dir`, its paths made absolute, its store in `dir/data`.
fn station_file(dir: &Path) -> std::path::PathBuf {
    let text = std::fs::read_to_string(root().join("stations/line3-st1.yaml")).unwrap();
    let couplers = root().join("reference/couplers");
    let text = text
        .replace("../reference/couplers", couplers.to_str().unwrap())
        .replace(
            "../tragus-data/line3-st1",
            dir.join("data").to_str().unwrap(),
        );
    let path = dir.join("st1.yaml");
    std::fs::write(&path, text).unwrap();
    path
}

fn verify(store: &Path, keyring: &Path, checkpoints: &[&Path]) -> (i32, String) {
    let mut cmd = tragus();
    cmd.args(["verify", "--store"])
        .arg(store)
        .arg("--keys")
        .arg(keyring);
    for c in checkpoints {
        cmd.arg("--checkpoint").arg(c);
    }
    let out = cmd.output().unwrap();
    (
        out.status.code().unwrap(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
    )
}

#[test]
fn a_signed_shift_with_its_checkpoint_verifies_and_a_cut_at_the_end_is_caught() {
    let tmp = tempfile::tempdir().unwrap();
    let station = station_file(tmp.path());
    let out = tragus()
        .args(["keys", "new", "--station"])
        .arg(&station)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let keyring = tmp.path().join("keyring.yaml");
    let checkpoints = tmp.path().join("handed-off");

    let mut child = tragus()
        .args(["station", "--operator", "j.okafor", "--plan"])
        .arg(root().join("plans/demo-earbud.yaml"))
        .arg("--station")
        .arg(&station)
        .arg("--checkpoint-dir")
        .arg(&checkpoints)
        .args(["--sim-unit", "E2-000002=rub"])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(b"E2-000001\nE2-000002\nE2-000003\n")
        .unwrap();
    let out = child.wait_with_output().unwrap();
    let screen = String::from_utf8_lossy(&out.stdout);
    assert!(screen.contains("checkpoint written: "), "{screen}");
    let cps: Vec<_> = std::fs::read_dir(&checkpoints)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    assert_eq!(cps.len(), 1);

    // Every row is signed by the station's key; the checkpoint covers all three records.
    let store = tmp.path().join("data");
    let (code, text) = verify(&store, &keyring, &[&cps[0]]);
    assert_eq!(code, 0, "{text}");
    let n_signed: i64 = rusqlite::Connection::open(store.join("tragus.db"))
        .unwrap()
        .query_row(
            "SELECT COUNT(*) FROM records WHERE signature IS NOT NULL AND key_id IS NOT NULL",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(n_signed, 3);

    // An insider cuts the last record (and any safety row of it) off the end. What is left
    // is a shorter, consistent, correctly signed chain: only the checkpoint shows the cut.
    let conn = rusqlite::Connection::open(store.join("tragus.db")).unwrap();
    conn.execute_batch(
        "DROP TRIGGER records_no_delete; DROP TRIGGER safety_events_no_delete;
         DELETE FROM safety_events WHERE record_id = 3; DELETE FROM records WHERE id = 3;",
    )
    .unwrap();
    // Put the triggers back as the store made them, so only the cut remains.
    conn.execute_batch(
        "CREATE TRIGGER records_no_delete BEFORE DELETE ON records
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: records cannot be deleted');
END;
CREATE TRIGGER safety_events_no_delete BEFORE DELETE ON safety_events
BEGIN
    SELECT RAISE(ABORT, 'tragus store is append-only: safety events cannot be deleted');
END;",
    )
    .unwrap();
    drop(conn);
    let (code, text) = verify(&store, &keyring, &[]);
    assert_eq!(
        code, 0,
        "without the checkpoint the cut is invisible: {text}"
    );
    let (code, text) = verify(&store, &keyring, &[&cps[0]]);
    assert_eq!(code, 1, "{text}");
    assert!(text.contains("checkpoint"), "{text}");
}
