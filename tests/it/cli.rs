//! The command line as a user meets it: help, validation output, exit codes, bad arguments.

use crate::support::common;

use common::*;

// Every command documents itself and exits 0 on --help.
#[test]
fn help_on_every_command() {
    for cmd in [
        "validate",
        "stimulus",
        "analyze",
        "run",
        "records",
        "verify",
        "calibrate",
    ] {
        let out = tragus().args([cmd, "--help"]).output().unwrap();
        assert_eq!(out.status.code(), Some(0), "{cmd}");
        let text = String::from_utf8_lossy(&out.stdout);
        assert!(text.contains("Usage: tragus"), "{cmd}: {text}");
    }
    let out = tragus().arg("--help").output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("Exit codes: 0 pass, 1 fail, 2 bad input, 3 retest"));
}

// `validate` prints one PATH:LINE:COL line per problem, every problem, and exits 2.
#[test]
fn validate_reports_every_problem_with_its_position() {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("bad.yaml");
    std::fs::write(
        &plan,
        "plan: bad\nrevision: 1\nsample_rate_hz: 48000\nstimulus:\n  start_hz: 20\n  stop_hz: 30000\n  duration_s: 1\n  level_dbfs: -12\n  fade_inn_s: 0.01\nchannels:\n  - {name: left, output: 1, input: 1}\nchecks:\n  - {id: pol, kind: polarity, expected: positive, channels: [rihgt]}\n",
    )
    .unwrap();
    let out = tragus().arg("validate").arg(&plan).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let text = String::from_utf8_lossy(&out.stdout);
    let lines: Vec<&str> = text.lines().collect();
    let p = plan.display().to_string();
    assert!(lines.len() >= 3, "{text}");
    for l in &lines {
        assert!(l.starts_with(&format!("{p}:")), "{l}");
        let rest: Vec<&str> = l[p.len() + 1..].splitn(3, ':').collect();
        assert!(
            rest[0].parse::<usize>().is_ok() && rest[1].parse::<usize>().is_ok(),
            "{l}"
        );
    }
    assert!(
        text.contains(":6:12:"),
        "stop_hz above Nyquist at its value: {text}"
    );
    assert!(
        text.contains("fade_in_s"),
        "did-you-mean for fade_inn_s: {text}"
    );
    assert!(text.contains("rihgt"), "unknown channel: {text}");
}

#[test]
fn shipped_plans_are_valid() {
    let out = tragus()
        .arg("validate")
        .arg(root().join("plans/demo-earbud.yaml"))
        .arg(root().join("plans/loopback.yaml"))
        .output()
        .unwrap();
    assert_exit(&out, 0);
}

// Bad arguments: exit 2 with a message that says what was expected.
#[test]
fn bad_arguments_are_exit_two() {
    let out = tragus().args(["run"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let dir = tempfile::tempdir().unwrap();
    let out = tragus()
        .arg("run")
        .arg(root().join("plans/demo-earbud.yaml"))
        .args(["--serial", "E2-1", "--sim-unit", "wobbly"])
        .arg("--store")
        .arg(dir.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.starts_with("tragus: --sim-unit: expected one of nominal, design, reversed-polarity"),
        "{err}"
    );
    let out = tragus()
        .args(["analyze", "no/such/plan.yaml", "--capture", "x.wav"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no/such/plan.yaml"));
}

// The loopback self-test plan passes on a perfect cable (capture = stimulus, delayed).
#[test]
fn loopback_self_test_passes_on_a_cable() {
    let dir = tempfile::tempdir().unwrap();
    let plan = root().join("plans/loopback.yaml");
    let (rate, stim) = stimulus_of(&plan, dir.path());
    let mut y = vec![0f32; 37];
    y.extend_from_slice(&stim[0]);
    y.truncate(stim[0].len());
    let cap = dir.path().join("cable.wav");
    write_f32_wav(&cap, rate, &[y]);
    let (code, json) = analyze(&plan, &cap);
    assert_eq!(code, 0, "{}", json["checks"]);
    assert_eq!(json["channels"][0]["latency_samples"], 37);
    // A cable with 1 dB of loss is outside the ±0.5 dB self-test.
    let lossy: Vec<f32> = stim[0]
        .iter()
        .map(|v| v * 10f32.powf(-1.0 / 20.0))
        .collect();
    write_f32_wav(&cap, rate, &[lossy]);
    let (code, _) = analyze(&plan, &cap);
    assert_eq!(code, 1);
}
