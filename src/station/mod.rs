//! Station configuration: everything that belongs to the bench, not to the product.
//!
//! A plan says what to measure and how to judge it, and stays portable between stations;
//! the station file says where the sound goes on this bench (audio host and devices, which
//! device channel each plan channel uses, the electrical loopback), which fixture the unit
//! sits in, which calibration and store the bench uses, whether it tests production units,
//! and the hardware caps that keep people's hearing safe. It sits beside the plan at the
//! start of the data flow: the CLI loads both ([`load_station`]), then
//! [`Station::apply_to_plan`] remaps the plan's channel numbers before the stimulus is built.
//!
//! Like plans and coupler models, every problem is reported at once as
//! `PATH:LINE:COL: message`, unknown keys with the nearest known key suggested; paths in the
//! file resolve against the station file's directory.
//!
//! # Schema
//!
//! ```yaml
//! station: line3-st1              # id: [a-z0-9][a-z0-9._-]*, recorded with every unit
//! description: free text          # optional
//! mode: production                # production (default) | engineering
//! rig: simulated                  # simulated (default) | soundcard
//! audio:                          # optional; every key optional
//!   host: alsa                    # cpal host; default: the default host
//!   output_device: "USB Audio"    # default: the host's default output
//!   input_device: "USB Audio"     # default: the host's default input
//!   buffer_frames: 256            # 16 to 65536; default: the device's
//!   loopback: {input: 3, output: 1}   # 1-based; the drive of output 1 wired into input 3
//!   max_clock_drift_ppm: 20       # default 20 (DEFAULT_MAX_CLOCK_DRIFT_PPM)
//! channels:                       # optional: plan channel name → device channels, 1-based
//!   left: {output: 1, input: 1}
//!   right: {output: 2, input: 2}
//! drive_monitors:                 # optional: amplifier outputs wired back into inputs,
//!   - {output: 1, input: 3}       #   1-based; the calibration's `monitor:` gives each
//!   - {output: 2, input: 4}       #   input's volts per full scale
//! fixture: ../reference/couplers/fixture-line3-a.yaml   # optional coupler model
//! fixture_tap: mic                # optional; default: the plan's fixture_tap
//! calibration: ../calibration/line3-st1.yaml            # required in production mode
//! store: ../tragus-data/line3-st1 # optional; default tragus-data
//! signing_key: line3-st1.key      # optional: the station's private key (`tragus keys new`)
//! max_retests: 2                  # optional, 0 to 100: retests of a unit before it is a FAIL
//!                                 #   (the stricter of the plan's and this; default 3)
//! caps:                           # optional; every key optional, defaults in Caps
//!   max_drive_v_rms: 0.5
//!   max_drive_v_peak: 0.8
//!   max_digital_dbfs: -1
//!   max_spl_mic_peak_db: 140
//!   max_spl_mic_dba: 130
//!   max_spl_reference_peak_db: 125
//!   max_spl_reference_dba: 115
//! ```
//!
//! # Decisions
//!
//! - **Channel map, all or nothing.** With no `channels:` the plan's own numbers are used.
//!   With a `channels:` map, every channel of the plan must be in it, or the run is refused
//!   ([`StationError::UnmappedChannel`]): a partly mapped plan would silently mix the
//!   station's wiring with numbers written for another bench, the classic wrong-channel
//!   fault. The map may name channels a plan does not use (one station runs several plans).
//!   Outputs and inputs in the map are unique, and the loopback input is none of them.
//! - **Production needs a calibration.** `mode: production` without `calibration:` is a
//!   problem in the file; `mode: engineering` marks every record as non-production.
//! - **Hash.** [`Station::sha256`] is the SHA-256 of the station file's bytes: the record
//!   names the exact file; the fixture model has its own hash in the correction record.

/// The sound-card settings of a station (plain data, read by the sound-card rig).
pub mod audio;
mod load;

pub use load::{load_station, load_station_str};

use crate::models::coupler::CouplerModel;
use crate::plan::{Plan, Problem};
use crate::station::audio::SoundcardSpec;
use std::path::PathBuf;

/// Default `max_clock_drift_ppm`: the sound-card rig's (one bound, one reason; see
/// [`SoundcardSpec::DEFAULT_MAX_CLOCK_DRIFT_PPM`]).
pub const DEFAULT_MAX_CLOCK_DRIFT_PPM: f64 = SoundcardSpec::DEFAULT_MAX_CLOCK_DRIFT_PPM;
/// Accepted range of `max_clock_drift_ppm`: above 1000 ppm (0.1 %) no measurement is
/// meaningful, and 0 would refuse every real device pair.
pub const CLOCK_DRIFT_RANGE_PPM: (f64, f64) = (0.1, 1000.0);
/// Accepted range of `buffer_frames` (audio APIs' usual limits, common practice).
pub const BUFFER_FRAMES_RANGE: (i128, i128) = (16, 65_536);
/// Highest device channel number (1-based) a station may name; the plan's own limit.
pub const MAX_CHANNEL_NUMBER: usize = crate::plan::validate::MAX_CHANNEL_NUMBER;

/// Whether the station tests units that ship.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Mode {
    /// Production: calibrated, every record is a shipping decision.
    Production,
    /// Engineering (non-production): bench work, every record says so.
    Engineering,
}

impl Mode {
    /// The name written in files and records.
    pub fn as_str(self) -> &'static str {
        match self {
            Mode::Production => "production",
            Mode::Engineering => "engineering",
        }
    }
}

pub use crate::plan::RigKind;

/// Device channels of one plan channel, 0-based.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ChannelRoute {
    /// Plan channel name.
    pub name: String,
    /// Output channel, 0-based.
    pub output: usize,
    /// Input channel, 0-based.
    pub input: usize,
}

/// One drive monitor: the amplifier output of a device output wired back into a device
/// input, so that the volts really driven are measured (hearing safety: an amplifier whose
/// gain was turned up after calibration shows in the pilot tone and trips the guard).
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub struct DriveMonitor {
    /// Output channel, 0-based.
    pub output: usize,
    /// Input channel that carries it, 0-based.
    pub input: usize,
}

/// The station's fixture: the coupler model the unit sits in, replacing the plan's
/// correction fixture.
#[derive(Debug, Clone, PartialEq)]
pub struct StationFixture {
    /// The fixture's coupler model.
    pub model: CouplerModel,
    /// Microphone tap in it; `None` = the plan's `fixture_tap`.
    pub tap: Option<String>,
}

/// Hardware caps: levels that no plan, calibration or fault may exceed on this bench
/// (`src/safety` enforces them before and while playing).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Caps {
    /// Highest rms drive voltage at the earphone terminals, V.
    pub max_drive_v_rms: f64,
    /// Highest peak drive voltage, V.
    pub max_drive_v_peak: f64,
    /// Highest digital peak level of the stimulus, dBFS.
    pub max_digital_dbfs: f64,
    /// Highest peak sound pressure level at the fixture microphone, dB SPL re 20 µPa.
    pub max_spl_mic_peak_db: f64,
    /// Highest A-weighted (equivalent, over one step) level at the fixture microphone, dB(A).
    pub max_spl_mic_dba: f64,
    /// Highest peak sound pressure level at the reference (ear-equivalent) position, dB SPL.
    pub max_spl_reference_peak_db: f64,
    /// Highest A-weighted (equivalent, over one step) level at the reference position, dB(A).
    pub max_spl_reference_dba: f64,
}

impl Default for Caps {
    /// Defaults for an earphone line, and where they come from:
    /// - 0.5 V rms / 0.8 V peak drive: some 8–16 mW into a 16–32 Ω earbud, far above what a
    ///   test sweep needs (common practice);
    /// - −1 dBFS: headroom for inter-sample peaks in the converter (common practice);
    /// - 140 dB SPL peak at the microphone: the peak limit for impulsive noise of NIOSH
    ///   (1998) and of the EU directive 2003/10/EC (exposure limit value, 140 dB(C) peak)
    ///   (both from memory) — people stand next to an open fixture;
    /// - 130 dB(A) at the microphone: 10 dB under that peak limit (common practice);
    /// - 125 dB SPL peak at the reference position: 10 dB under the directive's lower
    ///   exposure action value of 135 dB(C) peak (from memory), for a unit that is in an ear
    ///   when it should not be;
    /// - 115 dB(A) at the reference position: the highest steady level OSHA 29 CFR 1910.95
    ///   Table G-16 permits at all (15 min a day; from memory); NIOSH's REL allows it for
    ///   28 s a day, so a 2 s sweep is at most 7 % of a daily dose.
    fn default() -> Self {
        Caps {
            max_drive_v_rms: 0.5,
            max_drive_v_peak: 0.8,
            max_digital_dbfs: -1.0,
            max_spl_mic_peak_db: 140.0,
            max_spl_mic_dba: 130.0,
            max_spl_reference_peak_db: 125.0,
            max_spl_reference_dba: 115.0,
        }
    }
}

/// A validated station file.
#[derive(Debug, Clone, PartialEq)]
pub struct Station {
    /// Station id (`station:`), recorded with every unit.
    pub id: String,
    /// Free-text description (empty when absent).
    pub description: String,
    /// Production or engineering.
    pub mode: Mode,
    /// Which rig plays the plan.
    pub rig: RigKind,
    /// Audio host, devices, buffer and loopback (0-based channels).
    pub soundcard: SoundcardSpec,
    /// Plan channel → device channels; empty = use the plan's numbers.
    pub channels: Vec<ChannelRoute>,
    /// Drive monitors (0-based channels); empty = the drive is not monitored.
    pub drive_monitors: Vec<DriveMonitor>,
    /// The station's fixture, if it names one.
    pub fixture: Option<StationFixture>,
    /// Calibration file (resolved against the station file's directory).
    pub calibration: Option<PathBuf>,
    /// Store directory (resolved), if the station names one.
    pub store: Option<PathBuf>,
    /// The station's private key file (`signing_key:`, resolved to an absolute path), if
    /// the station signs its records; read it with `crate::keys::StationKey::load`.
    pub signing_key: Option<PathBuf>,
    /// Hardware caps.
    pub caps: Caps,
    /// How many times a unit may be retested on this station (`max_retests:`); `None` when
    /// the station leaves it to the plan or the default (docs/engineer/history.md).
    pub max_retests: Option<u32>,
    /// Hex SHA-256 of the station file's bytes.
    pub sha256: String,
    /// The file the station came from.
    pub source: PathBuf,
}

/// Why a station could not be loaded or applied.
#[derive(Debug, thiserror::Error)]
pub enum StationError {
    /// The file could not be read.
    #[error("{path}: cannot read station file: {source}")]
    Io {
        /// The path.
        path: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The file was read but is not valid; one `path:line:col: message` line per problem.
    #[error("{}", .0.iter().map(|p| p.to_string()).collect::<Vec<_>>().join("\n"))]
    Invalid(Vec<Problem>),
    /// The station maps channels but not this one of the plan's; add it to `channels:`.
    #[error(
        "{station}: channels: expected an entry for the plan's channel `{channel}` (the station \
         maps {mapped}); a station that maps channels must map every channel of the plan"
    )]
    UnmappedChannel {
        /// Station file.
        station: String,
        /// The plan channel it does not map.
        channel: String,
        /// The channels it maps, comma-separated.
        mapped: String,
    },
}

/// What a result records about the station (`station` object of the result JSON).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct StationInfo {
    /// Station id.
    pub id: String,
    /// `production` or `engineering`.
    pub mode: Mode,
    /// SHA-256 of the station file; `None` for a station named without a file.
    pub sha256: Option<String>,
}

impl Station {
    /// The plan's channels on this station's device channels, 0-based `(output, input)` in
    /// plan order. Without a channel map, the plan's own numbers.
    pub fn routes_for(&self, plan: &Plan) -> Result<Vec<(usize, usize)>, StationError> {
        plan.channels
            .iter()
            .map(|c| {
                if self.channels.is_empty() {
                    return Ok((c.output, c.input));
                }
                self.channels
                    .iter()
                    .find(|r| r.name == c.name)
                    .map(|r| (r.output, r.input))
                    .ok_or_else(|| StationError::UnmappedChannel {
                        station: self.source.display().to_string(),
                        channel: c.name.clone(),
                        mapped: self
                            .channels
                            .iter()
                            .map(|r| r.name.as_str())
                            .collect::<Vec<_>>()
                            .join(", "),
                    })
            })
            .collect()
    }

    /// Put the plan's channels on this station's device channels (before the stimulus and
    /// analyzer are built). The plan's hash is left as it was: it names the portable plan,
    /// and the record names the station separately.
    pub fn apply_to_plan(&self, plan: &mut Plan) -> Result<(), StationError> {
        let routes = self.routes_for(plan)?;
        for (c, (output, input)) in plan.channels.iter_mut().zip(routes) {
            c.output = output;
            c.input = input;
        }
        Ok(())
    }

    /// What a result records about this station.
    pub fn info(&self) -> StationInfo {
        StationInfo {
            id: self.id.clone(),
            mode: self.mode,
            sha256: Some(self.sha256.clone()),
        }
    }
}
