//! `tragus records` and `tragus verify`: what auditors read of a store, both pure readers
//! (the store is opened read-only and never migrated).

use super::{Exit, JsonOut, EXIT_FAIL, EXIT_PASS};
use crate::store::{
    verify_dir, Checkpoint, ProblemKind, RecordFilter, Store, VerifyOptions, VerifyReport,
};
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
    /// The auditor's keyring: every record, safety event and exposure must then be signed
    /// by a key of its station, valid at its time.
    #[arg(long, value_name = "KEYRING")]
    pub keys: Option<PathBuf>,
    /// A signed checkpoint the store must still match (repeat for several; needs --keys).
    #[arg(long = "checkpoint", value_name = "FILE")]
    pub checkpoints: Vec<PathBuf>,
    /// Write the verification report as JSON here (`-` for stdout: the human report then
    /// goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

/// The store in `dir` opened read-only (never migrated, nothing written).
fn open(dir: &std::path::Path) -> Result<Store, Exit> {
    require_store(dir)?;
    Store::open_read_only(dir).map_err(Exit::bad_input)
}

/// Exit 2 unless `dir` holds a store database.
pub(crate) fn require_store(dir: &std::path::Path) -> Result<(), Exit> {
    if !dir.join(crate::store::DB_FILE).is_file() {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "{}: expected a tragus store (a directory holding tragus.db), found none",
            dir.display()
        )));
    }
    Ok(())
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
    if !args.checkpoints.is_empty() && args.keys.is_none() {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--checkpoint: a checkpoint counts only by its signature; give the keyring with \
             --keys KEYRING too"
        )));
    }
    require_store(&args.store)?;
    let keyring = match &args.keys {
        Some(path) => Some(super::key_files::load_keyring(path)?),
        None => None,
    };
    let checkpoints = args
        .checkpoints
        .iter()
        .map(|p| Checkpoint::load(p).map_err(Exit::bad_input))
        .collect::<Result<Vec<_>, _>>()?;
    let options = VerifyOptions {
        keyring: keyring.as_ref(),
        checkpoints,
    };
    let report = verify_dir(&args.store, &options).map_err(Exit::bad_input)?;
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
    print_report(&report, args.keys.as_deref());
    Ok(code)
}

/// The human report: counts and heads, signatures, checkpoints, every problem and notice,
/// and the verdict line.
fn print_report(report: &VerifyReport, keys: Option<&std::path::Path>) {
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
    outln!(
        "schema {}, store id {}; {} archived input(s) rehashed",
        report.schema_version,
        report.store_id.as_deref().unwrap_or("(none)"),
        report.n_archived_checked
    );
    let s = &report.signatures;
    outln!(
        "signatures: records {}/{} signed, safety events {}/{}, exposures {}/{}; {}",
        s.records.signed,
        s.records.signed + s.records.unsigned,
        s.safety_events.signed,
        s.safety_events.signed + s.safety_events.unsigned,
        s.exposures.signed,
        s.exposures.signed + s.exposures.unsigned,
        match keys {
            Some(k) => format!("checked against {}", k.display()),
            None => "not checked (no --keys)".to_string(),
        }
    );
    for c in &report.checkpoints {
        outln!(
            "checkpoint {} ({}): {} record(s), {} safety event(s), {} exposure(s): {}",
            c.source,
            c.time_utc,
            c.counts[0],
            c.counts[1],
            c.counts[2],
            if c.matched {
                "matches"
            } else {
                "DOES NOT MATCH"
            }
        );
    }
    for p in &report.problems {
        outln!("PROBLEM {p}");
    }
    for n in &report.notices {
        outln!("notice  {n}");
    }
    if report.is_intact() {
        outln!(
            "INTACT: every record hash, chain link and raw capture, every archived input, every \
             safety event and exposure hash and link, and the schema objects check out{}{}",
            if report.signatures_checked {
                "; every signature verifies"
            } else {
                ""
            },
            if report.checkpoints.is_empty() {
                String::new()
            } else {
                format!(
                    "; the store matches {} checkpoint(s)",
                    report.checkpoints.len()
                )
            }
        );
    } else {
        outln!("NOT INTACT: {} problem(s)", report.problems.len());
    }
}

/// The verification report as one JSON document: the counts and head hashes of the three
/// chains, signatures, checkpoints, `intact`, and every problem and notice with a `kind`
/// word for tools and its sentence (`message`, the human report's text) for people.
fn verify_json(dir: &std::path::Path, report: &VerifyReport) -> serde_json::Value {
    let problems: Vec<serde_json::Value> = report
        .problems
        .iter()
        .map(|p| {
            let (table, row_id) = match &p.kind {
                ProblemKind::ChainRow { table, id, .. } => (Some(table.name()), Some(*id)),
                _ => (None, None),
            };
            serde_json::json!({
                "record_id": p.record_id, "table": table, "row_id": row_id,
                "kind": p.kind.word(), "message": p.to_string(),
            })
        })
        .collect();
    let notices: Vec<serde_json::Value> = report
        .notices
        .iter()
        .map(|n| serde_json::json!({"kind": n.word(), "path": n.path(), "message": n.to_string()}))
        .collect();
    let sig = |c: &crate::store::SignatureCount| serde_json::json!({"signed": c.signed, "unsigned": c.unsigned});
    let checkpoints: Vec<serde_json::Value> = report
        .checkpoints
        .iter()
        .map(|c| {
            serde_json::json!({
                "file": c.source, "time_utc": c.time_utc, "records": c.counts[0],
                "safety_events": c.counts[1], "exposures": c.counts[2], "matched": c.matched,
            })
        })
        .collect();
    serde_json::json!({
        "store": dir,
        "intact": report.is_intact(),
        "schema_version": report.schema_version,
        "store_id": report.store_id,
        "records": {"count": report.n_records, "head_hash": report.head_hash},
        "captures_checked": report.n_captures_checked,
        "archived_inputs_checked": report.n_archived_checked,
        "safety_events": {
            "count": report.n_safety_events, "head_hash": report.safety_events_head_hash,
        },
        "exposures": {"count": report.n_exposures, "head_hash": report.exposures_head_hash},
        "signatures": {
            "checked": report.signatures_checked,
            "records": sig(&report.signatures.records),
            "safety_events": sig(&report.signatures.safety_events),
            "exposures": sig(&report.signatures.exposures),
        },
        "checkpoints": checkpoints,
        "problems": problems,
        "notices": notices,
    })
}
