//! Unit history: a serial's earlier records decide its retest limit, flag a pass after a
//! fail, and keep first-pass yield to a unit's first test ever (docs/engineer/history.md).
//!
//! Units are simulated: a `low-sensitivity` unit fails (its left channel reads some 5 dB
//! low: `sens`, `bass`, `fr` and `bal` fail), a `nominal` unit of the demo population
//! passes; the same serial is run again as another kind to fail, retest and pass it. The
//! oracles are the definitions worked by hand for each scenario and the store itself
//! (`tragus records`, the stored result JSON), independent of `bench::history`.

use crate::report_audit::{data_value, report};
use crate::support::common::{root, tragus};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Output, Stdio};

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        let target = to.join(e.file_name());
        if e.file_type().unwrap().is_dir() {
            copy_dir(&e.path(), &target);
        } else {
            std::fs::copy(e.path(), target).unwrap();
        }
    }
}

/// The demo plan and station in `dir` (their relative paths kept), with `plan_extra` and
/// `station_extra` appended; returns (plan, station).
fn bench_files(dir: &Path, plan_extra: &str, station_extra: &str) -> (PathBuf, PathBuf) {
    copy_dir(&root().join("reference"), &dir.join("reference"));
    copy_dir(&root().join("plans/limits"), &dir.join("plans/limits"));
    std::fs::create_dir_all(dir.join("stations")).unwrap();
    let plan = dir.join("plans/p.yaml");
    let text = std::fs::read_to_string(root().join("plans/demo-earbud.yaml")).unwrap();
    std::fs::write(&plan, format!("{text}{plan_extra}")).unwrap();
    let station = dir.join("stations/st.yaml");
    let text = std::fs::read_to_string(root().join("stations/line3-st1.yaml")).unwrap();
    std::fs::write(&station, format!("{text}{station_extra}")).unwrap();
    (plan, station)
}

/// `tragus run` of one simulated unit; `station` is a file or, with `None`, the station id
/// `larkspur-line3-st1`. Returns the process output and the result JSON (written to a file,
/// so that the human output is on stdout too).
fn run(
    plan: &Path,
    station: Option<&Path>,
    store: &Path,
    serial: &str,
    unit: &str,
) -> (Output, serde_json::Value) {
    let json = store.with_extension(format!("{serial}-{unit}.json"));
    let mut cmd = tragus();
    cmd.arg("run")
        .arg(plan)
        .args(["--serial", serial, "--sim-unit", unit, "--operator", "t"])
        .arg("--store")
        .arg(store)
        .arg("--json")
        .arg(&json);
    match station {
        Some(s) => cmd.arg("--station").arg(s),
        None => cmd.args(["--station-id", "larkspur-line3-st1"]),
    };
    let out = cmd.output().unwrap();
    let text = std::fs::read_to_string(&json)
        .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&out.stderr)));
    (out, serde_json::from_str(&text).unwrap())
}

/// Every record of the store, oldest first, with its result JSON parsed.
fn records(store: &Path) -> Vec<serde_json::Value> {
    let out = tragus()
        .arg("records")
        .arg("--store")
        .arg(store)
        .args(["--json", "-"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let mut v: Vec<serde_json::Value> = serde_json::from_slice(&out.stdout).unwrap();
    v.sort_by_key(|r| r["id"].as_i64().unwrap());
    v
}

fn stored_history(store: &Path, id: i64) -> serde_json::Value {
    let s = tragus::store::Store::open(store).unwrap();
    let r = s.get(id).unwrap().unwrap();
    let doc: serde_json::Value = serde_json::from_str(&r.result_json).unwrap();
    doc["history"].clone()
}

#[test]
fn plan_limit_makes_the_retest_past_it_a_fail_and_reanalysis_reproduces_it() {
    let dir = tempfile::tempdir().unwrap();
    let (plan, _) = bench_files(dir.path(), "max_retests: 1\n", "");
    let store = dir.path().join("store");
    let sn = "E2-000501";
    // Test 1 fails, test 2 (retest 1 of at most 1) fails; test 3 is retest 2 > 1: a FAIL for
    // too many retests although the unit now measures as a nominal, passing unit.
    let (_, r1) = run(&plan, None, &store, sn, "low-sensitivity");
    assert_eq!(r1["verdict"], "fail");
    assert_eq!(r1["history"]["retests"], 0);
    let (_, r2) = run(&plan, None, &store, sn, "low-sensitivity");
    assert_eq!(
        (
            r2["history"]["retests"].as_u64(),
            r2["history"]["too_many_retests"].as_bool()
        ),
        (Some(1), Some(false))
    );
    let (out, r3) = run(&plan, None, &store, sn, "nominal");
    assert_eq!(out.status.code(), Some(1), "exit 1: FAIL");
    assert_eq!(r3["verdict"], "fail");
    let h = &r3["history"];
    assert_eq!(h["earlier_tests"], 2);
    assert_eq!(h["earlier_fail"], 2);
    assert_eq!(h["retests"], 2);
    assert_eq!(h["max_retests"], 1);
    assert_eq!(h["max_retests_from"], "plan");
    assert_eq!(h["too_many_retests"], true);
    assert_eq!(h["passed_after_fail"], false);
    // Every check passed: the FAIL is the history's alone.
    let checks = r3["checks"].as_array().unwrap();
    assert!(checks.iter().all(|c| c["verdict"] == "pass"), "{checks:#?}");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        stdout.contains(
            "FAIL: too many retests (retest 2 since its last pass; max_retests 1 from the plan)"
        ),
        "{stdout}"
    );
    // The record says so: verdict column and result JSON.
    let recs = records(&store);
    assert_eq!(recs.len(), 3);
    assert_eq!(recs[2]["verdict"], "fail");
    let id = recs[2]["id"].as_i64().unwrap();
    assert_eq!(stored_history(&store, id)["too_many_retests"], true);

    // Re-analysis from the archive gives the FAIL again, every check and margin reproduced.
    let out = tragus()
        .arg("analyze")
        .arg("--store")
        .arg(&store)
        .args(["--record", &id.to_string(), "--json", "-"])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let re: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(re["verdict"], "fail", "{re}");
    assert_eq!(re["history"]["too_many_retests"], true);
}

#[test]
fn station_limit_applies_when_stricter_than_the_plan() {
    let dir = tempfile::tempdir().unwrap();
    // Plan 2, station 0: the stricter, 0, applies; the first retest is already too many.
    let (plan, station) = bench_files(dir.path(), "max_retests: 2\n", "max_retests: 0\n");
    let store = dir.path().join("store");
    let sn = "E2-000502";
    let (_, r1) = run(&plan, Some(&station), &store, sn, "low-sensitivity");
    assert_eq!(r1["verdict"], "fail");
    assert_eq!(r1["history"]["too_many_retests"], false);
    let (_, r2) = run(&plan, Some(&station), &store, sn, "nominal");
    assert_eq!(r2["verdict"], "fail");
    let h = &r2["history"];
    assert_eq!(
        (h["retests"].as_u64(), h["max_retests"].as_u64()),
        (Some(1), Some(0))
    );
    assert_eq!(h["max_retests_from"], "station");
    assert_eq!(h["too_many_retests"], true);
}

#[test]
fn run_shows_the_history_first_and_flags_a_pass_after_a_fail() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    let plan = root().join("plans/demo-earbud.yaml");
    let sn = "E2-000503";
    let (out, r1) = run(&plan, None, &store, sn, "low-sensitivity");
    assert_eq!(r1["verdict"], "fail");
    // Never tested before: no history line.
    assert!(!String::from_utf8_lossy(&out.stdout).contains("before:"));
    let (out, r2) = run(&plan, None, &store, sn, "nominal");
    assert_eq!(r2["verdict"], "pass");
    assert_eq!(r2["history"]["passed_after_fail"], true);
    assert_eq!(r2["history"]["fails_since_pass"], 1);
    let stdout = String::from_utf8_lossy(&out.stdout);
    let first = stdout.lines().next().unwrap_or_default();
    // The first line, before the report: date and station of the earlier record, its plan
    // and the checks that failed (those of a low-sensitivity left channel, hand-checked
    // against the first run's result below).
    let date = &r1["time_utc"].as_str().unwrap()[..10];
    let failed: Vec<&str> = {
        let mut ids = Vec::new();
        for c in r1["checks"].as_array().unwrap() {
            let id = c["id"].as_str().unwrap();
            if c["verdict"] == "fail" && !ids.contains(&id) {
                ids.push(id);
            }
        }
        ids
    };
    assert_eq!(
        first,
        format!(
            "{sn} tested 1× before: FAIL {date} larkspur-line3-st1 (plan demo-earbud r5; failed {}); \
             this is retest 1 of at most 3 (default)",
            failed.join(", ")
        )
    );
    assert!(
        stdout.contains("passed after a fail (1 fail since its last pass)"),
        "{stdout}"
    );
    let recs = records(&store);
    let h = stored_history(&store, recs[1]["id"].as_i64().unwrap());
    assert_eq!(h["passed_after_fail"], true);
}

/// One session of the station loop: the serials on stdin, then end of input. Returns the
/// JSON lines and the screen (stderr with `--json -`).
fn session(store: &Path, serials: &[&str], sims: &[&str]) -> (Vec<serde_json::Value>, String) {
    let mut cmd = tragus();
    cmd.arg("station")
        .arg("--station")
        .arg(root().join("stations/line3-st1.yaml"))
        .arg("--plan")
        .arg(root().join("plans/demo-earbud.yaml"))
        .arg("--store")
        .arg(store)
        .args(["--operator", "script", "--json", "-"]);
    for s in sims {
        cmd.args(["--sim-unit", s]);
    }
    let mut child = cmd
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    {
        let mut stdin = child.stdin.take().unwrap();
        for s in serials {
            writeln!(stdin, "{s}").unwrap();
        }
    }
    let out = child.wait_with_output().unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let lines = String::from_utf8_lossy(&out.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    (lines, String::from_utf8_lossy(&out.stderr).into_owned())
}

#[test]
fn first_pass_yield_counts_a_units_first_test_ever_across_sessions() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    // Session 1: A passes, B fails.
    let (lines, _) = session(
        &store,
        &["E2-000601", "E2-000602"],
        &["E2-000602=low-sensitivity"],
    );
    let c1 = &lines.last().unwrap()["counts"];
    assert_eq!(
        (c1["first_tested"].as_u64(), c1["first_pass"].as_u64()),
        (Some(2), Some(1))
    );
    // Session 2: B (tested in session 1) now passes, C is new and fails. By the definition
    // only C is first tested here, and it failed: FPY 0 of 1. Counting the first test of
    // this session instead would give B a first pass: 1 of 2.
    let (lines, screen) = session(
        &store,
        &["E2-000602", "E2-000603"],
        &["E2-000603=low-sensitivity"],
    );
    let c2 = &lines.last().unwrap()["counts"];
    assert_eq!(c2["tested"], 2);
    assert_eq!(c2["first_tested"], 1);
    assert_eq!(c2["first_pass"], 0);
    assert_eq!(c2["first_pass_yield"], 0.0);
    // B's earlier result was shown before it was tested, and its pass flagged.
    assert!(
        screen.contains("E2-000602 tested 1× before: FAIL"),
        "{screen}"
    );
    assert!(
        screen.contains("passed after a fail (1 fail since its last pass)"),
        "{screen}"
    );
    assert_eq!(lines[0]["result"]["history"]["passed_after_fail"], true);

    // The audit report agrees: over session 2's records, first-pass yield 0 (C); over the
    // whole store, A of A, B, C: 1/3.
    let since = lines[0]["result"]["time_utc"].as_str().unwrap().to_string();
    let report = |extra: &[&str]| -> String {
        let (out, html) = report(&store, dir.path(), extra);
        assert_eq!(
            out.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        html
    };
    assert_eq!(
        data_value(&report(&["--since", &since]), "first-pass-yield"),
        0.0
    );
    assert_eq!(data_value(&report(&[]), "first-pass-yield"), 1.0 / 3.0);
}
