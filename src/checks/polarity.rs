//! The `polarity` check: the sign of the linear impulse response equals the expected one.
//!
//! Called from [`super::judge`]. There is no margin and no frequency: a polarity is right
//! or wrong (a reversed driver or a swapped lead), so `worst_margin_db` and `at_hz` are
//! `null`.

use super::Finding;
use crate::analysis::ChannelMeasurement;
use crate::plan::Polarity;
use crate::Verdict;

/// Judge the measured polarity of `m` against `expected`.
pub fn judge(m: &ChannelMeasurement, expected: Polarity) -> Finding {
    let word = |p: Polarity| match p {
        Polarity::Positive => "positive",
        Polarity::Negative => "negative",
    };
    let verdict = if m.polarity == expected {
        Verdict::Pass
    } else {
        Verdict::Fail
    };
    Finding {
        verdict,
        worst_margin_db: None,
        at_hz: None,
        detail: format!("polarity {}, expected {}", word(m.polarity), word(expected)),
    }
}

/// This kind's judge in the registry's dispatch ([`super`]): `None` for another kind.
pub fn judge_kind(
    kind: &crate::plan::CheckKind,
    m: &ChannelMeasurement,
    _nominal_impedance_ohm: Option<f64>,
) -> Option<Finding> {
    use crate::plan::CheckKind;
    let CheckKind::Polarity { expected } = kind else {
        return None;
    };
    Some(judge(m, *expected))
}
