//! Drive calibration: the volts an output gives per full scale, from a meter reading of a
//! played tone or from a recording of the drive through an input of known volts per full
//! scale.

use super::tone::{read_tone, ToneError, ToneLimits};
use super::DriveCalibration;

/// The details of a drive reading, kept in the calibration file.
#[derive(Debug, Clone, PartialEq)]
pub struct DriveReading {
    /// `meter` (a voltmeter on the output) or `input` (through a calibrated input).
    pub method: String,
    /// Frequency of the played tone, Hz.
    pub tone_hz: f64,
    /// Peak level of the played tone, dBFS (0 dBFS = a sine of amplitude 1.0).
    pub tone_dbfs: f64,
    /// The tone's rms voltage at the output, V (read on the meter, or measured).
    pub measured_v_rms: f64,
    /// For `input`: the input's volts per full scale (instantaneous) used.
    pub input_volts_peak_per_fs: Option<f64>,
    /// When it was read, UTC, `YYYY-MM-DDTHH:MM:SSZ`.
    pub measured_utc: String,
}

/// Why a drive reading is refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DriveError {
    /// A number out of its range.
    #[error("{what}: expected {expected}, found {found}")]
    Value {
        /// Which option.
        what: &'static str,
        /// What was expected.
        expected: &'static str,
        /// What was given.
        found: f64,
    },
    /// The recorded drive is not the played tone.
    #[error("the recorded drive tone: {0}")]
    Tone(#[from] ToneError),
}

fn check(what: &'static str, x: f64, ok: bool, expected: &'static str) -> Result<(), DriveError> {
    if x.is_finite() && ok {
        Ok(())
    } else {
        Err(DriveError::Value {
            what,
            expected,
            found: x,
        })
    }
}

/// `G_d = √2 · V_rms / A` for a sine of peak amplitude `A = 10^(tone_dbfs/20)` full scale that
/// reads `V_rms` volts.
fn gain(v_rms: f64, tone_dbfs: f64) -> f64 {
    std::f64::consts::SQRT_2 * v_rms / 10f64.powf(tone_dbfs / 20.0)
}

/// Drive calibration from a meter: a sine of `tone_dbfs` peak at `tone_hz` was played and
/// the meter read `measured_v_rms` volts rms at the output.
pub fn drive_from_meter(
    measured_v_rms: f64,
    tone_dbfs: f64,
    tone_hz: f64,
) -> Result<DriveCalibration, DriveError> {
    check(
        "--measured-v-rms",
        measured_v_rms,
        measured_v_rms > 0.0,
        "a voltage above 0 V",
    )?;
    check(
        "--tone-dbfs",
        tone_dbfs,
        (-60.0..=0.0).contains(&tone_dbfs),
        "a level from -60 to 0 dBFS",
    )?;
    check(
        "--freq-hz",
        tone_hz,
        tone_hz > 0.0,
        "a frequency above 0 Hz",
    )?;
    Ok(DriveCalibration {
        volts_peak_per_fs: gain(measured_v_rms, tone_dbfs),
        reading: Some(DriveReading {
            method: "meter".into(),
            tone_hz,
            tone_dbfs,
            measured_v_rms,
            input_volts_peak_per_fs: None,
            measured_utc: super::Calibration::now_utc(),
        }),
    })
}

/// Drive calibration through an input of known volts per full scale: `samples` is that
/// input's recording of the output playing a sine of `tone_dbfs` peak at `tone_hz`.
///
/// The recording is read like a calibrator tone (same acceptance: it must be the played
/// sine, clean and steady); its band-passed rms times the input's gain is the output's rms
/// voltage.
pub fn drive_from_input(
    samples: &[f32],
    sample_rate_hz: u32,
    input_volts_peak_per_fs: f64,
    tone_dbfs: f64,
    tone_hz: f64,
) -> Result<DriveCalibration, DriveError> {
    check(
        "--input-volts-peak-per-fs",
        input_volts_peak_per_fs,
        input_volts_peak_per_fs > 0.0,
        "a gain above 0 V per full scale",
    )?;
    check(
        "--tone-dbfs",
        tone_dbfs,
        (-60.0..=0.0).contains(&tone_dbfs),
        "a level from -60 to 0 dBFS",
    )?;
    let r = read_tone(samples, sample_rate_hz, &ToneLimits::calibrator(tone_hz))?;
    let v_rms = r.rms_fs * input_volts_peak_per_fs;
    Ok(DriveCalibration {
        volts_peak_per_fs: gain(v_rms, tone_dbfs),
        reading: Some(DriveReading {
            method: "input".into(),
            tone_hz,
            tone_dbfs,
            measured_v_rms: v_rms,
            input_volts_peak_per_fs: Some(input_volts_peak_per_fs),
            measured_utc: super::Calibration::now_utc(),
        }),
    })
}
