//! Store: a process killed with SIGKILL in the middle of an append leaves no partial record
//! and a store that verifies; several processes appending at once keep one linear chain.
//!
//! The child processes are this test binary run again on [`child_entry_point`] with
//! environment variables saying what to do; the crash points are the debug-build hook
//! `TRAGUS_STORE_CRASH_AT` documented in the store module.
#![cfg(unix)]

use crate::support::store_support;

use std::io::{BufRead, BufReader};
use std::os::unix::process::ExitStatusExt;
use std::path::Path;
use std::process::{Child, Command, Stdio};

use store_support::{capture, record};
use tragus::store::{Notice, RecordFilter, Store, CRASH_AT_ENV, CRASH_MARKER};

/// Store directory of a child run.
const CHILD_DIR_ENV: &str = "TRAGUS_STORE_TEST_CHILD_DIR";
/// What a child does: `crash:<unit>` (append unit, expected to stop at a crash point) or
/// `many:<first unit>:<count>` (append that many units).
const CHILD_TASK_ENV: &str = "TRAGUS_STORE_TEST_CHILD_TASK";

/// Not a test of its own: the body of the child processes the tests below start. Run
/// without the child variables (as by a plain `cargo test`), it has nothing to do.
#[test]
fn child_entry_point() {
    let (Some(dir), Ok(task)) = (
        std::env::var_os(CHILD_DIR_ENV),
        std::env::var(CHILD_TASK_ENV),
    ) else {
        return;
    };
    let mut store = Store::open(Path::new(&dir)).unwrap();
    let parts: Vec<&str> = task.split(':').collect();
    match parts.as_slice() {
        ["crash", unit] => {
            let unit: u32 = unit.parse().unwrap();
            store.append(&record(unit), &capture(unit)).unwrap();
            panic!("append returned: the crash point was not reached");
        }
        ["many", first, count] => {
            let first: u32 = first.parse().unwrap();
            let count: u32 = count.parse().unwrap();
            for unit in first..first + count {
                store.append(&record(unit), &capture(unit)).unwrap();
            }
        }
        _ => panic!("unknown child task {task:?}"),
    }
}

fn child(dir: &Path, task: &str, crash_at: Option<&str>) -> Child {
    let mut cmd = Command::new(std::env::current_exe().unwrap());
    cmd.args([
        "store_crash::child_entry_point",
        "--exact",
        "--nocapture",
        "--test-threads=1",
    ])
    .env(CHILD_DIR_ENV, dir)
    .env(CHILD_TASK_ENV, task)
    .env_remove(CRASH_AT_ENV)
    .stdin(Stdio::null())
    .stdout(Stdio::null())
    .stderr(Stdio::piped());
    if let Some(point) = crash_at {
        cmd.env(CRASH_AT_ENV, point);
    }
    cmd.spawn().unwrap()
}

/// Append unit `unit` in a child that stops at `point`, then kill it with SIGKILL there.
fn append_and_kill_at(dir: &Path, unit: u32, point: &str) {
    let mut proc = child(dir, &format!("crash:{unit}"), Some(point));
    let stderr = BufReader::new(proc.stderr.take().unwrap());
    let wanted = format!("{CRASH_MARKER}{point}");
    let mut seen = Vec::new();
    // Reads until the marker; if the child never reaches it, it exits and the pipe closes,
    // so this cannot hang.
    let reached = stderr.lines().map_while(Result::ok).any(|line| {
        let hit = line == wanted;
        seen.push(line);
        hit
    });
    assert!(
        reached,
        "child never reached {point}; its stderr:\n{}",
        seen.join("\n")
    );
    // `Child::kill` sends SIGKILL on Unix: no destructor, no rollback, no flush runs.
    proc.kill().unwrap();
    let status = proc.wait().unwrap();
    assert_eq!(
        status.signal(),
        Some(9),
        "child should die of SIGKILL: {status:?}"
    );
}

/// Kill an append at `point` after two good records, then check what the brief requires:
/// no partial record, verify passes, and the next append continues the chain.
fn crash_leaves_no_partial_record(point: &str) -> Vec<Notice> {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let before: Vec<_> = {
        let mut store = Store::open(dir).unwrap();
        (1..=2)
            .map(|i| store.append(&record(i), &capture(i)).unwrap())
            .collect()
    };

    append_and_kill_at(dir, 3, point);

    let mut store = Store::open(dir).unwrap();
    assert_eq!(store.list(&RecordFilter::default()).unwrap(), before);
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{point}: {:?}", report.problems);
    assert_eq!(report.n_records, 2);
    assert_eq!(report.head_hash, before[1].record_hash);
    let notices = report.notices;

    // The interrupted unit is tested again and recorded as the next link.
    let again = store.append(&record(3), &capture(3)).unwrap();
    assert_eq!(again.id, 3);
    assert_eq!(again.prev_hash, before[1].record_hash);
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{point}: {:?}", report.problems);
    // The orphan capture (if any) is now the record's capture: no orphan remains.
    assert!(
        !report
            .notices
            .iter()
            .any(|n| matches!(n, Notice::OrphanCapture { .. })),
        "{:?}",
        report.notices
    );
    notices
}

#[cfg(debug_assertions)]
#[test]
fn kill_before_commit_leaves_no_record_and_an_orphan_capture() {
    let notices = crash_leaves_no_partial_record("before_commit");
    // The row was inserted but never committed; its capture is durable and unreferenced.
    assert_eq!(notices.len(), 1, "{notices:?}");
    assert!(
        matches!(notices[0], Notice::OrphanCapture { .. }),
        "{notices:?}"
    );
    assert!(notices[0]
        .to_string()
        .contains(&tragus::store::sha256_hex(&capture(3))));
}

#[cfg(debug_assertions)]
#[test]
fn kill_after_capture_leaves_no_record_and_an_orphan_capture() {
    let notices = crash_leaves_no_partial_record("after_capture");
    assert_eq!(notices.len(), 1, "{notices:?}");
    assert!(
        matches!(notices[0], Notice::OrphanCapture { .. }),
        "{notices:?}"
    );
}

#[cfg(debug_assertions)]
#[test]
fn kill_during_capture_leaves_only_a_temporary_file() {
    let notices = crash_leaves_no_partial_record("during_capture");
    assert_eq!(notices.len(), 1, "{notices:?}");
    assert!(
        matches!(notices[0], Notice::LeftoverTemp { .. }),
        "{notices:?}"
    );
}

#[test]
fn processes_appending_at_once_keep_one_linear_chain() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    drop(Store::open(dir).unwrap());
    // 3 processes × 15 appends: enough that they interleave (seen in practice on a 2-core machine), few
    // enough (45 fsync'd commits) to stay quick on a slow disk.
    const N_PROCS: u32 = 3;
    const N_EACH: u32 = 15;
    let procs: Vec<Child> = (0..N_PROCS)
        .map(|p| child(dir, &format!("many:{}:{N_EACH}", 1 + p * N_EACH), None))
        .collect();
    for mut proc in procs {
        let mut err = String::new();
        std::io::Read::read_to_string(proc.stderr.as_mut().unwrap(), &mut err).unwrap();
        let status = proc.wait().unwrap();
        assert!(status.success(), "child failed: {status:?}\n{err}");
    }

    let store = Store::open(dir).unwrap();
    let report = store.verify().unwrap();
    assert!(report.is_intact(), "{:?}", report.problems);
    assert!(report.notices.is_empty(), "{:?}", report.notices);
    let all = store.list(&RecordFilter::default()).unwrap();
    assert_eq!(all.len(), (N_PROCS * N_EACH) as usize);
    for (k, r) in all.iter().enumerate() {
        assert_eq!(r.id, k as i64 + 1);
        if k > 0 {
            assert_eq!(r.prev_hash, all[k - 1].record_hash);
        }
    }
    // Every unit of every process is there exactly once.
    let mut serials: Vec<_> = all.iter().map(|r| r.serial.clone()).collect();
    serials.sort();
    let expected: Vec<_> = (1..=N_PROCS * N_EACH).map(|i| record(i).serial).collect();
    assert_eq!(serials, expected);
}
