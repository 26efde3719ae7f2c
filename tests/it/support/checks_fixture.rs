//! Hand-built plans and measurements for the checks and report tests.
#![allow(dead_code)]

use std::collections::BTreeMap;
use std::path::PathBuf;
use tragus::analysis::{ChannelMeasurement, FineSpectrum, RetestReason};
use tragus::plan::{
    AnalysisSpec, Band, ChannelSpec, CheckKind, CheckSpec, LimitLine, Plan, Polarity, RigSpec,
    StimulusSpec,
};

/// Octave grid 125 Hz … 8 kHz: few points, so margins can be worked out by hand.
pub const GRID_HZ: [f64; 7] = [125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0];

/// A plan with the named channels (output = input = position) and the given checks.
pub fn plan(channels: &[&str], checks: Vec<CheckSpec>) -> Plan {
    Plan {
        id: "ember-e2-eol".into(),
        revision: 3,
        description: "Ember E2 end of line, Larkspur Audio Works, Line 3".into(),
        sha256: "ab".repeat(32),
        source: PathBuf::from("<string>"),
        sample_rate_hz: 48_000,
        stimulus: StimulusSpec {
            start_hz: 20.0,
            stop_hz: 20_000.0,
            duration_s: 1.0,
            level_dbfs: -12.0,
            fade_in_s: 0.01,
            fade_out_s: 0.01,
            silence_before_s: 0.2,
            silence_after_s: 0.3,
        },
        analysis: AnalysisSpec {
            max_harmonic: 5,
            points_per_octave: 1,
            min_snr_db: 20.0,
        },
        channels: channels
            .iter()
            .enumerate()
            .map(|(i, n)| ChannelSpec {
                name: n.to_string(),
                output: i,
                input: i,
                correction: None,
            })
            .collect(),
        rig: RigSpec::Simulated { seed: 7 },
        checks,
        nominal_impedance_ohm: None,
        level_unit: tragus::plan::LevelUnit::DbFsPerFs,
        product: None,
        max_retests: None,
        product_earphone: None,
    }
}

/// A check on the named channels (empty: every channel).
pub fn check(id: &str, channels: &[&str], kind: CheckKind) -> CheckSpec {
    CheckSpec {
        id: id.into(),
        channels: channels.iter().map(|s| s.to_string()).collect(),
        kind,
    }
}

/// A valid measurement on [`GRID_HZ`] with the given response and no distortion data
/// (every distortion point null, harmonics 2 and 3 present but null).
pub fn measurement(name: &str, response_db: &[f64]) -> ChannelMeasurement {
    let n = GRID_HZ.len();
    assert_eq!(response_db.len(), n, "fixture response must be on GRID_HZ");
    let mut harmonics_db = BTreeMap::new();
    harmonics_db.insert("2".to_string(), vec![None; n]);
    harmonics_db.insert("3".to_string(), vec![None; n]);
    ChannelMeasurement {
        name: name.into(),
        unit: "dB FS/FS".into(),
        latency_samples: 134,
        latency_fractional_samples: 134.25,
        polarity: Polarity::Positive,
        snr_db: 71.34,
        peak_dbfs: -9.81,
        frequencies_hz: GRID_HZ.to_vec(),
        response_db: response_db.to_vec(),
        phase_deg: vec![0.0; n],
        thd_percent: vec![None; n],
        thd_iec_percent: vec![None; n],
        harmonics_db,
        rub_buzz_db: vec![None; n],
        retest_reasons: Vec::new(),
        fixture_response_db: None,
        correction: None,
        fine: FineSpectrum::default(),
    }
}

/// The same measurement made invalid by clipping.
pub fn clipped(mut m: ChannelMeasurement) -> ChannelMeasurement {
    m.retest_reasons
        .push(RetestReason::Clipping { n_samples: 17 });
    m
}

pub fn band(low_hz: f64, high_hz: f64) -> Band {
    Band { low_hz, high_hz }
}

pub fn line(points: &[(f64, f64)]) -> LimitLine {
    LimitLine {
        points: points.to_vec(),
        origin: "inline".into(),
    }
}

/// Response between flat ±`tol_db` lines over the whole grid, no smoothing.
pub fn flat_response(tol_db: f64) -> CheckKind {
    CheckKind::Response {
        upper: Some(line(&[(125.0, tol_db), (8000.0, tol_db)])),
        lower: Some(line(&[(125.0, -tol_db), (8000.0, -tol_db)])),
        smoothing_fraction: None,
        normalize: None,
    }
}

/// Assert two floats agree to `tol`.
#[track_caller]
pub fn close(got: Option<f64>, want: f64, tol: f64) {
    let g = got.expect("a margin");
    assert!((g - want).abs() <= tol, "got {g}, want {want} (tol {tol})");
}
