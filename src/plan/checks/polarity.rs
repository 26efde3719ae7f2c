//! The `polarity` check kind: the measured polarity equals the expected one.
//!
//! ```yaml
//! - id: pol
//!   kind: polarity
//!   expected: positive       # or negative
//! ```
//!
//! Canonical fields: `"expected"`: `"positive"` or `"negative"`.

use super::{CheckInput, CheckKind, Fields, Kind};
use crate::config::{found_scalar, suggest, Pos};
use crate::plan::hash;
use crate::plan::validate::Validator;
use marked_yaml::Spanned;
use serde::Deserialize;

/// Expected polarity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Polarity {
    /// Positive drive gives positive pressure.
    Positive,
    /// Inverted.
    Negative,
}

/// The keys of a polarity check.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawPolarity {
    /// Expected polarity.
    pub expected: Option<Spanned<String>>,
}

/// The polarity check kind.
pub(in crate::plan) struct PolarityCheck;

impl Kind for PolarityCheck {
    const NAME: &'static str = "polarity";
    const KEYS: &'static [&'static str] = &["expected"];
    type Raw = RawPolarity;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawPolarity) -> Option<CheckKind> {
        let e = v.check_key(check, &c.expected, "expected")?;
        let expected = match e.as_str() {
            "positive" => Polarity::Positive,
            "negative" => Polarity::Negative,
            other => {
                let hint = match suggest(other, ["positive", "negative"]) {
                    Some(s) => format!(", did you mean `{s}`?"),
                    None => String::new(),
                };
                v.report(
                    Pos::of_value(e),
                    format!(
                        "{}: expected `positive` or `negative`, found {}{hint}",
                        check.label("expected"),
                        found_scalar(other)
                    ),
                );
                return None;
            }
        };
        Some(CheckKind::Polarity { expected })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::Polarity { expected } = kind else {
            return None;
        };
        let e = match expected {
            Polarity::Positive => "positive",
            Polarity::Negative => "negative",
        };
        Some(vec![("expected", hash::s(e))])
    }
}
