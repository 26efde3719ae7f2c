//! Recording a calibration tone through the station's sound card: silence played while a
//! calibrator sounds at the microphone, or the drive tone played on an output and found
//! again in an input's recording (by cross-correlation, never by an assumed latency).

use crate::rig::{RigError, SoundcardSpec};

/// Why a recording for a calibration could not be made; nothing is written after one.
#[derive(Debug, thiserror::Error)]
pub enum RecordError {
    /// The options or the wiring are wrong (fix them).
    #[error("{0}")]
    BadInput(String),
    /// The sound card could not play or record.
    #[error("nothing was written")]
    Rig(#[source] RigError),
}

impl RecordError {
    /// True when the user can fix it (options, wiring, device names), false when the rig
    /// failed and a retry may succeed.
    pub fn is_bad_input(&self) -> bool {
        matches!(
            self,
            RecordError::BadInput(_) | RecordError::Rig(RigError::BadInput { .. })
        )
    }
}

/// Play `outputs` and record through the sound card; the samples of device input `route.1`
/// (0-based). `route` is the output and input the reading uses, so the devices are opened
/// with enough channels for both.
#[cfg(feature = "soundcard")]
pub fn record_through_soundcard(
    spec: SoundcardSpec,
    route: (usize, usize),
    rate_hz: u32,
    outputs: &[Vec<f32>],
) -> Result<Vec<f32>, RecordError> {
    let mut rig = crate::rig::soundcard::SoundcardRig::open(spec, vec![route], rate_hz)
        .map_err(RecordError::Rig)?;
    let rec = rig.play_and_record(outputs).map_err(RecordError::Rig)?;
    let mut channels = rec.channels;
    // `open` made sure the input stream has this channel; kept total all the same.
    if route.1 >= channels.len() {
        return Err(RecordError::BadInput(format!(
            "--input {}: expected an input channel of the device, which has {}; nothing was \
             written",
            route.1 + 1,
            channels.len()
        )));
    }
    Ok(channels.swap_remove(route.1))
}

/// Without the `soundcard` feature there is no sound card to record through.
#[cfg(not(feature = "soundcard"))]
pub fn record_through_soundcard(
    _spec: SoundcardSpec,
    _route: (usize, usize),
    _rate_hz: u32,
    _outputs: &[Vec<f32>],
) -> Result<Vec<f32>, RecordError> {
    Err(RecordError::BadInput(format!(
        "--record: {}",
        crate::rig::SOUNDCARD_NOT_BUILT
    )))
}

/// Play `tone` on device output `output` (1-based; the others silent) and return the part
/// of input `input`'s (1-based) recording that holds it, found by cross-correlation.
pub fn record_drive_tone(
    spec: SoundcardSpec,
    output: usize,
    input: usize,
    rate_hz: u32,
    tone: Vec<f32>,
) -> Result<Vec<f32>, RecordError> {
    let n = tone.len();
    let mut outputs = vec![vec![0.0f32; n]; output];
    outputs[output - 1] = tone;
    let rec = record_through_soundcard(spec, (output - 1, input - 1), rate_hz, &outputs)?;
    let max_lag = rec.len().saturating_sub(n);
    let found = crate::rig::align::find_delay(&outputs[output - 1], &rec, max_lag)
        .filter(|d| d.is_confident())
        .ok_or_else(|| {
            RecordError::BadInput(format!(
                "sound card input {input}: the tone played on output {output} is not in the \
                 recording (check the wiring, the channel numbers and the levels); nothing was \
                 written"
            ))
        })?;
    let start = usize::try_from(found.lag_samples).unwrap_or(0).min(max_lag);
    tracing::info!(lag_samples = start, "drive tone found in the recording");
    Ok(rec[start..start + n].to_vec())
}
