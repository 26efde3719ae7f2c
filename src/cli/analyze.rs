//! `tragus analyze PLAN --capture FILE.wav [--json OUT]`: judge a recorded capture.

use super::{Exit, JsonOut, Output};
use crate::rig::recording::RecordingRig;
use crate::rig::Rig;
use std::path::PathBuf;

/// Arguments of `analyze`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The test plan whose stimulus was recorded.
    #[arg(value_name = "PLAN")]
    pub plan: PathBuf,
    /// The capture: a WAV with the plan's input channels, at the plan's rate, sample 0
    /// aligned with stimulus sample 0.
    #[arg(long, value_name = "FILE.wav")]
    pub capture: PathBuf,
    /// Serial number to put in the result.
    #[arg(long, default_value = "")]
    pub serial: String,
    /// The station's own fixture model: replaces the plan's `correction.fixture` for every
    /// corrected channel (the plan's `fixture_tap` must exist in it).
    #[arg(long, value_name = "MODEL.yaml")]
    pub fixture: Option<PathBuf>,
    /// Write the result JSON here (`-` for stdout: human output then goes nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

pub(crate) fn run(args: Args, out: Output) -> Result<i32, Exit> {
    let mut prep = crate::bench::Prepared::new(&args.plan, args.fixture.as_deref())?;
    let mut rig = RecordingRig::open(&args.capture).map_err(Exit::from_rig)?;
    let capture = rig
        .play_and_capture(&prep.stimulus, prep.plan.n_inputs())
        .map_err(Exit::from_rig)?;
    let result = prep.judge_capture(&capture, &args.serial, rig.name(), None, &[])?;
    if let Some(j) = &args.json {
        j.write(&result).map_err(Exit::bad_input)?;
    }
    if !args.json.as_ref().is_some_and(JsonOut::is_stdout) {
        out!("{}", crate::report::render_human(&result, out.color));
    }
    Ok(result.verdict.exit_code())
}
