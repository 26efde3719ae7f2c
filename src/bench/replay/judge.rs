//! One record judged under the new plan (on any thread of the replay's pool).

use super::super::prepare::Prepared;
use super::super::reanalyze::{
    calibration_of, capture_of, carried_checks, compare, finish, per_channel, strings,
};
use super::report::{CheckPair, CheckSide, RecordReplay};
use super::setting::{Ready, Settings, Task};
use crate::checks::CheckResult;
use crate::plan::{CheckKind, Plan};
use crate::result::UnitResult;
use crate::store::StoredRecord;
use crate::Verdict;
use serde_json::Value;
use std::collections::BTreeMap;

/// Judge `record` under the new plan (`plan_sha256`) as `task` prepared it; `Err` is the
/// reason it is not replayable.
pub(super) fn judge(
    settings: &Settings,
    plan_sha256: &str,
    record: &StoredRecord,
    task: &Task,
) -> Result<RecordReplay, String> {
    let ready = task.as_ref().map_err(Clone::clone)?;
    let setting = settings.get(ready.setting);
    let mut prep = setting.take()?;
    let judged = judge_with(&mut prep, ready, record, setting.station.clone());
    setting.put(prep);
    let (result, stored, carried) = judged?;
    let reproduction = (record.plan_sha256 == plan_sha256)
        .then(|| compare(&result, &stored, record))
        .map(|c| c.differences);
    Ok(RecordReplay {
        record_id: record.id,
        serial: record.serial.clone(),
        station: record.station.clone(),
        time_utc: record.time_utc.clone(),
        plan_id: record.plan_id.clone(),
        plan_revision: record.plan_revision,
        before: record.verdict,
        after: result.verdict,
        judged: !ready.playback.abandoned,
        carried_over: carried,
        checks: pairs(&stored, &result),
        same_plan: reproduction.is_some(),
        differences: reproduction.unwrap_or_default(),
    })
}

/// The re-judged result, the stored result and how many checks were carried over.
fn judge_with(
    prep: &mut Prepared,
    ready: &Ready,
    record: &StoredRecord,
    station: Option<crate::station::StationInfo>,
) -> Result<(UnitResult, Value, usize), String> {
    let stored: Value = serde_json::from_str(&record.result_json)
        .map_err(|e| format!("its result_json is not JSON: {e}"))?;
    // The record names the station file it was tested on: the archived one must be it.
    let recorded = stored["station"]["sha256"].as_str();
    if let (Some(r), Some(info)) = (recorded, &station) {
        if Some(r) != info.sha256.as_deref() {
            return Err(format!(
                "the archived station file loads with sha256 {}, but the record names station \
                 file sha256 {r}",
                info.sha256.as_deref().unwrap_or("none")
            ));
        }
    }
    let err = |e: super::super::BenchError| e.to_string();
    let n = ready.n_origin_channels;
    let remap =
        |values: &[f64]| -> Vec<f64> { ready.channel_map.iter().map(|&i| values[i]).collect() };
    prep.calibration = calibration_of(&stored, record).map_err(err)?;
    prep.calibration_offsets_db = match &ready.playback.calibration_offsets_db {
        Some(o) => {
            per_channel(record, "calibration_offsets_db", o, n).map_err(err)?;
            Some(remap(o))
        }
        None => None,
    };
    let serial = record.serial.clone();
    let simulated_unit = stored["simulated_unit"].as_str().map(str::to_string);
    let mut result = if ready.playback.abandoned {
        let reasons = strings(&stored["retest_reasons"]);
        let first = reasons.first().cloned().unwrap_or_default();
        let mut r = prep.unjudged(&serial, &record.rig, simulated_unit, first);
        r.retest_reasons = reasons;
        r
    } else {
        let gains = ready.playback.drive_gain_db.clone().unwrap_or_default();
        let gains = if gains.is_empty() {
            gains
        } else {
            per_channel(record, "drive_gain_db", &gains, n).map_err(err)?;
            remap(&gains)
        };
        let bytes = read_capture(&ready.capture, &record.capture_sha256)?;
        let capture = capture_of(record, &stored, &bytes, &ready.capture, prep).map_err(err)?;
        prep.judge_capture(&capture, &serial, &record.rig, simulated_unit, &gains)
            .map_err(err)?
    };
    let carried = listening(&prep.plan, &stored, record, result.verdict)?;
    let n_carried = carried.len();
    finish(&prep.plan, &mut result, &stored, record, station, carried).map_err(err)?;
    Ok((result, stored, n_carried))
}

/// The capture file's bytes, checked against the SHA-256 that names it (what
/// [`crate::store::Store::read_capture`] does, without the database connection, which
/// stays on the thread that opened it).
fn read_capture(path: &std::path::Path, sha256: &str) -> Result<Vec<u8>, String> {
    let bytes = std::fs::read(path)
        .map_err(|e| format!("its capture {} cannot be read: {e}", path.display()))?;
    if crate::digest::sha256_hex(&bytes) != sha256 {
        return Err(format!(
            "its capture {} does not hash to its name: the file was altered",
            path.display()
        ));
    }
    Ok(bytes)
}

/// The new plan's listening steps for this unit, as the bench would have them: not played
/// (retest) when the measured checks did not pass; otherwise the operator's stored answer
/// to the step of the same id, which must have been played. A step of the old plan the new
/// one does not have is dropped.
fn listening(
    plan: &Plan,
    stored: &Value,
    record: &StoredRecord,
    measured: Verdict,
) -> Result<Vec<CheckResult>, String> {
    let answers = carried_checks(stored, record).map_err(|e| e.to_string())?;
    let played = stored_measured_pass(stored);
    let mut out = Vec::new();
    for spec in &plan.checks {
        if !matches!(spec.kind, CheckKind::Listening { .. }) {
            continue;
        }
        if measured != Verdict::Pass {
            out.push(CheckResult {
                id: spec.id.clone(),
                kind: "listening".into(),
                channel: crate::checks::check_channels(plan, spec).join("/"),
                verdict: Verdict::Retest,
                worst_margin_db: None,
                at_hz: None,
                detail: format!("not played: the measured checks gave {}", measured.word()),
            });
            continue;
        }
        match answers.iter().find(|c| c.id == spec.id).filter(|_| played) {
            Some(c) => out.push(c.clone()),
            None => {
                return Err(format!(
                    "the new plan's listening step `{}` passes the measured checks of this unit, \
                     but the step was never played to it when it was tested; its answer cannot \
                     be replayed",
                    spec.id
                ))
            }
        }
    }
    Ok(out)
}

/// True when the stored measurement was valid and every measured check passed: the bench
/// then played the listening steps.
fn stored_measured_pass(stored: &Value) -> bool {
    let empty = |v: &Value| v.as_array().is_none_or(|a| a.is_empty());
    empty(&stored["retest_reasons"])
        && stored["channels"]
            .as_array()
            .is_some_and(|c| !c.is_empty() && c.iter().all(|m| empty(&m["retest_reasons"])))
        && stored["checks"]
            .as_array()
            .into_iter()
            .flatten()
            .filter(|c| c["kind"] != "listening")
            .all(|c| c["verdict"] == "pass")
}

/// Stored and re-judged checks side by side, matched by id, channel and occurrence; in the
/// new plan's order, then the stored checks the new plan does not have.
fn pairs(stored: &Value, result: &UnitResult) -> Vec<CheckPair> {
    type Key = (String, String, usize);
    fn key(seen: &mut BTreeMap<(String, String), usize>, id: &str, ch: &str) -> Key {
        let n = seen.entry((id.to_string(), ch.to_string())).or_insert(0);
        *n += 1;
        (id.to_string(), ch.to_string(), *n - 1)
    }
    let mut seen: BTreeMap<(String, String), usize> = BTreeMap::new();
    let mut before: Vec<(Key, String, CheckSide)> = Vec::new();
    for c in stored["checks"].as_array().into_iter().flatten() {
        let (id, ch) = (
            c["id"].as_str().unwrap_or_default(),
            c["channel"].as_str().unwrap_or_default(),
        );
        let Ok(verdict) = serde_json::from_value::<Verdict>(c["verdict"].clone()) else {
            continue;
        };
        before.push((
            key(&mut seen, id, ch),
            c["kind"].as_str().unwrap_or_default().to_string(),
            CheckSide {
                verdict,
                worst_margin_db: c["worst_margin_db"].as_f64(),
                at_hz: c["at_hz"].as_f64(),
            },
        ));
    }
    seen.clear();
    let mut out = Vec::new();
    for c in &result.checks {
        let k = key(&mut seen, &c.id, &c.channel);
        let old = before
            .iter()
            .position(|(b, _, _)| *b == k)
            .map(|i| before.remove(i).2);
        out.push(CheckPair {
            id: c.id.clone(),
            channel: c.channel.clone(),
            kind: c.kind.clone(),
            before: old,
            after: Some(CheckSide {
                verdict: c.verdict,
                worst_margin_db: c.worst_margin_db,
                at_hz: c.at_hz,
            }),
        });
    }
    for ((id, channel, _), kind, side) in before {
        out.push(CheckPair {
            id,
            channel,
            kind,
            before: Some(side),
            after: None,
        });
    }
    out
}
