//! `tragus simulate-line --plan PLAN --station STATION --units N --defects MIX [--seed S]
//! [--store DIR] [--json OUT] [--jobs N]`: a virtual line ([`crate::bench::line`]) — N
//! simulated units of the plan's own product tested through the real engine — and its
//! report (yields, Pareto of failing checks, confusion table, escapes).

use super::{Exit, JsonOut, Output};
use crate::bench::line::{simulate_line, DefectMix, LineOptions, DEFAULT_SERIAL_PREFIX};
use crate::bench::{Bench, BenchOptions};
use std::io::IsTerminal;
use std::path::PathBuf;

/// Arguments of `simulate-line`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The test plan; its product (`product.earphone`, else its correction's virtual
    /// earphone) is what the line builds.
    #[arg(long, value_name = "PLAN")]
    pub plan: PathBuf,
    /// Station file: channel map, fixture and station id of the bench the line runs on.
    #[arg(long, value_name = "STATION")]
    pub station: PathBuf,
    /// Units to build and test.
    #[arg(long, value_name = "N")]
    pub units: usize,
    /// The defect mix: NAME=FRACTION[,NAME=FRACTION…] (fractions from 0 to 1, at most 1 in
    /// all; the rest are good units), or `none`. Names: reversed-polarity, dead-channel,
    /// low-sensitivity, resonance-shift, clipping, heavy-distortion, seal-leak,
    /// blocked-damper, weak-motor, rub, too-loud.
    #[arg(long, value_name = "MIX")]
    pub defects: String,
    /// Population seed (spread, noise, which units carry which defect); default the
    /// plan's `rig.seed`.
    #[arg(long, value_name = "S")]
    pub seed: Option<u64>,
    /// Append every test to this store (as the station writes records); without it nothing
    /// is written.
    #[arg(long, value_name = "DIR")]
    pub store: Option<PathBuf>,
    /// Write the report as JSON here (`-` for stdout: the text report then goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
    /// Worker threads (default: the machine's cores). The report does not depend on it.
    #[arg(long, value_name = "N")]
    pub jobs: Option<usize>,
    /// Serial prefix of the virtual units (unit k is PREFIX + k on 6 digits).
    #[arg(long, value_name = "PREFIX", default_value = DEFAULT_SERIAL_PREFIX)]
    pub serial_prefix: String,
    /// Operator recorded with the units (defaults to $USER).
    #[arg(long)]
    pub operator: Option<String>,
}

pub(crate) fn run(args: Args, _out: Output) -> Result<i32, Exit> {
    let mix: DefectMix = args.defects.parse().map_err(Exit::bad_input)?;
    if args.jobs == Some(0) {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--jobs: expected at least 1 worker, found 0"
        )));
    }
    let station = crate::bench::load_station(&args.station)?;
    let make_bench = || {
        Bench::new(BenchOptions {
            plan: &args.plan,
            station: Some(&station),
            fixture: None,
            rig: Some(crate::station::RigKind::Simulated),
            store: args.store.clone(),
            station_id: None,
            operator: args.operator.clone(),
            calibration: None,
            // Virtual units are never production.
            non_production: true,
            soundcard: Default::default(),
            record_refusals: args.store.is_some(),
        })
    };
    let jobs = args.jobs.unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    });
    let opts = LineOptions {
        units: args.units,
        mix,
        seed: args.seed,
        serial_prefix: args.serial_prefix.clone(),
        record: args.store.is_some(),
        jobs,
    };
    let bar = std::io::stderr().is_terminal().then(|| {
        let pb = indicatif::ProgressBar::new(args.units as u64);
        pb.set_draw_target(indicatif::ProgressDrawTarget::stderr());
        if let Ok(style) = indicatif::ProgressStyle::with_template(
            "{bar:40} {pos}/{len} units  {elapsed_precise} (eta {eta})",
        ) {
            pb.set_style(style);
        }
        pb
    });
    let mut progress = |done: usize| {
        if let Some(pb) = &bar {
            pb.set_position(done as u64);
        }
    };
    let report = simulate_line(&make_bench, &opts, &mut progress);
    if let Some(pb) = &bar {
        pb.finish_and_clear();
    }
    let report = report?;
    if let Some(j) = &args.json {
        j.write(&report).map_err(Exit::bad_input)?;
    }
    if !args.json.as_ref().is_some_and(JsonOut::is_stdout) {
        out!("{}", report.render_text());
        if let Some(store) = &args.store {
            outln!("recorded in {}", store.display());
        }
    }
    Ok(super::EXIT_PASS)
}
