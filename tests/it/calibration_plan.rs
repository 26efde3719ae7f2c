//! Plan keys for calibrated limits: `unit:` of a sensitivity check and the plan's
//! `nominal_impedance_ohm`, in the typed plan and the plan hash.

use std::path::Path;
use tragus::plan::hash::canonical_json;
use tragus::plan::{load_plan, load_plan_str, CheckKind, LevelUnit, SensitivityUnit};

#[test]
fn units_and_impedance_enter_the_hash_like_the_reference_says() {
    // plan-spl-expected.txt was written by tests/reference/plan_canonical.py (Python json +
    // hashlib) from the contract in src/plan/hash.rs.
    let expected = std::fs::read_to_string("tests/data/calibration/plan-spl-expected.txt").unwrap();
    let mut lines = expected.lines();
    let (json, sha) = (lines.next().unwrap(), lines.next().unwrap());
    let plan = load_plan(Path::new("tests/data/calibration/plan-spl.yaml")).unwrap();
    assert_eq!(canonical_json(&plan), json);
    assert_eq!(plan.sha256, sha);
    assert_eq!(plan.nominal_impedance_ohm, Some(32.0));
    // Declared 92.5 dB SPL/mW at 32 Ω: per volt L(1 V) = L(1 mW) − 10·lg(32/1000)
    // = 92.5 + 14.9485 dB (1 V into 32 Ω is 31.25 mW), written out independently here.
    let product = plan.product.unwrap();
    let per_v = 92.5 + 10.0 * (1000.0f64 / 32.0).log10();
    assert!((product.sensitivity_db_spl_per_v - per_v).abs() < 1e-12);
    assert!((product.worst_case_db_spl_per_v() - (per_v + 3.0 + 9.5)).abs() < 1e-12);
    let units: Vec<SensitivityUnit> = plan
        .checks
        .iter()
        .filter_map(|c| match c.kind {
            CheckKind::Sensitivity { unit, .. } => Some(unit),
            _ => None,
        })
        .collect();
    assert_eq!(
        units,
        [
            SensitivityUnit::DbSplPerV,
            SensitivityUnit::DbSplPerMw,
            SensitivityUnit::Db
        ]
    );
}

#[test]
fn the_default_unit_and_no_impedance_keep_the_old_hash() {
    let base = "plan: p\nrevision: 1\nsample_rate_hz: 48000\nstimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -18}\nchannels:\n  - {name: left, output: 1, input: 1}\nchecks:\n  - {id: s, kind: sensitivity, band_hz: [500, 2000], min_db: -10, max_db: 0}\n";
    let with_default = base.replace("kind: sensitivity,", "kind: sensitivity, unit: db,");
    let a = load_plan_str(base, Path::new("a.yaml")).unwrap();
    let b = load_plan_str(&with_default, Path::new("b.yaml")).unwrap();
    assert_eq!(a.sha256, b.sha256);
    assert!(!canonical_json(&a).contains("unit"));
    assert!(!canonical_json(&a).contains("nominal_impedance_ohm"));
}

#[test]
fn bad_values_are_refused_with_their_position() {
    let text = "plan: p\nrevision: 1\nsample_rate_hz: 48000\nnominal_impedance_ohm: 0.032\nstimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -18}\nchannels:\n  - {name: left, output: 1, input: 1}\nchecks:\n  - {id: s, kind: sensitivity, unit: dB_SPL, band_hz: [500, 2000], min_db: -10, max_db: 0}\n";
    let e = load_plan_str(text, Path::new("p.yaml"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("p.yaml:4:24: nominal_impedance_ohm: expected 1 to 2000 Ω, found 0.032"),
        "{e}"
    );
    assert!(
        e.contains("p.yaml:9:38: check s: unit: expected db, db_spl_per_v or db_spl_per_mw, found `dB_SPL`"),
        "{e}"
    );
}

#[test]
fn level_unit_defaults_follow_the_checks_and_enter_the_hash_only_for_db_spl() {
    let base = "plan: p\nrevision: 1\nsample_rate_hz: 48000\nstimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -18}\nchannels:\n  - {name: left, output: 1, input: 1}\nchecks:\n  - {id: s, kind: sensitivity, band_hz: [500, 2000], min_db: -10, max_db: 0}\n";
    let load = |t: &str| load_plan_str(t, Path::new("p.yaml")).unwrap();
    let absent = load(base);
    assert_eq!(absent.level_unit, LevelUnit::DbFsPerFs);
    // Written out, the default changes nothing (hash contract, src/plan/hash.rs).
    let fs = load(&format!("level_unit: db_fs_per_fs\n{base}"));
    assert_eq!(fs.sha256, absent.sha256);
    let spl = load(&format!("level_unit: db_spl_per_v\n{base}"));
    assert_eq!(spl.level_unit, LevelUnit::DbSplPerV);
    assert_ne!(spl.sha256, absent.sha256);
    assert!(canonical_json(&spl).contains(r#""level_unit":"db_spl_per_v""#));
    // A check in dB SPL makes the plan's levels dB SPL/V by default.
    let by_check = load(&base.replace(
        "kind: sensitivity,",
        "kind: sensitivity, unit: db_spl_per_v,",
    ));
    assert_eq!(by_check.level_unit, LevelUnit::DbSplPerV);
}

#[test]
fn level_unit_problems_are_reported_at_their_position() {
    let base = "plan: p\nrevision: 1\nsample_rate_hz: 48000\nstimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -18}\nchannels:\n  - {name: left, output: 1, input: 1}\nchecks:\n  - {id: s, kind: sensitivity, unit: db_spl_per_v, band_hz: [500, 2000], min_db: 90, max_db: 120}\n";
    let e = load_plan_str(&format!("level_unit: dBSPL\n{base}"), Path::new("p.yaml"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("p.yaml:1:13: level_unit: expected db_fs_per_fs (uncalibrated digital transfer) or db_spl_per_v (calibrated), found `dBSPL`"),
        "{e}"
    );
    let e = load_plan_str(
        &format!("level_unit: db_fs_per_fs\n{base}"),
        Path::new("p.yaml"),
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.contains("p.yaml:1:13: level_unit: expected db_spl_per_v, since check `s` is written in dB SPL; found db_fs_per_fs"),
        "{e}"
    );
}

#[test]
fn product_problems_are_reported_at_their_position() {
    let base = "plan: p\nrevision: 1\nsample_rate_hz: 48000\nstimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -18}\nchannels:\n  - {name: left, output: 1, input: 1}\nchecks:\n  - {id: s, kind: sensitivity, band_hz: [500, 2000], min_db: -10, max_db: 0}\n";
    let e = load_plan_str(
        &format!("{base}product: {{sensitivity_db: 100, sensitivity_unit: db_spl_per_mw, tolerance_db: 3, response_peak_db: 8}}\n"),
        Path::new("p.yaml"),
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.contains("p.yaml:9:50: product.sensitivity_unit: db_spl_per_mw needs the plan's `nominal_impedance_ohm`"),
        "{e}"
    );
    let e = load_plan_str(
        &format!("{base}product: {{sensitivity_db: 100, sensitivity_unit: db_spl_per_v, tolerance_db: -3}}\n"),
        Path::new("p.yaml"),
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("p.yaml:9:1"), "{e}");
    assert!(
        e.contains("product: missing required key `response_peak_db`"),
        "{e}"
    );
    assert!(
        e.contains("product.tolerance_db: expected 0 to 20 dB, found -3"),
        "{e}"
    );
}
