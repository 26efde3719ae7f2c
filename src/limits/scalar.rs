//! Limits of a scalar check (sensitivity, THD, one harmonic, rub and buzz, balance) from
//! the golden units' values of it.
//!
//! Every value here is in dB (THD as `20·lg(THD / 100 %)`, the scale of its margin), and a
//! limit is placed at a distance from the golden mean μ, its *half-width*:
//!
//! - sigma ([`Method::Sigma`]): `k·σ`;
//! - quantile ([`Method::Quantile`] q): as far as the golden set's `q`-quantile (upper limit) or
//!   `(1 − q)`-quantile (lower limit) lies from μ;
//!
//! with [`Settings::cover_golden`] (the default) and the sigma method, raised where needed
//! to reach the farthest golden value on its side (a limit never rejects a unit it was
//! made from; a quantile is a choice to leave the tail out, so it is not widened);
//! then clamped to `[min_half_width_db, max_half_width_db]` (the minimum is the *floor* of
//! the width: a limit never closer to the mean than that, however tight the golden units
//! are). A one-sided limit may also have an absolute floor: an upper limit never below it
//! (distortion at a level where the measurement's own noise sets the reading). Limits are
//! then rounded outward to [`SCALAR_STEP_DB`].

use super::stats::{capability, quantile, summary, Capability, Summary};
use super::{LimitsError, Method, Settings};

/// Precision of a derived scalar limit, dB; rounded outward.
pub const SCALAR_STEP_DB: f64 = 0.01;

/// Which limits a check has.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Sides {
    /// A lower and an upper limit (sensitivity).
    Both,
    /// An upper limit only (THD, a harmonic, rub and buzz, balance).
    Upper,
}

/// Derived limits of one scalar check, with the golden statistics they came from.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ScalarLimits {
    /// The golden values' summary.
    pub golden: Summary,
    /// Lower limit, dB (`None` for a one-sided check).
    pub lsl_db: Option<f64>,
    /// Upper limit, dB.
    pub usl_db: f64,
    /// Distance of the upper limit from the mean before rounding, dB.
    pub half_width_db: f64,
    /// Whether the half-width was raised to the minimum, cut to the maximum, or an upper
    /// limit raised to its absolute floor.
    pub clamp: Clamp,
    /// Capability of the golden set against the rounded limits.
    pub capability: Capability,
}

/// What bounded a derived limit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Clamp {
    /// Neither bound: the statistic itself.
    None,
    /// Raised to the minimum half-width.
    MinHalfWidth,
    /// Cut to the maximum half-width.
    MaxHalfWidth,
    /// Raised to the absolute floor.
    Floor,
    /// Widened beyond the statistic to take in the farthest golden value.
    Golden,
}

/// Derive the limits of a check from its golden `values` (dB; module doc). `floor_db` is
/// the absolute floor of an upper limit (ignored for [`Sides::Both`]).
pub fn derive_scalar(
    values: &[f64],
    sides: Sides,
    settings: &Settings,
    floor_db: Option<f64>,
) -> Result<ScalarLimits, LimitsError> {
    let golden = summary(values).filter(|s| s.n >= 2).ok_or_else(|| {
        LimitsError(format!(
            "expected at least 2 finite golden values, found {} value(s){}",
            values.len(),
            if values.iter().any(|v| !v.is_finite()) {
                " with one not a number"
            } else {
                ""
            }
        ))
    })?;
    // A quantile is the engineer's choice to leave the tail out: never covered.
    let cover = settings.cover_golden && settings.method == Method::Sigma;
    let clamp_half = |h: f64, farthest: f64| {
        let (h, widened) = if cover && farthest > h {
            (farthest, true)
        } else {
            (h, false)
        };
        if h < settings.min_half_width_db {
            (settings.min_half_width_db, Clamp::MinHalfWidth)
        } else if h > settings.max_half_width_db {
            (settings.max_half_width_db, Clamp::MaxHalfWidth)
        } else if widened {
            (h, Clamp::Golden)
        } else {
            (h, Clamp::None)
        }
    };
    let (up_raw, lo_raw) = match settings.method {
        Method::Sigma => (settings.k * golden.sd, settings.k * golden.sd),
        Method::Quantile(q) => {
            let hi = quantile(values, q).expect("finite values and q checked by Settings");
            let lo = quantile(values, 1.0 - q).expect("as above");
            (hi - golden.mean, golden.mean - lo)
        }
    };
    let (up_half, mut clamp) = clamp_half(up_raw, golden.max - golden.mean);
    let mut usl = golden.mean + up_half;
    if let (Sides::Upper, Some(floor)) = (sides, floor_db) {
        if usl < floor {
            usl = floor;
            clamp = Clamp::Floor;
        }
    }
    let lsl = match sides {
        Sides::Upper => None,
        Sides::Both => {
            let (lo_half, lo_clamp) = clamp_half(lo_raw, golden.mean - golden.min);
            if clamp == Clamp::None {
                clamp = lo_clamp;
            }
            Some(golden.mean - lo_half)
        }
    };
    let usl_db = round_up(usl, SCALAR_STEP_DB);
    let lsl_db = lsl.map(|l| round_down(l, SCALAR_STEP_DB));
    Ok(ScalarLimits {
        golden,
        lsl_db,
        usl_db,
        half_width_db: usl - golden.mean,
        clamp,
        capability: capability(golden.mean, golden.sd, lsl_db, Some(usl_db)),
    })
}

/// `v` rounded up to a multiple of `step`.
pub fn round_up(v: f64, step: f64) -> f64 {
    clean(snapped(v / step).unwrap_or_else(|| (v / step).ceil()) * step)
}

/// `v` rounded down to a multiple of `step`.
pub fn round_down(v: f64, step: f64) -> f64 {
    clean(snapped(v / step).unwrap_or_else(|| (v / step).floor()) * step)
}

/// A step count within binary noise of a whole number (`0.8 / 0.01` is 80.00000000000001):
/// that number, so that a limit already on the step is not moved a step further.
fn snapped(steps: f64) -> Option<f64> {
    let r = steps.round();
    ((steps - r).abs() < 1e-9 * r.abs().max(1.0)).then_some(r)
}

/// Drop the binary noise of a product like `-433·0.01` (−4.33 exactly as printed).
fn clean(v: f64) -> f64 {
    let s = format!("{v:.9}");
    s.parse().unwrap_or(v)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn values() -> Vec<f64> {
        // μ = −8.3, σ = 0.4 exactly (±0.4·√(9/8)·... built by hand below).
        let d = 0.4 * (9.0f64 / 10.0).sqrt();
        let mut v = vec![-8.3 + d; 5];
        v.extend(vec![-8.3 - d; 5]);
        v
    }

    #[test]
    fn sigma_limits_two_sided() {
        // 10 values ±d around μ: Σ(x−μ)² = 10·d², σ² = 10d²/9 = 0.16 → σ = 0.4 (by hand);
        // k = 3 → ±1.2 dB → −9.5 and −7.1 dB; Cp = 2.4/2.4 = 1.
        let s = Settings::default();
        let l = derive_scalar(&values(), Sides::Both, &s, None).unwrap();
        assert!((l.golden.sd - 0.4).abs() < 1e-12);
        assert_eq!((l.lsl_db, l.usl_db), (Some(-9.5), -7.1));
        assert!((l.capability.cp.unwrap() - 1.0).abs() < 1e-9);
        assert_eq!(l.clamp, Clamp::None);
    }

    #[test]
    fn clamps_and_floor() {
        let s = Settings::default();
        // σ = 0.1 → 3σ = 0.3 < 1 dB minimum.
        let v: Vec<f64> = (0..10).map(|i| -60.0 + 0.1 * (i % 2) as f64).collect();
        let l = derive_scalar(&v, Sides::Upper, &s, None).unwrap();
        assert_eq!(l.clamp, Clamp::MinHalfWidth);
        assert_eq!(l.lsl_db, None);
        assert!((l.usl_db - round_up(l.golden.mean + 1.0, 0.01)).abs() < 1e-12);
        let l = derive_scalar(&v, Sides::Upper, &s, Some(-50.0)).unwrap();
        assert_eq!((l.usl_db, l.clamp), (-50.0, Clamp::Floor));
        // σ ≈ 5 → 15 dB > 6 dB maximum.
        let v: Vec<f64> = (0..10).map(|i| -60.0 + 10.0 * (i % 2) as f64).collect();
        let l = derive_scalar(&v, Sides::Upper, &s, None).unwrap();
        assert_eq!(l.clamp, Clamp::MaxHalfWidth);
    }

    #[test]
    fn a_far_golden_value_widens_the_limit() {
        // 29 zeros and one 10 (by hand): μ = 1/3, Σ(x−μ)² = 29/9 + (29/3)² = 96.67,
        // σ = √(96.67/29) = 1.826, 3σ = 5.48 < max − μ = 9.67 → the limit reaches 10.
        let mut v = vec![0.0; 29];
        v.push(10.0);
        let s = Settings {
            max_half_width_db: 20.0,
            ..Settings::default()
        };
        let l = derive_scalar(&v, Sides::Upper, &s, None).unwrap();
        assert_eq!((l.usl_db, l.clamp), (10.0, Clamp::Golden));
        let plain = Settings {
            cover_golden: false,
            ..s
        };
        let l = derive_scalar(&v, Sides::Upper, &plain, None).unwrap();
        assert!(l.usl_db < 10.0 && l.clamp == Clamp::None);
    }

    #[test]
    fn quantile_method() {
        // 1..=11 dB: μ = 6, 0.9-quantile at position 9 → 10 → half-width 4 dB (by hand).
        let v: Vec<f64> = (1..=11).map(f64::from).collect();
        let s = Settings {
            method: Method::Quantile(0.9),
            ..Settings::default()
        };
        let l = derive_scalar(&v, Sides::Both, &s, None).unwrap();
        assert_eq!((l.lsl_db, l.usl_db), (Some(2.0), 10.0));
    }

    #[test]
    fn rounding_is_outward_and_clean() {
        assert_eq!(round_up(-4.3312, 0.01), -4.33);
        assert_eq!(round_down(-4.3312, 0.01), -4.34);
        assert_eq!(round_up(0.8, 0.01), 0.8);
    }
}
