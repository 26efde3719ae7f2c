//! `tragus limits derive` (issue 13, part 2): limits from 30 simulated golden units.
//!
//! One store is made by the real engine (the demo plan on station line3-st1): 30 good
//! units with different serials, and one unit of every named defect of the simulated
//! population. From it the limits are derived, then checked against things outside the
//! derivation:
//!
//! (a) every golden unit passes the new plan, re-judged from its stored capture by the
//!     engine's own judging path (and three of them tested again on the simulated rig: the
//!     same serial is the same unit);
//! (b) every defect unit is caught by the new plan: a derived check fails, except where the
//!     defect is not a matter of limits at all — a reversed polarity (caught by the kept
//!     polarity check), a dead channel and a too-loud unit (no valid measurement, the
//!     latter's sweep abandoned by hearing safety: retests under any plan);
//! (c) every written line lies within the documented bound of the unthinned line, read as
//!     the checks read lines (also a property test on random curves);
//! (d) mean, σ, Cp and Cpk agree with numpy (tests/reference/limits_stats.py) on the same
//!     values.
//!
//! Plus bad input: too few units, an unknown serial, a plan or serial file with an error
//! (each reported at its file:line:col), files already there.

use crate::support::common::{assert_exit, root, tragus};
use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use tragus::bench::derive::select::{read_serial_list, UnitSelection};
use tragus::bench::derive::{derive, Derivation, DeriveOptions};
use tragus::bench::{Bench, BenchOptions, Prepared};
use tragus::limits::thin::{thin, Side, LINE_REL_TOL};
use tragus::limits::Settings;
use tragus::plan::CheckKind;
use tragus::result::UnitResult;
use tragus::rig::recording::RecordingRig;
use tragus::rig::simulated::Defect;
use tragus::rig::Rig;
use tragus::store::{RecordFilter, Store, StoredRecord};
use tragus::Verdict;

const N_GOLDEN: usize = 30;

fn golden_serial(i: usize) -> String {
    format!("E2-3000{i:02}")
}

fn defect_serial(k: usize) -> String {
    format!("E2-3900{k:02}")
}

fn demo_plan() -> PathBuf {
    root().join("plans/demo-earbud.yaml")
}

fn bench(plan: &Path, store: &Path) -> Bench {
    let station = tragus::bench::load_station(&root().join("stations/line3-st1.yaml")).unwrap();
    Bench::new(BenchOptions {
        plan,
        station: Some(&station),
        fixture: None,
        rig: None,
        store: Some(store.to_path_buf()),
        station_id: None,
        operator: Some("golden".into()),
        calibration: None,
        non_production: false,
        soundcard: Default::default(),
        record_refusals: false,
    })
    .unwrap()
}

/// The store: 30 good units and one unit of each defect (on the left channel), tested on
/// as many benches as there are cores (a store takes several writers, as on a line).
fn make_store(store: &Path) {
    let mut jobs: Vec<(String, &str, Option<&str>)> = (0..N_GOLDEN)
        .map(|i| (golden_serial(i), "nominal", None))
        .collect();
    for (k, d) in Defect::ALL.iter().enumerate() {
        jobs.push((defect_serial(k), d.name(), Some("left")));
    }
    let n = std::thread::available_parallelism()
        .map_or(1, |n| n.get())
        .clamp(1, 4);
    std::thread::scope(|scope| {
        for chunk in jobs.chunks(jobs.len().div_ceil(n)) {
            scope.spawn(move || {
                let mut b = bench(&demo_plan(), store);
                for (serial, kind, channel) in chunk {
                    let sim = b.sim_choice(kind, *channel).unwrap();
                    b.test_and_record(serial, &sim, &|| false, &|_| None)
                        .unwrap_or_else(|_| panic!("{serial} ({kind}) not recorded"));
                }
            });
        }
    });
}

fn write_list(path: &Path, serials: &[String]) {
    let mut text = String::from("# golden units\n");
    for s in serials {
        text.push_str(s);
        text.push('\n');
    }
    std::fs::write(path, text).unwrap();
}

fn records(store: &Path) -> Vec<StoredRecord> {
    Store::open(store)
        .unwrap()
        .list(&RecordFilter::default())
        .unwrap()
}

/// A stored capture judged again under `prep` (the new plan) with its recorded gains: the
/// engine's judging path, outside the derivation.
fn rejudge(prep: &mut Prepared, store: &Store, r: &StoredRecord) -> UnitResult {
    let playback = tragus::bench::reanalyze::playback(r).unwrap();
    if playback.abandoned {
        return prep.unjudged(&r.serial, "recording", None, "abandoned".into());
    }
    let data = tragus::wav::decode_wav(&store.read_capture(&r.capture_sha256).unwrap()).unwrap();
    let mut rig = RecordingRig::from_data(store.capture_path(&r.capture_sha256), data);
    let capture = rig
        .play_and_capture(&prep.stimulus, prep.plan.n_inputs())
        .unwrap();
    let gains = playback.drive_gain_db.unwrap_or_default();
    prep.judge_capture(&capture, &r.serial, "recording", None, &gains)
        .unwrap()
}

#[test]
fn derived_limits_pass_the_golden_units_and_catch_every_defect() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("store");
    make_store(&store);
    let all = records(&store);
    let golden: Vec<String> = (0..N_GOLDEN).map(golden_serial).collect();
    let golden_list = dir.path().join("golden.txt");
    write_list(&golden_list, &golden);
    // Validation: four golden units and every defect unit that was judged (a serial list
    // refuses a unit with only retests: it has no valid measurement).
    let mut validation: Vec<String> = golden[..4].to_vec();
    validation.extend(
        all.iter()
            .filter(|r| r.serial.starts_with("E2-39") && r.verdict != Verdict::Retest)
            .map(|r| r.serial.clone()),
    );
    let validation_list = dir.path().join("validation.txt");
    write_list(&validation_list, &validation);

    let out = dir.path().join("out");
    let options = DeriveOptions {
        store: store.clone(),
        plan: demo_plan(),
        out: out.clone(),
        golden: UnitSelection {
            serials: Some(read_serial_list(&golden_list).unwrap()),
            ..UnitSelection::default()
        },
        validation: Some(UnitSelection {
            serials: Some(read_serial_list(&validation_list).unwrap()),
            ..UnitSelection::default()
        }),
        settings: Settings {
            smoothing_fraction: Some(6),
            ..Settings::default()
        },
        floors: Default::default(),
        per_channel: false,
        only: Vec::new(),
        force: false,
    };
    let d = derive(&options).unwrap();
    assert_eq!(d.report.golden.n_units, N_GOLDEN);
    assert!(d.golden_all_pass(), "{:?}", d.report.golden.units);
    let ids: Vec<&str> = d.report.checks.iter().map(|c| c.id.as_str()).collect();
    assert_eq!(ids, ["fr", "bass", "sens", "thd", "hd3", "rb", "bal"]);
    assert_eq!(d.report.kept.len(), 1, "{:?}", d.report.kept);
    assert_eq!(d.report.kept[0].id, "pol");

    // Every stored capture judged again under the new plan, outside the derivation.
    let mut prep = Prepared::new(&d.plan_path, None).unwrap();
    let st = Store::open(&store).unwrap();
    let rejudged: std::collections::BTreeMap<String, tragus::result::UnitResult> = all
        .iter()
        .map(|r| (r.serial.clone(), rejudge(&mut prep, &st, r)))
        .collect();
    golden_units_pass(&d, &rejudged);
    every_defect_is_caught(&d, &rejudged);
    lines_within_the_bound(&d);
    numpy_agrees(&d, dir.path());
    plan_is_readable(&d);
    command_line(&store, dir.path(), &golden_list, &out);
}

/// (a) Every golden unit, re-judged from its capture under the new plan, passes; two are
/// tested again on the simulated rig under it and pass with the same margins.
fn golden_units_pass(d: &Derivation, rejudged: &BTreeMap<String, UnitResult>) {
    for i in 0..N_GOLDEN {
        let res = &rejudged[&golden_serial(i)];
        assert_eq!(
            res.verdict,
            Verdict::Pass,
            "{}: {:?}",
            res.serial,
            res.checks
        );
    }
    let again = tempfile::tempdir().unwrap();
    let mut b = bench(&d.plan_path, again.path());
    let good = b.sim_choice("nominal", None).unwrap();
    for i in [0, 29] {
        let t = b
            .test_and_record(&golden_serial(i), &good, &|| false, &|_| None)
            .unwrap_or_else(|_| panic!("unit {i}"));
        assert_eq!(t.result.verdict, Verdict::Pass, "{:?}", t.result.checks);
        // Same serial, same unit, same capture: the margins are those of the re-judging.
        let want = &rejudged[&golden_serial(i)].checks;
        assert_eq!(t.result.checks.len(), want.len());
        for (a, b) in t.result.checks.iter().zip(want) {
            assert_eq!((&a.id, &a.channel), (&b.id, &b.channel));
            let (x, y) = (
                a.worst_margin_db.unwrap_or(0.0),
                b.worst_margin_db.unwrap_or(0.0),
            );
            assert!((x - y).abs() < 1e-6, "{} {}: {x} vs {y}", a.id, a.channel);
        }
    }
}

/// (b) Every defect unit is caught under the new plan; the derivation's predicted yield on
/// the validation set is what judging each unit independently gives.
fn every_defect_is_caught(d: &Derivation, rejudged: &BTreeMap<String, UnitResult>) {
    let derived: Vec<&str> = d.report.checks.iter().map(|c| c.id.as_str()).collect();
    for (k, defect) in Defect::ALL.iter().enumerate() {
        let res = &rejudged[&defect_serial(k)];
        let failed: Vec<&str> = res
            .checks
            .iter()
            .filter(|c| c.verdict == Verdict::Fail)
            .map(|c| c.id.as_str())
            .collect();
        match defect {
            // Magnitudes are those of a good unit; the kept polarity check catches it.
            Defect::ReversedPolarity => {
                assert_eq!(res.verdict, Verdict::Fail);
                assert!(failed.contains(&"pol"), "{failed:?}");
            }
            // No valid measurement, so no limit is involved: a dead channel gives no signal
            // (demo_population.rs: a retest under the demo plan too), and a unit 30 dB
            // louder than declared has its sweep abandoned by the hearing-safety pilot.
            Defect::DeadChannel | Defect::TooLoud => {
                assert_eq!(res.verdict, Verdict::Retest, "{:?}", res.checks);
                assert!(!res.retest_reasons.is_empty());
            }
            _ => {
                assert_eq!(res.verdict, Verdict::Fail, "{defect}: {:?}", res.checks);
                assert!(
                    failed.iter().any(|f| derived.contains(f)),
                    "{defect}: failed only {failed:?}"
                );
            }
        }
    }
    let v = d.report.validation.as_ref().unwrap();
    let mut n_pass = 0;
    for u in &v.units {
        let verdict = rejudged[&u.serial].verdict;
        assert_eq!(u.new_verdict, verdict, "{}", u.serial);
        n_pass += usize::from(verdict == Verdict::Pass);
    }
    assert_eq!(
        n_pass, 4,
        "only the four golden units of the validation set pass"
    );
    assert_eq!(v.n_pass, n_pass);
    assert_eq!(v.predicted_yield, Some(n_pass as f64 / v.n_units as f64));
}

/// (c) Each line as the new plan loads it (read by the checks' own rule) against the
/// unthinned line: `0 ≤ ±(T − U) ≤ max_error_db` at every grid point of the line's span and
/// at every breakpoint inside it (where `T − U` has its extremes: both are straight in
/// log-frequency between those), and at points in between for good measure.
fn lines_within_the_bound(d: &Derivation) {
    let plan = tragus::bench::load(&d.plan_path).unwrap();
    let eps = d.report.settings.max_error_db;
    for c in d.checks.iter().filter(|c| c.curve.is_some()) {
        let env = &c.curve.as_ref().unwrap().envelope;
        let spec = plan.checks.iter().find(|s| s.id == c.report.id).unwrap();
        let CheckKind::Response { upper, lower, .. } = &spec.kind else {
            panic!("{} is a response check", spec.id)
        };
        for (line, exact, sign) in [
            (upper.as_ref().unwrap(), &env.upper_db, 1.0),
            (lower.as_ref().unwrap(), &env.lower_db, -1.0),
        ] {
            let report = c
                .report
                .lines
                .iter()
                .find(|l| (l.side == Side::Upper) == (sign > 0.0))
                .unwrap();
            let pts: Vec<(f64, f64)> = env
                .freqs_hz
                .iter()
                .copied()
                .zip(exact.iter().copied())
                .filter(|(f, _)| {
                    *f >= report.from_hz * (1.0 - 1e-12) && *f <= report.to_hz * (1.0 + 1e-12)
                })
                .collect();
            assert!(
                line.points.len() < pts.len() / 3,
                "{} points",
                line.points.len()
            );
            let unthinned = |f: f64| {
                tragus::checks::limit_line::interpolate_log_f(pts.len(), |i| pts[i], f).unwrap()
            };
            let mut at: Vec<f64> = pts.iter().map(|p| p.0).collect();
            at.extend(line.points.iter().map(|p| p.0));
            at.extend(pts.windows(2).map(|w| (w[0].0 * w[1].0).sqrt()));
            // 1e-9 dB: rounding of the log10 interpolation between breakpoints.
            for f in at
                .into_iter()
                .filter(|&f| f >= pts[0].0 && f <= pts[pts.len() - 1].0)
            {
                let dev = sign * (line.level_at_db(f).unwrap() - unthinned(f));
                assert!(
                    (-1e-9..=eps + 1e-9).contains(&dev),
                    "{} {}: {dev} dB at {f} Hz",
                    c.report.id,
                    line.origin
                );
            }
        }
    }
    // The thinning reads lines with the checks' end tolerance.
    assert_eq!(LINE_REL_TOL, tragus::checks::FREQ_REL_TOL);
}

/// (d) The numbers of every check recomputed by numpy from the same values: the golden
/// values (scalars) or curves (responses, with the written lines).
fn numpy_agrees(d: &Derivation, dir: &Path) {
    let plan = tragus::bench::load(&d.plan_path).unwrap();
    let mut checks = Vec::new();
    for c in &d.checks {
        let r = &c.report;
        let mut v = serde_json::json!({
            "id": r.id, "cp": r.cp, "cpk": r.cpk, "cp_at_hz": r.cp_at_hz, "cpk_at_hz": r.cpk_at_hz,
        });
        match &c.curve {
            None => {
                let s = r.golden.unwrap();
                v["values"] = serde_json::json!(r.values_db);
                v["lsl"] = serde_json::json!(r.lsl_db);
                v["usl"] = serde_json::json!(r.usl_db);
                v["mean"] = serde_json::json!(s.mean);
                v["sd"] = serde_json::json!(s.sd);
            }
            Some(curve) => {
                let spec = plan.checks.iter().find(|s| s.id == r.id).unwrap();
                let CheckKind::Response { upper, lower, .. } = &spec.kind else {
                    unreachable!()
                };
                v["freqs_hz"] = serde_json::json!(curve.stats.freqs_hz);
                v["curves"] = serde_json::json!(curve.golden_db);
                v["mean"] = serde_json::json!(curve.stats.mean_db);
                v["sd"] = serde_json::json!(curve.stats.sd_db);
                v["upper"] = serde_json::json!(upper.as_ref().map(|l| &l.points));
                v["lower"] = serde_json::json!(lower.as_ref().map(|l| &l.points));
            }
        }
        checks.push(v);
    }
    let path = dir.join("limits-stats.json");
    std::fs::write(&path, serde_json::to_string(&checks).unwrap()).unwrap();
    let Some(python) = crate::support::common::reference_python("numpy") else {
        return;
    };
    let out = Command::new(python)
        .arg(root().join("tests/reference/limits_stats.py"))
        .arg(&path)
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        text.contains(&format!("{} checks agree", checks.len())),
        "{text}"
    );
}

/// The new plan keeps the old one's text and says how it was made; it validates.
fn plan_is_readable(d: &Derivation) {
    let text = std::fs::read_to_string(&d.plan_path).unwrap();
    assert!(text.contains("revision: 6\n"), "{text}");
    assert!(
        text.contains("Golden units: 30 (the serials listed in"),
        "{text}"
    );
    assert!(
        text.contains("# Bass: an earbud that does not seal"),
        "{text}"
    );
    // Paths to the models are rewritten to resolve from the new plan's directory.
    assert!(
        text.contains("/reference/couplers/fixture-line3-a.yaml\n"),
        "{text}"
    );
    let out = tragus().arg("validate").arg(&d.plan_path).output().unwrap();
    assert_exit(&out, 0);
    for f in &d.report.files {
        assert!(d.plan_path.parent().unwrap().join(f).is_file(), "{f}");
    }
    let page = std::fs::read_to_string(&d.preview_path).unwrap();
    assert_eq!(page.matches("<svg").count(), d.report.checks.len());
}

fn derive_cli(store: &Path, plan: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    tragus()
        .args(["limits", "derive", "--store"])
        .arg(store)
        .arg("--plan")
        .arg(plan)
        .arg("--out")
        .arg(out)
        .args(extra)
        .output()
        .unwrap()
}

/// The command: its table, and bad input (exit 2, the file's position in the message).
fn command_line(store: &Path, dir: &Path, golden_list: &Path, used_out: &Path) {
    let list = |name: &str, text: &str| {
        let p = dir.join(name);
        std::fs::write(&p, text).unwrap();
        p.display().to_string()
    };
    let err = |o: &std::process::Output| String::from_utf8_lossy(&o.stderr).into_owned();
    let new_out = dir.join("cli");
    let plan = demo_plan();

    // Too few units: 3 named.
    let few = list("few.txt", "E2-300000\nE2-300001\nE2-300002\n");
    let o = derive_cli(store, &plan, &new_out, &["--serials", &few]);
    assert_exit(&o, 2);
    assert!(
        err(&o).contains("expected at least 10 golden units of plan demo-earbud, found 3"),
        "{}",
        err(&o)
    );
    // An unknown serial, at its line and column.
    let unknown = list("unknown.txt", "E2-300000\n  E2-999999 # not made\n");
    let o = derive_cli(store, &plan, &new_out, &["--serials", &unknown]);
    assert_exit(&o, 2);
    assert!(
        err(&o).contains(&format!(
            "{unknown}:2:3: E2-999999: expected a record of plan demo-earbud, found none"
        )),
        "{}",
        err(&o)
    );
    // Not a serial number, and a serial twice.
    let bad = list("bad.txt", "E2-300000\nE2 300001\nE2-300000\n");
    let o = derive_cli(store, &plan, &new_out, &["--serials", &bad]);
    assert_exit(&o, 2);
    assert!(
        err(&o).contains(&format!(
            "{bad}:2:1: expected a serial number, found `E2 300001`"
        )),
        "{}",
        err(&o)
    );
    assert!(
        err(&o).contains(&format!(
            "{bad}:3:1: expected each serial once, found E2-300000 again (first on line 1)"
        )),
        "{}",
        err(&o)
    );
    // Options out of range.
    for args in [
        ["--smoothing", "1/0"],
        ["--quantile", "1.5"],
        ["--k", "0"],
        ["--floor", "thd=200"],
    ] {
        let mut a = vec!["--serials", golden_list.to_str().unwrap()];
        a.extend(args);
        let o = derive_cli(store, &plan, &new_out, &a);
        assert_exit(&o, 2);
        assert!(err(&o).contains(args[0]), "{args:?}: {}", err(&o));
    }
    // The files of the first derivation are there: refused without --force.
    let g = golden_list.to_str().unwrap();
    let o = derive_cli(store, &plan, used_out, &["--serials", g]);
    assert_exit(&o, 2);
    assert!(
        err(&o).contains("already there (give --force to overwrite)"),
        "{}",
        err(&o)
    );
    // One check from ten units; the table names it and the others are kept.
    let ten: String = (0..10).map(|i| golden_serial(i) + "\n").collect();
    let ten = list("ten.txt", &ten);
    let o = derive_cli(
        store,
        &plan,
        &new_out,
        &["--serials", &ten, "--check", "sens"],
    );
    let text = String::from_utf8_lossy(&o.stdout);
    eprintln!("{text}");
    assert_exit(&o, 0);
    assert!(
        text.contains("golden      10 units, 10 pass the new plan (100.0 %)"),
        "{text}"
    );
    assert!(
        text.lines()
            .any(|l| l.starts_with("sens  ") && l.contains("sensitivity")),
        "{text}"
    );
    assert!(
        text.contains("kept        fr (response): not named by --check"),
        "{text}"
    );
    // Split per channel: one check per channel, each with its own lines; the plan loads.
    // Golden units by time window.
    let split = dir.join("split");
    let o = derive_cli(
        store,
        &plan,
        &split,
        &[
            "--since",
            "2000-01-01T00:00:00Z",
            "--per-channel",
            "--check",
            "fr",
            "--check",
            "bass",
        ],
    );
    assert_exit(&o, 0);
    let new_plan = tragus::bench::load(&split.join("demo-earbud-r6.yaml")).unwrap();
    let ids: Vec<(&str, &[String])> = new_plan
        .checks
        .iter()
        .map(|c| (c.id.as_str(), c.channels.as_slice()))
        .collect();
    let (l, r) = (vec!["left".to_string()], vec!["right".to_string()]);
    assert_eq!(
        &ids[..4],
        [
            ("fr-left", &l[..]),
            ("fr-right", &r[..]),
            ("bass-left", &l[..]),
            ("bass-right", &r[..])
        ]
    );
    assert!(split
        .join("limits/demo-earbud-r6-fr-right-lower.csv")
        .is_file());
    // Chosen by time: every unit whose latest record passes; the failing defect units are
    // left out, the retests (no valid measurement) never considered.
    let report: serde_json::Value =
        serde_json::from_slice(&std::fs::read(split.join("derive-report.json")).unwrap()).unwrap();
    let n_failing = records(store)
        .iter()
        .filter(|r| r.verdict == Verdict::Fail)
        .count();
    assert_eq!(report["golden"]["n_units"], N_GOLDEN);
    assert_eq!(
        report["golden"]["left_out"].as_array().unwrap().len(),
        n_failing
    );
}

/// A plan with an error is refused at its file:line:col before the store is read.
#[test]
fn a_plan_error_is_reported_at_its_position() {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("broken.yaml");
    std::fs::write(
        &plan,
        "plan: broken\nrevision: 1\nsample_rate_hz: 48000\nstimulus:\n  start_hz: 20\n  \
         stop_hz: 20000\n  duration_s: 1.0\n  level_dbfs: -24\nchannels:\n  - {name: left, \
         output: 1, input: 1}\nchecks:\n  - {id: sens, kind: sensitivity, band_hz: [500, 2000], \
         min_db: -10, max_db: loud}\n",
    )
    .unwrap();
    let serials = dir.path().join("s.txt");
    std::fs::write(&serials, "E2-000001\n").unwrap();
    let o = derive_cli(
        &dir.path().join("no-store"),
        &plan,
        &dir.path().join("out"),
        &["--serials", serials.to_str().unwrap()],
    );
    assert_exit(&o, 2);
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(e.contains(&format!("{}:12:", plan.display())), "{e}");
    assert!(e.contains("max_db"), "{e}");
    // Without golden units at all.
    let o = derive_cli(
        &dir.path().join("no-store"),
        &plan,
        &dir.path().join("out"),
        &[],
    );
    assert_exit(&o, 2);
    assert!(String::from_utf8_lossy(&o.stderr).contains("expected the golden units"));
}

fn seeded(cases: u32) -> Config {
    Config {
        cases,
        rng_seed: RngSeed::Fixed(0x6c69_6d74),
        failure_persistence: None,
        ..Config::default()
    }
}

proptest! {
    #![proptest_config(seeded(300))]

    /// (c) On random curves — random walks with jumps, on a log grid of random density —
    /// the thinned line, read as the checks read lines, lies on the allowed side of the
    /// unthinned one and within the bound, at the grid points, at its breakpoints and in
    /// between.
    #[test]
    fn thinning_stays_within_its_bound(
        n in 2usize..160,
        f0 in 20.0f64..200.0,
        per_octave in 3.0f64..48.0,
        steps in proptest::collection::vec(-1.0f64..1.0, 160),
        jumps in proptest::collection::vec(0usize..40, 160),
        eps in 0.01f64..1.0,
        upper in any::<bool>(),
    ) {
        let f: Vec<f64> = (0..n).map(|k| f0 * 2f64.powf(k as f64 / per_octave)).collect();
        let mut level = 0.0;
        let v: Vec<f64> = (0..n)
            .map(|k| {
                level += steps[k] * if jumps[k] == 0 { 12.0 } else { 0.8 };
                level
            })
            .collect();
        let side = if upper { Side::Upper } else { Side::Lower };
        let sign = if upper { 1.0 } else { -1.0 };
        let t = thin(&f, &v, side, eps, (20.0, 20_000.0)).unwrap();
        let read = |pts: &[(f64, f64)], x: f64| {
            tragus::checks::limit_line::interpolate_log_f(pts.len(), |i| pts[i], x)
        };
        let exact: Vec<(f64, f64)> = f.iter().copied().zip(v.iter().copied()).collect();
        let mut at = f.clone();
        at.extend(t.points.iter().map(|p| p.0));
        at.extend(f.windows(2).flat_map(|w| [w[0] * 0.7 + w[1] * 0.3, (w[0] * w[1]).sqrt()]));
        for x in at.into_iter().filter(|&x| x >= f[0] && x <= f[n - 1]) {
            let dev = sign * (read(&t.points, x).unwrap() - read(&exact, x).unwrap());
            prop_assert!((-1e-9..=eps + 1e-9).contains(&dev), "{dev} at {x} (eps {eps})");
        }
        prop_assert!(t.points.len() <= n.max(2));
    }
}
