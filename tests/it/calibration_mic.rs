//! Microphone calibration from a simulated sound calibrator, its refusals, and the level
//! reference values it rests on.

use crate::support::common;

use tragus::calibration::tone::{measure_tone, read_tone, ToneError, ToneLimits};
use tragus::calibration::{calibrate_microphone, pressure_pa, spl_db, P_REF_PA};

const RATE_HZ: u32 = 48_000;

/// A calibrator tone as the input records it: `level_db_spl` at `freq_hz` through an input
/// of `fs_per_pa`, `duration_s` long, with a start phase that is not a zero crossing.
fn tone(level_db_spl: f64, freq_hz: f64, fs_per_pa: f64, duration_s: f64) -> Vec<f64> {
    // Independent of the library: 20 µPa written out here (ISO 1683).
    let p_rms = 20e-6 * 10f64.powf(level_db_spl / 20.0);
    let amp = fs_per_pa * p_rms * std::f64::consts::SQRT_2;
    let n = (duration_s * f64::from(RATE_HZ)) as usize;
    (0..n)
        .map(|i| {
            let t = i as f64 / f64::from(RATE_HZ);
            amp * (2.0 * std::f64::consts::PI * freq_hz * t + 0.7).sin()
        })
        .collect()
}

fn f32s(x: &[f64]) -> Vec<f32> {
    x.iter().map(|&v| v as f32).collect()
}

#[test]
fn reference_pressure_and_calibrator_levels() {
    // ISO 1683:2015 table 1: reference sound pressure in air 20 µPa.
    assert_eq!(P_REF_PA, 20e-6);
    // 1 Pa = 20·lg(1/20e-6) = 93.9794 dB (ISO 1683 reference); the 1e-4 dB tolerance is the
    // rounding of the published 93.979.
    assert!((spl_db(1.0) - 93.979).abs() < 1e-3, "{}", spl_db(1.0));
    assert!((spl_db(1.0) - 20.0 * (1.0f64 / 20e-6).log10()).abs() < 1e-12);
    // IEC 60942 calibrator nominal levels 94 and 114 dB are 1.0024 Pa and 10.024 Pa; to 4
    // significant digits (the precision quoted).
    assert!(
        (pressure_pa(94.0) - 1.002374).abs() < 1e-6,
        "{}",
        pressure_pa(94.0)
    );
    assert!((pressure_pa(114.0) - 10.02374).abs() < 1e-5);
    // 10 Pa = 113.979 dB (rounding of the published value).
    assert!((spl_db(10.0) - 113.979).abs() < 1e-3);
}

#[test]
fn simulated_calibrator_94_db_within_0_02_db() {
    // Truth: an input of −26 dBFS per Pa (0.0501 FS/Pa), seeded noise 60 dB below the tone.
    let truth = 10f64.powf(-26.0 / 20.0);
    let mut x = tone(94.0, 1000.0, truth, 3.0);
    let tone_rms = truth * pressure_pa(94.0);
    let noise = common::gaussian_noise(x.len(), tone_rms * 1e-3, 7);
    for (v, e) in x.iter_mut().zip(&noise) {
        *v += e + 0.002; // and a converter DC offset
    }
    let cal = calibrate_microphone(&f32s(&x), RATE_HZ, 94.0, 1000.0).expect("a good tone");
    let err_db = 20.0 * (cal.fs_per_pa / truth).log10();
    eprintln!("94 dB calibrator: sensitivity error {err_db:+.5} dB");
    // The acceptance: within 0.02 dB of the truth.
    assert!(err_db.abs() < 0.02, "error {err_db} dB");
    let r = cal.reading.expect("reading details");
    // Frequency within 0.1 Hz: the log-parabola on a Hann window is better than 0.1 bin and
    // the bin is 0.42 Hz here.
    assert!((r.measured_hz - 1000.0).abs() < 0.1, "{}", r.measured_hz);
    // SNR set to 60 dB above; the estimate within 3 dB (its own variance over 2.4 s).
    assert!((r.snr_db - 60.0).abs() < 3.0, "{}", r.snr_db);
}

#[test]
fn simulated_calibrator_114_db_at_250_hz_option() {
    // Options: a 114 dB calibrator at 250 Hz reads right when told so.
    let truth = 0.004;
    let x = tone(114.0, 250.0, truth, 2.0);
    let cal = calibrate_microphone(&f32s(&x), RATE_HZ, 114.0, 250.0).expect("a good tone");
    // Same 0.02 dB acceptance as at 94 dB.
    assert!((20.0 * (cal.fs_per_pa / truth).log10()).abs() < 0.02);
}

#[test]
fn refuses_a_250_hz_tone_when_1_khz_expected() {
    let x = tone(94.0, 250.0, 0.05, 2.0);
    let e = calibrate_microphone(&f32s(&x), RATE_HZ, 94.0, 1000.0).unwrap_err();
    assert!(matches!(e, ToneError::WrongFrequency { .. }), "{e:?}");
    let msg = e.to_string();
    assert!(msg.contains("not a calibrator tone at 1000 Hz"), "{msg}");
    assert!(msg.contains("250.0 Hz"), "{msg}");
}

#[test]
fn refuses_a_noisy_tone() {
    // Noise 10 dB below the tone: the reading cannot be trusted to 0.1 dB.
    let mut x = tone(94.0, 1000.0, 0.05, 2.0);
    let rms = 0.05 * pressure_pa(94.0);
    let noise = common::gaussian_noise(x.len(), rms * 0.316, 3);
    for (v, e) in x.iter_mut().zip(noise) {
        *v += e;
    }
    let e = calibrate_microphone(&f32s(&x), RATE_HZ, 94.0, 1000.0).unwrap_err();
    assert!(matches!(e, ToneError::Noisy { .. }), "{e:?}");
    assert!(
        e.to_string().contains("too noisy for a calibration: SNR"),
        "{e}"
    );
}

#[test]
fn refuses_silence() {
    let x = vec![0.0f32; 2 * RATE_HZ as usize];
    let e = calibrate_microphone(&x, RATE_HZ, 94.0, 1000.0).unwrap_err();
    assert!(matches!(e, ToneError::Silence { .. }), "{e:?}");
    assert!(
        e.to_string().contains("no tone: the recording is silent"),
        "{e}"
    );
}

#[test]
fn refuses_a_drifting_tone() {
    // The level rises 0.5 dB linearly over the reading (a calibrator being pushed on).
    let x = tone(94.0, 1000.0, 0.05, 2.0);
    let n = x.len() as f64;
    let drift: Vec<f64> = x
        .iter()
        .enumerate()
        .map(|(i, v)| v * 10f64.powf(0.5 * i as f64 / n / 20.0))
        .collect();
    let e = calibrate_microphone(&f32s(&drift), RATE_HZ, 94.0, 1000.0).unwrap_err();
    assert!(matches!(e, ToneError::Unstable { .. }), "{e:?}");
    assert!(e.to_string().contains("unstable tone"), "{e}");
    // The judged 80 % of a 0.5 dB ramp spans 0.4 dB; ten blocks' means span 0.36 dB.
    if let ToneError::Unstable { spread_db, .. } = e {
        assert!((spread_db - 0.36).abs() < 0.02, "{spread_db}");
    }
}

#[test]
fn refuses_a_distorted_tone_and_measures_thd() {
    // 5 % second and 2 % third harmonic: THD = √(0.05² + 0.02²) = 5.385 % (definition).
    let f = 1000.0;
    let n = 2 * RATE_HZ as usize;
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let w = 2.0 * std::f64::consts::PI * f * i as f64 / f64::from(RATE_HZ);
            0.1 * (w.sin() + 0.05 * (2.0 * w).sin() + 0.02 * (3.0 * w).sin())
        })
        .collect();
    let r = measure_tone(&f32s(&x), RATE_HZ).unwrap();
    // f32 quantisation and Hann leakage: 0.01 % absolute.
    assert!((r.thd_percent - 5.385).abs() < 0.01, "{}", r.thd_percent);
    let e = read_tone(&f32s(&x), RATE_HZ, &ToneLimits::calibrator(f)).unwrap_err();
    assert!(matches!(e, ToneError::Distorted { .. }), "{e:?}");
    assert!(e.to_string().contains("THD 5.39 %"), "{e}");
}

#[test]
fn refuses_a_clipped_recording_and_a_short_one() {
    let x: Vec<f32> = tone(94.0, 1000.0, 1.2, 2.0)
        .iter()
        .map(|v| v.clamp(-1.0, 1.0) as f32)
        .collect();
    let e = calibrate_microphone(&x, RATE_HZ, 94.0, 1000.0).unwrap_err();
    assert!(matches!(e, ToneError::Clipped { .. }), "{e:?}");
    let short = f32s(&tone(94.0, 1000.0, 0.05, 0.5));
    let e = calibrate_microphone(&short, RATE_HZ, 94.0, 1000.0).unwrap_err();
    assert!(
        e.to_string().contains("expected a recording of at least"),
        "{e}"
    );
}

#[test]
fn band_pass_shape() {
    use tragus::calibration::tone::band_pass_gain;
    // Flat ±1/6 octave, −6 dB half way down the skirt (raised cosine: 0.5 at its middle),
    // zero at and beyond ±1/3 octave.
    assert_eq!(band_pass_gain(1000.0 * 2f64.powf(1.0 / 6.0), 1000.0), 1.0);
    assert!((band_pass_gain(1000.0 * 2f64.powf(0.25), 1000.0) - 0.5).abs() < 1e-12);
    assert_eq!(band_pass_gain(1000.0 * 2f64.powf(-1.0 / 3.0), 1000.0), 0.0);
    assert_eq!(band_pass_gain(250.0, 1000.0), 0.0);
}
