//! `tragus run --calibration`: refusals (past due, missing channel, dB SPL plan without a
//! calibration, a calibration for a dB FS/FS plan, digital levels in production on a sound
//! card), `--non-production` in the record, and calibrated results in dB SPL/V and dB SPL/mW
//! on the simulated rig.

use crate::support::common;

use common::tragus;
use std::path::{Path, PathBuf};
use tragus::calibration::{load_calibration, response_offset_db};
use tragus::store::{RecordFilter, Store};

const EXAMPLE: &str = "tests/data/calibration/example.yaml";

fn plan_text(checks: &str, extra: &str) -> String {
    format!(
        "plan: cal-test\nrevision: 1\nsample_rate_hz: 48000\n{extra}stimulus:\n  start_hz: 50\n  \
         stop_hz: 10000\n  duration_s: 0.5\n  level_dbfs: -24\nchannels:\n  - {{name: left, \
         output: 1, input: 1}}\nrig: {{kind: simulated, seed: 1}}\nchecks:\n{checks}"
    )
}

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

/// A copy of the example calibration with another due date.
fn calibration_due(dir: &Path, due: &str) -> PathBuf {
    let text = std::fs::read_to_string(EXAMPLE)
        .unwrap()
        .replace("due_date: \"2026-12-30\"", &format!("due_date: \"{due}\""))
        .replace(
            "date_utc: \"2026-11-30T06:12:40Z\"",
            "date_utc: \"2020-01-01T00:00:00Z\"",
        );
    write(dir, "cal.yaml", &text)
}

fn run(plan: &Path, store: &Path, extra: &[&str]) -> (i32, String, Option<serde_json::Value>) {
    let json = store.join("out.json");
    let _ = std::fs::remove_file(&json);
    let out = tragus()
        .arg("run")
        .arg(plan)
        .args(["--serial", "E2-000777", "--sim-unit", "design", "--store"])
        .arg(store)
        .arg("--json")
        .arg(&json)
        .args(extra)
        .output()
        .unwrap();
    let v = std::fs::read_to_string(&json)
        .ok()
        .map(|t| serde_json::from_str(&t).unwrap());
    (
        out.status.code().unwrap(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
        v,
    )
}

fn records(store: &Path) -> Vec<tragus::store::StoredRecord> {
    if !store.join("tragus.db").exists() {
        return Vec::new();
    }
    Store::open(store)
        .unwrap()
        .list(&RecordFilter::default())
        .unwrap()
}

const DB_CHECK: &str =
    "  - {id: sens, kind: sensitivity, band_hz: [500, 2000], min_db: -200, max_db: 300}\n";
/// The plan key that says its levels are dB SPL/V.
const SPL: &str = "level_unit: db_spl_per_v\n";

#[test]
fn past_due_calibration_blocks_the_run_naming_the_due_date() {
    let dir = tempfile::tempdir().unwrap();
    let plan = write(dir.path(), "p.yaml", &plan_text(DB_CHECK, SPL));
    let cal = calibration_due(dir.path(), "2021-03-04");
    let store = dir.path().join("store");
    let (code, err, json) = run(&plan, &store, &["--calibration", cal.to_str().unwrap()]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("calibration past due: it was due on 2021-03-04"),
        "{err}"
    );
    assert!(err.contains("no unit was tested"), "{err}");
    assert!(json.is_none());
    assert!(records(&store).is_empty(), "a refused run writes no record");

    // --non-production runs, and the record says so.
    let (code, err, json) = run(
        &plan,
        &store,
        &["--calibration", cal.to_str().unwrap(), "--non-production"],
    );
    assert!(code == 0 || code == 1, "{err}");
    let json = json.unwrap();
    assert_eq!(json["calibration"]["mode"], "non-production");
    let sha = load_calibration(&cal).unwrap().sha256();
    assert_eq!(json["calibration"]["sha256"], sha.as_str());
    let recs = records(&store);
    assert_eq!(recs.len(), 1);
    assert_eq!(recs[0].calibration_mode.as_deref(), Some("non-production"));
    assert_eq!(recs[0].calibration_sha256.as_deref(), Some(sha.as_str()));
    assert!(Store::open(&store).unwrap().verify().unwrap().is_intact());
}

#[test]
fn a_channel_the_calibration_lacks_blocks_the_run() {
    let dir = tempfile::tempdir().unwrap();
    let text = plan_text(DB_CHECK, SPL).replace("output: 1, input: 1", "output: 3, input: 1");
    let plan = write(dir.path(), "p.yaml", &text);
    let cal = calibration_due(dir.path(), "2999-12-31");
    let (code, err, _) = run(
        &plan,
        &dir.path().join("s"),
        &["--calibration", cal.to_str().unwrap()],
    );
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("no drive calibration for output 3 (channel `left`)"),
        "{err}"
    );
}

#[test]
fn a_plan_in_db_spl_needs_a_calibration() {
    let dir = tempfile::tempdir().unwrap();
    let check = "  - {id: spl, kind: sensitivity, unit: db_spl_per_v, band_hz: [500, 2000], min_db: 80, max_db: 140}\n";
    let plan = write(dir.path(), "p.yaml", &plan_text(check, ""));
    let (code, err, _) = run(&plan, &dir.path().join("s"), &[]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains(
            "plan `cal-test` writes its levels in dB SPL/V (check `spl`), which needs a calibration"
        ),
        "{err}"
    );
    // Written as a plan key, without any dB SPL check, the same.
    let plan = write(dir.path(), "r.yaml", &plan_text(DB_CHECK, SPL));
    let (code, err, _) = run(&plan, &dir.path().join("s"), &[]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("plan `cal-test` writes its levels in dB SPL/V, which needs a calibration"),
        "{err}"
    );
    assert!(records(&dir.path().join("s")).is_empty());
    // The plan key is validated: db_spl_per_mw without a nominal impedance.
    let check = "  - {id: mw, kind: sensitivity, unit: db_spl_per_mw, band_hz: [500, 2000], min_db: 80, max_db: 140}\n";
    let plan = write(dir.path(), "q.yaml", &plan_text(check, ""));
    let out = tragus().arg("validate").arg(&plan).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("q.yaml:13:39: check mw: unit: ")
            && text.contains("db_spl_per_mw needs the plan's `nominal_impedance_ohm`"),
        "{text}"
    );
}

/// Mean of `response_db` over the grid points in [lo, hi] (band edges included), the
/// sensitivity check's definition (src/checks/sensitivity.rs).
fn band_mean(json: &serde_json::Value, lo: f64, hi: f64) -> f64 {
    let ch = &json["channels"][0];
    let f = ch["frequencies_hz"].as_array().unwrap();
    let r = ch["response_db"].as_array().unwrap();
    let v: Vec<f64> = f
        .iter()
        .zip(r)
        .filter(|(f, _)| (lo..=hi).contains(&f.as_f64().unwrap()))
        .map(|(_, r)| r.as_f64().unwrap())
        .collect();
    v.iter().sum::<f64>() / v.len() as f64
}

#[test]
fn calibrated_response_is_the_digital_one_plus_the_analytic_offset() {
    let dir = tempfile::tempdir().unwrap();
    let plan = write(dir.path(), "p.yaml", &plan_text(DB_CHECK, ""));
    let plan_spl = write(dir.path(), "p-spl.yaml", &plan_text(DB_CHECK, SPL));
    let cal = calibration_due(dir.path(), "2999-12-31");
    let store = dir.path().join("store");
    let (_, err, digital) = run(&plan, &store, &[]);
    let digital = digital.unwrap_or_else(|| panic!("{err}"));
    assert_eq!(digital["channels"][0]["unit"], "dB FS/FS");
    assert_eq!(digital["calibration"]["mode"], "uncalibrated");
    assert_eq!(digital["calibration"]["level_unit"], "db_fs_per_fs");
    let (_, err, spl) = run(&plan_spl, &store, &["--calibration", cal.to_str().unwrap()]);
    let spl = spl.unwrap_or_else(|| panic!("{err}"));
    assert_eq!(spl["channels"][0]["unit"], "dB SPL/V");
    assert_eq!(spl["calibration"]["mode"], "production");
    assert_eq!(spl["calibration"]["level_unit"], "db_spl_per_v");
    // Example file, channel 1: 0.05 FS/Pa, 2 V/FS → offset −20lg 0.05 − 20lg 2 − 20lg 20 µPa
    // = 26.0206 − 6.0206 + 93.9794 = 113.9794 dB, written out here independently.
    let offset = 26.020599913279625 - 6.020599913279624 + 93.97940008672037;
    assert!((offset - response_offset_db(0.05, 2.0)).abs() < 1e-9);
    // Both sweeps played as planned (no hearing-safety scale-down), so the captures are the
    // same.
    assert_eq!(digital["safety"]["sweep_gain_db"], 0.0);
    assert_eq!(spl["safety"]["sweep_gain_db"], 0.0);
    let a = digital["channels"][0]["response_db"].as_array().unwrap();
    let b = spl["channels"][0]["response_db"].as_array().unwrap();
    assert_eq!(a.len(), b.len());
    for (x, y) in a.iter().zip(b) {
        // The design unit on the same seed is the same capture (deterministic simulation);
        // 1e-9 dB leaves room for the JSON's decimal round trip only.
        let d = y.as_f64().unwrap() - x.as_f64().unwrap();
        assert!((d - offset).abs() < 1e-9, "{d}");
    }
    // Both units were recorded with their mode; the calibrated one with its hash.
    let recs = records(&store);
    assert_eq!(recs.len(), 2);
    assert_eq!(recs[0].calibration_mode.as_deref(), Some("uncalibrated"));
    assert_eq!(recs[0].calibration_sha256, None);
    assert_eq!(recs[1].calibration_mode.as_deref(), Some("production"));
    assert_eq!(
        recs[1].calibration_sha256.as_deref(),
        Some(load_calibration(&cal).unwrap().sha256().as_str())
    );
}

#[test]
fn sensitivity_in_db_spl_per_v_and_per_mw_at_32_ohm() {
    let dir = tempfile::tempdir().unwrap();
    let cal = calibration_due(dir.path(), "2999-12-31");
    let store = dir.path().join("store");
    // First the calibrated mean over 500–2000 Hz, read from the response itself.
    let plan0 = write(dir.path(), "p0.yaml", &plan_text(DB_CHECK, SPL));
    let (_, err, j) = run(&plan0, &store, &["--calibration", cal.to_str().unwrap()]);
    let level_v = band_mean(&j.unwrap_or_else(|| panic!("{err}")), 500.0, 2000.0);
    // Per mW into 32 Ω: L(1 mW) = L(1 V) + 10·lg(32/1000) (−14.949 dB), written out here.
    let level_mw = level_v + 10.0 * (0.032f64).log10();
    let checks = format!(
        "  - {{id: v, kind: sensitivity, unit: db_spl_per_v, band_hz: [500, 2000], min_db: {}, max_db: {}}}\n  - {{id: mw, kind: sensitivity, unit: db_spl_per_mw, band_hz: [500, 2000], min_db: {}, max_db: {}}}\n",
        level_v - 1.0,
        level_v + 3.0,
        level_mw - 2.0,
        level_mw + 0.5
    );
    let plan = write(
        dir.path(),
        "p.yaml",
        &plan_text(&checks, "nominal_impedance_ohm: 32\n"),
    );
    let (code, err, j) = run(&plan, &store, &["--calibration", cal.to_str().unwrap()]);
    assert_eq!(code, 0, "{err}");
    let j = j.unwrap();
    let margin = |id: &str| {
        j["checks"]
            .as_array()
            .unwrap()
            .iter()
            .find(|c| c["id"] == id)
            .unwrap()["worst_margin_db"]
            .as_f64()
            .unwrap()
    };
    // Margins min(mean − min, max − mean): 1.0 dB and 0.5 dB by construction; 1e-6 dB for
    // the JSON's decimal round trip of the limits.
    assert!((margin("v") - 1.0).abs() < 1e-6, "{}", margin("v"));
    assert!((margin("mw") - 0.5).abs() < 1e-6, "{}", margin("mw"));
}

#[test]
fn a_calibration_never_applies_to_a_plan_in_db_fs_per_fs() {
    // Judging dB FS/FS limits against dB SPL/V numbers would fail (or pass) every unit by
    // some 100 dB: the explicit combination is refused before anything plays.
    let dir = tempfile::tempdir().unwrap();
    let plan = write(dir.path(), "p.yaml", &plan_text(DB_CHECK, ""));
    let cal = calibration_due(dir.path(), "2999-12-31");
    let store = dir.path().join("store");
    let (code, err, json) = run(&plan, &store, &["--calibration", cal.to_str().unwrap()]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("plan `cal-test` writes its levels in dB FS/FS (level_unit: db_fs_per_fs), so a calibration would not apply to it"),
        "{err}"
    );
    assert!(json.is_none());
    assert!(records(&store).is_empty());

    // A station that names a calibration runs such a plan (engineering work: loopback,
    // bring-up) without applying it, and the record says dB FS/FS and no calibration.
    let station = write(
        dir.path(),
        "st.yaml",
        &format!(
            "station: bench-9\nmode: engineering\nrig: simulated\ncalibration: {}\n",
            cal.display()
        ),
    );
    let (code, err, json) = run(&plan, &store, &["--station", station.to_str().unwrap()]);
    assert!(code == 0 || code == 1, "{err}");
    let json = json.unwrap();
    assert_eq!(json["channels"][0]["unit"], "dB FS/FS");
    assert_eq!(json["calibration"]["mode"], "non-production");
    assert_eq!(json["calibration"]["sha256"], serde_json::Value::Null);
    assert_eq!(json["calibration"]["level_unit"], "db_fs_per_fs");
}

#[test]
fn digital_levels_are_refused_in_production_on_a_sound_card() {
    // Levels in dB FS/FS hold only for the gains of the bench they were measured on
    // (common practice: production limits are written in calibrated units), so a
    // production sound-card station refuses the plan before any device is opened; this
    // holds in builds with and without the sound-card backend.
    let dir = tempfile::tempdir().unwrap();
    let plan = write(dir.path(), "p.yaml", &plan_text(DB_CHECK, ""));
    let store = dir.path().join("store");
    let (code, err, json) = run(&plan, &store, &["--rig", "soundcard"]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("plan `cal-test` writes its levels in dB FS/FS (level_unit: db_fs_per_fs), which hold only for the gains of the bench")
            && err.contains("use --non-production"),
        "{err}"
    );
    assert!(json.is_none());
    assert!(records(&store).is_empty());
}
