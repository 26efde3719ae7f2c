//! The `rub_buzz` check kind: the rub-and-buzz indicator (dB re the fundamental) below a
//! maximum over a band of excitation frequencies.
//!
//! ```yaml
//! - id: rb
//!   kind: rub_buzz
//!   band_hz: [100, 5000]     # inside the sweep
//!   max_db: -30              # dB re the fundamental, at most 0
//! ```
//!
//! Canonical fields: `"band"`, `"max_db"`.

use super::{CheckInput, CheckKind, Fields, Kind};
use crate::plan::hash;
use crate::plan::raw::RawPair;
use crate::plan::validate::Validator;
use marked_yaml::Spanned;
use serde::Deserialize;

/// The keys of a rub-and-buzz check.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawRubBuzz {
    /// Band of excitation frequencies, Hz.
    pub band_hz: Option<Spanned<RawPair>>,
    /// Upper limit, dB re fundamental.
    pub max_db: Option<Spanned<f64>>,
}

/// The rub-and-buzz check kind.
pub(in crate::plan) struct RubBuzz;

impl Kind for RubBuzz {
    const NAME: &'static str = "rub_buzz";
    const KEYS: &'static [&'static str] = &["band_hz", "max_db"];
    type Raw = RawRubBuzz;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawRubBuzz) -> Option<CheckKind> {
        let b = v.check_band(check, &c.band_hz);
        let max_db = v.check_re_fundamental(check, &c.max_db, "max_db");
        Some(CheckKind::RubBuzz {
            band: b?,
            max_db: max_db?,
        })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::RubBuzz { band, max_db } = kind else {
            return None;
        };
        Some(vec![
            ("band", hash::band(band)),
            ("max_db", hash::real(*max_db)),
        ])
    }
}
