//! `tragus show --store DIR RECORD_ID [--json] [--plan-out DIR]`: one record with its
//! provenance (what an auditor traces a verdict to), and the plan that judged it recovered
//! from the archive.

use super::{Exit, JsonOut, EXIT_PASS};
use crate::bench::reanalyze::{self, Playback};
use crate::store::{InputBundle, SafetyEventFilter, Store, StoredRecord, StoredSafetyEvent};
use serde_json::{json, Value};
use std::path::{Path, PathBuf};

/// Arguments of `show`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// The record's id (`tragus records` lists them).
    #[arg(value_name = "RECORD_ID")]
    pub record: i64,
    /// Print the record as one JSON document on stdout instead.
    #[arg(long)]
    pub json: bool,
    /// Write the archived plan that judged the unit (the plan and every file it read, in
    /// their relative layout) into this directory, which must be empty or new; prints the
    /// plan file's path.
    #[arg(long, value_name = "DIR")]
    pub plan_out: Option<PathBuf>,
}

/// Open an existing store (never create one where the user mistyped a path).
pub(crate) fn open_store(dir: &Path) -> Result<Store, Exit> {
    if !dir.join(crate::store::DB_FILE).exists() {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "{}: expected a tragus store (a directory holding {}), found none",
            dir.display(),
            crate::store::DB_FILE
        )));
    }
    Store::open(dir).map_err(Exit::bad_input)
}

/// One archived input as the record links it: read, or why it cannot be.
struct Input {
    role: String,
    sha256: String,
    bundle: Result<InputBundle, String>,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let store = open_store(&args.store)?;
    let record = store
        .get(args.record)
        .map_err(Exit::bad_input)?
        .ok_or_else(|| {
            Exit::bad_input(anyhow::anyhow!(
                "{}: expected a record #{}, found none",
                args.store.display(),
                args.record
            ))
        })?;
    let inputs: Vec<Input> = match reanalyze::input_links(&record) {
        Ok(links) => links
            .into_iter()
            .map(|(role, sha256)| Input {
                bundle: store.read_archived(&sha256).map_err(|e| e.to_string()),
                role,
                sha256,
            })
            .collect(),
        Err(_) => Vec::new(),
    };
    let playback = reanalyze::playback(&record).ok();
    let events = store
        .safety_events(&SafetyEventFilter {
            record_id: Some(record.id),
            ..Default::default()
        })
        .map_err(Exit::bad_input)?;
    let result: Value = serde_json::from_str(&record.result_json).unwrap_or(Value::Null);
    let plan_out = match &args.plan_out {
        Some(dir) => Some(reanalyze::recover_plan(&store, &record, dir)?),
        None => None,
    };
    if args.json {
        let mut doc = document(&store, &record, &inputs, playback.as_ref(), &events, result);
        if let Some(p) = &plan_out {
            doc["plan_out"] = json!({"plan": p.plan, "fixture": p.fixture});
        }
        JsonOut::Stdout.write(&doc).map_err(Exit::bad_input)?;
        return Ok(EXIT_PASS);
    }
    human(
        &store,
        &record,
        &inputs,
        playback.as_ref(),
        &events,
        &result,
    );
    if let Some(p) = &plan_out {
        outln!();
        outln!("archived plan written: {}", p.plan.display());
        if let Some(f) = &p.fixture {
            outln!(
                "  judged with --fixture {} (give it again to load the plan as the bench did)",
                f.display()
            );
        }
    }
    Ok(EXIT_PASS)
}

fn document(
    store: &Store,
    r: &StoredRecord,
    inputs: &[Input],
    playback: Option<&Playback>,
    events: &[StoredSafetyEvent],
    result: Value,
) -> Value {
    let inputs: Vec<Value> = inputs
        .iter()
        .map(|i| match &i.bundle {
            Ok(b) => json!({
                "role": i.role, "sha256": i.sha256, "main": b.main,
                "files": b.files.keys().collect::<Vec<_>>(), "options": b.options,
            }),
            Err(e) => json!({"role": i.role, "sha256": i.sha256, "error": e}),
        })
        .collect();
    json!({
        "id": r.id, "time_utc": r.time_utc, "serial": r.serial, "verdict": r.verdict,
        "plan": {"id": r.plan_id, "revision": r.plan_revision, "sha256": r.plan_sha256},
        "software_version": r.software_version, "build": r.build,
        "station": r.station, "operator": r.operator, "rig": r.rig,
        "calibration": {"mode": r.calibration_mode, "sha256": r.calibration_sha256},
        "capture": {"sha256": r.capture_sha256, "path": store.capture_path(&r.capture_sha256)},
        "inputs": inputs,
        "playback": playback.map(|p| json!({
            "abandoned": p.abandoned, "drive_gain_db": p.drive_gain_db,
            "calibration_offsets_db": p.calibration_offsets_db,
        })),
        "record_hash": r.record_hash, "prev_hash": r.prev_hash,
        "key_id": r.key_id, "signed": r.signature.is_some(),
        "safety_events": events.iter().map(|e| json!({
            "id": e.id, "kind": e.kind, "message": e.message, "row_hash": e.row_hash,
        })).collect::<Vec<_>>(),
        "result": result,
    })
}

fn human(
    store: &Store,
    r: &StoredRecord,
    inputs: &[Input],
    playback: Option<&Playback>,
    events: &[StoredSafetyEvent],
    result: &Value,
) {
    let none = "(none)";
    outln!("record #{}  {}  {}", r.id, r.serial, r.verdict.word());
    let line = |k: &str, v: &str| outln!("  {k:<13}{v}");
    line("time (UTC)", &r.time_utc);
    line(
        "plan",
        &format!(
            "{} revision {}, sha256 {}",
            r.plan_id, r.plan_revision, r.plan_sha256
        ),
    );
    line(
        "build",
        &match &r.build {
            Some(b) => format!("{b} (software {})", r.software_version),
            None => format!(
                "{} (no build identity: recorded before schema 4)",
                r.software_version
            ),
        },
    );
    let station_file = result["station"]["sha256"]
        .as_str()
        .map(|s| format!(", station file sha256 {s}"))
        .unwrap_or_default();
    let mode = result["station"]["mode"]
        .as_str()
        .map(|m| format!(" ({m}{station_file})"))
        .unwrap_or_default();
    line("station", &format!("{}{mode}", r.station));
    line("operator", &r.operator);
    let sim = result["simulated_unit"]
        .as_str()
        .map(|u| format!(" (simulated unit: {u})"))
        .unwrap_or_default();
    line("rig", &format!("{}{sim}", r.rig));
    line(
        "calibration",
        &format!(
            "{}, {}",
            r.calibration_mode
                .as_deref()
                .unwrap_or("not recorded (schema 1)"),
            r.calibration_sha256
                .as_deref()
                .map(|s| format!("sha256 {s}"))
                .unwrap_or_else(|| "no calibration applied".into())
        ),
    );
    line(
        "capture",
        &format!(
            "sha256 {}\n  {:<13}{}",
            r.capture_sha256,
            "",
            store.capture_path(&r.capture_sha256).display()
        ),
    );
    if r.inputs_json.is_none() {
        line("inputs", "not archived (recorded before schema 4)");
    } else if inputs.is_empty() {
        line("inputs", none);
    }
    if !inputs.is_empty() {
        outln!("  inputs (archived)");
    }
    for i in inputs {
        outln!("    {:<12} sha256 {}", i.role, i.sha256);
        match &i.bundle {
            Ok(b) => {
                outln!("    {:<12} main {}", "", b.main);
                for f in b.files.keys() {
                    let opt = b
                        .options
                        .iter()
                        .find(|(_, p)| *p == f)
                        .map(|(name, _)| format!(" ({name})"))
                        .unwrap_or_default();
                    outln!("    {:<12} file {f}{opt}", "");
                }
            }
            Err(e) => outln!("    {:<12} NOT READABLE: {e}", ""),
        }
    }
    match playback {
        None => line("playback", "not recorded (before schema 4)"),
        Some(p) => {
            let names: Vec<&str> = result["channels"]
                .as_array()
                .map(|c| c.iter().filter_map(|m| m["name"].as_str()).collect())
                .unwrap_or_default();
            let per_channel = |v: &Option<Vec<f64>>| match v {
                None => none.to_string(),
                Some(v) => v
                    .iter()
                    .enumerate()
                    .map(|(k, g)| match names.get(k) {
                        Some(n) => format!("{n} {g:+.2} dB"),
                        None => format!("#{} {g:+.2} dB", k + 1),
                    })
                    .collect::<Vec<_>>()
                    .join(", "),
            };
            let state = if p.abandoned {
                "sweep abandoned for hearing safety (nothing measured)"
            } else if p.drive_gain_db.iter().flatten().any(|&g| g != 0.0) {
                "sweep scaled down for hearing safety"
            } else {
                "sweep as planned"
            };
            line("playback", state);
            outln!("  {:<13}drive gain: {}", "", per_channel(&p.drive_gain_db));
            outln!(
                "  {:<13}calibration offsets: {}",
                "",
                per_channel(&p.calibration_offsets_db)
            );
        }
    }
    line("record hash", &r.record_hash);
    line("prev hash", &r.prev_hash);
    line(
        "signature",
        &match (&r.key_id, &r.signature) {
            (Some(k), Some(_)) => format!("present, key {k}"),
            (Some(k), None) => format!("MISSING (key {k} named)"),
            (None, Some(_)) => "present, no key id".into(),
            (None, None) => "unsigned".into(),
        },
    );
    if !events.is_empty() {
        outln!("  safety events");
        for e in events {
            outln!("    #{} {}: {}", e.id, e.kind.word(), e.message);
        }
    }
    let reasons = result["retest_reasons"]
        .as_array()
        .cloned()
        .unwrap_or_default();
    if !reasons.is_empty() {
        outln!("  retest reasons");
        for reason in reasons.iter().filter_map(Value::as_str) {
            outln!("    {reason}");
        }
    }
    checks_table(result);
}

/// The stored checks, one line each.
fn checks_table(result: &Value) {
    let checks = result["checks"].as_array().cloned().unwrap_or_default();
    if checks.is_empty() {
        outln!("  checks       {}", "(none)");
        return;
    }
    outln!(
        "  checks\n    {:<7} {:<14} {:<12} {:<12} {:>11} {:>10}",
        "verdict",
        "check",
        "kind",
        "channel",
        "margin dB",
        "at Hz"
    );
    for c in &checks {
        let num = |v: &Value, digits: usize| {
            v.as_f64()
                .map(|x| format!("{x:.digits$}"))
                .unwrap_or_else(|| "-".into())
        };
        outln!(
            "    {:<7} {:<14} {:<12} {:<12} {:>11} {:>10}",
            c["verdict"].as_str().unwrap_or("?").to_uppercase(),
            c["id"].as_str().unwrap_or("?"),
            c["kind"].as_str().unwrap_or("?"),
            c["channel"].as_str().unwrap_or("?"),
            num(&c["worst_margin_db"], 2),
            num(&c["at_hz"], 0)
        );
    }
}
