//! Stage one of plan loading: serde structs that mirror the YAML (no I/O, no validation).
//!
//! [`parse`] turns plan text into a [`RawPlan`]: every field is an `Option<Spanned<T>>`, so
//! a key the plan leaves out is `None` (stage two, [`super::validate`], decides what is
//! required) and every value keeps the line and column it was written at (stage two points
//! at the exact value it rejects). Stage one reports only what serde itself sees: YAML syntax,
//! unknown keys (with the nearest known key suggested), and values of the wrong type.
//!
//! # How all problems are found at once
//!
//! The YAML is parsed into a tree of marked nodes by the project's file kit
//! ([`crate::config`]: every node keeps its line and column; deep nesting, anchors, tags,
//! duplicate keys and a second document are refused), then each section (the top-level
//! mapping, `stimulus`, `analysis`, `rig`, each channel, each check) is deserialized from
//! its own node, one key at a time ([`crate::config::Decoder::section`]): a key whose value
//! does not deserialize (or that the struct does not know) is reported and left out, the
//! rest deserialize together. Keys left out this way are listed in [`Section::rejected`],
//! so that stage two does not also call them missing.

use crate::config::{mapping_pos, Decoder, Problem};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::{Node, Spanned};
use serde::de::{IgnoredAny, SeqAccess, Visitor};
use serde::{Deserialize, Deserializer};
use std::fmt;

// Each section's schema lives with its validation; listed here under the paths they have
// always had.
pub use super::analysis::RawAnalysis;
pub use super::channels::RawChannel;
pub use super::checks::response::{RawLimit, RawNormalize};
pub use super::checks::RawCheck;
pub use super::correction::{RawCorrection, RawCorrectionEntry, RawSource, RawSourceMap};
pub use super::product::RawProduct;
pub use super::rig::RawRig;
pub use super::stimulus::RawStimulus;

// The diagnostics kit of every project file, under the names plans have always used.
pub use crate::config::{
    found, found_scalar, is_channel_name, is_id, label, show_text, suggest, Pos, Section,
    MAX_NESTING_DEPTH,
};

/// A list of mappings (channels, checks).
#[derive(Debug, Clone)]
pub struct RawList<T> {
    /// Where the list is.
    pub pos: Pos,
    /// One entry per list item, in plan order; `None` where the item was not a mapping.
    pub items: Vec<Option<Section<T>>>,
}

/// The whole plan as stage one sees it.
#[derive(Debug, Clone)]
pub struct RawPlan {
    /// Top-level scalar keys.
    pub top: Section<RawTop>,
    /// `stimulus:` section.
    pub stimulus: Option<Section<RawStimulus>>,
    /// `analysis:` section.
    pub analysis: Option<Section<RawAnalysis>>,
    /// `channels:` list.
    pub channels: Option<RawList<RawChannel>>,
    /// `rig:` section.
    pub rig: Option<Section<RawRig>>,
    /// `product:` section (declared sensitivity, for the hearing-safety checks).
    pub product: Option<Section<RawProduct>>,
    /// `checks:` list.
    pub checks: Option<RawList<RawCheck>>,
    /// Top-level `correction:` (applies to every channel that does not say otherwise).
    pub correction: Option<RawCorrectionEntry>,
    /// Each channel's own `correction:`, in the order of [`RawPlan::channels`]' items
    /// (`None` where the channel has none or it was rejected).
    pub channel_corrections: Vec<Option<RawCorrectionEntry>>,
    /// How many problems stage one reported (stage two then does not call the plan
    /// incomplete for the parts stage one left out).
    pub n_problems: usize,
}

/// Top-level keys of a plan.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawTop {
    /// Plan identifier.
    pub plan: Option<Spanned<String>>,
    /// Revision number.
    pub revision: Option<Spanned<i128>>,
    /// Free-text description.
    pub description: Option<Spanned<String>>,
    /// Sample rate, Hz.
    pub sample_rate_hz: Option<Spanned<i128>>,
    /// Declared nominal impedance of the earphone, Ω.
    pub nominal_impedance_ohm: Option<Spanned<f64>>,
    /// Unit of the plan's absolute levels: `db_fs_per_fs` or `db_spl_per_v`.
    pub level_unit: Option<Spanned<String>>,
    /// Decoded on its own into [`RawPlan::stimulus`]; listed so the key is known.
    pub stimulus: Option<IgnoredAny>,
    /// Decoded on its own into [`RawPlan::analysis`].
    pub analysis: Option<IgnoredAny>,
    /// Decoded on its own into [`RawPlan::channels`].
    pub channels: Option<IgnoredAny>,
    /// Decoded on its own into [`RawPlan::rig`].
    pub rig: Option<IgnoredAny>,
    /// Decoded on its own into [`RawPlan::product`].
    pub product: Option<IgnoredAny>,
    /// Decoded on its own into [`RawPlan::checks`].
    pub checks: Option<IgnoredAny>,
    /// Decoded on its own into [`RawPlan::correction`].
    pub correction: Option<IgnoredAny>,
    /// How many times a unit may be retested under this plan.
    pub max_retests: Option<Spanned<i128>>,
}

/// A list of numbers meant to hold two (a band `[low_hz, high_hz]` or a point `[hz, db]`);
/// stage two checks the count, so that `[1, 2, 3]` gets a message of its own.
#[derive(Debug, Clone, Default)]
pub struct RawPair(pub Vec<Spanned<f64>>);

impl<'de> Deserialize<'de> for RawPair {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = RawPair;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a list of two numbers")
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<RawPair, A::Error> {
                let mut v = Vec::new();
                while let Some(x) = seq.next_element()? {
                    v.push(x);
                }
                Ok(RawPair(v))
            }
        }
        d.deserialize_seq(V)
    }
}

/// Parse plan text into a [`RawPlan`] and the problems stage one found.
///
/// `path` labels the problems. Returns `None` for the plan when the text is not YAML of the
/// right shape at all (the problems then say why).
pub fn parse(text: &str, path: &str) -> (Option<RawPlan>, Vec<Problem>) {
    let mut d = Decoder::new(path, "plan");
    let plan = parse_plan(&mut d, text);
    (plan, d.into_problems())
}

fn parse_plan(d: &mut Decoder, text: &str) -> Option<RawPlan> {
    let root = d.tree(text)?;
    let Node::Mapping(top_map) = &root else {
        return None;
    };
    let top_pos = mapping_pos(top_map, Pos { line: 1, col: 1 });
    let mut top: Section<RawTop> = d.section(top_map, top_pos, "");

    let stimulus = d.sub_section(top_map, "stimulus", &mut top.rejected);
    let analysis = d.sub_section(top_map, "analysis", &mut top.rejected);
    let rig = d.sub_section(top_map, "rig", &mut top.rejected);
    let product = d.sub_section(top_map, "product", &mut top.rejected);
    let channels = list(
        d,
        top_map,
        "channels",
        "channel",
        &mut top.rejected,
        |d, m, pos, ctx| d.section(m, pos, ctx),
    );
    let checks = list(
        d,
        top_map,
        "checks",
        "check",
        &mut top.rejected,
        super::checks::decode_item,
    );
    let correction = top_map
        .get_key_value("correction")
        .and_then(|(k, n)| correction_entry(d, Pos::of(k.span()), n, "correction"));
    let channel_corrections = match top_map.get_node("channels") {
        Some(Node::Sequence(seq)) => seq
            .iter()
            .enumerate()
            .map(|(i, item)| {
                let (k, n) = item.as_mapping()?.get_key_value("correction")?;
                let ctx = format!("{}: correction", item_context(item, "channel", i + 1));
                correction_entry(d, Pos::of(k.span()), n, &ctx)
            })
            .collect(),
        _ => Vec::new(),
    };
    Some(RawPlan {
        top,
        stimulus,
        analysis,
        channels,
        rig,
        product,
        checks,
        correction,
        channel_corrections,
        n_problems: d.n_problems(),
    })
}

/// A `correction:` value: a mapping decoded key by key, or `none`. `ctx` prefixes
/// messages (`correction`, `channel left: correction`).
fn correction_entry(
    d: &mut Decoder,
    key_pos: Pos,
    node: &Node,
    ctx: &str,
) -> Option<RawCorrectionEntry> {
    match node {
        Node::Mapping(m) => Some(RawCorrectionEntry::On(Box::new(d.section(
            m,
            mapping_pos(m, key_pos),
            ctx,
        )))),
        Node::Scalar(s) if s.as_str() == "none" => {
            Some(RawCorrectionEntry::Off(Pos::of(node.span())))
        }
        other => {
            let hint = match other {
                Node::Scalar(s) if suggest(s.as_str(), ["none"]).is_some() => {
                    ", did you mean `none`?"
                }
                _ => "",
            };
            d.report(
                Pos::of(other.span()),
                format!(
                    "{ctx}: expected a mapping with fixture, fixture_tap, reference, \
                     reference_tap and source, or `none`, found {}{hint}",
                    found(other)
                ),
            );
            None
        }
    }
}

/// Decode the list of mappings under top-level `key`, if present, each item with
/// `decode`; a value that is not a list is reported and `key` added to `rejected`.
fn list<T>(
    d: &mut Decoder,
    top_map: &MarkedMappingNode,
    key: &str,
    item_word: &str,
    rejected: &mut Vec<String>,
    decode: fn(&mut Decoder, &MarkedMappingNode, Pos, &str) -> Section<T>,
) -> Option<RawList<T>> {
    let (k, node) = top_map.get_key_value(key)?;
    let key_pos = Pos::of(k.span());
    let seq = match node {
        Node::Sequence(s) => s,
        Node::Scalar(s) if s.is_empty() => {
            return Some(RawList {
                pos: key_pos,
                items: Vec::new(),
            })
        }
        other => {
            d.report(
                Pos::of(other.span()),
                format!(
                    "{key}: expected a list of {item_word}s, found {}",
                    found(other)
                ),
            );
            rejected.push(key.to_string());
            return None;
        }
    };
    let mut items = Vec::new();
    for (i, item) in seq.iter().enumerate() {
        let ctx = item_context(item, item_word, i + 1);
        match item {
            Node::Mapping(m) => {
                let pos = mapping_pos(m, Pos::of(item.span()));
                items.push(Some(decode(d, m, pos, &ctx)));
            }
            other => {
                d.report(
                    Pos::of(other.span()),
                    format!("{ctx}: expected a mapping, found {}", found(other)),
                );
                items.push(None);
            }
        }
    }
    Some(RawList {
        pos: Pos::of(seq.span()),
        items,
    })
}

/// How messages name a list item: `check fr`, `channel left`, or `check #3` (1-based) when
/// it has no valid name.
fn item_context(item: &Node, word: &str, ordinal: usize) -> String {
    let (name_key, valid): (&str, fn(&str) -> bool) = if word == "check" {
        ("id", is_id)
    } else {
        ("name", is_channel_name)
    };
    let name = item
        .as_mapping()
        .and_then(|m| m.get_scalar(name_key))
        .map(|s| s.as_str())
        .filter(|s| valid(s));
    match name {
        Some(n) => format!("{word} {n}"),
        None => format!("{word} #{ordinal}"),
    }
}
