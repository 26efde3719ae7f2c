//! Stage one of plan loading: serde structs that mirror the YAML (no I/O, no validation).
//!
//! [`parse`] turns plan text into a [`RawPlan`]: every field is an `Option<Spanned<T>>`, so
//! a key the plan leaves out is `None` (stage two, [`super::validate`], decides what is
//! required) and every value keeps the line and column it was written at (stage two points
//! at the exact value it rejects). Stage one reports only what serde itself sees: YAML syntax,
//! unknown keys (with the nearest known key suggested), and values of the wrong type.
//!
//! # Why marked-yaml
//!
//! `serde_yaml` is deprecated and unmaintained. `marked-yaml` is maintained and gives every
//! node a span (line, column), which `path:line:col: message` for *every* problem needs:
//! we report all problems of a plan at once, each at the value that caused it, not only the
//! first one a deserializer trips over.
//!
//! # How all problems are found at once
//!
//! The YAML is parsed into a tree of marked nodes, then each section (the top-level
//! mapping, `stimulus`, `analysis`, `rig`, each channel, each check) is deserialized from
//! its own node, one key at a time: a key whose value does not deserialize (or that the
//! struct does not know) is reported and left out, the rest deserialize together. Because
//! every field is optional, a mapping holding one valid key always deserializes, so the
//! key-at-a-time test is exact. Keys left out this way are listed in
//! [`Section::rejected`], so that stage two does not also call them missing.
//!
//! Before the tree is built, a streaming pass over the YAML events refuses nesting deeper
//! than [`MAX_NESTING_DEPTH`] (a plan needs 5 levels): the node tree is dropped recursively,
//! and junk nested tens of thousands deep would overflow the stack.

use super::{Location, Problem};
use marked_yaml::types::{MarkedMappingNode, MarkedScalarNode};
use marked_yaml::{LoadError, LoaderOptions, Node, Span, Spanned};
use serde::de::{DeserializeOwned, IgnoredAny, SeqAccess, Visitor};
use serde::{Deserialize, Deserializer};
use std::fmt;
use yaml_rust2::parser::{Event, Parser};

/// Deepest nesting of mappings and lists accepted in a plan (a plan needs 5 levels:
/// top → checks → check → upper → point).
pub const MAX_NESTING_DEPTH: usize = 16;

/// A position in the plan text: 1-based line and column (0 when unknown).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, PartialOrd, Ord)]
pub struct Pos {
    /// 1-based line.
    pub line: usize,
    /// 1-based column, counted in characters.
    pub col: usize,
}

impl Pos {
    /// The start of a span (unknown when the span has no start).
    pub fn of(span: &Span) -> Pos {
        span.start().map_or(Pos::default(), |m| Pos {
            line: m.line(),
            col: m.column(),
        })
    }

    /// The position of a spanned value.
    pub fn of_value<T>(value: &Spanned<T>) -> Pos {
        Pos::of(value.span())
    }

    /// A [`Location`] in the file labelled `path`.
    pub fn at(self, path: &str) -> Location {
        Location {
            path: path.to_string(),
            line: self.line,
            col: self.col,
        }
    }
}

/// One decoded mapping of the plan and what stage one learnt about it.
#[derive(Debug, Clone)]
pub struct Section<T> {
    /// The decoded keys (those that deserialized).
    pub value: T,
    /// Where the mapping is: its first key, or the key naming it when it is empty.
    pub pos: Pos,
    /// Keys present in the YAML whose values stage one rejected (already reported).
    pub rejected: Vec<String>,
}

impl<T> Section<T> {
    /// Whether `key` was present but rejected in stage one.
    pub fn was_rejected(&self, key: &str) -> bool {
        self.rejected.iter().any(|k| k == key)
    }
}

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
}

/// `stimulus:` keys (frequencies Hz, durations s, level dBFS).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawStimulus {
    /// Sweep start frequency, Hz.
    pub start_hz: Option<Spanned<f64>>,
    /// Sweep stop frequency, Hz.
    pub stop_hz: Option<Spanned<f64>>,
    /// Requested sweep duration, s.
    pub duration_s: Option<Spanned<f64>>,
    /// Peak level, dBFS.
    pub level_dbfs: Option<Spanned<f64>>,
    /// Fade-in, s.
    pub fade_in_s: Option<Spanned<f64>>,
    /// Fade-out, s.
    pub fade_out_s: Option<Spanned<f64>>,
    /// Silence before the sweep, s.
    pub silence_before_s: Option<Spanned<f64>>,
    /// Silence after the sweep, s.
    pub silence_after_s: Option<Spanned<f64>>,
}

/// `analysis:` keys.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawAnalysis {
    /// Highest harmonic order analysed.
    pub max_harmonic: Option<Spanned<i128>>,
    /// Points per octave of the analysis grid.
    pub points_per_octave: Option<Spanned<i128>>,
    /// Minimum SNR, dB.
    pub min_snr_db: Option<Spanned<f64>>,
}

/// One item of `channels:` (channel numbers 1-based, as written).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawChannel {
    /// Channel name.
    pub name: Option<Spanned<String>>,
    /// Output channel number, 1-based.
    pub output: Option<Spanned<i128>>,
    /// Input channel number, 1-based.
    pub input: Option<Spanned<i128>>,
    /// Decoded on its own into [`RawPlan::channel_corrections`].
    pub correction: Option<IgnoredAny>,
}

/// A `correction:` entry as written: a mapping of correction keys, or `none` (a channel
/// that is not corrected although the plan has a plan-wide correction).
#[derive(Debug, Clone)]
pub enum RawCorrectionEntry {
    /// `correction: none`, at this position.
    Off(Pos),
    /// A mapping of correction keys.
    On(Box<Section<RawCorrection>>),
}

/// `correction:` keys (paths relative to the plan file).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawCorrection {
    /// Coupler model file of the station's fixture.
    pub fixture: Option<Spanned<String>>,
    /// Microphone tap in the fixture model.
    pub fixture_tap: Option<Spanned<String>>,
    /// Coupler model file of the reference coupler.
    pub reference: Option<Spanned<String>>,
    /// Microphone tap in the reference model.
    pub reference_tap: Option<Spanned<String>>,
    /// The source: `volume_velocity`, `{virtual_earphone: FILE}` or `{thevenin_csv: FILE}`.
    pub source: Option<Spanned<RawSource>>,
}

/// A correction's `source:` as written; stage two checks the name or the file.
#[derive(Debug, Clone)]
pub enum RawSource {
    /// A bare name (`volume_velocity`).
    Name(String),
    /// A mapping naming a file.
    Map(RawSourceMap),
}

/// The mapping form of `source:` (exactly one key; stage two checks the count).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(
    deny_unknown_fields,
    expecting = "a mapping with virtual_earphone or thevenin_csv"
)]
pub struct RawSourceMap {
    /// Virtual-earphone parameter file.
    pub virtual_earphone: Option<Spanned<String>>,
    /// Thévenin table CSV (`hz,p_re,p_im,z_re,z_im`).
    pub thevenin_csv: Option<Spanned<String>>,
}

impl<'de> Deserialize<'de> for RawSource {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = RawSource;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("volume_velocity, {virtual_earphone: FILE} or {thevenin_csv: FILE}")
            }
            fn visit_str<E: serde::de::Error>(self, s: &str) -> Result<RawSource, E> {
                Ok(RawSource::Name(s.to_string()))
            }
            fn visit_map<A: serde::de::MapAccess<'de>>(
                self,
                map: A,
            ) -> Result<RawSource, A::Error> {
                RawSourceMap::deserialize(serde::de::value::MapAccessDeserializer::new(map))
                    .map(RawSource::Map)
            }
        }
        d.deserialize_any(V)
    }
}

/// `product:` keys: what the product's specification declares, in the reference coupler.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawProduct {
    /// Declared nominal sensitivity.
    pub sensitivity_db: Option<Spanned<f64>>,
    /// Its unit: `db_spl_per_v` or `db_spl_per_mw`.
    pub sensitivity_unit: Option<Spanned<String>>,
    /// Declared tolerance of the sensitivity, ± dB.
    pub tolerance_db: Option<Spanned<f64>>,
    /// Highest response above the sensitivity anywhere in the sweep band, dB.
    pub response_peak_db: Option<Spanned<f64>>,
}

/// `rig:` keys.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawRig {
    /// `simulated` or `soundcard`.
    pub kind: Option<Spanned<String>>,
    /// Seed of the simulated population.
    pub seed: Option<Spanned<i128>>,
}

/// One item of `checks:`: the keys of every kind; stage two says which a kind allows.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawCheck {
    /// Check identifier.
    pub id: Option<Spanned<String>>,
    /// Check kind name.
    pub kind: Option<Spanned<String>>,
    /// Channel names the check applies to.
    pub channels: Option<Spanned<Vec<Spanned<String>>>>,
    /// Upper limit line (response).
    pub upper: Option<Spanned<RawLimit>>,
    /// Lower limit line (response).
    pub lower: Option<Spanned<RawLimit>>,
    /// Fractional-octave smoothing, `1/N` (response, balance).
    pub smoothing: Option<Spanned<String>>,
    /// Normalisation (response).
    pub normalize: Option<Spanned<RawNormalize>>,
    /// Band, Hz (every kind but response and polarity).
    pub band_hz: Option<Spanned<RawPair>>,
    /// Lower limit, dB (sensitivity).
    pub min_db: Option<Spanned<f64>>,
    /// Upper limit, dB (sensitivity, harmonic, rub_buzz).
    pub max_db: Option<Spanned<f64>>,
    /// Upper limit, % (thd).
    pub max_percent: Option<Spanned<f64>>,
    /// Harmonic order (harmonic).
    pub order: Option<Spanned<i128>>,
    /// Expected polarity (polarity).
    pub expected: Option<Spanned<String>>,
    /// Allowed difference, dB (balance).
    pub max_diff_db: Option<Spanned<f64>>,
    /// Unit of the limits (sensitivity): `db`, `db_spl_per_v`, `db_spl_per_mw`.
    pub unit: Option<Spanned<String>>,
    /// Peak level of a listening step's signal, dBFS.
    pub level_dbfs: Option<Spanned<f64>>,
    /// Duration of a listening step's signal, s.
    pub duration_s: Option<Spanned<f64>>,
}

impl RawCheck {
    /// Keys present in this check, with the position of each value, in schema order.
    pub fn present_keys(&self) -> Vec<(&'static str, Pos)> {
        fn p<T>(v: &Option<Spanned<T>>) -> Option<Pos> {
            v.as_ref().map(Pos::of_value)
        }
        let all = [
            ("id", p(&self.id)),
            ("kind", p(&self.kind)),
            ("channels", p(&self.channels)),
            ("upper", p(&self.upper)),
            ("lower", p(&self.lower)),
            ("smoothing", p(&self.smoothing)),
            ("normalize", p(&self.normalize)),
            ("band_hz", p(&self.band_hz)),
            ("min_db", p(&self.min_db)),
            ("max_db", p(&self.max_db)),
            ("max_percent", p(&self.max_percent)),
            ("order", p(&self.order)),
            ("expected", p(&self.expected)),
            ("max_diff_db", p(&self.max_diff_db)),
            ("level_dbfs", p(&self.level_dbfs)),
            ("duration_s", p(&self.duration_s)),
            ("unit", p(&self.unit)),
        ];
        all.into_iter()
            .filter_map(|(k, pos)| pos.map(|pos| (k, pos)))
            .collect()
    }
}

/// `normalize:` of a response check: exactly one of the two keys.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping with at_hz or band_hz")]
pub struct RawNormalize {
    /// Normalise at this frequency, Hz.
    pub at_hz: Option<Spanned<f64>>,
    /// Normalise to the mean over this band, Hz.
    pub band_hz: Option<Spanned<RawPair>>,
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

/// A limit line as written: a CSV path (relative to the plan) or inline `[[hz, db], ...]`.
#[derive(Debug, Clone)]
pub enum RawLimit {
    /// Path of a CSV file with columns hz,db.
    Csv(String),
    /// Inline points.
    Points(Vec<Spanned<RawPair>>),
}

impl<'de> Deserialize<'de> for RawLimit {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = RawLimit;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a CSV file path or a list of [hz, db] points")
            }
            fn visit_str<E: serde::de::Error>(self, s: &str) -> Result<RawLimit, E> {
                Ok(RawLimit::Csv(s.to_string()))
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<RawLimit, A::Error> {
                let mut v = Vec::new();
                while let Some(x) = seq.next_element()? {
                    v.push(x);
                }
                Ok(RawLimit::Points(v))
            }
        }
        d.deserialize_any(V)
    }
}

/// Parse plan text into a [`RawPlan`] and the problems stage one found.
///
/// `path` labels the problems. Returns `None` for the plan when the text is not YAML of the
/// right shape at all (the problems then say why).
pub fn parse(text: &str, path: &str) -> (Option<RawPlan>, Vec<Problem>) {
    let mut d = Decoder {
        path,
        what: "plan",
        problems: Vec::new(),
    };
    let plan = d.parse(text);
    (plan, d.problems)
}

/// Why a YAML file's text could not be had ([`read_text_file`]).
#[derive(Debug)]
pub enum TextFileError {
    /// The file could not be read.
    Io(std::io::Error),
    /// The file is not UTF-8 text: a problem at the first invalid byte's line:col.
    NotUtf8(Problem),
}

/// Read a YAML file of the project (coupler model, earphone, station, calibration) as
/// UTF-8 text; invalid bytes are reported where they start, as `path:line:col`.
pub fn read_text_file(path: &std::path::Path) -> Result<String, TextFileError> {
    let bytes = std::fs::read(path).map_err(TextFileError::Io)?;
    String::from_utf8(bytes).map_err(|e| {
        let good =
            std::str::from_utf8(&e.as_bytes()[..e.utf8_error().valid_up_to()]).unwrap_or_default();
        let line = good.matches('\n').count() + 1;
        let col = good.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
        TextFileError::NotUtf8(Problem {
            location: Location {
                path: path.display().to_string(),
                line,
                col,
            },
            message: "expected UTF-8 text, found invalid bytes".into(),
        })
    })
}

/// Parse YAML text into a marked node tree whose top level is a mapping, with the same
/// guards as plans (nesting depth, no anchors, aliases or tags, one document, no duplicate
/// keys) but no decoding: for other YAML files of the project (coupler models).
///
/// `path` labels the problems; `what` names the file kind in messages (`coupler model`).
pub fn parse_tree(text: &str, path: &str, what: &'static str) -> (Option<Node>, Vec<Problem>) {
    let mut d = Decoder {
        path,
        what,
        problems: Vec::new(),
    };
    let root = d.tree(text);
    (root, d.problems)
}

struct Decoder<'a> {
    path: &'a str,
    /// The file kind named in messages (`plan`).
    what: &'static str,
    problems: Vec<Problem>,
}

impl Decoder<'_> {
    fn report(&mut self, pos: Pos, message: String) {
        self.problems.push(Problem {
            location: pos.at(self.path),
            message,
        });
    }

    /// The node tree, top level a mapping, or `None` with the problems reported.
    fn tree(&mut self, text: &str) -> Option<Node> {
        if !self.prescan(text) {
            return None;
        }
        let options = LoaderOptions::default().error_on_duplicate_keys(true);
        let mut root = match marked_yaml::parse_yaml_with_options(0, text, options) {
            Ok(n) => n,
            Err(e) => {
                self.load_error(e);
                return None;
            }
        };
        fix_empty_value_spans(&mut root);
        if !matches!(root, Node::Mapping(_)) {
            self.report(
                Pos::of(root.span()),
                format!("expected a mapping of {} keys at the top level", self.what),
            );
            return None;
        }
        Some(root)
    }

    fn parse(&mut self, text: &str) -> Option<RawPlan> {
        let root = self.tree(text)?;
        let Node::Mapping(top_map) = &root else {
            return None;
        };
        let top_pos = mapping_pos(top_map, Pos { line: 1, col: 1 });
        let mut top: Section<RawTop> = self.section(top_map, top_pos, "");

        let stimulus = self.sub_section(top_map, "stimulus", &mut top);
        let analysis = self.sub_section(top_map, "analysis", &mut top);
        let rig = self.sub_section(top_map, "rig", &mut top);
        let product = self.sub_section(top_map, "product", &mut top);
        let channels = self.list(top_map, "channels", "channel", &mut top);
        let checks = self.list(top_map, "checks", "check", &mut top);
        let correction = top_map
            .get_key_value("correction")
            .and_then(|(k, n)| self.correction_entry(Pos::of(k.span()), n, "correction"));
        let channel_corrections = match top_map.get_node("channels") {
            Some(Node::Sequence(seq)) => seq
                .iter()
                .enumerate()
                .map(|(i, item)| {
                    let (k, n) = item.as_mapping()?.get_key_value("correction")?;
                    let ctx = format!("{}: correction", item_context(item, "channel", i + 1));
                    self.correction_entry(Pos::of(k.span()), n, &ctx)
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
            n_problems: self.problems.len(),
        })
    }

    /// Streaming pass over the YAML events: refuse what the node tree cannot hold safely
    /// (deep nesting, anchors and aliases, several documents). Returns false if refused.
    fn prescan(&mut self, text: &str) -> bool {
        let mut parser = Parser::new_from_str(text);
        let mut depth = 0usize;
        let mut documents = 0usize;
        let mut top_seen = false;
        loop {
            let (event, mark) = match parser.next_token() {
                Ok(x) => x,
                // Syntax errors are reported by the loader, with the same parser and mark.
                Err(_) => return true,
            };
            let pos = Pos {
                line: mark.line(),
                col: mark.col() + 1,
            };
            let anchored = match &event {
                Event::MappingStart(aid, _) | Event::SequenceStart(aid, _) => {
                    depth += 1;
                    *aid != 0
                }
                Event::Scalar(_, _, aid, _) => *aid != 0,
                _ => false,
            };
            if anchored || matches!(event, Event::Alias(_)) {
                self.report(
                    pos,
                    format!(
                        "expected plain YAML, found an anchor or alias (`&name`, `*name`), \
                         which {}s do not use",
                        self.what
                    ),
                );
                return false;
            }
            if documents == 1 && !top_seen {
                let top_kind = match event {
                    Event::SequenceStart(..) => Some("a list"),
                    Event::Scalar(..) => Some("a single value"),
                    Event::MappingStart(..) => None,
                    _ => Some(""),
                };
                if top_kind != Some("") {
                    top_seen = true;
                }
                if let Some(kind) = top_kind.filter(|k| !k.is_empty()) {
                    self.report(
                        pos,
                        format!(
                            "expected a mapping of {} keys at the top level, found {kind}",
                            self.what
                        ),
                    );
                    return false;
                }
            }
            match event {
                Event::MappingEnd | Event::SequenceEnd => depth = depth.saturating_sub(1),
                Event::DocumentStart => {
                    documents += 1;
                    if documents > 1 {
                        self.report(
                            pos,
                            "expected one YAML document, found a second one (`---`)".into(),
                        );
                        return false;
                    }
                }
                Event::StreamEnd => return true,
                _ => {}
            }
            if depth > MAX_NESTING_DEPTH {
                self.report(
                    pos,
                    format!(
                        "expected at most {MAX_NESTING_DEPTH} levels of nested mappings \
                         and lists, found deeper nesting"
                    ),
                );
                return false;
            }
        }
    }

    fn load_error(&mut self, e: LoadError) {
        let (marker, message) = match e {
            LoadError::TopLevelMustBeMapping(m) => (
                Some(m),
                format!(
                    "expected a mapping of {} keys at the top level, found a list or a single value",
                    self.what
                ),
            ),
            LoadError::TopLevelMustBeSequence(m) => {
                (Some(m), "expected a mapping at the top level".to_string())
            }
            LoadError::UnexpectedAnchor(m) => (
                Some(m),
                format!(
                    "expected plain YAML, found an anchor or alias, which {}s do not use",
                    self.what
                ),
            ),
            LoadError::MappingKeyMustBeScalar(m) => (
                Some(m),
                "expected a plain key, found a list or mapping used as a key".to_string(),
            ),
            LoadError::UnexpectedTag(m) => (
                Some(m),
                format!(
                    "expected plain YAML, found a tag (`!name`), which {}s do not use",
                    self.what
                ),
            ),
            LoadError::ScanError(m, se) => (Some(m), format!("invalid YAML: {}", se.info())),
            LoadError::DuplicateKey(inner) => {
                let first = Pos::of(inner.prev_key.span());
                (
                    inner.key.span().start().copied(),
                    format!(
                        "duplicate key `{}`, first given at line {} column {}",
                        show_text(inner.key.as_str()),
                        first.line,
                        first.col
                    ),
                )
            }
        };
        let pos = marker.map_or(Pos::default(), |m| Pos {
            line: m.line(),
            col: m.column(),
        });
        self.report(pos, message);
    }

    /// Decode a mapping key by key (see the module doc). `ctx` prefixes messages.
    fn section<T: DeserializeOwned + Default>(
        &mut self,
        map: &MarkedMappingNode,
        pos: Pos,
        ctx: &str,
    ) -> Section<T> {
        let mut good = Vec::new();
        let mut rejected = Vec::new();
        for (key, value) in map.iter() {
            let single = Node::Mapping(MarkedMappingNode::new(
                *map.span(),
                std::iter::once((key.clone(), value.clone())).collect(),
            ));
            match marked_yaml::from_node::<T>(&single) {
                Ok(_) => good.push((key.clone(), value.clone())),
                Err(e) => {
                    let (epos, message) = describe_error(&e, key, value, ctx);
                    self.report(epos, message);
                    rejected.push(key.as_str().to_string());
                }
            }
        }
        let all = Node::Mapping(MarkedMappingNode::new(
            *map.span(),
            good.into_iter().collect(),
        ));
        let value = match marked_yaml::from_node::<T>(&all) {
            Ok(v) => v,
            Err(e) => {
                // Keys that decode one by one decode together (every field is optional);
                // reported rather than assumed, since this is outside input.
                self.report(pos, with_ctx(ctx, &format!("cannot decode: {}", *e)));
                T::default()
            }
        };
        Section {
            value,
            pos,
            rejected,
        }
    }

    /// A `correction:` value: a mapping decoded key by key, or `none`. `ctx` prefixes
    /// messages (`correction`, `channel left: correction`).
    fn correction_entry(
        &mut self,
        key_pos: Pos,
        node: &Node,
        ctx: &str,
    ) -> Option<RawCorrectionEntry> {
        match node {
            Node::Mapping(m) => Some(RawCorrectionEntry::On(Box::new(self.section(
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
                self.report(
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

    /// Decode the mapping under top-level `key`, if present.
    fn sub_section<T: DeserializeOwned + Default>(
        &mut self,
        top_map: &MarkedMappingNode,
        key: &str,
        top: &mut Section<RawTop>,
    ) -> Option<Section<T>> {
        let (k, node) = top_map.get_key_value(key)?;
        let key_pos = Pos::of(k.span());
        match node {
            Node::Mapping(m) => Some(self.section(m, mapping_pos(m, key_pos), key)),
            Node::Scalar(s) if s.is_empty() => Some(Section {
                value: T::default(),
                pos: key_pos,
                rejected: Vec::new(),
            }),
            other => {
                self.report(
                    Pos::of(other.span()),
                    format!("{key}: expected a mapping, found {}", found(other)),
                );
                top.rejected.push(key.to_string());
                None
            }
        }
    }

    /// Decode the list of mappings under top-level `key`, if present.
    fn list<T: DeserializeOwned + Default>(
        &mut self,
        top_map: &MarkedMappingNode,
        key: &str,
        item_word: &str,
        top: &mut Section<RawTop>,
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
                self.report(
                    Pos::of(other.span()),
                    format!(
                        "{key}: expected a list of {item_word}s, found {}",
                        found(other)
                    ),
                );
                top.rejected.push(key.to_string());
                return None;
            }
        };
        let mut items = Vec::new();
        for (i, item) in seq.iter().enumerate() {
            let ctx = item_context(item, item_word, i + 1);
            match item {
                Node::Mapping(m) => {
                    let pos = mapping_pos(m, Pos::of(item.span()));
                    items.push(Some(self.section(m, pos, &ctx)));
                }
                other => {
                    self.report(
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

/// A plan or check id: `[a-z0-9][a-z0-9._-]*`.
pub fn is_id(s: &str) -> bool {
    let mut chars = s.chars();
    chars
        .next()
        .is_some_and(|c| c.is_ascii_lowercase() || c.is_ascii_digit())
        && chars.all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || "._-".contains(c))
}

/// A channel name: `[a-z0-9_-]+`.
pub fn is_channel_name(s: &str) -> bool {
    !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_' || c == '-')
}

/// The position of a mapping for messages: its first key (block mappings' own marks point
/// past the first key), or `fallback` when it is empty.
fn mapping_pos(map: &MarkedMappingNode, fallback: Pos) -> Pos {
    map.keys().next().map_or(fallback, |k| Pos::of(k.span()))
}

/// The loader marks an empty value (`key:` then a new line) at the start of the next line;
/// point it at its key instead, where the user left it empty.
fn fix_empty_value_spans(root: &mut Node) {
    // Iterative: nesting depth is bounded by the prescan, but there is no need to recurse.
    let mut stack: Vec<&mut Node> = vec![root];
    while let Some(node) = stack.pop() {
        match node {
            Node::Mapping(m) => {
                for (k, v) in m.iter_mut() {
                    if let Node::Scalar(s) = v {
                        if s.is_empty() {
                            *s.span_mut() = *k.span();
                        }
                    }
                    stack.push(v);
                }
            }
            Node::Sequence(s) => stack.extend(s.iter_mut()),
            Node::Scalar(_) => {}
        }
    }
}

/// Turn a serde error on `key: value` into a position and a message.
fn describe_error(
    e: &marked_yaml::FromNodeError,
    key: &MarkedScalarNode,
    value: &Node,
    ctx: &str,
) -> (Pos, String) {
    use marked_yaml::Error as E;
    let value_pos = Pos::of(value.span());
    let key_name = key.as_str();
    let field_ctx = label(ctx, key_name);
    let scalar_found = |span: &Span| -> String {
        span.start()
            .and_then(|m| scalar_at(value, m))
            .map_or_else(|| found(value), |s| found_scalar(s.as_str()))
    };
    match &**e {
        E::UnknownFieldError(field, expected, _) => {
            if field == key_name {
                let message = format!(
                    "{}unknown key `{}`, {}",
                    prefix(ctx),
                    show_text(field),
                    expected_keys(field, expected)
                );
                (Pos::of(key.span()), message)
            } else {
                // Unknown key inside a nested mapping (e.g. `normalize:`).
                let pos = find_key(value, field).map_or(value_pos, |k| Pos::of(k.span()));
                let message = format!(
                    "{field_ctx}: unknown key `{}`, {}",
                    show_text(field),
                    expected_keys(field, expected)
                );
                (pos, message)
            }
        }
        E::IntegerParseFailure(_, span) => (
            span_pos(span, value_pos),
            format!(
                "{field_ctx}: expected a whole number, found {}",
                scalar_found(span)
            ),
        ),
        E::FloatParseFailure(_, span) => (
            span_pos(span, value_pos),
            format!(
                "{field_ctx}: expected a number, found {}",
                scalar_found(span)
            ),
        ),
        E::NotBoolean(span) => (
            span_pos(span, value_pos),
            format!(
                "{field_ctx}: expected true or false, found {}",
                scalar_found(span)
            ),
        ),
        E::Other(msg, span) => (
            span_pos(span, value_pos),
            format!("{field_ctx}: {}", translate_serde_message(msg, value)),
        ),
    }
}

fn span_pos(span: &Span, fallback: Pos) -> Pos {
    if span.start().is_some() {
        Pos::of(span)
    } else {
        fallback
    }
}

/// How messages name a field: `revision` at the top level, `stimulus.start_hz` in a
/// section, `check fr: band_hz` in a list item.
pub fn label(ctx: &str, key: &str) -> String {
    if ctx.is_empty() {
        key.to_string()
    } else if ctx.contains(' ') {
        format!("{ctx}: {key}")
    } else {
        format!("{ctx}.{key}")
    }
}

fn with_ctx(ctx: &str, rest: &str) -> String {
    if ctx.is_empty() {
        rest.to_string()
    } else {
        format!("{ctx}: {rest}")
    }
}

fn prefix(ctx: &str) -> String {
    if ctx.is_empty() {
        String::new()
    } else {
        format!("{ctx}: ")
    }
}

/// "did you mean `x`?" when a known key is close, else the list of known keys.
fn expected_keys(field: &str, expected: &[&str]) -> String {
    match suggest(field, expected.iter().copied()) {
        Some(s) => format!("did you mean `{s}`?"),
        None => format!("expected one of {}", expected.join(", ")),
    }
}

/// The known name nearest to `word`, if it is near enough to be a likely typo.
///
/// Jaro–Winkler similarity ≥ 0.8 (a common threshold for "did you mean", e.g. in CLI
/// argument parsers; common practice), or the word is a prefix of the name (`stop` for
/// `stop_hz`).
pub fn suggest<'a>(word: &str, names: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    let mut best: Option<(f64, &str)> = None;
    for name in names {
        let mut score = strsim::jaro_winkler(word, name);
        if !word.is_empty() && name.starts_with(word) {
            score = score.max(0.9);
        }
        if best.is_none_or(|(b, _)| score > b) {
            best = Some((score, name));
        }
    }
    best.filter(|(s, _)| *s >= 0.8).map(|(_, n)| n)
}

/// Rewrite serde's `invalid type: X, expected Y` in the plan's words.
fn translate_serde_message(msg: &str, value: &Node) -> String {
    if let Some(rest) = msg.strip_prefix("invalid type: ") {
        if let Some((unexp, exp)) = rest.rsplit_once(", expected ") {
            let exp = match exp {
                "f64" => "a number",
                "i128" => "a whole number",
                "a sequence" => "a list",
                "a string" => "a string",
                other => other,
            };
            let found_text = if let Some(s) = unexp.strip_prefix("string ") {
                found_scalar(s.trim_matches('"'))
            } else if unexp == "sequence" {
                "a list".to_string()
            } else if unexp == "map" {
                "a mapping".to_string()
            } else {
                found(value)
            };
            return format!("expected {exp}, found {found_text}");
        }
    }
    let mut m = msg.to_string();
    if let Some(first) = m.get(0..1) {
        let lower = first.to_lowercase();
        m.replace_range(0..1, &lower);
    }
    m
}

/// How a node is named in "found ..." (a scalar by its text).
pub fn found(node: &Node) -> String {
    match node {
        Node::Scalar(s) => found_scalar(s.as_str()),
        Node::Sequence(_) => "a list".to_string(),
        Node::Mapping(_) => "a mapping".to_string(),
    }
}

/// A scalar's text for messages: in backticks, control characters escaped, long text cut.
pub fn found_scalar(text: &str) -> String {
    if text.is_empty() {
        "an empty value".to_string()
    } else {
        format!("`{}`", show_text(text))
    }
}

/// Text safe to show in a one-line message: control characters escaped, at most 40 chars.
pub fn show_text(text: &str) -> String {
    let mut out = String::new();
    for (i, c) in text.chars().enumerate() {
        if i == 40 {
            out.push('…');
            break;
        }
        if c.is_control() {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    out
}

/// The scalar whose span starts at `mark`, within `node`.
fn scalar_at<'n>(node: &'n Node, mark: &marked_yaml::Marker) -> Option<&'n MarkedScalarNode> {
    let mut stack = vec![node];
    while let Some(n) = stack.pop() {
        match n {
            Node::Scalar(s) => {
                if s.span().start() == Some(mark) {
                    return Some(s);
                }
            }
            Node::Sequence(q) => stack.extend(q.iter()),
            Node::Mapping(m) => stack.extend(m.values()),
        }
    }
    None
}

/// The first mapping key named `name` within `node`.
fn find_key<'n>(node: &'n Node, name: &str) -> Option<&'n MarkedScalarNode> {
    let mut stack = vec![node];
    while let Some(n) = stack.pop() {
        match n {
            Node::Scalar(_) => {}
            Node::Sequence(q) => stack.extend(q.iter().rev()),
            Node::Mapping(m) => {
                if let Some(k) = m.keys().find(|k| k.as_str() == name) {
                    return Some(k);
                }
                stack.extend(m.values().rev());
            }
        }
    }
    None
}
