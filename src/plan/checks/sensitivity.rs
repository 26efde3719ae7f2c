//! The `sensitivity` check kind: the mean level over a band within `[min_db, max_db]`.
//!
//! ```yaml
//! - id: sens
//!   kind: sensitivity
//!   band_hz: [500, 2000]     # inside the sweep
//!   min_db: -3               # at most max_db
//!   max_db: 3
//!   unit: db                 # optional: db (default), db_spl_per_v, db_spl_per_mw
//! ```
//!
//! `db_spl_per_mw` needs the plan's `nominal_impedance_ohm`; a unit in dB SPL makes the plan's
//! levels dB SPL/V by default ([`crate::plan::LevelUnit`]).
//!
//! Canonical fields: `"band"`, `"max_db"`, `"min_db"`, and `"unit"` (`"db_spl_per_v"` or
//! `"db_spl_per_mw"`) only when not the default `db`, so plans written before units existed
//! keep their hash.

use super::plausible::{LevelLimit, Side};
use super::{CheckInput, CheckKind, Fields, Kind};
use crate::config::{found_scalar, Pos};
use crate::plan::hash;
use crate::plan::raw::RawPair;
use crate::plan::validate::Validator;
use crate::plan::SensitivityUnit;
use marked_yaml::Spanned;
use serde::Deserialize;

/// The keys of a sensitivity check.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawSensitivity {
    /// Band, Hz.
    pub band_hz: Option<Spanned<RawPair>>,
    /// Lower limit, dB.
    pub min_db: Option<Spanned<f64>>,
    /// Upper limit, dB.
    pub max_db: Option<Spanned<f64>>,
    /// Unit of the limits: `db`, `db_spl_per_v`, `db_spl_per_mw`.
    pub unit: Option<Spanned<String>>,
}

/// The sensitivity check kind.
pub(in crate::plan) struct Sensitivity;

impl Kind for Sensitivity {
    const NAME: &'static str = "sensitivity";
    const KEYS: &'static [&'static str] = &["band_hz", "min_db", "max_db", "unit"];
    type Raw = RawSensitivity;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawSensitivity) -> Option<CheckKind> {
        let b = v.check_band(check, &c.band_hz);
        let min_db = v.check_number(check, &c.min_db, "min_db");
        let max_db = v.check_number(check, &c.max_db, "max_db");
        if let (Some(lo), Some(hi), Some(m)) = (min_db, max_db, &c.max_db) {
            if lo > hi {
                v.report(
                    Pos::of_value(m),
                    format!(
                        "{}: expected at least min_db {lo} dB, found {hi}",
                        check.label("max_db")
                    ),
                );
                return None;
            }
        }
        let unit = match &c.unit {
            None => Some(SensitivityUnit::Db),
            Some(u) => match u.as_str() {
                "db" => Some(SensitivityUnit::Db),
                "db_spl_per_v" => Some(SensitivityUnit::DbSplPerV),
                "db_spl_per_mw" => Some(SensitivityUnit::DbSplPerMw),
                other => {
                    v.report(
                        Pos::of_value(u),
                        format!(
                            "{}: expected db, db_spl_per_v or db_spl_per_mw, found {}",
                            check.label("unit"),
                            found_scalar(other)
                        ),
                    );
                    None
                }
            },
        };
        if let (Some(SensitivityUnit::DbSplPerMw), Some(u), None) =
            (unit, &c.unit, v.nominal_impedance_ohm)
        {
            v.report(
                Pos::of_value(u),
                format!(
                    "{}: db_spl_per_mw needs the plan's `nominal_impedance_ohm` (the \
                     earphone's declared impedance), found none",
                    check.label("unit")
                ),
            );
            return None;
        }
        if let (Some(u), Some(lo), Some(hi), Some(lo_v), Some(hi_v)) =
            (unit, min_db, max_db, &c.min_db, &c.max_db)
        {
            for (key, side, db, value) in [
                ("min_db", Side::Lower, lo, lo_v),
                ("max_db", Side::Upper, hi, hi_v),
            ] {
                let at = Pos::of_value(value).at(&v.path);
                v.level_limits
                    .push(LevelLimit::window(check.label(key), side, u, db, at));
            }
        }
        Some(CheckKind::Sensitivity {
            band: b?,
            min_db: min_db?,
            max_db: max_db?,
            unit: unit?,
        })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::Sensitivity {
            band,
            min_db,
            max_db,
            unit,
        } = kind
        else {
            return None;
        };
        let mut fields = vec![
            ("band", hash::band(band)),
            ("min_db", hash::real(*min_db)),
            ("max_db", hash::real(*max_db)),
        ];
        // Only when not the default, so plans written before units existed keep their hash.
        if *unit != SensitivityUnit::Db {
            fields.push(("unit", hash::s(unit.name())));
        }
        Some(fields)
    }
}
