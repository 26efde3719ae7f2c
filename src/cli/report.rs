//! `tragus report`: the auditor's HTML report of a store (built by
//! [`crate::report::audit`]), written atomically to `--out`. Exit 0 when written and the
//! store verifies, 1 when written but verification found problems, 2 on bad input.

use std::path::{Path, PathBuf};

use anyhow::anyhow;
use time::OffsetDateTime;

use super::{write_atomic, Exit, EXIT_FAIL, EXIT_PASS};
use crate::report::audit::{
    build_report, AuditOptions, Selection, DEFAULT_DETAIL_LIMIT, DEFAULT_OVERLAY_LIMIT,
};
use crate::store::Store;

/// The record selection shared by `report` and `export`.
#[derive(Debug, Clone, clap::Args)]
pub struct SelectionArgs {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// Only records measured at or after this instant (inclusive), UTC
    /// `YYYY-MM-DDTHH:MM:SS[.f]Z`.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub since: Option<OffsetDateTime>,
    /// Only records measured before this instant (exclusive), UTC `YYYY-MM-DDTHH:MM:SS[.f]Z`.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub until: Option<OffsetDateTime>,
    /// Only records of this plan id.
    #[arg(long, value_name = "ID")]
    pub plan: Option<String>,
    /// Only records of this station id.
    #[arg(long, value_name = "ID")]
    pub station: Option<String>,
}

impl SelectionArgs {
    /// The library's selection.
    pub fn selection(&self) -> Selection {
        Selection {
            since: self.since,
            until: self.until,
            plan_id: self.plan.clone(),
            station: self.station.clone(),
        }
    }
}

/// The store's own time form, so a window means exactly what `time_utc` holds.
fn parse_time(s: &str) -> Result<OffsetDateTime, String> {
    crate::store::parse_time_utc(s)
        .ok_or_else(|| format!("expected a UTC time like 2025-03-14T06:00:00Z, found {s:?}"))
}

/// Open an existing store; a directory without one is bad input (never created here: a
/// report or export only reads).
pub(crate) fn open_existing(dir: &Path) -> Result<Store, Exit> {
    if !dir.join(crate::store::DB_FILE).is_file() {
        return Err(Exit::bad_input(anyhow!(
            "{}: expected a tragus store (a directory holding {}), found none",
            dir.display(),
            crate::store::DB_FILE
        )));
    }
    Store::open(dir).map_err(Exit::bad_input)
}

/// Arguments of `report`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Which records.
    #[command(flatten)]
    pub select: SelectionArgs,
    /// The HTML file to write.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// A plan file whose response limit lines are drawn for the records it judged (matched
    /// by the plan's SHA-256); repeatable.
    #[arg(long, value_name = "PLAN")]
    pub limits_from: Vec<PathBuf>,
    /// Most units with a detailed section (charts, check tables, provenance); every other
    /// unit gets a row.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_DETAIL_LIMIT)]
    pub detail_limit: usize,
    /// Most units whose curves are drawn one by one in each response overlay.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_OVERLAY_LIMIT)]
    pub overlay_limit: usize,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let store = open_existing(&args.select.store)?;
    let options = AuditOptions {
        selection: args.select.selection(),
        limits_from: args.limits_from,
        detail_limit: args.detail_limit,
        overlay_limit: args.overlay_limit,
    };
    let report = build_report(&store, &options).map_err(Exit::bad_input)?;
    write_atomic(&args.out, report.html.as_bytes()).map_err(Exit::bad_input)?;
    let s = &report.summary;
    outln!(
        "{}: {} unit(s), {} record(s), yield {}, {} detailed unit section(s), {} response overlay(s), {:.1} MB",
        args.out.display(),
        s.n_units,
        s.n_records,
        s.yield_fraction
            .map_or("—".to_string(), |y| format!("{:.1} %", 100.0 * y)),
        s.n_detailed,
        s.n_overlays,
        report.html.len() as f64 / 1e6
    );
    if s.intact {
        outln!("store INTACT");
        Ok(EXIT_PASS)
    } else {
        outln!(
            "store NOT INTACT: {} problem(s), listed in the report (and by `tragus verify`)",
            s.n_problems
        );
        Ok(EXIT_FAIL)
    }
}
