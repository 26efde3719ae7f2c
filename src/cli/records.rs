//! `tragus records` and `tragus verify`: what auditors read of a store.

use super::{Exit, JsonOut, EXIT_FAIL, EXIT_PASS};
use crate::store::{RecordFilter, Store};
use crate::Verdict;
use std::path::PathBuf;
use time::OffsetDateTime;

/// Arguments of `records`.
#[derive(Debug, clap::Args)]
pub struct ListArgs {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// Only this serial number.
    #[arg(long)]
    pub serial: Option<String>,
    /// Only units tested with this plan id.
    #[arg(long, value_name = "ID")]
    pub plan: Option<String>,
    /// Only units with this verdict: pass, fail or retest.
    #[arg(long, value_name = "VERDICT", value_parser = parse_verdict)]
    pub verdict: Option<Verdict>,
    /// Only units measured at or after this instant (inclusive), UTC
    /// `YYYY-MM-DDTHH:MM:SS[.f]Z`.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub since: Option<OffsetDateTime>,
    /// Only units measured before this instant (exclusive), UTC `YYYY-MM-DDTHH:MM:SS[.f]Z`.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub until: Option<OffsetDateTime>,
    /// At most this many records: the newest ones.
    #[arg(long, default_value_t = 50)]
    pub limit: usize,
    /// Write the records as JSON here (`-` for stdout).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

fn parse_verdict(s: &str) -> Result<Verdict, String> {
    match s {
        "pass" => Ok(Verdict::Pass),
        "fail" => Ok(Verdict::Fail),
        "retest" => Ok(Verdict::Retest),
        _ => Err(format!("expected pass, fail or retest, found {s:?}")),
    }
}

/// The store's own time form, so a filter means exactly what `time_utc` holds (a local
/// time would shift the window with the machine's zone).
fn parse_time(s: &str) -> Result<OffsetDateTime, String> {
    crate::store::parse_time_utc(s)
        .ok_or_else(|| format!("expected a UTC time like 2025-03-14T06:00:00Z, found {s:?}"))
}

/// Arguments of `verify`.
#[derive(Debug, clap::Args)]
pub struct VerifyArgs {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// Write the verification report as JSON here (`-` for stdout: the human report then
    /// goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

fn open(dir: &std::path::Path) -> Result<Store, Exit> {
    if !dir.join("tragus.db").exists() {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "{}: expected a tragus store (a directory holding tragus.db), found none",
            dir.display()
        )));
    }
    Store::open(dir).map_err(Exit::bad_input)
}

pub(crate) fn list(args: ListArgs) -> Result<i32, Exit> {
    let store = open(&args.store)?;
    let filter = RecordFilter {
        serial: args.serial.clone(),
        plan_id: args.plan.clone(),
        verdict: args.verdict,
        since: args.since,
        until: args.until,
        limit: Some(args.limit),
        newest_first: true,
    };
    let records = store.list(&filter).map_err(Exit::bad_input)?;
    if let Some(j) = &args.json {
        let docs: Vec<serde_json::Value> = records
            .iter()
            .map(|r| {
                serde_json::json!({
                    "id": r.id, "time_utc": r.time_utc, "serial": r.serial,
                    "plan": {"id": r.plan_id, "revision": r.plan_revision, "sha256": r.plan_sha256},
                    "software_version": r.software_version, "station": r.station,
                    "operator": r.operator, "rig": r.rig, "verdict": r.verdict,
                    "capture_sha256": r.capture_sha256, "prev_hash": r.prev_hash,
                    "record_hash": r.record_hash,
                    "calibration": {"mode": r.calibration_mode, "sha256": r.calibration_sha256},
                })
            })
            .collect();
        j.write(&docs).map_err(Exit::bad_input)?;
        if j.is_stdout() {
            return Ok(EXIT_PASS);
        }
    }
    outln!(
        "{:>6}  {:<24}  {:<12}  {:<20}  {:<6}  record hash",
        "#",
        "time (UTC)",
        "serial",
        "plan",
        "verdict"
    );
    for r in &records {
        outln!(
            "{:>6}  {:<24}  {:<12}  {:<20}  {:<6}  {}",
            r.id,
            r.time_utc,
            r.serial,
            format!("{} r{}", r.plan_id, r.plan_revision),
            r.verdict.word(),
            &r.record_hash[..16.min(r.record_hash.len())]
        );
    }
    Ok(EXIT_PASS)
}

pub(crate) fn verify(args: VerifyArgs) -> Result<i32, Exit> {
    let store = open(&args.store)?;
    let report = store.verify().map_err(Exit::bad_input)?;
    let code = if report.is_intact() {
        EXIT_PASS
    } else {
        EXIT_FAIL
    };
    if let Some(j) = &args.json {
        j.write(&verify_json(&args.store, &report))
            .map_err(Exit::bad_input)?;
        if j.is_stdout() {
            return Ok(code);
        }
    }
    outln!(
        "{} record(s), {} capture file(s) rehashed, head hash {}",
        report.n_records,
        report.n_captures_checked,
        report.head_hash
    );
    outln!(
        "{} safety event(s), head hash {}; {} exposure(s), head hash {}",
        report.n_safety_events,
        report.safety_events_head_hash,
        report.n_exposures,
        report.exposures_head_hash
    );
    for p in &report.problems {
        outln!("PROBLEM {p}");
    }
    for n in &report.notices {
        outln!("notice  {n}");
    }
    if report.is_intact() {
        outln!(
            "INTACT: every record hash, chain link and raw capture, and every safety event and exposure hash and link, checks out"
        );
    } else {
        outln!("NOT INTACT: {} problem(s)", report.problems.len());
    }
    Ok(code)
}

/// The verification report as one JSON document: the counts and head hashes of the three
/// chains, `intact`, and every problem and notice with a `kind` word for tools and its
/// sentence (`message`, the human report's text) for people.
fn verify_json(dir: &std::path::Path, report: &crate::store::VerifyReport) -> serde_json::Value {
    use crate::store::{Notice, ProblemKind};
    let problems: Vec<serde_json::Value> = report
        .problems
        .iter()
        .map(|p| {
            let kind = match &p.kind {
                ProblemKind::RecordHashMismatch { .. } => "record_hash_mismatch",
                ProblemKind::ChainBroken { .. } => "chain_broken",
                ProblemKind::RecordsMissing { .. } => "records_missing",
                ProblemKind::FieldDamaged { .. } => "field_damaged",
                ProblemKind::TimeIndexMismatch => "time_index_mismatch",
                ProblemKind::CaptureMissing { .. } => "capture_missing",
                ProblemKind::CaptureAltered { .. } => "capture_altered",
                ProblemKind::ChainRow { .. } => "chain_row",
                ProblemKind::TriggerMissing { .. } => "trigger_missing",
                ProblemKind::TriggerAltered { .. } => "trigger_altered",
                ProblemKind::DatabaseDamaged { .. } => "database_damaged",
            };
            let (table, row_id) = match &p.kind {
                ProblemKind::ChainRow { table, id, .. } => (Some(table.name()), Some(*id)),
                _ => (None, None),
            };
            serde_json::json!({
                "record_id": p.record_id, "table": table, "row_id": row_id,
                "kind": kind, "message": p.to_string(),
            })
        })
        .collect();
    let notices: Vec<serde_json::Value> = report
        .notices
        .iter()
        .map(|n| {
            let (kind, path) = match n {
                Notice::OrphanCapture { path } => ("orphan_capture", path),
                Notice::LeftoverTemp { path } => ("leftover_temp", path),
                Notice::UnexpectedFile { path } => ("unexpected_file", path),
            };
            serde_json::json!({"kind": kind, "path": path, "message": n.to_string()})
        })
        .collect();
    serde_json::json!({
        "store": dir,
        "intact": report.is_intact(),
        "records": {"count": report.n_records, "head_hash": report.head_hash},
        "captures_checked": report.n_captures_checked,
        "safety_events": {
            "count": report.n_safety_events, "head_hash": report.safety_events_head_hash,
        },
        "exposures": {"count": report.n_exposures, "head_hash": report.exposures_head_hash},
        "problems": problems,
        "notices": notices,
    })
}
