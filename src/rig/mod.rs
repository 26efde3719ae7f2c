//! Rigs: what plays the stimulus and captures the response.
//!
//! Sits between the stimulus ([`crate::dsp::sweep`]) and the analysis. Every rig implements
//! [`Rig`]; the CLI picks one. `recording` reads a capture from a WAV file; `simulated`
//! runs a model of an earphone and fixture ([`simulated::Dut`] keeps the unit model behind a
//! trait so a physical model can replace the behavioural one). `soundcard` (feature
//! `soundcard`) plays through a real sound card; `align` finds the stimulus in a recording.

pub mod align;
pub mod recording;
pub mod simulated;
#[cfg(feature = "soundcard")]
pub mod soundcard;

pub use crate::station::audio::SoundcardSpec;

/// Why a build without the `soundcard` feature cannot list or open sound cards, and how to
/// get one.
pub const SOUNDCARD_NOT_BUILT: &str =
    "this build has no sound-card support; install the ALSA headers (`apt-get install \
     libasound2-dev pkg-config`) and build with `cargo build --release --features soundcard`";

use crate::dsp::sweep::Stimulus;

/// What a rig captured: samples per input channel at one sample rate.
#[derive(Debug, Clone, PartialEq)]
pub struct Capture {
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// Samples per input channel (index = input channel number, 0-based), full scale ±1.0.
    pub channels: Vec<Vec<f32>>,
    /// Buffer under/overruns counted while capturing; any makes the measurement a retest.
    pub xruns: u32,
    /// Rig-level faults noticed while capturing (each makes the measurement a retest).
    pub faults: Vec<String>,
    /// Samples removed from the start of the device recording to align it with stimulus
    /// sample 0 (the sound-card rig's measured device latency); `None` for rigs that do
    /// not align (simulated, recording) or when alignment failed (then `faults` says why).
    pub device_latency_samples: Option<i64>,
    /// The run-time guard tripped while this was captured: the output was faded to silence
    /// and the measurement is not valid (retest).
    pub guard_trip: Option<GuardTrip>,
}

/// The run-time guard a rig runs while it plays (hearing safety, `src/safety`): every
/// watched input is checked block by block as it is captured; when one passes its limit the
/// outputs are faded to silence ([`crate::dsp::ramp::FadeOut`]) and the capture carries a
/// [`GuardTrip`].
#[derive(Debug, Clone, PartialEq)]
pub struct Guard {
    /// Per input channel (index = input number, 0-based): the peak, full scale, above which
    /// the guard trips, one value per watch block (the last one holds for every later
    /// block: a sweep's limit follows the frequency it is at); `None` = not watched.
    pub limits_fs: Vec<Option<Vec<f64>>>,
    /// Watch block, frames: the level is checked once per block, so a trip is noticed at the
    /// end of the block holding the first sample over the limit.
    pub block_frames: usize,
    /// Fade to silence, frames.
    pub fade_frames: usize,
}

/// What the run-time guard saw and did.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct GuardTrip {
    /// Input channel (0-based) that passed its limit first.
    pub input: usize,
    /// Capture sample of the first value over the limit.
    pub first_over_sample: usize,
    /// Its magnitude, full scale.
    pub peak_fs: f64,
    /// The limit, full scale.
    pub limit_fs: f64,
    /// Output sample where the fade began (the first sample not yet handed to the device
    /// when the trip was noticed).
    pub fade_start_sample: usize,
    /// First output sample that is silent (fade start + fade length − 1).
    pub silent_from_sample: usize,
}

impl Guard {
    /// Find the first trip in a finished capture, as a guard watching it block by block
    /// would have noticed it: the first watched input whose block holds a sample over its
    /// limit, noticed at the end of that block. `None` when nothing passed.
    pub fn first_trip(&self, capture: &[Vec<f32>]) -> Option<GuardTrip> {
        let block = self.block_frames.max(1);
        let mut best: Option<GuardTrip> = None;
        for (input, (ch, limits)) in capture.iter().zip(&self.limits_fs).enumerate() {
            let Some(limits) = limits else { continue };
            let Some(&last) = limits.last() else { continue };
            let found = ch.chunks(block).enumerate().find_map(|(b, samples)| {
                let limit = limits.get(b).copied().unwrap_or(last);
                samples
                    .iter()
                    .position(|&x| !x.is_finite() || f64::from(x.abs()) > limit)
                    .map(|i| (b * block + i, limit))
            });
            let Some((k, limit)) = found else { continue };
            let noticed = (k / block + 1) * block;
            if best.as_ref().is_none_or(|b| noticed < b.fade_start_sample) {
                best = Some(GuardTrip {
                    input,
                    first_over_sample: k,
                    peak_fs: f64::from(ch[k].abs()),
                    limit_fs: limit,
                    fade_start_sample: noticed,
                    silent_from_sample: noticed + self.fade_frames.max(1) - 1,
                });
            }
        }
        best
    }

    /// Play `outputs` through a rig that computes its capture all at once (the simulated
    /// rig), as the guard would have let them play: simulate, find the first trip, fade every
    /// output from the moment it was noticed, and simulate again with what was really played.
    /// The capture up to the trip is the same both times (the system is causal), so this is
    /// what a guard watching in real time produces. Returns the capture and the outputs as
    /// played.
    pub fn play_offline<E>(
        &self,
        outputs: &[Vec<f32>],
        mut simulate: impl FnMut(&[Vec<f32>]) -> Result<Capture, E>,
    ) -> Result<(Capture, Vec<Vec<f32>>), E> {
        let first = simulate(outputs)?;
        let Some(trip) = self.first_trip(&first.channels) else {
            return Ok((first, outputs.to_vec()));
        };
        let mut played = outputs.to_vec();
        for ch in &mut played {
            // A fade of 0 frames is refused by FadeOut; max(1) keeps a hard cut impossible
            // to ask for here (1 frame is the shortest fade).
            let _ = crate::dsp::ramp::fade_to_silence(
                ch,
                trip.fade_start_sample,
                self.fade_frames.max(1),
            );
        }
        let mut capture = simulate(&played)?;
        capture.guard_trip = Some(trip);
        Ok((capture, played))
    }
}

impl Capture {
    /// Number of samples in the shortest channel.
    pub fn n_samples(&self) -> usize {
        self.channels.iter().map(Vec::len).min().unwrap_or(0)
    }
}

/// Why a rig could not produce a capture at all.
#[derive(Debug, thiserror::Error)]
pub enum RigError {
    /// The capture file or device could not be read; fix the path or the file.
    #[error("{path}: {message}")]
    BadInput {
        /// File or device.
        path: String,
        /// What was expected and what was found.
        message: String,
    },
    /// The rig failed while running; retrying may succeed.
    #[error("rig fault: {0}")]
    Fault(String),
}

/// A device that plays a stimulus and captures the response.
///
/// # For implementations
/// - Return one capture channel per input the plan uses (at least `n_inputs`), at the
///   stimulus rate, sample-aligned so that capture sample 0 is the moment stimulus sample 0
///   was sent (any latency shows up as delay in the capture, never trimmed away).
/// - The capture is at least as long as the stimulus; a shorter one is reported as a fault.
/// - Never panic on device or file data; report xruns and faults in the [`Capture`].
pub trait Rig {
    /// Short name for records (`simulated`, `recording`, `soundcard`).
    fn name(&self) -> &str;

    /// Play `stimulus` and return what the inputs captured; `n_inputs` is how many input
    /// channels the plan reads.
    fn play_and_capture(
        &mut self,
        stimulus: &Stimulus,
        n_inputs: usize,
    ) -> Result<Capture, RigError>;

    /// Play plain output buffers (one per device output, at `sample_rate_hz`) and capture the
    /// inputs for as long, without alignment: the pilot tone and calibration readings. The
    /// capture holds the device latency (sample 0 = the first output sample sent).
    fn play_raw(
        &mut self,
        outputs: &[Vec<f32>],
        sample_rate_hz: u32,
        n_inputs: usize,
    ) -> Result<Capture, RigError>;

    /// Arm (or, with `None`, disarm) the run-time guard for every following play. A rig that
    /// plays nothing (a recording) accepts it and has nothing to guard.
    fn arm_guard(&mut self, guard: Option<Guard>);
}
