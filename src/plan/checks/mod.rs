//! The `checks:` list: each check's id, kind, channels and the keys of its kind. The
//! schema ([`RawCheck`]) and validation of every kind.

pub mod limit_csv;

use super::analysis::MAX_HARMONIC_LIMIT;
use super::raw::{RawList, RawPair, Section};
use super::stimulus::SweepBand;
use super::validate::Validator;
use super::{CheckKind, CheckSpec, LimitLine, Normalize, Polarity, SensitivityUnit};
use crate::config::read_data_file;
use crate::config::{found_scalar, is_id, label, suggest, Location, Pos};
use limit_csv::parse_limit_csv;
use marked_yaml::Spanned;
use serde::de::{SeqAccess, Visitor};
use serde::{Deserialize, Deserializer};
use std::fmt;

/// Finest fractional-octave smoothing, 1/N octave with N at most this.
pub const MAX_SMOOTHING_FRACTION: u32 = 48;

const CHECK_KINDS: [&str; 8] = [
    "response",
    "sensitivity",
    "thd",
    "harmonic",
    "rub_buzz",
    "polarity",
    "balance",
    "listening",
];

/// Durations a listening step may have, s: long enough to hear a rattle through a slow
/// sweep, short enough to keep the operator's exposure small (common practice).
const LISTEN_DURATION_S: (f64, f64) = (0.5, 30.0);

/// Keys every check takes.
const COMMON_CHECK_KEYS: [&str; 3] = ["id", "kind", "channels"];

/// Keys each check kind takes besides [`COMMON_CHECK_KEYS`].
fn kind_keys(kind: &str) -> &'static [&'static str] {
    match kind {
        "response" => &["upper", "lower", "smoothing", "normalize"],
        "sensitivity" => &["band_hz", "min_db", "max_db", "unit"],
        "thd" => &["band_hz", "max_percent"],
        "harmonic" => &["order", "band_hz", "max_db"],
        "rub_buzz" => &["band_hz", "max_db"],
        "polarity" => &["expected"],
        "balance" => &["band_hz", "max_diff_db", "smoothing"],
        "listening" => &["band_hz", "level_dbfs", "duration_s"],
        _ => &[],
    }
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

impl Validator {
    /// `checks:`: every check, against the plan's channels, the sweep band and the
    /// highest harmonic analysed (each `None` when not valid).
    pub(super) fn checks(
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

    /// One check: id, channels, kind, the keys its kind allows, then the kind's own rules.
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
        if !CHECK_KINDS.contains(&kind) {
            let hint = match suggest(kind, CHECK_KINDS) {
                Some(s) => format!(", did you mean `{s}`?"),
                None => String::new(),
            };
            self.report(
                Pos::of_value(kind_v),
                format!(
                    "{}: expected one of {}, found {}{hint}",
                    l("kind"),
                    CHECK_KINDS.join(", "),
                    found_scalar(kind)
                ),
            );
            return None;
        }
        let allowed = kind_keys(kind);
        let mut keys_ok = true;
        for (key, pos) in c.present_keys() {
            if COMMON_CHECK_KEYS.contains(&key) || allowed.contains(&key) {
                continue;
            }
            let users: Vec<&str> = CHECK_KINDS
                .iter()
                .copied()
                .filter(|k| kind_keys(k).contains(&key))
                .collect();
            self.report(
                pos,
                format!(
                    "{}: not allowed in a {kind} check (it belongs to {} checks); a {kind} check \
                     takes {}",
                    l(key),
                    users.join(" and "),
                    COMMON_CHECK_KEYS
                        .iter()
                        .chain(allowed)
                        .copied()
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            );
            keys_ok = false;
        }

        let req_f64 = |me: &mut Self, v: &Option<Spanned<f64>>, key: &str| {
            me.required(sec, v, &ctx, key)
                .and_then(|v| me.finite(v, &label(&ctx, key)))
        };
        let band_of = |me: &mut Self| {
            me.required(sec, &c.band_hz, &ctx, "band_hz")
                .and_then(|v| me.band(v, &label(&ctx, "band_hz"), band))
        };

        let kind_spec = match kind {
            "response" => {
                let upper = c
                    .upper
                    .as_ref()
                    .and_then(|v| self.limit(v, &l("upper"), band));
                let lower = c
                    .lower
                    .as_ref()
                    .and_then(|v| self.limit(v, &l("lower"), band));
                if c.upper.is_none()
                    && c.lower.is_none()
                    && !sec.was_rejected("upper")
                    && !sec.was_rejected("lower")
                {
                    self.report(
                        sec.pos,
                        format!(
                            "{ctx}: expected at least one of `upper` or `lower`, found neither"
                        ),
                    );
                }
                let smoothing = self.smoothing(c.smoothing.as_ref(), &l("smoothing"));
                let normalize = match &c.normalize {
                    None => Some(None),
                    Some(n) => self.normalize(n, &ctx, band).map(Some),
                };
                let upper = match (&c.upper, upper) {
                    (None, _) => Some(None),
                    (Some(_), Some(u)) => Some(Some(u)),
                    (Some(_), None) => None,
                };
                let lower = match (&c.lower, lower) {
                    (None, _) => Some(None),
                    (Some(_), Some(u)) => Some(Some(u)),
                    (Some(_), None) => None,
                };
                (|| {
                    let (upper, lower) = (upper?, lower?);
                    (upper.is_some() || lower.is_some()).then_some(())?;
                    Some(CheckKind::Response {
                        upper,
                        lower,
                        smoothing_fraction: smoothing?,
                        normalize: normalize?,
                    })
                })()
            }
            "sensitivity" => {
                let b = band_of(self);
                let min_db = req_f64(self, &c.min_db, "min_db");
                let max_db = req_f64(self, &c.max_db, "max_db");
                if let (Some(lo), Some(hi), Some(v)) = (min_db, max_db, &c.max_db) {
                    if lo > hi {
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "{}: expected at least min_db {lo} dB, found {hi}",
                                l("max_db")
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
                            self.report(
                                Pos::of_value(u),
                                format!(
                                    "{}: expected db, db_spl_per_v or db_spl_per_mw, found {}",
                                    l("unit"),
                                    found_scalar(other)
                                ),
                            );
                            None
                        }
                    },
                };
                if let (Some(SensitivityUnit::DbSplPerMw), Some(u), None) =
                    (unit, &c.unit, self.nominal_impedance_ohm)
                {
                    self.report(
                        Pos::of_value(u),
                        format!(
                            "{}: db_spl_per_mw needs the plan's `nominal_impedance_ohm` (the \
                             earphone's declared impedance), found none",
                            l("unit")
                        ),
                    );
                    return None;
                }
                (|| {
                    Some(CheckKind::Sensitivity {
                        band: b?,
                        min_db: min_db?,
                        max_db: max_db?,
                        unit: unit?,
                    })
                })()
            }
            "thd" => {
                let b = band_of(self);
                let max_percent =
                    self.required_positive(sec, &c.max_percent, &ctx, "max_percent", "%");
                (|| {
                    Some(CheckKind::Thd {
                        band: b?,
                        max_percent: max_percent?,
                    })
                })()
            }
            "harmonic" => {
                let b = band_of(self);
                let order = self.required(sec, &c.order, &ctx, "order").and_then(|v| {
                    let hi = max_harmonic.unwrap_or(MAX_HARMONIC_LIMIT);
                    if **v >= 2 && **v <= hi as i128 {
                        Some(**v as usize)
                    } else {
                        let why = if max_harmonic.is_some() {
                            format!("max_harmonic {hi}")
                        } else {
                            format!("{hi}")
                        };
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "{}: expected a harmonic order from 2 to {why}, found {}",
                                l("order"),
                                **v
                            ),
                        );
                        None
                    }
                });
                let max_db = req_f64(self, &c.max_db, "max_db");
                (|| {
                    Some(CheckKind::Harmonic {
                        order: order?,
                        band: b?,
                        max_db: max_db?,
                    })
                })()
            }
            "rub_buzz" => {
                let b = band_of(self);
                let max_db = req_f64(self, &c.max_db, "max_db");
                (|| {
                    Some(CheckKind::RubBuzz {
                        band: b?,
                        max_db: max_db?,
                    })
                })()
            }
            "listening" => {
                let b = band_of(self);
                let level_dbfs = self
                    .required(sec, &c.level_dbfs, &ctx, "level_dbfs")
                    .and_then(|v| self.in_range(v, &l("level_dbfs"), -80.0, 0.0, " dBFS"));
                let duration_s = self
                    .required(sec, &c.duration_s, &ctx, "duration_s")
                    .and_then(|v| {
                        self.in_range(
                            v,
                            &l("duration_s"),
                            LISTEN_DURATION_S.0,
                            LISTEN_DURATION_S.1,
                            " s",
                        )
                    });
                (|| {
                    Some(CheckKind::Listening {
                        band: b?,
                        level_dbfs: level_dbfs?,
                        duration_s: duration_s?,
                    })
                })()
            }
            "polarity" => self
                .required(sec, &c.expected, &ctx, "expected")
                .and_then(|v| match v.as_str() {
                    "positive" => Some(CheckKind::Polarity {
                        expected: Polarity::Positive,
                    }),
                    "negative" => Some(CheckKind::Polarity {
                        expected: Polarity::Negative,
                    }),
                    other => {
                        let hint = match suggest(other, ["positive", "negative"]) {
                            Some(s) => format!(", did you mean `{s}`?"),
                            None => String::new(),
                        };
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "{}: expected `positive` or `negative`, found {}{hint}",
                                l("expected"),
                                found_scalar(other)
                            ),
                        );
                        None
                    }
                }),
            "balance" => {
                let b = band_of(self);
                let max_diff_db =
                    self.required_positive(sec, &c.max_diff_db, &ctx, "max_diff_db", "dB");
                let smoothing = self.smoothing(c.smoothing.as_ref(), &l("smoothing"));
                let n = match (&c.channels, &check_channels) {
                    (Some(_), Some(list)) => Some(list.len()),
                    (None, _) => channels.map(<[_]>::len),
                    _ => None,
                };
                let mut two = true;
                if let Some(n) = n {
                    if n != 2 {
                        two = false;
                        let (pos, msg) = match &c.channels {
                            Some(v) => (
                                Pos::of_value(v),
                                format!(
                                    "{}: a balance check compares exactly two channels, found {n}",
                                    l("channels")
                                ),
                            ),
                            None => (
                                Pos::of_value(kind_v),
                                format!(
                                    "{ctx}: a balance check compares exactly two channels, found \
                                     {n} in the plan; name two with `channels: [a, b]`"
                                ),
                            ),
                        };
                        self.report(pos, msg);
                    }
                }
                (|| {
                    two.then_some(())?;
                    Some(CheckKind::Balance {
                        band: b?,
                        max_diff_db: max_diff_db?,
                        smoothing_fraction: smoothing?,
                    })
                })()
            }
            _ => None,
        };
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

    /// `1/N` octave smoothing; `Some(None)` when absent.
    fn smoothing(&mut self, v: Option<&Spanned<String>>, what: &str) -> Option<Option<u32>> {
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

    /// A response's `normalize:`: a frequency or a band inside the sweep.
    fn normalize(
        &mut self,
        v: &Spanned<RawNormalize>,
        ctx: &str,
        sweep: Option<SweepBand>,
    ) -> Option<Normalize> {
        match (&v.at_hz, &v.band_hz) {
            (Some(at), None) => {
                let what = label(ctx, "normalize.at_hz");
                let f = self.finite(at, &what)?;
                if let Some(s) = sweep {
                    if f < s.start_hz || f > s.stop_hz {
                        self.report(
                            Pos::of_value(at),
                            format!(
                                "{what}: expected a frequency inside the sweep, {} to {} Hz, found {f}",
                                s.start_hz, s.stop_hz
                            ),
                        );
                        return None;
                    }
                }
                Some(Normalize::AtHz(f))
            }
            (None, Some(b)) => self
                .band(b, &label(ctx, "normalize.band_hz"), sweep)
                .map(Normalize::Band),
            (Some(_), Some(_)) | (None, None) => {
                let found = if v.at_hz.is_some() { "both" } else { "neither" };
                self.report(
                    Pos::of_value(v),
                    format!(
                        "{}: expected exactly one of `at_hz` or `band_hz`, found {found}",
                        label(ctx, "normalize")
                    ),
                );
                None
            }
        }
    }

    /// Resolve a limit line (reading its CSV) and check its points.
    fn limit(
        &mut self,
        v: &Spanned<RawLimit>,
        what: &str,
        sweep: Option<SweepBand>,
    ) -> Option<LimitLine> {
        let value_pos = Pos::of_value(v);
        let mut all_points_ok = true;
        // (hz, db, where) per point.
        let (points, origin): (Vec<(f64, f64, Location)>, String) = match &**v {
            RawLimit::Csv(rel) => {
                if rel.trim().parse::<f64>().is_ok() {
                    self.report(
                        value_pos,
                        format!(
                            "{what}: expected a CSV file path or a list of [hz, db] points, \
                             found the number {}",
                            rel.trim()
                        ),
                    );
                    return None;
                }
                let file = self.dir.join(rel);
                let file_label = file.display().to_string();
                let text = match read_data_file(&file, "limit") {
                    Ok(t) => t,
                    Err(why) => {
                        self.report(value_pos, format!("{what}: {why}"));
                        return None;
                    }
                };
                let (points, problems) = parse_limit_csv(&text, &file_label);
                for p in problems {
                    all_points_ok = false;
                    let message = format!("{what}: {}", p.message);
                    self.report_at(p.location, message);
                }
                (
                    points
                        .into_iter()
                        .map(|p| (p.freq_hz, p.level_db, p.location))
                        .collect(),
                    rel.clone(),
                )
            }
            RawLimit::Points(items) => {
                // Bad points are reported and left out, so that the good ones are still
                // checked for order and range; the line is refused at the end.
                let mut pts = Vec::new();
                for item in items {
                    match self.pair(item, what, "[hz, db]") {
                        Some((hz, db)) => pts.push((hz, db, Pos::of_value(item).at(&self.path))),
                        None => all_points_ok = false,
                    }
                }
                (pts, "inline".to_string())
            }
        };
        let mut ok = all_points_ok;
        if all_points_ok && points.len() < 2 {
            self.report(
                value_pos,
                format!("{what}: expected at least 2 points, found {}", points.len()),
            );
            ok = false;
        }
        for (k, (hz, _, loc)) in points.iter().enumerate() {
            if k > 0 {
                let (prev, _, prev_loc) = &points[k - 1];
                if hz <= prev {
                    let at = if prev_loc.path == loc.path {
                        format!("line {}", prev_loc.line)
                    } else {
                        prev_loc.path.clone()
                    };
                    self.report_at(
                        loc.clone(),
                        format!(
                            "{what}: expected frequencies in strictly ascending order, found {hz} Hz \
                             after {prev} Hz ({at})"
                        ),
                    );
                    ok = false;
                }
            }
            if let Some(s) = sweep {
                if *hz < s.start_hz || *hz > s.stop_hz {
                    self.report_at(
                        loc.clone(),
                        format!(
                            "{what}: expected a frequency inside the sweep, {} to {} Hz, found {hz}",
                            s.start_hz, s.stop_hz
                        ),
                    );
                    ok = false;
                }
            }
        }
        ok.then(|| LimitLine {
            points: points.iter().map(|(hz, db, _)| (*hz, *db)).collect(),
            origin,
        })
    }
}
