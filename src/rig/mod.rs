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
pub mod soundcard_spec;

pub use soundcard_spec::SoundcardSpec;

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
}
