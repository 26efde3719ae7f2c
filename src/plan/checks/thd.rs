//! The `thd` check kind: total harmonic distortion (re the fundamental, %) below a maximum
//! over a band of excitation frequencies.
//!
//! ```yaml
//! - id: thd
//!   kind: thd
//!   band_hz: [100, 5000]     # inside the sweep
//!   max_percent: 1           # above 0, at most 100
//! ```
//!
//! Canonical fields: `"band"`, `"max_percent"`.

use super::{CheckInput, CheckKind, Fields, Kind};
use crate::plan::hash;
use crate::plan::raw::RawPair;
use crate::plan::validate::Validator;
use marked_yaml::Spanned;
use serde::Deserialize;

/// The keys of a THD check.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawThd {
    /// Band of excitation frequencies, Hz.
    pub band_hz: Option<Spanned<RawPair>>,
    /// Upper limit, %.
    pub max_percent: Option<Spanned<f64>>,
}

/// The THD check kind.
pub(in crate::plan) struct Thd;

impl Kind for Thd {
    const NAME: &'static str = "thd";
    const KEYS: &'static [&'static str] = &["band_hz", "max_percent"];
    type Raw = RawThd;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawThd) -> Option<CheckKind> {
        let b = v.check_band(check, &c.band_hz);
        let max_percent = v
            .check_positive(check, &c.max_percent, "max_percent", "%")
            .and_then(|x| v.at_most_100_percent(check, &c.max_percent, x));
        Some(CheckKind::Thd {
            band: b?,
            max_percent: max_percent?,
        })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::Thd { band, max_percent } = kind else {
            return None;
        };
        Some(vec![
            ("band", hash::band(band)),
            ("max_percent", hash::real(*max_percent)),
        ])
    }
}
