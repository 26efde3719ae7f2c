//! The `listening` check kind: a slow sweep over a band played to the operator, who
//! answers pass or fail (hearing safety caps and counts its level).
//!
//! ```yaml
//! - id: listen
//!   kind: listening
//!   band_hz: [100, 8000]     # inside the sweep
//!   level_dbfs: -30          # -80 to 0 dBFS
//!   duration_s: 4            # 0.5 to 30 s
//! ```
//!
//! Canonical fields: `"band"`, `"duration_s"`, `"level_dbfs"`.

use super::{CheckInput, CheckKind, Fields, Kind};
use crate::plan::hash;
use crate::plan::raw::RawPair;
use crate::plan::validate::Validator;
use marked_yaml::Spanned;
use serde::Deserialize;

/// Durations a listening step may have, s: long enough to hear a rattle through a slow
/// sweep, short enough to keep the operator's exposure small (common practice).
const LISTEN_DURATION_S: (f64, f64) = (0.5, 30.0);

/// The keys of a listening step.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawListening {
    /// Band the listening sweep covers, Hz.
    pub band_hz: Option<Spanned<RawPair>>,
    /// Peak level of its signal, dBFS.
    pub level_dbfs: Option<Spanned<f64>>,
    /// Duration of its signal, s.
    pub duration_s: Option<Spanned<f64>>,
}

/// The listening check kind.
pub(in crate::plan) struct Listening;

impl Kind for Listening {
    const NAME: &'static str = "listening";
    const KEYS: &'static [&'static str] = &["band_hz", "level_dbfs", "duration_s"];
    type Raw = RawListening;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawListening) -> Option<CheckKind> {
        let b = v.check_band(check, &c.band_hz);
        let level_dbfs = v
            .check_key(check, &c.level_dbfs, "level_dbfs")
            .and_then(|x| v.in_range(x, &check.label("level_dbfs"), -80.0, 0.0, " dBFS"));
        let (lo, hi) = LISTEN_DURATION_S;
        let duration_s = v
            .check_key(check, &c.duration_s, "duration_s")
            .and_then(|x| v.in_range(x, &check.label("duration_s"), lo, hi, " s"));
        Some(CheckKind::Listening {
            band: b?,
            level_dbfs: level_dbfs?,
            duration_s: duration_s?,
        })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::Listening {
            band,
            level_dbfs,
            duration_s,
        } = kind
        else {
            return None;
        };
        Some(vec![
            ("band", hash::band(band)),
            ("level_dbfs", hash::real(*level_dbfs)),
            ("duration_s", hash::real(*duration_s)),
        ])
    }
}
