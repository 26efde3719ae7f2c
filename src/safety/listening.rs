//! The listening step's signal and its level at the reference (ear-equivalent) position.
//!
//! The operator listens to a slow exponential sweep (Farina 2000; the same generator as the
//! measurement's) over the step's band. Its A-weighted level at the reference position is
//! computed from the signal's spectrum and the unit's corrected response measured moments
//! before — the level the operator's ear would get with the unit in it:
//!
//! ```text
//! p²(f_k) = MS_k · (V/FS)² · |H(f_k)|²,   |H| = 20 µPa · 10^(H_dB/20)  (H in dB SPL/V)
//! L_A     = 10·lg( Σ_k p²(f_k) · 10^(A(f_k)/10) / (20 µPa)² )
//! ```
//!
//! with MS_k the signal's mean square in FFT bin k (one-sided, Parseval: Σ MS_k = mean
//! square of the signal) and A(f) the IEC 61672-1 A-weighting.

use super::weighting::{a_weighted_level_db, WeightingError};
use crate::calibration::P_REF_PA;
use crate::dsp::sweep::{SweepError, SweepParams};

/// Fades of the listening sweep, s (no click at either end).
pub const FADE_S: f64 = 0.02;

/// The listening sweep's parameters: `duration_s` from `band_hz.0` to `band_hz.1` at
/// `level_dbfs` peak, with [`FADE_S`] fades, after `silence_before_s`.
///
/// # Errors
/// A band or duration the sweep generator refuses.
pub fn listening_sweep(
    sample_rate_hz: u32,
    band_hz: (f64, f64),
    level_dbfs: f64,
    duration_s: f64,
    silence_before_s: f64,
) -> Result<SweepParams, SweepError> {
    SweepParams::synchronized(
        sample_rate_hz,
        band_hz.0,
        band_hz.1,
        duration_s,
        10f64.powf(level_dbfs / 20.0),
        FADE_S,
        FADE_S,
        silence_before_s,
    )
}

/// The listening sweep's samples (no silences), full scale.
///
/// # Errors
/// As [`listening_sweep`].
pub fn listening_signal(
    sample_rate_hz: u32,
    band_hz: (f64, f64),
    level_dbfs: f64,
    duration_s: f64,
) -> Result<Vec<f32>, SweepError> {
    let sweep = listening_sweep(sample_rate_hz, band_hz, level_dbfs, duration_s, 0.0)?;
    Ok(sweep.samples().into_iter().map(|v| v as f32).collect())
}

/// The A-weighted level, dB(A) re 20 µPa, at the reference position of `signal` (full
/// scale, at `sample_rate_hz`) played through `drive_v_peak_per_fs` into a unit whose
/// response at the reference position is `response` ((Hz, dB SPL/V) points, sorted by
/// frequency; linear in log frequency between them, held beyond the ends).
///
/// # Errors
/// An empty signal or response, or a spectrum with no power (see
/// [`a_weighted_level_db`]).
pub fn reference_level_dba(
    signal: &[f32],
    sample_rate_hz: u32,
    drive_v_peak_per_fs: f64,
    response: &[(f64, f64)],
) -> Result<f64, WeightingError> {
    let n = signal.len();
    if n < 2 || response.is_empty() {
        return Err(WeightingError::Empty);
    }
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let fft = planner.plan_fft_forward(n);
    let mut input: Vec<f64> = signal.iter().map(|&v| f64::from(v)).collect();
    let mut spectrum = fft.make_output_vec();
    // Lengths come from the same plan; an error here is a programmer error, reported as an
    // empty spectrum rather than a panic.
    if fft.process(&mut input, &mut spectrum).is_err() {
        return Err(WeightingError::Empty);
    }
    let df = f64::from(sample_rate_hz) / n as f64;
    let n2 = (n as f64) * (n as f64);
    let bins: Vec<(f64, f64)> = spectrum
        .iter()
        .enumerate()
        .skip(1)
        .map(|(k, c)| {
            let f = k as f64 * df;
            // One-sided: every bin but Nyquist stands for its mirror too.
            let two = if 2 * k == n { 1.0 } else { 2.0 };
            let ms_fs = two * c.norm_sqr() / n2;
            let h_pa_per_v = P_REF_PA * 10f64.powf(response_at(response, f) / 20.0);
            (f, ms_fs * (drive_v_peak_per_fs * h_pa_per_v).powi(2))
        })
        .collect();
    a_weighted_level_db(&bins)
}

/// `response` (Hz, dB) at `freq_hz`: linear in log frequency between points, held beyond
/// ([`crate::dsp::interp`]).
pub fn response_at(response: &[(f64, f64)], freq_hz: f64) -> f64 {
    crate::dsp::interp::interpolate_log_f_held(response, freq_hz)
}
