//! The pilot tone: a short, quiet sine played before every sweep, read back from the capture,
//! and the decision it leads to — sweep as planned, scale the sweep down, or abandon.
//!
//! Sits between stimulus and rig (issue 5 point 3): the stimulus places the pilot after a
//! pre-roll of silence; the rig plays and captures it; [`read_pilot`] measures it;
//! [`decide_sweep`] turns the measured level into the sweep's level. No I/O here.
//!
//! # Levels
//!
//! Drive and measured levels are in **dBFS after AES17**: re the rms of a full-scale sine, so
//! a sine of peak amplitude a (sample value 1.0 = 1 FS) is `20·lg(a)` dBFS — the generator's
//! peak dBFS and the reading's level are the same kind of number, and their difference is the
//! unit's gain at the pilot frequency. It is the one convention of every tone reading
//! ([`crate::units::tone_dbfs`]; `calibration::tone` reads the same way).
//!
//! # Reading (method)
//!
//! 1. Onset: the pilot arrives somewhere in `tone_start ..= tone_start + max latency`. The
//!    capture is shifted to baseband (`z[n] = x[n]·e^{−jω₀n}`) and a box as long as the
//!    pilot's steady part slides over it (prefix sums); the position with the largest |Σ z|
//!    is the steady part. Near the true onset the box sum changes little (the raised-cosine
//!    top is flat), and the Hann window below weighs the edges little: for the default
//!    pilot (100 ms, 10 ms fades) an onset error of 5 ms lowers the level by 0.0008 dB and one
//!    of 10 ms, the whole fade, by 0.022 dB (computed from the window and the fade shape).
//! 2. Level: a single-bin DFT at exactly the pilot frequency (a DTFT sample, so no scalloping)
//!    over the steady part with a **Hann window**: `a = 2·|Σ w[n]·x[n]·e^{−jω₀n}| / Σ w[n]`.
//!    The negative-frequency image lies 2f₀ away, 2f₀·T bins of the window: Hann's side lobe
//!    there is at most 1/(π·k·(k² − 1)) of the main lobe (k = 2f₀·T), −64 dB or 0.006 dB of
//!    level for the [`MIN_CYCLES`] (4) required, −142 dB for 1 kHz over 80 ms.
//! 3. Noise: the same window and scaling on the **pre-roll** before the tone (up to
//!    [`MAX_NOISE_WINDOWS`] segments of the steady part's length nearest the tone,
//!    overlapping by three quarters) at the pilot frequency and
//!    ±1..±[`NOISE_STEPS`] resolution steps (1/window length) around it; the mean power of
//!    all of them. Hum at the pilot frequency is thus counted as noise, as it should be.
//! 4. SNR = tone-bin power / noise power; `present` when the SNR is at least the threshold
//!    ([`MIN_SNR_DB`], 20 dB: common practice for "a signal is there"). Noise alone reads up
//!    to about 10 dB (the onset search picks the loudest stretch; 300 seeded noise-only
//!    captures: at most 9.9 dB). At the threshold the noise moves the level by about ±0.9 dB
//!    (measured 0.7 dB rms, 2.8 dB worst in 300 seeded captures); 0.05 dB needs about 55 dB
//!    (measured 0.013 dB rms, 0.043 dB worst). The sweep decision's margin must cover this.
//! 5. `clipped` when any capture sample reaches [`CLIP_FS`]: the level of a clipped tone reads
//!    low, which is the dangerous direction, so a clipped pilot always abandons the sweep.
//!
//! A pilot measures the unit at one frequency: the extrapolation holds there. The margin of
//! [`SweepLimits`] is where the rest of the response (resonances above the pilot's level)
//! belongs.

use crate::calibration::P_REF_PA;
use realfft::num_complex::Complex64;
use std::f64::consts::PI;
use std::fmt;

/// Default pilot duration, s (issue 5: 100 ms).
pub const DEFAULT_DURATION_S: f64 = 0.1;
/// Default raised-cosine fade at each end, s (10 ms: long enough that the pilot's spectrum
/// stays near its frequency, short enough to leave 80 ms steady).
pub const DEFAULT_FADE_S: f64 = 0.01;
/// Default pilot level below the sweep, dB (issue 5: "for example 30 dB below").
pub const DEFAULT_BELOW_SWEEP_DB: f64 = 30.0;
/// Default largest rig latency searched, s (a sound card's round trip is a few to a few tens
/// of ms; common practice).
pub const DEFAULT_MAX_LATENCY_S: f64 = 0.05;
/// Default SNR from which a pilot counts as present, dB (common practice; module doc).
pub const MIN_SNR_DB: f64 = 20.0;
/// Samples at or beyond this magnitude count as clipped: one 16-bit step below full scale,
/// the same threshold as the analysis uses.
pub const CLIP_FS: f32 = 32_767.0 / 32_768.0;
/// Fewest pilot cycles in the analysis window (keeps the image at −2f₀ far from the bin).
pub const MIN_CYCLES: f64 = 4.0;
/// Noise is read at the pilot frequency and this many resolution steps either side.
pub const NOISE_STEPS: i32 = 8;
/// Most pre-roll windows read for the noise (the ones nearest the pilot): enough for a
/// stable mean, and a long pre-roll does not cost more.
pub const MAX_NOISE_WINDOWS: usize = 16;
/// Cap of the reported SNR, dB (a noise-free capture would give +∞).
pub const MAX_SNR_DB: f64 = 200.0;
/// Lowest reported level, dBFS (an all-zero capture would give −∞).
pub const FLOOR_DBFS: f64 = -400.0;

/// What the pilot is.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct PilotSpec {
    /// Frequency, Hz.
    pub freq_hz: f64,
    /// Peak level, dBFS (AES17: 0 dBFS is a full-scale sine); at most 0.
    pub level_dbfs: f64,
    /// Total duration including both fades, s.
    pub duration_s: f64,
    /// Raised-cosine fade at each end, s.
    pub fade_s: f64,
}

impl PilotSpec {
    /// A pilot at `freq_hz` and `level_dbfs` with the default duration and fades.
    pub fn new(freq_hz: f64, level_dbfs: f64) -> Self {
        PilotSpec {
            freq_hz,
            level_dbfs,
            duration_s: DEFAULT_DURATION_S,
            fade_s: DEFAULT_FADE_S,
        }
    }

    /// A pilot [`DEFAULT_BELOW_SWEEP_DB`] below a sweep of peak `sweep_dbfs`.
    pub fn below_sweep(freq_hz: f64, sweep_dbfs: f64) -> Self {
        PilotSpec::new(freq_hz, sweep_dbfs - DEFAULT_BELOW_SWEEP_DB)
    }

    /// Sample counts at `rate_hz`, after checking that the pilot can be played and read.
    fn layout(&self, rate_hz: u32) -> Result<Layout, PilotError> {
        if rate_hz == 0 {
            return Err(PilotError::BadRate);
        }
        let fs = f64::from(rate_hz);
        if !(self.freq_hz.is_finite() && self.freq_hz > 0.0 && self.freq_hz < fs / 2.0) {
            return Err(PilotError::BadFrequency {
                freq_hz: self.freq_hz,
                nyquist_hz: fs / 2.0,
            });
        }
        if !(self.level_dbfs.is_finite() && self.level_dbfs <= 0.0) {
            return Err(PilotError::BadLevel {
                level_dbfs: self.level_dbfs,
            });
        }
        let shape_ok = self.duration_s.is_finite()
            && self.fade_s.is_finite()
            && self.fade_s > 0.0
            && self.duration_s > 2.0 * self.fade_s;
        let n_total = (self.duration_s * fs).round();
        let n_fade = (self.fade_s * fs).round();
        if !shape_ok || n_fade < 1.0 || n_total > 1e9 || n_total <= 2.0 * n_fade {
            return Err(PilotError::BadShape {
                duration_s: self.duration_s,
                fade_s: self.fade_s,
            });
        }
        let (n_total, n_fade) = (n_total as usize, n_fade as usize);
        let n_steady = n_total - 2 * n_fade;
        let cycles = n_steady as f64 * self.freq_hz / fs;
        if cycles < MIN_CYCLES {
            return Err(PilotError::TooFewCycles {
                cycles,
                min_cycles: MIN_CYCLES,
            });
        }
        Ok(Layout {
            n_total,
            n_fade,
            n_steady,
        })
    }
}

/// Sample counts of a pilot at one rate.
#[derive(Debug, Clone, Copy)]
struct Layout {
    n_total: usize,
    n_fade: usize,
    n_steady: usize,
}

/// Why a pilot cannot be made, read or decided on.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PilotError {
    /// A sample rate of 0.
    #[error("expected a sample rate above 0 Hz, found 0")]
    BadRate,
    /// A frequency outside (0, Nyquist).
    #[error(
        "expected a pilot frequency between 0 and {nyquist_hz} Hz (Nyquist), found {freq_hz} Hz"
    )]
    BadFrequency {
        /// Found, Hz.
        freq_hz: f64,
        /// Half the sample rate, Hz.
        nyquist_hz: f64,
    },
    /// A level above full scale or not finite.
    #[error("expected a pilot peak level of 0 dBFS or less, found {level_dbfs} dBFS")]
    BadLevel {
        /// Found, dBFS.
        level_dbfs: f64,
    },
    /// Fades that do not fit in the duration.
    #[error(
        "expected a pilot longer than its two fades, each fade at least one sample, found {duration_s} s with {fade_s} s fades"
    )]
    BadShape {
        /// Found duration, s.
        duration_s: f64,
        /// Found fade, s.
        fade_s: f64,
    },
    /// A steady part too short for the frequency.
    #[error(
        "expected at least {min_cycles} cycles in the pilot's steady part, found {cycles:.2}: lengthen the pilot or raise its frequency"
    )]
    TooFewCycles {
        /// Cycles found.
        cycles: f64,
        /// Minimum.
        min_cycles: f64,
    },
    /// A negative or non-finite latency bound.
    #[error("expected a largest latency of 0 s or more, found {found_s} s")]
    BadLatency {
        /// Found, s.
        found_s: f64,
    },
    /// A capture too short to hold the pilot at the largest latency.
    #[error(
        "expected a capture of at least {needed} samples (pre-roll, largest latency and pilot), found {found}"
    )]
    CaptureTooShort {
        /// Samples needed.
        needed: usize,
        /// Samples found.
        found: usize,
    },
    /// A pre-roll too short for one noise window.
    #[error(
        "expected a pre-roll of at least {needed} samples before the pilot (one analysis window, for the noise), found {found}"
    )]
    PreRollTooShort {
        /// Samples needed.
        needed: usize,
        /// Samples found.
        found: usize,
    },
    /// A NaN or infinite capture sample.
    #[error("expected finite capture samples, found {value} at sample {index}")]
    NotFinite {
        /// Index of the sample.
        index: usize,
        /// The value.
        value: f32,
    },
    /// A decision input that is not finite (or a negative margin).
    #[error("expected {expected} for the sweep decision's {what}, found {found}")]
    BadDecisionInput {
        /// Which input.
        what: &'static str,
        /// What was expected.
        expected: &'static str,
        /// The value found.
        found: f64,
    },
}

/// The pilot's samples at `rate_hz`: `a·e(n)·sin(2π·f·n/fs)` with `a = 10^(L/20)` and a
/// raised-cosine envelope e rising over the first fade, 1 over the steady part, falling over
/// the last fade (symmetric; 0 at the first and last sample).
///
/// # Errors
///
/// A rate of 0, a frequency outside (0, Nyquist), a level above 0 dBFS, fades that do not fit
/// or a steady part of fewer than [`MIN_CYCLES`] cycles.
pub fn generate_pilot(spec: &PilotSpec, rate_hz: u32) -> Result<Vec<f32>, PilotError> {
    let layout = spec.layout(rate_hz)?;
    let amplitude = 10f64.powf(spec.level_dbfs / 20.0);
    Ok(crate::dsp::signals::faded_sine(
        amplitude,
        spec.freq_hz,
        rate_hz,
        layout.n_total,
        layout.n_fade,
    ))
}

/// Where the pilot is in the capture and what counts as present.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ReadSettings {
    /// Capture index at which the pilot starts as played (the pre-roll's length): the pilot
    /// arrives at this index plus the rig's latency.
    pub tone_start: usize,
    /// Largest rig latency searched, s.
    pub max_latency_s: f64,
    /// SNR from which the pilot counts as present, dB.
    pub min_snr_db: f64,
}

impl ReadSettings {
    /// Settings for a pilot played at capture index `tone_start`, with the defaults
    /// ([`DEFAULT_MAX_LATENCY_S`], [`MIN_SNR_DB`]).
    pub fn new(tone_start: usize) -> Self {
        ReadSettings {
            tone_start,
            max_latency_s: DEFAULT_MAX_LATENCY_S,
            min_snr_db: MIN_SNR_DB,
        }
    }
}

/// What the pilot reading found.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct PilotReading {
    /// Level of the tone, dBFS after AES17 (re the rms of a full-scale sine: `20·lg(peak)`),
    /// floored at [`FLOOR_DBFS`].
    pub level_dbfs: f64,
    /// Peak amplitude of the tone, full scale.
    pub amplitude_fs: f64,
    /// Noise in the same bin, on the same scale as `level_dbfs`, dBFS.
    pub noise_dbfs: f64,
    /// Tone-bin power over noise power, dB, within ±[`MAX_SNR_DB`].
    pub snr_db: f64,
    /// SNR at or above the threshold.
    pub present: bool,
    /// Some capture sample at or beyond [`CLIP_FS`].
    pub clipped: bool,
    /// Largest capture sample magnitude, full scale.
    pub peak_fs: f64,
    /// Samples from `tone_start` to the pilot's arrival, as estimated (the rig's latency).
    pub delay_samples: usize,
    /// Length of the analysis window, samples.
    pub window_samples: usize,
}

impl PilotReading {
    /// The tone's rms sound pressure level at the microphone, dB re 20 µPa (ISO 1683), for an
    /// input of `mic_fs_per_pa` full scale per pascal (instantaneous, as the calibration
    /// stores it). Its peak level is 3.01 dB higher.
    pub fn spl_db(&self, mic_fs_per_pa: f64) -> f64 {
        let p_rms_pa = self.amplitude_fs / mic_fs_per_pa / 2f64.sqrt();
        20.0 * (p_rms_pa / P_REF_PA).log10()
    }
}

/// Hann-windowed DTFT of `x` at `omega` rad/sample, phase referred to the first sample.
fn windowed_dtft(x: &[f32], hann: &[f64], omega: f64) -> Complex64 {
    // Exact phase per sample rather than a rotating phasor: a few thousand sin/cos per call
    // cost nothing next to the capture, and no drift needs reasoning about.
    x.iter()
        .zip(hann)
        .enumerate()
        .map(|(n, (&s, &w))| Complex64::from_polar(w * f64::from(s), -omega * n as f64))
        .sum()
}

/// Read the pilot of `spec` from one capture channel at `rate_hz` (module doc, "Reading").
///
/// # Errors
///
/// An invalid `spec` (as [`generate_pilot`]), a negative latency bound, a capture too short
/// for pre-roll + latency + pilot, a pre-roll shorter than one analysis window, or a NaN or
/// infinite sample.
pub fn read_pilot(
    capture: &[f32],
    rate_hz: u32,
    spec: &PilotSpec,
    settings: &ReadSettings,
) -> Result<PilotReading, PilotError> {
    let layout = spec.layout(rate_hz)?;
    let fs = f64::from(rate_hz);
    if !(settings.max_latency_s.is_finite() && settings.max_latency_s >= 0.0) {
        return Err(PilotError::BadLatency {
            found_s: settings.max_latency_s,
        });
    }
    let max_delay = (settings.max_latency_s * fs).ceil() as usize;
    let needed = settings
        .tone_start
        .saturating_add(max_delay)
        .saturating_add(layout.n_total);
    if capture.len() < needed {
        return Err(PilotError::CaptureTooShort {
            needed,
            found: capture.len(),
        });
    }
    let n_win = layout.n_steady;
    if settings.tone_start < n_win {
        return Err(PilotError::PreRollTooShort {
            needed: n_win,
            found: settings.tone_start,
        });
    }
    let mut peak_fs = 0.0f64;
    for (index, &value) in capture.iter().enumerate() {
        if !value.is_finite() {
            return Err(PilotError::NotFinite { index, value });
        }
        peak_fs = peak_fs.max(f64::from(value.abs()));
    }
    let clipped = peak_fs >= f64::from(CLIP_FS);
    let omega = 2.0 * PI * spec.freq_hz / fs;

    // 1. Onset: box sums of the baseband signal over every candidate steady part.
    let first = settings.tone_start + layout.n_fade;
    let span = &capture[first..first + max_delay + n_win];
    let mut prefix = Vec::with_capacity(span.len() + 1);
    prefix.push(Complex64::new(0.0, 0.0));
    let mut acc = Complex64::new(0.0, 0.0);
    for (i, &s) in span.iter().enumerate() {
        // Exact phase per sample (no recurrence): the sums are differenced, so a drifting
        // phasor would bias late positions.
        acc += Complex64::from_polar(f64::from(s), -omega * (first + i) as f64);
        prefix.push(acc);
    }
    let mut best = (0usize, -1.0f64);
    for d in 0..=max_delay {
        let m = (prefix[d + n_win] - prefix[d]).norm_sqr();
        if m > best.1 {
            best = (d, m);
        }
    }
    let delay_samples = best.0;

    // 2. Level over the steady part with a Hann window (periodic form over n_win samples).
    let hann: Vec<f64> = (0..n_win)
        .map(|n| 0.5 * (1.0 - (2.0 * PI * n as f64 / n_win as f64).cos()))
        .collect();
    let sum_w: f64 = hann.iter().sum();
    let scale = 2.0 / sum_w;
    let steady = &capture[first + delay_samples..first + delay_samples + n_win];
    let tone = windowed_dtft(steady, &hann, omega);
    let tone_power = tone.norm_sqr();
    let amplitude_fs = tone.norm() * scale;

    // 3. Noise: windows overlapping by 3/4 over the pre-roll, at the pilot frequency and
    // ±NOISE_STEPS resolution steps, inside (0, π).
    let hop = (n_win / 4).max(1);
    let n_windows = ((settings.tone_start - n_win) / hop + 1).min(MAX_NOISE_WINDOWS);
    let mut noise_sum = 0.0;
    let mut n_noise = 0usize;
    for i in 0..n_windows {
        // Counted back from the pilot: window i ends i hops before the pre-roll does.
        let seg = settings.tone_start - n_win - i * hop;
        let segment = &capture[seg..seg + n_win];
        for k in -NOISE_STEPS..=NOISE_STEPS {
            let w = omega + f64::from(k) * 2.0 * PI / n_win as f64;
            if w > 0.0 && w < PI {
                noise_sum += windowed_dtft(segment, &hann, w).norm_sqr();
                n_noise += 1;
            }
        }
    }
    // n_noise ≥ 1: the pre-roll holds one window and the pilot frequency itself is in (0, π).
    let noise_power = noise_sum / n_noise.max(1) as f64;

    let snr_db = if noise_power > 0.0 && tone_power > 0.0 {
        (10.0 * (tone_power / noise_power).log10()).clamp(-MAX_SNR_DB, MAX_SNR_DB)
    } else if tone_power > 0.0 {
        MAX_SNR_DB
    } else {
        -MAX_SNR_DB
    };
    let to_dbfs = |power: f64| {
        if power > 0.0 {
            (10.0 * power.log10() + 20.0 * scale.log10()).max(FLOOR_DBFS)
        } else {
            FLOOR_DBFS
        }
    };
    Ok(PilotReading {
        level_dbfs: to_dbfs(tone_power),
        amplitude_fs,
        noise_dbfs: to_dbfs(noise_power),
        snr_db,
        present: snr_db >= settings.min_snr_db,
        clipped,
        peak_fs,
        delay_samples,
        window_samples: n_win,
    })
}

/// The level a sweep of peak `sweep_drive_dbfs` would produce, given a pilot driven at
/// `pilot_drive_dbfs` measured at `pilot_measured_db` (any dB unit; the result is in the same
/// unit): linear scaling keeps the dB difference, `L_sweep = L_pilot + (D_sweep − D_pilot)`.
pub fn extrapolate_db(pilot_drive_dbfs: f64, pilot_measured_db: f64, sweep_drive_dbfs: f64) -> f64 {
    pilot_measured_db + (sweep_drive_dbfs - pilot_drive_dbfs)
}

/// The cap the sweep must stay under and how far it may be scaled down.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SweepLimits {
    /// Cap on the extrapolated level, in the unit of the measured pilot level (dB SPL for a
    /// calibrated microphone, dBFS at the input otherwise).
    pub cap_db: f64,
    /// Margin kept under the cap, dB (≥ 0): the sweep may reach `cap_db − margin_db`.
    pub margin_db: f64,
    /// Lowest sweep drive level still worth measuring at, dBFS: a scale-down below it
    /// abandons instead.
    pub min_sweep_dbfs: f64,
}

/// Why a sweep is not played.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "reason", rename_all = "snake_case")]
pub enum AbandonReason {
    /// The pilot was not found: nothing says how loud the unit is, and it is never swept
    /// louder to find it.
    PilotAbsent {
        /// The pilot's SNR, dB.
        snr_db: f64,
    },
    /// The capture clipped: the pilot's level reads low, so it cannot be trusted.
    PilotClipped {
        /// Largest capture magnitude, full scale.
        peak_fs: f64,
    },
    /// Staying under the cap needs a sweep below the lowest useful level.
    TooLoud {
        /// Level the planned sweep would reach.
        expected_db: f64,
        /// The cap.
        cap_db: f64,
        /// The margin under the cap, dB.
        margin_db: f64,
        /// Sweep level that would stay under the cap, dBFS.
        needed_sweep_dbfs: f64,
        /// Lowest useful sweep level, dBFS.
        min_sweep_dbfs: f64,
    },
    /// A drive monitor did not see the pilot its output played: the volts driven are
    /// unknown (a broken monitor wire, or an amplifier that is off or muted).
    MonitorSilent {
        /// The output, 0-based.
        output: usize,
        /// The monitor input, 0-based.
        input: usize,
        /// The pilot's SNR at the monitor, dB.
        snr_db: f64,
    },
    /// A drive monitor clipped on the pilot: the amplifier gives far more than expected.
    MonitorClipped {
        /// The output, 0-based.
        output: usize,
        /// The monitor input, 0-based.
        input: usize,
        /// Largest monitor sample, full scale.
        peak_fs: f64,
    },
    /// The amplifier's gain, as the drive monitor measures it, is not the calibrated one.
    DriveGainOff {
        /// The output, 0-based.
        output: usize,
        /// Measured volts peak per full scale.
        measured_v_peak_per_fs: f64,
        /// Calibrated volts peak per full scale.
        calibrated_v_peak_per_fs: f64,
        /// 20·lg(measured / calibrated), dB.
        deviation_db: f64,
        /// Largest deviation accepted, dB.
        tolerance_db: f64,
    },
    /// Staying under the drive-voltage cap needs a sweep below the lowest useful level.
    DriveTooHigh {
        /// The output, 0-based.
        output: usize,
        /// Peak volts the planned sweep would drive.
        expected_v_peak: f64,
        /// The drive cap, V peak.
        cap_v_peak: f64,
        /// Sweep level that would stay under it, dBFS.
        needed_sweep_dbfs: f64,
        /// Lowest useful sweep level, dBFS.
        min_sweep_dbfs: f64,
    },
}

impl fmt::Display for AbandonReason {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            AbandonReason::PilotAbsent { snr_db } => write!(
                f,
                "no pilot tone at the microphone (SNR {snr_db:.1} dB): the unit is not swept \
                 louder to find it; check the seating, the cable and the microphone"
            ),
            AbandonReason::PilotClipped { peak_fs } => write!(
                f,
                "the pilot tone clipped the input (peak {peak_fs:.4} FS): far louder than \
                 expected; the unit is not swept"
            ),
            AbandonReason::TooLoud {
                expected_db,
                cap_db,
                margin_db,
                needed_sweep_dbfs,
                min_sweep_dbfs,
            } => write!(
                f,
                "the sweep would reach {expected_db:.1} dB against a cap of {cap_db:.1} dB \
                 ({margin_db:.1} dB margin); staying under it needs a sweep at \
                 {needed_sweep_dbfs:.1} dBFS, below the lowest useful {min_sweep_dbfs:.1} dBFS; \
                 the unit is far more sensitive than declared"
            ),
            AbandonReason::MonitorSilent {
                output,
                input,
                snr_db,
            } => write!(
                f,
                "the drive monitor (input {}) shows no pilot tone from output {} (SNR \
                 {snr_db:.1} dB): the volts driven cannot be checked; check the amplifier and \
                 the monitor wire",
                input + 1,
                output + 1
            ),
            AbandonReason::MonitorClipped {
                output,
                input,
                peak_fs,
            } => write!(
                f,
                "the pilot tone of output {} clipped its drive monitor (input {}, peak \
                 {peak_fs:.4} FS): the amplifier gives far more than calibrated; check its gain",
                output + 1,
                input + 1
            ),
            AbandonReason::DriveGainOff {
                output,
                measured_v_peak_per_fs,
                calibrated_v_peak_per_fs,
                deviation_db,
                tolerance_db,
            } => write!(
                f,
                "output {}'s amplifier gives {deviation_db:+.1} dB against its calibration \
                 (the drive monitor measured {measured_v_peak_per_fs:.4} V peak per FS, the \
                 calibration says {calibrated_v_peak_per_fs:.4}; at most ±{tolerance_db:.1} dB \
                 is accepted): check the amplifier's gain setting, then calibrate the drive \
                 again",
                output + 1
            ),
            AbandonReason::DriveTooHigh {
                output,
                expected_v_peak,
                cap_v_peak,
                needed_sweep_dbfs,
                min_sweep_dbfs,
            } => write!(
                f,
                "output {} would drive {expected_v_peak:.3} V peak against a cap of \
                 {cap_v_peak:.3} V; staying under it needs a sweep at {needed_sweep_dbfs:.1} \
                 dBFS, below the lowest useful {min_sweep_dbfs:.1} dBFS",
                output + 1
            ),
        }
    }
}

/// What to do with the sweep after the pilot.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "action", rename_all = "snake_case")]
pub enum SweepDecision {
    /// Sweep at the planned level.
    Proceed {
        /// Planned sweep level, dBFS.
        sweep_dbfs: f64,
        /// Level it will reach.
        expected_db: f64,
    },
    /// Sweep quieter than planned.
    ScaleDown {
        /// Gain to apply to the planned sweep, dB (< 0).
        gain_db: f64,
        /// New sweep level, dBFS.
        sweep_dbfs: f64,
        /// Level it will reach (`cap − margin`).
        expected_db: f64,
        /// Level the planned sweep would have reached.
        planned_expected_db: f64,
    },
    /// Do not sweep: verdict retest, with the reason in words.
    Abandon {
        /// Why.
        reason: AbandonReason,
    },
}

fn finite(what: &'static str, value: f64) -> Result<f64, PilotError> {
    if value.is_finite() {
        Ok(value)
    } else {
        Err(PilotError::BadDecisionInput {
            what,
            expected: "a finite number",
            found: value,
        })
    }
}

/// Decide the sweep from a pilot reading. `pilot_measured_db` is the reading's level in the
/// cap's unit (`reading.level_dbfs`, or `reading.spl_db(...)` for a cap in dB SPL).
///
/// Abandons when the pilot clipped or is absent; otherwise the planned sweep proceeds when
/// its extrapolated level is at most `cap − margin`, is scaled down to exactly `cap − margin`
/// when that keeps the sweep at or above `min_sweep_dbfs`, and is abandoned when it does not.
/// The gain is never positive: a quiet unit is swept at the planned level, never louder.
///
/// # Errors
///
/// A non-finite level or limit, or a negative margin.
pub fn decide_sweep(
    reading: &PilotReading,
    pilot_measured_db: f64,
    pilot_drive_dbfs: f64,
    sweep_drive_dbfs: f64,
    limits: &SweepLimits,
) -> Result<SweepDecision, PilotError> {
    finite("measured pilot level", pilot_measured_db)?;
    finite("pilot drive level", pilot_drive_dbfs)?;
    finite("sweep drive level", sweep_drive_dbfs)?;
    finite("cap", limits.cap_db)?;
    finite("lowest useful sweep level", limits.min_sweep_dbfs)?;
    if !(limits.margin_db.is_finite() && limits.margin_db >= 0.0) {
        return Err(PilotError::BadDecisionInput {
            what: "margin",
            expected: "a finite margin of 0 dB or more",
            found: limits.margin_db,
        });
    }
    if reading.clipped {
        return Ok(SweepDecision::Abandon {
            reason: AbandonReason::PilotClipped {
                peak_fs: reading.peak_fs,
            },
        });
    }
    if !reading.present {
        return Ok(SweepDecision::Abandon {
            reason: AbandonReason::PilotAbsent {
                snr_db: reading.snr_db,
            },
        });
    }
    let expected_db = extrapolate_db(pilot_drive_dbfs, pilot_measured_db, sweep_drive_dbfs);
    let allowed_db = limits.cap_db - limits.margin_db;
    if expected_db <= allowed_db {
        return Ok(SweepDecision::Proceed {
            sweep_dbfs: sweep_drive_dbfs,
            expected_db,
        });
    }
    let gain_db = allowed_db - expected_db;
    let needed_sweep_dbfs = sweep_drive_dbfs + gain_db;
    if needed_sweep_dbfs < limits.min_sweep_dbfs {
        return Ok(SweepDecision::Abandon {
            reason: AbandonReason::TooLoud {
                expected_db,
                cap_db: limits.cap_db,
                margin_db: limits.margin_db,
                needed_sweep_dbfs,
                min_sweep_dbfs: limits.min_sweep_dbfs,
            },
        });
    }
    Ok(SweepDecision::ScaleDown {
        gain_db,
        sweep_dbfs: needed_sweep_dbfs,
        expected_db: allowed_db,
        planned_expected_db: expected_db,
    })
}
