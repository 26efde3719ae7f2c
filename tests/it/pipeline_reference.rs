//! End-to-end checks of the whole measurement chain against outside references:
//! `tragus stimulus` → a known system applied here → capture WAV → `tragus analyze`.

use crate::support::common;

use common::*;
use std::collections::HashMap;

fn plan() -> std::path::PathBuf {
    root().join("tests/data/e2e/sweep-1s.yaml")
}

/// Coefficients from tests/reference/filters.csv (made by scipy; see its README).
fn reference_filters() -> HashMap<String, [f64; 5]> {
    let text = std::fs::read_to_string(root().join("tests/reference/filters.csv")).unwrap();
    let mut out = HashMap::new();
    for line in text.lines().skip(1).filter(|l| !l.trim().is_empty()) {
        let f: Vec<&str> = line.split(',').collect();
        let v: Vec<f64> = f[1..6].iter().map(|s| s.trim().parse().unwrap()).collect();
        out.insert(f[0].to_string(), [v[0], v[1], v[2], v[3], v[4]]);
    }
    out
}

/// scipy.signal.freqz magnitude (dB) per filter at the grid frequencies.
fn reference_responses() -> HashMap<String, Vec<(f64, f64)>> {
    let text = std::fs::read_to_string(root().join("tests/reference/responses.csv")).unwrap();
    let mut out: HashMap<String, Vec<(f64, f64)>> = HashMap::new();
    for line in text.lines().skip(1).filter(|l| !l.trim().is_empty()) {
        let f: Vec<&str> = line.split(',').collect();
        out.entry(f[0].to_string())
            .or_default()
            .push((f[1].parse().unwrap(), f[2].parse().unwrap()));
    }
    out
}

/// Filter the stimulus, add noise at 60 dB SNR re the sweep's rms, analyse, and return
/// the worst |measured − scipy| from 50 Hz to 16 kHz.
fn worst_error_db(name: &str, seed: u64) -> (f64, f64) {
    let dir = tempfile::tempdir().unwrap();
    let (rate, stim) = stimulus_of(&plan(), dir.path());
    let coeffs = reference_filters()[name];
    let mut y = biquad(coeffs, &stim[0]);
    let s0 = (0.1 * 48_000.0) as usize;
    let sweep_rms = rms(&y[s0..s0 + 48_000]);
    let noise = gaussian_noise(y.len(), sweep_rms * 1e-3, seed);
    for (v, n) in y.iter_mut().zip(noise) {
        *v += n as f32;
    }
    let cap = dir.path().join("capture.wav");
    write_f32_wav(&cap, rate, &[y]);
    let (code, json) = analyze(&plan(), &cap);
    assert_eq!(code, 0, "analysis verdict: {}", json["verdict"]);
    let ch = &json["channels"][0];
    let freqs: Vec<f64> = serde_json::from_value(ch["frequencies_hz"].clone()).unwrap();
    let resp: Vec<f64> = serde_json::from_value(ch["response_db"].clone()).unwrap();
    let reference = &reference_responses()[name];
    // The grid itself is an outside contract: scipy's script computed the same IEC 61260-1
    // midbands independently.
    assert_eq!(freqs.len(), reference.len(), "grid length");
    let (mut worst, mut at) = (0.0f64, 0.0);
    for ((f, r), (rf, rdb)) in freqs.iter().zip(&resp).zip(reference) {
        assert!((f / rf - 1.0).abs() < 1e-9, "grid {f} vs reference {rf}");
        if *f >= 50.0 && *f <= 16_000.0 && (r - rdb).abs() > worst {
            worst = (r - rdb).abs();
            at = *f;
        }
    }
    (worst, at)
}

// RBJ audio-EQ cookbook peaking filter (+6 dB, 2 kHz, Q 1.41), response by
// scipy.signal.freqz: the bar is 0.02 dB from 50 Hz to 16 kHz at 60 dB SNR.
#[test]
fn peaking_biquad_response_within_two_hundredths_db() {
    let (worst, at) = worst_error_db("peaking_6db_2khz_q1p41", 11);
    eprintln!("{worst:.4} dB worst at {at:.0} Hz");
    assert!(worst < 0.02, "worst error {worst:.4} dB at {at:.0} Hz");
}

// Second-order Butterworth high-pass at 100 Hz (scipy.signal.butter, bilinear), response
// by scipy.signal.freqz; same bar.
#[test]
fn butterworth_highpass_response_within_two_hundredths_db() {
    let (worst, at) = worst_error_db("butter2_hp_100hz", 12);
    eprintln!("{worst:.4} dB worst at {at:.0} Hz");
    assert!(worst < 0.02, "worst error {worst:.4} dB at {at:.0} Hz");
}

// IEC 61260-1:2014 midbands computed by tests/reference/make_filters.py from the standard's
// formula (odd b: f_r·G^(x/b); even b: f_r·G^((2x+1)/(2b))), against ours.
#[test]
fn band_midbands_match_the_standard_formula_from_the_reference_script() {
    let text = std::fs::read_to_string(root().join("tests/reference/bands.csv")).unwrap();
    let mut n = 0;
    for line in text.lines().skip(1).filter(|l| !l.trim().is_empty()) {
        let f: Vec<&str> = line.split(',').collect();
        let b: u32 = f[0].parse().unwrap();
        let x: i32 = f[1].parse().unwrap();
        let (fm, lo, hi): (f64, f64, f64) = (
            f[2].parse().unwrap(),
            f[3].parse().unwrap(),
            f[4].parse().unwrap(),
        );
        let got = tragus::dsp::bands::midband_hz(x, b);
        let (glo, ghi) = tragus::dsp::bands::band_edges_hz(got, b);
        // Both sides evaluate the same closed form in f64: agreement to rounding (1e-12).
        assert!((got / fm - 1.0).abs() < 1e-12, "b={b} x={x}: {got} vs {fm}");
        assert!((glo / lo - 1.0).abs() < 1e-12 && (ghi / hi - 1.0).abs() < 1e-12);
        n += 1;
    }
    assert_eq!(n, 272, "31 third-octave and 241 1/24-octave bands");
}
