//! tragus: end-of-line test station software for earphones.
//!
//! Data flows one way (see `DEVELOPERS.md`):
//! [`plan`] → [`dsp::sweep`] (stimulus) → [`rig`] (capture) → [`analysis`] (measurement)
//! → [`checks`] (verdicts) → [`store`] (record) → [`report`].
//! Nothing below [`cli`] prints or exits; errors are values.
#![forbid(unsafe_code)]

pub mod acoustics;
pub mod analysis;
pub mod bench;
pub mod calibration;
pub mod checks;
pub mod cli;
pub mod config;
pub mod correction;
pub mod digest;
pub mod dsp;
pub mod keys;
pub mod limits;
pub mod models;
pub mod plan;
pub mod report;
pub mod result;
pub mod rig;
/// Hearing safety: frequency weighting, exposure dose, the guard's fade and level watch, the
/// pilot tone (issue 5).
pub mod safety;
pub mod serial;
pub mod station;
pub mod stimulus;
pub mod store;
pub mod units;
pub mod wav;

/// The software version recorded with every result.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");

/// The build identity: version, git commit and dirty flag (`0.1.0+git.0123456789ab`,
/// `….dirty` for a build from a changed tree, `+unknown` without git), set by `build.rs`.
pub const BUILD: &str = env!("TRAGUS_BUILD");

/// Verdict of one check, one channel or one unit.
///
/// A retest is never counted as a pass: it means the measurement itself was not valid
/// (no signal, clipping, dropouts, a rig fault), so nothing is known about the unit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    /// Every check met its limits on a valid measurement.
    Pass,
    /// At least one check failed on a valid measurement.
    Fail,
    /// The measurement was not valid; test the unit again.
    Retest,
}

impl Verdict {
    /// Combine verdicts: retest wins over fail only when the measurement was invalid, which
    /// callers express by passing `Retest`; otherwise fail wins over pass.
    pub fn worst(self, other: Verdict) -> Verdict {
        use Verdict::*;
        match (self, other) {
            (Retest, _) | (_, Retest) => Retest,
            (Fail, _) | (_, Fail) => Fail,
            _ => Pass,
        }
    }

    /// Upper-case word for human output (never colour alone).
    pub fn word(self) -> &'static str {
        match self {
            Verdict::Pass => "PASS",
            Verdict::Fail => "FAIL",
            Verdict::Retest => "RETEST",
        }
    }

    /// Process exit code per docs/architecture.md: 0 pass, 1 fail, 3 retest.
    pub fn exit_code(self) -> i32 {
        match self {
            Verdict::Pass => 0,
            Verdict::Fail => 1,
            Verdict::Retest => 3,
        }
    }
}
