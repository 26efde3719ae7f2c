//! The synchronized exponential sine sweep (Novak, Simon & Lotton, JAES 63(10), 2015).
//!
//! First stage of the data flow after the plan: `Stimulus::from_plan` (in `crate::stimulus`) builds the exact
//! samples every output channel plays. The synchronization condition makes `f1·L` a whole
//! number, so that the n-th harmonic of the sweep is the sweep itself advanced by `L·ln n`
//! (Novak et al. 2015, eq. 11) and harmonic impulse responses land at known times.

use std::f64::consts::PI;

/// Parameters of one synchronized sweep, all derived from the plan.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SweepParams {
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// Start frequency f1, Hz.
    pub f1_hz: f64,
    /// Stop frequency f2, Hz.
    pub f2_hz: f64,
    /// Rate parameter L = round(f1·T̂/ln(f2/f1))/f1, s (Novak et al. 2015, eq. 12).
    pub l_s: f64,
    /// Synchronized duration T = L·ln(f2/f1), s.
    pub duration_s: f64,
    /// Peak amplitude, full scale = 1.0.
    pub amplitude: f64,
    /// Half-cosine fade-in length, samples.
    pub fade_in_samples: usize,
    /// Half-cosine fade-out length, samples.
    pub fade_out_samples: usize,
    /// Number of sweep samples (fades included, silences excluded).
    pub n_sweep_samples: usize,
    /// Index of the first sweep sample in the stimulus (length of the leading silence).
    pub start_sample: usize,
}

/// Why a sweep cannot be built from the requested numbers.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SweepError {
    /// f1·T̂/ln(f2/f1) rounds to zero: the sweep is too short for its start frequency.
    #[error(
        "sweep too short to synchronize: f1·T/ln(f2/f1) = {ratio:.3} rounds to 0; \
         need a duration of at least {min_duration_s:.4} s at {f1_hz} Hz"
    )]
    TooShort {
        /// f1·T̂/ln(f2/f1).
        ratio: f64,
        /// Shortest duration that synchronizes, s.
        min_duration_s: f64,
        /// Start frequency, Hz.
        f1_hz: f64,
    },
    /// Frequencies not in 0 < f1 < f2.
    #[error("sweep needs 0 < start_hz < stop_hz, found {f1_hz} and {f2_hz}")]
    BadBand {
        /// Start frequency, Hz.
        f1_hz: f64,
        /// Stop frequency, Hz.
        f2_hz: f64,
    },
}

impl SweepParams {
    /// Compute the synchronized parameters (Novak et al. 2015, eq. 12 and 13).
    ///
    /// `requested_duration_s` is T̂; the result's `duration_s` is the synchronized T.
    // Each argument is one plan field with its own unit; a builder would only hide that.
    #[allow(clippy::too_many_arguments)]
    pub fn synchronized(
        sample_rate_hz: u32,
        f1_hz: f64,
        f2_hz: f64,
        requested_duration_s: f64,
        amplitude: f64,
        fade_in_s: f64,
        fade_out_s: f64,
        silence_before_s: f64,
    ) -> Result<Self, SweepError> {
        if !(f1_hz > 0.0 && f2_hz > f1_hz) {
            return Err(SweepError::BadBand { f1_hz, f2_hz });
        }
        let ln_ratio = (f2_hz / f1_hz).ln();
        let ratio = f1_hz * requested_duration_s / ln_ratio;
        let k = ratio.round();
        if k < 1.0 {
            return Err(SweepError::TooShort {
                ratio,
                min_duration_s: 0.5 * ln_ratio / f1_hz,
                f1_hz,
            });
        }
        let l_s = k / f1_hz;
        let duration_s = l_s * ln_ratio;
        let fs = f64::from(sample_rate_hz);
        let n_sweep_samples = (duration_s * fs).round() as usize;
        Ok(SweepParams {
            sample_rate_hz,
            f1_hz,
            f2_hz,
            l_s,
            duration_s,
            amplitude,
            fade_in_samples: ((fade_in_s * fs).round() as usize).min(n_sweep_samples / 2),
            fade_out_samples: ((fade_out_s * fs).round() as usize).min(n_sweep_samples / 2),
            n_sweep_samples,
            start_sample: (silence_before_s * fs).round() as usize,
        })
    }

    /// Instantaneous phase φ(t) = 2π·f1·L·(exp(t/L) − 1), t in seconds from the sweep start.
    /// Equal to 2π·f1·L·exp(t/L) modulo 2π because f1·L is whole.
    pub fn phase_rad(&self, t_s: f64) -> f64 {
        2.0 * PI * self.f1_hz * self.l_s * ((t_s / self.l_s).exp_m1())
    }

    /// Instantaneous frequency f1·exp(t/L), Hz.
    pub fn frequency_at(&self, t_s: f64) -> f64 {
        self.f1_hz * (t_s / self.l_s).exp()
    }

    /// Time (s from the sweep start) at which the sweep passes `freq_hz`.
    pub fn time_at(&self, freq_hz: f64) -> f64 {
        self.l_s * (freq_hz / self.f1_hz).ln()
    }

    /// Delay by which harmonic `n`'s impulse response precedes the linear one, s
    /// (Novak et al. 2015: Δt_n = L·ln n).
    pub fn harmonic_lead_s(&self, n: usize) -> f64 {
        self.l_s * (n as f64).ln()
    }

    /// Fade envelope at sweep sample `k` (half-cosine in and out).
    pub fn envelope(&self, k: usize) -> f64 {
        let n = self.n_sweep_samples;
        let mut w = 1.0;
        if self.fade_in_samples > 0 && k < self.fade_in_samples {
            w *= 0.5 * (1.0 - (PI * k as f64 / self.fade_in_samples as f64).cos());
        }
        if self.fade_out_samples > 0 && k + self.fade_out_samples >= n {
            let j = (n - 1 - k.min(n - 1)) as f64;
            w *= 0.5 * (1.0 - (PI * j / self.fade_out_samples as f64).cos());
        }
        w
    }

    /// The sweep samples (fades applied, no silences), computed in f64.
    pub fn samples(&self) -> Vec<f64> {
        let fs = f64::from(self.sample_rate_hz);
        (0..self.n_sweep_samples)
            .map(|k| self.amplitude * self.envelope(k) * self.phase_rad(k as f64 / fs).sin())
            .collect()
    }
}

/// The exact signal a plan plays: one sample vector per output channel.
#[derive(Debug, Clone, PartialEq)]
pub struct Stimulus {
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// Samples per output channel (index = output channel number), full scale ±1.0.
    pub channels: Vec<Vec<f32>>,
    /// The sweep all driven outputs play.
    pub sweep: SweepParams,
    /// Output channel numbers that carry the sweep (others stay silent).
    pub driven_outputs: Vec<usize>,
}

impl Stimulus {
    /// Build from sweep parameters directly (tests, self-test tools).
    pub fn build(
        sweep: SweepParams,
        n_after_samples: usize,
        n_outputs: usize,
        driven_outputs: &[usize],
    ) -> Self {
        let total = sweep.start_sample + sweep.n_sweep_samples + n_after_samples;
        let mut driven_signal = vec![0f32; total];
        for (k, v) in sweep.samples().into_iter().enumerate() {
            driven_signal[sweep.start_sample + k] = v as f32;
        }
        let channels = (0..n_outputs)
            .map(|o| {
                if driven_outputs.contains(&o) {
                    driven_signal.clone()
                } else {
                    vec![0f32; total]
                }
            })
            .collect();
        Stimulus {
            sample_rate_hz: sweep.sample_rate_hz,
            channels,
            sweep,
            driven_outputs: driven_outputs.to_vec(),
        }
    }

    /// Length of every channel, samples.
    pub fn n_samples(&self) -> usize {
        self.channels.first().map_or(0, Vec::len)
    }

    /// The driven signal (identical on every driven output).
    pub fn driven_signal(&self) -> &[f32] {
        let o = self.driven_outputs.first().copied().unwrap_or(0);
        &self.channels[o]
    }
}

/// Harmonics are reported only where n·f is below this fraction of Nyquist, where the
/// analytic inverse of the sweep starts its taper.
pub const HARMONIC_TOP_FRACTION_OF_NYQUIST: f64 = 0.9;

/// The band over which a plan's correction must be defined, Hz: from the sweep's start to
/// its stop, or, when harmonics are analysed, to the highest n·f the analysis reports
/// (`max_harmonic`·f2, at most the analyzer's top of 0.9 × Nyquist).
pub fn needed_band_hz(
    start_hz: f64,
    stop_hz: f64,
    sample_rate_hz: f64,
    max_harmonic: usize,
) -> (f64, f64) {
    let top_hz = HARMONIC_TOP_FRACTION_OF_NYQUIST * 0.5 * sample_rate_hz;
    let hi = if max_harmonic >= 2 {
        (max_harmonic as f64 * stop_hz).min(top_hz).max(stop_hz)
    } else {
        stop_hz
    };
    (start_hz, hi)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Novak, Simon & Lotton (JAES 63(10), 2015), worked check: f1 = 20 Hz, f2 = 20 kHz,
    // T̂ = 1 s gives L = 0.15 s and T = 1.0362 s (L·ln 1000).
    #[test]
    fn novak_synchronization_example() {
        let p = SweepParams::synchronized(48_000, 20.0, 20_000.0, 1.0, 1.0, 0.0, 0.0, 0.0).unwrap();
        assert!((p.l_s - 0.15).abs() < 1e-12);
        assert!((p.duration_s - 1.0362).abs() < 5e-5, "T = {}", p.duration_s);
        // f1·L must be a whole number (the synchronization condition itself).
        assert!((p.f1_hz * p.l_s - (p.f1_hz * p.l_s).round()).abs() < 1e-12);
    }

    // The synchronization property (Novak et al. 2015, eq. 11): sin(n·φ(t)) equals the sweep
    // advanced by L·ln n, for whole n, when f1·L is whole. Checked on the raw phase.
    #[test]
    fn harmonic_is_advanced_sweep() {
        let p = SweepParams::synchronized(48_000, 20.0, 20_000.0, 1.0, 1.0, 0.0, 0.0, 0.0).unwrap();
        for n in 2..=5 {
            for &t in &[0.01, 0.2, 0.5] {
                let a = (n as f64 * p.phase_rad(t)).sin();
                let b = p.phase_rad(t + p.harmonic_lead_s(n)).sin();
                assert!((a - b).abs() < 1e-8, "n={n} t={t}: {a} vs {b}");
            }
        }
    }

    #[test]
    fn too_short_sweep_is_refused() {
        let e = SweepParams::synchronized(48_000, 20.0, 20_000.0, 0.1, 1.0, 0.0, 0.0, 0.0);
        assert!(matches!(e, Err(SweepError::TooShort { .. })));
    }

    #[test]
    fn fades_are_half_cosine_and_endpoints_zero() {
        let p =
            SweepParams::synchronized(48_000, 20.0, 20_000.0, 1.0, 1.0, 0.01, 0.01, 0.0).unwrap();
        assert_eq!(p.envelope(0), 0.0);
        assert!(p.envelope(p.n_sweep_samples - 1) < 1e-12);
        let mid = p.fade_in_samples / 2;
        assert!((p.envelope(mid) - 0.5).abs() < 1e-9);
        assert_eq!(p.envelope(p.n_sweep_samples / 2), 1.0);
    }
}
