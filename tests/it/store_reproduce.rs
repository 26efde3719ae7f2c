//! Reproduction from the archive (issue 12, item 4): every record of a demo store of more
//! than 50 units made by the real engine — passes, fails, retests, sweeps scaled down by
//! hearing safety, abandoned sweeps, guard trips, a calibrated production bench, listening
//! steps, a `--fixture` bench — is judged again from its archived plan, station file,
//! capture and recorded gains, after every input file has been deleted, and gives the
//! stored verdicts and margins within 1e-6 dB.
//!
//! The oracle is the store itself: the verdicts and margins the bench recorded when it
//! tested each unit (issue 12: "reproduces the stored verdict and every margin to within
//! 1e-6 dB"), and `tragus validate`'s hash of the recovered plan against the record's
//! `plan_sha256`. The gain check uses an analytic fact: a capture played G dB lower and
//! brought back by G dB has every response point exactly G dB above the uncorrected one.

use crate::support::common::{assert_exit, root, tragus};
use crate::support::store_support;

use std::path::{Path, PathBuf};
use std::process::{Child, Output, Stdio};
use tragus::bench::reanalyze::{reanalyze, TOLERANCE_DB};
use tragus::store::{RecordFilter, Store, StoredRecord};

fn copy_tree(from: &Path, to: &Path) {
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
fn replaced(text: &str, from: &str, to: &str) -> String {
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
fn bench_tree(dir: &Path) {
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
fn station_loop(tree: &Path, store: &Path, station: &str, units: &[(String, &str)]) -> Child {
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
fn run_unit(plan: &Path, store: &Path, serial: &str, kind: &str, extra: &[&std::ffi::OsStr]) {
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
fn build_demo(tree: &Path, store: &Path) {
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
    let loops = [
        station_loop(tree, store, "line3-st1.yaml", &st1[..18]),
        station_loop(tree, store, "line3-st1.yaml", &st1[18..]),
        station_loop(tree, store, "low-caps.yaml", &low),
    ];
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

fn result_of(r: &StoredRecord) -> serde_json::Value {
    serde_json::from_str(&r.result_json).unwrap()
}

fn playback_of(r: &StoredRecord) -> serde_json::Value {
    serde_json::from_str(r.playback_json.as_deref().unwrap()).unwrap()
}

fn scaled_down(r: &StoredRecord) -> bool {
    let p = playback_of(r);
    p["drive_gain_db"]
        .as_array()
        .is_some_and(|g| g.iter().any(|g| g.as_f64().unwrap() != 0.0))
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

#[test]
fn every_record_of_a_demo_store_is_reproduced_from_the_archive() {
    let tmp = tempfile::tempdir().unwrap();
    let (tree, store_dir) = (tmp.path().join("bench"), tmp.path().join("store"));
    bench_tree(&tree);
    build_demo(&tree, &store_dir);
    // Nothing but the store is left: the re-analysis can only use the archive.
    std::fs::remove_dir_all(&tree).unwrap();

    let store = Store::open(&store_dir).unwrap();
    let records = store.list(&RecordFilter::default()).unwrap();
    assert!(records.len() >= 50, "{} records", records.len());
    let count = |f: &dyn Fn(&StoredRecord) -> bool| records.iter().filter(|r| f(r)).count();
    let abandoned = |r: &StoredRecord| playback_of(r)["abandoned"] == true;
    let guard_tripped = |r: &StoredRecord| !result_of(r)["safety"]["guard_trip"].is_null();
    let listened = |r: &StoredRecord| {
        result_of(r)["checks"]
            .as_array()
            .unwrap()
            .iter()
            .any(|c| c["kind"] == "listening")
    };
    let calibrated = |r: &StoredRecord| !playback_of(r)["calibration_offsets_db"].is_null();
    let with_fixture = |r: &StoredRecord| {
        let links: serde_json::Value =
            serde_json::from_str(r.inputs_json.as_deref().unwrap()).unwrap();
        let plan = store
            .read_archived(links["plan"].as_str().unwrap())
            .unwrap();
        plan.options.contains_key("fixture")
    };
    let coverage = [
        ("pass", count(&|r| r.verdict == tragus::Verdict::Pass)),
        ("fail", count(&|r| r.verdict == tragus::Verdict::Fail)),
        ("retest", count(&|r| r.verdict == tragus::Verdict::Retest)),
        ("scaled down", count(&scaled_down)),
        ("abandoned", count(&abandoned)),
        ("guard tripped", count(&guard_tripped)),
        ("listening step", count(&listened)),
        ("calibrated", count(&calibrated)),
        ("--fixture", count(&with_fixture)),
    ];
    println!("demo store: {} records, {coverage:?}", records.len());
    for (what, n) in coverage {
        assert!(n >= 1, "no {what} record in the demo store: {coverage:?}");
    }
    let verify = tragus()
        .arg("verify")
        .arg("--store")
        .arg(&store_dir)
        .output()
        .unwrap();
    assert_exit(&verify, 0);

    // Every record, verdicts and margins within 1e-6 dB.
    let mut worst = 0.0f64;
    for r in &records {
        let re = reanalyze(&store, r).unwrap_or_else(|e| panic!("record #{}: {e}", r.id));
        let c = &re.comparison;
        assert!(
            c.reproduced(),
            "record #{} ({}): {:#?}",
            r.id,
            r.serial,
            c.differences
        );
        assert_eq!(re.result.verdict, r.verdict, "record #{}", r.id);
        assert_eq!(c.n_checks, result_of(r)["checks"].as_array().unwrap().len());
        assert!(c.max_margin_delta_db <= TOLERANCE_DB);
        assert_eq!(re.judged, !abandoned(r));
        worst = worst.max(c.max_margin_delta_db);
    }
    println!(
        "{} records re-analysed from the archive: verdicts equal, max |Δmargin| = {worst:e} dB",
        records.len()
    );
    assert!(worst <= TOLERANCE_DB);

    let scaled = records
        .iter()
        .find(|r| scaled_down(r) && !guard_tripped(r) && r.station == "line3-st1")
        .expect("a scaled-down unit on station 1");
    cli_reproduces(&store_dir, scaled);
    plan_form_needs_the_recorded_gain(tmp.path(), &store_dir, scaled);
    show_gives_the_provenance(&store_dir, scaled);
    for_each_plan_the_recovered_plan_validates(tmp.path(), &store_dir, &records);

    // A changed margin in a stored result is found (the store is tampered with on
    // purpose here: the append-only trigger dropped, one margin moved by 1e-3 dB).
    let target = records
        .iter()
        .find(|r| r.verdict == tragus::Verdict::Pass && !listened(r))
        .unwrap();
    a_changed_margin_is_not_reproduced(&store_dir, target);

    // An archived input deleted: a clear error naming it, exit 2.
    let plan_sha =
        serde_json::from_str::<serde_json::Value>(scaled.inputs_json.as_deref().unwrap()).unwrap()
            ["plan"]
            .as_str()
            .unwrap()
            .to_string();
    std::fs::remove_file(store_dir.join("archive").join(format!("{plan_sha}.json"))).unwrap();
    let out = analyze_record(&store_dir, scaled.id, &[]);
    assert_exit(&out, 2);
    let err = text(&out.stderr);
    assert!(
        err.contains("archived plan input") && err.contains(&plan_sha),
        "{err}"
    );
}

fn analyze_record(store: &Path, id: i64, extra: &[&str]) -> Output {
    tragus()
        .arg("analyze")
        .arg("--store")
        .arg(store)
        .args(["--record", &id.to_string()])
        .args(extra)
        .output()
        .unwrap()
}

fn cli_reproduces(store: &Path, r: &StoredRecord) {
    let out = analyze_record(store, r.id, &[]);
    assert_exit(&out, 0);
    let stdout = text(&out.stdout);
    assert!(
        stdout.contains(&format!("reproduced: verdict {}", r.verdict.word())),
        "{stdout}"
    );
    let out = analyze_record(store, r.id, &["--json", "-"]);
    assert_exit(&out, 0);
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(j["reproduction"]["reproduced"], true);
    assert_eq!(j["reproduction"]["record_id"], r.id);
    assert_eq!(j["verdict"], result_of(r)["verdict"]);
    assert_eq!(j["serial"], r.serial.as_str());
}

/// The recovered plan and the stored capture with `analyze PLAN --capture`: with the
/// recorded gains the stored margins come back; without them every response point is off
/// by exactly the gain (the issue's −0.01 dB against −17.72 dB).
fn plan_form_needs_the_recorded_gain(tmp: &Path, store: &Path, r: &StoredRecord) {
    let out_dir = tmp.join("recovered-scaled");
    let out = tragus()
        .arg("show")
        .arg("--store")
        .arg(store)
        .arg(r.id.to_string())
        .arg("--plan-out")
        .arg(&out_dir)
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let plan = written_plan(&text(&out.stdout));
    let capture = Store::open(store).unwrap().capture_path(&r.capture_sha256);
    let gains: Vec<f64> = playback_of(r)["drive_gain_db"]
        .as_array()
        .unwrap()
        .iter()
        .map(|g| g.as_f64().unwrap())
        .collect();
    let gains_arg = gains
        .iter()
        .map(|g| g.to_string())
        .collect::<Vec<_>>()
        .join(",");
    let analyze = |extra: &[&str]| -> serde_json::Value {
        let out = tragus()
            .arg("analyze")
            .arg(&plan)
            .arg("--capture")
            .arg(&capture)
            .args(["--json", "-"])
            .args(extra)
            .output()
            .unwrap();
        assert!(
            matches!(out.status.code(), Some(0 | 1 | 3)),
            "{}",
            text(&out.stderr)
        );
        serde_json::from_slice(&out.stdout).unwrap()
    };
    let with = analyze(&["--drive-gain-db", &gains_arg]);
    let without = analyze(&[]);
    let stored = result_of(r);
    assert_eq!(with["verdict"], stored["verdict"]);
    let (a, b) = (
        with["checks"].as_array().unwrap(),
        stored["checks"].as_array().unwrap(),
    );
    assert_eq!(a.len(), b.len());
    for (x, y) in a.iter().zip(b) {
        assert_eq!(
            (&x["id"], &x["channel"], &x["verdict"]),
            (&y["id"], &y["channel"], &y["verdict"])
        );
        if let (Some(m), Some(n)) = (x["worst_margin_db"].as_f64(), y["worst_margin_db"].as_f64()) {
            assert!((m - n).abs() <= TOLERANCE_DB, "{}: {m} vs {n}", x["id"]);
        }
    }
    for (ch, g) in gains.iter().enumerate() {
        let series = |j: &serde_json::Value| -> Vec<f64> {
            j["channels"][ch]["response_db"]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect()
        };
        let (w, wo) = (series(&with), series(&without));
        for (p, q) in w.iter().zip(&wo) {
            assert!(
                (p - q + g).abs() < 1e-9,
                "channel {ch}: {p} - {q} vs gain {g}"
            );
        }
    }
    assert!(gains.iter().any(|g| g.abs() > 1.0), "{gains:?}");
}

/// The plan path `show --plan-out` printed.
fn written_plan(stdout: &str) -> PathBuf {
    let line = stdout
        .lines()
        .find_map(|l| l.strip_prefix("archived plan written: "))
        .unwrap_or_else(|| panic!("no plan path in {stdout}"));
    PathBuf::from(line)
}

fn show_gives_the_provenance(store: &Path, r: &StoredRecord) {
    let out = tragus()
        .arg("show")
        .arg("--store")
        .arg(store)
        .arg(r.id.to_string())
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let s = text(&out.stdout);
    for needle in [
        format!("record #{}", r.id),
        r.serial.clone(),
        r.plan_sha256.clone(),
        r.build.clone().unwrap(),
        r.capture_sha256.clone(),
        r.record_hash.clone(),
        r.prev_hash.clone(),
        "sweep scaled down".into(),
        "sweep_scaled_down".into(),
        "stations/line3-st1.yaml".into(),
        "plans/limits/ember-e2-fr-upper.csv".into(),
        "unsigned".into(),
    ] {
        assert!(s.contains(&needle), "`{needle}` missing from:\n{s}");
    }
    let out = tragus()
        .arg("show")
        .arg("--store")
        .arg(store)
        .arg(r.id.to_string())
        .arg("--json")
        .output()
        .unwrap();
    assert_exit(&out, 0);
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(j["record_hash"], r.record_hash.as_str());
    assert_eq!(j["plan"]["sha256"], r.plan_sha256.as_str());
    assert_eq!(j["playback"], playback_of(r));
    let roles: Vec<&str> = j["inputs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|i| i["role"].as_str().unwrap())
        .collect();
    assert_eq!(roles, ["plan", "station"]);
    assert_eq!(j["result"], result_of(r));
    assert_eq!(j["safety_events"][0]["kind"], "sweep_scaled_down");
}

/// One record of each plan: `show --plan-out` writes a plan that `tragus validate` accepts
/// with the record's `plan_sha256`; a second time into the same directory is refused.
fn for_each_plan_the_recovered_plan_validates(tmp: &Path, store: &Path, records: &[StoredRecord]) {
    let mut seen = std::collections::BTreeSet::new();
    for r in records {
        if !seen.insert(r.plan_sha256.clone()) {
            continue;
        }
        let dir = tmp.join(format!("plan-{}", seen.len()));
        let show = |dir: &Path| {
            tragus()
                .arg("show")
                .arg("--store")
                .arg(store)
                .arg(r.id.to_string())
                .arg("--plan-out")
                .arg(dir)
                .output()
                .unwrap()
        };
        let out = show(&dir);
        assert_exit(&out, 0);
        let plan = written_plan(&text(&out.stdout));
        assert!(plan.starts_with(&dir), "{}", plan.display());
        let v = tragus().arg("validate").arg(&plan).output().unwrap();
        assert_exit(&v, 0);
        assert!(
            text(&v.stdout).contains(&format!("sha256 {}", r.plan_sha256)),
            "{}",
            text(&v.stdout)
        );
        let again = show(&dir);
        assert_exit(&again, 2);
        assert!(
            text(&again.stderr).contains("expected an empty or new directory"),
            "{}",
            text(&again.stderr)
        );
    }
    // demo-earbud, its listening variant and the calibrated plan.
    assert_eq!(seen.len(), 3, "{seen:?}");
}

fn a_changed_margin_is_not_reproduced(store: &Path, r: &StoredRecord) {
    let mut result = result_of(r);
    let m = result["checks"][0]["worst_margin_db"].as_f64().unwrap();
    result["checks"][0]["worst_margin_db"] = serde_json::json!(m + 1e-3);
    let conn = store_support::raw(store);
    conn.execute_batch("DROP TRIGGER records_no_update")
        .unwrap();
    conn.execute(
        "UPDATE records SET result_json = ?1 WHERE id = ?2",
        rusqlite::params![result.to_string(), r.id],
    )
    .unwrap();
    drop(conn);
    let out = analyze_record(store, r.id, &[]);
    assert_exit(&out, 1);
    let s = text(&out.stdout);
    assert!(s.contains("NOT reproduced"), "{s}");
    let id = result["checks"][0]["id"].as_str().unwrap();
    assert!(s.contains(&format!("check {id} on")), "{s}");
    assert!(s.contains("worst_margin_db"), "{s}");
}

#[test]
fn a_record_without_archived_inputs_is_a_clear_error() {
    let tmp = tempfile::tempdir().unwrap();
    // Schema 4, appended without archived inputs (`inputs_json` `{}`).
    let dir = tmp.path().join("no-archive");
    {
        let mut s = Store::open(&dir).unwrap();
        s.append(&store_support::record(1), &store_support::capture(1))
            .unwrap();
    }
    let out = analyze_record(&dir, 1, &[]);
    assert_exit(&out, 2);
    assert!(
        text(&out.stderr).contains("record #1 links no archived plan"),
        "{}",
        text(&out.stderr)
    );
    let out = tragus()
        .arg("show")
        .arg("--store")
        .arg(&dir)
        .args(["1", "--plan-out"])
        .arg(tmp.path().join("out"))
        .output()
        .unwrap();
    assert_exit(&out, 2);
    assert!(text(&out.stderr).contains("links no archived plan"));

    // Written before schema 4 (a schema-2 store, as in store_safety): no inputs at all.
    let old = tmp.path().join("schema-2");
    drop(Store::open(&old).unwrap());
    crate::calibration_store::write_reference_v2_records(&old);
    store_support::raw(&old)
        .execute_batch(
            "DROP TABLE safety_events; DROP TABLE exposures; DROP TABLE store_meta;
             ALTER TABLE records DROP COLUMN key_id; ALTER TABLE records DROP COLUMN build;
             ALTER TABLE records DROP COLUMN inputs_json;
             ALTER TABLE records DROP COLUMN playback_json; PRAGMA user_version = 2;",
        )
        .unwrap();
    let out = analyze_record(&old, 1, &[]);
    assert_exit(&out, 2);
    let err = text(&out.stderr);
    assert!(
        err.contains("recorded before archived inputs")
            && err.contains("tragus analyze PLAN --capture"),
        "{err}"
    );
    let out = tragus()
        .arg("show")
        .arg("--store")
        .arg(&old)
        .arg("1")
        .output()
        .unwrap();
    assert_exit(&out, 0);
    assert!(text(&out.stdout).contains("not archived (recorded before schema 4)"));
    // No such record.
    let out = analyze_record(&old, 99, &[]);
    assert_exit(&out, 2);
    assert!(text(&out.stderr).contains("expected a record #99"));
}
