//! A check item of `checks:`: its common keys (`id`, `kind`, `channels`), the keys of its
//! kind, and the rules every check follows whatever its kind (unique ids, known channels,
//! only the keys its kind takes). The kind's own rules are its file's ([`super::KINDS`]).

use super::{decode_as, CheckSpec, KINDS, MAX_SMOOTHING_FRACTION};
use crate::config::{found_scalar, is_id, label, suggest, Decoder, Pos};
use crate::plan::raw::{RawList, RawPair, Section};
use crate::plan::stimulus::SweepBand;
use crate::plan::validate::Validator;
use crate::plan::Band;
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::{Node, Spanned};
use serde::Deserialize;

/// Keys every check takes, whatever its kind.
pub(super) const COMMON_KEYS: [&str; 3] = ["id", "kind", "channels"];

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

    /// A THD limit (already above 0 %) at most 100 %. THD, re the fundamental, exceeds
    /// 100 % only when the harmonics together are louder than the tone itself, a broken
    /// unit; a limit above it passes such a unit, so it is refused as the typo it almost
    /// surely is (a limit in per mille, say).
    pub(in crate::plan) fn at_most_100_percent(
        &mut self,
        check: &CheckInput,
        value: &Option<Spanned<f64>>,
        x: f64,
    ) -> Option<f64> {
        if x <= 100.0 {
            return Some(x);
        }
        let at = value.as_ref().map_or(check.sec.pos, Pos::of_value);
        self.report(
            at,
            format!(
                "{}: expected a limit above 0 % and at most 100 % of the fundamental, found {x}",
                check.label("max_percent")
            ),
        );
        None
    }

    /// A required limit in dB re the fundamental (a harmonic, rub and buzz): at most 0 dB.
    /// Above 0 dB the distortion would be louder than the tone itself; such a limit passes
    /// every unit (common practice: these limits are tens of dB below the fundamental).
    pub(in crate::plan) fn check_re_fundamental(
        &mut self,
        check: &CheckInput,
        value: &Option<Spanned<f64>>,
        key: &str,
    ) -> Option<f64> {
        let x = self.check_number(check, value, key)?;
        if x <= 0.0 {
            return Some(x);
        }
        let at = value.as_ref().map_or(check.sec.pos, Pos::of_value);
        self.report(
            at,
            format!(
                "{}: expected a limit at or below 0 dB re the fundamental (a negative number: \
                 how far below the tone it must stay), found {x}",
                check.label(key)
            ),
        );
        None
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
    use crate::plan::checks::KindDef;

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
}
