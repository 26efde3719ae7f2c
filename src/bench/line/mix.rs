//! The defect mix of a virtual line (`--defects name=fraction,…`) and its assignment to
//! units.
//!
//! The fractions are turned into exact unit counts by the largest-remainder method over the
//! named defects and the good units (the rest, `1 − Σ fractions`), so the line holds the mix
//! as closely as whole units can; the units carrying each defect are then chosen by a seeded
//! shuffle, and each defect unit's channel by a seeded draw. Same seed, same units: the
//! generator is ChaCha20 seeded by SHA-256 over a tag and the seed (stable across platforms,
//! unlike `std`'s hashers).

use crate::rig::simulated::Defect;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha20Rng;
use sha2::{Digest, Sha256};
use std::str::FromStr;

/// A defect mix: fractions of the line's units per named defect (the rest are good units).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct DefectMix {
    /// (defect, fraction of the units), in the order given, each defect once.
    pub parts: Vec<(Defect, f64)>,
}

/// Why a defect mix could not be read; the message says what was expected.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("--defects: {0}")]
pub struct MixError(pub String);

impl FromStr for DefectMix {
    type Err = MixError;

    /// `name=fraction,name=fraction,…` (fractions from 0 to 1, at most 1 in all), or `none`
    /// (every unit good).
    fn from_str(s: &str) -> Result<Self, MixError> {
        let text = s.trim();
        if text == "none" {
            return Ok(DefectMix::default());
        }
        if text.is_empty() {
            return Err(MixError(
                "expected NAME=FRACTION[,NAME=FRACTION…] (or `none`), found an empty mix".into(),
            ));
        }
        let mut parts: Vec<(Defect, f64)> = Vec::new();
        for item in text.split(',') {
            let item = item.trim();
            let Some((name, fraction)) = item.split_once('=') else {
                return Err(MixError(format!(
                    "expected NAME=FRACTION (such as `rub=0.02`), found `{item}`"
                )));
            };
            let name = name.trim();
            let defect = Defect::from_str(name).map_err(|e| MixError(format!("defect {e}")))?;
            let f = fraction
                .trim()
                .parse::<f64>()
                .ok()
                .filter(|f| (0.0..=1.0).contains(f))
                .ok_or_else(|| {
                    MixError(format!(
                        "expected a fraction from 0 to 1 for `{name}`, found `{}`",
                        fraction.trim()
                    ))
                })?;
            if parts.iter().any(|(d, _)| *d == defect) {
                return Err(MixError(format!(
                    "expected each defect once, found `{name}` twice"
                )));
            }
            parts.push((defect, f));
        }
        let sum: f64 = parts.iter().map(|(_, f)| f).sum();
        // A rounding hair above 1 (three thirds) is still a whole line.
        if sum > 1.0 + 1e-9 {
            return Err(MixError(format!(
                "expected fractions summing to at most 1 (the rest are good units), found {}",
                (sum * 1e9).round() / 1e9
            )));
        }
        Ok(DefectMix { parts })
    }
}

impl DefectMix {
    /// Whole units per defect for a line of `n` units (largest remainder over the defects
    /// and the good units together, ties to the earlier named; the good units are the rest).
    pub fn counts(&self, n: usize) -> Vec<(Defect, usize)> {
        let good = (1.0 - self.parts.iter().map(|(_, f)| f).sum::<f64>()).max(0.0);
        let shares: Vec<f64> = self
            .parts
            .iter()
            .map(|(_, f)| *f)
            .chain(std::iter::once(good))
            .map(|f| f * n as f64)
            .collect();
        let mut counts: Vec<usize> = shares.iter().map(|s| s.floor() as usize).collect();
        let mut left = n.saturating_sub(counts.iter().sum());
        let mut order: Vec<usize> = (0..shares.len()).collect();
        order.sort_by(|&a, &b| {
            let ra = shares[a] - shares[a].floor();
            let rb = shares[b] - shares[b].floor();
            rb.total_cmp(&ra).then(a.cmp(&b))
        });
        for i in order {
            if left == 0 {
                break;
            }
            counts[i] += 1;
            left -= 1;
        }
        self.parts
            .iter()
            .zip(counts)
            .map(|((d, _), c)| (*d, c))
            .collect()
    }

    /// The defect of each of `n` units (`None`: good) with its channel index below
    /// `n_channels`, for population `seed`: [`DefectMix::counts`], placed by a seeded
    /// shuffle, then a channel drawn per defect unit in unit order.
    pub fn assign(&self, n: usize, n_channels: usize, seed: u64) -> Vec<Option<(Defect, usize)>> {
        let mut kinds: Vec<Option<Defect>> = Vec::with_capacity(n);
        for (d, c) in self.counts(n) {
            kinds.extend(std::iter::repeat_n(Some(d), c));
        }
        kinds.resize(n, None);
        let mut h = Sha256::new();
        h.update(b"tragus-virtual-line/defect-mix");
        h.update(seed.to_le_bytes());
        let mut rng = ChaCha20Rng::from_seed(h.finalize().into());
        // Fisher–Yates, written out so that the order depends on this code only.
        for i in (1..kinds.len()).rev() {
            let j = rng.random_range(0..=i);
            kinds.swap(i, j);
        }
        kinds
            .into_iter()
            .map(|k| k.map(|d| (d, rng.random_range(0..n_channels.max(1)))))
            .collect()
    }
}
