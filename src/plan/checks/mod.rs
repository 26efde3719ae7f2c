//! The `checks:` list and the registry of check kinds.
//!
//! A check item holds the keys every check takes (`id`, `kind`, `channels`) and the keys of
//! its kind. Each kind lives in one file of this directory with everything the plan side
//! knows about it: its schema (a serde struct of its keys), its validation into a
//! [`CheckKind`] and its fields in the plan's canonical form ([`super::hash`]). `KINDS`
//! below lists them; judging a kind is [`crate::checks`]' business.
//!
//! What every check item goes through whatever its kind is in `item.rs`. Stage one decodes
//! each key of an item on its own: a common key with the common schema, another key with
//! the schema of the first kind that takes it (a key several kinds take has one type in all
//! of them), an unknown key is reported with a "did you mean" over every key. Stage two
//! reads the common keys, refuses keys the check's kind does not take, then decodes the
//! kind's own schema from the keys left and lets the kind validate them.
//!
//! # Adding a check kind
//!
//! 1. `src/plan/checks/<kind>.rs`: a unit struct implementing `Kind` (name, keys, schema,
//!    validation, canonical fields); the module doc gives its YAML and canonical fields.
//! 2. This file, the registry: `pub mod <kind>;`, the [`CheckKind`] variant (typed, units
//!    in field names) and its name in [`CheckKind::name`], its line in `KINDS`, its module
//!    name in `for_each_check_kind!`, and a sample of the variant in the test below (it
//!    counts them).
//! 3. `src/checks/<kind>.rs`: judging, with `pub fn judge_kind(kind, measurement,
//!    nominal_impedance_ohm) -> Option<Finding>` (`None` for another kind); the judging side
//!    declares the module and dispatches to it from `for_each_check_kind!`.
//! 4. Not source: `tests/reference/plan_canonical.py` (its canonical fields, for the
//!    independent hash) and tests of its validation messages and its judging.

pub mod balance;
pub mod harmonic;
mod item;
pub mod listening;
pub(in crate::plan) mod plausible;
pub mod polarity;
pub mod response;
pub mod rub_buzz;
pub mod sensitivity;
pub mod thd;

pub use item::RawCheck;
pub(in crate::plan) use item::{decode_item, CheckInput};
pub use response::limit_csv;

use super::hash::C;
use super::validate::Validator;
use super::{Band, LimitLine, Normalize, Polarity, SensitivityUnit};
use marked_yaml::{FromNodeError, Node};
use serde::de::DeserializeOwned;

/// Finest fractional-octave smoothing, 1/N octave with N at most this.
pub const MAX_SMOOTHING_FRACTION: u32 = 48;

/// One check in the plan.
#[derive(Debug, Clone, PartialEq)]
pub struct CheckSpec {
    /// Check identifier, unique in the plan.
    pub id: String,
    /// Channels the check applies to (names; every channel when the plan gave none).
    pub channels: Vec<String>,
    /// What is checked.
    pub kind: CheckKind,
}

/// The kinds of check; each variant is validated and hashed by its file in this directory
/// and judged by its file in `src/checks/`.
#[derive(Debug, Clone, PartialEq)]
pub enum CheckKind {
    /// Frequency response between limit lines.
    Response {
        /// Upper limit line (at least one of upper/lower is present).
        upper: Option<LimitLine>,
        /// Lower limit line.
        lower: Option<LimitLine>,
        /// Fractional-octave smoothing, 1/N octave (power domain); `None` for none.
        smoothing_fraction: Option<u32>,
        /// Optional normalisation before comparison.
        normalize: Option<Normalize>,
    },
    /// Mean level in a band within `[min_db, max_db]`.
    Sensitivity {
        /// Band over which the level is averaged.
        band: Band,
        /// Lower limit, dB.
        min_db: f64,
        /// Upper limit, dB.
        max_db: f64,
        /// What the limits are in.
        unit: SensitivityUnit,
    },
    /// THD (re fundamental, %) below a maximum over a band of excitation frequencies.
    Thd {
        /// Band of excitation frequencies.
        band: Band,
        /// Upper limit, %.
        max_percent: f64,
    },
    /// One harmonic (HDn re fundamental, dB) below a maximum over a band.
    Harmonic {
        /// Harmonic order n ≥ 2.
        order: usize,
        /// Band of excitation frequencies.
        band: Band,
        /// Upper limit, dB re fundamental.
        max_db: f64,
    },
    /// Rub-and-buzz indicator (dB re fundamental) below a maximum over a band.
    RubBuzz {
        /// Band of excitation frequencies.
        band: Band,
        /// Upper limit, dB re fundamental.
        max_db: f64,
    },
    /// Polarity equals the expected one.
    Polarity {
        /// Expected polarity.
        expected: Polarity,
    },
    /// Level difference between exactly two channels within ±`max_diff_db` over a band.
    Balance {
        /// Band over which the difference is checked.
        band: Band,
        /// Allowed absolute difference, dB.
        max_diff_db: f64,
        /// Fractional-octave smoothing applied to both responses first.
        smoothing_fraction: Option<u32>,
    },
    /// A listening step: a slow sweep over `band` played to the operator, who answers pass
    /// or fail; its level is capped by its A-weighted level at the reference position and
    /// counted in the operator's noise dose (hearing safety).
    Listening {
        /// Band the listening sweep covers.
        band: Band,
        /// Its peak level, dBFS (before any hearing-safety scale-down).
        level_dbfs: f64,
        /// Its duration, s.
        duration_s: f64,
    },
}

impl CheckKind {
    /// True when the check's limits are in dB SPL, so the run needs a calibration.
    pub fn needs_calibration(&self) -> bool {
        matches!(
            self,
            CheckKind::Sensitivity {
                unit: SensitivityUnit::DbSplPerV | SensitivityUnit::DbSplPerMw,
                ..
            }
        )
    }

    /// The kind's name as written in the plan.
    pub fn name(&self) -> &'static str {
        match self {
            CheckKind::Response { .. } => "response",
            CheckKind::Sensitivity { .. } => "sensitivity",
            CheckKind::Thd { .. } => "thd",
            CheckKind::Harmonic { .. } => "harmonic",
            CheckKind::RubBuzz { .. } => "rub_buzz",
            CheckKind::Polarity { .. } => "polarity",
            CheckKind::Balance { .. } => "balance",
            CheckKind::Listening { .. } => "listening",
        }
    }
}

/// Calls `$callback!` with the module name of every check kind, in registry order: the one
/// list from which the judging side ([`crate::checks`]) declares its `<kind>` modules and
/// dispatches to their `judge_kind`, so that a new kind is registered in this file only.
#[macro_export]
macro_rules! for_each_check_kind {
    ($callback:ident) => {
        $callback!(
            response,
            sensitivity,
            thd,
            harmonic,
            rub_buzz,
            polarity,
            balance,
            listening
        );
    };
}

/// Every check kind, in the order messages list them ("expected one of response, …").
///
/// A plan's checks are validated only through this list, so a [`CheckKind`] in a loaded
/// plan always has its entry here, and with it its canonical fields.
pub(in crate::plan) const KINDS: &[KindDef] = &[
    KindDef::of::<response::Response>(),
    KindDef::of::<sensitivity::Sensitivity>(),
    KindDef::of::<thd::Thd>(),
    KindDef::of::<harmonic::Harmonic>(),
    KindDef::of::<rub_buzz::RubBuzz>(),
    KindDef::of::<polarity::PolarityCheck>(),
    KindDef::of::<balance::Balance>(),
    KindDef::of::<listening::Listening>(),
];

/// A check kind as the plan side sees it; each kind's file implements it on a unit struct
/// and [`KINDS`] registers it.
///
/// Implementors uphold: `KEYS` are exactly the fields of `Raw`; a key another kind also
/// takes has the same type in both (stage one decodes it with the first kind's schema);
/// `validate` reports every problem it refuses for, at the value, through the validator;
/// `canonical` returns `Some` for its own variant only.
pub(in crate::plan) trait Kind {
    /// The name written as `kind:`.
    const NAME: &'static str;
    /// Its keys besides `id`, `kind` and `channels`, in the order messages list them.
    const KEYS: &'static [&'static str];
    /// Its keys as written: a serde struct of `Option<Spanned<_>>` fields,
    /// `deny_unknown_fields`.
    type Raw: DeserializeOwned;
    /// Stage two: check the kind's keys of one check and build the variant.
    fn validate(v: &mut Validator, check: &CheckInput, raw: &Self::Raw) -> Option<CheckKind>;
    /// The kind's fields in the plan's canonical form; `None` for a variant of another kind.
    fn canonical(kind: &CheckKind) -> Option<Fields>;
}

/// Fields of one check in the canonical form, besides `id`, `kind` and `channels`.
pub(in crate::plan) type Fields = Vec<(&'static str, C)>;

/// One registered kind: [`Kind`] as plain data, so that [`KINDS`] can list them.
pub(in crate::plan) struct KindDef {
    /// The name written as `kind:`.
    pub(in crate::plan) name: &'static str,
    /// Its keys besides the common ones.
    pub(in crate::plan) keys: &'static [&'static str],
    /// Stage one: decode a mapping of one of its keys.
    decode: fn(&Node) -> Result<(), FromNodeError>,
    /// Stage two: decode its keys (a mapping) and validate them.
    validate: fn(&mut Validator, &CheckInput, &Node) -> Option<CheckKind>,
    /// Its canonical fields ([`Kind::canonical`]).
    pub(in crate::plan) canonical: fn(&CheckKind) -> Option<Fields>,
}

impl KindDef {
    const fn of<K: Kind>() -> KindDef {
        KindDef {
            name: K::NAME,
            keys: K::KEYS,
            decode: decode_as::<K::Raw>,
            validate: validate_as::<K>,
            canonical: K::canonical,
        }
    }
}

fn decode_as<R: DeserializeOwned>(map: &Node) -> Result<(), FromNodeError> {
    marked_yaml::from_node::<R>(map).map(drop)
}

fn validate_as<K: Kind>(v: &mut Validator, check: &CheckInput, map: &Node) -> Option<CheckKind> {
    match marked_yaml::from_node::<K::Raw>(map) {
        Ok(raw) => K::validate(v, check, &raw),
        Err(e) => {
            // Each key decoded on its own in stage one, and every field is optional, so
            // they decode together; reported rather than assumed, since this is outside
            // input.
            v.report(
                check.sec.pos,
                format!("{}: cannot decode: {}", check.ctx, *e),
            );
            None
        }
    }
}

/// The canonical fields of a check's kind (see [`super::hash`]).
pub(in crate::plan) fn canonical_fields(kind: &CheckKind) -> Fields {
    KINDS
        .iter()
        .find_map(|def| (def.canonical)(kind))
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::item::COMMON_KEYS;
    use super::*;

    #[test]
    fn kind_names_are_unique_and_keys_do_not_repeat_the_common_ones() {
        for (i, a) in KINDS.iter().enumerate() {
            assert!(
                KINDS[i + 1..].iter().all(|b| b.name != a.name),
                "{}",
                a.name
            );
            assert!(
                a.keys.iter().all(|k| !COMMON_KEYS.contains(k)),
                "{}",
                a.name
            );
        }
    }

    #[test]
    fn each_kind_hashes_its_own_variant_only() {
        let band = Band {
            low_hz: 100.0,
            high_hz: 1000.0,
        };
        let samples = [
            CheckKind::Response {
                upper: None,
                lower: None,
                smoothing_fraction: None,
                normalize: None,
            },
            CheckKind::Sensitivity {
                band,
                min_db: -1.0,
                max_db: 1.0,
                unit: SensitivityUnit::Db,
            },
            CheckKind::Thd {
                band,
                max_percent: 1.0,
            },
            CheckKind::Harmonic {
                order: 2,
                band,
                max_db: -40.0,
            },
            CheckKind::RubBuzz {
                band,
                max_db: -40.0,
            },
            CheckKind::Polarity {
                expected: Polarity::Positive,
            },
            CheckKind::Balance {
                band,
                max_diff_db: 1.0,
                smoothing_fraction: None,
            },
            CheckKind::Listening {
                band,
                level_dbfs: -20.0,
                duration_s: 2.0,
            },
        ];
        assert_eq!(samples.len(), KINDS.len());
        for kind in &samples {
            let claimed: Vec<&str> = KINDS
                .iter()
                .filter(|d| (d.canonical)(kind).is_some())
                .map(|d| d.name)
                .collect();
            assert_eq!(claimed, [kind.name()]);
        }
    }
}
