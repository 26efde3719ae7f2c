//! The demo store of the reproduction and replay tests: units of the Ember E2 earbud tested
//! by the real engine (`tragus station` loops and `tragus run`) on several benches of
//! Larkspur Audio Works line 3 — passes, fails, retests, sweeps scaled down by hearing
//! safety, abandoned sweeps, guard trips, a calibrated production bench, listening steps, a
//! `--fixture` bench — with copies of every input file in a tree of their own.
#![allow(dead_code)]

use super::common::{assert_exit, root, tragus};
use std::path::Path;
use std::process::{Child, Stdio};

pub fn copy_tree(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        let target = to.join(e.file_name());
        if e.file_type().unwrap().is_dir() {
            copy_tree(&e.path(), &target);
        } else {
            std::fs::copy(e.path(), target).unwrap();
        }
    }
}

/// `text` with `from` replaced by `to`, which must be there.
pub fn replaced(text: &str, from: &str, to: &str) -> String {
    assert!(text.contains(from), "`{from}` not found");
    text.replace(from, to)
}

/// The calibrated plan: one channel in dB SPL/V, a sensitivity and a THD limit.
const CAL_PLAN: &str = "plan: cal-demo\nrevision: 1\nsample_rate_hz: 48000\n\
level_unit: db_spl_per_v\nstimulus:\n  start_hz: 50\n  stop_hz: 10000\n  duration_s: 0.5\n  \
level_dbfs: -24\nchannels:\n  - {name: left, output: 1, input: 1}\nrig: {kind: simulated, seed: 1}\n\
checks:\n  - {id: sens, kind: sensitivity, band_hz: [500, 2000], min_db: 90, max_db: 140}\n  \
- {id: thd, kind: thd, band_hz: [200, 5000], max_percent: 3}\n";

/// A production bench naming its calibration file (a path the station loader checks).
const CAL_STATION: &str = "station: larkspur-line3-st1\nmode: production\nrig: simulated\n\
channels:\n  left: {output: 1, input: 1}\ncalibration: ../cal/line3-st3.yaml\ncaps:\n  \
max_drive_v_rms: 0.5\n  max_drive_v_peak: 0.8\n  max_digital_dbfs: -1\n  \
max_spl_mic_peak_db: 140\n  max_spl_mic_dba: 130\n  max_spl_reference_peak_db: 125\n  \
max_spl_reference_dba: 115\n";

/// Copies of the plans, models, limits and station files the benches use, in the
/// repository's layout, so that they can all be deleted before the re-analysis.
pub fn bench_tree(dir: &Path) {
    copy_tree(&root().join("plans/limits"), &dir.join("plans/limits"));
    copy_tree(&root().join("reference"), &dir.join("reference"));
    let demo = std::fs::read_to_string(root().join("plans/demo-earbud.yaml")).unwrap();
    std::fs::write(dir.join("plans/demo-earbud.yaml"), &demo).unwrap();
    let listen = demo
        + "  - {id: listen, kind: listening, band_hz: [800, 2000], level_dbfs: -40, \
           duration_s: 0.5}\n";
    std::fs::write(dir.join("plans/listen.yaml"), listen).unwrap();
    std::fs::write(dir.join("plans/cal.yaml"), CAL_PLAN).unwrap();
    std::fs::create_dir_all(dir.join("stations")).unwrap();
    let st1 = std::fs::read_to_string(root().join("stations/line3-st1.yaml")).unwrap();
    std::fs::write(dir.join("stations/line3-st1.yaml"), &st1).unwrap();
    // Caps just above the plan's declared worst case (132.3 dB SPL peak at the microphone,
    // 113.5 at the ear): the guard trips on ordinary units and a loud unit is scaled down.
    let mut low = replaced(&st1, "station: line3-st1", "station: line3-st9");
    low = replaced(&low, "max_spl_mic_peak_db: 140", "max_spl_mic_peak_db: 133");
    low = replaced(
        &low,
        "max_spl_reference_peak_db: 125",
        "max_spl_reference_peak_db: 114",
    );
    low = replaced(
        &low,
        "max_spl_reference_dba: 115",
        "max_spl_reference_dba: 112",
    );
    std::fs::write(dir.join("stations/low-caps.yaml"), low).unwrap();
    std::fs::write(dir.join("stations/line3-st3.yaml"), CAL_STATION).unwrap();
    std::fs::create_dir_all(dir.join("cal")).unwrap();
    let cal = std::fs::read_to_string(root().join("tests/data/calibration/example.yaml")).unwrap();
    std::fs::write(
        dir.join("cal/line3-st3.yaml"),
        replaced(&cal, "due_date: \"2026-12-30\"", "due_date: \"2999-12-31\""),
    )
    .unwrap();
}

/// The operator loop on `station` with the demo plan, fed `units` (serial, simulated unit)
/// as scanned lines.
pub fn station_loop(tree: &Path, store: &Path, station: &str, units: &[(String, &str)]) -> Child {
    let mut cmd = tragus();
    cmd.arg("station")
        .arg("--station")
        .arg(tree.join("stations").join(station))
        .arg("--plan")
        .arg(tree.join("plans/demo-earbud.yaml"))
        .arg("--store")
        .arg(store)
        .args(["--operator", "script"]);
    for (serial, kind) in units.iter().filter(|(_, k)| *k != "nominal") {
        cmd.arg("--sim-unit").arg(format!("{serial}={kind}"));
    }
    let mut child = cmd
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let scans: String = units.iter().map(|(s, _)| format!("{s}\n")).collect();
    use std::io::Write;
    child
        .stdin
        .take()
        .unwrap()
        .write_all(scans.as_bytes())
        .unwrap();
    child
}

/// One `tragus run`; every verdict is fine (0 pass, 1 fail, 3 retest).
pub fn run_unit(plan: &Path, store: &Path, serial: &str, kind: &str, extra: &[&std::ffi::OsStr]) {
    let out = tragus()
        .arg("run")
        .arg(plan)
        .args([
            "--serial",
            serial,
            "--sim-unit",
            kind,
            "--operator",
            "script",
        ])
        .arg("--store")
        .arg(store)
        .args(extra)
        .output()
        .unwrap();
    assert!(
        matches!(out.status.code(), Some(0 | 1 | 3)),
        "{serial}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("recorded as #"),
        "{serial} not recorded: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// The demo store: 36 units on line 3 station 1 (two loops at once), 8 on the low-caps
/// bench, 4 on the calibrated production bench, 4 with a listening step (answered pass
/// and fail) and 2 with `--fixture` fixture B, 54 in all.
pub fn build_demo(tree: &Path, store: &Path) {
    build_demo_with(tree, store, &[]);
}

/// [`build_demo`] and, at the same time, a further operator loop on line 3 station 1
/// testing `extra` (serial, simulated unit).
pub fn build_demo_with(tree: &Path, store: &Path, extra: &[(String, &str)]) {
    const KINDS: [&str; 15] = [
        "nominal",
        "seal-leak",
        "nominal",
        "clipping",
        "low-sensitivity",
        "too-loud",
        "reversed-polarity",
        "nominal",
        "dead-channel",
        "rub",
        "heavy-distortion",
        "weak-motor",
        "blocked-damper",
        "resonance-shift",
        "design",
    ];
    let st1: Vec<(String, &str)> = (0..36)
        .map(|i| (format!("E2-{:06}", 1000 + i), KINDS[i % KINDS.len()]))
        .collect();
    let low: Vec<(String, &str)> = [
        "nominal",
        "clipping",
        "low-sensitivity",
        "clipping",
        "seal-leak",
        "too-loud",
        "rub",
        "design",
    ]
    .iter()
    .enumerate()
    .map(|(i, k)| (format!("E2-{:06}", 2000 + i), *k))
    .collect();
    let mut loops = vec![
        station_loop(tree, store, "line3-st1.yaml", &st1[..18]),
        station_loop(tree, store, "line3-st1.yaml", &st1[18..]),
        station_loop(tree, store, "low-caps.yaml", &low),
    ];
    if !extra.is_empty() {
        loops.push(station_loop(tree, store, "line3-st1.yaml", extra));
    }
    let os = |s: &str| std::ffi::OsString::from(s);
    let cal_station = [os("--station"), tree.join("stations/line3-st3.yaml").into()];
    for (i, kind) in ["nominal", "clipping", "weak-motor", "clipping"]
        .iter()
        .enumerate()
    {
        let extra: Vec<&std::ffi::OsStr> = cal_station.iter().map(|s| s.as_os_str()).collect();
        run_unit(
            &tree.join("plans/cal.yaml"),
            store,
            &format!("E2-{:06}", 3000 + i),
            kind,
            &extra,
        );
    }
    for (i, answer) in ["pass", "fail", "pass", "fail"].iter().enumerate() {
        let extra = [os("--listen-answer"), os(answer)];
        let extra: Vec<&std::ffi::OsStr> = extra.iter().map(|s| s.as_os_str()).collect();
        run_unit(
            &tree.join("plans/listen.yaml"),
            store,
            &format!("E2-{:06}", 4000 + i),
            "nominal",
            &extra,
        );
    }
    let fixture_b = [
        os("--fixture"),
        tree.join("reference/couplers/fixture-line3-b.yaml").into(),
    ];
    for (i, kind) in ["nominal", "seal-leak"].iter().enumerate() {
        let extra: Vec<&std::ffi::OsStr> = fixture_b.iter().map(|s| s.as_os_str()).collect();
        run_unit(
            &tree.join("plans/demo-earbud.yaml"),
            store,
            &format!("E2-{:06}", 5000 + i),
            kind,
            &extra,
        );
    }
    for child in loops {
        let out = child.wait_with_output().unwrap();
        assert_exit(&out, 0);
    }
}
