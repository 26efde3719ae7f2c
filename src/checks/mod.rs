//! Checks: measurements → a verdict per check and per unit.
//!
//! Sits after the analysis and before the store. Each check kind lives in its own file;
//! [`judge`] runs a plan's checks in plan order. Margins are in dB (THD margins in dB of
//! the ratio limit/measured): positive inside the limits, negative outside.

use crate::analysis::ChannelMeasurement;
use crate::plan::Plan;
use crate::Verdict;

/// The outcome of one check on one channel (or a channel pair, for balance).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CheckResult {
    /// Check id from the plan.
    pub id: String,
    /// Check kind (`response`, `sensitivity`, …).
    pub kind: String,
    /// Channel name, or `a/b` for a balance check.
    pub channel: String,
    /// Verdict of this check.
    pub verdict: Verdict,
    /// Smallest margin found, dB (positive: inside the limits); `null` for polarity.
    pub worst_margin_db: Option<f64>,
    /// Frequency of the worst margin, Hz; `null` when not frequency-dependent.
    pub at_hz: Option<f64>,
    /// One line in words: what was measured against what.
    pub detail: String,
}

/// Judge every check of `plan` against the measurements (one per plan channel, in plan
/// order) and return the check results and the unit verdict.
pub fn judge(plan: &Plan, channels: &[ChannelMeasurement]) -> (Vec<CheckResult>, Verdict) {
    let _ = (plan, channels);
    unimplemented!("checks helper")
}
