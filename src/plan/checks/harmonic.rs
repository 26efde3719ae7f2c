//! The `harmonic` check kind: one harmonic (HDn re the fundamental, dB) below a maximum
//! over a band of excitation frequencies.
//!
//! ```yaml
//! - id: hd3
//!   kind: harmonic
//!   order: 3                 # 2 to the plan's analysis.max_harmonic
//!   band_hz: [100, 5000]     # inside the sweep
//!   max_db: -40              # dB re the fundamental, at most 0
//! ```
//!
//! Canonical fields: `"band"`, `"max_db"`, `"order"`.

use super::{CheckInput, CheckKind, Fields, Kind};
use crate::config::Pos;
use crate::plan::analysis::MAX_HARMONIC_LIMIT;
use crate::plan::hash;
use crate::plan::raw::RawPair;
use crate::plan::validate::Validator;
use marked_yaml::Spanned;
use serde::Deserialize;

/// The keys of a harmonic check.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawHarmonic {
    /// Harmonic order.
    pub order: Option<Spanned<i128>>,
    /// Band of excitation frequencies, Hz.
    pub band_hz: Option<Spanned<RawPair>>,
    /// Upper limit, dB re fundamental.
    pub max_db: Option<Spanned<f64>>,
}

/// The harmonic check kind.
pub(in crate::plan) struct Harmonic;

impl Kind for Harmonic {
    const NAME: &'static str = "harmonic";
    const KEYS: &'static [&'static str] = &["order", "band_hz", "max_db"];
    type Raw = RawHarmonic;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawHarmonic) -> Option<CheckKind> {
        let b = v.check_band(check, &c.band_hz);
        let order = v.check_key(check, &c.order, "order").and_then(|n| {
            let hi = check.max_harmonic.unwrap_or(MAX_HARMONIC_LIMIT);
            if **n >= 2 && **n <= hi as i128 {
                Some(**n as usize)
            } else {
                let why = if check.max_harmonic.is_some() {
                    format!("max_harmonic {hi}")
                } else {
                    format!("{hi}")
                };
                v.report(
                    Pos::of_value(n),
                    format!(
                        "{}: expected a harmonic order from 2 to {why}, found {}",
                        check.label("order"),
                        **n
                    ),
                );
                None
            }
        });
        let max_db = v.check_re_fundamental(check, &c.max_db, "max_db");
        Some(CheckKind::Harmonic {
            order: order?,
            band: b?,
            max_db: max_db?,
        })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::Harmonic {
            order,
            band,
            max_db,
        } = kind
        else {
            return None;
        };
        Some(vec![
            ("order", hash::int(*order as u64)),
            ("band", hash::band(band)),
            ("max_db", hash::real(*max_db)),
        ])
    }
}
