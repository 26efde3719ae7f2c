//! The `balance` check kind: the level difference between exactly two channels within
//! ±`max_diff_db` over a band.
//!
//! ```yaml
//! - id: bal
//!   kind: balance
//!   channels: [left, right]  # exactly two (or a plan of exactly two channels)
//!   band_hz: [200, 4000]     # inside the sweep
//!   max_diff_db: 2           # above 0
//!   smoothing: 1/6           # optional, 1/N octave, applied to both responses
//! ```
//!
//! Canonical fields: `"band"`, `"max_diff_db"`, `"smoothing_fraction"` (I or `null`).
//! Judged in [`crate::checks::balance`].

use super::{CheckInput, CheckKind, Fields, Kind};
use crate::config::Pos;
use crate::plan::hash;
use crate::plan::raw::RawPair;
use crate::plan::validate::Validator;
use marked_yaml::Spanned;
use serde::Deserialize;

/// The keys of a balance check.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawBalance {
    /// Band, Hz.
    pub band_hz: Option<Spanned<RawPair>>,
    /// Allowed difference, dB.
    pub max_diff_db: Option<Spanned<f64>>,
    /// Fractional-octave smoothing, `1/N`.
    pub smoothing: Option<Spanned<String>>,
}

/// The balance check kind.
pub(in crate::plan) struct Balance;

impl Kind for Balance {
    const NAME: &'static str = "balance";
    const KEYS: &'static [&'static str] = &["band_hz", "max_diff_db", "smoothing"];
    type Raw = RawBalance;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawBalance) -> Option<CheckKind> {
        let b = v.check_band(check, &c.band_hz);
        let max_diff_db = v.check_positive(check, &c.max_diff_db, "max_diff_db", "dB");
        let smoothing = v.smoothing(c.smoothing.as_ref(), &check.label("smoothing"));
        let given = &check.sec.value.channels;
        // How many channels it compares: those it names, or every channel of the plan.
        let n = match (given, check.channels) {
            (Some(_), Some(list)) => Some(list.len()),
            (None, _) => check.plan_channels.map(<[_]>::len),
            _ => None,
        };
        let mut two = true;
        if let Some(n) = n {
            if n != 2 {
                two = false;
                let (pos, msg) = match given {
                    Some(list) => (
                        Pos::of_value(list),
                        format!(
                            "{}: a balance check compares exactly two channels, found {n}",
                            check.label("channels")
                        ),
                    ),
                    None => (
                        Pos::of_value(check.kind),
                        format!(
                            "{}: a balance check compares exactly two channels, found {n} in \
                             the plan; name two with `channels: [a, b]`",
                            check.ctx
                        ),
                    ),
                };
                v.report(pos, msg);
            }
        }
        two.then_some(())?;
        Some(CheckKind::Balance {
            band: b?,
            max_diff_db: max_diff_db?,
            smoothing_fraction: smoothing?,
        })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::Balance {
            band,
            max_diff_db,
            smoothing_fraction,
        } = kind
        else {
            return None;
        };
        Some(vec![
            ("band", hash::band(band)),
            ("max_diff_db", hash::real(*max_diff_db)),
            ("smoothing_fraction", hash::fraction(*smoothing_fraction)),
        ])
    }
}
