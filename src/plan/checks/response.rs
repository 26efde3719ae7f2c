//! The `response` check kind: the frequency response between limit lines.
//!
//! ```yaml
//! - id: fr
//!   kind: response
//!   upper: limits/upper.csv            # a CSV (hz,db; relative to the plan) or inline points
//!   lower: [[20, -10], [20000, -10]]   # at least one of upper and lower
//!   smoothing: 1/3                     # optional, 1/N octave
//!   normalize: {at_hz: 1000}           # optional, or {band_hz: [low, high]}
//! ```
//!
//! A limit line has at least 2 points, frequencies strictly ascending and inside the sweep;
//! a CSV is read with [`limit_csv`] and its problems are reported at its own `path:line:col`.
//!
//! Canonical fields: `"upper"`, `"lower"`: `{"origin":S,"points":[[R,R],...]}` or `null`
//! (`origin` is `"inline"` or the CSV path as written); `"smoothing_fraction"`: I or `null`;
//! `"normalize"`: `{"at_hz":R}`, `{"band":{"high_hz":R,"low_hz":R}}` or `null`.

pub(in crate::plan) mod crossing;
pub mod limit_csv;

use super::plausible::{LevelLimit, Side};
use super::{CheckInput, CheckKind, Fields, Kind};
use crate::config::{label, read_data_file, Location, Pos};
use crate::plan::hash::{self, C};
use crate::plan::raw::RawPair;
use crate::plan::stimulus::SweepBand;
use crate::plan::validate::Validator;
use crate::plan::Band;
use limit_csv::parse_limit_csv;
use marked_yaml::Spanned;
use serde::de::{SeqAccess, Visitor};
use serde::{Deserialize, Deserializer};
use std::fmt;

/// A limit line: points (frequency Hz, level dB), frequencies strictly ascending.
/// Interpolated linearly in log-frequency between points; undefined outside its span.
#[derive(Debug, Clone, PartialEq)]
pub struct LimitLine {
    /// (frequency Hz, level dB) points.
    pub points: Vec<(f64, f64)>,
    /// Where the points came from: `inline` or the CSV path as written in the plan.
    pub origin: String,
}

/// A limit line as validation read it: its points, where each was written (a CSV line or
/// an inline pair) and where the plan names it, for messages about the line as a whole.
#[derive(Debug, Clone)]
pub(in crate::plan) struct PlacedLine {
    /// The line.
    pub(in crate::plan) line: LimitLine,
    /// Where each point was written, in point order.
    pub(in crate::plan) at: Vec<Location>,
    /// Where the plan names the line (the value of `upper:` or `lower:`).
    pub(in crate::plan) named_at: Location,
    /// How messages name it (`check fr: upper`).
    pub(in crate::plan) what: String,
}

impl PlacedLine {
    /// Where point `i` was written, and for a point of a CSV file the plan position that
    /// names the file (`None` for inline points, which are in the plan already).
    pub(in crate::plan) fn point_at(&self, i: usize) -> (Location, Option<&Location>) {
        let at = self.at[i].clone();
        let named = (at.path != self.named_at.path).then_some(&self.named_at);
        (at, named)
    }
}

/// How a response is normalised before it is compared with its limits.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Normalize {
    /// Subtract the level at this frequency.
    AtHz(f64),
    /// Subtract the mean level (dB, averaged on the log grid) over this band.
    Band(Band),
}

/// The keys of a response check.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawResponse {
    /// Upper limit line.
    pub upper: Option<Spanned<RawLimit>>,
    /// Lower limit line.
    pub lower: Option<Spanned<RawLimit>>,
    /// Fractional-octave smoothing, `1/N`.
    pub smoothing: Option<Spanned<String>>,
    /// Normalisation.
    pub normalize: Option<Spanned<RawNormalize>>,
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

/// The response check kind.
pub(in crate::plan) struct Response;

impl Kind for Response {
    const NAME: &'static str = "response";
    const KEYS: &'static [&'static str] = &["upper", "lower", "smoothing", "normalize"];
    type Raw = RawResponse;

    fn validate(v: &mut Validator, check: &CheckInput, c: &RawResponse) -> Option<CheckKind> {
        let (sec, ctx, band) = (check.sec, check.ctx, check.sweep);
        let upper = c
            .upper
            .as_ref()
            .and_then(|u| v.limit(u, &check.label("upper"), band));
        let lower = c
            .lower
            .as_ref()
            .and_then(|l| v.limit(l, &check.label("lower"), band));
        let crossed = match (&upper, &lower) {
            (Some(u), Some(l)) => crossing::refuse_crossed(v, check, u, l),
            _ => false,
        };
        if c.normalize.is_none() {
            // Absolute levels only: a normalised response is relative to itself.
            for (line, side) in [(&upper, Side::Upper), (&lower, Side::Lower)] {
                if let Some(l) = line {
                    v.level_limits.extend(LevelLimit::of_line(side, l));
                }
            }
        }
        let upper = upper.map(|l| l.line);
        let lower = lower.map(|l| l.line);
        if c.upper.is_none()
            && c.lower.is_none()
            && !sec.was_rejected("upper")
            && !sec.was_rejected("lower")
        {
            v.report(
                sec.pos,
                format!("{ctx}: expected at least one of `upper` or `lower`, found neither"),
            );
        }
        let smoothing = v.smoothing(c.smoothing.as_ref(), &check.label("smoothing"));
        let normalize = match &c.normalize {
            None => Some(None),
            Some(n) => v.normalize(n, ctx, band).map(Some),
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
        let (upper, lower) = (upper?, lower?);
        (upper.is_some() || lower.is_some()).then_some(())?;
        (!crossed).then_some(())?;
        Some(CheckKind::Response {
            upper,
            lower,
            smoothing_fraction: smoothing?,
            normalize: normalize?,
        })
    }

    fn canonical(kind: &CheckKind) -> Option<Fields> {
        let CheckKind::Response {
            upper,
            lower,
            smoothing_fraction,
            normalize,
        } = kind
        else {
            return None;
        };
        let normalize = match normalize {
            None => C::Null,
            Some(Normalize::AtHz(f)) => hash::obj([("at_hz", hash::real(*f))]),
            Some(Normalize::Band(b)) => hash::obj([("band", hash::band(b))]),
        };
        Some(vec![
            ("upper", limit_value(upper)),
            ("lower", limit_value(lower)),
            ("smoothing_fraction", hash::fraction(*smoothing_fraction)),
            ("normalize", normalize),
        ])
    }
}

/// A limit line in the canonical form, or `null`.
fn limit_value(l: &Option<LimitLine>) -> C {
    match l {
        None => C::Null,
        Some(l) => hash::obj([
            ("origin", hash::s(&l.origin)),
            (
                "points",
                C::List(
                    l.points
                        .iter()
                        .map(|(hz, db)| C::List(vec![hash::real(*hz), hash::real(*db)]))
                        .collect(),
                ),
            ),
        ]),
    }
}

impl Validator {
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
    ) -> Option<PlacedLine> {
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
        ok.then(|| PlacedLine {
            line: LimitLine {
                points: points.iter().map(|(hz, db, _)| (*hz, *db)).collect(),
                origin,
            },
            at: points.into_iter().map(|(_, _, loc)| loc).collect(),
            named_at: value_pos.at(&self.path),
            what: what.to_string(),
        })
    }
}
