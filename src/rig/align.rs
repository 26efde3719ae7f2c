//! Aligning a recording with the stimulus that was played: where in the recording stimulus
//! sample 0 arrived, and how fast that delay drifts (two free-running clocks).
//!
//! Used by the sound-card rig, whose input starts before its output and whose latency is
//! not known in advance (through a sound server it moves in steps from run to run). Plain
//! data in, plain numbers out, so it is tested without a sound card.
//!
//! Cross-correlation `r[k] = Σₙ ref[n] · rec[n + k]` for lags `k ≥ 0` is computed by FFT
//! (realfft, which does not normalise: the inverse is divided by the transform length once,
//! here), zero-padded to at least `len(ref) + len(rec)` so that it is linear, not circular.

use realfft::num_complex::Complex;
use realfft::RealFftPlanner;

/// Least normalised correlation at the peak (peak over the geometric mean of the reference's
/// energy and the recording's energy under it) for "the stimulus is in this recording".
/// Noise against a sweep of N samples gives about 1/√N per lag and under 5/√N at the
/// largest of 10⁵ lags (0.03 for N = 24000, Gaussian extreme value, common practice); an
/// exact copy gives 1, and a response filtered by an earphone in a coupler (tens of dB of
/// slope) still well above 0.2.
pub const MIN_COEFFICIENT: f64 = 0.2;

/// Where the reference was found in a recording.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Delay {
    /// Lag of the largest |correlation|, whole samples (recording index of reference sample 0).
    pub lag_samples: i64,
    /// The lag with parabolic sub-sample refinement of |correlation| around the peak.
    pub lag_fractional_samples: f64,
    /// Peak |correlation| over its rms across the searched lags (for logs).
    pub prominence: f64,
    /// Normalised |correlation| at the peak, 0–1 (see [`MIN_COEFFICIENT`]); NaN from
    /// [`peak_of`], which has no signals to normalise by.
    pub coefficient: f64,
    /// Sign of the correlation at the peak (negative: the recording is inverted).
    pub inverted: bool,
}

impl Delay {
    /// True when the reference is clearly in the recording (see [`MIN_COEFFICIENT`]).
    pub fn is_confident(&self) -> bool {
        self.coefficient >= MIN_COEFFICIENT
    }
}

/// `r[k] = Σₙ reference[n] · recorded[n + k]` for `k = 0..=max_lag` (zero where the
/// recording ends), by FFT.
pub fn cross_correlation(reference: &[f32], recorded: &[f32], max_lag: usize) -> Vec<f64> {
    cross_correlation_upsampled(reference, recorded, max_lag, 1)
}

/// The correlation at lags `j / up` for `j = 0..=max_lag·up`: the cross-spectrum is
/// zero-padded `up` times before the inverse transform (band-limited interpolation), so a
/// parabola through the three samples around the peak is then accurate to a small fraction
/// of `1/up` sample even on the sharp peak of a high-frequency segment.
pub fn cross_correlation_upsampled(
    reference: &[f32],
    recorded: &[f32],
    max_lag: usize,
    up: usize,
) -> Vec<f64> {
    let up = up.max(1);
    if reference.is_empty() || recorded.is_empty() {
        return vec![0.0; max_lag * up + 1];
    }
    let n_fft = (reference.len() + recorded.len()).next_power_of_two();
    let mut planner = RealFftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(n_fft);
    let inv = planner.plan_fft_inverse(n_fft * up);
    let spectrum = |x: &[f32]| -> Vec<Complex<f64>> {
        let mut buf = fwd.make_input_vec();
        for (b, &v) in buf.iter_mut().zip(x) {
            *b = f64::from(v);
        }
        let mut out = fwd.make_output_vec();
        // Lengths come from the plan itself, so the transform cannot fail.
        fwd.process(&mut buf, &mut out)
            .expect("buffers sized by the plan");
        out
    };
    let a = spectrum(reference);
    let b = spectrum(recorded);
    // Correlation theorem: r = IFFT(conj(A)·B) (the lag of `recorded` against `reference`).
    let mut prod = inv.make_input_vec();
    for (p, (x, y)) in prod.iter_mut().zip(a.iter().zip(&b)) {
        *p = x.conj() * y;
    }
    if up > 1 {
        // The old Nyquist bin stands for both ±fs/2 halves of the padded spectrum.
        prod[n_fft / 2] *= 0.5;
    }
    // A real signal's DC and Nyquist bins are real; rounding may leave a tiny imaginary
    // part that realfft rejects.
    prod[0].im = 0.0;
    if let Some(last) = prod.last_mut() {
        last.im = 0.0;
    }
    let mut r = inv.make_output_vec();
    inv.process(&mut prod, &mut r)
        .expect("buffers sized by the plan");
    let scale = 1.0 / n_fft as f64;
    (0..=max_lag * up)
        .map(|k| if k < r.len() { r[k] * scale } else { 0.0 })
        .collect()
}

/// Find `reference` in `recorded` at a lag between 0 and `max_lag`; `None` when the
/// correlation is zero everywhere (silence).
pub fn find_delay(reference: &[f32], recorded: &[f32], max_lag: usize) -> Option<Delay> {
    let r = cross_correlation(reference, recorded, max_lag);
    let mut d = peak_of(&r)?;
    d.coefficient = coefficient(reference, recorded, &r, d.lag_samples as usize);
    Some(d)
}

/// Normalised |correlation| at lag `k`: |r[k]| / √(Σ ref² · Σ rec[k .. k + len(ref)]²).
pub fn coefficient(reference: &[f32], recorded: &[f32], r: &[f64], k: usize) -> f64 {
    let e_ref: f64 = reference.iter().map(|&v| f64::from(v).powi(2)).sum();
    let end = (k + reference.len()).min(recorded.len());
    let e_rec: f64 = recorded[k.min(end)..end]
        .iter()
        .map(|&v| f64::from(v).powi(2))
        .sum();
    let den = (e_ref * e_rec).sqrt();
    if den > 0.0 {
        r[k].abs() / den
    } else {
        0.0
    }
}

/// The largest |r| of a correlation with its prominence and sub-sample refinement.
pub fn peak_of(r: &[f64]) -> Option<Delay> {
    let (k, peak) =
        r.iter()
            .enumerate()
            .map(|(k, v)| (k, v.abs()))
            .fold(
                (0, 0.0f64),
                |best, cur| if cur.1 > best.1 { cur } else { best },
            );
    if peak.is_nan() || peak <= 0.0 {
        return None;
    }
    let rms = (r.iter().map(|v| v * v).sum::<f64>() / r.len() as f64).sqrt();
    // Parabola through the three |r| around the peak (common practice for peak picking);
    // exact for a symmetric peak centred on a sample.
    let frac = if k > 0 && k + 1 < r.len() {
        let (ym, y0, yp) = (r[k - 1].abs(), peak, r[k + 1].abs());
        let den = ym - 2.0 * y0 + yp;
        if den < 0.0 {
            (0.5 * (ym - yp) / den).clamp(-0.5, 0.5)
        } else {
            0.0
        }
    } else {
        0.0
    };
    Some(Delay {
        lag_samples: k as i64,
        lag_fractional_samples: k as f64 + frac,
        prominence: peak / rms,
        coefficient: f64::NAN,
        inverted: r[k] < 0.0,
    })
}

/// First and last sample whose magnitude exceeds 10⁻⁶ of the peak (the sweep between its
/// leading and trailing silences); `None` for an all-zero signal.
pub fn active_span(x: &[f32]) -> Option<(usize, usize)> {
    let peak = x.iter().fold(0.0f32, |m, v| m.max(v.abs()));
    if peak.is_nan() || peak <= 0.0 {
        return None;
    }
    let floor = peak * 1e-6;
    let first = x.iter().position(|v| v.abs() > floor)?;
    let last = x.iter().rposition(|v| v.abs() > floor)?;
    Some((first, last))
}

/// Least normalised correlation (peak over the geometric mean of the two energies) for a
/// segment of an electrical loopback to count as found: a bit-exact digital loopback gives
/// 1, a converter loopback at 60 dB SNR above 0.99, a 2048-sample segment at 16 kHz drifting
/// 100 ppm about 0.99; a segment half lost to a dropout about 0.7.
pub const MIN_SEGMENT_COEFFICIENT: f64 = 0.8;

/// Interpolation factor of the segment correlation (1/16 sample grid).
const SEGMENT_UPSAMPLING: usize = 16;

/// Delay of each `segments` range `[a, b)` of `reference` in `recorded`, fractional samples
/// (recording index of reference sample 0 as seen from that segment), searched within
/// ±`search` samples of `lag`; `None` for a segment not found (out of the recording, or a
/// normalised correlation below [`MIN_SEGMENT_COEFFICIENT`]).
pub fn segment_delays(
    reference: &[f32],
    recorded: &[f32],
    lag: i64,
    segments: &[(usize, usize)],
    search: usize,
) -> Vec<Option<f64>> {
    segments
        .iter()
        .map(|&(a, b)| {
            if lag < 0 || b <= a || b > reference.len() {
                return None;
            }
            let start = (lag as usize + a).checked_sub(search)?;
            let end = lag as usize + b + search;
            if end > recorded.len() {
                return None;
            }
            let seg = &reference[a..b];
            let window = &recorded[start..end];
            let r = cross_correlation(seg, window, 2 * search);
            let d = peak_of(&r)?;
            let c = coefficient(seg, window, &r, d.lag_samples as usize);
            if d.inverted || c.is_nan() || c < MIN_SEGMENT_COEFFICIENT {
                return None;
            }
            let fine = cross_correlation_upsampled(seg, window, 2 * search, SEGMENT_UPSAMPLING);
            let f = peak_of(&fine)?;
            let k = f.lag_fractional_samples / SEGMENT_UPSAMPLING as f64;
            Some(k - search as f64 + lag as f64)
        })
        .collect()
}

/// `n` segments of at most `max_len` samples spread evenly over `[a, b)` (short segments
/// keep a drifting clock from smearing one segment's correlation); empty when `[a, b)` is
/// shorter than `n` × 64 samples.
pub fn spread_segments(a: usize, b: usize, n: usize, max_len: usize) -> Vec<(usize, usize)> {
    let span = b.saturating_sub(a);
    if n == 0 || span < n * 64 {
        return Vec::new();
    }
    let len = (span / n).min(max_len);
    let step = if n > 1 { (span - len) / (n - 1) } else { 0 };
    (0..n).map(|i| (a + i * step, a + i * step + len)).collect()
}

/// Straight-line fit (least squares) of delay against segment centre: the slope in ppm
/// (positive: the recording falls further behind, i.e. its clock runs fast against the
/// reference's) and the largest residual, samples (a jump means samples were lost or
/// repeated mid-sweep). `None` with fewer than two points.
pub fn fit_drift(points: &[(f64, f64)]) -> Option<(f64, f64)> {
    if points.len() < 2 {
        return None;
    }
    let n = points.len() as f64;
    let mx = points.iter().map(|p| p.0).sum::<f64>() / n;
    let my = points.iter().map(|p| p.1).sum::<f64>() / n;
    let sxx: f64 = points.iter().map(|p| (p.0 - mx).powi(2)).sum();
    if sxx.is_nan() || sxx <= 0.0 {
        return None;
    }
    let sxy: f64 = points.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
    let slope = sxy / sxx;
    let residual = points
        .iter()
        .map(|p| (p.1 - my - slope * (p.0 - mx)).abs())
        .fold(0.0, f64::max);
    Some((slope * 1e6, residual))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exponential sweep by its closed-form phase (Farina 2000, AES preprint 5093, eq. 2):
    /// φ(t) = 2π f₁ L (e^{t/L} − 1), L = T / ln(f₂/f₁); evaluated at any real time, so a
    /// recording made with another clock is exact, not interpolated.
    fn sweep_at(t_s: f64, f1_hz: f64, f2_hz: f64, dur_s: f64) -> f64 {
        if !(0.0..dur_s).contains(&t_s) {
            return 0.0;
        }
        let l = dur_s / (f2_hz / f1_hz).ln();
        (2.0 * std::f64::consts::PI * f1_hz * l * ((t_s / l).exp() - 1.0)).sin()
    }

    fn signal(n: usize, fs: f64, delay: f64, clock: f64, gain: f64) -> Vec<f32> {
        (0..n)
            .map(|k| (gain * sweep_at((k as f64 - delay) / fs * clock, 20.0, 20000.0, 0.5)) as f32)
            .collect()
    }

    #[test]
    fn finds_a_known_integer_delay_and_inversion() {
        let fs = 48000.0;
        let reference = signal(30000, fs, 0.0, 1.0, 0.5);
        let recorded = signal(40000, fs, 1234.0, 1.0, -0.25);
        let d = find_delay(&reference, &recorded, 5000).unwrap();
        // An integer delay of an exact copy: the peak sits on that sample, symmetric, so
        // the parabola adds nothing beyond rounding (1e-6 sample).
        assert_eq!(d.lag_samples, 1234);
        assert!((d.lag_fractional_samples - 1234.0).abs() < 1e-6, "{d:?}");
        assert!(d.inverted);
        assert!(d.is_confident(), "{d:?}");
    }

    #[test]
    fn silence_and_noise_are_not_found() {
        let fs = 48000.0;
        let reference = signal(30000, fs, 0.0, 1.0, 0.5);
        assert!(find_delay(&reference, &vec![0.0; 40000], 5000).is_none());
        // Deterministic pseudo-noise (a 64-bit LCG, Knuth's MMIX constants).
        let mut s: u64 = 1;
        let noise: Vec<f32> = (0..40000)
            .map(|_| {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                ((s >> 40) as f32 / (1u64 << 24) as f32) - 0.5
            })
            .collect();
        let d = find_delay(&reference, &noise, 5000).unwrap();
        assert!(!d.is_confident(), "{d:?}");
    }

    #[test]
    fn drift_of_a_resampled_recording_is_measured() {
        // The recording's clock runs 100 ppm slow against the reference (the default
        // bound): recording sample k holds reference time (k − D)(1 − ε)/fs, so reference
        // sample n arrives at D + n/(1 − ε) and the delay grows by ε/(1 − ε) ≈ +100.01 ppm.
        let fs = 48000.0;
        let eps = 100e-6;
        let reference = signal(30000, fs, 0.0, 1.0, 0.5);
        let recorded = signal(40000, fs, 777.0, 1.0 - eps, 0.5);
        let d = find_delay(&reference, &recorded, 5000).unwrap();
        // Eight segments of the 0.5 s sweep from 1 kHz (t = L ln(f/f1); lower, a segment of a
        // few cycles has a correlation peak too broad to place to a tenth of a sample)
        let l = 0.5 / (1000.0f64).ln();
        let a = (l * (1000.0f64 / 20.0).ln() * fs) as usize;
        // ... to 12 kHz (fs/4: nearer Nyquist a fractional delay makes the correlation's
        // side lobes as high as its peak).
        let b = (l * (12000.0f64 / 20.0).ln() * fs) as usize;
        let segs = spread_segments(a, b, 8, 2048);
        let points: Vec<(f64, f64)> =
            segment_delays(&reference, &recorded, d.lag_samples, &segs, 64)
                .into_iter()
                .zip(&segs)
                .map(|(dl, s)| ((s.0 + s.1) as f64 / 2.0, dl.unwrap()))
                .collect();
        let (ppm, residual) = fit_drift(&points).unwrap();
        let want = eps / (1.0 - eps) * 1e6;
        // A segment cut out of a longer sweep correlates a little asymmetrically with the
        // recording (its neighbours leak in), which biases each delay by a few hundredths of
        // a sample; over the ~9000 samples spanned that is a few ppm (measured 1–2 ppm),
        // against the 100 ppm bound.
        assert!((ppm - want).abs() < 5.0, "{ppm} ppm, want {want}");
        assert!(residual < 0.1, "{residual}");
        // Same clock: no drift, no residual.
        let same = signal(40000, fs, 777.0, 1.0, 0.5);
        let points: Vec<(f64, f64)> = segment_delays(&reference, &same, 777, &segs, 64)
            .into_iter()
            .zip(&segs)
            .map(|(dl, s)| ((s.0 + s.1) as f64 / 2.0, dl.unwrap()))
            .collect();
        let (ppm0, res0) = fit_drift(&points).unwrap();
        // Same few-ppm bias as above (measured −2.1 ppm, residual 0.017 sample).
        assert!(ppm0.abs() < 5.0 && res0 < 0.1, "{ppm0} {res0}");
    }

    #[test]
    fn a_dropout_mid_sweep_is_a_missing_segment() {
        // 1024 samples lost in the third segment (a server dropout): that segment no
        // longer correlates at the expected delay (its coefficient falls below 0.9) or
        // is found shifted, and the later one is shifted by 1024 samples.
        let fs = 48000.0;
        let reference = signal(30000, fs, 0.0, 1.0, 0.5);
        let mut recorded = signal(40000, fs, 500.0, 1.0, 0.5);
        recorded.drain(15000..16024);
        recorded.extend(std::iter::repeat_n(0.0, 1024));
        let segs = [(3000, 8000), (8000, 13000), (13000, 18000), (18000, 23000)];
        let delays = segment_delays(&reference, &recorded, 500, &segs, 64);
        assert!(delays[0].is_some() && delays[1].is_some(), "{delays:?}");
        // ±64 searched, the jump is 1024: the later segments are not found.
        assert!(delays[2].is_none() && delays[3].is_none(), "{delays:?}");
    }
}
