//! The `harmonic` check kind: One harmonic's level in a band (judged in [`super::distortion`]).

use super::Finding;
use crate::analysis::ChannelMeasurement;
use crate::plan::CheckKind;

/// This kind's judge in the registry's dispatch ([`super`]): `None` for another kind.
pub fn judge_kind(
    kind: &CheckKind,
    m: &ChannelMeasurement,
    _nominal_impedance_ohm: Option<f64>,
) -> Option<Finding> {
    let CheckKind::Harmonic {
        order,
        band,
        max_db,
    } = kind else {
        return None;
    };
    Some(super::distortion::judge_harmonic(m, *order, *band, *max_db))
}
