//! The plan-time level budget (issue 5 point 2): worst-case levels from the plan's level,
//! the drive calibration and the declared product sensitivity, against the station's caps;
//! a plan that could exceed one is refused with the numbers before anything plays.
//!
//! Sources: a sine's peak is √2 times its rms value (3.0103 dB); the dB SPL reference
//! 20 µPa (ISO 1683; 1 Pa rms = 93.98 dB); A-weighting IEC 61672-1:2002 Table 2 (+1.3 dB at
//! 2.5 kHz is the largest gain, −19.1 dB at 100 Hz).

use crate::support::common;

use common::tragus;
use std::path::{Path, PathBuf};
use tragus::plan::{ProductSpec, SensitivityUnit};
use tragus::safety::budget::{max_a_weighting_db, sine_budget, ChannelPath, Quantity};
use tragus::station::Caps;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn worst_case_levels_follow_from_the_declaration_by_hand() {
    // 100 dB SPL/V declared, ±2 dB, response peak 8 dB → worst 110 dB SPL/V. A −20 dBFS sine
    // through 1 V/FS: 0.1 V peak, 0.070711 V rms (−23.0103 dB re 1 V) → 86.9897 dB SPL rms,
    // 90.0000 dB SPL peak, all written out here.
    let product = ProductSpec {
        sensitivity_db: 100.0,
        sensitivity_unit: SensitivityUnit::DbSplPerV,
        tolerance_db: 2.0,
        response_peak_db: 8.0,
        sensitivity_db_spl_per_v: 100.0,
    };
    let path = ChannelPath {
        channel: "left".into(),
        drive_v_peak_per_fs: Some(1.0),
        // The fixture reads 6 dB above the reference at 4 kHz and 2 dB below it at 200 Hz.
        correction_db: Some(vec![(200.0, 2.0), (1000.0, 0.0), (4000.0, -6.0)]),
    };
    let b = sine_budget(
        "the sweep",
        -20.0,
        (100.0, 10_000.0),
        Some(&product),
        &[path],
        &Caps::default(),
    );
    let get = |q: Quantity| b.items.iter().find(|i| i.quantity == q).unwrap().expected;
    assert!((get(Quantity::DrivePeak) - 0.1).abs() < 1e-12);
    assert!((get(Quantity::DriveRms) - 0.070_710_678_118_654_75).abs() < 1e-12);
    assert!((get(Quantity::ReferencePeak) - 90.0).abs() < 1e-9);
    // A-weighting: the band 100 Hz–10 kHz holds the +1.27 dB maximum near 2.5 kHz
    // (Table 2: +1.3 at 2.5 kHz).
    let max_a = max_a_weighting_db((100.0, 10_000.0));
    assert!((max_a - 1.27).abs() < 0.01, "{max_a}");
    assert!((get(Quantity::ReferenceA) - (86.9897 + max_a)).abs() < 1e-3);
    // At the microphone: the fixture's lowest correction point (−6 dB) raises the level.
    assert!((get(Quantity::MicPeak) - 96.0).abs() < 1e-9);
    // Its A-weighted level: the worst of A(f) − C(f) over the points: at 4 kHz A = +0.96 dB
    // (IEC 61672-1 formula; Table 2: +1.0), so 86.99 + 0.96 + 6.
    let a4k = tragus::safety::weighting::a_weighting_db(4000.0);
    assert!((a4k - 1.0).abs() < 0.05);
    assert!((get(Quantity::MicA) - (86.9897 + a4k + 6.0)).abs() < 1e-3);
    assert!(b.refusal().is_none());
    assert!(b.unchecked.is_empty());

    // Caps 10 dB tighter at the reference: refused, and the highest level that fits is
    // the level lowered by the largest excess.
    let caps = Caps {
        max_spl_reference_peak_db: 80.0,
        ..Caps::default()
    };
    let b = sine_budget(
        "the sweep",
        -20.0,
        (100.0, 10_000.0),
        Some(&product),
        &[ChannelPath {
            channel: "left".into(),
            drive_v_peak_per_fs: Some(1.0),
            correction_db: None,
        }],
        &caps,
    );
    assert!((b.max_level_dbfs() - (-30.0)).abs() < 1e-9);
    let msg = b.refusal().unwrap();
    assert!(
        msg.contains("peak level at the reference (ear) position: expected up to 90.0 dB SPL, cap 80.0 dB SPL"),
        "{msg}"
    );
    assert!(
        msg.contains("lower the plan's stimulus.level_dbfs to -30.0 dBFS or below"),
        "{msg}"
    );
}

#[test]
fn without_a_drive_calibration_or_a_declaration_the_levels_are_reported_unbounded() {
    let b = sine_budget(
        "the sweep",
        -20.0,
        (100.0, 10_000.0),
        None,
        &[
            ChannelPath {
                channel: "left".into(),
                drive_v_peak_per_fs: None,
                correction_db: None,
            },
            ChannelPath {
                channel: "right".into(),
                drive_v_peak_per_fs: Some(1.0),
                correction_db: None,
            },
        ],
        &Caps::default(),
    );
    assert_eq!(
        b.unchecked,
        [
            "channel left: drive voltage and sound levels (no drive calibration)",
            "channel right: sound levels (the plan declares no product sensitivity)"
        ]
    );
    // Only the digital level is bounded on the left; the right has its voltages too.
    assert_eq!(b.items.iter().filter(|i| i.channel == "left").count(), 1);
    assert_eq!(b.items.iter().filter(|i| i.channel == "right").count(), 3);
}

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

#[test]
fn a_plan_over_a_station_cap_is_refused_by_validate_and_run_before_anything_plays() {
    let dir = tempfile::tempdir().unwrap();
    let plan = root().join("plans/demo-earbud.yaml");
    let store = dir.path().join("store");
    let station = write(
        dir.path(),
        "st.yaml",
        &format!(
            "station: bench-9\nmode: engineering\nrig: simulated\nfixture: {}\nstore: {}\ncaps:\n  max_spl_reference_peak_db: 105\n  max_spl_reference_dba: 100\n",
            root().join("reference/couplers/fixture-line3-a.yaml").display(),
            store.display()
        ),
    );
    let out = tragus()
        .arg("validate")
        .arg(&plan)
        .arg("--station")
        .arg(&station)
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(2), "{text}");
    assert!(text.contains("refused: hearing safety: plan `demo-earbud`: the sweep at -24.0 dBFS could exceed the station's caps"), "{text}");
    // The numbers: what is expected, the cap, and the level that would fit (demo plan:
    // 138 + 2 + 9.5 dB SPL/V at 0.25 V/FS·10^(−24/20)/√2 = 0.01116 V rms → 110.45 dB SPL
    // rms, 113.46 dB SPL peak, 111.72 dB(A) with A-weighting's +1.27 dB; the A cap is
    // 11.72 dB over, so −35.72 dBFS fits, written rounded down to −35.8).
    assert!(
        text.contains("peak level at the reference (ear) position: expected up to 113.5 dB SPL, cap 105.0 dB SPL"),
        "{text}"
    );
    assert!(
        text.contains("A-weighted level at the reference (ear) position: expected up to 111.7 dB(A), cap 100.0 dB(A)"),
        "{text}"
    );
    assert!(
        text.contains("lower the plan's stimulus.level_dbfs to -35.8 dBFS or below"),
        "{text}"
    );

    let out = tragus()
        .arg("run")
        .arg(&plan)
        .args(["--serial", "E2-000950", "--station"])
        .arg(&station)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("nothing was played"), "{err}");
    // Refused before anything played: no unit record, but the refusal is in the store's
    // safety-event chain, with the words shown and the budget's numbers.
    let st = tragus::store::Store::open(&store).unwrap();
    assert!(st
        .list(&tragus::store::RecordFilter::default())
        .unwrap()
        .is_empty());
    let events = st
        .safety_events(&tragus::store::SafetyEventFilter::default())
        .unwrap();
    assert_eq!(events.len(), 1);
    assert_eq!(events[0].kind, tragus::store::SafetyKind::PlanRefused);
    assert_eq!(events[0].serial, None);
    assert!(events[0]
        .message
        .contains("could exceed the station's caps"));
    let detail: serde_json::Value = serde_json::from_str(&events[0].detail_json).unwrap();
    assert_eq!(detail["level_dbfs"], -24.0);
    assert!(st.verify().unwrap().is_intact());
    // validate only checks: it records nothing.
    let before = events.len();
    let _ = tragus()
        .arg("validate")
        .arg(&plan)
        .arg("--station")
        .arg(&station)
        .output()
        .unwrap();
    let after = st
        .safety_events(&tragus::store::SafetyEventFilter::default())
        .unwrap()
        .len();
    assert_eq!(before, after);
}

#[test]
fn the_cautions_are_shown_on_a_stores_first_run_only() {
    // Issue 5 point 7: what the caps protect and what they do not, on first run.
    let dir = tempfile::tempdir().unwrap();
    let run = || {
        tragus()
            .arg("run")
            .arg(root().join("plans/demo-earbud.yaml"))
            .args(["--serial", "E2-000960", "--sim-unit", "design", "--store"])
            .arg(dir.path().join("store"))
            .output()
            .unwrap()
    };
    let first = run();
    assert_eq!(first.status.code(), Some(0));
    let err = String::from_utf8_lossy(&first.stderr);
    assert!(err.contains("CAUTION — sound levels"), "{err}");
    assert!(err.contains("It is no hearing-protection device"), "{err}");
    assert!(
        err.contains("Never put a unit under test in or near an ear"),
        "{err}"
    );
    let second = run();
    assert_eq!(second.status.code(), Some(0));
    assert!(!String::from_utf8_lossy(&second.stderr).contains("CAUTION"));
}
