//! The `rig:` section: which rig runs the plan when none is named on the command line.
//! Its schema ([`RawRig`]) and validation.

use super::raw::Section;
use super::validate::Validator;
use super::RigSpec;
use crate::config::{found_scalar, suggest, Pos};
use marked_yaml::Spanned;
use serde::Deserialize;

/// Which kind of rig plays a plan: the one enum for the choice, whether it comes from the
/// plan's `rig:`, the station file's `rig:` or the command line's `--rig`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RigKind {
    /// The simulated earphone and fixture (no hardware).
    Simulated,
    /// A sound card (the station's `audio:` settings).
    Soundcard,
}

impl RigKind {
    /// Every kind, with its word in plans, station files and on the command line.
    pub const ALL: [(RigKind, &'static str); 2] = [
        (RigKind::Simulated, "simulated"),
        (RigKind::Soundcard, "soundcard"),
    ];

    /// The word for this kind (`simulated`, `soundcard`).
    pub fn word(self) -> &'static str {
        match self {
            RigKind::Simulated => "simulated",
            RigKind::Soundcard => "soundcard",
        }
    }
}

impl std::str::FromStr for RigKind {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        RigKind::ALL
            .iter()
            .find(|(_, w)| *w == s)
            .map(|(k, _)| *k)
            .ok_or_else(|| format!("expected simulated or soundcard, found `{s}`"))
    }
}

impl RigSpec {
    /// The kind of rig the plan names.
    pub fn kind(&self) -> RigKind {
        match self {
            RigSpec::Simulated { .. } => RigKind::Simulated,
            RigSpec::Soundcard => RigKind::Soundcard,
        }
    }

    /// The simulated population's seed ([`DEFAULT_RIG_SEED`] for a sound card, which has
    /// none).
    pub fn seed(&self) -> u64 {
        match self {
            RigSpec::Simulated { seed } => *seed,
            RigSpec::Soundcard => DEFAULT_RIG_SEED,
        }
    }
}

/// Default seed of the simulated rig.
pub const DEFAULT_RIG_SEED: u64 = 1;

/// `rig:` keys.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawRig {
    /// `simulated` or `soundcard`.
    pub kind: Option<Spanned<String>>,
    /// Seed of the simulated population.
    pub seed: Option<Spanned<i128>>,
}

impl Validator {
    /// `rig:`, or the simulated rig with the default seed when absent.
    pub(super) fn rig(&mut self, sec: Option<&Section<RawRig>>) -> Option<RigSpec> {
        let Some(sec) = sec else {
            return Some(RigSpec::Simulated {
                seed: DEFAULT_RIG_SEED,
            });
        };
        let r = &sec.value;
        let kind = self.required(sec, &r.kind, "rig", "kind")?;
        let seed = match &r.seed {
            None => Some(DEFAULT_RIG_SEED),
            Some(v) => self
                .int_in_range(v, "rig.seed", 0, i128::from(u64::MAX))
                .map(|s| s as u64),
        };
        match kind.as_str() {
            "simulated" => Some(RigSpec::Simulated { seed: seed? }),
            "soundcard" => {
                if let Some(v) = &r.seed {
                    self.report(
                        Pos::of_value(v),
                        "rig.seed: not allowed for a soundcard rig (only a simulated rig has a \
                         seed)"
                            .into(),
                    );
                    return None;
                }
                Some(RigSpec::Soundcard)
            }
            other => {
                let hint = match suggest(other, ["simulated", "soundcard"]) {
                    Some(s) => format!(", did you mean `{s}`?"),
                    None => String::new(),
                };
                self.report(
                    Pos::of_value(kind),
                    format!(
                        "rig.kind: expected `simulated` or `soundcard`, found {}{hint}",
                        found_scalar(other)
                    ),
                );
                None
            }
        }
    }
}
