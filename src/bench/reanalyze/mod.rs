//! Re-analysis from the archive: a stored record's raw capture judged again under the
//! archived plan, station file and recorded playback, and compared with the stored result.
//!
//! This is how an auditor proves that a verdict follows from its inputs without trusting
//! anyone to have kept the files. [`reanalyze`] rebuilds the bench exactly as
//! [`Bench::new`](super::Bench::new) did — the archived plan bundle written back into a
//! temporary directory, loaded on the archived station file with the archived `--fixture`,
//! the calibration offsets and mode the unit was judged with — and refuses when the plan so
//! loaded does not hash to the record's `plan_sha256`. The capture is then judged with the
//! gains it was really played at (`playback_json.drive_gain_db`, the hearing-safety
//! scale-down), so a scaled-down unit gives its recorded margins again.
//!
//! What cannot be measured again is carried over from the stored result, and said so:
//!
//! - the operator's answers to the listening steps (checks of kind `listening`);
//! - faults the rig reported while capturing (buffer xruns, a hearing-safety guard trip):
//!   the WAV file holds the samples, not the rig's report, so these come back from the
//!   stored measurement's `rig_fault` retest reasons, as the analysis reported them;
//! - the unit's history (`history` in the stored result: its earlier records counted when
//!   it was tested, and the retest limit): the rule is applied again from them
//!   ([`super::history::carry_over`]), so a FAIL for too many retests is one again;
//! - for an abandoned sweep (`playback_json.abandoned`), everything: nothing was measured,
//!   so the re-analysis is "not judged", with the stored retest reason, and only the
//!   verdict rule is applied again.
//!
//! The comparison matches checks by id and channel: same verdicts, same unit verdict, and
//! every margin (and value, where a check has one) within [`TOLERANCE_DB`].

mod files;

use super::prepare::{decide_verdict, Prepared};
use super::BenchError;
use crate::checks::CheckResult;
use crate::result::{CalibrationInfo, ToolInfo, UnitResult};
use crate::rig::recording::RecordingRig;
use crate::rig::{Capture, Rig};
use crate::store::{InputBundle, Store, StoredRecord};
use crate::Verdict;
pub(crate) use files::{materialise_station, TempDir};
use serde_json::Value;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Largest difference of a margin or value, dB, that still counts as reproduced: far above
/// the rounding of the same floating-point analysis on another build or machine, far below
/// anything a limit could tell apart (limits are written to 0.01 dB).
pub const TOLERANCE_DB: f64 = 1e-6;

/// Largest relative difference of a worst-margin frequency that still counts as the same.
const AT_HZ_REL_TOL: f64 = 1e-6;

/// One record judged again from the archive.
#[derive(Debug, Clone)]
pub struct Reanalysis {
    /// The record's id.
    pub record_id: i64,
    /// The result of the re-analysis: the measurement's time, serial, rig and station of
    /// the record, the current software as its tool, no `safety` section (nothing was
    /// played).
    pub result: UnitResult,
    /// False for an abandoned sweep: nothing to re-measure.
    pub judged: bool,
    /// Checks carried over from the stored result (listening steps).
    pub carried_over: usize,
    /// The re-analysis against the stored result.
    pub comparison: Comparison,
}

/// The re-analysed result against the stored one.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Comparison {
    /// The stored unit verdict.
    pub stored_verdict: Verdict,
    /// The re-analysed unit verdict.
    pub verdict: Verdict,
    /// Checks compared (by id and channel), carried-over ones included.
    pub n_checks: usize,
    /// Largest |Δ worst_margin_db| over the checks, dB (0 when none has a margin).
    pub max_margin_delta_db: f64,
    /// Largest |Δ value| over the checks that have a `value`, dB.
    pub max_value_delta_db: f64,
    /// Every difference, in words; empty when reproduced.
    pub differences: Vec<String>,
}

impl Comparison {
    /// Same verdicts, the same checks, every margin and value within [`TOLERANCE_DB`].
    pub fn reproduced(&self) -> bool {
        self.differences.is_empty()
    }
}

/// The archived inputs a record links to: role (`plan`, `station`, `calibration`) → the
/// SHA-256 of the archived bundle. A record written before schema 4 has none (an error
/// that says what to do instead).
pub fn input_links(record: &StoredRecord) -> Result<BTreeMap<String, String>, BenchError> {
    let Some(json) = record.inputs_json.as_deref() else {
        return Err(before_archive(record));
    };
    serde_json::from_str(json).map_err(|e| {
        BenchError::bad_input(format!(
            "record #{}: expected inputs_json to be an object of role → SHA-256, found {json:?} \
             ({e})",
            record.id
        ))
    })
}

/// What was played for a record (`playback_json`).
#[derive(Debug, Clone, Default, PartialEq, serde::Deserialize)]
pub struct Playback {
    /// The sweep was abandoned for safety: nothing was measured.
    pub abandoned: bool,
    /// Per plan channel, the dB that turned dB FS/FS into dB SPL/V (`None`: uncalibrated).
    pub calibration_offsets_db: Option<Vec<f64>>,
    /// Per plan channel, the gain the sweep was played at relative to the plan, dB.
    pub drive_gain_db: Option<Vec<f64>>,
}

/// The record's playback, or an error for a record written before schema 4.
pub fn playback(record: &StoredRecord) -> Result<Playback, BenchError> {
    let Some(json) = record.playback_json.as_deref() else {
        return Err(before_archive(record));
    };
    serde_json::from_str(json).map_err(|e| {
        BenchError::bad_input(format!(
            "record #{}: expected playback_json with abandoned, calibration_offsets_db and \
             drive_gain_db, found {json:?} ({e})",
            record.id
        ))
    })
}

fn before_archive(record: &StoredRecord) -> BenchError {
    BenchError::bad_input(format!(
        "record #{} was recorded before archived inputs (store schema < 4); re-analysis \
         needs the plan file: tragus analyze PLAN --capture CAPTURE.wav [--drive-gain-db ...]",
        record.id
    ))
}

/// The archived input of `role` the record links to, read and checked by the store.
pub fn archived_input(
    store: &Store,
    record: &StoredRecord,
    role: &str,
) -> Result<Option<InputBundle>, BenchError> {
    let links = input_links(record)?;
    let Some(sha) = links.get(role) else {
        return Ok(None);
    };
    store.read_archived(sha).map(Some).map_err(|e| {
        BenchError::bad_input(format!(
            "record #{}: its archived {role} input {sha} cannot be read: {e}",
            record.id
        ))
    })
}

/// The plan a record was judged by, written back into `dir`.
#[derive(Debug, Clone)]
pub struct RecoveredPlan {
    /// The plan file (the bundle's main file) inside `dir`.
    pub plan: PathBuf,
    /// The fixture model given with `--fixture`, when there was one, inside `dir`.
    pub fixture: Option<PathBuf>,
}

/// Write the archived plan of `record` (the plan and every file it read, in their relative
/// layout) into `dir`, which must be empty or not exist.
pub fn recover_plan(
    store: &Store,
    record: &StoredRecord,
    dir: &Path,
) -> Result<RecoveredPlan, BenchError> {
    let bundle = archived_input(store, record, "plan")?.ok_or_else(|| no_plan(record))?;
    match std::fs::read_dir(dir) {
        Ok(mut entries) => {
            if entries.next().is_some() {
                return Err(BenchError::bad_input(format!(
                    "{}: expected an empty or new directory for the recovered plan, found \
                     files in it",
                    dir.display()
                )));
            }
        }
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
        Err(e) => {
            return Err(BenchError::bad_input(format!(
                "{}: cannot read the directory: {e}",
                dir.display()
            )))
        }
    }
    std::fs::create_dir_all(dir)
        .map_err(|e| BenchError::bad_input(format!("{}: cannot create: {e}", dir.display())))?;
    let plan = bundle.write_tree(dir).map_err(BenchError::bad_input)?;
    Ok(RecoveredPlan {
        plan,
        fixture: bundle.option_path(dir, "fixture"),
    })
}

fn no_plan(record: &StoredRecord) -> BenchError {
    BenchError::bad_input(format!(
        "record #{} links no archived plan (inputs_json {}); re-analysis needs the plan file: \
         tragus analyze PLAN --capture CAPTURE.wav",
        record.id,
        record.inputs_json.as_deref().unwrap_or("null")
    ))
}

/// Judge `record`'s capture again from the archive and compare with its stored result
/// (module doc).
pub fn reanalyze(store: &Store, record: &StoredRecord) -> Result<Reanalysis, BenchError> {
    let playback = playback(record)?;
    let plan_bundle = archived_input(store, record, "plan")?.ok_or_else(|| no_plan(record))?;
    let station_bundle = archived_input(store, record, "station")?;
    let calibration_bundle = archived_input(store, record, "calibration")?;
    let stored: Value = serde_json::from_str(&record.result_json).map_err(|e| {
        BenchError::bad_input(format!(
            "record #{}: its result_json is not JSON: {e}",
            record.id
        ))
    })?;

    let tmp = TempDir::new()?;
    let plan_path = plan_bundle
        .write_tree(&tmp.path().join("plan"))
        .map_err(BenchError::bad_input)?;
    let fixture = plan_bundle.option_path(&tmp.path().join("plan"), "fixture");
    let station = match &station_bundle {
        Some(b) => Some(materialise_station(
            b,
            calibration_bundle.as_ref(),
            &tmp.path().join("station"),
        )?),
        None => None,
    };
    let mut prep = Prepared::on_station(&plan_path, station.as_ref(), fixture.as_deref())?;
    if prep.plan.sha256 != record.plan_sha256 {
        return Err(BenchError::bad_input(format!(
            "record #{}: the archived plan {} loads with sha256 {}, but the record was judged \
             by plan_sha256 {}",
            record.id,
            plan_bundle.sha256(),
            prep.plan.sha256,
            record.plan_sha256
        )));
    }
    let station_info = match &station {
        Some(st) => {
            let info = st.info();
            let recorded = stored["station"]["sha256"].as_str();
            if recorded.is_some_and(|r| Some(r) != info.sha256.as_deref()) {
                return Err(BenchError::bad_input(format!(
                    "record #{}: the archived station file loads with sha256 {}, but the \
                     record names station file sha256 {}",
                    record.id,
                    info.sha256.as_deref().unwrap_or("none"),
                    recorded.unwrap_or("none")
                )));
            }
            Some(info)
        }
        None => None,
    };
    drop(tmp);

    prep.calibration = calibration_of(&stored, record)?;
    let n_channels = prep.plan.channels.len();
    if let Some(o) = &playback.calibration_offsets_db {
        per_channel(record, "calibration_offsets_db", o, n_channels)?;
    }
    prep.calibration_offsets_db = playback.calibration_offsets_db.clone();

    let serial = record.serial.clone();
    let simulated_unit = stored["simulated_unit"].as_str().map(str::to_string);
    let carried = carried_checks(&stored, record)?;
    let mut result = if playback.abandoned {
        let reasons = strings(&stored["retest_reasons"]);
        let first = reasons.first().cloned().unwrap_or_default();
        let mut r = prep.unjudged(&serial, &record.rig, simulated_unit, first);
        r.retest_reasons = reasons;
        r
    } else {
        let gains = playback.drive_gain_db.clone().unwrap_or_default();
        if !gains.is_empty() {
            per_channel(record, "drive_gain_db", &gains, n_channels)?;
        }
        let bytes = store.read_capture(&record.capture_sha256).map_err(|e| {
            BenchError::bad_input(format!(
                "record #{}: its capture cannot be read: {e}",
                record.id
            ))
        })?;
        let path = store.capture_path(&record.capture_sha256);
        let capture = capture_of(record, &stored, &bytes, &path, &prep)?;
        prep.judge_capture(&capture, &serial, &record.rig, simulated_unit, &gains)?
    };
    let n_carried = carried.len();
    finish(
        &prep.plan,
        &mut result,
        &stored,
        record,
        station_info,
        carried,
    )?;
    let comparison = compare(&result, &stored, record);
    Ok(Reanalysis {
        record_id: record.id,
        result,
        judged: !playback.abandoned,
        carried_over: n_carried,
        comparison,
    })
}

/// The stored raw capture of `record` (`bytes`, read from `path`) as the rig handed it to
/// the analysis for `prep`'s stimulus, with the faults the rig reported while capturing
/// carried over from the stored result (module doc).
pub(crate) fn capture_of(
    record: &StoredRecord,
    stored: &Value,
    bytes: &[u8],
    path: &Path,
    prep: &Prepared,
) -> Result<Capture, BenchError> {
    let data = crate::wav::decode_wav(bytes).map_err(|e| {
        BenchError::bad_input(format!(
            "record #{}: its capture {} is not a readable WAV file: {e}",
            record.id, record.capture_sha256
        ))
    })?;
    let mut rig = RecordingRig::from_data(path, data);
    let mut capture = rig.play_and_capture(&prep.stimulus, prep.plan.n_inputs())?;
    capture.faults.extend(rig_faults(stored));
    Ok(capture)
}

/// Complete a re-judged `result` as the record had it: the record's time, station and
/// device latency, the current software as its tool, the `carried` checks (listening
/// steps, last) appended, and the unit verdict decided again by the bench's one rule.
pub(crate) fn finish(
    plan: &crate::plan::Plan,
    result: &mut UnitResult,
    stored: &Value,
    record: &StoredRecord,
    station: Option<crate::station::StationInfo>,
    carried: Vec<CheckResult>,
) -> Result<(), BenchError> {
    result.tool = ToolInfo::default();
    result.time_utc = record.time_utc.clone();
    result.station = station;
    result.device_latency_samples = stored["device_latency_samples"].as_i64();
    let n_carried = carried.len();
    result.checks.extend(carried);
    result.verdict = decide_verdict(plan, result, n_carried);
    // The retest limit, from the facts the record keeps (the store has later records now).
    super::history::carry_over(stored, result, record.id)
}

/// A per-plan-channel list of `what` must have one value per plan channel.
pub(crate) fn per_channel(
    record: &StoredRecord,
    what: &str,
    values: &[f64],
    n_channels: usize,
) -> Result<(), BenchError> {
    if values.len() == n_channels && values.iter().all(|v| v.is_finite()) {
        return Ok(());
    }
    Err(BenchError::bad_input(format!(
        "record #{}: expected playback {what} with {n_channels} finite value(s) (one per plan \
         channel), found {values:?}",
        record.id
    )))
}

/// The calibration the unit was judged under, from the stored result.
pub(crate) fn calibration_of(
    stored: &Value,
    record: &StoredRecord,
) -> Result<CalibrationInfo, BenchError> {
    let c = &stored["calibration"];
    let (Some(mode), Some(level_unit)) = (c["mode"].as_str(), c["level_unit"].as_str()) else {
        return Err(BenchError::bad_input(format!(
            "record #{}: expected a calibration object (mode, level_unit) in its result, found \
             {c}",
            record.id
        )));
    };
    Ok(CalibrationInfo {
        mode: mode.to_string(),
        sha256: c["sha256"].as_str().map(str::to_string),
        due_date: c["due_date"].as_str().map(str::to_string),
        level_unit: level_unit.to_string(),
    })
}

pub(crate) fn strings(v: &Value) -> Vec<String> {
    v.as_array()
        .map(|a| {
            a.iter()
                .filter_map(|s| s.as_str().map(str::to_string))
                .collect()
        })
        .unwrap_or_default()
}

/// What the rig reported while capturing, as the stored analysis took it: every channel got
/// the same `rig_fault` reasons, so the first measured channel's are the rig's.
fn rig_faults(stored: &Value) -> Vec<String> {
    let Some(first) = stored["channels"].as_array().and_then(|c| c.first()) else {
        return Vec::new();
    };
    first["retest_reasons"]
        .as_array()
        .into_iter()
        .flatten()
        .filter(|r| r["kind"] == "rig_fault")
        .filter_map(|r| r["message"].as_str().map(str::to_string))
        .collect()
}

/// The stored listening-step checks (operator answers), which nothing can re-measure.
pub(crate) fn carried_checks(
    stored: &Value,
    record: &StoredRecord,
) -> Result<Vec<CheckResult>, BenchError> {
    let mut out = Vec::new();
    for c in stored["checks"].as_array().into_iter().flatten() {
        if c["kind"] != "listening" {
            continue;
        }
        let verdict: Verdict = serde_json::from_value(c["verdict"].clone()).map_err(|e| {
            BenchError::bad_input(format!(
                "record #{}: a stored listening check has no verdict ({e}): {c}",
                record.id
            ))
        })?;
        let text = |k: &str| c[k].as_str().unwrap_or_default().to_string();
        out.push(CheckResult {
            id: text("id"),
            kind: text("kind"),
            channel: text("channel"),
            verdict,
            worst_margin_db: c["worst_margin_db"].as_f64(),
            at_hz: c["at_hz"].as_f64(),
            detail: text("detail"),
        });
    }
    Ok(out)
}

/// `result` against the stored result (module doc).
pub(crate) fn compare(result: &UnitResult, stored: &Value, record: &StoredRecord) -> Comparison {
    let mut differences = Vec::new();
    if result.verdict != record.verdict {
        differences.push(format!(
            "unit verdict: stored {}, re-analysed {}",
            record.verdict.word(),
            result.verdict.word()
        ));
    }
    let old = keyed(stored["checks"].as_array().into_iter().flatten().cloned());
    let new = keyed(
        result
            .checks
            .iter()
            .filter_map(|c| serde_json::to_value(c).ok()),
    );
    let (mut max_margin, mut max_value) = (0.0f64, 0.0f64);
    for (k, s) in &old {
        let name = check_name(k);
        let Some(n) = new.get(k) else {
            differences.push(format!("{name}: stored, not re-analysed"));
            continue;
        };
        if s["verdict"] != n["verdict"] {
            differences.push(format!(
                "{name}: verdict stored {}, re-analysed {}",
                s["verdict"], n["verdict"]
            ));
        }
        for (field, max) in [
            ("worst_margin_db", &mut max_margin),
            ("value", &mut max_value),
        ] {
            match (s[field].as_f64(), n[field].as_f64()) {
                (Some(a), Some(b)) => {
                    let d = (a - b).abs();
                    *max = max.max(d);
                    if d.is_nan() || d > TOLERANCE_DB {
                        differences.push(format!(
                            "{name}: {field} stored {a} dB, re-analysed {b} dB (Δ {d:e} dB)"
                        ));
                    }
                }
                (None, None) => {}
                (a, b) => {
                    differences.push(format!("{name}: {field} stored {a:?}, re-analysed {b:?}"))
                }
            }
        }
        match (s["at_hz"].as_f64(), n["at_hz"].as_f64()) {
            (Some(a), Some(b)) if (a - b).abs() <= AT_HZ_REL_TOL * a.abs().max(b.abs()) => {}
            (None, None) => {}
            (a, b) => differences.push(format!(
                "{name}: worst margin at stored {a:?} Hz, re-analysed {b:?} Hz"
            )),
        }
    }
    for k in new.keys().filter(|k| !old.contains_key(*k)) {
        differences.push(format!("{}: re-analysed, not stored", check_name(k)));
    }
    Comparison {
        stored_verdict: record.verdict,
        verdict: result.verdict,
        n_checks: old.len(),
        max_margin_delta_db: max_margin,
        max_value_delta_db: max_value,
        differences,
    }
}

/// Checks by id, channel and occurrence (a plan could judge one id on one channel twice;
/// the n-th of the stored is matched with the n-th of the re-analysed).
type CheckKey = (String, String, usize);

fn keyed(checks: impl Iterator<Item = Value>) -> BTreeMap<CheckKey, Value> {
    let mut out = BTreeMap::new();
    let mut seen: BTreeMap<(String, String), usize> = BTreeMap::new();
    for c in checks {
        let id = c["id"].as_str().unwrap_or_default().to_string();
        let ch = c["channel"].as_str().unwrap_or_default().to_string();
        let n = seen.entry((id.clone(), ch.clone())).or_insert(0);
        out.insert((id, ch, *n), c);
        *n += 1;
    }
    out
}

fn check_name((id, ch, n): &CheckKey) -> String {
    match n {
        0 => format!("check {id} on {ch}"),
        n => format!("check {id} on {ch} (#{})", n + 1),
    }
}
