//! Valid plans load to the typed values they say, with the documented defaults and
//! channel numbers moved from the plan's 1-based numbers to 0-based indices.

use std::path::Path;
use tragus::plan::validate::{DEFAULT_FADE_S, DEFAULT_SILENCE_AFTER_S, DEFAULT_SILENCE_BEFORE_S};
use tragus::plan::{
    load_plan, load_plan_str, AnalysisSpec, Band, ChannelSpec, CheckKind, CheckSpec, LimitLine,
    Normalize, Plan, Polarity, RigSpec, SensitivityUnit, StimulusSpec,
};

fn line(points: &[(f64, f64)], origin: &str) -> Option<LimitLine> {
    Some(LimitLine {
        points: points.to_vec(),
        origin: origin.to_string(),
    })
}

fn band(low_hz: f64, high_hz: f64) -> Band {
    Band { low_hz, high_hz }
}

fn check(id: &str, channels: &[&str], kind: CheckKind) -> CheckSpec {
    CheckSpec {
        id: id.to_string(),
        channels: channels.iter().map(|c| c.to_string()).collect(),
        kind,
    }
}

#[test]
fn loopback_plan_is_the_station_self_test() {
    let path = Path::new("plans/loopback.yaml");
    let plan = load_plan(path).unwrap();
    let expected = Plan {
        id: "loopback".into(),
        revision: 1,
        description: "station self-test: output 1 looped back to input 1, no correction".into(),
        sha256: plan.sha256.clone(),
        source: path.to_path_buf(),
        sample_rate_hz: 48_000,
        stimulus: StimulusSpec {
            start_hz: 20.0,
            stop_hz: 20_000.0,
            duration_s: 1.0,
            level_dbfs: -6.0,
            fade_in_s: DEFAULT_FADE_S,
            fade_out_s: DEFAULT_FADE_S,
            silence_before_s: DEFAULT_SILENCE_BEFORE_S,
            silence_after_s: DEFAULT_SILENCE_AFTER_S,
        },
        analysis: AnalysisSpec {
            max_harmonic: 5,
            points_per_octave: 24,
            min_snr_db: 20.0,
        },
        channels: vec![ChannelSpec {
            name: "loop".into(),
            output: 0,
            input: 0,
            correction: None,
        }],
        rig: RigSpec::Simulated { seed: 1 },
        nominal_impedance_ohm: None,
        level_unit: tragus::plan::LevelUnit::DbFsPerFs,
        product: None,
        max_retests: None,
        product_earphone: None,
        checks: vec![
            check(
                "flat",
                &["loop"],
                CheckKind::Response {
                    upper: line(&[(20.0, 0.5), (20_000.0, 0.5)], "inline"),
                    lower: line(&[(20.0, -0.5), (20_000.0, -0.5)], "inline"),
                    smoothing_fraction: None,
                    normalize: None,
                },
            ),
            check(
                "polarity",
                &["loop"],
                CheckKind::Polarity {
                    expected: Polarity::Positive,
                },
            ),
        ],
    };
    assert_eq!(plan, expected);
    assert_eq!(plan.n_outputs(), 1);
    assert_eq!(plan.n_inputs(), 1);
}

#[test]
fn reference_plan_loads_every_kind() {
    let path = Path::new("tests/data/plans/hash/reference.yaml");
    let plan = load_plan(path).unwrap();
    let both = ["left", "right"];
    let expected = Plan {
        id: "ember-e2.ref".into(),
        revision: 7,
        description: "Ember E2 — “reference” plan\twith a tab".into(),
        sha256: plan.sha256.clone(),
        source: path.to_path_buf(),
        sample_rate_hz: 96_000,
        stimulus: StimulusSpec {
            start_hz: 20.0,
            stop_hz: 40_000.0,
            duration_s: 2.0,
            level_dbfs: 0.0,
            fade_in_s: 0.0001,
            fade_out_s: DEFAULT_FADE_S,
            silence_before_s: 0.05,
            silence_after_s: DEFAULT_SILENCE_AFTER_S,
        },
        analysis: AnalysisSpec {
            max_harmonic: 7,
            points_per_octave: 48,
            min_snr_db: 20.0,
        },
        // YAML output 1 / input 2 → indices 0 / 1.
        channels: vec![
            ChannelSpec {
                name: "left".into(),
                output: 0,
                input: 1,
                correction: None,
            },
            ChannelSpec {
                name: "right".into(),
                output: 1,
                input: 0,
                correction: None,
            },
        ],
        rig: RigSpec::Simulated { seed: u64::MAX },
        nominal_impedance_ohm: None,
        level_unit: tragus::plan::LevelUnit::DbFsPerFs,
        product: None,
        max_retests: None,
        product_earphone: None,
        checks: vec![
            check(
                "fr",
                &both,
                CheckKind::Response {
                    upper: line(
                        &[(20.0, 12.0), (1000.0, 3.25), (40_000.0, 10.0)],
                        "limits/upper.csv",
                    ),
                    lower: line(
                        &[(20.0, -12.5), (1000.0, -3.0), (40_000.0, -20.0)],
                        "inline",
                    ),
                    smoothing_fraction: Some(12),
                    normalize: Some(Normalize::Band(band(500.0, 2000.0))),
                },
            ),
            check(
                "fr-left",
                &["left"],
                CheckKind::Response {
                    upper: line(&[(20.0, 6.0), (40_000.0, 6.0)], "inline"),
                    lower: None,
                    smoothing_fraction: None,
                    normalize: Some(Normalize::AtHz(1000.0)),
                },
            ),
            check(
                "sens",
                &both,
                CheckKind::Sensitivity {
                    band: band(500.0, 2000.0),
                    min_db: -20.0,
                    max_db: -8.0,
                    unit: SensitivityUnit::Db,
                },
            ),
            check(
                "thd",
                &both,
                CheckKind::Thd {
                    band: band(100.0, 10_000.0),
                    max_percent: 2.5,
                },
            ),
            check(
                "hd3",
                &both,
                CheckKind::Harmonic {
                    order: 3,
                    band: band(100.0, 5000.0),
                    max_db: -40.0,
                },
            ),
            check(
                "rb",
                &["right"],
                CheckKind::RubBuzz {
                    band: band(100.0, 8000.0),
                    max_db: -35.0,
                },
            ),
            check(
                "pol",
                &both,
                CheckKind::Polarity {
                    expected: Polarity::Negative,
                },
            ),
            check(
                "bal",
                &both,
                CheckKind::Balance {
                    band: band(200.0, 5000.0),
                    max_diff_db: 1.5,
                    smoothing_fraction: None,
                },
            ),
        ],
    };
    assert_eq!(plan, expected);
    assert_eq!(plan.channel_index("right"), Some(1));
    assert_eq!((plan.n_outputs(), plan.n_inputs()), (2, 2));
}

#[test]
fn demo_plan_has_two_channels_and_every_check_kind() {
    // The lead tunes the demo's limit values, so only its shape is pinned here.
    let plan = load_plan(Path::new("plans/demo-earbud.yaml")).unwrap();
    assert_eq!(plan.id, "demo-earbud");
    let names: Vec<&str> = plan.channels.iter().map(|c| c.name.as_str()).collect();
    assert_eq!(names, ["left", "right"]);
    // Limits are written for the 2 cm³ reference coupler; both channels are corrected from
    // the Line 3 fixture A to it.
    for c in &plan.channels {
        let corr = c.correction.as_ref().expect("demo channels are corrected");
        assert_eq!(corr.fixture.id, "fixture-line3-a");
        assert_eq!(corr.reference.id, "iec-60318-5-2cc");
    }
    let kinds: Vec<&str> = plan.checks.iter().map(|c| c.kind.name()).collect();
    assert_eq!(
        kinds,
        [
            "response",
            "sensitivity",
            "sensitivity",
            "thd",
            "harmonic",
            "rub_buzz",
            "polarity",
            "balance"
        ]
    );
    let CheckKind::Response { upper, lower, .. } = &plan.checks[0].kind else {
        unreachable!("first check is a response check")
    };
    // Both limit lines come from the CSV files in plans/limits/.
    for (l, origin) in [
        (upper, "limits/ember-e2-fr-upper.csv"),
        (lower, "limits/ember-e2-fr-lower.csv"),
    ] {
        let l = l.as_ref().unwrap();
        assert_eq!(l.origin, origin);
        assert!(l.points.len() >= 2);
    }
}

#[test]
fn optional_sections_take_their_defaults() {
    let text = "plan: p\nrevision: 1\nsample_rate_hz: 8000\n\
                stimulus: {start_hz: 100, stop_hz: 3000, duration_s: 0.5, level_dbfs: -20}\n\
                channels: [{name: m, output: 3, input: 2}]\n\
                checks: [{id: s, kind: sensitivity, band_hz: [300, 3000], min_db: -30, max_db: 0}]\n";
    let plan = load_plan_str(text, Path::new("mem.yaml")).unwrap();
    assert_eq!(plan.description, "");
    assert_eq!(plan.rig, RigSpec::Simulated { seed: 1 });
    assert_eq!(
        plan.analysis,
        AnalysisSpec {
            max_harmonic: tragus::plan::DEFAULT_MAX_HARMONIC,
            points_per_octave: tragus::plan::DEFAULT_POINTS_PER_OCTAVE,
            min_snr_db: tragus::plan::DEFAULT_MIN_SNR_DB,
        }
    );
    assert_eq!((plan.channels[0].output, plan.channels[0].input), (2, 1));
    // Outputs 0 and 1 exist but stay silent; the stimulus needs three.
    assert_eq!(plan.n_outputs(), 3);
    assert_eq!(plan.checks[0].channels, ["m"]);
    assert_eq!(plan.sha256.len(), 64);
}
