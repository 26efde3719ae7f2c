//! `tragus records` and `tragus verify`: what auditors read of a store.

use super::{Exit, JsonOut, EXIT_FAIL, EXIT_PASS};
use crate::store::{RecordFilter, Store};
use std::path::PathBuf;

/// Arguments of `records`.
#[derive(Debug, clap::Args)]
pub struct ListArgs {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// Only this serial number.
    #[arg(long)]
    pub serial: Option<String>,
    /// At most this many records.
    #[arg(long, default_value_t = 50)]
    pub limit: usize,
    /// Write the records as JSON here (`-` for stdout).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

/// Arguments of `verify`.
#[derive(Debug, clap::Args)]
pub struct VerifyArgs {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
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
        limit: Some(args.limit),
        ..RecordFilter::default()
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
        Ok(EXIT_PASS)
    } else {
        outln!("NOT INTACT: {} problem(s)", report.problems.len());
        Ok(EXIT_FAIL)
    }
}
