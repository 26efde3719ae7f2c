//! Limits from golden units: the statistics behind `tragus limits derive`.
//!
//! Pure arithmetic on numbers already measured; gathering the golden units from a store,
//! writing the files and judging units is the bench's ([`crate::bench`], `derive`). The
//! parts:
//!
//! - [`stats`]: mean, sample σ, quantiles, Cp and Cpk;
//! - [`curve`]: per-frequency mean and σ of golden curves, the lines `μ ± clamp(k·σ)`;
//! - [`thin`]: a line thinned to a few breakpoints with a one-sided, bounded error;
//! - [`scalar`]: limits of scalar checks from the golden values;
//! - [`predicted_yield`]: the share of a set of units that passes.
//!
//! Layer: stages (L3), using only the foundation (`dsp`) below it.

pub mod curve;
pub mod scalar;
pub mod stats;
pub mod thin;

/// Fewest golden units a derivation accepts. The spread of n units is itself uncertain by
/// about 1/√(2(n − 1)) of its value (24 % at 10 units, 13 % at 30): below 10 a limit at
/// k·σ says more about which units were picked than about the line.
pub const MIN_GOLDEN_UNITS: usize = 10;

/// Default number of standard deviations from the mean to a limit.
pub const DEFAULT_K: f64 = 3.0;
/// Default smallest distance from the golden mean to a limit, dB.
pub const DEFAULT_MIN_HALF_WIDTH_DB: f64 = 1.0;
/// Default largest distance from the golden mean to a limit, dB.
pub const DEFAULT_MAX_HALF_WIDTH_DB: f64 = 6.0;
/// Default bound of the thinning error, dB.
pub const DEFAULT_MAX_ERROR_DB: f64 = 0.25;

/// A derivation's numbers could not be made (in words).
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{0}")]
pub struct LimitsError(pub String);

/// How a scalar limit's distance from the golden mean is found ([`scalar`]).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "method", content = "q", rename_all = "snake_case")]
pub enum Method {
    /// `k·σ`.
    Sigma,
    /// The golden set's q-quantile (and (1 − q)-quantile for a lower limit), 0.5 < q < 1.
    Quantile(f64),
}

/// The choices of a derivation.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Settings {
    /// Standard deviations from the mean to a limit (curves, and scalars with
    /// [`Method::Sigma`]).
    pub k: f64,
    /// Smallest distance from the golden mean to a limit, dB.
    pub min_half_width_db: f64,
    /// Largest distance from the golden mean to a limit, dB.
    pub max_half_width_db: f64,
    /// Smooth the golden curves' spread over 1/N octave before the lines are drawn
    /// ([`curve::smooth_spread`]); `None` for no smoothing.
    pub smoothing_fraction: Option<u32>,
    /// Bound of the thinning error, dB ([`thin`]).
    pub max_error_db: f64,
    /// How scalar limits are placed.
    pub method: Method,
    /// Widen a limit, where needed, to take in every golden value ([`curve`]; [`scalar`] with
    /// the sigma method only).
    pub cover_golden: bool,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            k: DEFAULT_K,
            min_half_width_db: DEFAULT_MIN_HALF_WIDTH_DB,
            max_half_width_db: DEFAULT_MAX_HALF_WIDTH_DB,
            smoothing_fraction: None,
            max_error_db: DEFAULT_MAX_ERROR_DB,
            method: Method::Sigma,
            cover_golden: true,
        }
    }
}

impl Settings {
    /// Every problem of the settings, in words naming the option (`--k`, …).
    pub fn problems(&self) -> Vec<String> {
        let mut p = Vec::new();
        if !(self.k > 0.0 && self.k.is_finite()) {
            p.push(format!("--k: expected a positive number, found {}", self.k));
        }
        if !(self.min_half_width_db >= 0.0 && self.min_half_width_db.is_finite()) {
            p.push(format!(
                "--min-half-width-db: expected 0 dB or more, found {}",
                self.min_half_width_db
            ));
        }
        if !(self.max_half_width_db > 0.0 && self.max_half_width_db.is_finite())
            || self.max_half_width_db < self.min_half_width_db
        {
            p.push(format!(
                "--max-half-width-db: expected a positive width at least --min-half-width-db \
                 ({}), found {}",
                self.min_half_width_db, self.max_half_width_db
            ));
        }
        if self.smoothing_fraction == Some(0) {
            p.push("--smoothing: expected 1/N with N ≥ 1, found 1/0".into());
        }
        if !(self.max_error_db >= thin::MIN_MAX_ERROR_DB && self.max_error_db.is_finite()) {
            p.push(format!(
                "--max-error-db: expected at least {} dB, found {}",
                thin::MIN_MAX_ERROR_DB,
                self.max_error_db
            ));
        }
        if let Method::Quantile(q) = self.method {
            if !(q > 0.5 && q < 1.0) {
                p.push(format!(
                    "--quantile: expected a quantile between 0.5 and 1 (exclusive), found {q}"
                ));
            }
        }
        p
    }
}

/// The share of units that pass (`None` for an empty set): each unit's verdict under the
/// derived plan as a pass (`true`) or not.
pub fn predicted_yield(passes: impl IntoIterator<Item = bool>) -> Option<f64> {
    let (mut n, mut n_pass) = (0usize, 0usize);
    for p in passes {
        n += 1;
        n_pass += usize::from(p);
    }
    (n > 0).then(|| n_pass as f64 / n as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn settings_problems_name_the_option() {
        assert!(Settings::default().problems().is_empty());
        let bad = Settings {
            k: 0.0,
            max_half_width_db: 0.5,
            smoothing_fraction: Some(0),
            max_error_db: 0.0,
            method: Method::Quantile(0.4),
            ..Settings::default()
        };
        let p = bad.problems().join("\n");
        for opt in [
            "--k",
            "--max-half-width-db",
            "--smoothing",
            "--max-error-db",
            "--quantile",
        ] {
            assert!(p.contains(opt), "{p}");
        }
    }

    #[test]
    fn yield_is_a_share() {
        assert_eq!(predicted_yield([true, true, false, true]), Some(0.75));
        assert_eq!(predicted_yield(std::iter::empty()), None);
    }
}
