//! Limit lines around a set of golden curves on one frequency grid.
//!
//! Per grid frequency f: the golden curves' mean μ(f) and sample standard deviation σ(f)
//! ([`super::stats`]); the half-width `h(f) = clamp(k·σ̃(f), min, max)`, where σ̃ is σ
//! optionally smoothed over 1/N octave ([`smooth_spread`]); the lines are `μ ± h`. With
//! [`Settings::cover_golden`] (the default) each side's `k·σ̃` is first raised, where
//! needed, to reach the farthest golden curve on that side: the golden units are good by
//! definition, and a line that rejects one of them is wrong about the line, not the unit.
//! The clamp comes after, so a maximum half-width still cuts (and the report says how
//! often).
//!
//! Only the spread is smoothed, never the mean: the mean follows every peak and notch the
//! golden units share, so the lines keep their shape; smoothing the spread only evens out
//! the frequency-to-frequency scatter of σ that a few dozen units leave (its relative
//! standard error is about 1/√(2(n−1)), 13 % for 30 units). The golden curves themselves are
//! the ones the check judges — already smoothed by the check's own `smoothing:` (in the
//! power domain, [`crate::dsp::smoothing`]) before they reach this module.

use super::stats::{capability, summary, Capability};
use super::{LimitsError, Settings};
use crate::dsp::bands::OCTAVE_RATIO_G;

/// Mean and spread of golden curves on a grid.
#[derive(Debug, Clone, PartialEq)]
pub struct CurveStats {
    /// Grid frequencies, Hz, ascending.
    pub freqs_hz: Vec<f64>,
    /// Number of curves.
    pub n_curves: usize,
    /// Mean level per frequency, dB.
    pub mean_db: Vec<f64>,
    /// Sample standard deviation per frequency, dB.
    pub sd_db: Vec<f64>,
    /// Lowest golden level per frequency, dB.
    pub min_db: Vec<f64>,
    /// Highest golden level per frequency, dB.
    pub max_db: Vec<f64>,
}

/// Mean and spread of `curves` (each a level per frequency of `freqs_hz`, dB).
pub fn curve_stats(freqs_hz: &[f64], curves: &[Vec<f64>]) -> Result<CurveStats, LimitsError> {
    if curves.len() < 2 {
        return Err(LimitsError(format!(
            "expected at least 2 curves for a spread, found {}",
            curves.len()
        )));
    }
    if let Some((i, c)) = curves
        .iter()
        .enumerate()
        .find(|(_, c)| c.len() != freqs_hz.len())
    {
        return Err(LimitsError(format!(
            "curve {} has {} points, the grid {}",
            i + 1,
            c.len(),
            freqs_hz.len()
        )));
    }
    let mut mean_db = Vec::with_capacity(freqs_hz.len());
    let mut sd_db = Vec::with_capacity(freqs_hz.len());
    let mut min_db = Vec::with_capacity(freqs_hz.len());
    let mut max_db = Vec::with_capacity(freqs_hz.len());
    let mut column = vec![0.0; curves.len()];
    for (j, &f) in freqs_hz.iter().enumerate() {
        for (c, v) in curves.iter().zip(&mut column) {
            *v = c[j];
        }
        let s = summary(&column).ok_or_else(|| {
            LimitsError(format!(
                "a curve has no finite level at {f:.1} Hz (every golden curve must be measured \
                 at every frequency of the line)"
            ))
        })?;
        mean_db.push(s.mean);
        sd_db.push(s.sd);
        min_db.push(s.min);
        max_db.push(s.max);
    }
    Ok(CurveStats {
        freqs_hz: freqs_hz.to_vec(),
        n_curves: curves.len(),
        mean_db,
        sd_db,
        min_db,
        max_db,
    })
}

/// `sd_db` smoothed over 1/`fraction` octave: at each grid frequency f, the root mean
/// square of the values at the grid frequencies within `f·G^(±1/(2·fraction))` (IEC
/// 61260-1 base-10 band edges, as [`crate::dsp::smoothing`]; the variances are averaged,
/// the way spreads combine). A constant spread stays constant; the result lies between the
/// smallest and the largest value of each band.
pub fn smooth_spread(freqs_hz: &[f64], sd_db: &[f64], fraction: u32) -> Vec<f64> {
    let half = OCTAVE_RATIO_G.powf(1.0 / (2.0 * f64::from(fraction.max(1))));
    let n = freqs_hz.len().min(sd_db.len());
    (0..n)
        .map(|i| {
            let (lo, hi) = (freqs_hz[i] / half, freqs_hz[i] * half);
            let (mut sum, mut count) = (0.0, 0usize);
            for j in 0..n {
                if freqs_hz[j] >= lo && freqs_hz[j] <= hi {
                    sum += sd_db[j] * sd_db[j];
                    count += 1;
                }
            }
            (sum / count.max(1) as f64).sqrt()
        })
        .collect()
}

/// The unthinned limit lines of a set of golden curves.
#[derive(Debug, Clone, PartialEq)]
pub struct Envelope {
    /// Grid frequencies, Hz.
    pub freqs_hz: Vec<f64>,
    /// `μ + h_upper`, dB.
    pub upper_db: Vec<f64>,
    /// `μ − h_lower`, dB.
    pub lower_db: Vec<f64>,
    /// The upper line's half-width at each frequency, dB.
    pub upper_half_width_db: Vec<f64>,
    /// The lower line's half-width at each frequency, dB.
    pub lower_half_width_db: Vec<f64>,
    /// Line points (both sides counted) raised to the minimum half-width.
    pub n_at_min: usize,
    /// Line points cut to the maximum half-width: a golden curve may lie outside there.
    pub n_at_max: usize,
    /// Line points widened beyond `k·σ̃` to reach a golden curve.
    pub n_widened_to_golden: usize,
}

/// The lines of `stats` (module doc).
pub fn envelope(stats: &CurveStats, settings: &Settings) -> Envelope {
    let spread = match settings.smoothing_fraction {
        Some(n) => smooth_spread(&stats.freqs_hz, &stats.sd_db, n),
        None => stats.sd_db.clone(),
    };
    let mut e = Envelope {
        freqs_hz: stats.freqs_hz.clone(),
        upper_db: Vec::new(),
        lower_db: Vec::new(),
        upper_half_width_db: Vec::new(),
        lower_half_width_db: Vec::new(),
        n_at_min: 0,
        n_at_max: 0,
        n_widened_to_golden: 0,
    };
    for (i, sd) in spread.iter().enumerate() {
        let mean = stats.mean_db[i];
        let farthest = [stats.max_db[i] - mean, mean - stats.min_db[i]];
        let mut half = [0.0; 2];
        for (side, h) in half.iter_mut().enumerate() {
            let mut raw = settings.k * sd;
            if settings.cover_golden && farthest[side] > raw {
                raw = farthest[side];
                e.n_widened_to_golden += 1;
            }
            if raw < settings.min_half_width_db {
                e.n_at_min += 1;
            } else if raw > settings.max_half_width_db {
                e.n_at_max += 1;
            }
            *h = raw.clamp(settings.min_half_width_db, settings.max_half_width_db);
        }
        e.upper_db.push(mean + half[0]);
        e.lower_db.push(mean - half[1]);
        e.upper_half_width_db.push(half[0]);
        e.lower_half_width_db.push(half[1]);
    }
    e
}

/// The capability of a curve check: Cp and Cpk at every grid frequency against the lines
/// there ([`super::stats::capability`] with that frequency's μ and σ), and the smallest of
/// each with where it is.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct CurveCapability {
    /// Smallest Cp over the frequencies where both lines are defined.
    pub cp_min: Option<f64>,
    /// Where the smallest Cp is, Hz.
    pub cp_min_at_hz: Option<f64>,
    /// Smallest Cpk (Cpu/Cpl where one line is defined) over the frequencies.
    pub cpk_min: Option<f64>,
    /// Where the smallest Cpk is, Hz.
    pub cpk_min_at_hz: Option<f64>,
}

/// Capability of `stats` against the lines' levels `upper(f)` and `lower(f)` (`None`
/// where a line is not defined; frequencies with neither line are skipped).
pub fn curve_capability(
    stats: &CurveStats,
    upper: impl Fn(f64) -> Option<f64>,
    lower: impl Fn(f64) -> Option<f64>,
) -> CurveCapability {
    let mut out = CurveCapability::default();
    for (i, &f) in stats.freqs_hz.iter().enumerate() {
        let (u, l) = (upper(f), lower(f));
        if u.is_none() && l.is_none() {
            continue;
        }
        let Capability { cp, cpk } = capability(stats.mean_db[i], stats.sd_db[i], l, u);
        if let Some(cp) = cp {
            if out.cp_min.is_none_or(|m| cp < m) {
                out.cp_min = Some(cp);
                out.cp_min_at_hz = Some(f);
            }
        }
        if let Some(cpk) = cpk {
            if out.cpk_min.is_none_or(|m| cpk < m) {
                out.cpk_min = Some(cpk);
                out.cpk_min_at_hz = Some(f);
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid() -> Vec<f64> {
        (0..49)
            .map(|k| 100.0 * 2f64.powf(k as f64 / 12.0))
            .collect()
    }

    #[test]
    fn mean_and_spread_per_frequency() {
        // Two curves 1 dB apart everywhere: mean halfway, sample σ = 1/√2 (by hand).
        let f = grid();
        let a = vec![0.0; f.len()];
        let b = vec![1.0; f.len()];
        let s = curve_stats(&f, &[a, b]).unwrap();
        assert!(s.mean_db.iter().all(|m| *m == 0.5));
        assert!(s
            .sd_db
            .iter()
            .all(|v| (v - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-12));
        assert!(curve_stats(&f, &[vec![0.0; f.len()]]).is_err());
        assert!(curve_stats(&f, &[vec![0.0; 3], vec![0.0; 3]]).is_err());
    }

    #[test]
    fn smoothing_keeps_a_constant_and_stays_within_the_band_range() {
        let f = grid();
        let flat = vec![0.7; f.len()];
        for v in smooth_spread(&f, &flat, 3) {
            assert!((v - 0.7).abs() < 1e-12);
        }
        // A step from 0.2 to 1.0 at 800 Hz: every smoothed value stays within [0.2, 1.0],
        // far from the step it is the value itself (an RMS is a mean).
        let step: Vec<f64> = f
            .iter()
            .map(|&x| if x < 800.0 { 0.2 } else { 1.0 })
            .collect();
        let s = smooth_spread(&f, &step, 3);
        assert!(s.iter().all(|v| (0.2 - 1e-12..=1.0 + 1e-12).contains(v)));
        assert!((s[0] - 0.2).abs() < 1e-12 && (s[s.len() - 1] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn half_width_is_clamped() {
        let f = grid();
        let stats = CurveStats {
            freqs_hz: f.clone(),
            n_curves: 30,
            mean_db: vec![-3.0; f.len()],
            sd_db: f
                .iter()
                .map(|&x| if x < 400.0 { 0.1 } else { 3.0 })
                .collect(),
            min_db: vec![-3.1; f.len()],
            max_db: vec![-2.9; f.len()],
        };
        let s = Settings::default();
        let e = envelope(&stats, &s);
        for (i, &x) in f.iter().enumerate() {
            let want = if x < 400.0 { 1.0 } else { 6.0 };
            assert_eq!(e.upper_half_width_db[i], want);
            assert_eq!(e.lower_half_width_db[i], want);
            assert_eq!(e.upper_db[i], -3.0 + want);
            assert_eq!(e.lower_db[i], -3.0 - want);
        }
        assert_eq!(e.n_at_min + e.n_at_max, 2 * f.len());
        assert_eq!(e.n_widened_to_golden, 0);
    }

    #[test]
    fn lines_reach_the_farthest_golden_curve() {
        // σ 0.5 → 3σ = 1.5 dB, but one golden curve sits 2.5 dB above the mean: the upper
        // line moves out to it, the lower stays at 1.5 dB; without covering both at 1.5.
        let f = grid();
        let stats = CurveStats {
            freqs_hz: f.clone(),
            n_curves: 30,
            mean_db: vec![0.0; f.len()],
            sd_db: vec![0.5; f.len()],
            min_db: vec![-1.0; f.len()],
            max_db: vec![2.5; f.len()],
        };
        let e = envelope(&stats, &Settings::default());
        assert!(e.upper_db.iter().all(|v| *v == 2.5));
        assert!(e.lower_db.iter().all(|v| *v == -1.5));
        assert_eq!(e.n_widened_to_golden, f.len());
        let plain = Settings {
            cover_golden: false,
            ..Settings::default()
        };
        let e = envelope(&stats, &plain);
        assert!(e.upper_db.iter().all(|v| *v == 1.5));
    }
}
