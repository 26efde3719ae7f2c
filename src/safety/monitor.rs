//! Drive monitors: the amplifier output wired back into an input of known volts per full
//! scale, so that the drive caps hold for the volts really driven and not only for the
//! calibrated gain.
//!
//! Without a monitor, the drive caps rest on the drive calibration: an amplifier whose gain
//! knob was turned up after calibration drives more volts than the budget and the pilot
//! think. The microphone still sees the louder sound (its caps still hold), but not when the
//! unit is out of the fixture — held to an ear, say — and the DUT's own rating is exceeded
//! too. A monitor closes that gap twice:
//!
//! - in the pilot tone ([`decide_monitor`]): the pilot's level at the monitor gives the
//!   amplifier's real gain; a gain more than [`DRIVE_GAIN_TOLERANCE_DB`] away from its
//!   calibration abandons the sweep (the levels would be wrong and the caps unproven), and
//!   a sweep whose extrapolated peak voltage would pass the drive cap is scaled down or
//!   abandoned like an acoustic one;
//! - while playing: the monitor input is watched by the guard against the drive cap
//!   ([`drive_peak_limit_v`]), so a gain fault that appears during the sweep fades it out.

use super::pilot::{self, AbandonReason, PilotReading, SweepDecision, SweepLimits};
use crate::station::Caps;

/// Largest difference between the gain a drive monitor measures and the calibrated one
/// that is accepted, dB. A drive calibration reads to some 0.1 dB and an amplifier's gain
/// drifts less than that between calibrations (common practice); 1 dB apart means someone
/// turned a knob or changed a cable, and every level the station reports would be off by it.
pub const DRIVE_GAIN_TOLERANCE_DB: f64 = 1.0;

/// The peak drive voltage the caps allow, V: the peak cap, and the rms cap as the peak of
/// a sine (every stimulus tragus plays is a sine, swept or steady: crest factor √2).
pub fn drive_peak_limit_v(caps: &Caps) -> f64 {
    caps.max_drive_v_peak
        .min(std::f64::consts::SQRT_2 * caps.max_drive_v_rms)
}

/// One drive monitor on a bench.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct MonitorPath {
    /// The output it watches, 0-based.
    pub output: usize,
    /// The input that carries it, 0-based.
    pub input: usize,
    /// That input's volts peak per full scale (the calibration's `monitor:`); `None` =
    /// uncalibrated, watched for clipping only.
    pub input_v_peak_per_fs: Option<f64>,
    /// The output's calibrated drive gain, volts peak per full scale, when known.
    pub calibrated_v_peak_per_fs: Option<f64>,
}

/// What a drive monitor saw of the pilot, and what it allows.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct MonitorChannel {
    /// The output, 0-based.
    pub output: usize,
    /// The monitor input, 0-based.
    pub input: usize,
    /// The pilot as the monitor recorded it.
    pub reading: PilotReading,
    /// The amplifier's gain as measured, volts peak per full scale.
    pub measured_v_peak_per_fs: Option<f64>,
    /// The calibrated gain, volts peak per full scale.
    pub calibrated_v_peak_per_fs: Option<f64>,
    /// 20·lg(measured / calibrated), dB.
    pub deviation_db: Option<f64>,
    /// Peak volts the planned sweep would drive at the measured gain.
    pub planned_sweep_v_peak: Option<f64>,
    /// What this monitor allows (levels in dB re 1 V peak).
    pub decision: SweepDecision,
}

/// Judge one monitor's pilot reading: `pilot_dbfs` is the pilot's played peak level,
/// `sweep_dbfs` the planned sweep's, `min_sweep_dbfs` the lowest still worth measuring at
/// and `margin_db` the margin kept under the cap when scaling down.
///
/// A monitor without a gain gives no volts: it only abandons on a clipped or silent pilot.
///
/// # Errors
///
/// A non-finite level (as [`pilot::decide_sweep`]).
pub fn decide_monitor(
    m: &MonitorPath,
    reading: &PilotReading,
    pilot_dbfs: f64,
    sweep_dbfs: f64,
    min_sweep_dbfs: f64,
    margin_db: f64,
    caps: &Caps,
) -> Result<MonitorChannel, pilot::PilotError> {
    let mut out = MonitorChannel {
        output: m.output,
        input: m.input,
        reading: *reading,
        measured_v_peak_per_fs: None,
        calibrated_v_peak_per_fs: m.calibrated_v_peak_per_fs,
        deviation_db: None,
        planned_sweep_v_peak: None,
        decision: SweepDecision::Proceed {
            sweep_dbfs,
            expected_db: f64::NEG_INFINITY,
        },
    };
    let abandon = |reason| SweepDecision::Abandon { reason };
    if reading.clipped {
        out.decision = abandon(AbandonReason::MonitorClipped {
            output: m.output,
            input: m.input,
            peak_fs: reading.peak_fs,
        });
        return Ok(out);
    }
    if !reading.present {
        out.decision = abandon(AbandonReason::MonitorSilent {
            output: m.output,
            input: m.input,
            snr_db: reading.snr_db,
        });
        return Ok(out);
    }
    let Some(v_in) = m.input_v_peak_per_fs else {
        return Ok(out);
    };
    let pilot_v_peak = reading.amplitude_fs * v_in;
    let measured = pilot_v_peak / 10f64.powf(pilot_dbfs / 20.0);
    out.measured_v_peak_per_fs = Some(measured);
    out.planned_sweep_v_peak = Some(measured * 10f64.powf(sweep_dbfs / 20.0));
    if let Some(cal) = m.calibrated_v_peak_per_fs {
        let deviation_db = 20.0 * (measured / cal).log10();
        out.deviation_db = Some(deviation_db);
        if deviation_db.abs() > DRIVE_GAIN_TOLERANCE_DB {
            out.decision = abandon(AbandonReason::DriveGainOff {
                output: m.output,
                measured_v_peak_per_fs: measured,
                calibrated_v_peak_per_fs: cal,
                deviation_db,
                tolerance_db: DRIVE_GAIN_TOLERANCE_DB,
            });
            return Ok(out);
        }
    }
    let cap_v = drive_peak_limit_v(caps);
    let limits = SweepLimits {
        cap_db: 20.0 * cap_v.log10(),
        margin_db,
        min_sweep_dbfs,
    };
    let decision = pilot::decide_sweep(
        reading,
        20.0 * pilot_v_peak.log10(),
        pilot_dbfs,
        sweep_dbfs,
        &limits,
    )?;
    out.decision = match decision {
        SweepDecision::Abandon {
            reason:
                AbandonReason::TooLoud {
                    expected_db,
                    needed_sweep_dbfs,
                    min_sweep_dbfs,
                    ..
                },
        } => abandon(AbandonReason::DriveTooHigh {
            output: m.output,
            expected_v_peak: 10f64.powf(expected_db / 20.0),
            cap_v_peak: cap_v,
            needed_sweep_dbfs,
            min_sweep_dbfs,
        }),
        d => d,
    };
    Ok(out)
}
