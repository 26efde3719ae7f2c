//! `tragus run PLAN --serial SN [--station FILE] [--rig simulated|soundcard] [--store DIR]
//! [--json OUT]`: one unit end to end ([`crate::bench`]), then the human report or JSON.
//! The serial's earlier results in the store are shown first, and what they decided (a FAIL
//! for too many retests, a pass after a fail) after the report ([`crate::bench::history`]).

use super::soundcard_args::SoundcardArgs;
use super::{Exit, JsonOut, Output};
use crate::bench::{Bench, BenchOptions};
use crate::station::RigKind;
use std::path::PathBuf;

/// An operator's answer to a listening step.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ListenAnswer {
    /// Heard nothing wrong.
    Pass,
    /// Heard a rattle, buzz or other defect.
    Fail,
}

/// Arguments of `run`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The test plan.
    #[arg(value_name = "PLAN")]
    pub plan: PathBuf,
    /// Serial number of the unit (as scanned): 1 to 64 ASCII letters, digits and
    /// - _ . / +, at least one letter or digit.
    #[arg(long, value_name = "SN")]
    pub serial: String,
    /// Station file: channel map, fixture, store, rig, station id and mode of this bench.
    #[arg(long, value_name = "FILE")]
    pub station: Option<PathBuf>,
    /// Rig to use; defaults to the station's `rig`, else the plan's `rig`.
    #[arg(long, value_parser = super::rig_kind_parser())]
    pub rig: Option<RigKind>,
    /// Store directory (created if missing); wins over the station's `store`; default
    /// `tragus-data`.
    #[arg(long, value_name = "DIR")]
    pub store: Option<PathBuf>,
    /// Station id recorded with the unit when no station file is given (default `bench-1`).
    #[arg(long, value_name = "ID", conflicts_with = "station")]
    pub station_id: Option<String>,
    /// Operator recorded with the unit (defaults to $USER).
    #[arg(long)]
    pub operator: Option<String>,
    /// Simulated rig: which unit to simulate: `nominal` (a good unit with manufacturing
    /// spread), `design` (the nominal design, no spread) or a defect (reversed-polarity, dead-channel, low-sensitivity, resonance-shift, clipping,
    /// heavy-distortion, seal-leak, blocked-damper, weak-motor, rub, too-loud).
    #[arg(long, default_value = "nominal", value_name = "UNIT")]
    pub sim_unit: String,
    /// Simulated rig: the plan channel that carries the defect (default: the first).
    #[arg(long, value_name = "CHANNEL")]
    pub sim_channel: Option<String>,
    /// Simulated rig: an amplifier gain fault, dB (the amplifier turned up by this much
    /// after calibration; -40 to 40). Only drive monitors (`drive_monitors:` in the station
    /// file) see it as volts.
    #[arg(
        long,
        default_value_t = 0.0,
        value_name = "DB",
        allow_hyphen_values = true
    )]
    pub sim_amplifier_db: f64,
    /// The station's own fixture model: replaces the plan's `correction.fixture` for every
    /// corrected channel (the plan's `fixture_tap` must exist in it); wins over the station
    /// file's `fixture`.
    #[arg(long, value_name = "MODEL.yaml")]
    pub fixture: Option<PathBuf>,
    /// The operator's answer to the plan's listening steps (`pass` or `fail`), for a run
    /// with no one at the keyboard; without it `run` asks on the terminal, and with no
    /// terminal a listening step is a retest (no answer).
    #[arg(long, value_enum, value_name = "ANSWER")]
    pub listen_answer: Option<ListenAnswer>,
    /// Write the result JSON here (`-` for stdout: human output then goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
    /// The station's calibration file (`tragus calibrate`): responses become dB SPL/V and its
    /// SHA-256 is recorded with the unit. A past-due calibration, or one that misses a
    /// channel the plan uses, refuses the run (exit 2) unless `--non-production`.
    #[arg(long, value_name = "CAL.yaml")]
    pub calibration: Option<PathBuf>,
    /// Test outside production (engineering, trials): run even with a past-due or partial
    /// calibration; every record then says `non-production`.
    #[arg(long)]
    pub non_production: bool,
    // Last: clap puts every option after a flattened heading under that heading.
    /// Sound-card options (override the station's `audio:` settings).
    #[command(flatten)]
    pub soundcard: SoundcardArgs,
}

pub(crate) fn run(args: Args, out: Output) -> Result<i32, Exit> {
    // First: a refused serial must leave no trace (no store opened, no refusal recorded,
    // nothing played).
    crate::serial::check_serial(&args.serial)
        .map_err(|e| Exit::bad_input(anyhow::anyhow!("--serial: {e}")))?;
    let station = args
        .station
        .as_deref()
        .map(crate::bench::load_station)
        .transpose()?;
    let mut bench = Bench::new(BenchOptions {
        plan: &args.plan,
        station: station.as_ref(),
        fixture: args.fixture.as_deref(),
        rig: args.rig,
        store: args.store.clone(),
        station_id: args.station_id.clone(),
        operator: args.operator.clone(),
        calibration: args.calibration.as_deref(),
        non_production: args.non_production,
        soundcard: args.soundcard.spec_for(station.as_ref()),
        record_refusals: true,
    })?;
    let mut sim = bench.sim_choice(&args.sim_unit, args.sim_channel.as_deref())?;
    if !(-40.0..=40.0).contains(&args.sim_amplifier_db) {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--sim-amplifier-db: expected a gain error from -40 to 40 dB, found {}",
            args.sim_amplifier_db
        )));
    }
    sim.amplifier_db = args.sim_amplifier_db;
    super::show_cautions_if_new(&bench);
    let answer = args.listen_answer;
    let listen = move |prompt: &str| -> Option<bool> {
        match answer {
            Some(a) => Some(a == ListenAnswer::Pass),
            None => super::operator_loop::ask_terminal(prompt),
        }
    };
    let human = !args.json.as_ref().is_some_and(JsonOut::is_stdout);
    // The unit's earlier results, before it is tested (the test reads them again for its
    // retest limit).
    let history = bench.history(&args.serial)?;
    if let (true, Some(line)) = (human, history.summary_line(&bench.retest_rule)) {
        outln!("{line}");
    }
    // `run` never asks to abandon.
    let tested = bench.test_and_record(&args.serial, &sim, &|| false, &listen)?;
    let (result, stored) = (tested.result, tested.stored);

    if let Some(j) = &args.json {
        j.write(&result).map_err(Exit::bad_input)?;
    }
    if human {
        out!("{}", crate::report::render_human(&result, out.color));
        for line in crate::bench::history::outcome_lines(result.history.as_ref()) {
            outln!("{line}");
        }
        if let Some(lag) = result.device_latency_samples {
            // The device path removed before the analysis (README: the sound-card rig).
            outln!(
                "sound card: device latency {lag} samples ({:.1} ms), removed before the analysis",
                lag as f64 * 1e3 / f64::from(bench.prep.plan.sample_rate_hz)
            );
        }
        outln!(
            "recorded as #{} in {} (capture {})",
            stored.id,
            bench.store.display(),
            &stored.capture_sha256[..16.min(stored.capture_sha256.len())]
        );
    }
    Ok(result.verdict.exit_code())
}
