//! `tragus run PLAN --serial SN [--rig simulated|soundcard] [--store DIR] [--json OUT]`.

use super::{pipeline, Exit, JsonOut, Output};
use crate::plan::RigSpec;
use crate::rig::simulated::{SimUnit, SimulatedRig, UnitKind};
use crate::rig::Rig;
use crate::store::{NewRecord, Store};
use anyhow::Context;
use std::path::PathBuf;

/// Which rig plays the plan.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum RigChoice {
    /// The simulated earphone and fixture (no hardware).
    Simulated,
    /// A sound card (build with `--features soundcard`; devices from the `--host`,
    /// `--output-device`, ... options).
    Soundcard,
}

/// Arguments of `run`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The test plan.
    #[arg(value_name = "PLAN")]
    pub plan: PathBuf,
    /// Serial number of the unit (as scanned).
    #[arg(long, value_name = "SN")]
    pub serial: String,
    /// Rig to use; defaults to the plan's `rig`.
    #[arg(long, value_enum)]
    pub rig: Option<RigChoice>,
    /// Store directory (created if missing).
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// Station name recorded with the unit.
    #[arg(long, default_value = "bench-1")]
    pub station: String,
    /// Operator recorded with the unit (defaults to $USER).
    #[arg(long)]
    pub operator: Option<String>,
    /// Simulated rig: which unit to simulate: `nominal` (a good unit with manufacturing
    /// spread), `design` (the nominal design, no spread) or a defect (reversed-polarity, dead-channel, low-sensitivity, resonance-shift, clipping,
    /// heavy-distortion, seal-leak, blocked-damper, weak-motor, rub).
    #[arg(long, default_value = "nominal", value_name = "UNIT")]
    pub sim_unit: String,
    /// Simulated rig: the plan channel that carries the defect (default: the first).
    #[arg(long, value_name = "CHANNEL")]
    pub sim_channel: Option<String>,
    /// The station's own fixture model: replaces the plan's `correction.fixture` for every
    /// corrected channel (the plan's `fixture_tap` must exist in it).
    #[arg(long, value_name = "MODEL.yaml")]
    pub fixture: Option<PathBuf>,
    /// Sound-card rig: cpal host (`alsa`, `jack`, ...); default: the default host.
    #[arg(long, value_name = "HOST")]
    pub host: Option<String>,
    /// Sound-card rig: output device (id or name, see `tragus devices`); default: the
    /// host's default output.
    #[arg(long, value_name = "DEVICE")]
    pub output_device: Option<String>,
    /// Sound-card rig: input device; default: the host's default input.
    #[arg(long, value_name = "DEVICE")]
    pub input_device: Option<String>,
    /// Sound-card rig: buffer size, frames; default: the device's.
    #[arg(long, value_name = "FRAMES")]
    pub buffer_frames: Option<u32>,
    /// Sound-card rig: input channel (1-based) wired back from `--loopback-output`
    /// (latency and clock reference).
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u16).range(1..), requires = "loopback_output")]
    pub loopback_input: Option<u16>,
    /// Sound-card rig: output channel (1-based) the loopback input replays.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u16).range(1..), requires = "loopback_input")]
    pub loopback_output: Option<u16>,
    /// Write the result JSON here (`-` for stdout: human output then goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

fn parse_sim_unit(s: &str) -> Result<UnitKind, Exit> {
    s.parse::<UnitKind>()
        .map_err(|e| Exit::bad_input(anyhow::anyhow!("--sim-unit: {e}")))
}

/// The fixture the simulated rig puts the unit in: the one the plan's correction names
/// (after `--fixture`), shared by every corrected channel since a station has one fixture.
/// `None` when no channel is corrected.
fn simulated_fixture(
    plan: &crate::plan::Plan,
) -> Result<Option<(crate::acoustics::network::Coupler, String)>, Exit> {
    let mut found: Option<&crate::plan::CorrectionSpec> = None;
    for c in plan.channels.iter().filter_map(|c| c.correction.as_ref()) {
        match found {
            None => found = Some(c),
            Some(f) if f.fixture.sha256 == c.fixture.sha256 && f.fixture_tap == c.fixture_tap => {}
            Some(f) => {
                return Err(Exit::bad_input(anyhow::anyhow!(
                    "--rig simulated: expected one fixture model and tap for every corrected \
                     channel (the simulated station has one fixture), found `{}` tap `{}` and \
                     `{}` tap `{}`; give --fixture to use one",
                    f.fixture.id,
                    f.fixture_tap,
                    c.fixture.id,
                    c.fixture_tap
                )))
            }
        }
    }
    Ok(found.map(|c| (c.fixture.coupler(), c.fixture_tap.clone())))
}

/// The sound-card rig from the command-line options (a station file will set them later).
#[cfg(feature = "soundcard")]
fn soundcard_rig(args: &Args, plan: &crate::plan::Plan) -> Result<Box<dyn Rig>, Exit> {
    let spec = crate::rig::SoundcardSpec {
        host: args.host.clone(),
        output_device: args.output_device.clone(),
        input_device: args.input_device.clone(),
        buffer_frames: args.buffer_frames,
        loopback_input: args.loopback_input.map(|n| usize::from(n) - 1),
        loopback_output: args.loopback_output.map(|n| usize::from(n) - 1),
        ..Default::default()
    };
    let routes = plan.channels.iter().map(|c| (c.output, c.input)).collect();
    let rig = crate::rig::soundcard::SoundcardRig::open(spec, routes, plan.sample_rate_hz)
        .map_err(Exit::from_rig)?;
    Ok(Box::new(rig))
}

#[cfg(not(feature = "soundcard"))]
fn soundcard_rig(_args: &Args, _plan: &crate::plan::Plan) -> Result<Box<dyn Rig>, Exit> {
    Err(Exit::bad_input(anyhow::anyhow!(
        "--rig soundcard: {}",
        super::devices::NOT_BUILT
    )))
}

pub(crate) fn run(args: Args, out: Output) -> Result<i32, Exit> {
    let mut prep = pipeline::prepare(&args.plan, args.fixture.as_deref())?;
    let choice = args.rig.unwrap_or(match prep.plan.rig {
        RigSpec::Simulated { .. } => RigChoice::Simulated,
        RigSpec::Soundcard => RigChoice::Soundcard,
    });
    if args.serial.trim().is_empty() {
        return Err(Exit::bad_input(anyhow::anyhow!(
            "--serial: expected a serial number, found an empty string"
        )));
    }
    let (mut rig, sim_label): (Box<dyn Rig>, Option<String>) = match choice {
        RigChoice::Simulated => {
            let kind = parse_sim_unit(&args.sim_unit)?;
            let defect_channel = match &args.sim_channel {
                None => 0,
                Some(name) => prep.plan.channel_index(name).ok_or_else(|| {
                    Exit::bad_input(anyhow::anyhow!(
                        "--sim-channel: expected one of the plan's channels ({}), found `{name}`",
                        prep.plan
                            .channels
                            .iter()
                            .map(|c| c.name.as_str())
                            .collect::<Vec<_>>()
                            .join(", ")
                    ))
                })?,
            };
            let seed = match prep.plan.rig {
                RigSpec::Simulated { seed } => seed,
                RigSpec::Soundcard => 1,
            };
            let routes = prep
                .plan
                .channels
                .iter()
                .map(|c| (c.output, c.input))
                .collect();
            let unit = SimUnit {
                serial: args.serial.clone(),
                kind,
                defect_channel,
            };
            let rig = match simulated_fixture(&prep.plan)? {
                // The physical unit (rig v2) in the fixture the correction models, so the
                // correction can be judged against the physics it assumes.
                Some((coupler, tap)) => {
                    tracing::info!(fixture = %coupler.id, "simulated rig: physical earphone");
                    SimulatedRig::physical(routes, seed, unit, coupler, &tap)
                        .map_err(Exit::bad_input)?
                }
                // No fixture model known: the behavioural unit (rig v1).
                None => SimulatedRig::new(routes, seed, unit),
            };
            (Box::new(rig), Some(args.sim_unit.clone()))
        }
        RigChoice::Soundcard => (soundcard_rig(&args, &prep.plan)?, None),
    };
    tracing::info!(serial = %args.serial, rig = rig.name(), "playing the stimulus");
    let capture = rig
        .play_and_capture(&prep.stimulus, prep.plan.n_inputs())
        .map_err(Exit::from_rig)?;
    let result = pipeline::judge_capture(&mut prep, &capture, &args.serial, rig.name(), sim_label)?;

    // Record before reporting: a verdict the store does not hold was never given.
    let result_json = serde_json::to_string(&result)
        .context("cannot serialise the result")
        .map_err(Exit::retest)?;
    let wav = crate::wav::encode_wav_f32(capture.sample_rate_hz, &capture.channels)
        .context("cannot encode the raw capture")
        .map_err(Exit::retest)?;
    let operator = args
        .operator
        .clone()
        .or_else(|| std::env::var("USER").ok())
        .unwrap_or_else(|| "unknown".into());
    let record = NewRecord {
        time_utc: result.time_utc.clone(),
        serial: result.serial.clone(),
        plan_id: result.plan.id.clone(),
        plan_revision: result.plan.revision,
        plan_sha256: result.plan.sha256.clone(),
        software_version: result.tool.version.clone(),
        station: args.station.clone(),
        operator,
        rig: result.rig.clone(),
        verdict: result.verdict,
        result_json,
    };
    let stored = Store::open(&args.store)
        .and_then(|mut s| s.append(&record, &wav))
        .with_context(|| {
            format!(
                "{}: the unit was NOT recorded; test it again",
                args.store.display()
            )
        })
        .map_err(Exit::retest)?;
    tracing::info!(record = stored.id, hash = %stored.record_hash, "recorded");

    if let Some(j) = &args.json {
        j.write(&result).map_err(Exit::bad_input)?;
    }
    if !args.json.as_ref().is_some_and(JsonOut::is_stdout) {
        print!("{}", crate::report::render_human(&result, out.color));
        if let Some(lag) = capture.device_latency_samples {
            // The device path removed before the analysis (README: the sound-card rig).
            println!(
                "sound card: device latency {lag} samples ({:.1} ms), removed before the analysis",
                lag as f64 * 1e3 / f64::from(capture.sample_rate_hz)
            );
        }
        println!(
            "recorded as #{} in {} (capture {})",
            stored.id,
            args.store.display(),
            &stored.capture_sha256[..16.min(stored.capture_sha256.len())]
        );
    }
    Ok(result.verdict.exit_code())
}
