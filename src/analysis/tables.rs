//! What an [`super::Analyzer`] computes once per stimulus: transform plans, the inverse
//! spectra of the stimulus, windows and the grid. Immutable once built and shared (behind an
//! `Arc`) by every analyzer cloned from the first, one per thread of a batch.
//!
//! The spectra are held split (real and imaginary parts apart, see [`crate::dsp::fft`]) so
//! that the per-bin products of the analysis are element-wise loops.

use crate::dsp::bands;
use crate::dsp::fft::RealFft;
use crate::dsp::sweep::{Stimulus, SweepParams, HARMONIC_TOP_FRACTION_OF_NYQUIST};
use realfft::num_complex::Complex;
use std::f64::consts::PI;

pub(super) type C64 = Complex<f64>;

/// Resolution of the fine linear spectrum, Hz: fine enough for 1/6-octave smoothing at
/// 20 Hz (a band ≈ 2.3 Hz wide) to average several bins.
const FINE_RESOLUTION_HZ: f64 = 0.5;

/// Fraction of the gap to the second harmonic's impulse response used as the linear
/// window's lead-in.
const LINEAR_LEAD_FRACTION: f64 = 0.2;

/// Linear window tail after the peak, s: long enough for an earphone in a coupler and for
/// the f1/2 band-limit high-pass to ring out (τ ≈ 22 ms at 10 Hz, so −58 dB by 150 ms), short
/// enough not to gather noise (at 60 dB SNR the HF error grows with the tail length).
const LINEAR_TAIL_S: f64 = 0.15;

/// Fraction of each harmonic's gap to the next higher harmonic used as its lead-in.
const HARMONIC_LEAD_FRACTION: f64 = 0.2;

/// One harmonic window, positions in samples relative to the linear peak.
#[derive(Debug, Clone)]
pub(super) struct HarmonicWindow {
    pub order: usize,
    /// Centre (the harmonic's time zero) relative to the linear peak, samples (negative).
    pub centre: f64,
    /// Samples before the integer centre.
    pub lead: usize,
    /// Samples from the integer centre onwards.
    pub tail: usize,
    /// Window weights, `lead + tail` of them (half-Hann fades, flat between).
    pub weights: Vec<f64>,
}

/// A complex spectrum held split, one array per part.
#[derive(Debug, Clone, Default)]
pub(super) struct Split<T> {
    pub re: Vec<T>,
    pub im: Vec<T>,
}

impl Split<f32> {
    /// Rounded from an f64 spectrum (the capture-length transforms run in f32).
    fn from_c64(v: &[C64]) -> Self {
        Split {
            re: v.iter().map(|c| c.re as f32).collect(),
            im: v.iter().map(|c| c.im as f32).collect(),
        }
    }
}

/// Window of `lead + tail` samples: half-Hann fade-in over the first half of the lead-in,
/// fade-out over the last third of the tail, flat around the centre.
fn window_weights(lead: usize, tail: usize) -> Vec<f64> {
    let len = lead + tail;
    let fade_in = (lead / 2).max(1);
    let fade_out = (tail / 3).max(1);
    (0..len)
        .map(|i| {
            if i < fade_in {
                ramp(i as f64 / fade_in as f64)
            } else if i + fade_out >= len {
                ramp((len - 1 - i) as f64 / fade_out as f64)
            } else {
                1.0
            }
        })
        .collect()
}

/// Smallest FFT length ≥ `n` whose only prime factors are 2, 3 and 5 (fast in RustFFT).
pub(super) fn good_fft_len(n: usize) -> usize {
    let mut m = n.max(2);
    loop {
        let mut k = m;
        for p in [2, 3, 5] {
            while k.is_multiple_of(p) {
                k /= p;
            }
        }
        if k == 1 {
            return m;
        }
        m += 1;
    }
}

/// Raised-cosine ramp: 0 at `u ≤ 0`, 1 at `u ≥ 1`.
fn ramp(u: f64) -> f64 {
    if u <= 0.0 {
        0.0
    } else if u >= 1.0 {
        1.0
    } else {
        0.5 * (1.0 - (PI * u).cos())
    }
}

/// Upper band limit: 1 up to f2, raised cosine to 0 one octave above f2 (or at Nyquist,
/// whichever comes first). Zero-phase: its ringing is as short as the ramp is wide (kHz).
fn top_weight(f_hz: f64, f2_hz: f64, nyquist_hz: f64) -> f64 {
    if f_hz <= f2_hz {
        return 1.0;
    }
    let top = (2.0 * f2_hz).min(nyquist_hz);
    if top <= f2_hz {
        return 0.0;
    }
    ramp((top - f_hz) / (top - f2_hz))
}

/// Lower band limit: a second-order Butterworth high-pass at f1/2, evaluated from its
/// analog prototype H(s) = s²/(s² + √2·ωc·s + ωc²). A zero-phase ramp this low would ring
/// for ~100 ms on both sides of the peak, into the lead-in the window cannot afford; a
/// minimum-phase filter rings only after the peak, inside the long tail, and is divided out
/// of the response afterwards.
pub(super) fn low_highpass(f_hz: f64, f1_hz: f64) -> C64 {
    let fc = 0.5 * f1_hz;
    let s = C64::new(0.0, f_hz / fc);
    s * s / (s * s + s * std::f64::consts::SQRT_2 + 1.0)
}

/// Analytic spectrum of the synchronized sweep sin(2π f1 L e^{t/L}) (Novak et al. 2015,
/// eq. 31, stationary-phase approximation): X(f) = ½√(L/f)·exp{j2πfL[1 − ln(f/f1)] − jπ/4}.
/// This is for the e^{−j2πft} forward transform (the one RustFFT computes).
pub(super) fn analytic_sweep_spectrum(f_hz: f64, sweep: &SweepParams) -> C64 {
    let l = sweep.l_s;
    let mag = 0.5 * (l / f_hz).sqrt();
    let phase = 2.0 * PI * f_hz * l * (1.0 - (f_hz / sweep.f1_hz).ln()) - PI / 4.0;
    C64::from_polar(mag, phase)
}

/// Everything built once per stimulus (module doc).
pub(super) struct Tables {
    pub sweep: SweepParams,
    pub fs_hz: f64,
    pub n_stimulus: usize,
    pub max_harmonic: usize,
    pub min_snr_db: f64,
    pub grid_hz: Vec<f64>,

    /// Capture-length transform (f32).
    pub n_fft: usize,
    pub fft: RealFft<f32>,
    /// Spectrum of the stimulus as played.
    pub x_spec: Split<f32>,
    /// Band-limited inverse of `x_spec`.
    pub x_inv: Split<f32>,
    /// Analytic inverse spectrum for the harmonics (band-limited, start delay included).
    pub x_inv_analytic: Split<f32>,
    /// Analytic forward spectrum matching `x_inv_analytic` (its reciprocal where defined).
    pub x_fwd_analytic: Split<f32>,
    /// Band weight of the harmonic analysis (f1/2…f1 ramp up, 0.9…1.0 Nyquist ramp down).
    pub harm_band: Vec<f32>,
    /// Division by the low-frequency band limit, to subtract the true linear output.
    pub lin_comp: Split<f32>,

    pub lin_lead: usize,
    pub lin_tail: usize,
    pub lin_window: Vec<f64>,
    /// Fine-spectrum transform (f64), ≈ [`FINE_RESOLUTION_HZ`] per bin.
    pub n_fine: usize,
    pub fft_fine: RealFft<f64>,
    /// 1/|B_hp|² per fine bin (0 where the high-pass is exactly 0), to divide it out.
    pub fine_inv_hp_power: Vec<f64>,

    pub harmonics: Vec<HarmonicWindow>,
    /// Harmonic-window transform (f64).
    pub n_harm: usize,
    pub fft_harm: RealFft<f64>,
}

impl Tables {
    /// Build for a stimulus (the body of `Analyzer::with_options`).
    pub fn new(
        stimulus: &Stimulus,
        max_harmonic: usize,
        points_per_octave: u32,
        min_snr_db: f64,
    ) -> Tables {
        let sweep = stimulus.sweep;
        let fs = f64::from(stimulus.sample_rate_hz);
        let nyq = 0.5 * fs;
        let n_stimulus = stimulus.n_samples();
        let max_harmonic = max_harmonic.max(1);

        let lead_h = |n: usize| sweep.harmonic_lead_s(n) * fs;
        let gap_to_h2 = lead_h(2);
        let lin_lead = (LINEAR_LEAD_FRACTION * gap_to_h2).round() as usize;
        let lin_tail = (LINEAR_TAIL_S * fs).round() as usize;

        // Harmonic windows partition the time before the linear peak: harmonic n owns the
        // span between harmonic n+1's tail and harmonic n−1's lead-in.
        let mut harmonics = Vec::new();
        for n in 2..=max_harmonic {
            let centre = -lead_h(n);
            let gap_above = lead_h(n + 1) - lead_h(n); // to harmonic n+1 (earlier)
            let gap_below = lead_h(n) - lead_h(n - 1); // to harmonic n−1 (later)
            let lead = (HARMONIC_LEAD_FRACTION * gap_above).floor() as usize;
            let next_lead = if n == 2 {
                lin_lead as f64
            } else {
                HARMONIC_LEAD_FRACTION * gap_below
            };
            let tail = (gap_below - next_lead).floor().max(1.0) as usize;
            harmonics.push(HarmonicWindow {
                order: n,
                centre,
                lead,
                tail,
                weights: window_weights(lead, tail),
            });
        }
        let max_harm_len = harmonics.iter().map(|h| h.lead + h.tail).max().unwrap_or(0);

        // The circular deconvolution buffer must hold the capture and keep the harmonics
        // (at negative times, wrapped to the end) clear of the linear tail.
        let harm_span = lead_h(max_harmonic + 1).ceil() as usize;
        let n_fft = good_fft_len(n_stimulus.max(harm_span + lin_tail + lin_lead));
        let fft = RealFft::<f32>::new(n_fft);
        let n_bins = n_fft / 2 + 1;
        let df = fs / n_fft as f64;

        // Stimulus spectrum in f64 (same values, to the bit, as the `realfft` crate gives).
        let fft64 = RealFft::<f64>::new(n_fft);
        let mut time = fft64.make_time();
        for (i, &s) in stimulus.driven_signal().iter().enumerate().take(n_fft) {
            crate::dsp::fft::set(&mut time, i, f64::from(s));
        }
        let (mut xr, mut xi) = (fft64.make_bins(), fft64.make_bins());
        let mut ws = fft64.make_scratch();
        fft64.forward(&time, &mut xr, &mut xi, &mut ws);
        let x_spec: Vec<C64> = xr.iter().zip(&xi).map(|(&r, &i)| C64::new(r, i)).collect();

        let peak_power = x_spec.iter().map(|c| c.norm_sqr()).fold(0.0, f64::max);
        let inv_n = 1.0 / n_fft as f64;
        let x_inv: Vec<C64> = (0..n_bins)
            .map(|k| {
                let f = k as f64 * df;
                let top = top_weight(f, sweep.f2_hz, nyq);
                if top == 0.0 || k == 0 {
                    C64::new(0.0, 0.0)
                } else {
                    // Outside the band the stimulus has almost no energy, so a plain 1/X
                    // would amplify whatever the capture holds there (harmonics, noise) by
                    // orders of magnitude: the regularisation grows as the band weight
                    // falls. Inside the band it is zero and the division exact; the tiny
                    // term only guards a division by an exact zero.
                    // Below f1/2 the high-pass alone would let 1/X grow as X vanishes, so
                    // the regularisation also rises between f1/2 and f1/4.
                    let low = 1.0 - ramp((f - 0.03125 * sweep.f1_hz) / (0.03125 * sweep.f1_hz));
                    let eps = (1.0 - top + low) * peak_power + 1e-20 * peak_power;
                    x_spec[k].conj() * low_highpass(f, sweep.f1_hz) * (top * inv_n)
                        / (x_spec[k].norm_sqr() + eps)
                }
            })
            .collect();

        // Analytic inverse for the harmonics: the sweep's own spectrum continued above f2,
        // for the played amplitude and start sample, tapered below f1 and near Nyquist.
        let s0 = sweep.start_sample as f64;
        let top = HARMONIC_TOP_FRACTION_OF_NYQUIST * nyq;
        let scale = fs * sweep.amplitude;
        let mut x_inv_analytic = vec![C64::new(0.0, 0.0); n_bins];
        let mut x_fwd_analytic = vec![C64::new(0.0, 0.0); n_bins];
        let mut harm_band = vec![0.0; n_bins];
        // Below f1/4 the linear part is not subtracted: nothing there is analysed, and the
        // division by the high-pass would grow without bound.
        let lin_comp: Vec<C64> = (0..n_bins)
            .map(|k| {
                let f = k as f64 * df;
                if f >= 0.25 * sweep.f1_hz {
                    low_highpass(f, sweep.f1_hz).inv()
                } else {
                    C64::new(0.0, 0.0)
                }
            })
            .collect();
        for k in 1..n_bins {
            let f = k as f64 * df;
            let w_low = ramp((f - 0.5 * sweep.f1_hz) / (0.5 * sweep.f1_hz));
            let w_high = ramp((nyq - f) / (nyq - top));
            let w = w_low * w_high;
            if w == 0.0 {
                continue;
            }
            let delay = C64::from_polar(1.0, -2.0 * PI * f * s0 / fs);
            let x = analytic_sweep_spectrum(f, &sweep) * delay * scale;
            x_fwd_analytic[k] = x;
            x_inv_analytic[k] = (w * inv_n) / x;
            harm_band[k] = w * inv_n;
        }

        let lin_len = lin_lead + lin_tail;
        let lin_window = window_weights(lin_lead, lin_tail);
        let n_fine = good_fft_len(((fs / FINE_RESOLUTION_HZ).ceil() as usize).max(lin_len));
        let df_fine = fs / n_fine as f64;
        let fine_inv_hp_power = (0..n_fine / 2 + 1)
            .map(|k| {
                let b = low_highpass(k as f64 * df_fine, sweep.f1_hz).norm_sqr();
                if b > 0.0 {
                    1.0 / b
                } else {
                    0.0
                }
            })
            .collect();
        let n_harm = good_fft_len((2 * max_harm_len).max(16));

        Tables {
            sweep,
            fs_hz: fs,
            n_stimulus,
            max_harmonic,
            min_snr_db,
            grid_hz: bands::grid_hz(sweep.f1_hz, sweep.f2_hz, points_per_octave),
            n_fft,
            fft,
            x_spec: Split::from_c64(&x_spec),
            x_inv: Split::from_c64(&x_inv),
            x_inv_analytic: Split::from_c64(&x_inv_analytic),
            x_fwd_analytic: Split::from_c64(&x_fwd_analytic),
            harm_band: harm_band.iter().map(|&w| w as f32).collect(),
            lin_comp: Split::from_c64(&lin_comp),
            lin_lead,
            lin_tail,
            lin_window,
            n_fine,
            fft_fine: RealFft::new(n_fine),
            fine_inv_hp_power,
            harmonics,
            n_harm,
            fft_harm: RealFft::new(n_harm),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // The stationary-phase spectrum of Novak et al. (2015, eq. 31) must match a direct DFT
    // of the sampled sweep mid-band: this pins down the sign convention and the fs scale.
    #[test]
    fn analytic_spectrum_matches_dft_of_sweep() {
        let sweep =
            SweepParams::synchronized(48_000, 20.0, 20_000.0, 1.0, 0.5, 0.0, 0.0, 0.0).unwrap();
        let x = sweep.samples();
        let fs = 48_000.0;
        for &f in &[200.0, 1000.0, 5000.0] {
            // Direct DFT at f (f64, naive): independent of any FFT library.
            let mut acc = C64::new(0.0, 0.0);
            for (n, &v) in x.iter().enumerate() {
                acc += C64::from_polar(v, -2.0 * PI * f * n as f64 / fs);
            }
            let want = analytic_sweep_spectrum(f, &sweep) * fs * 0.5;
            let ratio = acc / want;
            // Stationary phase holds to a few tenths of a dB mid-band (the sweep has no
            // fades here, so the ripple is the truncation ripple of the raw sweep).
            assert!((20.0 * ratio.norm().log10()).abs() < 0.3, "f={f}: {ratio}");
            assert!(ratio.arg().abs() < 0.1, "f={f}: phase {}", ratio.arg());
        }
    }

    #[test]
    fn good_lengths_are_five_smooth() {
        assert_eq!(good_fft_len(96_000), 96_000);
        assert_eq!(good_fft_len(97), 100);
        assert_eq!(good_fft_len(65_537), 65_610);
    }
}
