//! Second-order IIR sections (biquads) from the RBJ audio-EQ cookbook, in f64.
//!
//! The linear part of the behavioural earphone ([`super::earphone`]) is a chain of these.
//! Coefficients follow R. Bristow-Johnson, "Cookbook formulae for audio EQ biquad filter
//! coefficients" (the bilinear transform of the analog prototypes, pre-warped at f0),
//! normalised so a0 = 1. Filtering runs in direct form II transposed, which keeps the state
//! small and behaves well in floating point.

use realfft::num_complex::Complex64;
use std::f64::consts::PI;

/// One biquad, `H(z) = (b0 + b1 z⁻¹ + b2 z⁻²) / (1 + a1 z⁻¹ + a2 z⁻²)` (a0 normalised to 1).
/// Coefficients are dimensionless and valid for the sample rate they were designed at.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Biquad {
    /// Feed-forward coefficient of z⁰.
    pub b0: f64,
    /// Feed-forward coefficient of z⁻¹.
    pub b1: f64,
    /// Feed-forward coefficient of z⁻².
    pub b2: f64,
    /// Feedback coefficient of z⁻¹.
    pub a1: f64,
    /// Feedback coefficient of z⁻².
    pub a2: f64,
}

/// ω0 = 2π f0/fs and α = sin(ω0)/(2Q) (cookbook intermediate variables).
///
/// # Panics
/// When `0 < f0_hz < fs/2` or `q > 0` does not hold: the designs have no meaning there and
/// callers choose these numbers in code.
fn omega_alpha(f0_hz: f64, q: f64, sample_rate_hz: f64) -> (f64, f64) {
    assert!(
        f0_hz > 0.0 && f0_hz < 0.5 * sample_rate_hz && q > 0.0,
        "biquad design needs 0 < f0 < fs/2 and q > 0, got f0 = {f0_hz} Hz, fs = \
         {sample_rate_hz} Hz, q = {q}"
    );
    let w0 = 2.0 * PI * f0_hz / sample_rate_hz;
    (w0, w0.sin() / (2.0 * q))
}

impl Biquad {
    /// The identity section (passes the signal unchanged).
    pub const IDENTITY: Biquad = Biquad {
        b0: 1.0,
        b1: 0.0,
        b2: 0.0,
        a1: 0.0,
        a2: 0.0,
    };

    /// Normalise raw cookbook coefficients by a0.
    fn from_raw(b: [f64; 3], a: [f64; 3]) -> Self {
        Biquad {
            b0: b[0] / a[0],
            b1: b[1] / a[0],
            b2: b[2] / a[0],
            a1: a[1] / a[0],
            a2: a[2] / a[0],
        }
    }

    /// Cookbook LPF: `H(s) = 1/(s² + s/Q + 1)`; `q = 1/√2` is a 2nd-order Butterworth.
    ///
    /// # Panics
    /// Unless `0 < f0_hz < sample_rate_hz/2` and `q > 0`.
    pub fn low_pass(f0_hz: f64, q: f64, sample_rate_hz: f64) -> Self {
        let (w0, alpha) = omega_alpha(f0_hz, q, sample_rate_hz);
        let c = w0.cos();
        Self::from_raw(
            [(1.0 - c) / 2.0, 1.0 - c, (1.0 - c) / 2.0],
            [1.0 + alpha, -2.0 * c, 1.0 - alpha],
        )
    }

    /// Cookbook HPF: `H(s) = s²/(s² + s/Q + 1)`; `q = 1/√2` is a 2nd-order Butterworth.
    ///
    /// # Panics
    /// Unless `0 < f0_hz < sample_rate_hz/2` and `q > 0`.
    pub fn high_pass(f0_hz: f64, q: f64, sample_rate_hz: f64) -> Self {
        let (w0, alpha) = omega_alpha(f0_hz, q, sample_rate_hz);
        let c = w0.cos();
        Self::from_raw(
            [(1.0 + c) / 2.0, -(1.0 + c), (1.0 + c) / 2.0],
            [1.0 + alpha, -2.0 * c, 1.0 - alpha],
        )
    }

    /// Cookbook peakingEQ: `H(s) = (s² + s·A/Q + 1)/(s² + s/(A·Q) + 1)`, `A = 10^(gain/40)`;
    /// `gain_db` at f0, 0 dB far from it.
    ///
    /// # Panics
    /// Unless `0 < f0_hz < sample_rate_hz/2` and `q > 0`.
    pub fn peaking(f0_hz: f64, q: f64, gain_db: f64, sample_rate_hz: f64) -> Self {
        let (w0, alpha) = omega_alpha(f0_hz, q, sample_rate_hz);
        let a = 10f64.powf(gain_db / 40.0);
        let c = w0.cos();
        Self::from_raw(
            [1.0 + alpha * a, -2.0 * c, 1.0 - alpha * a],
            [1.0 + alpha / a, -2.0 * c, 1.0 - alpha / a],
        )
    }

    /// Complex response `H(e^{jω})` at `freq_hz` for a section designed at `sample_rate_hz`.
    pub fn response(&self, freq_hz: f64, sample_rate_hz: f64) -> Complex64 {
        let w = 2.0 * PI * freq_hz / sample_rate_hz;
        let z1 = Complex64::from_polar(1.0, -w);
        let z2 = z1 * z1;
        (self.b0 + self.b1 * z1 + self.b2 * z2) / (1.0 + self.a1 * z1 + self.a2 * z2)
    }

    /// Filter `x` in place from zero initial state (direct form II transposed).
    pub fn process(&self, x: &mut [f64]) {
        let (mut s1, mut s2) = (0.0, 0.0);
        for v in x.iter_mut() {
            let input = *v;
            let y = self.b0 * input + s1;
            s1 = self.b1 * input - self.a1 * y + s2;
            s2 = self.b2 * input - self.a2 * y;
            *v = y;
        }
    }
}

/// Response of a chain of sections (the product of their responses) at `freq_hz`.
pub fn cascade_response(sections: &[Biquad], freq_hz: f64, sample_rate_hz: f64) -> Complex64 {
    sections
        .iter()
        .map(|s| s.response(freq_hz, sample_rate_hz))
        .product()
}

/// Filter `x` in place through every section in turn, each from zero state.
pub fn cascade_process(sections: &[Biquad], x: &mut [f64]) {
    for s in sections {
        s.process(x);
    }
}
