//! Reading records for the audit report: each stored record's result JSON turned into the
//! few things the report draws (checks, response curves, retest reasons, safety notes).
//!
//! The result JSON is a contract that grows (docs/architecture.md, "Result JSON"), and a
//! store holds records from every version that wrote to it. So it is read leniently, as
//! `serde_json::Value`s: a missing field, a field of an unexpected type or a field added by
//! a newer version is simply not shown; nothing here fails on a record's contents. The
//! bulky per-channel arrays the report does not draw (phase, distortion, harmonics) are
//! skipped without being built, which halves the parse time of a typical record.

use rayon::prelude::*;
use serde::Deserialize;
use serde_json::Value;

use crate::store::StoredRecord;

/// One check of one record, as the result JSON gives it.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct CheckView {
    /// Check id from the plan.
    pub id: String,
    /// Check kind (`response`, `sensitivity`, …), empty when absent.
    pub kind: String,
    /// Channel name, `a/b` for a balance check.
    pub channel: String,
    /// `pass`, `fail`, `retest`, or whatever word the record holds.
    pub verdict: String,
    /// Worst margin, dB, positive inside the limits.
    pub margin_db: Option<f64>,
    /// Where the worst margin is, Hz.
    pub at_hz: Option<f64>,
    /// The measured value, when a (newer) result carries one as `value`.
    pub value: Option<f64>,
    /// One line in words.
    pub detail: String,
}

/// One channel's recorded frequency response.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Curve {
    /// Channel name.
    pub channel: String,
    /// Level unit (`dB FS/FS`, `dB SPL/V`), empty when absent.
    pub unit: String,
    /// Grid frequencies, Hz, ascending.
    pub freqs_hz: Vec<f64>,
    /// Level per grid point, dB; NaN where the JSON holds `null`.
    pub db: Vec<f64>,
}

/// A stored record with its result JSON read; the JSON text itself is dropped.
#[derive(Debug, Clone)]
pub(crate) struct RecordView {
    /// The record's columns (`result_json` emptied once read).
    pub record: StoredRecord,
    /// Checks in result order.
    pub checks: Vec<CheckView>,
    /// Response curves per channel (only channels with a usable grid and response).
    pub curves: Vec<Curve>,
    /// Unit-level retest reasons, in words.
    pub retest_reasons: Vec<String>,
    /// Hearing-safety events in words, as the result holds them.
    pub safety_notes: Vec<String>,
    /// The simulated defect, for simulated runs.
    pub simulated_unit: Option<String>,
    /// The station's mode (`production`, `engineering`) when the result names it.
    pub station_mode: Option<String>,
    /// The plan's level unit (`db_fs_per_fs`, …) from the calibration block.
    pub level_unit: Option<String>,
    /// Why the result JSON could not be read at all, if so.
    pub unreadable: Option<String>,
}

/// The parts of a result document the report reads, each as a plain `Value` so that any
/// type is accepted; everything else in the document is skipped unbuilt.
#[derive(Debug, Default, Deserialize)]
#[serde(default)]
struct Doc {
    channels: Vec<ChannelDoc>,
    checks: Value,
    retest_reasons: Value,
    simulated_unit: Value,
    station: Value,
    calibration: Value,
    safety: SafetyDoc,
}

#[derive(Debug, Default, Deserialize)]
#[serde(default)]
struct ChannelDoc {
    name: Value,
    unit: Value,
    frequencies_hz: Value,
    response_db: Value,
}

#[derive(Debug, Default, Deserialize)]
#[serde(default)]
struct SafetyDoc {
    events: Value,
}

impl Doc {
    /// The same parts from a fully parsed document, for results whose shape the fast path
    /// refused (a `channels` that is not a list of objects, say).
    fn from_value(mut v: Value) -> Doc {
        let mut take = |k: &str| v.get_mut(k).map(Value::take).unwrap_or(Value::Null);
        let channels = match take("channels") {
            Value::Array(items) => items
                .into_iter()
                .filter_map(|mut c| {
                    c.is_object().then(|| ChannelDoc {
                        name: c["name"].take(),
                        unit: c["unit"].take(),
                        frequencies_hz: c["frequencies_hz"].take(),
                        response_db: c["response_db"].take(),
                    })
                })
                .collect(),
            _ => Vec::new(),
        };
        let checks = take("checks");
        let retest_reasons = take("retest_reasons");
        let simulated_unit = take("simulated_unit");
        let station = take("station");
        let calibration = take("calibration");
        let mut safety = take("safety");
        Doc {
            channels,
            checks,
            retest_reasons,
            simulated_unit,
            station,
            calibration,
            safety: SafetyDoc {
                events: safety
                    .get_mut("events")
                    .map(Value::take)
                    .unwrap_or_default(),
            },
        }
    }
}

/// Text of a JSON string, `None` for anything else.
pub(crate) fn text(v: &Value) -> Option<String> {
    v.as_str().map(str::to_owned)
}

/// The strings of a JSON list (other items skipped); empty for anything else.
fn texts(v: &Value) -> Vec<String> {
    v.as_array()
        .map(|a| a.iter().filter_map(text).collect())
        .unwrap_or_default()
}

/// A finite number, `None` for `null`, NaN-free text or anything else.
fn number(v: &Value) -> Option<f64> {
    v.as_f64().filter(|x| x.is_finite())
}

fn check_of(v: &Value) -> Option<CheckView> {
    let id = text(&v["id"])?;
    Some(CheckView {
        id,
        kind: text(&v["kind"]).unwrap_or_default(),
        channel: text(&v["channel"]).unwrap_or_default(),
        verdict: text(&v["verdict"]).unwrap_or_default(),
        margin_db: number(&v["worst_margin_db"]),
        at_hz: number(&v["at_hz"]),
        value: number(&v["value"]),
        detail: text(&v["detail"]).unwrap_or_default(),
    })
}

fn curve_of(c: &ChannelDoc) -> Option<Curve> {
    let freqs: Vec<f64> = c
        .frequencies_hz
        .as_array()?
        .iter()
        .map(|f| f.as_f64().unwrap_or(f64::NAN))
        .collect();
    let db: Vec<f64> = c
        .response_db
        .as_array()?
        .iter()
        .map(|d| d.as_f64().unwrap_or(f64::NAN))
        .collect();
    // A grid that is not positive and ascending cannot be drawn on a log axis.
    let usable = !freqs.is_empty()
        && freqs.len() == db.len()
        && freqs.iter().all(|f| f.is_finite() && *f > 0.0)
        && freqs.windows(2).all(|w| w[0] < w[1]);
    usable.then(|| Curve {
        channel: text(&c.name).unwrap_or_default(),
        unit: text(&c.unit).unwrap_or_default(),
        freqs_hz: freqs,
        db,
    })
}

/// Read one record's result JSON (leniently, module doc) and drop the text.
pub(crate) fn view(mut record: StoredRecord) -> RecordView {
    let json = std::mem::take(&mut record.result_json);
    let (doc, unreadable) = match serde_json::from_str::<Doc>(&json) {
        Ok(doc) => (doc, None),
        Err(_) => match serde_json::from_str::<Value>(&json) {
            Ok(v) if v.is_object() => (Doc::from_value(v), None),
            Ok(_) => (
                Doc::default(),
                Some("the result JSON is not an object".into()),
            ),
            Err(e) => (
                Doc::default(),
                Some(format!("the result JSON does not parse: {e}")),
            ),
        },
    };
    let checks = doc
        .checks
        .as_array()
        .map(|a| a.iter().filter_map(check_of).collect())
        .unwrap_or_default();
    RecordView {
        record,
        checks,
        curves: doc.channels.iter().filter_map(curve_of).collect(),
        retest_reasons: texts(&doc.retest_reasons),
        safety_notes: texts(&doc.safety.events),
        simulated_unit: text(&doc.simulated_unit),
        station_mode: text(&doc.station["mode"]),
        level_unit: text(&doc.calibration["level_unit"]),
        unreadable,
    }
}

/// Read every record, in parallel, keeping their order.
pub(crate) fn views(records: Vec<StoredRecord>) -> Vec<RecordView> {
    records.into_par_iter().map(view).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Verdict;

    fn record(json: &str) -> StoredRecord {
        StoredRecord {
            id: 1,
            time_utc: "2025-03-14T09:00:00Z".into(),
            serial: "E2-000001".into(),
            plan_id: "demo-earbud".into(),
            plan_revision: 1,
            plan_sha256: "a".repeat(64),
            software_version: "0.1.0".into(),
            station: "larkspur-line3-st1".into(),
            operator: "j.okafor".into(),
            rig: "simulated".into(),
            verdict: Verdict::Pass,
            result_json: json.into(),
            calibration_mode: None,
            calibration_sha256: None,
            capture_sha256: "b".repeat(64),
            prev_hash: "0".repeat(64),
            record_hash: "c".repeat(64),
            build: None,
            inputs_json: None,
            playback_json: None,
            key_id: None,
            signature: None,
        }
    }

    #[test]
    fn old_minimal_results_read_with_nothing_to_show() {
        let v = view(record(r#"{"serial":"E2-000001","verdict":"pass"}"#));
        assert!(v.checks.is_empty() && v.curves.is_empty() && v.unreadable.is_none());
        assert!(
            v.record.result_json.is_empty(),
            "the text is dropped once read"
        );
    }

    #[test]
    fn odd_shapes_fall_back_and_keep_what_is_readable() {
        // `channels` as an object (not a list) refuses the fast path; checks still read.
        let v = view(record(
            r#"{"channels":{"x":1},"checks":[{"id":"fr","kind":"response","channel":"left",
               "verdict":"fail","worst_margin_db":-1.5,"at_hz":null,"new_field":[1]},
               {"no_id":true}],"retest_reasons":["a",3]}"#,
        ));
        assert_eq!(v.checks.len(), 1);
        assert_eq!(v.checks[0].margin_db, Some(-1.5));
        assert_eq!(v.checks[0].at_hz, None);
        assert_eq!(v.retest_reasons, ["a"]);
        assert!(v.unreadable.is_none());
    }

    #[test]
    fn nulls_in_a_response_are_gaps_and_bad_grids_are_dropped() {
        let v = view(record(
            r#"{"channels":[{"name":"left","unit":"dB FS/FS","frequencies_hz":[100,200,400],
               "response_db":[1.0,null,3.0]},{"name":"right","frequencies_hz":[200,100],
               "response_db":[1,2]}]}"#,
        ));
        assert_eq!(v.curves.len(), 1);
        assert!(v.curves[0].db[1].is_nan());
        assert_eq!(v.curves[0].unit, "dB FS/FS");
    }

    #[test]
    fn text_that_is_not_an_object_is_reported() {
        assert!(view(record("[1,2]")).unreadable.is_some());
        assert!(view(record("not json")).unreadable.is_some());
    }
}
