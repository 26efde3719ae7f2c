//! The recording rig: a capture read from a WAV file.
//!
//! Used by `tragus analyze PLAN --capture FILE.wav`: instead of playing the stimulus, the rig
//! returns a capture recorded earlier (input channels as the plan maps them). It checks that
//! the file fits the stimulus: same sample rate, enough channels, and at least the
//! stimulus's length — a shorter capture is returned as it is with a fault text, so the
//! analysis marks the measurement a retest instead of refusing the file.

use super::{Capture, Rig, RigError};
use crate::dsp::sweep::Stimulus;
use crate::wav::{read_wav, WavData};
use std::path::{Path, PathBuf};

/// A rig that "captures" by returning a WAV file read at [`RecordingRig::open`].
#[derive(Debug, Clone)]
pub struct RecordingRig {
    path: PathBuf,
    data: WavData,
}

impl RecordingRig {
    /// Read the capture file now; a file that cannot be read is [`RigError::BadInput`].
    pub fn open(path: impl AsRef<Path>) -> Result<Self, RigError> {
        let path = path.as_ref();
        let data = read_wav(path).map_err(|e| RigError::BadInput {
            path: e.path,
            message: e.kind.to_string(),
        })?;
        Ok(RecordingRig {
            path: path.to_path_buf(),
            data,
        })
    }

    /// Build from samples already in memory (`path` is only used in messages).
    pub fn from_data(path: impl AsRef<Path>, data: WavData) -> Self {
        RecordingRig {
            path: path.as_ref().to_path_buf(),
            data,
        }
    }

    /// The recorded samples as read.
    pub fn data(&self) -> &WavData {
        &self.data
    }

    fn bad(&self, message: String) -> RigError {
        RigError::BadInput {
            path: self.path.display().to_string(),
            message,
        }
    }
}

impl Rig for RecordingRig {
    fn name(&self) -> &str {
        "recording"
    }

    fn play_and_capture(
        &mut self,
        stimulus: &Stimulus,
        n_inputs: usize,
    ) -> Result<Capture, RigError> {
        if self.data.sample_rate_hz != stimulus.sample_rate_hz {
            return Err(self.bad(format!(
                "expected a capture at the stimulus rate {} Hz, found {} Hz",
                stimulus.sample_rate_hz, self.data.sample_rate_hz
            )));
        }
        let n_channels = self.data.channels.len();
        if n_channels < n_inputs {
            return Err(self.bad(format!(
                "expected at least {n_inputs} input channels (the plan reads {n_inputs}), \
                 found {n_channels}"
            )));
        }
        let mut faults = Vec::new();
        let (n_found, n_needed) = (self.data.n_samples(), stimulus.n_samples());
        if n_found < n_needed {
            faults.push(format!(
                "capture truncated: {n_found} of {n_needed} samples"
            ));
        }
        Ok(Capture {
            sample_rate_hz: self.data.sample_rate_hz,
            channels: self.data.channels.clone(),
            xruns: 0,
            faults,
            device_latency_samples: None,
            guard_trip: None,
        })
    }

    fn play_raw(
        &mut self,
        _outputs: &[Vec<f32>],
        _sample_rate_hz: u32,
        _n_inputs: usize,
    ) -> Result<Capture, RigError> {
        Err(self.bad(
            "expected a rig that plays (simulated or sound card): a recorded capture cannot \
             play a pilot tone"
                .into(),
        ))
    }

    /// A recording plays nothing, so there is nothing to guard.
    fn arm_guard(&mut self, _guard: Option<super::Guard>) {}
}
