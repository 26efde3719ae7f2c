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
//! Steps 3–5 are needed only for the distortion outputs and step 5 only for rub and buzz:
//! [`Outputs`] says which to compute (all, unless told otherwise).
//!
//! FFT normalisation follows [`crate::dsp`]: unnormalised both ways; inverses divide by N.
//! The capture-length transforms run in f32 (the capture itself is f32, and every quantity
//! they carry lies within f32's ~7 digits of full scale); the fine and harmonic spectra in
//! f64. Speed (docs/engineer/speed.md): transforms planned once per process
//! ([`crate::dsp::fft`]), spectra held split so the per-bin products vectorise, per-sample
//! passes in lanes ([`super::passes`]), scratch reused from unit to unit.

use super::passes::{argmax_abs, max_abs, scan_capture, sum_squares_finite};
use super::tables::{low_highpass, Split, Tables, C64};
use super::{ChannelMeasurement, FineSpectrum, RetestReason};
use crate::dsp::fft::{get, set, FftScratch};
use crate::dsp::sweep::{Stimulus, SweepParams};
use crate::plan::checks::{CheckKind, CheckSpec};
use crate::plan::{ChannelSpec, Plan, Polarity};
use crate::rig::Capture;
use realfft::num_complex::Complex;
use std::collections::BTreeMap;
use std::sync::Arc;

type C32 = Complex<f32>;

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

/// Which of the optional outputs an analysis computes. What is not computed reads `null`
/// in the result (every grid point), as a harmonic above the analysed band does.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Outputs {
    /// `harmonics_db`, `thd_percent`, `thd_iec_percent` (steps 3–4 of the module doc).
    pub harmonics: bool,
    /// `rub_buzz_db` (step 5; needs steps 3–4, so the harmonics come with it).
    pub rub_buzz: bool,
}

impl Outputs {
    /// Everything (the default of an analyzer).
    pub const ALL: Outputs = Outputs {
        harmonics: true,
        rub_buzz: true,
    };

    /// What `checks` read: harmonics for THD and harmonic checks, rub and buzz for
    /// rub-and-buzz checks. A batch that only judges (replay) can skip the rest; a result
    /// meant for people keeps [`Outputs::ALL`].
    pub fn for_checks(checks: &[CheckSpec]) -> Outputs {
        let any = |f: fn(&CheckKind) -> bool| checks.iter().any(|c| f(&c.kind));
        Outputs {
            harmonics: any(|k| matches!(k, CheckKind::Thd { .. } | CheckKind::Harmonic { .. })),
            rub_buzz: any(|k| matches!(k, CheckKind::RubBuzz { .. })),
        }
    }
}

/// Buffers of one analyzer, reused from unit to unit.
struct Scratch {
    ws: FftScratch<f32>,
    /// The capture, packed; then the linear-window IR.
    time: Vec<C32>,
    /// Capture spectrum.
    y: Split<f32>,
    /// Capture spectrum minus the linear part's output.
    resid: Split<f32>,
    /// The deconvolved buffer: h, then the residual's h, then the rub-and-buzz residual.
    h: Vec<C32>,
    /// Windows cut from `h` at their places (0 elsewhere), packed.
    union: Vec<C32>,
    ws_fine: FftScratch<f64>,
    /// Linear window for the fine spectrum, packed (0 outside the window).
    fine_time: Vec<C64>,
    fine: Split<f64>,
    ws_harm: FftScratch<f64>,
    /// One harmonic window, packed (0 outside the window).
    harm_time: Vec<C64>,
    harm: Split<f64>,
}

impl Scratch {
    fn new(t: &Tables) -> Scratch {
        let split32 = || Split {
            re: t.fft.make_bins(),
            im: t.fft.make_bins(),
        };
        Scratch {
            ws: t.fft.make_scratch(),
            time: t.fft.make_time(),
            y: split32(),
            resid: split32(),
            h: t.fft.make_time(),
            union: t.fft.make_time(),
            ws_fine: t.fft_fine.make_scratch(),
            fine_time: t.fft_fine.make_time(),
            fine: Split {
                re: t.fft_fine.make_bins(),
                im: t.fft_fine.make_bins(),
            },
            ws_harm: t.fft_harm.make_scratch(),
            harm_time: t.fft_harm.make_time(),
            harm: Split {
                re: t.fft_harm.make_bins(),
                im: t.fft_harm.make_bins(),
            },
        }
    }
}

/// Call `f(i, pos)` for `i` in `0..len` with `pos = (start + i) mod n`, in runs without a
/// modulo.
#[inline]
fn for_circular(start: usize, len: usize, n: usize, mut f: impl FnMut(usize, usize)) {
    let first = len.min(n - start);
    for i in 0..first {
        f(i, start + i);
    }
    for i in first..len {
        f(i, i - first);
    }
}

/// Deconvolver and analyser built once per stimulus and reused for every unit.
///
/// `Send + Sync`. Cloning is cheap (the tables and transform plans are shared; the clone
/// gets its own scratch): a batch keeps one analyzer per thread, cloned from one.
pub struct Analyzer {
    t: Arc<Tables>,
    outputs: Outputs,
    s: Scratch,
}

impl Clone for Analyzer {
    fn clone(&self) -> Self {
        Analyzer {
            t: Arc::clone(&self.t),
            outputs: self.outputs,
            s: Scratch::new(&self.t),
        }
    }
}

impl Analyzer {
    /// Build the analyzer for a plan's stimulus: FFT plans, inverse spectra, windows, grid.
    /// It computes every output ([`Outputs::ALL`]); see [`Analyzer::set_outputs`].
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
        let t = Tables::new(stimulus, max_harmonic, points_per_octave, min_snr_db);
        Analyzer {
            s: Scratch::new(&t),
            t: Arc::new(t),
            outputs: Outputs::ALL,
        }
    }

    /// Compute only `outputs` from now on (the others read `null`).
    pub fn set_outputs(&mut self, outputs: Outputs) {
        self.outputs = outputs;
    }

    /// The outputs this analyzer computes.
    pub fn outputs(&self) -> Outputs {
        self.outputs
    }

    /// The analysis grid, Hz.
    pub fn grid_hz(&self) -> &[f64] {
        &self.t.grid_hz
    }

    /// The sweep this analyzer deconvolves.
    pub fn sweep(&self) -> &SweepParams {
        &self.t.sweep
    }

    /// Highest harmonic order analysed.
    pub fn max_harmonic(&self) -> usize {
        self.t.max_harmonic
    }

    /// Bin spacing of the fine spectrum ([`FineSpectrum::df_hz`]), Hz.
    pub fn fine_df_hz(&self) -> f64 {
        self.t.fs_hz / self.t.n_fine as f64
    }

    /// Number of bins of the fine spectrum (0 Hz to Nyquist).
    pub fn fine_n_bins(&self) -> usize {
        self.t.n_fine / 2 + 1
    }

    /// Highest n·f at which a harmonic is reported, Hz (above it `harmonics_db` is null).
    pub fn harmonic_top_hz(&self) -> f64 {
        HARMONIC_TOP_FRACTION_OF_NYQUIST * 0.5 * self.t.fs_hz
    }

    /// Analyse every plan channel of a capture; rig-level problems (xruns, faults) make
    /// every channel a retest.
    pub fn analyze(
        &mut self,
        capture: &Capture,
        channels: &[ChannelSpec],
    ) -> Result<Vec<ChannelMeasurement>, AnalysisError> {
        if f64::from(capture.sample_rate_hz) != self.t.fs_hz {
            return Err(AnalysisError::RateMismatch {
                stimulus_hz: self.t.sweep.sample_rate_hz,
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
        let t = Arc::clone(&self.t);
        let t = &*t;
        let s = &mut self.s;
        let n_fft = t.n_fft;
        let fs = t.fs_hz;
        let mut reasons = Vec::new();

        // Capture quality (truncation, clipping, peak level) in the pass that copies it.
        if samples.len() < t.n_stimulus {
            reasons.push(RetestReason::Truncated {
                n_captured: samples.len(),
                n_needed: t.n_stimulus,
            });
        }
        let used = samples.len().min(n_fft);
        let scan = scan_capture(&samples[..used], CLIP_THRESHOLD, &mut s.time);
        let peak_dbfs = 20.0 * f64::from(scan.peak).max(1e-15).log10();
        if scan.n_clipped > 0 {
            reasons.push(RetestReason::Clipping {
                n_samples: scan.n_clipped,
            });
        }

        // 1. Full deconvolution with the band-limited inverse of the played stimulus.
        {
            let (y, x) = (&mut s.y, &t.x_inv);
            t.fft
                .forward_map_inverse(&s.time, &mut s.h, &mut s.ws, |k0, re, im| {
                    let n = re.len();
                    y.re[k0..k0 + n].copy_from_slice(re);
                    y.im[k0..k0 + n].copy_from_slice(im);
                    mul_in_place(re, im, &x.re[k0..k0 + n], &x.im[k0..k0 + n]);
                });
        }
        let h = &s.h;

        // Latency: the largest magnitude outside the region the harmonics occupy.
        let harm_zone = (t.sweep.harmonic_lead_s(2) * fs * 0.5) as usize;
        let search_end = n_fft.saturating_sub(harm_zone).max(1);
        let p = argmax_abs(h, search_end);
        let frac = {
            let a = f64::from(get(h, (p + n_fft - 1) % n_fft).abs());
            let b = f64::from(get(h, p).abs());
            let c = f64::from(get(h, (p + 1) % n_fft).abs());
            let denom = a - 2.0 * b + c;
            if denom.abs() > 0.0 {
                (0.5 * (a - c) / denom).clamp(-0.5, 0.5)
            } else {
                0.0
            }
        };
        let polarity = if get(h, p) >= 0.0 {
            Polarity::Positive
        } else {
            Polarity::Negative
        };

        // 2. Linear IR: window around the peak, placed with the peak at index 0 (lead-in
        //    wrapped to the end) so the spectrum carries no bulk delay phase. The buffers
        //    are zero outside the window, and put back so after use.
        let lin_len = t.lin_lead + t.lin_tail;
        let lin_start = (p + n_fft - t.lin_lead % n_fft) % n_fft;
        let fine_start = (t.n_fine - t.lin_lead) % t.n_fine;
        {
            let (fine_time, union) = (&mut s.fine_time, &mut s.union);
            for_circular(lin_start, lin_len, n_fft, |i, src| {
                let v = f64::from(get(h, src)) * t.lin_window[i];
                let mut dst = fine_start + i;
                if dst >= t.n_fine {
                    dst -= t.n_fine;
                }
                set(fine_time, dst, v);
                set(union, src, v as f32);
            });
        }
        t.fft_fine
            .forward(&s.fine_time, &mut s.fine.re, &mut s.fine.im, &mut s.ws_fine);
        for_circular(fine_start, lin_len, t.n_fine, |_, dst| {
            set(&mut s.fine_time, dst, 0.0)
        });
        let df_fine = fs / t.n_fine as f64;
        let f1_hz = t.sweep.f1_hz;
        let fine = &s.fine;
        let h1_at = |f_hz: f64| -> C64 {
            let pos = f_hz / df_fine;
            let i = (pos.floor() as usize).min(fine.re.len() - 2);
            let tt = pos - i as f64;
            let a = C64::new(fine.re[i], fine.im[i]);
            let b = C64::new(fine.re[i + 1], fine.im[i + 1]);
            (a * (1.0 - tt) + b * tt) / low_highpass(f_hz, f1_hz)
        };
        let grid = &t.grid_hz;
        let h1_grid: Vec<C64> = grid.iter().map(|&f| h1_at(f)).collect();

        let n_grid = grid.len();
        let mut harmonics_db: BTreeMap<String, Vec<Option<f64>>> = t
            .harmonics
            .iter()
            .map(|hw| (hw.order.to_string(), vec![None; n_grid]))
            .collect();
        let mut thd_percent = vec![None; n_grid];
        let mut thd_iec_percent = vec![None; n_grid];
        let mut rub_buzz_db = vec![None; n_grid];
        let distortion = self.outputs.harmonics || self.outputs.rub_buzz;
        if distortion {
            // 3. Residual = capture − linear output, in the spectrum of the capture.
            {
                let (y, r) = (&s.y, &mut s.resid);
                t.fft
                    .forward_map_inverse(&s.union, &mut s.h, &mut s.ws, |k0, re, im| {
                        let k = k0..k0 + re.len();
                        residual_in_place(re, im, &y.re[k.clone()], &y.im[k.clone()], t, k0);
                        r.re[k.clone()].copy_from_slice(re);
                        r.im[k.clone()].copy_from_slice(im);
                        let (xr, xi) = (&t.x_inv_analytic.re[k.clone()], &t.x_inv_analytic.im[k]);
                        mul_in_place(re, im, xr, xi);
                    });
            }
            for_circular(lin_start, lin_len, n_fft, |_, src| {
                set(&mut s.union, src, 0.0)
            });

            // 4. Harmonic IRs: window each, advance by the fractional delay, sample on the
            //    grid; the windows also go into `union` for step 5.
            let hd_lin = harmonics_into(t, s, p, &h1_grid, &mut harmonics_db);
            for g in 0..n_grid {
                let mut sum = 0.0;
                let mut any = false;
                for row in &hd_lin {
                    if let Some(v) = row[g] {
                        sum += v * v;
                        any = true;
                    }
                }
                if any {
                    thd_percent[g] = Some(100.0 * sum.sqrt());
                    // IEC 60268 form: harmonics referred to the total, √Σp_n² / √(p1² + Σp_n²).
                    thd_iec_percent[g] = Some(100.0 * (sum / (1.0 + sum)).sqrt());
                }
            }

            // 5. Residual beyond the modelled harmonics, back in the time domain.
            if self.outputs.rub_buzz {
                rub_buzz_db = rub_buzz(t, s, p, &h1_grid);
            }
            for hw in &t.harmonics {
                let start = harmonic_start(t, hw.centre, hw.lead, p);
                for_circular(start, hw.lead + hw.tail, n_fft, |_, src| {
                    set(&mut s.union, src, 0.0)
                });
            }
        }

        // SNR: leading silence (before the sweep can arrive) against the sweep interval.
        let s0 = t.sweep.start_sample;
        let noise_end = (s0 * 9 / 10).min(used);
        let noise_rms = rms(&samples[..noise_end]);
        let sig_start = (s0 + p).min(used);
        let sig_end = (s0 + p + t.sweep.n_sweep_samples).min(used);
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
        } else if snr_db < t.min_snr_db {
            reasons.push(RetestReason::LowSnr {
                snr_db,
                min_db: t.min_snr_db,
            });
        }

        let response_db = h1_grid
            .iter()
            .map(|c| 20.0 * c.norm().max(1e-15).log10())
            .collect();
        let phase_deg = h1_grid.iter().map(|c| c.arg().to_degrees()).collect();
        let power = s
            .fine
            .re
            .iter()
            .zip(&s.fine.im)
            .zip(&t.fine_inv_hp_power)
            .map(|((&re, &im), g)| (re * re + im * im) * g)
            .collect();
        let fine = FineSpectrum::new(df_fine, power, (t.sweep.f1_hz, t.sweep.f2_hz));

        ChannelMeasurement {
            name: name.to_string(),
            unit: "dB FS/FS".into(),
            latency_samples: p as i64,
            latency_fractional_samples: p as f64 + frac,
            polarity,
            snr_db,
            peak_dbfs,
            frequencies_hz: t.grid_hz.clone(),
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
}

/// `(re, im) ·= (br, bi)` per bin (the complex product, in the operation order of
/// `num_complex`, so results equal those of `Complex` arithmetic to the bit).
#[inline(always)]
fn mul_in_place(re: &mut [f32], im: &mut [f32], br: &[f32], bi: &[f32]) {
    let n = re.len();
    let (im, br, bi) = (&mut im[..n], &br[..n], &bi[..n]);
    for k in 0..n {
        let (ar, ai) = (re[k], im[k]);
        re[k] = ar * br[k] - ai * bi[k];
        im[k] = ar * bi[k] + ai * br[k];
    }
}

/// `(re, im) = y − (hl·x)·c` per bin, where `(re, im)` holds hl for the bins from `k0`.
#[inline(always)]
fn residual_in_place(
    re: &mut [f32],
    im: &mut [f32],
    yr: &[f32],
    yi: &[f32],
    t: &Tables,
    k0: usize,
) {
    let n = re.len();
    let (im, yr, yi) = (&mut im[..n], &yr[..n], &yi[..n]);
    let (xr, xi) = (&t.x_spec.re[k0..k0 + n], &t.x_spec.im[k0..k0 + n]);
    let (cr, ci) = (&t.lin_comp.re[k0..k0 + n], &t.lin_comp.im[k0..k0 + n]);
    for k in 0..n {
        let (hr, hi) = (re[k], im[k]);
        let tr = hr * xr[k] - hi * xi[k];
        let ti = hr * xi[k] + hi * xr[k];
        let ur = tr * cr[k] - ti * ci[k];
        let ui = tr * ci[k] + ti * cr[k];
        re[k] = yr[k] - ur;
        im[k] = yi[k] - ui;
    }
}

/// First sample of harmonic window (`centre`, `lead`) for the linear peak at `p`, in the
/// capture-length buffer.
fn harmonic_start(t: &Tables, centre: f64, lead: usize, p: usize) -> usize {
    let c_int = (p as f64 + centre).floor();
    (c_int as isize - lead as isize).rem_euclid(t.n_fft as isize) as usize
}

/// Step 4: cut each harmonic's window from `s.h`, transform it, and fill its row of
/// `harmonics_db`; the windows are added into `s.union` at their places. Returns, per
/// harmonic, HDn as a ratio (for THD).
fn harmonics_into(
    t: &Tables,
    s: &mut Scratch,
    p: usize,
    h1_grid: &[C64],
    harmonics_db: &mut BTreeMap<String, Vec<Option<f64>>>,
) -> Vec<Vec<Option<f64>>> {
    let fs = t.fs_hz;
    let grid = &t.grid_hz;
    let top_hz = HARMONIC_TOP_FRACTION_OF_NYQUIST * 0.5 * fs;
    let df_harm = fs / t.n_harm as f64;
    let mut hd_lin = Vec::with_capacity(t.harmonics.len());
    for hw in &t.harmonics {
        let len = hw.lead + hw.tail;
        let start = harmonic_start(t, hw.centre, hw.lead, p);
        let dst0 = t.n_harm - hw.lead;
        {
            let (h, union, harm_time) = (&s.h, &mut s.union, &mut s.harm_time);
            for_circular(start, len, t.n_fft, |i, src| {
                let v = f64::from(get(h, src)) * hw.weights[i];
                let mut dst = dst0 + i;
                if dst >= t.n_harm {
                    dst -= t.n_harm;
                }
                set(harm_time, dst, v);
                let old = get(union, src);
                set(union, src, old + v as f32);
            });
        }
        t.fft_harm
            .forward(&s.harm_time, &mut s.harm.re, &mut s.harm.im, &mut s.ws_harm);
        for_circular(dst0 % t.n_harm, len, t.n_harm, |_, dst| {
            set(&mut s.harm_time, dst, 0.0)
        });
        let n = hw.order;
        let row_db = harmonics_db
            .get_mut(&n.to_string())
            .expect("one row per harmonic window");
        let mut row_lin = vec![None; grid.len()];
        let (hr, hi) = (&s.harm.re, &s.harm.im);
        for (g, &f) in grid.iter().enumerate() {
            let fh = n as f64 * f;
            if fh > top_hz {
                continue;
            }
            let pos = fh / df_harm;
            let i = (pos.floor() as usize).min(hr.len() - 2);
            let tt = pos - i as f64;
            let hn = C64::new(hr[i], hi[i]) * (1.0 - tt) + C64::new(hr[i + 1], hi[i + 1]) * tt;
            // Time zero of harmonic n is c_int + c_frac: its spectrum would be advanced by
            // the fraction, e^{j2π·fh·c_frac/fs}, a phase that leaves the magnitude, the only
            // thing reported, as it is; so it is not applied.
            let ratio = hn.norm() / h1_grid[g].norm().max(1e-300);
            row_lin[g] = Some(ratio);
            row_db[g] = Some(20.0 * ratio.max(1e-15).log10());
        }
        hd_lin.push(row_lin);
    }
    hd_lin
}

/// Step 5: rub-and-buzz indicator on the grid: peak residual (after removing the linear
/// part and harmonics 2..N) in the interval the sweep spends within ±1/(2b) octave of each
/// grid frequency, re the fundamental's peak A·|H1(f)|, dB.
fn rub_buzz(t: &Tables, s: &mut Scratch, p: usize, h1_grid: &[C64]) -> Vec<Option<f64>> {
    let fs = t.fs_hz;
    let n_fft = t.n_fft;
    // `union` holds the harmonic windows at their places in the deconvolved buffer.
    {
        let r = &s.resid;
        t.fft
            .forward_map_inverse(&s.union, &mut s.h, &mut s.ws, |k0, br, bi| {
                let n = br.len();
                let bi = &mut bi[..n];
                let (rr, ri) = (&r.re[k0..k0 + n], &r.im[k0..k0 + n]);
                let (xr, xi) = (
                    &t.x_fwd_analytic.re[k0..k0 + n],
                    &t.x_fwd_analytic.im[k0..k0 + n],
                );
                let w = &t.harm_band[k0..k0 + n];
                for k in 0..n {
                    // Band-limited like the harmonics, so that the DC and slow envelope terms
                    // of even-order distortion (x² has a DC part) do not read as buzz.
                    let ur = br[k] * xr[k] - bi[k] * xi[k];
                    let ui = br[k] * xi[k] + bi[k] * xr[k];
                    br[k] = (rr[k] - ur) * w[k];
                    bi[k] = (ri[k] - ui) * w[k];
                }
            });
    }
    let e = &s.h;
    let grid = &t.grid_hz;
    let half_width_oct = if grid.len() > 1 {
        0.5 * (grid[1] / grid[0]).log2()
    } else {
        1.0 / 48.0
    };
    let half_width_s = t.sweep.l_s * half_width_oct * std::f64::consts::LN_2;
    let half = ((half_width_s * fs).round() as usize).max(8);
    let start = t.sweep.start_sample + p;
    grid.iter()
        .zip(h1_grid)
        .map(|(&f, h1)| {
            let centre = start + (t.sweep.time_at(f) * fs).round() as usize;
            let lo = centre.saturating_sub(half);
            let hi = (centre + half).min(n_fft);
            if lo >= hi {
                return None;
            }
            let peak = f64::from(max_abs(e, lo, hi));
            let fund = t.sweep.amplitude * h1.norm();
            if fund <= 0.0 {
                return None;
            }
            Some(20.0 * (peak / fund).max(1e-15).log10())
        })
        .collect()
}

fn rms(x: &[f32]) -> f64 {
    if x.is_empty() {
        return 0.0;
    }
    (sum_squares_finite(x) / x.len() as f64).sqrt()
}
