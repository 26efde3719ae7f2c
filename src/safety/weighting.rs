//! Frequency weightings A and C of IEC 61672-1, and the weighted level of a pressure power
//! spectrum.
//!
//! Used by the listening step's level cap (issue 5 point 5): its A-weighted level at the
//! reference position is computed from the stimulus spectrum times the unit's corrected
//! response, given here as (frequency, mean-square pressure) bins.
//!
//! # Where the numbers come from
//!
//! The pole frequencies are not pasted: they are computed from the standard's design inputs
//! (IEC 61672-1:2002 §5.4.11; ed. 2 2013, Annex E):
//!
//! ```text
//! f_r = 1000 Hz, f_L = 10^1.5 Hz, f_H = 10^3.9 Hz, f_A = 10^2.45 Hz, D² = 1/2
//! b = [f_r² + f_L²·f_H²/f_r² − D·(f_L² + f_H²)] / (1 − D),   c = f_L²·f_H²
//! f1 = √((−b − √(b² − 4c))/2),  f4 = √((−b + √(b² − 4c))/2)
//! f2 = ((3 − √5)/2)·f_A,        f3 = ((3 + √5)/2)·f_A
//! A(f) = 20·lg[f4²·f⁴ / ((f² + f1²)·(f² + f2²)^½·(f² + f3²)^½·(f² + f4²))] − A1000
//! C(f) = 20·lg[f4²·f² / ((f² + f1²)·(f² + f4²))] − C1000
//! ```
//!
//! A1000 and C1000 are the unnormalised responses at 1 kHz, computed here too (the standard
//! rounds them to −2.000 dB and −0.062 dB). The weightings are the magnitudes of analogue
//! filters and even in f; at 0 Hz both are −∞ dB (a power gain of 0), so a DC bin adds nothing.

use crate::calibration::P_REF_PA;
use std::sync::LazyLock;

/// Reference frequency f_r, Hz (IEC 61672-1:2002 §5.4.11).
pub const F_R_HZ: f64 = 1000.0;

/// The design inputs' derived constants, computed once.
struct Design {
    f1_hz: f64,
    f2_hz: f64,
    f3_hz: f64,
    f4_hz: f64,
    a1000_db: f64,
    c1000_db: f64,
}

static DESIGN: LazyLock<Design> = LazyLock::new(|| {
    // IEC 61672-1:2002 §5.4.11 / 2013 Annex E: f_L = 10^1.5 Hz, f_H = 10^3.9 Hz,
    // f_A = 10^2.45 Hz, D² = 1/2.
    let f_l_hz = 10f64.powf(1.5);
    let f_h_hz = 10f64.powf(3.9);
    let f_a_hz = 10f64.powf(2.45);
    let d = 0.5f64.sqrt();
    let (fr2, fl2, fh2) = (F_R_HZ * F_R_HZ, f_l_hz * f_l_hz, f_h_hz * f_h_hz);
    let b = (fr2 + fl2 * fh2 / fr2 - d * (fl2 + fh2)) / (1.0 - d);
    let c = fl2 * fh2;
    // f4² is the larger root of x² + b·x + c = 0; f1² = c/f4² (the roots' product is c) is
    // the same root without the cancellation of −b − √(b² − 4c), which loses five digits.
    let f4_sq = (-b + (b * b - 4.0 * c).sqrt()) / 2.0;
    let f1_sq = c / f4_sq;
    let sqrt5 = 5f64.sqrt();
    let mut design = Design {
        f1_hz: f1_sq.sqrt(),
        f2_hz: (3.0 - sqrt5) / 2.0 * f_a_hz,
        f3_hz: (3.0 + sqrt5) / 2.0 * f_a_hz,
        f4_hz: f4_sq.sqrt(),
        a1000_db: 0.0,
        c1000_db: 0.0,
    };
    design.a1000_db = 10.0 * a_power_unnormalised(&design, F_R_HZ).log10();
    design.c1000_db = 10.0 * c_power_unnormalised(&design, F_R_HZ).log10();
    design
});

/// |A(f)|² before the 1 kHz normalisation (the bracket of the module doc, squared).
fn a_power_unnormalised(d: &Design, freq_hz: f64) -> f64 {
    let f2 = freq_hz * freq_hz;
    let f4_sq = d.f4_hz * d.f4_hz;
    let num = f4_sq * f2 * f2;
    let den = (f2 + d.f1_hz * d.f1_hz)
        * ((f2 + d.f2_hz * d.f2_hz) * (f2 + d.f3_hz * d.f3_hz)).sqrt()
        * (f2 + f4_sq);
    let ratio = num / den;
    ratio * ratio
}

/// |C(f)|² before the 1 kHz normalisation.
fn c_power_unnormalised(d: &Design, freq_hz: f64) -> f64 {
    let f2 = freq_hz * freq_hz;
    let f4_sq = d.f4_hz * d.f4_hz;
    let ratio = f4_sq * f2 / ((f2 + d.f1_hz * d.f1_hz) * (f2 + f4_sq));
    ratio * ratio
}

/// The four pole frequencies f1..f4 of the A and C weightings, Hz, computed from the design
/// inputs (module doc).
pub fn pole_frequencies_hz() -> [f64; 4] {
    let d = &*DESIGN;
    [d.f1_hz, d.f2_hz, d.f3_hz, d.f4_hz]
}

/// A1000: the unnormalised A response at 1 kHz, dB (≈ −1.9997; the standard rounds to −2.000).
pub fn a1000_db() -> f64 {
    DESIGN.a1000_db
}

/// C1000: the unnormalised C response at 1 kHz, dB (≈ −0.0619; the standard rounds to −0.062).
pub fn c1000_db() -> f64 {
    DESIGN.c1000_db
}

/// A frequency weighting of IEC 61672-1.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Weighting {
    /// A-weighting (IEC 61672-1:2002 §5.4.11; 2013 Annex E).
    A,
    /// C-weighting (IEC 61672-1:2002 §5.4.11; 2013 Annex E).
    C,
    /// Z (zero) weighting: flat, 0 dB at every frequency.
    Z,
}

impl Weighting {
    /// Power gain |W(f)|² (1.0 at 1 kHz for A and C); 0 at 0 Hz for A and C.
    pub fn power_gain(self, freq_hz: f64) -> f64 {
        let d = &*DESIGN;
        match self {
            Weighting::A => a_power_unnormalised(d, freq_hz) / 10f64.powf(d.a1000_db / 10.0),
            Weighting::C => c_power_unnormalised(d, freq_hz) / 10f64.powf(d.c1000_db / 10.0),
            Weighting::Z => 1.0,
        }
    }

    /// Weighting in dB at `freq_hz` (0 dB at 1 kHz; −∞ at 0 Hz for A and C).
    pub fn gain_db(self, freq_hz: f64) -> f64 {
        10.0 * self.power_gain(freq_hz).log10()
    }

    /// Letter used in units such as dB(A).
    pub fn letter(self) -> &'static str {
        match self {
            Weighting::A => "A",
            Weighting::C => "C",
            Weighting::Z => "Z",
        }
    }
}

/// A-weighting in dB at `freq_hz` (IEC 61672-1; 0 dB at 1 kHz).
pub fn a_weighting_db(freq_hz: f64) -> f64 {
    Weighting::A.gain_db(freq_hz)
}

/// C-weighting in dB at `freq_hz` (IEC 61672-1; 0 dB at 1 kHz).
pub fn c_weighting_db(freq_hz: f64) -> f64 {
    Weighting::C.gain_db(freq_hz)
}

/// Why a spectrum has no weighted level.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum WeightingError {
    /// No bins at all.
    #[error(
        "expected at least one spectrum bin (frequency Hz, mean-square pressure Pa²), found none"
    )]
    Empty,
    /// A frequency that is negative, NaN or infinite.
    #[error("expected a finite frequency of 0 Hz or more at bin {index}, found {found_hz} Hz")]
    BadFrequency {
        /// Index of the bin in the input.
        index: usize,
        /// The frequency found, Hz.
        found_hz: f64,
    },
    /// A mean-square pressure that is negative, NaN or infinite.
    #[error(
        "expected a finite mean-square pressure of 0 Pa² or more at bin {index}, found {found_pa2} Pa²"
    )]
    BadPower {
        /// Index of the bin in the input.
        index: usize,
        /// The mean-square pressure found, Pa².
        found_pa2: f64,
    },
    /// Every bin is zero after weighting: the level would be −∞ dB.
    #[error(
        "expected some sound power after {weighting}-weighting, found none (the level would be −∞ dB)"
    )]
    NoPower {
        /// The weighting's letter.
        weighting: &'static str,
    },
}

/// Weighted sound pressure level in dB re 20 µPa (ISO 1683) of a pressure power spectrum.
///
/// `bins_hz_pa2` holds (frequency in Hz, mean-square pressure in Pa² carried by that bin)
/// pairs: a one-sided power spectrum whose bins add up to the signal's mean-square pressure
/// (Parseval), or a list of tones (a tone of rms pressure p carries p²). The level is
/// `10·lg(Σ |W(fᵢ)|²·pᵢ² / p₀²)`: powers add, whatever the phases, which is exact for tones of
/// different frequencies and for the bins of one spectrum.
///
/// # Errors
///
/// No bins, a bin with a negative or non-finite frequency or power, or zero total power after
/// weighting (only 0 Hz bins, or silence).
pub fn weighted_level_db(
    bins_hz_pa2: &[(f64, f64)],
    weighting: Weighting,
) -> Result<f64, WeightingError> {
    if bins_hz_pa2.is_empty() {
        return Err(WeightingError::Empty);
    }
    let mut total_pa2 = 0.0;
    for (index, &(freq_hz, mean_square_pa2)) in bins_hz_pa2.iter().enumerate() {
        if !(freq_hz.is_finite() && freq_hz >= 0.0) {
            return Err(WeightingError::BadFrequency {
                index,
                found_hz: freq_hz,
            });
        }
        if !(mean_square_pa2.is_finite() && mean_square_pa2 >= 0.0) {
            return Err(WeightingError::BadPower {
                index,
                found_pa2: mean_square_pa2,
            });
        }
        total_pa2 += weighting.power_gain(freq_hz) * mean_square_pa2;
    }
    if total_pa2 <= 0.0 {
        return Err(WeightingError::NoPower {
            weighting: weighting.letter(),
        });
    }
    Ok(10.0 * (total_pa2 / (P_REF_PA * P_REF_PA)).log10())
}

/// A-weighted sound pressure level, dB(A) re 20 µPa, of a pressure power spectrum given as
/// (frequency Hz, mean-square pressure Pa²) bins; see [`weighted_level_db`].
///
/// # Errors
///
/// As [`weighted_level_db`].
pub fn a_weighted_level_db(bins_hz_pa2: &[(f64, f64)]) -> Result<f64, WeightingError> {
    weighted_level_db(bins_hz_pa2, Weighting::A)
}
