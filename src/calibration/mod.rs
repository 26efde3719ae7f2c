//! Calibration: what turns a digital transfer (full scale per full scale) into sound pressure
//! per drive voltage (dB SPL/V), and the file that carries it.
//!
//! Sits beside the data flow: `tragus calibrate` makes a calibration file from recordings
//! ([`tone`], [`microphone`], [`drive`]); `tragus run` loads it ([`load_calibration`]),
//! refuses a past-due or incomplete one, and converts every response with
//! [`response_offset_db`] before the checks. Its SHA-256 ([`Calibration::sha256`]) is recorded
//! with every unit.
//!
//! # The conversion (derived once)
//!
//! The rig measures the digital transfer `H_d = x_in / x_out` (capture sample value per
//! stimulus sample value, both instantaneous, so rms or peak cancels). The microphone input
//! gives `x_in = S_m · p` with `S_m` in full scale per pascal ([`MicCalibration::fs_per_pa`]);
//! the drive gives `v = G_d · x_out` with `G_d` in volts per full scale, instantaneous, i.e. the
//! peak voltage of a full-scale sine ([`DriveCalibration::volts_peak_per_fs`]). So
//! `p / v = H_d / (S_m · G_d)` Pa/V and, with p₀ = 20 µPa (ISO 1683),
//!
//! ```text
//! L [dB SPL/V] = 20·lg|H_d| − 20·lg(S_m) − 20·lg(G_d) − 20·lg(p₀)
//!              = 20·lg|H_d| + 20·lg((1/S_m) / 20 µPa) − 20·lg(G_d)
//! ```
//!
//! which is [`response_offset_db`] added to the digital response. Sound pressure per volt is
//! the same whether both are rms or both peak, which is why the instantaneous gains are used.

mod drive;
mod file;
mod microphone;
pub mod policy;
pub mod record;
pub mod tone;

pub use drive::{drive_from_input, drive_from_meter, DriveError, DriveReading};
pub use file::{
    canonical_json, format_date, load_calibration, load_calibration_str, parse_date,
    parse_time_utc, CANONICAL_FORM,
};
pub use microphone::{calibrate_microphone, MicReading};

use crate::plan::Problem;
use std::collections::BTreeMap;

pub use crate::units::{pressure_pa, spl_db, P_REF_PA};

/// Default days between a calibration and its due date: a shift-to-shift check is common
/// practice on a production line, a full microphone calibration at least monthly; 30 days
/// is the default, `--due-days` sets it.
pub const DEFAULT_DUE_DAYS: u32 = 30;

/// The dB to add to a digital response (dB FS/FS) to get dB SPL/V (module doc):
/// `−20·lg(S_m) − 20·lg(G_d) − 20·lg(p₀)`.
pub fn response_offset_db(mic_fs_per_pa: f64, drive_volts_peak_per_fs: f64) -> f64 {
    -20.0 * mic_fs_per_pa.log10() - 20.0 * drive_volts_peak_per_fs.log10() - 20.0 * P_REF_PA.log10()
}

/// Convert a sensitivity re 1 V into one re 1 mW into `impedance_ohm`:
/// `L(1 mW) = L(1 V) + 10·lg(R / 1000 Ω)` (1 mW into R takes √(R·1 mW) volts).
pub fn db_per_v_to_db_per_mw(level_db_per_v: f64, impedance_ohm: f64) -> f64 {
    level_db_per_v + 10.0 * (impedance_ohm / 1000.0).log10()
}

/// One instrument used for a calibration.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Instrument {
    /// What it is for: `calibrator`, `meter`, ... (an id).
    pub role: String,
    /// Make and model as written on it.
    pub model: String,
    /// Its serial number.
    pub serial: String,
}

/// How a microphone input was calibrated, and its result.
#[derive(Debug, Clone, PartialEq)]
pub struct MicCalibration {
    /// Sensitivity of the input with its microphone: sample value per pascal (rms FS per
    /// Pa rms).
    pub fs_per_pa: f64,
    /// The reading's details (absent for a value entered from a certificate).
    pub reading: Option<MicReading>,
}

/// How a drive output was calibrated, and its result.
#[derive(Debug, Clone, PartialEq)]
pub struct DriveCalibration {
    /// Volts at the output per sample value, instantaneous: the peak voltage of a full-scale
    /// sine (its rms is this / √2).
    pub volts_peak_per_fs: f64,
    /// The reading's details (absent for a value entered by hand).
    pub reading: Option<DriveReading>,
}

/// A drive-monitor input's electrical gain (the station's `drive_monitors:` wire an
/// amplifier output into it).
#[derive(Debug, Clone, PartialEq)]
pub struct MonitorCalibration {
    /// Volts at the input per sample value, instantaneous (a full-scale sine's peak).
    pub volts_peak_per_fs: f64,
}

/// A loaded calibration file (see [`file`](load_calibration) for the YAML).
#[derive(Debug, Clone, PartialEq)]
pub struct Calibration {
    /// Station the calibration belongs to.
    pub station: String,
    /// When it was made, UTC, `YYYY-MM-DDTHH:MM:SSZ`.
    pub date_utc: String,
    /// Last day (UTC) on which it may be used.
    pub due_date: time::Date,
    /// Who made it.
    pub operator: String,
    /// Instruments used (calibrator, meter, ...).
    pub instruments: Vec<Instrument>,
    /// Per input channel, 1-based.
    pub microphone: BTreeMap<usize, MicCalibration>,
    /// Per output channel, 1-based.
    pub drive: BTreeMap<usize, DriveCalibration>,
    /// Per drive-monitor input channel, 1-based.
    pub monitor: BTreeMap<usize, MonitorCalibration>,
    /// The file it came from (`<new>` for one not yet written).
    pub source: std::path::PathBuf,
}

/// Problems with a calibration file or its use.
#[derive(Debug, thiserror::Error)]
pub enum CalibrationError {
    /// The file could not be read.
    #[error("{path}: cannot read calibration: {source}")]
    Io {
        /// The path.
        path: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The file is not valid; one `path:line:col: message` line per problem.
    #[error("{}", .0.iter().map(|p| p.to_string()).collect::<Vec<_>>().join("\n"))]
    Invalid(Vec<Problem>),
    /// The calibration is past its due date; calibrate again.
    #[error(
        "{path}: calibration past due: it was due on {due} and today is {today} (UTC); \
         calibrate the station again"
    )]
    PastDue {
        /// The file.
        path: String,
        /// Its due date.
        due: time::Date,
        /// Today.
        today: time::Date,
    },
    /// The plan uses an input the calibration does not cover.
    #[error(
        "{path}: no microphone calibration for input {input_1based} (channel `{channel}`); \
         calibrate it with `tragus calibrate mic --input {input_1based}`"
    )]
    MissingMicrophone {
        /// The file.
        path: String,
        /// Input channel, 1-based.
        input_1based: usize,
        /// Plan channel name.
        channel: String,
    },
    /// The plan uses an output the calibration does not cover.
    #[error(
        "{path}: no drive calibration for output {output_1based} (channel `{channel}`); \
         calibrate it with `tragus calibrate drive --output {output_1based}`"
    )]
    MissingDrive {
        /// The file.
        path: String,
        /// Output channel, 1-based.
        output_1based: usize,
        /// Plan channel name.
        channel: String,
    },
}

impl Calibration {
    /// Lowercase hex SHA-256 of the canonical form ([`canonical_json`]).
    pub fn sha256(&self) -> String {
        crate::digest::sha256_hex(canonical_json(self).as_bytes())
    }

    /// `Ok` through the due date (inclusive), an error naming the due date after it.
    pub fn check_due(&self, today: time::Date) -> Result<(), CalibrationError> {
        if today > self.due_date {
            Err(CalibrationError::PastDue {
                path: self.source.display().to_string(),
                due: self.due_date,
                today,
            })
        } else {
            Ok(())
        }
    }

    /// The conversion offset (dB, [`response_offset_db`]) for a plan channel driven by
    /// `output` and captured by `input` (both 0-based, as plans hold them).
    pub fn offset_db(
        &self,
        channel: &str,
        output: usize,
        input: usize,
    ) -> Result<f64, CalibrationError> {
        let path = self.source.display().to_string();
        let mic = self.microphone.get(&(input + 1)).ok_or_else(|| {
            CalibrationError::MissingMicrophone {
                path: path.clone(),
                input_1based: input + 1,
                channel: channel.to_string(),
            }
        })?;
        let drive =
            self.drive
                .get(&(output + 1))
                .ok_or_else(|| CalibrationError::MissingDrive {
                    path,
                    output_1based: output + 1,
                    channel: channel.to_string(),
                })?;
        Ok(response_offset_db(mic.fs_per_pa, drive.volts_peak_per_fs))
    }

    /// Today's date, UTC.
    pub fn today_utc() -> time::Date {
        time::OffsetDateTime::now_utc().date()
    }

    /// Now, UTC, `YYYY-MM-DDTHH:MM:SSZ` (the form of [`Calibration::date_utc`]).
    pub fn now_utc() -> String {
        file::format_time_utc(time::OffsetDateTime::now_utc())
    }

    /// The YAML text of this calibration (what `tragus calibrate` writes).
    pub fn to_yaml(&self) -> String {
        file::to_yaml(self)
    }
}

/// Unit of a calibrated response (docs/architecture.md).
pub const UNIT_DB_SPL_PER_V: &str = "dB SPL/V";

/// Turn a digital measurement (dB FS/FS) into a calibrated one (dB SPL/V): add `offset_db`
/// ([`response_offset_db`]) to every absolute level — the response, the fixture response
/// before correction, and the fine spectrum that smoothing and point levels read — and set
/// the unit. Relative quantities (harmonics, THD, rub and buzz, phase) do not change.
pub fn apply_offset(m: &mut crate::analysis::ChannelMeasurement, offset_db: f64) {
    shift_levels_db(m, offset_db);
    m.unit = UNIT_DB_SPL_PER_V.to_string();
}

/// Add `offset_db` to every absolute level of a measurement (response, fixture response, fine
/// power spectrum), leaving its unit and every relative quantity (harmonics, rub and buzz,
/// SNR) as they are.
pub fn shift_levels_db(m: &mut crate::analysis::ChannelMeasurement, offset_db: f64) {
    for r in &mut m.response_db {
        *r += offset_db;
    }
    if let Some(f) = &mut m.fixture_response_db {
        for r in f {
            *r += offset_db;
        }
    }
    let power_gain = 10f64.powf(offset_db / 10.0);
    for p in &mut m.fine.power {
        *p *= power_gain;
    }
    m.fine.rebuild_cumulative();
}

/// Which calibration converted a result to dB SPL/V, and under which mode the unit was
/// tested (the `calibration` object of the result JSON).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CalibrationInfo {
    /// `production` (a calibration in date covering every channel), `non-production`
    /// (`--non-production`: the result may rest on a past-due, partial or no calibration) or
    /// `uncalibrated` (no calibration given; responses in dB FS/FS).
    pub mode: String,
    /// The calibration's canonical SHA-256 (`tragus-calibration/1`), when one was applied.
    pub sha256: Option<String>,
    /// The calibration's due date, `YYYY-MM-DD`, when one was applied.
    pub due_date: Option<String>,
    /// The unit the plan's levels are written and judged in: `db_fs_per_fs` or
    /// `db_spl_per_v` (the plan's `level_unit`).
    pub level_unit: String,
}

impl CalibrationInfo {
    /// No calibration, production mode not claimed.
    pub fn uncalibrated() -> Self {
        CalibrationInfo {
            mode: "uncalibrated".into(),
            sha256: None,
            due_date: None,
            level_unit: crate::plan::LevelUnit::DbFsPerFs.name().into(),
        }
    }
}
