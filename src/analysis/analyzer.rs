//! Deconvolution of a synchronized-sweep capture into linear and harmonic responses.
//!
//! Method (Farina 2000; Novak, Simon & Lotton, JAES 63(10), 2015), with the refinements
//! that a careful independent implementation found necessary:
//!
//! 1. `H(f) = Y(f)·B(f)/X(f)`: the capture spectrum divided by the spectrum of the stimulus
//!    *as played* (fades and edge ripple included), band-limited by `B`, which is 1 inside
//!    the sweep band and falls to 0 over one octave outside it with a raised cosine (a steep
//!    edge would ring). Dividing by the real spectrum makes the linear part exact up to the
//!    band edges, where the analytic inverse alone is several dB off.
//! 2. The linear impulse response is the inverse transform around its peak (the latency),
//!    windowed from a lead-in before the peak to a tail after it; its spectrum, zero-padded
//!    to ≈0.5 Hz resolution, is the response.
//! 3. The linear part's output `H1·X` is subtracted from the capture spectrum before the
//!    harmonics are extracted, so that edge ripple and the linear response cannot leak into
//!    HD2. The residual is deconvolved with the *analytic* inverse spectrum of the sweep
//!    (Novak et al. 2015, eq. 32) because it extends above the stop frequency, where the
//!    harmonics of the upper sweep band lie.
//! 4. Harmonic n's impulse response lies `L·ln n` before the linear one; it is cut with a
//!    window that has a real lead-in (even harmonics have non-causal tails) and its spectrum
//!    is advanced by the fractional part of that delay in the frequency domain (a phase
//!    ramp), never rounded to a whole sample.
//! 5. The residual beyond the modelled harmonics (orders above N, impulsive rub, noise) is
//!    brought back to the time domain; its peak in the short interval in which the sweep
//!    passes each frequency, relative to the fundamental's peak, is the rub-and-buzz
//!    indicator.
//!
//! FFT normalisation follows [`crate::dsp`]: unnormalised both ways; inverses divide by N.

use super::{ChannelMeasurement, FineSpectrum, RetestReason};
use crate::dsp::bands;
use crate::dsp::sweep::{Stimulus, SweepParams};
use crate::plan::{ChannelSpec, Plan, Polarity};
use crate::rig::Capture;
use realfft::num_complex::Complex;
use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use std::collections::BTreeMap;
use std::f64::consts::PI;
use std::sync::Arc;

type C64 = Complex<f64>;
/// Sample type of the capture-length transforms. The capture itself is f32, and every
/// quantity these transforms carry is at most ~150 dB below full scale, inside f32's
/// ~7-digit precision; halving the memory traffic of the largest buffers is what brings the
/// per-unit time near the 5 ms target. Set-up (the stimulus spectrum, its inverses) and the
/// fine and harmonic spectra stay f64.
type CS = Complex<f32>;

/// Samples at or beyond this magnitude count as clipped: one 16-bit step below full scale,
/// so that clipping in 16-bit converters is caught too.
pub const CLIP_THRESHOLD: f32 = 32_767.0 / 32_768.0;

/// Below this peak level a channel has no signal, dBFS (common practice: well under any
/// earphone's response at test levels, well above 24-bit converter noise).
pub const NO_SIGNAL_DBFS: f64 = -90.0;

/// Below this SNR the sweep interval holds nothing but the noise of the silence: no signal
/// (a dead channel reads ≈ 0 dB), dB.
pub const NO_SIGNAL_SNR_DB: f64 = 6.0;

/// SNR is capped here (digitally silent captures have no measurable noise), dB.
pub const SNR_CAP_DB: f64 = 150.0;

/// Resolution of the fine linear spectrum, Hz: fine enough for 1/6-octave smoothing at
/// 20 Hz (a band ≈ 2.3 Hz wide) to average several bins.
pub const FINE_RESOLUTION_HZ: f64 = 0.5;

/// Fraction of the gap to the second harmonic's impulse response used as the linear
/// window's lead-in.
const LINEAR_LEAD_FRACTION: f64 = 0.2;

/// Linear window tail after the peak, s: long enough for an earphone in a coupler and for
/// the f1/2 band-limit high-pass to ring out (τ ≈ 22 ms at 10 Hz, so −58 dB by 150 ms), short
/// enough not to gather noise (at 60 dB SNR the HF error grows with the tail length).
const LINEAR_TAIL_S: f64 = 0.15;

/// Fraction of each harmonic's gap to the next higher harmonic used as its lead-in.
const HARMONIC_LEAD_FRACTION: f64 = 0.2;

pub use crate::dsp::sweep::HARMONIC_TOP_FRACTION_OF_NYQUIST;

/// Why an analyzer cannot be built or a capture cannot be analysed at all.
#[derive(Debug, thiserror::Error)]
pub enum AnalysisError {
    /// Stimulus and capture (or plan) disagree about the sample rate; fix the capture.
    #[error("sample rate mismatch: stimulus at {stimulus_hz} Hz, capture at {capture_hz} Hz")]
    RateMismatch {
        /// Stimulus rate, Hz.
        stimulus_hz: u32,
        /// Capture rate, Hz.
        capture_hz: u32,
    },
    /// The capture lacks an input channel the plan maps.
    #[error("channel `{channel}` reads input {input_1based}, but the capture has {available} input channel(s)")]
    MissingInput {
        /// Plan channel name.
        channel: String,
        /// Input number, 1-based as in the plan.
        input_1based: usize,
        /// Channels in the capture.
        available: usize,
    },
    /// The stimulus drives no output.
    #[error("the stimulus drives no output channel")]
    NoStimulus,
}

/// One harmonic window, positions in samples relative to the linear peak.
#[derive(Debug, Clone)]
struct HarmonicWindow {
    order: usize,
    /// Centre (the harmonic's time zero) relative to the linear peak, samples (negative).
    centre: f64,
    /// Samples before the integer centre.
    lead: usize,
    /// Samples from the integer centre onwards.
    tail: usize,
    /// Window weights, `lead + tail` of them (half-Hann fades, flat between).
    weights: Vec<f64>,
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

/// Deconvolver and analyser built once per stimulus and reused for every unit.
pub struct Analyzer {
    sweep: SweepParams,
    fs_hz: f64,
    n_stimulus: usize,
    max_harmonic: usize,
    min_snr_db: f64,
    grid_hz: Vec<f64>,

    n_fft: usize,
    fwd: Arc<dyn RealToComplex<f32>>,
    inv: Arc<dyn ComplexToReal<f32>>,
    /// Spectrum of the stimulus as played.
    x_spec: Vec<CS>,
    /// Band-limited inverse of `x_spec`.
    x_inv: Vec<CS>,
    /// Analytic inverse spectrum for the harmonics (band-limited, start delay included).
    x_inv_analytic: Vec<CS>,
    /// Analytic forward spectrum matching `x_inv_analytic` (its reciprocal where defined).
    x_fwd_analytic: Vec<CS>,
    /// Band weight of the harmonic analysis (f1/2…f1 ramp up, 0.9…1.0 Nyquist ramp down).
    harm_band: Vec<f32>,
    /// Division by the low-frequency band limit, to subtract the true linear output.
    lin_comp: Vec<CS>,

    lin_lead: usize,
    lin_tail: usize,
    lin_window: Vec<f64>,
    n_fine: usize,
    fwd_fine: Arc<dyn RealToComplex<f64>>,
    /// 1/|B_hp|² per fine bin (0 where the high-pass is exactly 0), to divide it out.
    fine_inv_hp_power: Vec<f64>,

    harmonics: Vec<HarmonicWindow>,
    n_harm: usize,
    fwd_harm: Arc<dyn RealToComplex<f64>>,

    // Scratch, reused per unit.
    time_buf: Vec<f32>,
    spec_y: Vec<CS>,
    spec_buf: Vec<CS>,
    residual: Vec<CS>,
    h_res: Vec<f32>,
    fine_time: Vec<f64>,
    fine_spec: Vec<C64>,
    harm_time: Vec<f64>,
    harm_spec: Vec<C64>,
    union_ir: Vec<f32>,
    scratch_fwd: Vec<C64>,
    scratch_big: Vec<CS>,
    scratch_inv: Vec<CS>,
}

/// Smallest FFT length ≥ `n` whose only prime factors are 2, 3 and 5 (fast in RustFFT).
fn good_fft_len(n: usize) -> usize {
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
fn low_highpass(f_hz: f64, f1_hz: f64) -> C64 {
    let fc = 0.5 * f1_hz;
    let s = C64::new(0.0, f_hz / fc);
    s * s / (s * s + s * std::f64::consts::SQRT_2 + 1.0)
}

/// Analytic spectrum of the synchronized sweep sin(2π f1 L e^{t/L}) (Novak et al. 2015,
/// eq. 31, stationary-phase approximation): X(f) = ½√(L/f)·exp{j2πfL[1 − ln(f/f1)] − jπ/4}.
/// This is for the e^{−j2πft} forward transform (the one RustFFT computes).
fn analytic_sweep_spectrum(f_hz: f64, sweep: &SweepParams) -> C64 {
    let l = sweep.l_s;
    let mag = 0.5 * (l / f_hz).sqrt();
    let phase = 2.0 * PI * f_hz * l * (1.0 - (f_hz / sweep.f1_hz).ln()) - PI / 4.0;
    C64::from_polar(mag, phase)
}

impl Analyzer {
    /// Build the analyzer for a plan's stimulus: FFT plans, inverse spectra, windows, grid.
    pub fn new(plan: &Plan, stimulus: &Stimulus) -> Result<Self, AnalysisError> {
        if stimulus.driven_outputs.is_empty() {
            return Err(AnalysisError::NoStimulus);
        }
        Ok(Self::with_options(
            stimulus,
            plan.analysis.max_harmonic,
            plan.analysis.points_per_octave,
            plan.analysis.min_snr_db,
        ))
    }

    /// Build from a stimulus and explicit options (tests and tools without a plan).
    pub fn with_options(
        stimulus: &Stimulus,
        max_harmonic: usize,
        points_per_octave: u32,
        min_snr_db: f64,
    ) -> Self {
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
        let mut planner = RealFftPlanner::<f64>::new();
        let mut planner32 = RealFftPlanner::<f32>::new();
        let fwd = planner32.plan_fft_forward(n_fft);
        let inv = planner32.plan_fft_inverse(n_fft);
        let fwd64 = planner.plan_fft_forward(n_fft);
        let n_bins = n_fft / 2 + 1;
        let df = fs / n_fft as f64;

        let mut time_buf = vec![0.0; n_fft];
        for (d, &s) in time_buf.iter_mut().zip(stimulus.driven_signal()) {
            *d = f64::from(s);
        }
        let mut x_spec = fwd64.make_output_vec();
        let mut scratch_fwd = fwd64.make_scratch_vec();
        fwd64
            .process_with_scratch(&mut time_buf, &mut x_spec, &mut scratch_fwd)
            .expect("buffer lengths come from the same plan");

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
        let fwd_fine = planner.plan_fft_forward(n_fine);
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
        let fwd_harm = planner.plan_fft_forward(n_harm);

        let scratch_len = fwd_fine.get_scratch_len().max(fwd_harm.get_scratch_len());
        scratch_fwd.resize(scratch_len, C64::new(0.0, 0.0));
        let scratch_inv = inv.make_scratch_vec();
        let scratch_big = fwd.make_scratch_vec();
        let to32 = |v: &[C64]| -> Vec<CS> {
            v.iter()
                .map(|c| CS::new(c.re as f32, c.im as f32))
                .collect()
        };

        Analyzer {
            sweep,
            fs_hz: fs,
            n_stimulus,
            max_harmonic,
            min_snr_db,
            grid_hz: bands::grid_hz(sweep.f1_hz, sweep.f2_hz, points_per_octave),
            n_fft,
            spec_y: vec![CS::new(0.0, 0.0); n_bins],
            spec_buf: vec![CS::new(0.0, 0.0); n_bins],
            residual: vec![CS::new(0.0, 0.0); n_bins],
            h_res: vec![0.0; n_fft],
            union_ir: vec![0.0; n_fft],
            fwd,
            inv,
            x_spec: to32(&x_spec),
            x_inv: to32(&x_inv),
            x_inv_analytic: to32(&x_inv_analytic),
            x_fwd_analytic: to32(&x_fwd_analytic),
            harm_band: harm_band.iter().map(|&w| w as f32).collect(),
            lin_comp: to32(&lin_comp),
            lin_lead,
            lin_tail,
            lin_window,
            n_fine,
            fine_time: vec![0.0; n_fine],
            fine_spec: vec![C64::new(0.0, 0.0); n_fine / 2 + 1],
            fwd_fine,
            fine_inv_hp_power,
            harmonics,
            n_harm,
            harm_time: vec![0.0; n_harm],
            harm_spec: vec![C64::new(0.0, 0.0); n_harm / 2 + 1],
            fwd_harm,
            time_buf: vec![0.0; n_fft],
            scratch_fwd,
            scratch_big,
            scratch_inv,
        }
    }

    /// The analysis grid, Hz.
    pub fn grid_hz(&self) -> &[f64] {
        &self.grid_hz
    }

    /// The sweep this analyzer deconvolves.
    pub fn sweep(&self) -> &SweepParams {
        &self.sweep
    }

    /// Highest harmonic order analysed.
    pub fn max_harmonic(&self) -> usize {
        self.max_harmonic
    }

    /// Bin spacing of the fine spectrum ([`FineSpectrum::df_hz`]), Hz.
    pub fn fine_df_hz(&self) -> f64 {
        self.fs_hz / self.n_fine as f64
    }

    /// Number of bins of the fine spectrum (0 Hz to Nyquist).
    pub fn fine_n_bins(&self) -> usize {
        self.n_fine / 2 + 1
    }

    /// Highest n·f at which a harmonic is reported, Hz (above it `harmonics_db` is null).
    pub fn harmonic_top_hz(&self) -> f64 {
        HARMONIC_TOP_FRACTION_OF_NYQUIST * 0.5 * self.fs_hz
    }

    /// Analyse every plan channel of a capture; rig-level problems (xruns, faults) make
    /// every channel a retest.
    pub fn analyze(
        &mut self,
        capture: &Capture,
        channels: &[ChannelSpec],
    ) -> Result<Vec<ChannelMeasurement>, AnalysisError> {
        if f64::from(capture.sample_rate_hz) != self.fs_hz {
            return Err(AnalysisError::RateMismatch {
                stimulus_hz: self.sweep.sample_rate_hz,
                capture_hz: capture.sample_rate_hz,
            });
        }
        let mut out = Vec::with_capacity(channels.len());
        for ch in channels {
            let samples =
                capture
                    .channels
                    .get(ch.input)
                    .ok_or_else(|| AnalysisError::MissingInput {
                        channel: ch.name.clone(),
                        input_1based: ch.input + 1,
                        available: capture.channels.len(),
                    })?;
            let mut m = self.analyze_channel(&ch.name, samples);
            if capture.xruns > 0 {
                m.retest_reasons.push(RetestReason::RigFault {
                    message: format!("{} buffer xrun(s) while capturing", capture.xruns),
                });
            }
            for f in &capture.faults {
                m.retest_reasons
                    .push(RetestReason::RigFault { message: f.clone() });
            }
            out.push(m);
        }
        Ok(out)
    }

    /// Analyse one captured channel.
    pub fn analyze_channel(&mut self, name: &str, samples: &[f32]) -> ChannelMeasurement {
        let n_fft = self.n_fft;
        let fs = self.fs_hz;
        let mut reasons = Vec::new();

        // Capture quality: truncation, clipping, peak level.
        if samples.len() < self.n_stimulus {
            reasons.push(RetestReason::Truncated {
                n_captured: samples.len(),
                n_needed: self.n_stimulus,
            });
        }
        let used = samples.len().min(n_fft);
        let mut peak = 0f32;
        let mut n_clipped = 0usize;
        for &s in &samples[..used] {
            let a = s.abs();
            if a >= CLIP_THRESHOLD || !a.is_finite() {
                n_clipped += 1;
            }
            if a.is_finite() {
                peak = peak.max(a);
            }
        }
        let peak_dbfs = 20.0 * f64::from(peak).max(1e-15).log10();
        if n_clipped > 0 {
            reasons.push(RetestReason::Clipping {
                n_samples: n_clipped,
            });
        }

        // 1. Full deconvolution with the band-limited inverse of the played stimulus.
        self.time_buf.fill(0.0);
        for (d, &s) in self.time_buf.iter_mut().zip(&samples[..used]) {
            *d = if s.is_finite() { s } else { 0.0 };
        }
        self.fwd
            .process_with_scratch(&mut self.time_buf, &mut self.spec_y, &mut self.scratch_big)
            .expect("buffer lengths come from the same plan");
        for ((b, y), xi) in self.spec_buf.iter_mut().zip(&self.spec_y).zip(&self.x_inv) {
            *b = y * xi;
        }
        self.inverse_into_h_res();
        let h = &self.h_res;

        // Latency: the largest magnitude outside the region the harmonics occupy.
        let harm_zone = (self.sweep.harmonic_lead_s(2) * fs * 0.5) as usize;
        let search_end = n_fft.saturating_sub(harm_zone).max(1);
        let (mut p, mut best) = (0usize, -1.0f32);
        for (i, v) in h[..search_end].iter().enumerate() {
            if v.abs() > best {
                best = v.abs();
                p = i;
            }
        }
        let frac = {
            let a = f64::from(h[(p + n_fft - 1) % n_fft].abs());
            let b = f64::from(h[p].abs());
            let c = f64::from(h[(p + 1) % n_fft].abs());
            let denom = a - 2.0 * b + c;
            if denom.abs() > 0.0 {
                (0.5 * (a - c) / denom).clamp(-0.5, 0.5)
            } else {
                0.0
            }
        };
        let polarity = if h[p] >= 0.0 {
            Polarity::Positive
        } else {
            Polarity::Negative
        };

        // 2. Linear IR: window around the peak, placed with the peak at index 0 (lead-in
        //    wrapped to the end) so the spectrum carries no bulk delay phase.
        self.fine_time.fill(0.0);
        self.union_ir.fill(0.0);
        let lin_len = self.lin_lead + self.lin_tail;
        for i in 0..lin_len {
            let offset = i as isize - self.lin_lead as isize;
            let src = (p as isize + offset).rem_euclid(n_fft as isize) as usize;
            let v = f64::from(h[src]) * self.lin_window[i];
            let dst = offset.rem_euclid(self.n_fine as isize) as usize;
            self.fine_time[dst] = v;
            self.union_ir[src] = v as f32;
        }
        self.fwd_fine
            .process_with_scratch(
                &mut self.fine_time,
                &mut self.fine_spec,
                &mut self.scratch_fwd,
            )
            .expect("buffer lengths come from the same plan");
        let df_fine = fs / self.n_fine as f64;
        let f1_hz = self.sweep.f1_hz;
        let h1_at = |spec: &[C64], f_hz: f64| -> C64 {
            let pos = f_hz / df_fine;
            let i = (pos.floor() as usize).min(spec.len() - 2);
            let t = pos - i as f64;
            (spec[i] * (1.0 - t) + spec[i + 1] * t) / low_highpass(f_hz, f1_hz)
        };

        // 3. Residual = capture − linear output, in the spectrum of the capture.
        self.fwd
            .process_with_scratch(
                &mut self.union_ir,
                &mut self.spec_buf,
                &mut self.scratch_big,
            )
            .expect("buffer lengths come from the same plan");
        for (((r, y), (hl, x)), c) in self
            .residual
            .iter_mut()
            .zip(&self.spec_y)
            .zip(self.spec_buf.iter().zip(&self.x_spec))
            .zip(&self.lin_comp)
        {
            *r = y - hl * x * c;
        }
        for ((b, r), xi) in self
            .spec_buf
            .iter_mut()
            .zip(&self.residual)
            .zip(&self.x_inv_analytic)
        {
            *b = r * xi;
        }
        self.inverse_into_h_res();

        // 4. Harmonic IRs: window each, advance by the fractional delay, sample on the grid.
        let grid = &self.grid_hz;
        let h1_grid: Vec<C64> = grid.iter().map(|&f| h1_at(&self.fine_spec, f)).collect();
        let top_hz = HARMONIC_TOP_FRACTION_OF_NYQUIST * 0.5 * fs;
        let mut harmonics_db: BTreeMap<String, Vec<Option<f64>>> = BTreeMap::new();
        let mut hd_lin: Vec<Vec<Option<f64>>> = Vec::new();
        self.union_ir.fill(0.0);
        let df_harm = fs / self.n_harm as f64;
        for hw in &self.harmonics {
            let centre_abs = p as f64 + hw.centre;
            let c_int = centre_abs.floor();
            let c_frac = centre_abs - c_int;
            self.harm_time.fill(0.0);
            let len = hw.lead + hw.tail;
            // Split the circular copy into runs so the hot loop has no modulo.
            let start = (c_int as isize - hw.lead as isize).rem_euclid(n_fft as isize) as usize;
            let dst0 = self.n_harm - hw.lead;
            for (i, &w) in hw.weights.iter().enumerate().take(len) {
                let mut src = start + i;
                if src >= n_fft {
                    src -= n_fft;
                }
                let mut dst = dst0 + i;
                if dst >= self.n_harm {
                    dst -= self.n_harm;
                }
                let v = f64::from(self.h_res[src]) * w;
                self.harm_time[dst] = v;
                self.union_ir[src] += v as f32;
            }
            self.fwd_harm
                .process_with_scratch(
                    &mut self.harm_time,
                    &mut self.harm_spec,
                    &mut self.scratch_fwd,
                )
                .expect("buffer lengths come from the same plan");
            let n = hw.order;
            let mut row_db = Vec::with_capacity(grid.len());
            let mut row_lin = Vec::with_capacity(grid.len());
            for (g, &f) in grid.iter().enumerate() {
                let fh = n as f64 * f;
                if fh > top_hz {
                    row_db.push(None);
                    row_lin.push(None);
                    continue;
                }
                let pos = fh / df_harm;
                let i = (pos.floor() as usize).min(self.harm_spec.len() - 2);
                let t = pos - i as f64;
                let hn = self.harm_spec[i] * (1.0 - t) + self.harm_spec[i + 1] * t;
                // Time zero of harmonic n is c_int + c_frac: advance by the fraction.
                let hn = hn * C64::from_polar(1.0, 2.0 * PI * fh * c_frac / fs);
                let ratio = hn.norm() / h1_grid[g].norm().max(1e-300);
                row_lin.push(Some(ratio));
                row_db.push(Some(20.0 * ratio.max(1e-15).log10()));
            }
            harmonics_db.insert(n.to_string(), row_db);
            hd_lin.push(row_lin);
        }
        let mut thd_percent = Vec::with_capacity(grid.len());
        let mut thd_iec_percent = Vec::with_capacity(grid.len());
        for g in 0..grid.len() {
            let mut sum = 0.0;
            let mut any = false;
            for row in &hd_lin {
                if let Some(v) = row[g] {
                    sum += v * v;
                    any = true;
                }
            }
            if any {
                thd_percent.push(Some(100.0 * sum.sqrt()));
                // IEC 60268 form: harmonics referred to the total, √Σp_n² / √(p1² + Σp_n²).
                thd_iec_percent.push(Some(100.0 * (sum / (1.0 + sum)).sqrt()));
            } else {
                thd_percent.push(None);
                thd_iec_percent.push(None);
            }
        }

        // 5. Residual beyond the modelled harmonics, back in the time domain.
        let rub_buzz_db = self.rub_buzz(p, &h1_grid);

        // SNR: leading silence (before the sweep can arrive) against the sweep interval.
        let s0 = self.sweep.start_sample;
        let noise_end = (s0 * 9 / 10).min(used);
        let noise_rms = rms(&samples[..noise_end]);
        let sig_start = (s0 + p).min(used);
        let sig_end = (s0 + p + self.sweep.n_sweep_samples).min(used);
        let sig_rms = rms(&samples[sig_start..sig_end]);
        let snr_db = if noise_rms > 0.0 {
            (20.0 * (sig_rms / noise_rms).log10()).min(SNR_CAP_DB)
        } else if sig_rms > 0.0 {
            SNR_CAP_DB
        } else {
            0.0
        };
        if peak_dbfs < NO_SIGNAL_DBFS || snr_db < NO_SIGNAL_SNR_DB {
            reasons.push(RetestReason::NoSignal { peak_dbfs });
        } else if snr_db < self.min_snr_db {
            reasons.push(RetestReason::LowSnr {
                snr_db,
                min_db: self.min_snr_db,
            });
        }

        let response_db = h1_grid
            .iter()
            .map(|c| 20.0 * c.norm().max(1e-15).log10())
            .collect();
        let phase_deg = h1_grid.iter().map(|c| c.arg().to_degrees()).collect();
        let power = self
            .fine_spec
            .iter()
            .zip(&self.fine_inv_hp_power)
            .map(|(c, g)| c.norm_sqr() * g)
            .collect();
        let fine = FineSpectrum::new(df_fine, power, (self.sweep.f1_hz, self.sweep.f2_hz));

        ChannelMeasurement {
            name: name.to_string(),
            unit: "dB FS/FS".into(),
            latency_samples: p as i64,
            latency_fractional_samples: p as f64 + frac,
            polarity,
            snr_db,
            peak_dbfs,
            frequencies_hz: self.grid_hz.clone(),
            response_db,
            phase_deg,
            thd_percent,
            thd_iec_percent,
            harmonics_db,
            rub_buzz_db,
            retest_reasons: reasons,
            fixture_response_db: None,
            correction: None,
            fine,
        }
    }

    /// Inverse-transform `spec_buf` into `h_res`. The 1/N of the inverse transform is folded
    /// into the spectra that multiply `spec_buf` (`x_inv`, `x_inv_analytic`, `harm_band`),
    /// which saves a pass over the buffer per transform.
    fn inverse_into_h_res(&mut self) {
        // The DC and Nyquist bins of a real signal's spectrum must be real; the products
        // above keep them so up to rounding, which the inverse transform rejects.
        let last = self.spec_buf.len() - 1;
        self.spec_buf[0].im = 0.0;
        self.spec_buf[last].im = 0.0;
        self.inv
            .process_with_scratch(&mut self.spec_buf, &mut self.h_res, &mut self.scratch_inv)
            .expect("buffer lengths come from the same plan");
    }

    /// Rub-and-buzz indicator on the grid: peak residual (after removing the linear part
    /// and harmonics 2..N) in the interval the sweep spends within ±1/(2b) octave of each
    /// grid frequency, re the fundamental's peak A·|H1(f)|, dB.
    fn rub_buzz(&mut self, p: usize, h1_grid: &[C64]) -> Vec<Option<f64>> {
        let fs = self.fs_hz;
        let n_fft = self.n_fft;
        // union_ir holds the harmonic windows at their places in the deconvolved buffer.
        self.fwd
            .process_with_scratch(
                &mut self.union_ir,
                &mut self.spec_buf,
                &mut self.scratch_big,
            )
            .expect("buffer lengths come from the same plan");
        for (((b, r), x), w) in self
            .spec_buf
            .iter_mut()
            .zip(&self.residual)
            .zip(&self.x_fwd_analytic)
            .zip(&self.harm_band)
        {
            // Band-limited like the harmonics, so that the DC and slow envelope terms of
            // even-order distortion (x² has a DC part) do not read as buzz.
            *b = (r - *b * x) * w;
        }
        self.inverse_into_h_res();
        let e = &self.h_res;
        let grid = &self.grid_hz;
        let half_width_oct = if grid.len() > 1 {
            0.5 * (grid[1] / grid[0]).log2()
        } else {
            1.0 / 48.0
        };
        let half_width_s = self.sweep.l_s * half_width_oct * std::f64::consts::LN_2;
        let half = ((half_width_s * fs).round() as usize).max(8);
        let start = self.sweep.start_sample + p;
        grid.iter()
            .zip(h1_grid)
            .map(|(&f, h1)| {
                let centre = start + (self.sweep.time_at(f) * fs).round() as usize;
                let lo = centre.saturating_sub(half);
                let hi = (centre + half).min(n_fft);
                if lo >= hi {
                    return None;
                }
                let peak = e[lo..hi]
                    .iter()
                    .fold(0.0f64, |m, v| m.max(f64::from(v.abs())));
                let fund = self.sweep.amplitude * h1.norm();
                if fund <= 0.0 {
                    return None;
                }
                Some(20.0 * (peak / fund).max(1e-15).log10())
            })
            .collect()
    }
}

fn rms(x: &[f32]) -> f64 {
    if x.is_empty() {
        return 0.0;
    }
    let s: f64 = x
        .iter()
        .filter(|v| v.is_finite())
        .map(|&v| f64::from(v) * f64::from(v))
        .sum();
    (s / x.len() as f64).sqrt()
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
