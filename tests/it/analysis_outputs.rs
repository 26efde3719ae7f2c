//! The analysis as batch code uses it: only the outputs the checks read, one analyzer per
//! thread cloned from one, and several threads at once. Each is checked against the plain
//! single-threaded analysis of every output, which it must reproduce exactly.

use crate::support::common::root;
use tragus::analysis::{Analyzer, ChannelMeasurement, Outputs};
use tragus::dsp::sweep::Stimulus;
use tragus::plan::{load_plan, Plan};
use tragus::rig::simulated::{Defect, SimUnit, SimulatedRig, UnitKind};
use tragus::rig::{Capture, Rig};

fn demo() -> (Plan, Stimulus) {
    let plan = load_plan(&root().join("plans/demo-earbud.yaml")).unwrap();
    let stimulus = Stimulus::from_plan(&plan).unwrap();
    (plan, stimulus)
}

fn capture(plan: &Plan, stimulus: &Stimulus, kind: UnitKind, seed: u64) -> Capture {
    let routes = plan.channels.iter().map(|c| (c.output, c.input)).collect();
    let unit = SimUnit {
        serial: format!("E2-{:06}", 500 + seed),
        kind,
        defect_channel: 1,
    };
    SimulatedRig::new(routes, seed, unit)
        .play_and_capture(stimulus, plan.n_inputs())
        .unwrap()
}

/// Everything a measurement reports, as its JSON, plus the fine spectrum (not serialised).
fn all_of(m: &[ChannelMeasurement]) -> (serde_json::Value, Vec<Vec<f64>>) {
    (
        serde_json::to_value(m).unwrap(),
        m.iter().map(|c| c.fine.power.clone()).collect(),
    )
}

#[test]
fn analyzer_is_send_and_sync() {
    fn assert_send_sync<T: Send + Sync>() {}
    assert_send_sync::<Analyzer>();
    assert_send_sync::<tragus::bench::Prepared>();
}

// Skipping outputs leaves every other output exactly as the full analysis gives it, and
// the skipped ones null at every grid point.
#[test]
fn skipped_outputs_are_null_and_the_rest_unchanged() {
    let (plan, stimulus) = demo();
    let cap = capture(&plan, &stimulus, UnitKind::Defect(Defect::Rub), 11);
    let mut full = Analyzer::new(&plan, &stimulus).unwrap();
    assert_eq!(full.outputs(), Outputs::ALL);
    let want = full.analyze(&cap, &plan.channels).unwrap();
    // The demo plan checks THD, HD3 and rub and buzz: it needs everything.
    assert_eq!(Outputs::for_checks(&plan.checks), Outputs::ALL);
    for outputs in [
        Outputs {
            harmonics: true,
            rub_buzz: false,
        },
        Outputs {
            harmonics: false,
            rub_buzz: false,
        },
    ] {
        let mut an = full.clone();
        an.set_outputs(outputs);
        let got = an.analyze(&cap, &plan.channels).unwrap();
        for (g, w) in got.iter().zip(&want) {
            assert!(g.rub_buzz_db.iter().all(Option::is_none));
            if outputs.harmonics {
                assert_eq!(g.harmonics_db, w.harmonics_db);
                assert_eq!(g.thd_percent, w.thd_percent);
            } else {
                assert!(g.harmonics_db.values().flatten().all(Option::is_none));
                assert!(g.thd_percent.iter().all(Option::is_none));
                assert!(g.thd_iec_percent.iter().all(Option::is_none));
                assert_eq!(g.harmonics_db.len(), w.harmonics_db.len());
            }
            assert_eq!(g.response_db, w.response_db);
            assert_eq!(g.phase_deg, w.phase_deg);
            assert_eq!(g.fine.power, w.fine.power);
            assert_eq!(g.latency_fractional_samples, w.latency_fractional_samples);
            assert_eq!(g.snr_db, w.snr_db);
            assert_eq!(g.retest_reasons, w.retest_reasons);
        }
    }
}

// Clones on several threads, each analysing units in its own order, give what one
// analyzer gives analysing them one after the other: no state leaks from unit to unit or
// between threads.
#[test]
fn clones_on_threads_reproduce_the_serial_analysis() {
    let (plan, stimulus) = demo();
    let kinds = [
        UnitKind::Nominal,
        UnitKind::Defect(Defect::HeavyDistortion),
        UnitKind::Defect(Defect::Clipping),
        UnitKind::Defect(Defect::DeadChannel),
        UnitKind::Defect(Defect::Rub),
        UnitKind::Nominal,
    ];
    let caps: Vec<Capture> = kinds
        .iter()
        .enumerate()
        .map(|(i, &k)| capture(&plan, &stimulus, k, i as u64))
        .collect();
    let mut serial = Analyzer::new(&plan, &stimulus).unwrap();
    let want: Vec<_> = caps
        .iter()
        .map(|c| all_of(&serial.analyze(c, &plan.channels).unwrap()))
        .collect();
    std::thread::scope(|scope| {
        let handles: Vec<_> = (0..3)
            .map(|t| {
                let mut an = serial.clone();
                let (caps, plan) = (&caps, &plan);
                scope.spawn(move || {
                    // Each thread walks the units from a different start.
                    (0..caps.len())
                        .map(|i| {
                            let u = (i + 2 * t) % caps.len();
                            (u, all_of(&an.analyze(&caps[u], &plan.channels).unwrap()))
                        })
                        .collect::<Vec<_>>()
                })
            })
            .collect();
        for h in handles {
            for (u, got) in h.join().unwrap() {
                assert!(got == want[u], "unit {u} differs from the serial analysis");
            }
        }
    });
}
