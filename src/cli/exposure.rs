//! `tragus exposure`: an operator's listening dose from the exposures in the store — the
//! NIOSH dose over the shift, the WHO/ITU-T H.870 weekly dose over the last 7 days, and the
//! minutes of listening left at a given level (issue 5 point 6).
//!
//! The arithmetic is [`ExposureLedger`]'s; this file reads the store, picks the windows and
//! prints. The shift is `--shift-start` for `--shift-hours` (default 8 h); without
//! `--shift-start` it is the `--shift-hours` up to now. "Now" is the clock, or `--now` for
//! an audit of a past shift. Exit 0 whatever the dose (this command only reports; the
//! station refuses listening steps), 2 on bad input.

use std::path::PathBuf;

use anyhow::anyhow;
use time::format_description::well_known::Rfc3339;
use time::OffsetDateTime;

use super::{Exit, JsonOut, EXIT_PASS};
use crate::safety::dose::{
    niosh_allowed_min, DosePolicy, ExposureLedger, ShiftWindow, WeeklyReference,
    NIOSH_CRITERION_DBA, WEEK_S,
};
use crate::store::Store;

/// Default shift length, h: the NIOSH REL criterion duration (NIOSH 98-126 ch. 1).
const DEFAULT_SHIFT_H: f64 = 8.0;

/// Arguments of `exposure`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// Operator id as the station records it.
    #[arg(long, value_name = "NAME")]
    pub operator: String,
    /// Start of the shift, UTC, e.g. 2025-03-14T06:00:00Z. Default: the shift ends now.
    #[arg(long, value_name = "ISO")]
    pub shift_start: Option<String>,
    /// Length of the shift, hours (above 0, at most 24: a NIOSH dose is per day).
    #[arg(long, value_name = "H", default_value_t = DEFAULT_SHIFT_H)]
    pub shift_hours: f64,
    /// Level at which to give the minutes of listening left, dB(A).
    #[arg(long, value_name = "L", default_value_t = NIOSH_CRITERION_DBA, allow_negative_numbers = true)]
    pub at_dba: f64,
    /// Weekly reference of WHO/ITU-T H.870: adult (1.6 Pa²h) or sensitive (0.51 Pa²h).
    #[arg(long, value_name = "WHO", default_value = "adult", value_parser = parse_reference)]
    pub weekly_reference: WeeklyReference,
    /// Evaluate as of this UTC instant instead of the clock (audits of a past shift).
    #[arg(long, value_name = "ISO")]
    pub now: Option<String>,
    /// Write the doses as JSON here (`-` for stdout).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

fn parse_reference(s: &str) -> Result<WeeklyReference, String> {
    match s {
        "adult" => Ok(WeeklyReference::Adult),
        "sensitive" => Ok(WeeklyReference::Sensitive),
        other => Err(format!("expected adult or sensitive, found {other:?}")),
    }
}

/// Parse `--NAME` as a UTC instant `YYYY-MM-DDTHH:MM:SS[.f]Z`; a local time is refused
/// because a shift must not move with the machine's time zone.
fn parse_utc(option: &str, s: &str) -> Result<OffsetDateTime, Exit> {
    // The store's own parser: the same `...Z` form as every `time_utc` in the store.
    crate::store::parse_time_utc(s).ok_or_else(|| {
        Exit::bad_input(anyhow!(
            "--{option}: expected a UTC time like 2025-03-14T06:00:00Z, found {s:?}"
        ))
    })
}

fn utc_text(unix_s: i64) -> String {
    OffsetDateTime::from_unix_timestamp(unix_s)
        .ok()
        .and_then(|t| t.format(&Rfc3339).ok())
        .unwrap_or_else(|| format!("unix {unix_s} s"))
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    if args.operator.trim().is_empty() {
        return Err(Exit::bad_input(anyhow!(
            "--operator: expected an operator id, found an empty one"
        )));
    }
    if !(args.shift_hours.is_finite() && args.shift_hours > 0.0 && args.shift_hours <= 24.0) {
        return Err(Exit::bad_input(anyhow!(
            "--shift-hours: expected a shift length above 0 h and at most 24 h, found {}",
            args.shift_hours
        )));
    }
    // 0 to 150 dB(A): below is no exposure worth a figure, above is no listening level.
    if !(args.at_dba.is_finite() && (0.0..=150.0).contains(&args.at_dba)) {
        return Err(Exit::bad_input(anyhow!(
            "--at-dba: expected a level from 0 to 150 dB(A), found {}",
            args.at_dba
        )));
    }
    let now_unix_s = match &args.now {
        Some(s) => parse_utc("now", s)?.unix_timestamp(),
        None => OffsetDateTime::now_utc().unix_timestamp(),
    };
    let length_s = args.shift_hours * 3600.0;
    let shift_start_unix_s = match &args.shift_start {
        Some(s) => parse_utc("shift-start", s)?.unix_timestamp(),
        // Whole seconds: the ledger's windows start on whole unix seconds.
        None => now_unix_s - length_s.round() as i64,
    };
    let shift = ShiftWindow {
        start_unix_s: shift_start_unix_s,
        length_s,
    };

    if !args.store.join(crate::store::DB_FILE).exists() {
        return Err(Exit::bad_input(anyhow!(
            "{}: expected a tragus store (a directory holding tragus.db), found none",
            args.store.display()
        )));
    }
    let store = Store::open(&args.store).map_err(Exit::bad_input)?;
    // Everything that can touch either window: the week before now and the shift.
    let since_unix_s = shift_start_unix_s.min(now_unix_s - WEEK_S);
    let exposures = store
        .exposures_for(&args.operator, since_unix_s)
        .map_err(Exit::bad_input)?;
    let n_exposures = exposures.len();
    let ledger = ExposureLedger::from_exposures(exposures).map_err(Exit::bad_input)?;
    let policy = DosePolicy {
        weekly_reference: args.weekly_reference,
        ..DosePolicy::default()
    };
    let status = ledger
        .status(&args.operator, shift, now_unix_s, &policy)
        .map_err(Exit::bad_input)?;
    // A step of 0 s: the decision for "now" (its verdict and minutes left at the level),
    // in the words the station shows before a listening step.
    let decision = ledger
        .decide_next(&args.operator, shift, now_unix_s, args.at_dba, 0.0, &policy)
        .map_err(Exit::bad_input)?;

    let shift_end_unix_s = shift_start_unix_s + length_s.round() as i64;
    if let Some(j) = &args.json {
        let doc = serde_json::json!({
            "operator": args.operator,
            "now_utc": utc_text(now_unix_s),
            "shift": {
                "start_utc": utc_text(shift_start_unix_s),
                "end_utc": utc_text(shift_end_unix_s),
                "length_s": length_s,
            },
            "week": {
                "start_utc": utc_text(now_unix_s - WEEK_S),
                "end_utc": utc_text(now_unix_s),
            },
            "n_exposures": n_exposures,
            "status": status,
            "at_dba": args.at_dba,
            "niosh_allowed_min_at_level": niosh_allowed_min(args.at_dba),
            "minutes_left_at_level": decision.minutes_left_at_level,
            "decision": decision,
            "message": decision.to_string(),
        });
        j.write(&doc).map_err(Exit::bad_input)?;
        if j.is_stdout() {
            return Ok(EXIT_PASS);
        }
    }
    outln!(
        "operator {}: shift {} to {} ({:.1} h), week {} to {}, {} exposure(s) in the store",
        args.operator,
        utc_text(shift_start_unix_s),
        utc_text(shift_end_unix_s),
        args.shift_hours,
        utc_text(now_unix_s - WEEK_S),
        utc_text(now_unix_s),
        n_exposures
    );
    outln!(
        "NIOSH shift dose: {:.1} % ({:.1} min listened in the shift; NIOSH REL 85 dB(A) for 8 h, 3 dB exchange rate)",
        status.niosh_percent,
        status.shift_listened_s / 60.0
    );
    outln!(
        "weekly dose (WHO/ITU-T H.870, {} {} Pa²h): {:.4} Pa²h = {:.1} %",
        policy.weekly_reference.words(),
        status.weekly_reference_pa2h,
        status.weekly_pa2h,
        status.weekly_percent
    );
    outln!(
        "at {:.1} dB(A): {:.1} min of listening left before a dose reaches {:.0} %",
        args.at_dba,
        decision.minutes_left_at_level,
        policy.refuse_percent
    );
    outln!("{decision}");
    Ok(EXIT_PASS)
}
