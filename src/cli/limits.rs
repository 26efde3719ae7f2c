//! `tragus limits derive`: limits from golden units ([`crate::bench::derive`]).
//!
//! Parses the options, runs the derivation, prints a table of the checks. Exit 0 when the
//! files were written and the new plan passes every golden unit, 1 when written but some
//! golden unit fails it (the table and the report say which), 2 on bad input.

use std::path::PathBuf;

use anyhow::anyhow;
use time::OffsetDateTime;

use super::{Exit, JsonOut, EXIT_FAIL, EXIT_PASS};
use crate::bench::derive::checks::Floors;
use crate::bench::derive::report::{CheckReport, Counts};
use crate::bench::derive::select::{read_serial_list, UnitSelection};
use crate::bench::derive::{derive, DeriveOptions};
use crate::limits::{Method, Settings};

/// `tragus limits …`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to do.
    #[command(subcommand)]
    pub command: LimitsCommand,
}

/// The `limits` subcommands.
#[derive(Debug, clap::Subcommand)]
pub enum LimitsCommand {
    /// Derive a plan's limits from golden units in a store: writes the limit CSVs, a new
    /// plan revision, derive-report.json and derive-preview.html into --out.
    Derive(Box<DeriveArgs>),
}

/// `tragus limits derive`.
#[derive(Debug, clap::Args)]
pub struct DeriveArgs {
    /// Store directory holding the golden units' records.
    #[arg(long, value_name = "DIR")]
    pub store: PathBuf,
    /// The plan whose limits are derived (its checks, bands and smoothing are kept).
    #[arg(long, value_name = "PLAN.yaml")]
    pub plan: PathBuf,
    /// Directory for the new plan, its limits/ and the report (created when missing).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Golden units: a file of serial numbers, one per line (`#` comments).
    #[arg(long, value_name = "FILE")]
    pub serials: Option<PathBuf>,
    /// Golden units: records measured at or after this instant, UTC
    /// `YYYY-MM-DDTHH:MM:SS[.f]Z` (units whose latest record failed are left out).
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub since: Option<OffsetDateTime>,
    /// Golden units: records measured before this instant (exclusive).
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub until: Option<OffsetDateTime>,
    /// Validation units (pass and fail alike): a serial-number file.
    #[arg(long, value_name = "FILE")]
    pub validate_serials: Option<PathBuf>,
    /// Validation units: records measured at or after this instant.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub validate_since: Option<OffsetDateTime>,
    /// Validation units: records measured before this instant.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub validate_until: Option<OffsetDateTime>,
    /// Standard deviations from the golden mean to a limit.
    #[arg(long, value_name = "K", default_value_t = crate::limits::DEFAULT_K)]
    pub k: f64,
    /// Smallest distance from the golden mean to a limit, dB.
    #[arg(long, value_name = "DB", default_value_t = crate::limits::DEFAULT_MIN_HALF_WIDTH_DB)]
    pub min_half_width_db: f64,
    /// Largest distance from the golden mean to a limit, dB.
    #[arg(long, value_name = "DB", default_value_t = crate::limits::DEFAULT_MAX_HALF_WIDTH_DB)]
    pub max_half_width_db: f64,
    /// Smooth the golden curves' spread (σ) over 1/N octave before drawing the lines
    /// (default: not smoothed; the curves themselves are smoothed as each check smooths).
    #[arg(long, value_name = "1/N", value_parser = parse_fraction)]
    pub smoothing: Option<u32>,
    /// Bound of the thinning error: the written line lies within this of the derived one,
    /// and only ever wider, dB.
    #[arg(long, value_name = "DB", default_value_t = crate::limits::DEFAULT_MAX_ERROR_DB)]
    pub max_error_db: f64,
    /// Scalar limits at the golden Q-quantile (and 1−Q below) instead of mean ± k·σ
    /// (0.5 < Q < 1), still within the half-width bounds.
    #[arg(long, value_name = "Q")]
    pub quantile: Option<f64>,
    /// An upper limit never below this: thd=PERCENT, harmonic=DB, rub_buzz=DB or
    /// balance=DB (repeatable).
    #[arg(long, value_name = "KIND=VALUE", value_parser = parse_floor)]
    pub floor: Vec<(String, f64)>,
    /// Do not widen a limit to take in golden values beyond mean ± k·σ (by default every
    /// line, and every scalar limit of the sigma method, reaches at least the farthest
    /// golden value on its side).
    #[arg(long)]
    pub no_cover: bool,
    /// One check per channel (`<id>-<channel>`) instead of one limit for all channels.
    #[arg(long)]
    pub per_channel: bool,
    /// Derive only this check (repeatable); the others are kept as they are.
    #[arg(long = "check", value_name = "ID")]
    pub checks: Vec<String>,
    /// Overwrite files already in --out.
    #[arg(long)]
    pub force: bool,
    /// Also write the report as JSON to this file (`-` for standard output).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

fn parse_time(s: &str) -> Result<OffsetDateTime, String> {
    crate::store::parse_time_utc(s)
        .ok_or_else(|| format!("expected a UTC time like 2025-03-14T06:00:00Z, found {s:?}"))
}

fn parse_fraction(s: &str) -> Result<u32, String> {
    s.strip_prefix("1/")
        .and_then(|n| n.parse::<u32>().ok())
        .filter(|n| *n > 0)
        .ok_or_else(|| format!("expected 1/N with N a whole number ≥ 1 (1/3, 1/6), found {s:?}"))
}

fn parse_floor(s: &str) -> Result<(String, f64), String> {
    let (kind, value) = s
        .split_once('=')
        .ok_or_else(|| format!("expected KIND=VALUE (thd=0.5), found {s:?}"))?;
    if !["thd", "harmonic", "rub_buzz", "balance"].contains(&kind) {
        return Err(format!(
            "expected a kind thd, harmonic, rub_buzz or balance, found {kind:?}"
        ));
    }
    let v: f64 = value
        .parse()
        .ok()
        .filter(|v: &f64| v.is_finite())
        .ok_or_else(|| format!("expected a number after {kind}=, found {value:?}"))?;
    Ok((kind.to_string(), v))
}

/// Run `tragus limits`.
pub fn run(args: Args) -> Result<i32, Exit> {
    match args.command {
        LimitsCommand::Derive(a) => run_derive(*a),
    }
}

fn selection(
    serials: &Option<PathBuf>,
    since: Option<OffsetDateTime>,
    until: Option<OffsetDateTime>,
) -> Result<UnitSelection, Exit> {
    Ok(UnitSelection {
        serials: match serials {
            Some(p) => Some(read_serial_list(p)?),
            None => None,
        },
        since,
        until,
    })
}

fn run_derive(a: DeriveArgs) -> Result<i32, Exit> {
    let mut floors = Floors::default();
    for (kind, v) in &a.floor {
        let slot = match kind.as_str() {
            "thd" => &mut floors.thd_percent,
            "harmonic" => &mut floors.harmonic_db,
            "rub_buzz" => &mut floors.rub_buzz_db,
            _ => &mut floors.balance_db,
        };
        if slot.replace(*v).is_some() {
            return Err(Exit::bad_input(anyhow!(
                "--floor {kind}: expected once, found twice"
            )));
        }
    }
    let golden = selection(&a.serials, a.since, a.until)?;
    let validation = selection(&a.validate_serials, a.validate_since, a.validate_until)?;
    let options = DeriveOptions {
        store: a.store.clone(),
        plan: a.plan.clone(),
        out: a.out.clone(),
        golden,
        validation: (!validation.is_empty()).then_some(validation),
        settings: Settings {
            k: a.k,
            min_half_width_db: a.min_half_width_db,
            max_half_width_db: a.max_half_width_db,
            smoothing_fraction: a.smoothing,
            max_error_db: a.max_error_db,
            method: a.quantile.map_or(Method::Sigma, Method::Quantile),
            cover_golden: !a.no_cover,
        },
        floors,
        per_channel: a.per_channel,
        only: a.checks.clone(),
        force: a.force,
    };
    let d = derive(&options)?;
    let r = &d.report;
    if let Some(json) = &a.json {
        json.write(r).map_err(Exit::bad_input)?;
        if json.is_stdout() {
            return Ok(exit_code(&d));
        }
    }
    outln!(
        "new plan    {} (revision {}, sha256 {})",
        d.plan_path.display(),
        r.new_plan.revision,
        &r.new_plan.sha256[..16.min(r.new_plan.sha256.len())]
    );
    outln!(
        "golden      {} units, {} pass the new plan{}",
        r.golden.n_units,
        r.golden.n_pass,
        percent(r.golden.predicted_yield)
    );
    if let Some(v) = &r.validation {
        outln!(
            "validation  {} units, {} pass the new plan{}",
            v.n_units,
            v.n_pass,
            percent(v.predicted_yield)
        );
    }
    outln!();
    let rows: Vec<[String; 8]> = r.checks.iter().map(row).collect();
    let head = [
        "check",
        "kind",
        "channels",
        "new limits",
        "Cp",
        "Cpk",
        "golden",
        "validation",
    ]
    .map(String::from);
    let widths: Vec<usize> = (0..8)
        .map(|i| {
            rows.iter()
                .map(|r| r[i].chars().count())
                .chain([head[i].len()])
                .max()
                .unwrap_or(0)
        })
        .collect();
    for line in std::iter::once(&head).chain(&rows) {
        let cells: Vec<String> = line
            .iter()
            .zip(&widths)
            .map(|(c, w)| format!("{c:<w$}"))
            .collect();
        outln!("{}", cells.join("  ").trim_end());
    }
    for k in &r.kept {
        outln!("kept        {} ({}): {}", k.id, k.kind, k.reason);
    }
    for u in r
        .golden
        .units
        .iter()
        .filter(|u| !u.failed_checks.is_empty())
    {
        outln!(
            "FAIL        golden unit {} fails {} under the new plan",
            u.serial,
            u.failed_checks.join(", ")
        );
    }
    outln!();
    outln!("report      {}", d.report_path.display());
    outln!("preview     {}", d.preview_path.display());
    Ok(exit_code(&d))
}

fn exit_code(d: &crate::bench::derive::Derivation) -> i32 {
    if d.golden_all_pass() {
        EXIT_PASS
    } else {
        EXIT_FAIL
    }
}

fn percent(y: Option<f64>) -> String {
    y.map_or(String::new(), |y| format!(" ({:.1} %)", 100.0 * y))
}

fn row(c: &CheckReport) -> [String; 8] {
    let limits = if c.lines.is_empty() {
        c.new_limits
            .as_object()
            .map(|o| {
                o.iter()
                    .map(|(k, v)| format!("{k} {v}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            })
            .unwrap_or_default()
    } else {
        c.lines
            .iter()
            .map(|l| format!("{} {} pts", l.side.word(), l.n_points))
            .collect::<Vec<_>>()
            .join(", ")
    };
    let num = |v: Option<f64>| v.map_or("-".to_string(), |v| format!("{v:.2}"));
    let count = |n: Option<Counts>| {
        n.map_or("-".to_string(), |n| {
            format!("{}/{}", n.n_pass, n.n_pass + n.n_fail + n.n_retest)
        })
    };
    [
        c.id.clone(),
        c.kind.clone(),
        c.channels.join(","),
        limits,
        num(c.cp),
        num(c.cpk),
        count(Some(c.golden_counts)),
        count(c.validation_counts),
    ]
}
