//! `tragus stimulus PLAN --out FILE.wav`: the exact signal the plan plays.

use super::{Exit, EXIT_PASS};
use crate::dsp::sweep::Stimulus;
use anyhow::Context;
use std::path::PathBuf;

/// Arguments of `stimulus`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The test plan.
    #[arg(value_name = "PLAN")]
    pub plan: PathBuf,
    /// Where to write the WAV (32-bit float, every output channel, the plan's rate).
    #[arg(long, value_name = "FILE.wav")]
    pub out: PathBuf,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let plan = crate::bench::load(&args.plan)?;
    let stimulus = Stimulus::from_plan(&plan)
        .with_context(|| format!("{}: cannot build the sweep", args.plan.display()))
        .map_err(Exit::bad_input)?;
    crate::wav::write_wav_f32(&args.out, stimulus.sample_rate_hz, &stimulus.channels)
        .map_err(Exit::bad_input)?;
    // A success line: on stdout with the other commands' results, and without the
    // `tragus:` prefix that marks errors.
    outln!(
        "wrote {} ({} channel(s), {} samples at {} Hz; sweep {}–{} Hz, L = {:.6} s, T = {:.6} s)",
        args.out.display(),
        stimulus.channels.len(),
        stimulus.n_samples(),
        stimulus.sample_rate_hz,
        stimulus.sweep.f1_hz,
        stimulus.sweep.f2_hz,
        stimulus.sweep.l_s,
        stimulus.sweep.duration_s
    );
    Ok(EXIT_PASS)
}
