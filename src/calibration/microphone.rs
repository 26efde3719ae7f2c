//! Microphone calibration: a sound calibrator's tone on the fixture microphone → the input's
//! sensitivity in full scale per pascal.

use super::tone::{read_tone, ToneError, ToneLimits};
use super::{pressure_pa, MicCalibration};

/// The details of a microphone reading, kept in the calibration file.
#[derive(Debug, Clone, PartialEq)]
pub struct MicReading {
    /// The calibrator's nominal frequency, Hz.
    pub nominal_hz: f64,
    /// The calibrator's nominal level, dB SPL (re 20 µPa).
    pub level_db_spl: f64,
    /// Measured tone frequency, Hz.
    pub measured_hz: f64,
    /// Band-passed rms level read, dBFS.
    pub level_dbfs: f64,
    /// Level spread between sub-blocks, dB.
    pub level_spread_db: f64,
    /// THD re fundamental, %.
    pub thd_percent: f64,
    /// Tone over wideband noise, dB.
    pub snr_db: f64,
    /// When it was read, UTC, `YYYY-MM-DDTHH:MM:SSZ`.
    pub measured_utc: String,
}

/// Read a calibrator tone of nominal `level_db_spl` at `nominal_hz` (one input channel's
/// samples, full scale ±1.0) and return the input's sensitivity.
///
/// `S_m = x_rms / p_rms` with `p_rms = 20 µPa · 10^(L/20)` (ISO 1683 reference pressure):
/// 94 dB SPL is 1.0024 Pa, not 1 Pa (1 Pa is 93.98 dB).
///
/// # Errors
/// The tone is refused ([`ToneError`]) when it is silent, clipped, at the wrong frequency,
/// noisy, distorted or unstable ([`ToneLimits::calibrator`]).
pub fn calibrate_microphone(
    samples: &[f32],
    sample_rate_hz: u32,
    level_db_spl: f64,
    nominal_hz: f64,
) -> Result<MicCalibration, ToneError> {
    let r = read_tone(samples, sample_rate_hz, &ToneLimits::calibrator(nominal_hz))?;
    Ok(MicCalibration {
        fs_per_pa: r.rms_fs / pressure_pa(level_db_spl),
        reading: Some(MicReading {
            nominal_hz,
            level_db_spl,
            measured_hz: r.freq_hz,
            level_dbfs: r.level_dbfs,
            level_spread_db: r.level_spread_db,
            thd_percent: r.thd_percent,
            snr_db: r.snr_db,
            measured_utc: super::Calibration::now_utc(),
        }),
    })
}
