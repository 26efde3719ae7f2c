//! The `listening` check kind: judged by the operator while the bench plays the step
//! ([`crate::safety::listening_steps`]), never by the analysis.

use super::Finding;
use crate::analysis::ChannelMeasurement;
use crate::plan::CheckKind;

/// This kind's judge in the registry's dispatch ([`super`]): `None` for another kind.
pub fn judge_kind(
    kind: &CheckKind,
    _m: &ChannelMeasurement,
    _nominal_impedance_ohm: Option<f64>,
) -> Option<Finding> {
    matches!(kind, CheckKind::Listening { .. }).then(|| {
        Finding::retest("a listening step is judged by the operator, not by the analysis")
    })
}
