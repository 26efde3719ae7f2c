//! The `correction:` sections, plan-wide and per channel: the fixture and reference
//! coupler models, their taps and the source. Their schema ([`RawCorrection`],
//! [`RawSource`]) and validation, which loads the files they name (problems in those files
//! are reported at their own positions, prefixed with the plan key that names them).

use super::raw::{RawPlan, Section};
use super::validate::Validator;
use super::CorrectionSpec;
use crate::acoustics::source::{parse_thevenin_csv, Source, SourceError};
use crate::config::{
    found_scalar, is_channel_name, label, read_data_file, suggest, Location, Pos, Problem,
};
use crate::models::coupler::{load_model_str, CouplerModel, ModelError};
use crate::models::earphone::{
    load_earphone_file_str, EarphoneFile, EarphoneFileError, EarphoneSpread,
};
use marked_yaml::Spanned;
use serde::de::Visitor;
use serde::{Deserialize, Deserializer};
use std::fmt;

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

impl Validator {
    /// Each channel's correction (in the order of the plan's channel items): its own entry,
    /// else the plan-wide one. `None` when any entry could not be read (reported).
    pub(super) fn corrections(
        &mut self,
        raw: &RawPlan,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<Vec<Option<CorrectionSpec>>> {
        let plan_wide = match &raw.correction {
            None | Some(RawCorrectionEntry::Off(_)) => Some(None),
            Some(RawCorrectionEntry::On(sec)) => {
                self.correction(sec, "correction", needed_hz).map(Some)
            }
        };
        let n_items = raw.channels.as_ref().map_or(0, |l| l.items.len());
        let mut ok = plan_wide.is_some();
        let mut out = Vec::with_capacity(n_items);
        for i in 0..n_items {
            let entry = raw.channel_corrections.get(i).and_then(Option::as_ref);
            let c = match entry {
                None => plan_wide.clone().flatten(),
                Some(RawCorrectionEntry::Off(_)) => None,
                Some(RawCorrectionEntry::On(sec)) => {
                    let ctx = raw
                        .channels
                        .as_ref()
                        .and_then(|l| l.items.get(i))
                        .and_then(Option::as_ref)
                        .and_then(|c| c.value.name.as_ref())
                        .filter(|n| is_channel_name(n))
                        .map_or_else(
                            || format!("channel #{}: correction", i + 1),
                            |n| format!("channel {}: correction", n.as_str()),
                        );
                    let c = self.correction(sec, &ctx, needed_hz);
                    ok &= c.is_some();
                    c
                }
            };
            out.push(c);
        }
        ok.then_some(out)
    }

    /// One `correction:` mapping: its files loaded (problems in them at their own
    /// positions), taps checked against the models, the source read.
    fn correction(
        &mut self,
        sec: &Section<RawCorrection>,
        ctx: &str,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<CorrectionSpec> {
        let c = &sec.value;
        let fixture = self
            .required(sec, &c.fixture, ctx, "fixture")
            .and_then(|v| self.coupler_file(v, &label(ctx, "fixture")));
        let reference = self
            .required(sec, &c.reference, ctx, "reference")
            .and_then(|v| self.coupler_file(v, &label(ctx, "reference")));
        let fixture_tap = self
            .required(sec, &c.fixture_tap, ctx, "fixture_tap")
            .and_then(|v| self.tap(v, fixture.as_ref(), &label(ctx, "fixture_tap")));
        let reference_tap = self
            .required(sec, &c.reference_tap, ctx, "reference_tap")
            .and_then(|v| self.tap(v, reference.as_ref(), &label(ctx, "reference_tap")));
        let source = self
            .required(sec, &c.source, ctx, "source")
            .and_then(|v| self.source(v, &label(ctx, "source"), needed_hz));
        let (source, source_spread) = source?;
        Some(CorrectionSpec {
            fixture: fixture?,
            fixture_tap: fixture_tap?,
            reference: reference?,
            reference_tap: reference_tap?,
            source,
            source_spread,
        })
    }

    /// Problems of a file the plan names, each prefixed with the plan key that names it.
    fn file_problems(&mut self, problems: Vec<Problem>, what: &str) {
        for p in problems {
            let message = format!("{what}: {}", p.message);
            self.report_at(p.location, message);
        }
    }

    /// Load a coupler model file named at `v` (relative to the plan).
    fn coupler_file(&mut self, v: &Spanned<String>, what: &str) -> Option<CouplerModel> {
        let file = self.dir.join(v.as_str());
        let text = match read_data_file(&file, "coupler model") {
            Ok(t) => t,
            Err(why) => {
                self.report(Pos::of_value(v), format!("{what}: {why}"));
                return None;
            }
        };
        match load_model_str(&text, &file) {
            Ok(m) => Some(m),
            Err(ModelError::Invalid(problems)) => {
                self.file_problems(problems, what);
                None
            }
            Err(e @ ModelError::Io { .. }) => {
                self.report(Pos::of_value(v), format!("{what}: {e}"));
                None
            }
        }
    }

    /// A tap name that `model` has (no further problem when the model could not be read).
    fn tap(
        &mut self,
        v: &Spanned<String>,
        model: Option<&CouplerModel>,
        what: &str,
    ) -> Option<String> {
        let model = model?;
        let taps = model.tap_names();
        if taps.contains(&v.as_str()) {
            return Some(v.to_string());
        }
        let hint = match suggest(v, taps.iter().copied()) {
            Some(s) => format!(", did you mean `{s}`?"),
            None => String::new(),
        };
        self.report(
            Pos::of_value(v),
            format!(
                "{what}: expected a tap of coupler {} ({}), found {}{hint}",
                model.id,
                taps.join(", "),
                found_scalar(v)
            ),
        );
        None
    }

    /// The correction's source: a name, or a mapping naming an earphone or Thévenin file;
    /// with an earphone file's `spread:` (for the simulated rig).
    fn source(
        &mut self,
        v: &Spanned<RawSource>,
        what: &str,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<(Source, Option<EarphoneSpread>)> {
        const KINDS: [&str; 3] = ["volume_velocity", "virtual_earphone", "thevenin_csv"];
        let pos = Pos::of_value(v);
        match &**v {
            RawSource::Name(name) if name == "volume_velocity" => {
                Some((Source::VolumeVelocity, None))
            }
            RawSource::Name(name) if KINDS.contains(&name.as_str()) => {
                self.report(
                    pos,
                    format!("{what}: `{name}` names a file: write `{{{name}: FILE}}`"),
                );
                None
            }
            RawSource::Name(name) => {
                let hint = match suggest(name, KINDS) {
                    Some(s) => format!(", did you mean `{s}`?"),
                    None => String::new(),
                };
                self.report(
                    pos,
                    format!(
                        "{what}: expected volume_velocity, {{virtual_earphone: FILE}} or \
                         {{thevenin_csv: FILE}}, found {}{hint}",
                        found_scalar(name)
                    ),
                );
                None
            }
            RawSource::Map(m) => match (&m.virtual_earphone, &m.thevenin_csv) {
                (Some(file), None) => self
                    .earphone_file(file, &format!("{what}.virtual_earphone"))
                    .map(|f| (Source::VirtualEarphone(f.model), f.spread)),
                (None, Some(file)) => self
                    .thevenin_file(file, &format!("{what}.thevenin_csv"), needed_hz)
                    .map(|s| (s, None)),
                (a, b) => {
                    let found = if a.is_some() && b.is_some() {
                        "both"
                    } else {
                        "neither"
                    };
                    self.report(
                        pos,
                        format!(
                            "{what}: expected one of virtual_earphone, thevenin_csv, found {found}"
                        ),
                    );
                    None
                }
            },
        }
    }

    /// Load a virtual-earphone file named at `v` (relative to the plan), with its spread.
    pub(super) fn earphone_file(
        &mut self,
        v: &Spanned<String>,
        what: &str,
    ) -> Option<EarphoneFile> {
        let file = self.dir.join(v.as_str());
        let text = match read_data_file(&file, "earphone") {
            Ok(t) => t,
            Err(why) => {
                self.report(Pos::of_value(v), format!("{what}: {why}"));
                return None;
            }
        };
        match load_earphone_file_str(&text, &file) {
            Ok(f) => Some(f),
            Err(EarphoneFileError::Invalid(problems)) => {
                self.file_problems(problems, what);
                None
            }
            Err(e @ EarphoneFileError::Io { .. }) => {
                self.report(Pos::of_value(v), format!("{what}: {e}"));
                None
            }
        }
    }

    /// Load a Thévenin table named at `v`; it must cover `needed_hz` when known.
    fn thevenin_file(
        &mut self,
        v: &Spanned<String>,
        what: &str,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<Source> {
        let file = self.dir.join(v.as_str());
        let file_label = file.display().to_string();
        let text = match read_data_file(&file, "thevenin") {
            Ok(t) => t,
            Err(why) => {
                self.report(Pos::of_value(v), format!("{what}: {why}"));
                return None;
            }
        };
        let source = match parse_thevenin_csv(&text, &file_label) {
            Ok(s) => s,
            Err(SourceError::Csv {
                path,
                line,
                col,
                message,
            }) => {
                self.report_at(Location { path, line, col }, format!("{what}: {message}"));
                return None;
            }
            Err(e) => {
                self.report(Pos::of_value(v), format!("{what}: {e}"));
                return None;
            }
        };
        if let (Source::Thevenin { table }, Some((lo, hi))) = (&source, needed_hz) {
            let (first, last) = (table.first()?.0, table.last()?.0);
            if first > lo || last < hi {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "{what}: expected a table covering {lo} to {hi} Hz (the sweep, and \
                         the harmonics up to n·f that the analysis reports), found {first} to \
                         {last} Hz"
                    ),
                );
                return None;
            }
        }
        Some(source)
    }
}
