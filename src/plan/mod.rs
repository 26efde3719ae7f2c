//! Test plans: the YAML file an engineer writes, loaded in two stages.
//!
//! Stage one ([`raw`]) mirrors the YAML with serde and does no I/O; stage two
//! ([`Plan::from_raw`], in [`validate`]) checks every field and cross-field rule, resolves
//! limit-line CSV files relative to the plan, and builds the typed [`Plan`] below. Every
//! problem is reported at once as `PATH:LINE:COL: message` ([`PlanError`]). The plan's
//! SHA-256 is taken over a canonical JSON form ([`hash`]), so formatting and comments do not
//! change it. `tragus validate` stops after stage two. A plan's `correction:` section names
//! coupler model and earphone files; they are loaded and checked in stage two too, and their
//! problems are reported at their own files' positions.
//!
//! The file is read by the project's one loader ([`crate::config::load_file`]). Each plan
//! section has a file holding its schema and its validation (`stimulus.rs`, `analysis.rs`,
//! `channels.rs`, `correction.rs`, `product.rs`, `rig.rs`); the check kinds are registered
//! in [`checks`], one file per kind with its schema, validation and canonical fields.

mod analysis;
mod channels;
pub mod checks;
mod correction;
pub mod hash;
mod product;
pub mod raw;
mod rig;
mod stimulus;
pub mod validate;

use crate::acoustics::source::Source;
use crate::models::coupler::CouplerModel;
use std::path::{Path, PathBuf};

pub use crate::config::{Location, Problem};
pub use checks::polarity::Polarity;
pub use checks::response::{LimitLine, Normalize};
pub use checks::{CheckKind, CheckSpec};
pub use rig::RigKind;
pub use validate::{load_plan, load_plan_checked, load_plan_str, CheckedPlan};

/// Default number of points per octave of the analysis grid.
pub const DEFAULT_POINTS_PER_OCTAVE: u32 = 24;
/// Default highest harmonic order analysed.
pub const DEFAULT_MAX_HARMONIC: usize = 5;
/// Default minimum SNR (dB) for a valid measurement.
pub const DEFAULT_MIN_SNR_DB: f64 = 20.0;
/// Highest `max_retests` a plan or a station may set: a line retests a unit a few times at
/// most (common practice); a larger number is a typo, or a wish to have no limit.
pub const MAX_RETESTS_LIMIT: u32 = 100;

/// A validated test plan, ready to drive a run.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    /// Plan identifier (stable across revisions).
    pub id: String,
    /// Revision number, incremented by the engineer on every change.
    pub revision: u32,
    /// Free-text description.
    pub description: String,
    /// Hex SHA-256 of the canonical form (see [`hash`]).
    pub sha256: String,
    /// The file the plan came from (`<string>` when loaded from memory).
    pub source: PathBuf,
    /// Sample rate of stimulus and capture, Hz.
    pub sample_rate_hz: u32,
    /// Stimulus definition.
    pub stimulus: StimulusSpec,
    /// Analysis options.
    pub analysis: AnalysisSpec,
    /// Named channels in plan order.
    pub channels: Vec<ChannelSpec>,
    /// Which rig runs the plan when `--rig` is not given.
    pub rig: RigSpec,
    /// Checks in plan order.
    pub checks: Vec<CheckSpec>,
    /// The earphone's declared nominal impedance, Ω (`nominal_impedance_ohm:`), for
    /// sensitivity checks written in dB SPL/mW.
    pub nominal_impedance_ohm: Option<f64>,
    /// The unit the plan's absolute levels (response limit lines, `db` sensitivity limits)
    /// are written in (`level_unit:`), which decides whether a run needs a calibration.
    pub level_unit: LevelUnit,
    /// What the product's specification declares (`product:`), used by the hearing-safety
    /// checks to bound the sound level before anything plays.
    pub product: Option<ProductSpec>,
    /// How many times a unit may be retested under this plan (`max_retests:`); `None` when
    /// the plan leaves it to the station or the default (docs/engineer/history.md).
    pub max_retests: Option<u32>,
    /// The product's earphone file (`product: {earphone: FILE}`): the unit the simulated rig
    /// simulates. Not part of the plan hash: it changes what a simulation produces, never how
    /// a capture is judged (see [`Plan::simulated_earphone`]).
    pub product_earphone: Option<crate::models::earphone::EarphoneFile>,
}

/// The earphone the simulated rig simulates for a plan ([`Plan::simulated_earphone`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SimulatedEarphone<'a> {
    /// The design (nominal unit).
    pub model: &'a crate::acoustics::source::EarphoneModel,
    /// Its declared manufacturing spread (`None`: the demo spread).
    pub spread: Option<&'a crate::models::earphone::EarphoneSpread>,
    /// Which plan key named it (`product.earphone` or `correction.source.virtual_earphone`).
    pub named_by: &'static str,
}

/// The product's declared acoustic output (`product:`), in the reference coupler.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProductSpec {
    /// Declared nominal sensitivity, in `sensitivity_unit`.
    pub sensitivity_db: f64,
    /// `db_spl_per_v` or `db_spl_per_mw` (never `db`).
    pub sensitivity_unit: SensitivityUnit,
    /// Declared tolerance, ± dB.
    pub tolerance_db: f64,
    /// Highest response above the sensitivity anywhere in the sweep band, dB.
    pub response_peak_db: f64,
    /// The sensitivity in dB SPL/V (converted with the plan's `nominal_impedance_ohm` when
    /// declared per mW: `L(1 V) = L(1 mW) − 10·lg(R / 1000 Ω)`).
    pub sensitivity_db_spl_per_v: f64,
}

impl Plan {
    /// The plan's own product as the simulated rig simulates it: the file of
    /// `product: {earphone: FILE}` when the plan names one, else the virtual earphone of the
    /// first channel corrected with one (`correction: {source: {virtual_earphone: FILE}}`,
    /// the product's design by the correction's own meaning); `None` when neither (the
    /// simulated rig then uses its demo earbud).
    pub fn simulated_earphone(&self) -> Option<SimulatedEarphone<'_>> {
        if let Some(f) = &self.product_earphone {
            return Some(SimulatedEarphone {
                model: &f.model,
                spread: f.spread.as_ref(),
                named_by: "product.earphone",
            });
        }
        self.channels
            .iter()
            .filter_map(|c| c.correction.as_ref())
            .find_map(|c| match &c.source {
                crate::acoustics::source::Source::VirtualEarphone(m) => Some(SimulatedEarphone {
                    model: m,
                    spread: c.source_spread.as_ref(),
                    named_by: "correction.source.virtual_earphone",
                }),
                _ => None,
            })
    }
}

impl ProductSpec {
    /// The highest sensitivity a unit within its declaration can have at any frequency of
    /// the band, dB SPL/V: nominal + tolerance + response peak.
    pub fn worst_case_db_spl_per_v(&self) -> f64 {
        self.sensitivity_db_spl_per_v + self.tolerance_db + self.response_peak_db
    }
}

/// The unit of a plan's absolute levels (`level_unit:` at the top of the plan).
///
/// Absolute limits only mean something in one unit: the same unit measured on a calibrated
/// bench reads some 100 dB higher in dB SPL/V than in dB FS/FS, so a plan says which one it
/// was written in and a run judges it only in that unit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LevelUnit {
    /// `db_fs_per_fs`: the digital transfer, capture full scale per stimulus full scale.
    /// Holds only for the bench it was measured on (its gains), so production on a sound
    /// card refuses it; the simulated rig, loopback and engineering work use it. The default
    /// when the plan has no dB SPL check.
    DbFsPerFs,
    /// `db_spl_per_v`: sound pressure in the coupler per drive voltage; the run needs a
    /// calibration. The default when a sensitivity check is written in dB SPL.
    DbSplPerV,
}

impl LevelUnit {
    /// The name as written in the plan.
    pub fn name(self) -> &'static str {
        match self {
            LevelUnit::DbFsPerFs => "db_fs_per_fs",
            LevelUnit::DbSplPerV => "db_spl_per_v",
        }
    }

    /// How reports write it.
    pub fn label(self) -> &'static str {
        match self {
            LevelUnit::DbFsPerFs => "dB FS/FS",
            LevelUnit::DbSplPerV => "dB SPL/V",
        }
    }
}

impl Plan {
    /// Index of a named channel in [`Plan::channels`].
    pub fn channel_index(&self, name: &str) -> Option<usize> {
        self.channels.iter().position(|c| c.name == name)
    }

    /// Number of output channels the stimulus needs (highest output index + 1).
    pub fn n_outputs(&self) -> usize {
        self.channels
            .iter()
            .map(|c| c.output + 1)
            .max()
            .unwrap_or(0)
    }

    /// Number of input channels a capture must have (highest input index + 1).
    pub fn n_inputs(&self) -> usize {
        self.channels.iter().map(|c| c.input + 1).max().unwrap_or(0)
    }

    /// Directory of the plan file, against which relative paths resolve.
    pub fn dir(&self) -> &Path {
        self.source.parent().unwrap_or(Path::new("."))
    }
}

/// The synchronized exponential sweep and its surroundings.
#[derive(Debug, Clone, PartialEq)]
pub struct StimulusSpec {
    /// Sweep start frequency f1, Hz.
    pub start_hz: f64,
    /// Sweep stop frequency f2, Hz.
    pub stop_hz: f64,
    /// Requested sweep duration T̂, s; the synchronized duration differs slightly.
    pub duration_s: f64,
    /// Peak level of the sweep, dB re digital full scale (0 dBFS = amplitude 1.0).
    pub level_dbfs: f64,
    /// Half-cosine fade-in length, s.
    pub fade_in_s: f64,
    /// Half-cosine fade-out length, s.
    pub fade_out_s: f64,
    /// Silence before the sweep (also the noise window for SNR), s.
    pub silence_before_s: f64,
    /// Silence after the sweep (room for latency and the impulse response tail), s.
    pub silence_after_s: f64,
}

/// Analysis options.
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisSpec {
    /// Highest harmonic order analysed (2..=N); 1 means none.
    pub max_harmonic: usize,
    /// Points per octave of the IEC 61260-1 base-10 grid.
    pub points_per_octave: u32,
    /// A measurement whose SNR is below this is a retest, dB.
    pub min_snr_db: f64,
}

/// One named channel: which output drives it and which input captures it (0-based).
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelSpec {
    /// Channel name used by checks and reports.
    pub name: String,
    /// Output channel index (0-based).
    pub output: usize,
    /// Input channel index (0-based).
    pub input: usize,
    /// Fixture→reference correction of this channel: the plan-wide `correction:` section,
    /// or the channel's own (`None` when neither, or the channel says `correction: none`).
    pub correction: Option<CorrectionSpec>,
}

/// A fixture→reference correction as the plan gives it, with its files loaded: the
/// station's fixture model, the reference coupler the limits are written for, a microphone
/// tap in each, and the source whose impedance enters the correction (docs/architecture.md,
/// "Acoustic models").
#[derive(Debug, Clone, PartialEq)]
pub struct CorrectionSpec {
    /// The station's fixture model.
    pub fixture: CouplerModel,
    /// Tap of the fixture model where the station's microphone is.
    pub fixture_tap: String,
    /// The reference coupler the limits are written for.
    pub reference: CouplerModel,
    /// Tap of the reference model the limits refer to.
    pub reference_tap: String,
    /// The earphone as a source (volume velocity, Thévenin table, virtual earphone).
    pub source: Source,
    /// The `spread:` of a virtual earphone source's file: not part of the correction (nor of
    /// the plan hash); the simulated rig draws its units from it.
    pub source_spread: Option<crate::models::earphone::EarphoneSpread>,
}

/// Which rig runs the plan by default.
#[derive(Debug, Clone, PartialEq)]
pub enum RigSpec {
    /// The simulated rig; `unit` picks a population member by name when the serial does not.
    Simulated {
        /// Seed of the simulated population.
        seed: u64,
    },
    /// A sound card (needs a station configuration).
    Soundcard,
}

/// A frequency band, Hz, low < high.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Band {
    /// Lower edge, Hz.
    pub low_hz: f64,
    /// Upper edge, Hz.
    pub high_hz: f64,
}

/// The unit a sensitivity check's limits are written in (`unit:` of the check).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SensitivityUnit {
    /// `db` (the default): the response's own unit, dB FS/FS uncalibrated or dB SPL/V
    /// calibrated; the check compares whatever was measured.
    Db,
    /// `db_spl_per_v`: dB SPL for 1 V; the run needs a calibration.
    DbSplPerV,
    /// `db_spl_per_mw`: dB SPL for 1 mW into the plan's `nominal_impedance_ohm`,
    /// `L(1 mW) = L(1 V) + 10·lg(R / 1000 Ω)`; the run needs a calibration.
    DbSplPerMw,
}

impl SensitivityUnit {
    /// The name as written in the plan.
    pub fn name(self) -> &'static str {
        match self {
            SensitivityUnit::Db => "db",
            SensitivityUnit::DbSplPerV => "db_spl_per_v",
            SensitivityUnit::DbSplPerMw => "db_spl_per_mw",
        }
    }
}

/// Every problem found in a plan (never empty), or the file could not be read.
#[derive(Debug, thiserror::Error)]
pub enum PlanError {
    /// The file could not be read.
    #[error("{path}: cannot read plan: {source}")]
    Io {
        /// The path.
        path: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The plan was read but is not valid; one line per problem.
    #[error("{}", .0.iter().map(|p| p.to_string()).collect::<Vec<_>>().join("\n"))]
    Invalid(Vec<Problem>),
}

impl crate::config::FileError for PlanError {
    fn unreadable(path: String, source: std::io::Error) -> Self {
        PlanError::Io { path, source }
    }

    fn invalid(problems: Vec<Problem>) -> Self {
        PlanError::Invalid(problems)
    }

    fn not_utf8(mut problem: Problem, byte: u8) -> Self {
        // Plans have always named the byte; the other file kinds say "invalid bytes".
        problem.message = format!("expected UTF-8 text, found byte 0x{byte:02x}");
        PlanError::Invalid(vec![problem])
    }
}
