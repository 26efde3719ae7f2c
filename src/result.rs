//! The result of one unit: what `analyze`, `run` and the store write as JSON.
//!
//! Field names are a contract (docs/architecture.md, "Result JSON"): add fields freely, rename none
//! without a migration note in CHANGELOG.md.

use crate::analysis::ChannelMeasurement;
use crate::checks::CheckResult;
use crate::plan::Plan;
use crate::Verdict;

/// Name and version of the software that made a result.
#[derive(Debug, Clone, serde::Serialize)]
pub struct ToolInfo {
    /// Always `tragus`.
    pub name: String,
    /// Crate version.
    pub version: String,
    /// Build identity ([`crate::BUILD`]): version, git commit, dirty flag.
    pub build: String,
}

impl Default for ToolInfo {
    fn default() -> Self {
        ToolInfo {
            name: "tragus".into(),
            version: crate::VERSION.into(),
            build: crate::BUILD.into(),
        }
    }
}

/// Which plan judged the unit.
#[derive(Debug, Clone, serde::Serialize)]
pub struct PlanInfo {
    /// Plan id.
    pub id: String,
    /// Plan revision.
    pub revision: u32,
    /// SHA-256 of the plan's canonical form.
    pub sha256: String,
}

impl From<&Plan> for PlanInfo {
    fn from(p: &Plan) -> Self {
        PlanInfo {
            id: p.id.clone(),
            revision: p.revision,
            sha256: p.sha256.clone(),
        }
    }
}

pub use crate::analysis::{CorrectionInfo, CouplerRef};
pub use crate::calibration::CalibrationInfo;

/// One unit's result.
#[derive(Debug, Clone, serde::Serialize)]
pub struct UnitResult {
    /// Software that made the result.
    pub tool: ToolInfo,
    /// Plan that judged it.
    pub plan: PlanInfo,
    /// Unit serial number (empty for `analyze` without `--serial`).
    pub serial: String,
    /// Unit verdict: fail if any check failed, retest if the measurement was invalid.
    pub verdict: Verdict,
    /// When the unit was measured, UTC, RFC 3339.
    pub time_utc: String,
    /// Rig that captured it (`simulated`, `recording`, `soundcard`).
    pub rig: String,
    /// What the rig was told to simulate, for simulated runs (`nominal`, a defect name).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub simulated_unit: Option<String>,
    /// The station that tested the unit (id, production or engineering mode, station file
    /// hash); absent for `analyze`, which tests on no station.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub station: Option<crate::station::StationInfo>,
    /// Unit-level reasons for a retest, in words.
    pub retest_reasons: Vec<String>,
    /// Sound-card rig: the device path's latency (output to input, samples) found by the
    /// alignment and removed before the analysis; absent for other rigs.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub device_latency_samples: Option<i64>,
    /// Per-channel measurements.
    pub channels: Vec<ChannelMeasurement>,
    /// Per-check results.
    pub checks: Vec<CheckResult>,
    /// Calibration and mode of the test.
    pub calibration: CalibrationInfo,
    /// What hearing safety did (caps, budget, pilot, scale-down, guard trip, events);
    /// absent for `analyze`, which plays nothing.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub safety: Option<crate::safety::setup::UnitSafety>,
    /// The unit's earlier records in the store and what they decided (retest limit, passed
    /// after a fail; docs/engineer/history.md); absent for `analyze` and in results written
    /// before unit history existed.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub history: Option<crate::store::history::HistoryNote>,
}

/// Current UTC time in RFC 3339 with millisecond precision.
pub fn now_utc_rfc3339() -> String {
    let now = time::OffsetDateTime::now_utc();
    let fmt = time::macros::format_description!(
        "[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:3]Z"
    );
    now.format(&fmt)
        .unwrap_or_else(|_| now.unix_timestamp().to_string())
}
