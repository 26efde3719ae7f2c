//! Fractional-octave smoothing in the power domain, and levels read off a fine spectrum.
//!
//! Used by the checks (after the analysis) on a measurement's [`FineSpectrum`]. The average
//! over each band is of |H|² (power), the usual choice for acoustic responses because it
//! does not let deep narrow notches dominate (common practice). Band edges follow IEC
//! 61260-1 base-10 (`f·G^(±1/(2N))`) and are clipped to the excited band, so points near the
//! top and bottom of the sweep do not average in unexcited bins and read low.

use super::spectrum::FineSpectrum;
use crate::dsp::bands::OCTAVE_RATIO_G;

/// Smallest power used before taking a logarithm (−300 dB), so silence gives a number.
const POWER_FLOOR: f64 = 1e-30;

/// Power at a frequency by linear interpolation between fine bins.
fn power_at(fine: &FineSpectrum, freq_hz: f64) -> f64 {
    let n = fine.power.len();
    if n == 0 || fine.df_hz <= 0.0 {
        return POWER_FLOOR;
    }
    let pos = (freq_hz / fine.df_hz).clamp(0.0, (n - 1) as f64);
    let i = (pos.floor() as usize).min(n.saturating_sub(2));
    let frac = pos - i as f64;
    if n == 1 {
        return fine.power[0];
    }
    fine.power[i] * (1.0 - frac) + fine.power[i + 1] * frac
}

/// ∫₀^x of the piecewise-linear power, from the running integral plus the partial bin.
fn integral_to(fine: &FineSpectrum, x_hz: f64) -> f64 {
    let n = fine.power.len();
    if n < 2 || fine.cumulative.len() != n {
        return power_at(fine, x_hz) * x_hz.max(0.0);
    }
    let pos = (x_hz / fine.df_hz).clamp(0.0, (n - 1) as f64);
    let i = (pos.floor() as usize).min(n - 2);
    let dx = (pos - i as f64) * fine.df_hz;
    fine.cumulative[i] + 0.5 * (fine.power[i] + power_at(fine, x_hz)) * dx
}

/// Mean power over `[lo_hz, hi_hz]`, treating the fine spectrum as piecewise linear and
/// integrating it exactly (two look-ups in the running integral).
fn mean_power(fine: &FineSpectrum, lo_hz: f64, hi_hz: f64) -> f64 {
    if hi_hz <= lo_hz {
        return power_at(fine, lo_hz);
    }
    (integral_to(fine, hi_hz) - integral_to(fine, lo_hz)) / (hi_hz - lo_hz)
}

/// Response at each grid frequency smoothed over 1/`fraction` octave (power average), dB.
pub fn smooth_on_grid(fine: &FineSpectrum, grid_hz: &[f64], fraction: u32) -> Vec<f64> {
    let half = OCTAVE_RATIO_G.powf(1.0 / (2.0 * f64::from(fraction.max(1))));
    let (band_lo, band_hi) = fine.band_hz;
    grid_hz
        .iter()
        .map(|&f| {
            let lo = (f / half).max(band_lo);
            let hi = (f * half).min(band_hi);
            10.0 * mean_power(fine, lo, hi).max(POWER_FLOOR).log10()
        })
        .collect()
}

/// Unsmoothed level at any frequency, dB (power interpolated between fine bins).
pub fn level_at_db(fine: &FineSpectrum, freq_hz: f64) -> f64 {
    10.0 * power_at(fine, freq_hz).max(POWER_FLOOR).log10()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fine_from(df_hz: f64, n: usize, f: impl Fn(f64) -> f64) -> FineSpectrum {
        FineSpectrum::new(
            df_hz,
            (0..n).map(|k| f(k as f64 * df_hz)).collect(),
            (20.0, 20_000.0),
        )
    }

    // A flat spectrum smooths to itself at any bandwidth (definition of a mean).
    #[test]
    fn flat_stays_flat() {
        let fine = fine_from(0.5, 48_001, |_| 0.25);
        for v in smooth_on_grid(&fine, &[20.0, 1000.0, 19_000.0], 6) {
            assert!((v - 10.0 * 0.25f64.log10()).abs() < 1e-12);
        }
    }

    // Power ∝ f integrates in closed form: mean over [a, b] is (a + b)/2, for the band edges
    // f·G^(∓1/12) of a 1/6-octave band at 1 kHz (IEC 61260-1 base-10 edges).
    #[test]
    fn linear_power_mean_is_band_centre() {
        let fine = fine_from(0.5, 48_001, |f| f);
        let half = OCTAVE_RATIO_G.powf(1.0 / 12.0);
        let (a, b) = (1000.0 / half, 1000.0 * half);
        let got = smooth_on_grid(&fine, &[1000.0], 6)[0];
        let want = 10.0 * (0.5 * (a + b)).log10();
        assert!((got - want).abs() < 1e-9, "{got} vs {want}");
    }

    // Bands are clipped to the excited band: a spectrum that is zero above 20 kHz must not
    // pull the top point down (the pitfall of smoothing near the sweep's stop frequency).
    #[test]
    fn bands_clip_to_excited_band() {
        let fine = fine_from(0.5, 48_001, |f| if f <= 20_000.0 { 1.0 } else { 0.0 });
        let v = smooth_on_grid(&fine, &[19_900.0], 3)[0];
        assert!(v.abs() < 1e-9, "top point reads {v} dB");
    }
}
