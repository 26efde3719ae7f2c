//! The stimulus stage: the exact signal a plan plays, built from the plan's `stimulus:`
//! and channels with the sweep generator of [`crate::dsp::sweep`].

use crate::dsp::sweep::{Stimulus, SweepError, SweepParams};
use crate::plan::Plan;

impl Stimulus {
    /// Build the stimulus of a validated plan: silence, sweep, silence on every output the
    /// plan's channels name (all driven together); outputs in between stay silent.
    pub fn from_plan(plan: &Plan) -> Result<Self, SweepError> {
        let s = &plan.stimulus;
        let sweep = SweepParams::synchronized(
            plan.sample_rate_hz,
            s.start_hz,
            s.stop_hz,
            s.duration_s,
            10f64.powf(s.level_dbfs / 20.0),
            s.fade_in_s,
            s.fade_out_s,
            s.silence_before_s,
        )?;
        let fs = f64::from(plan.sample_rate_hz);
        let n_after = (s.silence_after_s * fs).round() as usize;
        let mut driven: Vec<usize> = plan.channels.iter().map(|c| c.output).collect();
        driven.sort_unstable();
        driven.dedup();
        Ok(Self::build(sweep, n_after, plan.n_outputs(), &driven))
    }
}
