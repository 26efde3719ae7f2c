//! What ends a coupler or a branch: rigid wall, radiating open end, a table, an eardrum.
//!
//! The load at the far end of a chain ([`super::network`]) or of a side branch
//! ([`super::elements::Element::Branch`]).
use super::air::Air;
use super::bessel::{bessel_j1, struve_h1};
use super::C64;

/// A termination impedance.
#[derive(Debug, Clone, PartialEq)]
pub enum Termination {
    /// Rigid wall: U = 0.
    Rigid,
    /// Open end of radius `radius_m` in an infinite baffle, as a rigid piston: the full
    /// radiation impedance with J1 and Struve H1 (see [`piston_radiation_impedance`]).
    OpenBaffled {
        /// Radius, m.
        radius_m: f64,
    },
    /// Open end of an unflanged tube of radius `radius_m` (Levine–Schwinger low-frequency
    /// form, see [`unflanged_radiation_impedance`]).
    OpenUnbaffled {
        /// Radius, m.
        radius_m: f64,
    },
    /// A tabulated impedance (Hz, Re, Im), interpolated linearly in log-frequency; held at
    /// the first / last value outside the table. An empty table acts as a rigid wall
    /// (loaders should reject empty or unsorted tables).
    Table {
        /// (frequency Hz, impedance Pa·s/m³) points, ascending.
        points: Vec<(f64, C64)>,
    },
    /// The Kringlebotn (1988) middle-ear network.
    Eardrum,
}

impl Termination {
    /// Impedance at `freq_hz` (Hz, > 0), Pa·s/m³; `None` for rigid (infinite impedance).
    /// Allocates nothing.
    pub fn impedance(&self, freq_hz: f64, air: &Air) -> Option<C64> {
        match self {
            Termination::Rigid => None,
            Termination::OpenBaffled { radius_m } => {
                Some(piston_radiation_impedance(freq_hz, *radius_m, air))
            }
            Termination::OpenUnbaffled { radius_m } => {
                Some(unflanged_radiation_impedance(freq_hz, *radius_m, air))
            }
            Termination::Table { points } => table_impedance(points, freq_hz),
            Termination::Eardrum => Some(super::eardrum::kringlebotn_impedance(freq_hz)),
        }
    }
}

/// Radiation impedance of a rigid circular piston of radius `radius_m` in an infinite
/// baffle, Pa·s/m³: Z = (ρc/S)·[1 − J1(2ka)/(ka) + j·H1(2ka)/(ka)] (Kinsler et al.,
/// *Fundamentals of Acoustics* 4th ed. §7.5; Beranek & Mellow 2012 §13.7), with J1 and the
/// Struve function H1 from [`super::bessel`] (series / asymptotic, not the Aarts & Janssen
/// approximation). Low-frequency limits: R → (ρc/S)(ka)²/2, X → (ρc/S)·8ka/(3π).
pub fn piston_radiation_impedance(freq_hz: f64, radius_m: f64, air: &Air) -> C64 {
    let c = air.speed_of_sound_m_s;
    let ka = 2.0 * std::f64::consts::PI * freq_hz / c * radius_m;
    let z0 = air.duct_impedance(std::f64::consts::PI * radius_m * radius_m);
    if ka < 1e-4 {
        // Series leading terms; avoids 1 − (1 − ε) cancellation (next terms are O(ka²) smaller).
        return z0 * C64::new(ka * ka / 2.0, 8.0 * ka / (3.0 * std::f64::consts::PI));
    }
    let x = 2.0 * ka;
    z0 * C64::new(1.0 - bessel_j1(x) / ka, struve_h1(x) / ka)
}

/// End correction of an unflanged pipe, in radii (Levine & Schwinger 1948, Phys. Rev.
/// 73(4), low-frequency limit).
pub const UNFLANGED_END_CORRECTION: f64 = 0.6133;

/// Radiation impedance of the open end of an unflanged tube of radius `radius_m`, Pa·s/m³.
///
/// Levine & Schwinger (1948) low-frequency results: pressure reflection coefficient
/// |R| ≈ exp(−(ka)²/2) and end correction δ = 0.6133a, so R = −exp(−(ka)²/2 − 2jkδ) and
/// Z = (ρc/S)(1 + R)/(1 − R). For ka → 0 this is (ρc/S)[(ka)²/4 + jkδ], the textbook form
/// (Kinsler et al. §9.2; Beranek & Mellow 2012); the reflection form stays passive and
/// bounded above ka ≈ 0.5, where it is only an extrapolation (common practice).
pub fn unflanged_radiation_impedance(freq_hz: f64, radius_m: f64, air: &Air) -> C64 {
    let k = 2.0 * std::f64::consts::PI * freq_hz / air.speed_of_sound_m_s;
    let ka = k * radius_m;
    let z0 = air.duct_impedance(std::f64::consts::PI * radius_m * radius_m);
    let delta = UNFLANGED_END_CORRECTION * radius_m;
    // R = −e^w; 1 + R = −(e^w − 1) keeps its digits when ka is small.
    let w = C64::new(-ka * ka / 2.0, -2.0 * k * delta);
    let r = -w.exp();
    let one_plus_r = -expm1_c(w);
    z0 * one_plus_r / (1.0 - r)
}

/// e^w − 1 for complex w without cancellation at small |w|.
fn expm1_c(w: C64) -> C64 {
    // e^{x+jy} − 1 = (e^x − 1)cos y + (cos y − 1) + j e^x sin y; cos y − 1 = −2 sin²(y/2).
    let em1 = w.re.exp_m1();
    let s = (w.im / 2.0).sin();
    C64::new(em1 * w.im.cos() - 2.0 * s * s, w.re.exp() * w.im.sin())
}

/// The tabulated impedance at `freq_hz`, linear in log frequency ([`crate::dsp::interp`]),
/// held beyond the table; `None` for an empty table.
fn table_impedance(points: &[(f64, C64)], freq_hz: f64) -> Option<C64> {
    if points.is_empty() {
        return None;
    }
    Some(crate::dsp::interp::interpolate_log_f_held(points, freq_hz))
}
