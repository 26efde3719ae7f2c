//! Hearing safety: the pure pieces that keep sound levels at the station under caps and
//! keep the operators' noise exposure counted (issue 5).
//!
//! Sits beside the data flow: the stimulus places a [`pilot`](crate::safety::pilot) tone
//! before every sweep and the sweep's level is decided from it; the rig watches the capture
//! and fades the output to silence with [`ramp`](crate::safety::ramp) when a level passes a
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
pub mod pilot;
pub mod ramp;
/// Hearing safety on one bench per unit: pilot, decision, guarded sweep.
pub mod station;
pub mod weighting;
