//! The one loader of project files (`tragus::config::load_file`): every file kind (plan,
//! coupler model, earphone file, station file, calibration file) refuses a FIFO, a
//! directory, a file over 16 MiB and text that is not UTF-8, with a message naming the
//! path, and the five kinds refuse them in the same words because they share the loader.

use crate::support::common::tragus;
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::Duration;
use tragus::config::{Refusal, MAX_CONFIG_BYTES};
use tragus::plan::PlanError;

/// Each loader's error message for `path`, with the words its I/O error uses for the
/// file kind (`cannot read plan`, …).
fn messages(path: &Path) -> Vec<(&'static str, String)> {
    vec![
        (
            "plan",
            tragus::plan::load_plan(path).unwrap_err().to_string(),
        ),
        (
            "coupler model",
            tragus::models::coupler::load_model(path)
                .unwrap_err()
                .to_string(),
        ),
        (
            "earphone file",
            tragus::models::earphone::load_earphone(path)
                .unwrap_err()
                .to_string(),
        ),
        (
            "station file",
            tragus::station::load_station(path).unwrap_err().to_string(),
        ),
        (
            "calibration",
            tragus::calibration::load_calibration(path)
                .unwrap_err()
                .to_string(),
        ),
    ]
}

/// [`messages`] on another thread, failing the test instead of hanging it when a loader
/// blocks (opening a FIFO with no writer never returns).
fn messages_within(path: &Path, limit: Duration) -> Vec<(&'static str, String)> {
    let (tx, rx) = mpsc::channel();
    let owned: PathBuf = path.to_path_buf();
    std::thread::spawn(move || {
        let _ = tx.send(messages(&owned));
    });
    rx.recv_timeout(limit)
        .unwrap_or_else(|_| panic!("a loader blocked on {}", path.display()))
}

/// Every kind's message is `PATH: cannot read KIND: tail`, the same tail for all.
fn assert_refused(messages: &[(&str, String)], path: &Path, tail: &str) {
    assert_eq!(messages.len(), 5);
    for (kind, message) in messages {
        assert_eq!(
            message,
            &format!("{}: cannot read {kind}: {tail}", path.display())
        );
    }
}

#[cfg(unix)]
#[test]
fn a_fifo_is_refused_without_blocking() {
    let dir = tempfile::tempdir().unwrap();
    let fifo = dir.path().join("plan.yaml");
    let made = std::process::Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .expect("run mkfifo");
    assert!(made.success(), "mkfifo {}", fifo.display());
    // Opening a FIFO with no writer blocks at once; 20 s is far above the milliseconds a
    // refusal from the file's metadata takes, even on a loaded machine.
    let m = messages_within(&fifo, Duration::from_secs(20));
    assert_refused(
        &m,
        &fifo,
        "expected a regular file, found a FIFO (named pipe)",
    );
}

#[cfg(unix)]
#[test]
fn a_fifo_named_by_a_plan_is_refused_without_blocking() {
    let dir = tempfile::tempdir().unwrap();
    let made = std::process::Command::new("mkfifo")
        .arg(dir.path().join("upper.csv"))
        .status()
        .expect("run mkfifo");
    assert!(made.success());
    let plan = dir.path().join("plan.yaml");
    std::fs::write(
        &plan,
        "plan: p\nrevision: 1\nsample_rate_hz: 48000\n\
         stimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -20}\n\
         channels: [{name: left, output: 1, input: 1}]\n\
         checks: [{id: fr, kind: response, upper: upper.csv}]\n",
    )
    .unwrap();
    let (tx, rx) = mpsc::channel();
    let owned = plan.clone();
    std::thread::spawn(move || {
        let _ = tx.send(tragus::plan::load_plan(&owned).map(|p| p.sha256));
    });
    // As above: a refusal takes milliseconds, a blocked open forever.
    let result = rx
        .recv_timeout(Duration::from_secs(20))
        .expect("the plan loader blocked on a FIFO limit file");
    let Err(PlanError::Invalid(problems)) = result else {
        panic!("{result:?}");
    };
    assert_eq!(
        problems[0].to_string(),
        format!(
            "{}:6:42: check fr: upper: cannot read limit file {}: expected a regular file, \
             found a FIFO (named pipe)",
            plan.display(),
            dir.path().join("upper.csv").display()
        )
    );
}

#[test]
fn a_directory_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let m = messages(dir.path());
    assert_refused(&m, dir.path(), "expected a regular file, found a directory");
    // The I/O error says what kind of refusal it is, for callers that look.
    let Err(PlanError::Io { source, .. }) = tragus::plan::load_plan(dir.path()) else {
        panic!("a directory loaded as a plan");
    };
    assert_eq!(source.kind(), std::io::ErrorKind::IsADirectory);
    let refusal = source.get_ref().and_then(|e| e.downcast_ref::<Refusal>());
    assert!(
        matches!(refusal, Some(Refusal::NotRegularFile { .. })),
        "{source:?}"
    );
}

#[test]
fn a_file_over_16_mib_is_refused_before_it_is_read() {
    assert_eq!(MAX_CONFIG_BYTES, 16 * 1024 * 1024);
    let dir = tempfile::tempdir().unwrap();
    let big = dir.path().join("big.yaml");
    // Sparse: no 16 MiB written to disk, and nothing read either when refused by size.
    std::fs::File::create(&big)
        .unwrap()
        .set_len(MAX_CONFIG_BYTES + 1)
        .unwrap();
    let m = messages(&big);
    assert_refused(
        &m,
        &big,
        "expected at most 16777216 bytes (16 MiB), found 16777217 bytes",
    );
    let Err(PlanError::Io { source, .. }) = tragus::plan::load_plan(&big) else {
        panic!("a file over the bound loaded");
    };
    assert_eq!(source.kind(), std::io::ErrorKind::FileTooLarge);
}

#[test]
fn a_file_of_exactly_16_mib_is_read() {
    let dir = tempfile::tempdir().unwrap();
    let edge = dir.path().join("edge.yaml");
    // 16 MiB of a YAML comment: read in full, then refused by the parser for having no
    // plan keys, not by the loader for its size.
    let mut text = vec![b'#'; MAX_CONFIG_BYTES as usize];
    text[MAX_CONFIG_BYTES as usize - 1] = b'\n';
    std::fs::write(&edge, &text).unwrap();
    let message = tragus::plan::load_plan(&edge).unwrap_err().to_string();
    assert!(!message.contains("cannot read plan"), "{message}");
    assert!(
        message.starts_with(&format!("{}:", edge.display())),
        "{message}"
    );
}

#[test]
fn bytes_that_are_not_utf8_are_located_in_every_kind() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bad.yaml");
    // 0xFF never occurs in UTF-8 (RFC 3629); it is the 6th character of line 2.
    std::fs::write(&path, b"a: 1\nbad: \xff\n").unwrap();
    let at = format!("{}:2:6: expected UTF-8 text, found ", path.display());
    for (kind, message) in messages(&path) {
        // Plans name the byte; the other kinds have always said "invalid bytes".
        let found = if kind == "plan" {
            "byte 0xff"
        } else {
            "invalid bytes"
        };
        assert_eq!(message, format!("{at}{found}"), "{kind}");
    }
}

#[test]
fn a_missing_file_is_an_io_error_naming_the_path() {
    let path = Path::new("tests/data/no-such-file.yaml");
    for (kind, message) in messages(path) {
        assert!(
            message.starts_with(&format!("{}: cannot read {kind}: ", path.display())),
            "{message}"
        );
    }
}

#[cfg(unix)]
#[test]
fn a_symbolic_link_to_a_regular_file_is_followed() {
    let dir = tempfile::tempdir().unwrap();
    let link = dir.path().join("model.yaml");
    let target = std::fs::canonicalize("tests/data/couplers/closed-tube-25mm.yaml").unwrap();
    std::os::unix::fs::symlink(&target, &link).unwrap();
    let via_link = tragus::models::coupler::load_model(&link).unwrap();
    let direct = tragus::models::coupler::load_model(&target).unwrap();
    assert_eq!(via_link.sha256, direct.sha256);
}

#[test]
fn validate_reports_a_directory_with_exit_code_2() {
    let dir = tempfile::tempdir().unwrap();
    let out = tragus().arg("validate").arg(dir.path()).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(
        String::from_utf8_lossy(&out.stdout).trim_end(),
        format!(
            "{}: cannot read plan: expected a regular file, found a directory",
            dir.path().display()
        )
    );
}
