//! Hearing safety: the pure pieces that keep sound levels at the station under caps and
//! keep the operators' noise exposure counted (issue 5).
//!
//! Sits beside the data flow: the stimulus places a [`pilot`](crate::safety::pilot) tone
//! before every sweep and the sweep's level is decided from it; the rig watches the capture
//! and fades the output to silence with [`ramp`](crate::dsp::ramp) when a level passes a
//! cap; a listening step's level is the [`weighting`](crate::safety::weighting)-A level of its
//! spectrum at the reference position, and its exposure goes into the
//! [`dose`](crate::safety::dose) ledger. Everything here is arithmetic on plain data: no I/O,
//! no printing, typed errors, no panic on outside input.
//!
//! These pieces do not make the station a hearing-protection device; they limit what the
//! station itself plays.

/// The plan-time level budget against the station caps.
pub mod budget;
pub mod dose;
pub mod event;
pub mod monitor;
pub mod pilot;
/// The guard's fades (kept here by name; they live with the other signal pieces in `dsp`).
pub use crate::dsp::ramp;
/// Hearing safety on one bench per unit: the set-up per plan, then per unit the pilot, the
/// decision and the guarded sweep.
pub mod setup;
pub mod weighting;

/// The cautions shown on a station's first run (a store that does not exist yet) and in the
/// README: what the caps protect and what they do not.
pub const CAUTIONS: &str = "\
CAUTION — sound levels
  tragus caps what the station itself plays: the drive voltage, the digital level and the
  sound level at the fixture microphone and at the ear-equivalent position, checked before
  anything plays (the plan's declared sensitivity and the calibration), by a pilot tone
  before every sweep, and by a guard that fades the output to silence when a level passes
  its cap while playing.
  It is no hearing-protection device. The caps rest on the calibration and on the plan's
  declaration being right; a guard trip still lets a few milliseconds (simulated rig) to a
  few hundred milliseconds (sound card, its buffers) of sound through.
  Never put a unit under test in or near an ear while a plan runs. Follow your local
  occupational-noise regulations and your site's safety officer; where they and tragus
  differ, they win.
";
/// The listening step: its signal and its A-weighted level at the reference position.
pub mod listening;
/// The listening steps of one unit, played under the guard and the dose ledger.
pub mod listening_steps;
