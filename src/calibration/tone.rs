//! Reading a calibration tone: level through a band-pass, frequency, stability, distortion,
//! signal-to-noise ratio, and the refusal of anything that is not a steady sine at the
//! expected frequency.
//!
//! Used by microphone calibration (a sound calibrator on the fixture microphone) and by drive
//! calibration through an input of known volts per full scale. Sits beside the data flow: it
//! turns a recording into the numbers a calibration file holds.
//!
//! # Method
//!
//! 1. The mean (a converter's DC offset) is removed; the first and last
//!    [`EDGE_FRACTION`] of the recording are not judged (the calibrator settling, the
//!    band-pass's edge ringing).
//! 2. Frequency: the peak of the Hann-windowed spectrum of the judged part, refined by a
//!    parabola through the dB magnitudes of the three bins around it (common practice; its
//!    bias on a Hann window is a few hundredths of a bin, from memory — the test measures
//!    < 0.1 Hz on 0.42 Hz bins, far inside the ±2 % acceptance).
//! 3. Level: a zero-phase FFT band-pass around the measured frequency, flat within ±1/6
//!    octave, a raised-cosine skirt to zero at ±1/3 octave (the third-octave neighbours
//!    carry nothing), applied to the whole recording; rms of the judged part.
//! 4. Stability: the judged part cut into [`N_BLOCKS`] sub-blocks; the spread (max − min) of
//!    their band-passed rms levels.
//! 5. Distortion and noise from the Hann spectrum: fundamental power = bins within
//!    ±[`LINE_HALF_WIDTH_BINS`] of the tone, harmonic n likewise around n·f (n = 2..=5, below
//!    Nyquist); THD = √(Σ P_n / P_1) (re fundamental); noise = everything else above
//!    [`NOISE_LOW_HZ`]; SNR = P_1 / noise.
//!
//! FFT normalisation: realfft does not normalise; the inverse divides by the length here.
//! Powers from the Hann spectrum are only ever used in ratios, so their scale cancels.

use realfft::num_complex::Complex64;
use realfft::RealFftPlanner;

/// Fraction of the recording at each end that is not judged.
pub const EDGE_FRACTION: f64 = 0.1;
/// Number of sub-blocks over which the level's stability is judged.
pub const N_BLOCKS: usize = 10;
/// Half width, in bins, of a spectral line's power sum (Hann main lobe ±2 bins; ±8 holds all
/// but < 1e-5 of a line's power, the side lobes falling 18 dB/octave).
pub const LINE_HALF_WIDTH_BINS: usize = 8;
/// Noise is counted above this frequency (below it sits handling and wind rumble that the
/// band-pass removes from the level anyway).
pub const NOISE_LOW_HZ: f64 = 20.0;
/// Shortest recording read, s: ten sub-blocks of at least 0.1 s each after the edges.
pub const MIN_DURATION_S: f64 = 1.25;
/// Below this rms (dBFS) a recording is treated as silence.
pub const SILENCE_DBFS: f64 = -100.0;
/// Highest harmonic order in the THD.
pub const MAX_HARMONIC: usize = 5;

/// What is accepted as a calibration tone.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ToneLimits {
    /// Nominal frequency, Hz.
    pub nominal_hz: f64,
    /// Allowed relative frequency deviation, % of nominal.
    pub max_freq_dev_percent: f64,
    /// Allowed level spread between sub-blocks, dB.
    pub max_level_spread_db: f64,
    /// Allowed THD (re fundamental), %.
    pub max_thd_percent: f64,
    /// Minimum SNR (tone power over wideband noise), dB.
    pub min_snr_db: f64,
}

impl ToneLimits {
    /// The limits for a sound calibrator tone at `nominal_hz`.
    ///
    /// - Frequency ±2 %: IEC 60942 allows a class 1 calibrator about ±1 % of nominal (from
    ///   memory; class 2 ±2 %); ±2 % accepts any conforming calibrator and still refuses a
    ///   wrong one — the neighbouring third-octave frequencies are ±26 % away.
    /// - Level spread 0.1 dB: IEC 60942's short-term level fluctuation limit for class 1 is
    ///   below 0.1 dB (from memory); more means a loose coupling or a hand on the calibrator,
    ///   and a microphone sensitivity known to 0.1 dB is what the reading is for.
    /// - THD 3 %: the class 1 total distortion limit of IEC 60942 (from memory); a higher
    ///   value means the wrong signal or an overloaded input.
    /// - SNR 40 dB: the wideband noise then adds at most 10·lg(1 + 10⁻⁴) = 0.0004 dB to the
    ///   level even if all of it fell inside the band-pass.
    pub fn calibrator(nominal_hz: f64) -> Self {
        ToneLimits {
            nominal_hz,
            max_freq_dev_percent: 2.0,
            max_level_spread_db: 0.1,
            max_thd_percent: 3.0,
            min_snr_db: 40.0,
        }
    }
}

/// What a tone reading found (every field is reported even when the tone is refused).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ToneReading {
    /// Measured frequency, Hz.
    pub freq_hz: f64,
    /// Band-passed rms of the judged part, full scale (sample value 1.0 = 1 FS).
    pub rms_fs: f64,
    /// Band-passed level, dBFS after AES17 ([`crate::units::tone_dbfs`]: 0 dBFS is a
    /// full-scale sine, so a sine of peak a reads 20·lg(a)).
    pub level_dbfs: f64,
    /// Spread (max − min) of the sub-block levels, dB.
    pub level_spread_db: f64,
    /// THD re fundamental, %.
    pub thd_percent: f64,
    /// Tone power over wideband noise power, dB (capped at 200 dB).
    pub snr_db: f64,
    /// Peak absolute sample of the whole recording, full scale.
    pub peak_fs: f64,
    /// Seconds judged.
    pub judged_s: f64,
}

/// Why a recording is not an acceptable calibration tone.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ToneError {
    /// Too short to judge.
    #[error("expected a recording of at least {min_s} s, found {found_s:.3} s")]
    TooShort {
        /// Minimum, s.
        min_s: f64,
        /// Found, s.
        found_s: f64,
    },
    /// Nothing recorded.
    #[error(
        "no tone: the recording is silent (rms {rms_dbfs:.1} dBFS, below {SILENCE_DBFS} dBFS); \
         is the calibrator on and on this input?"
    )]
    Silence {
        /// rms of the recording, dBFS.
        rms_dbfs: f64,
    },
    /// The input clipped.
    #[error(
        "the recording clips (peak {peak_fs:.4} FS); lower the input gain or the calibrator level"
    )]
    Clipped {
        /// Peak sample.
        peak_fs: f64,
    },
    /// Not at the expected frequency.
    #[error(
        "not a calibrator tone at {nominal_hz} Hz: the strongest tone is at {found_hz:.1} Hz \
         ({dev_percent:+.1} %, allowed ±{max_percent} %); check the calibrator and --freq-hz"
    )]
    WrongFrequency {
        /// Expected, Hz.
        nominal_hz: f64,
        /// Found, Hz.
        found_hz: f64,
        /// Deviation, % of nominal.
        dev_percent: f64,
        /// Allowed, %.
        max_percent: f64,
    },
    /// Too much noise.
    #[error(
        "too noisy for a calibration: SNR {snr_db:.1} dB, at least {min_db} dB needed; \
         quiet the room, seat the calibrator fully"
    )]
    Noisy {
        /// Found, dB.
        snr_db: f64,
        /// Needed, dB.
        min_db: f64,
    },
    /// Too much distortion.
    #[error(
        "too distorted for a calibrator tone: THD {thd_percent:.2} %, at most {max_percent} %; \
         check the input gain and the calibrator"
    )]
    Distorted {
        /// Found, %.
        thd_percent: f64,
        /// Allowed, %.
        max_percent: f64,
    },
    /// The level moved during the reading.
    #[error(
        "unstable tone: the level varied by {spread_db:.3} dB between sub-blocks, at most \
         {max_db} dB allowed; hold the calibrator still and read again"
    )]
    Unstable {
        /// Found, dB.
        spread_db: f64,
        /// Allowed, dB.
        max_db: f64,
    },
}

/// 10·lg of a power ratio, floored so that zero gives a finite, very low number.
fn db10(x: f64) -> f64 {
    10.0 * x.max(1e-300).log10()
}

/// Measure the tone in `samples` (full scale ±1.0) without judging it.
///
/// # Errors
/// [`ToneError::TooShort`] and [`ToneError::Silence`] only (nothing to measure otherwise).
pub fn measure_tone(samples: &[f32], sample_rate_hz: u32) -> Result<ToneReading, ToneError> {
    let fs_hz = f64::from(sample_rate_hz);
    let n = samples.len();
    let found_s = n as f64 / fs_hz;
    if found_s < MIN_DURATION_S {
        return Err(ToneError::TooShort {
            min_s: MIN_DURATION_S,
            found_s,
        });
    }
    let mean = samples.iter().map(|&x| f64::from(x)).sum::<f64>() / n as f64;
    let x: Vec<f64> = samples.iter().map(|&s| f64::from(s) - mean).collect();
    let peak_fs = samples
        .iter()
        .fold(0.0f64, |m, &s| m.max(f64::from(s).abs()));
    let rms_all = (x.iter().map(|v| v * v).sum::<f64>() / n as f64).sqrt();
    let rms_all_dbfs = db10(rms_all * rms_all);
    if rms_all_dbfs < SILENCE_DBFS {
        return Err(ToneError::Silence {
            rms_dbfs: rms_all_dbfs,
        });
    }

    let edge = ((n as f64) * EDGE_FRACTION).round() as usize;
    let judged = &x[edge..n - edge];
    let m = judged.len();

    // Hann spectrum of the judged part.
    let mut planner = RealFftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(m);
    let mut buf: Vec<f64> = judged
        .iter()
        .enumerate()
        .map(|(i, v)| {
            let w = 0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / m as f64).cos();
            v * w
        })
        .collect();
    let mut spec = fwd.make_output_vec();
    // Lengths match by construction; a failure would be a programmer error.
    fwd.process(&mut buf, &mut spec)
        .expect("realfft: buffer lengths from the planner");
    let power: Vec<f64> = spec.iter().map(|c| c.norm_sqr()).collect();
    let df_hz = fs_hz / m as f64;
    let k_low = ((NOISE_LOW_HZ / df_hz).ceil() as usize).max(1);
    let k_peak = (k_low..power.len())
        .max_by(|&a, &b| power[a].total_cmp(&power[b]))
        .unwrap_or(k_low);
    let freq_hz = if k_peak > 0 && k_peak + 1 < power.len() {
        let (a, b, c) = (
            db10(power[k_peak - 1]),
            db10(power[k_peak]),
            db10(power[k_peak + 1]),
        );
        let denom = a - 2.0 * b + c;
        let delta = if denom.abs() > 0.0 {
            (0.5 * (a - c) / denom).clamp(-0.5, 0.5)
        } else {
            0.0
        };
        (k_peak as f64 + delta) * df_hz
    } else {
        k_peak as f64 * df_hz
    };

    // Line powers: fundamental and harmonics; the rest above NOISE_LOW_HZ is noise.
    let line = |center_hz: f64| -> (usize, usize) {
        let k = (center_hz / df_hz).round() as usize;
        (
            k.saturating_sub(LINE_HALF_WIDTH_BINS).max(k_low),
            (k + LINE_HALF_WIDTH_BINS).min(power.len() - 1),
        )
    };
    let sum = |(a, b): (usize, usize)| -> f64 {
        if a > b {
            0.0
        } else {
            power[a..=b].iter().sum()
        }
    };
    let fund = line(freq_hz);
    let p1 = sum(fund);
    let mut used = vec![fund];
    let mut p_harm = 0.0;
    for h in 2..=MAX_HARMONIC {
        let fh = h as f64 * freq_hz;
        if fh + LINE_HALF_WIDTH_BINS as f64 * df_hz >= fs_hz / 2.0 {
            break;
        }
        let r = line(fh);
        p_harm += sum(r);
        used.push(r);
    }
    let total: f64 = power[k_low..].iter().sum();
    let noise = (total - p1 - p_harm).max(0.0);
    let snr_db = if noise > 0.0 {
        db10(p1 / noise).min(200.0)
    } else {
        200.0
    };
    let thd_percent = if p1 > 0.0 {
        100.0 * (p_harm / p1).sqrt()
    } else {
        f64::INFINITY
    };

    // Zero-phase band-pass around the tone, on the whole recording.
    let filtered = band_pass(&x, fs_hz, freq_hz.max(df_hz), &mut planner);
    let part = &filtered[edge..n - edge];
    let ms = |s: &[f64]| s.iter().map(|v| v * v).sum::<f64>() / s.len() as f64;
    let rms_fs = ms(part).sqrt();
    let block = part.len() / N_BLOCKS;
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for b in 0..N_BLOCKS {
        let l = db10(ms(&part[b * block..(b + 1) * block]));
        lo = lo.min(l);
        hi = hi.max(l);
    }
    Ok(ToneReading {
        freq_hz,
        rms_fs,
        level_dbfs: crate::units::tone_dbfs(rms_fs),
        level_spread_db: hi - lo,
        thd_percent,
        snr_db,
        peak_fs,
        judged_s: m as f64 / fs_hz,
    })
}

/// Measure the tone and judge it against `limits`; the first failed criterion is the error.
///
/// Order of the checks: silence, clipping, frequency, noise, distortion, stability — the
/// earliest is the likeliest cause of the later ones (a wrong tone is also "unstable").
pub fn read_tone(
    samples: &[f32],
    sample_rate_hz: u32,
    limits: &ToneLimits,
) -> Result<ToneReading, ToneError> {
    let r = measure_tone(samples, sample_rate_hz)?;
    // Full scale is ±1.0; a converter that clips stops at its last code, just below 1.0.
    if r.peak_fs >= 0.999 {
        return Err(ToneError::Clipped { peak_fs: r.peak_fs });
    }
    let dev_percent = 100.0 * (r.freq_hz - limits.nominal_hz) / limits.nominal_hz;
    if dev_percent.abs() > limits.max_freq_dev_percent {
        return Err(ToneError::WrongFrequency {
            nominal_hz: limits.nominal_hz,
            found_hz: r.freq_hz,
            dev_percent,
            max_percent: limits.max_freq_dev_percent,
        });
    }
    if r.snr_db < limits.min_snr_db {
        return Err(ToneError::Noisy {
            snr_db: r.snr_db,
            min_db: limits.min_snr_db,
        });
    }
    if r.thd_percent > limits.max_thd_percent {
        return Err(ToneError::Distorted {
            thd_percent: r.thd_percent,
            max_percent: limits.max_thd_percent,
        });
    }
    if r.level_spread_db > limits.max_level_spread_db {
        return Err(ToneError::Unstable {
            spread_db: r.level_spread_db,
            max_db: limits.max_level_spread_db,
        });
    }
    Ok(r)
}

/// Gain of the band-pass at `f_hz` for a tone at `center_hz`: 1 within ±1/6 octave, a
/// raised-cosine skirt (in log frequency) to 0 at ±1/3 octave, 0 beyond.
pub fn band_pass_gain(f_hz: f64, center_hz: f64) -> f64 {
    if f_hz <= 0.0 {
        return 0.0;
    }
    let oct = (f_hz / center_hz).log2().abs();
    let (flat, stop) = (1.0 / 6.0, 1.0 / 3.0);
    if oct <= flat {
        1.0
    } else if oct >= stop {
        0.0
    } else {
        0.5 + 0.5 * (std::f64::consts::PI * (oct - flat) / (stop - flat)).cos()
    }
}

/// Zero-phase band-pass: a real, even gain applied to the FFT of the whole signal.
fn band_pass(x: &[f64], fs_hz: f64, center_hz: f64, planner: &mut RealFftPlanner<f64>) -> Vec<f64> {
    let n = x.len();
    let fwd = planner.plan_fft_forward(n);
    let inv = planner.plan_fft_inverse(n);
    let mut buf = x.to_vec();
    let mut spec: Vec<Complex64> = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec)
        .expect("realfft: buffer lengths from the planner");
    let df_hz = fs_hz / n as f64;
    for (k, c) in spec.iter_mut().enumerate() {
        *c *= band_pass_gain(k as f64 * df_hz, center_hz) / n as f64;
    }
    // realfft's inverse wants a real DC (and Nyquist for even n): the gain is 0 there.
    spec[0].im = 0.0;
    if n.is_multiple_of(2) {
        if let Some(last) = spec.last_mut() {
            last.im = 0.0;
        }
    }
    let mut out = inv.make_output_vec();
    inv.process(&mut spec, &mut out)
        .expect("realfft: buffer lengths from the planner");
    out
}
