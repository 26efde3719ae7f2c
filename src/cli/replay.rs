//! `tragus replay --store DIR --plan PLAN.yaml [--since T] [--until T] [--serial SN]...
//! [--station ID] [--jobs N] [--json OUT]`: the stored captures judged again under another
//! plan ([`crate::bench::replay`]), and what changed.

use super::{Exit, JsonOut, EXIT_PASS};
use crate::bench::replay::{Replay, ReplayOptions, ReplayReport};
use std::io::IsTerminal;
use std::path::PathBuf;
use time::OffsetDateTime;

/// Arguments of `replay`.
#[derive(Debug, clap::Args)]
#[command(
    after_help = "Exit codes: 0 done (also when verdicts changed), 2 bad input. The \
    store is only read: nothing is written into it."
)]
pub struct Args {
    /// The store whose records are judged again (opened read-only).
    #[arg(long, value_name = "DIR")]
    pub store: PathBuf,
    /// The plan (or revision) to judge them under.
    #[arg(long, value_name = "PLAN.yaml")]
    pub plan: PathBuf,
    /// Only records measured at or after this instant (inclusive), UTC
    /// `YYYY-MM-DDTHH:MM:SS[.f]Z`.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub since: Option<OffsetDateTime>,
    /// Only records measured before this instant (exclusive), UTC.
    #[arg(long, value_name = "TIME", value_parser = parse_time)]
    pub until: Option<OffsetDateTime>,
    /// Only this serial number (repeat for more).
    #[arg(long = "serial", value_name = "SN")]
    pub serials: Vec<String>,
    /// Only records of this station id.
    #[arg(long, value_name = "ID")]
    pub station: Option<String>,
    /// Threads judging records (default: one per core).
    #[arg(long, value_name = "N")]
    pub jobs: Option<usize>,
    /// Write the report as JSON here, with every record's verdicts and check margins
    /// before and after (`-` for stdout: the summary then goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

/// The store's own time form, so a window means exactly what `time_utc` holds.
fn parse_time(s: &str) -> Result<OffsetDateTime, String> {
    crate::store::parse_time_utc(s)
        .ok_or_else(|| format!("expected a UTC time like 2025-03-14T06:00:00Z, found {s:?}"))
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let options = ReplayOptions {
        since: args.since,
        until: args.until,
        serials: args.serials.clone(),
        station: args.station.clone(),
        jobs: args.jobs,
    };
    let replay = Replay::open(&args.store, &args.plan, &options)?;
    let bar = std::io::stderr().is_terminal().then(|| {
        let pb = indicatif::ProgressBar::with_draw_target(
            Some(replay.len() as u64),
            indicatif::ProgressDrawTarget::stderr(),
        );
        if let Ok(style) = indicatif::ProgressStyle::with_template(
            "replay {bar:40} {pos}/{len} records ({per_sec}, {eta} left)",
        ) {
            pb.set_style(style);
        }
        pb
    });
    let tick = || {
        if let Some(pb) = &bar {
            pb.inc(1);
        }
    };
    let report = replay.run(&tick)?;
    if let Some(pb) = &bar {
        pb.finish_and_clear();
    }
    if let Some(j) = &args.json {
        j.write(&report).map_err(Exit::bad_input)?;
    }
    if !args.json.as_ref().is_some_and(JsonOut::is_stdout) {
        out!("{}", render(&report));
    }
    Ok(EXIT_PASS)
}

/// Serials for a line: the first few, then how many more.
fn serials(list: &[String]) -> String {
    const SHOWN: usize = 8;
    let mut s = list
        .iter()
        .take(SHOWN)
        .cloned()
        .collect::<Vec<_>>()
        .join(", ");
    if list.len() > SHOWN {
        s.push_str(&format!(", … ({} more)", list.len() - SHOWN));
    }
    s
}

fn percent(n: usize, of: usize) -> String {
    if of == 0 {
        "–".into()
    } else {
        format!("{:.1} % ({n}/{of})", 100.0 * n as f64 / of as f64)
    }
}

fn margin(m: &Option<(f64, String)>) -> String {
    match m {
        Some((v, serial)) => format!("{v:+.2} dB ({serial})"),
        None => "–".into(),
    }
}

/// The summary for people.
fn render(r: &ReplayReport) -> String {
    let mut s = format!(
        "replay of {} under plan {} revision {} (sha256 {})\n",
        r.store, r.plan_id, r.plan_revision, r.plan_sha256
    );
    s.push_str(&format!(
        "{} record(s) selected: {} replayed ({} unit(s)), {} not replayable\n",
        r.n_selected, r.n_replayed, r.n_units, r.n_not_replayable
    ));
    if !r.not_replayable.is_empty() {
        s.push_str("\nnot replayable:\n");
        for n in &r.not_replayable {
            s.push_str(&format!(
                "  #{} {} ({}, {}): {}\n",
                n.record_id, n.serial, n.station, n.plan, n.reason
            ));
        }
    }
    s.push_str("\nverdict transitions:\n");
    if r.transitions.is_empty() {
        s.push_str("  none\n");
    }
    for t in &r.transitions {
        s.push_str(&format!(
            "  {:>6} → {:<6} {:>4}  {}\n",
            format!("{:?}", t.from).to_lowercase(),
            format!("{:?}", t.to).to_lowercase(),
            t.count,
            serials(&t.serials)
        ));
    }
    let unchanged: Vec<String> = r
        .unchanged
        .iter()
        .map(|(v, n)| format!("{v} {n}"))
        .collect();
    s.push_str(&format!(
        "  unchanged: {} ({})\n",
        r.unchanged.values().sum::<usize>(),
        if unchanged.is_empty() {
            "none".to_string()
        } else {
            unchanged.join(", ")
        }
    ));
    s.push_str("\nchecks (fails before → after; worst margin before → after):\n");
    for c in &r.checks {
        if !c.in_new_plan {
            s.push_str(&format!(
                "  {:<8} {:<11} {:>3} failed before; not a check of the new plan\n",
                c.id, c.channel, c.n_fail_before
            ));
            continue;
        }
        s.push_str(&format!(
            "  {:<8} {:<11} {:>3} → {:<3} {} → {}\n",
            c.id,
            c.channel,
            c.n_fail_before,
            c.n_fail_after,
            margin(&c.worst_margin_before_db),
            margin(&c.worst_margin_after_db)
        ));
        if !c.newly_failing.is_empty() {
            s.push_str(&format!(
                "           newly failing {}: {}\n",
                c.newly_failing.len(),
                serials(&c.newly_failing)
            ));
        }
        if !c.newly_passing.is_empty() {
            s.push_str(&format!(
                "           newly passing {}: {}\n",
                c.newly_passing.len(),
                serials(&c.newly_passing)
            ));
        }
    }
    let y = &r.yields;
    s.push_str(&format!(
        "\nyield by record (pass / replayed): before {}, after {}\n",
        percent(y.records.pass_before, y.records.n),
        percent(y.records.pass_after, y.records.n)
    ));
    s.push_str(&format!(
        "yield by unit (latest record per serial): before {}, after {}\n",
        percent(y.units.pass_before, y.units.n),
        percent(y.units.pass_after, y.units.n)
    ));
    if let Some(p) = &r.reproduction {
        s.push_str(&format!(
            "\nsame plan (sha256 {}): reproduced {}/{} (verdicts and every margin within \
             {:e} dB; max |Δmargin| {:.1e} dB)\n",
            r.plan_sha256,
            p.n_reproduced,
            p.n_same_plan,
            crate::bench::reanalyze::TOLERANCE_DB,
            p.max_margin_delta_db
        ));
        for d in &p.differences {
            s.push_str(&format!(
                "  NOT reproduced: #{} {}:\n",
                d.record_id, d.serial
            ));
            for line in &d.differences {
                s.push_str(&format!("    {line}\n"));
            }
        }
    }
    s.push_str(&format!(
        "\n{} record(s) in {:.2} s on {} thread(s): {:.1} units/s (set-up {:.2} s, judging \
         {:.2} s)\n",
        r.n_replayed, r.elapsed_s, r.jobs, r.units_per_second, r.setup_s, r.judge_s
    ));
    s
}
