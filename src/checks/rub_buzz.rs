//! The `rub_buzz` check kind: Rub and buzz in a band (judged in [`super::distortion`]).

use super::Finding;
use crate::analysis::ChannelMeasurement;
use crate::plan::CheckKind;

/// This kind's judge in the registry's dispatch ([`super`]): `None` for another kind.
pub fn judge_kind(
    kind: &CheckKind,
    m: &ChannelMeasurement,
    _nominal_impedance_ohm: Option<f64>,
) -> Option<Finding> {
    let CheckKind::RubBuzz { band, max_db } = kind else {
        return None;
    };
    Some(super::distortion::judge_rub_buzz(m, *band, *max_db))
}
