//! The `checks:` list and the registry of check kinds.
//!
//! A check item holds the keys every check takes (`id`, `kind`, `channels`, read here) and
//! the keys of its kind. Each kind lives in one file of this directory with everything the
//! plan side knows about it: its schema (a serde struct of its keys), its validation into
//! a [`CheckKind`] and its fields in the plan's canonical form ([`super::hash`]). `KINDS`
//! lists them; judging a kind is [`crate::checks`]' business.
//!
//! Stage one decodes each key of a check item on its own (`decode_item`): a common key
//! with the common schema, another key with the schema of the first kind that takes it (a
//! key several kinds take has one type in all of them), an unknown key is reported with a
//! "did you mean" over every key. Stage two reads the common keys, refuses keys the check's
//! kind does not take, then decodes the kind's own schema from the keys left and lets the
//! kind validate them.
//!
//! # Adding a check kind
//!
//! 1. `src/plan/checks/<kind>.rs`: a unit struct implementing `Kind` (name, keys, schema,
//!    validation, canonical fields), its YAML and its canonical form in the module doc.
//! 2. This file: `pub mod <kind>;`, the [`CheckKind`] variant (typed, units in field names)
//!    with its name in [`CheckKind::name`], and its line in `KINDS`.
//! 3. `src/checks/<kind>.rs`: judging, called from `checks::judge`.
//! 4. `tests/reference/plan_canonical.py`: its canonical fields, for the independent hash.

pub mod balance;
pub mod harmonic;
pub mod listening;
pub mod polarity;
pub mod response;
pub mod rub_buzz;
pub mod sensitivity;
pub mod thd;

pub use response::limit_csv;

use super::hash::C;
use super::raw::{RawList, RawPair, Section};
use super::stimulus::SweepBand;
use super::validate::Validator;
use super::{Band, LimitLine, Normalize, Polarity, SensitivityUnit};
use crate::config::{found_scalar, is_id, label, suggest, Decoder, Pos};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::{FromNodeError, Node, Spanned};
use serde::de::DeserializeOwned;
use serde::Deserialize;

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

/// Keys every check takes, whatever its kind.
const COMMON_KEYS: [&str; 3] = ["id", "kind", "channels"];

/// The order an unknown-key message lists the keys of a check in: the order they were
/// added to the schema, kept when the kinds moved to files of their own so that the
/// message did not change. Keys of kinds registered later follow, in registry order.
const KEY_ORDER: [&str; 17] = [
    "id",
    "kind",
    "channels",
    "upper",
    "lower",
    "smoothing",
    "normalize",
    "band_hz",
    "min_db",
    "max_db",
    "max_percent",
    "order",
    "expected",
    "max_diff_db",
    "unit",
    "level_dbfs",
    "duration_s",
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

/// Every key a check item may hold, in the order of [`KEY_ORDER`].
fn all_keys() -> Vec<&'static str> {
    let known = |k: &str| COMMON_KEYS.contains(&k) || KINDS.iter().any(|d| d.keys.contains(&k));
    let mut keys: Vec<&'static str> = KEY_ORDER.into_iter().filter(|k| known(k)).collect();
    for def in KINDS {
        for k in def.keys {
            if !keys.contains(k) {
                keys.push(k);
            }
        }
    }
    keys
}

/// The common keys of a check item.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
struct RawCommon {
    id: Option<Spanned<String>>,
    kind: Option<Spanned<String>>,
    channels: Option<Spanned<Vec<Spanned<String>>>>,
}

/// One item of `checks:` as stage one decoded it.
#[derive(Debug, Clone)]
pub struct RawCheck {
    /// Check identifier.
    pub id: Option<Spanned<String>>,
    /// Check kind name.
    pub kind: Option<Spanned<String>>,
    /// Channel names the check applies to.
    pub channels: Option<Spanned<Vec<Spanned<String>>>>,
    /// The other keys that decoded, as written (a key of some kind; stage two says which
    /// the check's kind takes and decodes them with its schema).
    pub fields: MarkedMappingNode,
}

impl RawCheck {
    /// Keys present besides the common ones, with the position of each value, in file
    /// order.
    pub fn present_keys(&self) -> Vec<(&str, Pos)> {
        self.fields
            .iter()
            .map(|(k, v)| (k.as_str(), Pos::of(v.span())))
            .collect()
    }

    /// A mapping of the keys among [`RawCheck::fields`] that `keys` names.
    fn fields_of(&self, keys: &[&str]) -> Node {
        Node::Mapping(MarkedMappingNode::new(
            *self.fields.span(),
            self.fields
                .iter()
                .filter(|(k, _)| keys.contains(&k.as_str()))
                .map(|(k, v)| (k.clone(), v.clone()))
                .collect(),
        ))
    }
}

/// Stage one of a check item (the mapping `map` at `pos`, named `ctx` in messages): each
/// key decoded on its own, the ones that fail reported and listed as rejected.
pub(in crate::plan) fn decode_item(
    d: &mut Decoder,
    map: &MarkedMappingNode,
    pos: Pos,
    ctx: &str,
) -> Section<RawCheck> {
    let mut common = Vec::new();
    let mut fields = Vec::new();
    let mut rejected = Vec::new();
    for (key, value) in map.iter() {
        let name = key.as_str();
        let decoded = if COMMON_KEYS.contains(&name) {
            let ok = d.entry(map, key, value, ctx, decode_as::<RawCommon>);
            if ok {
                common.push((key.clone(), value.clone()));
            }
            ok
        } else if let Some(def) = KINDS.iter().find(|def| def.keys.contains(&name)) {
            let ok = d.entry(map, key, value, ctx, def.decode);
            if ok {
                fields.push((key.clone(), value.clone()));
            }
            ok
        } else {
            d.unknown_key(key, ctx, &all_keys());
            false
        };
        if !decoded {
            rejected.push(name.to_string());
        }
    }
    let common_map = Node::Mapping(MarkedMappingNode::new(
        *map.span(),
        common.into_iter().collect(),
    ));
    let RawCommon { id, kind, channels } = d.decode_all(&common_map, pos, ctx);
    Section {
        value: RawCheck {
            id,
            kind,
            channels,
            fields: MarkedMappingNode::new(*map.span(), fields.into_iter().collect()),
        },
        pos,
        rejected,
    }
}

/// What a kind's validation knows about the check besides its own keys.
pub(in crate::plan) struct CheckInput<'a> {
    /// The check item: where it is, which keys stage one rejected, its common keys.
    pub(in crate::plan) sec: &'a Section<RawCheck>,
    /// How messages name the check (`check fr`, or `check #2` without a valid id).
    pub(in crate::plan) ctx: &'a str,
    /// The `kind:` value.
    pub(in crate::plan) kind: &'a Spanned<String>,
    /// The channels the check applies to, when they are valid.
    pub(in crate::plan) channels: Option<&'a [String]>,
    /// The plan's channel names, when every channel has a valid unique one.
    pub(in crate::plan) plan_channels: Option<&'a [String]>,
    /// The sweep band, when valid.
    pub(in crate::plan) sweep: Option<SweepBand>,
    /// The highest harmonic analysed, when valid.
    pub(in crate::plan) max_harmonic: Option<usize>,
}

impl CheckInput<'_> {
    /// How messages name the check's `key`.
    pub(in crate::plan) fn label(&self, key: &str) -> String {
        label(self.ctx, key)
    }
}

/// Readers of the keys several kinds share, the same rules and words for each kind.
impl Validator {
    /// A required key of the check (missing reported unless stage one rejected it).
    pub(in crate::plan) fn check_key<'v, T>(
        &mut self,
        check: &CheckInput,
        value: &'v Option<Spanned<T>>,
        key: &str,
    ) -> Option<&'v Spanned<T>> {
        self.required(check.sec, value, check.ctx, key)
    }

    /// A required finite number.
    pub(in crate::plan) fn check_number(
        &mut self,
        check: &CheckInput,
        value: &Option<Spanned<f64>>,
        key: &str,
    ) -> Option<f64> {
        self.check_key(check, value, key)
            .and_then(|v| self.finite(v, &check.label(key)))
    }

    /// A required limit above 0 (`unit` for the message).
    pub(in crate::plan) fn check_positive(
        &mut self,
        check: &CheckInput,
        value: &Option<Spanned<f64>>,
        key: &str,
        unit: &str,
    ) -> Option<f64> {
        self.required_positive(check.sec, value, check.ctx, key, unit)
    }

    /// The required `band_hz:`, inside the sweep.
    pub(in crate::plan) fn check_band(
        &mut self,
        check: &CheckInput,
        value: &Option<Spanned<RawPair>>,
    ) -> Option<Band> {
        self.check_key(check, value, "band_hz")
            .and_then(|v| self.band(v, &check.label("band_hz"), check.sweep))
    }

    /// `smoothing:`, `1/N` octave; `Some(None)` when absent.
    pub(in crate::plan) fn smoothing(
        &mut self,
        v: Option<&Spanned<String>>,
        what: &str,
    ) -> Option<Option<u32>> {
        let Some(v) = v else {
            return Some(None);
        };
        let n = v
            .trim()
            .strip_prefix("1/")
            .and_then(|n| n.trim().parse::<u32>().ok())
            .filter(|n| (1..=MAX_SMOOTHING_FRACTION).contains(n));
        match n {
            Some(n) => Some(Some(n)),
            None => {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "{what}: expected `1/N` octave with N from 1 to {MAX_SMOOTHING_FRACTION}, \
                         found {}",
                        found_scalar(v)
                    ),
                );
                None
            }
        }
    }
}

impl Validator {
    /// `checks:`: every check, against the plan's channels, the sweep band and the
    /// highest harmonic analysed (each `None` when not valid).
    pub(in crate::plan) fn checks(
        &mut self,
        list: &RawList<RawCheck>,
        channels: Option<&[String]>,
        band: Option<SweepBand>,
        max_harmonic: Option<usize>,
    ) -> Option<Vec<CheckSpec>> {
        if list.items.is_empty() {
            self.report(
                list.pos,
                "checks: expected at least one check, found none (a plan without checks would \
                 pass every unit)"
                    .into(),
            );
            return None;
        }
        let mut out = Vec::new();
        let mut ok = true;
        let mut ids: Vec<(String, Pos)> = Vec::new();
        for (i, item) in list.items.iter().enumerate() {
            let Some(sec) = item else {
                ok = false;
                continue;
            };
            match self.check(sec, i + 1, &mut ids, channels, band, max_harmonic) {
                Some(c) => out.push(c),
                None => ok = false,
            }
        }
        ok.then_some(out)
    }

    /// One check: id, channels, kind, the keys its kind takes, then the kind's own rules.
    fn check(
        &mut self,
        sec: &Section<RawCheck>,
        ordinal: usize,
        ids: &mut Vec<(String, Pos)>,
        channels: Option<&[String]>,
        band: Option<SweepBand>,
        max_harmonic: Option<usize>,
    ) -> Option<CheckSpec> {
        let c = &sec.value;
        let fallback_ctx = format!("check #{ordinal}");
        let ctx = match &c.id {
            Some(v) if is_id(v) => format!("check {}", v.as_str()),
            _ => fallback_ctx.clone(),
        };
        let id = self
            .required(sec, &c.id, &fallback_ctx, "id")
            .and_then(|v| {
                if !is_id(v) {
                    self.report(
                        Pos::of_value(v),
                        format!(
                        "{fallback_ctx}: id: expected lowercase letters, digits, `.`, `_` and `-`, \
                         starting with a letter or digit, found {}",
                        found_scalar(v)
                    ),
                    );
                    return None;
                }
                if let Some((_, first)) = ids.iter().find(|(n, _)| n == v.as_str()) {
                    self.report(
                        Pos::of_value(v),
                        format!(
                            "check {}: expected a unique id, found one already given at line {} \
                         column {}",
                            v.as_str(),
                            first.line,
                            first.col
                        ),
                    );
                    return None;
                }
                ids.push((v.to_string(), Pos::of_value(v)));
                Some(v.to_string())
            });
        let l = |k: &str| label(&ctx, k);

        // Channels first: they do not depend on the kind.
        let check_channels = self.check_channels(c.channels.as_ref(), &ctx, channels);

        let kind_v = self.required(sec, &c.kind, &ctx, "kind")?;
        let kind = kind_v.as_str();
        let Some(def) = KINDS.iter().find(|d| d.name == kind) else {
            let names = KINDS.iter().map(|d| d.name);
            let hint = match suggest(kind, names.clone()) {
                Some(s) => format!(", did you mean `{s}`?"),
                None => String::new(),
            };
            self.report(
                Pos::of_value(kind_v),
                format!(
                    "{}: expected one of {}, found {}{hint}",
                    l("kind"),
                    names.collect::<Vec<_>>().join(", "),
                    found_scalar(kind)
                ),
            );
            return None;
        };
        let mut keys_ok = true;
        for (key, pos) in c.present_keys() {
            if def.keys.contains(&key) {
                continue;
            }
            let users: Vec<&str> = KINDS
                .iter()
                .filter(|d| d.keys.contains(&key))
                .map(|d| d.name)
                .collect();
            self.report(
                pos,
                format!(
                    "{}: not allowed in a {kind} check (it belongs to {} checks); a {kind} check \
                     takes {}",
                    l(key),
                    users.join(" and "),
                    COMMON_KEYS
                        .iter()
                        .chain(def.keys)
                        .copied()
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            );
            keys_ok = false;
        }

        let input = CheckInput {
            sec,
            ctx: &ctx,
            kind: kind_v,
            channels: check_channels.as_deref(),
            plan_channels: channels,
            sweep: band,
            max_harmonic,
        };
        let kind_spec = (def.validate)(self, &input, &c.fields_of(def.keys));
        keys_ok.then_some(())?;
        Some(CheckSpec {
            id: id?,
            channels: check_channels?,
            kind: kind_spec?,
        })
    }

    /// The channels a check names (every plan channel when it names none).
    fn check_channels(
        &mut self,
        given: Option<&Spanned<Vec<Spanned<String>>>>,
        ctx: &str,
        plan_channels: Option<&[String]>,
    ) -> Option<Vec<String>> {
        let Some(list) = given else {
            return plan_channels.map(<[String]>::to_vec);
        };
        let what = label(ctx, "channels");
        if list.is_empty() {
            self.report(
                Pos::of_value(list),
                format!("{what}: expected at least one channel name, found an empty list"),
            );
            return None;
        }
        let mut out: Vec<String> = Vec::new();
        let mut ok = true;
        for name in list.iter() {
            if out.iter().any(|n| n == name.as_str()) {
                self.report(
                    Pos::of_value(name),
                    format!(
                        "{what}: expected each channel once, found `{}` twice",
                        name.as_str()
                    ),
                );
                ok = false;
                continue;
            }
            if let Some(chans) = plan_channels {
                if !chans.iter().any(|c| c == name.as_str()) {
                    let hint = match suggest(name, chans.iter().map(String::as_str)) {
                        Some(s) => format!(", did you mean `{s}`?"),
                        None => String::new(),
                    };
                    let known: Vec<&str> = chans.iter().map(String::as_str).collect();
                    self.report(
                        Pos::of_value(name),
                        format!(
                            "{what}: expected a channel of the plan ({}), found {}{hint}",
                            known.join(", "),
                            found_scalar(name)
                        ),
                    );
                    ok = false;
                    continue;
                }
            } else {
                ok = false;
            }
            out.push(name.to_string());
        }
        ok.then_some(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unknown_keys_are_listed_in_the_schema_order_messages_have_always_used() {
        // A kind added later appends its new keys; the order of these stays.
        assert_eq!(all_keys()[..KEY_ORDER.len()], KEY_ORDER);
    }

    #[test]
    fn every_key_in_the_message_order_belongs_to_a_registered_kind() {
        for k in KEY_ORDER {
            assert!(
                COMMON_KEYS.contains(&k) || KINDS.iter().any(|d| d.keys.contains(&k)),
                "{k}"
            );
        }
    }

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
    fn a_key_several_kinds_take_decodes_alike_in_each() {
        // Stage one decodes a shared key with its first kind's schema only; the others must
        // accept and refuse the same values with the same words.
        let samples = [
            "1", "-2.5", "abc", "1/3", "[1, 2]", "[1, x]", "[]", "{a: 1}", "''", "true",
        ];
        for key in all_keys() {
            let owners: Vec<&KindDef> = KINDS.iter().filter(|d| d.keys.contains(&key)).collect();
            for sample in samples {
                let text = format!("{key}: {sample}\n");
                let node = marked_yaml::parse_yaml(0, &text).expect("sample parses");
                let results: Vec<String> = owners
                    .iter()
                    .map(|d| format!("{:?}", (d.decode)(&node).map_err(|e| e.to_string())))
                    .collect();
                assert!(
                    results.windows(2).all(|w| w[0] == w[1]),
                    "{key}: {sample}: {results:?}"
                );
            }
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
