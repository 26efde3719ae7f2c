//! The derivation report: what `derive-report.json` holds (and the preview shows).
//!
//! Field names are a contract for whoever reads the file (add fields freely, rename none).

use crate::limits::scalar::Clamp;
use crate::limits::stats::Summary;
use crate::limits::thin::Side;
use crate::result::ToolInfo;

/// The whole report.
#[derive(Debug, Clone, serde::Serialize)]
pub struct DeriveReport {
    /// Software that made it.
    pub tool: ToolInfo,
    /// When, UTC.
    pub created_utc: String,
    /// The store the units came from.
    pub store: String,
    /// The plan derived from.
    pub plan: PlanRef,
    /// The new plan revision written.
    pub new_plan: PlanRef,
    /// The choices.
    pub settings: crate::limits::Settings,
    /// Floors of one-sided limits.
    pub floors: super::checks::Floors,
    /// Checks split per channel.
    pub per_channel: bool,
    /// The golden units.
    pub golden: SetReport,
    /// The validation units, when given.
    pub validation: Option<SetReport>,
    /// Every derived check of the new plan.
    pub checks: Vec<CheckReport>,
    /// Checks kept as they were, with why.
    pub kept: Vec<KeptCheck>,
    /// Files written, relative to the output directory.
    pub files: Vec<String>,
}

/// A plan file.
#[derive(Debug, Clone, serde::Serialize)]
pub struct PlanRef {
    /// Its path.
    pub path: String,
    /// `plan:` id.
    pub id: String,
    /// Revision.
    pub revision: u32,
    /// SHA-256 of its canonical form.
    pub sha256: String,
}

/// A set of units and how the new plan judges them.
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct SetReport {
    /// Units in the set.
    pub n_units: usize,
    /// The serial-list file, when the set came from one.
    pub serials_file: Option<String>,
    /// `--since` given.
    pub since: Option<String>,
    /// `--until` given.
    pub until: Option<String>,
    /// The earliest record's time.
    pub first_time_utc: Option<String>,
    /// The latest record's time.
    pub last_time_utc: Option<String>,
    /// Each unit.
    pub units: Vec<UnitReport>,
    /// Units left out, with why.
    pub left_out: Vec<LeftOut>,
    /// Units the new plan passes.
    pub n_pass: usize,
    /// `n_pass / n_units`.
    pub predicted_yield: Option<f64>,
}

/// One unit of a set.
#[derive(Debug, Clone, serde::Serialize)]
pub struct UnitReport {
    /// Serial number.
    pub serial: String,
    /// Its record.
    pub record_id: i64,
    /// When measured.
    pub time_utc: String,
    /// The stored verdict (under the old plan).
    pub stored_verdict: crate::Verdict,
    /// The verdict under the new plan.
    pub new_verdict: crate::Verdict,
    /// Checks it fails under the new plan (`id/channel`).
    pub failed_checks: Vec<String>,
}

/// A unit left out of a set.
#[derive(Debug, Clone, serde::Serialize)]
pub struct LeftOut {
    /// Serial number.
    pub serial: String,
    /// Why.
    pub reason: String,
}

/// A check kept as it was.
#[derive(Debug, Clone, serde::Serialize)]
pub struct KeptCheck {
    /// Its id.
    pub id: String,
    /// Its kind.
    pub kind: String,
    /// Why it was not derived.
    pub reason: String,
}

/// How many units a check passes in a set.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, serde::Serialize)]
pub struct Counts {
    /// Units passing the check on every channel it applies to.
    pub n_pass: usize,
    /// Units failing it on some channel.
    pub n_fail: usize,
    /// Units where it was not judged.
    pub n_retest: usize,
}

/// A written line.
#[derive(Debug, Clone, serde::Serialize)]
pub struct LineReport {
    /// Upper or lower.
    pub side: Side,
    /// Its CSV, relative to the new plan.
    pub file: String,
    /// First grid frequency it covers, Hz.
    pub from_hz: f64,
    /// Last grid frequency it covers, Hz.
    pub to_hz: f64,
    /// Breakpoints written.
    pub n_points: usize,
    /// Grid points of the unthinned line.
    pub n_unthinned: usize,
    /// The thinning bound, dB.
    pub max_error_db: f64,
    /// The written line's largest distance from the unthinned one, dB.
    pub worst_error_db: f64,
}

/// Per-frequency statistics of a response check.
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct CurveReport {
    /// Grid, Hz.
    pub freqs_hz: Vec<f64>,
    /// Golden mean, dB.
    pub mean_db: Vec<f64>,
    /// Golden sample σ, dB.
    pub sd_db: Vec<f64>,
    /// Half-width of the unthinned upper line, dB.
    pub upper_half_width_db: Vec<f64>,
    /// Half-width of the unthinned lower line, dB.
    pub lower_half_width_db: Vec<f64>,
}

/// One derived check.
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct CheckReport {
    /// Its id in the new plan.
    pub id: String,
    /// Its id in the old plan.
    pub from_id: String,
    /// Kind.
    pub kind: String,
    /// Channels it applies to.
    pub channels: Vec<String>,
    /// What its values are, with their unit.
    pub quantity: String,
    /// Golden units.
    pub n_units: usize,
    /// Golden values (or curves) it was derived from.
    pub n_values: usize,
    /// Scalar checks: the golden values' summary.
    pub golden: Option<Summary>,
    /// Scalar checks: the golden values, on the scale of `quantity`.
    pub values_db: Vec<f64>,
    /// The old limits as the plan wrote them.
    pub old_limits: serde_json::Value,
    /// The new limits as the new plan writes them.
    pub new_limits: serde_json::Value,
    /// Scalar checks: the lower limit on the scale of `quantity`.
    pub lsl_db: Option<f64>,
    /// Scalar checks: the upper limit on the scale of `quantity`.
    pub usl_db: Option<f64>,
    /// Scalar checks: what bounded the limit.
    pub clamp: Option<Clamp>,
    /// Cp (a response check: the smallest over frequency).
    pub cp: Option<f64>,
    /// Where the smallest Cp is, Hz.
    pub cp_at_hz: Option<f64>,
    /// Cpk, or Cpu/Cpl with one limit (a response check: the smallest over frequency).
    pub cpk: Option<f64>,
    /// Where the smallest Cpk is, Hz.
    pub cpk_at_hz: Option<f64>,
    /// Response checks: grid points whose half-width was raised to the minimum.
    pub n_at_min_half_width: Option<usize>,
    /// Response checks: grid points whose half-width was cut to the maximum.
    pub n_at_max_half_width: Option<usize>,
    /// Response checks: line points widened beyond k·σ to reach a golden curve.
    pub n_widened_to_golden: Option<usize>,
    /// Response checks: the lines written.
    pub lines: Vec<LineReport>,
    /// Response checks: the statistics per frequency.
    pub curve: Option<CurveReport>,
    /// The golden units under the new plan.
    pub golden_counts: Counts,
    /// The validation units under the new plan.
    pub validation_counts: Option<Counts>,
}
