//! The run-time guard's signal pieces: the fade to silence it plays when it trips, and the
//! block level detector that makes it trip.
//!
//! Sits inside the rig (issue 5 point 4): while a sweep plays, every capture block goes
//! through a [`LevelWatch`]; when a sample passes the cap, the output from then on goes
//! through a [`FadeOut`] and the measurement is marked retest. Both allocate nothing and keep
//! their state across blocks, so they can run in an audio callback.
//!
//! # The fade and its largest step (derived once)
//!
//! A raised-cosine fade of N samples uses the gains `g(n) = ½·(1 + cos(π·n/N))`, n = 0..=N:
//! g(0) = 1 is the last sample before the fade, g(N) = 0 the first silent one. The fade
//! starting at sample k multiplies sample k + i by g(i + 1), so it spans exactly the N samples
//! k..k+N−1 and sample k+N−1 is the first zero. Between neighbours
//!
//! ```text
//! g(n+1) − g(n) = ½·[cos(π(n+1)/N) − cos(πn/N)] = −sin(π(2n+1)/(2N))·sin(π/(2N))
//! ```
//!
//! so `|Δg| ≤ sin(π/(2N)) ≤ π/(2N)` ([`max_gain_step`], [`GAIN_STEP_BOUND`]). With
//! `y = g·x`, `Δy(n) = g(n+1)·Δx(n) + Δg(n)·x(n)` and 0 ≤ g ≤ 1, so for |x| ≤ A
//!
//! ```text
//! |Δy| ≤ |Δx|max + A·sin(π/(2N))
//! ```
//!
//! The fade adds at most `sin(π/(2N)) ≤ π/(2N)` of full scale to the largest sample-to-sample
//! change a full-scale signal already has, and never makes anything louder. For a sine of
//! peak A at f, `|Δx| = 2A·|sin(πf/fs)·cos(…)| ≤ 2A·sin(πf/fs) ≤ 2πAf/fs`, so
//! `|Δy| ≤ A·(π/(2N) + 2πf/fs)` ([`output_step_bound`]). With the default 5 ms at 48 kHz
//! (N = 240) the fade's own share is 0.0065 of full scale per sample.
//!
//! Gains are computed in f64 and the products rounded to f32: a measured step can exceed the
//! bound by the rounding, at most 2⁻²⁴ of each of the two samples.

use std::f64::consts::PI;

/// Default fade to silence, s: "within a few milliseconds" (issue 5); 5 ms is the length the
/// plans use for the sweep's own fades (docs/decisions.md, "Plan defaults and small rules").
pub const DEFAULT_FADE_S: f64 = 0.005;

/// Why a guard piece cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum GuardError {
    /// A fade of no samples would be a hard cut (a click).
    #[error("expected a fade of at least 1 sample, found 0 (a hard cut clicks)")]
    ZeroFade,
    /// A fade duration or sample rate that is not positive and finite.
    #[error("expected a fade duration above 0 s and a sample rate above 0 Hz, found {duration_s} s at {rate_hz} Hz")]
    BadFadeDuration {
        /// Duration found, s.
        duration_s: f64,
        /// Rate found, Hz.
        rate_hz: u32,
    },
    /// A level limit that is not positive and finite.
    #[error("expected a level limit above 0 full scale, found {found_fs}")]
    BadLimit {
        /// The limit found, full scale.
        found_fs: f64,
    },
}

/// Gain of the raised-cosine fade at step `n` of `n_fade`: `½·(1 + cos(π·n/N))`; 1 at n = 0,
/// exactly 0 from n = N on.
pub fn fade_gain(n: usize, n_fade: usize) -> f64 {
    if n >= n_fade {
        0.0
    } else {
        0.5 * (1.0 + (PI * n as f64 / n_fade as f64).cos())
    }
}

/// The exact largest gain change between neighbouring samples of an `n_fade` fade:
/// `sin(π/(2N))` (module doc). 0 for `n_fade` = 0 is never used: such a fade is refused.
pub fn max_gain_step(n_fade: usize) -> f64 {
    (PI / (2.0 * n_fade as f64)).sin()
}

/// The documented bound on the gain change between neighbouring samples, times N: a fade of
/// N samples changes the gain by at most `GAIN_STEP_BOUND / N` = π/(2N) per sample.
pub const GAIN_STEP_BOUND: f64 = PI / 2.0;

/// Bound on the output's sample-to-sample change when a sine of peak `peak_fs` at `freq_hz`,
/// sampled at `rate_hz`, is faded over `n_fade` samples: `A·(π/(2N) + 2πf/fs)` (module doc).
pub fn output_step_bound(peak_fs: f64, freq_hz: f64, rate_hz: f64, n_fade: usize) -> f64 {
    peak_fs * (GAIN_STEP_BOUND / n_fade as f64 + 2.0 * PI * freq_hz / rate_hz)
}

/// Number of samples of a fade lasting `duration_s` at `rate_hz`, rounded up (at least 1).
///
/// # Errors
///
/// A duration or rate that is not positive and finite.
pub fn fade_len(duration_s: f64, rate_hz: u32) -> Result<usize, GuardError> {
    let n = duration_s * f64::from(rate_hz);
    if !(duration_s.is_finite() && duration_s > 0.0 && rate_hz > 0) {
        return Err(GuardError::BadFadeDuration {
            duration_s,
            rate_hz,
        });
    }
    // A fade of more than usize::MAX samples is not a fade; `as` saturates.
    Ok((n.ceil() as usize).max(1))
}

/// A fade to silence that runs across output blocks: each sample passed through it gets the
/// next gain of the fade, and every sample after the fade is set to 0.
#[derive(Debug, Clone, PartialEq)]
pub struct FadeOut {
    n_fade: usize,
    /// Samples already faded.
    position: usize,
}

impl FadeOut {
    /// A fade over `n_fade` samples, not yet started.
    ///
    /// # Errors
    ///
    /// `n_fade` = 0.
    pub fn new(n_fade: usize) -> Result<Self, GuardError> {
        if n_fade == 0 {
            return Err(GuardError::ZeroFade);
        }
        Ok(FadeOut {
            n_fade,
            position: 0,
        })
    }

    /// Fade length, samples.
    pub fn n_fade(&self) -> usize {
        self.n_fade
    }

    /// Whether the output is silent from here on.
    pub fn is_silent(&self) -> bool {
        self.position + 1 >= self.n_fade
    }

    /// Apply the fade to the next block of output; the fade continues where the last block
    /// left it. Allocates nothing.
    pub fn apply(&mut self, block: &mut [f32]) {
        for s in block.iter_mut() {
            if self.position + 1 >= self.n_fade {
                *s = 0.0;
            } else {
                *s = (f64::from(*s) * fade_gain(self.position + 1, self.n_fade)) as f32;
            }
            self.position = self.position.saturating_add(1);
        }
    }
}

/// Fade `samples` to silence from index `start`: sample `start + i` gets gain g(i + 1) of an
/// `n_fade` raised-cosine fade (module doc), so `start + n_fade − 1` and everything after it
/// are 0; samples before `start` are untouched. A `start` at or past the end changes nothing.
///
/// # Errors
///
/// `n_fade` = 0.
pub fn fade_to_silence(samples: &mut [f32], start: usize, n_fade: usize) -> Result<(), GuardError> {
    let mut fade = FadeOut::new(n_fade)?;
    if start < samples.len() {
        fade.apply(&mut samples[start..]);
    }
    Ok(())
}

/// The guard's level detector: watches capture blocks of one channel and reports the first
/// sample whose magnitude passes the limit (or is not finite, which is a fault).
#[derive(Debug, Clone, PartialEq)]
pub struct LevelWatch {
    limit_fs: f64,
    samples_seen: usize,
    tripped_at: Option<usize>,
}

impl LevelWatch {
    /// A detector for a peak limit in full scale (sample value 1.0 = 1 FS).
    ///
    /// # Errors
    ///
    /// A limit that is not positive and finite.
    pub fn new(limit_fs: f64) -> Result<Self, GuardError> {
        if !(limit_fs.is_finite() && limit_fs > 0.0) {
            return Err(GuardError::BadLimit { found_fs: limit_fs });
        }
        Ok(LevelWatch {
            limit_fs,
            samples_seen: 0,
            tripped_at: None,
        })
    }

    /// Check the next block of the channel (blocks in capture order). Returns the index,
    /// counted from the first sample of the first block, of the first sample in this block with
    /// `|x| > limit` or a NaN/infinite value; `None` when the block stays within the limit.
    /// Allocates nothing.
    pub fn check_block(&mut self, block: &[f32]) -> Option<usize> {
        let found = block
            .iter()
            .position(|&x| !x.is_finite() || f64::from(x).abs() > self.limit_fs)
            .map(|i| self.samples_seen + i);
        self.samples_seen = self.samples_seen.saturating_add(block.len());
        if self.tripped_at.is_none() {
            self.tripped_at = found;
        }
        found
    }

    /// The first sample that passed the limit in any block so far.
    pub fn tripped_at(&self) -> Option<usize> {
        self.tripped_at
    }

    /// Samples checked so far.
    pub fn samples_seen(&self) -> usize {
        self.samples_seen
    }

    /// The limit, full scale.
    pub fn limit_fs(&self) -> f64 {
        self.limit_fs
    }
}

/// The first sample index, across `blocks` in order, whose magnitude passes `limit_fs` (or is
/// not finite); `None` when none does.
///
/// # Errors
///
/// A limit that is not positive and finite.
pub fn first_exceedance<'a>(
    blocks: impl IntoIterator<Item = &'a [f32]>,
    limit_fs: f64,
) -> Result<Option<usize>, GuardError> {
    let mut watch = LevelWatch::new(limit_fs)?;
    for block in blocks {
        if let Some(i) = watch.check_block(block) {
            return Ok(Some(i));
        }
    }
    Ok(None)
}
