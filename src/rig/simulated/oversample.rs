//! 4× oversampling for the memoryless nonlinearity of the simulated earphone.
//!
//! A polynomial `y = x + a2·x² + a3·x³` makes harmonics up to 3× the highest input
//! frequency; applied at the base rate, those above fs/2 would fold back into the audio band
//! as aliases no real earphone makes. [`Oversampler4`] interpolates by 4 with a linear-phase
//! Kaiser-windowed-sinc FIR, applies the function at 4·fs, and low-passes with the same FIR
//! before keeping every 4th sample.
//!
//! Filter design (Kaiser's formulas, Oppenheim & Schafer, *Discrete-Time Signal
//! Processing*, 3rd ed., eq. 7.62–7.63): stop-band attenuation A = 100 dB gives
//! β = 0.1102·(A − 8.7) = 10.06; pass band to 0.4375·fs (21 kHz at 48 kHz), stop band from
//! 0.5·fs (the base-rate Nyquist frequency), so the transition Δω = 2π·0.0625/4 at the high
//! rate needs N − 1 ≥ (A − 8)/(2.285·Δω) = 410 taps; 416 is used so the delay of the
//! up/down pair (N − 1 high-rate samples) is a whole number of base-rate samples (104) and
//! can be removed exactly. Measured on this design: stop band ≤ −100.3 dB, pass-band ripple
//! ±0.0001 dB (`tests/rig_oversample.rs` checks ≥ 90 dB and ±0.001 dB).

use std::f64::consts::PI;
use std::sync::OnceLock;

/// Oversampling factor.
pub const FACTOR: usize = 4;
/// FIR length, taps (odd, linear phase).
pub const N_TAPS: usize = 417;
/// Kaiser window β for 100 dB stop-band attenuation (Kaiser's formula, see module doc).
pub const KAISER_BETA: f64 = 0.1102 * (100.0 - 8.7);
/// Pass-band edge as a fraction of the base sample rate.
pub const PASS_EDGE_FRACTION: f64 = 0.4375;
/// Stop-band edge as a fraction of the base sample rate (the base Nyquist frequency).
pub const STOP_EDGE_FRACTION: f64 = 0.5;

/// Delay of the up-then-down pair, base-rate samples: (N − 1)/FACTOR.
const DELAY_BASE_SAMPLES: usize = (N_TAPS - 1) / FACTOR;

/// Modified Bessel function of the first kind, order 0, by its power series
/// I0(x) = Σ ((x/2)^k / k!)² (Abramowitz & Stegun 9.6.12); converges fast for x ≤ 20.
fn bessel_i0(x: f64) -> f64 {
    let q = 0.25 * x * x;
    let (mut sum, mut term, mut k) = (1.0, 1.0, 1.0);
    while term > 1e-17 * sum {
        term *= q / (k * k);
        sum += term;
        k += 1.0;
    }
    sum
}

/// A 4× interpolator/decimator pair sharing one low-pass FIR, designed once.
#[derive(Debug, Clone)]
pub struct Oversampler4 {
    /// The low-pass FIR at the high rate, DC gain 1.
    taps: Vec<f64>,
    /// Polyphase branches of `taps` scaled by FACTOR (interpolation gain).
    phases: Vec<Vec<f64>>,
}

impl Default for Oversampler4 {
    fn default() -> Self {
        Self::new()
    }
}

impl Oversampler4 {
    /// Design the FIR (see the module doc for the numbers).
    pub fn new() -> Self {
        let m = (N_TAPS - 1) as f64 / 2.0;
        // Cut-off midway between the edges, in cycles per high-rate sample.
        let fc = 0.5 * (PASS_EDGE_FRACTION + STOP_EDGE_FRACTION) / FACTOR as f64;
        let i0_beta = bessel_i0(KAISER_BETA);
        let mut taps: Vec<f64> = (0..N_TAPS)
            .map(|n| {
                let t = n as f64 - m;
                let sinc = if t == 0.0 {
                    1.0
                } else {
                    (2.0 * PI * fc * t).sin() / (2.0 * PI * fc * t)
                };
                let r = t / m;
                let w = bessel_i0(KAISER_BETA * (1.0 - r * r).max(0.0).sqrt()) / i0_beta;
                2.0 * fc * sinc * w
            })
            .collect();
        let dc: f64 = taps.iter().sum();
        taps.iter_mut().for_each(|h| *h /= dc);
        let phases = (0..FACTOR)
            .map(|p| {
                taps.iter()
                    .skip(p)
                    .step_by(FACTOR)
                    .map(|h| h * FACTOR as f64)
                    .collect()
            })
            .collect();
        Oversampler4 { taps, phases }
    }

    /// One shared instance (the design is the same for every rate: it is in fractions of fs).
    pub fn shared() -> &'static Oversampler4 {
        static SHARED: OnceLock<Oversampler4> = OnceLock::new();
        SHARED.get_or_init(Oversampler4::new)
    }

    /// The FIR taps at the high rate (DC gain 1), for inspecting the design.
    pub fn taps(&self) -> &[f64] {
        &self.taps
    }

    /// Apply `f` sample by sample at 4× the rate of `x`; returns `x.len()` samples aligned
    /// with `x` (the filters' delay removed). `f(0)` should be 0: the signal is taken as
    /// zero outside `x`.
    pub fn apply(&self, x: &[f64], f: impl Fn(f64) -> f64) -> Vec<f64> {
        let n = x.len();
        if n == 0 {
            return Vec::new();
        }
        // High-rate samples needed: outputs n at base index DELAY..DELAY+n read the
        // high-rate signal up to FACTOR·(DELAY + n − 1).
        let n_high = FACTOR * (DELAY_BASE_SAMPLES + n);
        let mut high = vec![0.0f64; n_high];
        for (m, slot) in high.iter_mut().enumerate() {
            // y[m] = Σ_k h[k]·xu[m − k] with xu[4i] = x[i]: only taps k ≡ m (mod 4) meet
            // a non-zero input, i = (m − k)/4.
            let p = m % FACTOR;
            let i0 = m / FACTOR;
            let branch = &self.phases[p];
            // Valid j: 0 ≤ j < branch.len(), 0 ≤ i0 − j < n.
            let j_min = i0.saturating_sub(n - 1);
            let j_end = branch.len().min(i0 + 1);
            let mut acc = 0.0;
            for j in j_min..j_end {
                acc += branch[j] * x[i0 - j];
            }
            *slot = f(acc);
        }
        (0..n)
            .map(|k| {
                // centre < high.len() always; taps beyond `centre` would read before 0.
                let centre = FACTOR * (k + DELAY_BASE_SAMPLES);
                let t_max = centre.min(N_TAPS - 1);
                let mut acc = 0.0;
                for (h, v) in self.taps[..=t_max]
                    .iter()
                    .zip(high[centre - t_max..=centre].iter().rev())
                {
                    acc += h * v;
                }
                acc
            })
            .collect()
    }
}

/// The memoryless polynomial `y = x + a2·x² + a3·x³` (dimensionless coefficients; x and y in
/// full scale).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Polynomial {
    /// Coefficient of x² (makes the 2nd harmonic: a2·A²/2 for a tone of amplitude A).
    pub a2: f64,
    /// Coefficient of x³ (makes the 3rd harmonic: a3·A³/4 for a tone of amplitude A).
    pub a3: f64,
}

impl Polynomial {
    /// The polynomial at one sample.
    pub fn eval(&self, x: f64) -> f64 {
        x + x * x * (self.a2 + self.a3 * x)
    }

    /// True when the polynomial is the identity.
    pub fn is_linear(&self) -> bool {
        self.a2 == 0.0 && self.a3 == 0.0
    }

    /// Apply at 4× oversampling (no aliasing of the harmonics it makes).
    pub fn apply_oversampled(&self, x: &[f64], os: &Oversampler4) -> Vec<f64> {
        if self.is_linear() {
            return x.to_vec();
        }
        os.apply(x, |v| self.eval(v))
    }

    /// Apply at the base rate: harmonics above fs/2 alias. Kept to show what the
    /// oversampling prevents; the simulated rig never uses it.
    pub fn apply_direct(&self, x: &[f64]) -> Vec<f64> {
        x.iter().map(|&v| self.eval(v)).collect()
    }
}
