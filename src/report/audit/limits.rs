//! Limit lines for the report's response plots, from plan files the auditor names.
//!
//! A record holds its response, its verdict and its worst margin, not the limit lines it
//! was judged against: those live in the plan. The report draws limits only from a plan
//! file whose SHA-256 (canonical form, limit CSVs included) equals the record's
//! `plan_sha256`, so a line drawn is provably the line that judged the unit; records of
//! any other plan revision are drawn without lines, and the report says so.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use super::load::Curve;
use crate::plan::{load_plan, CheckKind, Normalize};

/// One response check's lines and how its curve is prepared before comparison.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ResponseLimits {
    /// Upper line points (Hz, dB), if any.
    pub upper: Option<Vec<(f64, f64)>>,
    /// Lower line points (Hz, dB), if any.
    pub lower: Option<Vec<(f64, f64)>>,
    /// 1/N-octave smoothing the check applied (the report draws the unsmoothed curve).
    pub smoothing_fraction: Option<u32>,
    /// Normalisation the check applied before comparing.
    pub normalize: Option<Normalize>,
}

/// A loaded plan file, by SHA-256.
#[derive(Debug, Clone)]
pub(crate) struct PlanLimits {
    /// Where it was read from.
    pub path: PathBuf,
    /// Plan id.
    pub id: String,
    /// Plan revision.
    pub revision: u32,
    /// Response checks by id.
    pub checks: HashMap<String, ResponseLimits>,
}

/// Plan files by their SHA-256.
#[derive(Debug, Clone, Default)]
pub(crate) struct LimitBook {
    pub plans: HashMap<String, PlanLimits>,
}

/// A plan file that could not be read: its path and every problem, one per line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct PlanLoadError {
    pub path: PathBuf,
    pub message: String,
}

impl LimitBook {
    /// Load each plan file (all problems of a bad one in its error).
    pub fn load(paths: &[PathBuf]) -> Result<LimitBook, PlanLoadError> {
        let mut book = LimitBook::default();
        for path in paths {
            let plan = load_plan(path).map_err(|e| PlanLoadError {
                path: path.clone(),
                message: e.to_string(),
            })?;
            let checks = plan
                .checks
                .iter()
                .filter_map(|c| match &c.kind {
                    CheckKind::Response {
                        upper,
                        lower,
                        smoothing_fraction,
                        normalize,
                    } => Some((
                        c.id.clone(),
                        ResponseLimits {
                            upper: upper.as_ref().map(|l| l.points.clone()),
                            lower: lower.as_ref().map(|l| l.points.clone()),
                            smoothing_fraction: *smoothing_fraction,
                            normalize: *normalize,
                        },
                    )),
                    _ => None,
                })
                .collect();
            book.plans.insert(
                plan.sha256.clone(),
                PlanLimits {
                    path: path.clone(),
                    id: plan.id.clone(),
                    revision: plan.revision,
                    checks,
                },
            );
        }
        Ok(book)
    }

    /// The lines of check `check` in the plan with this SHA-256, if that plan was given.
    pub fn response(&self, plan_sha256: &str, check: &str) -> Option<&ResponseLimits> {
        self.plans.get(plan_sha256)?.checks.get(check)
    }

    /// The plan files given, by path: (path, plan id, revision, SHA-256).
    pub fn files(&self) -> Vec<(&Path, &str, u32, &str)> {
        let mut v: Vec<_> = self
            .plans
            .iter()
            .map(|(sha, p)| (p.path.as_path(), p.id.as_str(), p.revision, sha.as_str()))
            .collect();
        v.sort();
        v
    }
}

/// Level of a curve at `freq_hz`, linear in dB versus log-frequency between grid points
/// (the rule limit lines follow); `None` outside the grid or at a gap.
fn level_at(c: &Curve, freq_hz: f64) -> Option<f64> {
    let f = &c.freqs_hz;
    let i = f.partition_point(|x| *x < freq_hz);
    if i < f.len() && f[i] == freq_hz {
        return Some(c.db[i]).filter(|v| v.is_finite());
    }
    if i == 0 || i == f.len() {
        return None;
    }
    let t = (freq_hz / f[i - 1]).ln() / (f[i] / f[i - 1]).ln();
    let v = c.db[i - 1] + t * (c.db[i] - c.db[i - 1]);
    v.is_finite().then_some(v)
}

/// The level a check normalising with `n` subtracts from this (unsmoothed) curve: the level
/// at a frequency, or the mean of the grid points in a band. An approximation of what the
/// check did when it also smoothed; `None` when the curve has no level there.
pub(crate) fn reference_level(c: &Curve, n: Normalize) -> Option<f64> {
    match n {
        Normalize::AtHz(f) => level_at(c, f),
        Normalize::Band(b) => {
            let inside: Vec<f64> = c
                .freqs_hz
                .iter()
                .zip(&c.db)
                .filter(|(f, d)| **f >= b.low_hz && **f <= b.high_hz && d.is_finite())
                .map(|(_, d)| *d)
                .collect();
            (!inside.is_empty()).then(|| inside.iter().sum::<f64>() / inside.len() as f64)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plan::Band;

    fn curve() -> Curve {
        Curve {
            channel: "left".into(),
            unit: String::new(),
            freqs_hz: vec![100.0, 1000.0, 10000.0],
            db: vec![0.0, 10.0, f64::NAN],
        }
    }

    #[test]
    fn levels_interpolate_in_log_frequency() {
        // Half-way in log f between 100 Hz and 1 kHz is √(100·1000) Hz.
        let mid = (100.0f64 * 1000.0).sqrt();
        let v = reference_level(&curve(), Normalize::AtHz(mid)).unwrap();
        assert!((v - 5.0).abs() < 1e-9);
        assert_eq!(reference_level(&curve(), Normalize::AtHz(50.0)), None);
        assert_eq!(reference_level(&curve(), Normalize::AtHz(5000.0)), None);
        let band = Band {
            low_hz: 50.0,
            high_hz: 20000.0,
        };
        assert_eq!(reference_level(&curve(), Normalize::Band(band)), Some(5.0));
    }

    #[test]
    fn a_missing_plan_file_names_its_path() {
        let e = LimitBook::load(&[PathBuf::from("/nonexistent/plan.yaml")]).unwrap_err();
        assert!(
            e.message.contains("/nonexistent/plan.yaml"),
            "{}",
            e.message
        );
    }
}
