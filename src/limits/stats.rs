//! Sample statistics and process capability of one set of values.
//!
//! Conventions, so that an independent computation (numpy) gives the same numbers:
//! - the standard deviation is the *sample* one, with n − 1 in the denominator
//!   (numpy `std(ddof=1)`): the golden units are a sample of the line, not the line;
//! - a quantile is read by linear interpolation between order statistics at position
//!   `q·(n − 1)` (Hyndman and Fan's definition 7, numpy's default `method="linear"`);
//! - capability follows the usual SPC definitions (NIST/SEMATECH e-Handbook of Statistical
//!   Methods, §6.1.6 "What is Process Capability?", from memory):
//!   `Cp = (USL − LSL)/(6σ)`, `Cpk = min(USL − μ, μ − LSL)/(3σ)`; with one limit only,
//!   `Cpu = (USL − μ)/(3σ)` or `Cpl = (μ − LSL)/(3σ)`, reported as that check's Cpk, and no
//!   Cp (it needs both limits).

/// Mean, spread and range of a set of values.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Summary {
    /// Number of values.
    pub n: usize,
    /// Arithmetic mean.
    pub mean: f64,
    /// Sample standard deviation (n − 1); 0 for a single value.
    pub sd: f64,
    /// Smallest value.
    pub min: f64,
    /// Largest value.
    pub max: f64,
}

/// The summary of `values`; `None` when there are none or one is not finite.
pub fn summary(values: &[f64]) -> Option<Summary> {
    if values.is_empty() || values.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let n = values.len();
    let mean = values.iter().sum::<f64>() / n as f64;
    let sd = if n < 2 {
        0.0
    } else {
        let ss: f64 = values.iter().map(|v| (v - mean) * (v - mean)).sum();
        (ss / (n - 1) as f64).sqrt()
    };
    let min = values.iter().copied().fold(f64::INFINITY, f64::min);
    let max = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    Some(Summary {
        n,
        mean,
        sd,
        min,
        max,
    })
}

/// The `q`-quantile of `values` (0 ≤ q ≤ 1) by linear interpolation (module doc); `None`
/// for no values, a non-finite value or `q` outside [0, 1].
pub fn quantile(values: &[f64], q: f64) -> Option<f64> {
    if values.is_empty() || !(0.0..=1.0).contains(&q) || values.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let pos = q * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    let frac = pos - lo as f64;
    Some(sorted[lo] + frac * (sorted[hi] - sorted[lo]))
}

/// Process capability of a characteristic with mean `mean` and spread `sd` against the
/// limits (module doc). `None` fields where not defined: Cp without both limits, either
/// without any limit or with σ = 0 (a constant characteristic has no finite capability).
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct Capability {
    /// `(USL − LSL)/(6σ)`.
    pub cp: Option<f64>,
    /// `min(USL − μ, μ − LSL)/(3σ)`; Cpu or Cpl with one limit.
    pub cpk: Option<f64>,
}

/// Capability of `(mean, sd)` against `lsl` and `usl` (either may be absent).
pub fn capability(mean: f64, sd: f64, lsl: Option<f64>, usl: Option<f64>) -> Capability {
    if !(sd > 0.0 && sd.is_finite() && mean.is_finite()) {
        return Capability::default();
    }
    let cp = match (lsl, usl) {
        (Some(l), Some(u)) => Some((u - l) / (6.0 * sd)),
        _ => None,
    };
    let cpu = usl.map(|u| (u - mean) / (3.0 * sd));
    let cpl = lsl.map(|l| (mean - l) / (3.0 * sd));
    let cpk = match (cpl, cpu) {
        (Some(a), Some(b)) => Some(a.min(b)),
        (a, b) => a.or(b),
    };
    Capability { cp, cpk }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn summary_of_a_hand_computed_set() {
        // 2, 4, 4, 4, 5, 5, 7, 9: mean 5, Σ(x−5)² = 32, sample variance 32/7 (by hand).
        let s = summary(&[2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0]).unwrap();
        assert_eq!((s.n, s.mean, s.min, s.max), (8, 5.0, 2.0, 9.0));
        assert!((s.sd - (32.0f64 / 7.0).sqrt()).abs() < 1e-12);
        assert_eq!(summary(&[3.0]).unwrap().sd, 0.0);
        assert!(summary(&[]).is_none());
        assert!(summary(&[1.0, f64::NAN]).is_none());
    }

    #[test]
    fn quantile_interpolates_between_order_statistics() {
        // Definition 7: position q·(n−1); [1, 2, 3, 4] at 0.5 → 2.5, at 0.9 → 3.7 (by hand).
        let v = [4.0, 1.0, 3.0, 2.0];
        assert_eq!(quantile(&v, 0.0), Some(1.0));
        assert_eq!(quantile(&v, 1.0), Some(4.0));
        assert_eq!(quantile(&v, 0.5), Some(2.5));
        assert!((quantile(&v, 0.9).unwrap() - 3.7).abs() < 1e-12);
        assert_eq!(quantile(&v, 1.5), None);
    }

    #[test]
    fn capability_two_and_one_sided() {
        // μ 0, σ 1, limits ±3 → Cp = Cpk = 1; shifted to μ 1 → Cpk = 2/3 (by hand).
        let c = capability(0.0, 1.0, Some(-3.0), Some(3.0));
        assert_eq!((c.cp, c.cpk), (Some(1.0), Some(1.0)));
        let c = capability(1.0, 1.0, Some(-3.0), Some(3.0));
        assert!((c.cpk.unwrap() - 2.0 / 3.0).abs() < 1e-12);
        let c = capability(1.0, 0.5, None, Some(4.0));
        assert_eq!((c.cp, c.cpk), (None, Some(2.0)));
        assert_eq!(capability(1.0, 0.0, None, Some(4.0)), Capability::default());
    }
}
