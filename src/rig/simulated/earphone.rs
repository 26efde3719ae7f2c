//! The behavioural earphone: a linear filter chain, a gain and an oversampled polynomial.
//!
//! One [`BehaviouralEarphone`] models one earpiece in its fixture as the input converter
//! sees it (full scale out per full scale in). It is the first version of the simulated
//! unit: it has the shape of an earphone response and its distortion, not its physics; a
//! physical model replaces it behind [`super::Dut`] later.
//!
//! All numbers here are invented demo values for the "Ember E2" earbud of the demo
//! scenario, chosen to look plausible, not measured on anything.

use super::biquad::{cascade_process, cascade_response, Biquad};
use super::oversample::{Oversampler4, Polynomial};
use super::{Defect, Dut};
use realfft::num_complex::Complex64;

/// A section whose corner lies at or above this fraction of the sample rate is left out:
/// it would act beyond the band the converter passes, and the design needs f0 < fs/2.
const MAX_CORNER_FRACTION: f64 = 0.45;

/// Parameters of one behavioural earpiece (invented demo values, see the module doc).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EarphoneParams {
    /// Corner of the 2nd-order high-pass (low-frequency roll-off), Hz.
    pub highpass_hz: f64,
    /// Q of the high-pass.
    pub highpass_q: f64,
    /// Centre of the main resonance (peaking section), Hz.
    pub resonance_hz: f64,
    /// Q of the main resonance.
    pub resonance_q: f64,
    /// Gain of the main resonance at its centre, dB.
    pub resonance_gain_db: f64,
    /// Centre of the second, smaller bump, Hz.
    pub bump_hz: f64,
    /// Q of the second bump.
    pub bump_q: f64,
    /// Gain of the second bump at its centre, dB.
    pub bump_gain_db: f64,
    /// Corner of the 2nd-order low-pass, Hz.
    pub lowpass_hz: f64,
    /// Q of the low-pass.
    pub lowpass_q: f64,
    /// Overall gain (the unit's sensitivity), dB re full scale out per full scale in.
    pub gain_db: f64,
    /// True when the drive is inverted (reversed polarity).
    pub inverted: bool,
    /// True when the earpiece makes no sound at all.
    pub dead: bool,
    /// Polynomial applied after the gain, at 4× oversampling.
    pub nonlinearity: Polynomial,
}

impl EarphoneParams {
    /// The nominal unit (invented demo values). A −12 dBFS tone at 1 kHz, where the chain
    /// is +0.37 dB, arrives at A = −25.6 dBFS peak (−14 dB of gain); there the polynomial
    /// gives (trig identities, re the fundamental A + ¾·a3·A³) HD2 = a2·A²/2 ≈ 0.25 %,
    /// HD3 = a3·A³/4 ≈ 0.16 %, THD ≈ 0.30 %. Near the +8 dB resonance it is higher, as in
    /// a real earpiece driven harder where it is louder.
    pub const NOMINAL: EarphoneParams = EarphoneParams {
        highpass_hz: 40.0,
        highpass_q: std::f64::consts::FRAC_1_SQRT_2,
        resonance_hz: 2800.0,
        resonance_q: 2.0,
        resonance_gain_db: 8.0,
        bump_hz: 6000.0,
        bump_q: 3.0,
        bump_gain_db: 4.0,
        lowpass_hz: 14_000.0,
        lowpass_q: std::f64::consts::FRAC_1_SQRT_2,
        gain_db: -14.0,
        inverted: false,
        dead: false,
        nonlinearity: Polynomial { a2: 0.095, a3: 2.4 },
    };

    /// Linear gain with polarity, full scale per full scale.
    pub fn linear_gain(&self) -> f64 {
        let g = 10f64.powf(self.gain_db / 20.0);
        if self.inverted {
            -g
        } else {
            g
        }
    }

    /// The filter chain designed at `sample_rate_hz` (sections beyond 0.45·fs left out).
    pub fn sections(&self, sample_rate_hz: u32) -> Vec<Biquad> {
        let fs = f64::from(sample_rate_hz);
        let fits = |f0: f64| f0 > 0.0 && f0 < MAX_CORNER_FRACTION * fs;
        let mut out = Vec::with_capacity(4);
        if fits(self.highpass_hz) {
            out.push(Biquad::high_pass(self.highpass_hz, self.highpass_q, fs));
        }
        if fits(self.resonance_hz) {
            out.push(Biquad::peaking(
                self.resonance_hz,
                self.resonance_q,
                self.resonance_gain_db,
                fs,
            ));
        }
        if fits(self.bump_hz) {
            out.push(Biquad::peaking(
                self.bump_hz,
                self.bump_q,
                self.bump_gain_db,
                fs,
            ));
        }
        if fits(self.lowpass_hz) {
            out.push(Biquad::low_pass(self.lowpass_hz, self.lowpass_q, fs));
        }
        out
    }

    /// Small-signal (linear) response at `freq_hz`: filter chain × gain, zero when dead.
    pub fn linear_response(&self, freq_hz: f64, sample_rate_hz: u32) -> Complex64 {
        if self.dead {
            return Complex64::new(0.0, 0.0);
        }
        cascade_response(
            &self.sections(sample_rate_hz),
            freq_hz,
            f64::from(sample_rate_hz),
        ) * self.linear_gain()
    }

    /// This unit with `defect` applied (invented demo magnitudes):
    /// reversed polarity inverts the drive; a dead channel is silent; low sensitivity is
    /// −6 dB; a resonance shift moves the main resonance down 25 %; clipping is +30 dB of
    /// gain so the input converter clips; heavy distortion scales a2 and a3 by 40, which
    /// scales HD2 and HD3 alike (each is linear in its coefficient): 0.30 % × 40 = 12 % re
    /// the drive, ≈ 10 % re the fundamental, which the cubic term swells by ~20 % at
    /// this level (¾·a3·A²). The physical defects (seal leak, blocked damper, weak motor,
    /// rub) get behavioural stand-ins, documented in the match below.
    pub fn with_defect(mut self, defect: Defect) -> Self {
        match defect {
            Defect::ReversedPolarity => self.inverted = !self.inverted,
            Defect::DeadChannel => self.dead = true,
            Defect::LowSensitivity => self.gain_db -= 6.0,
            Defect::ResonanceShift => self.resonance_hz *= 0.75,
            Defect::Clipping => self.gain_db += 30.0,
            Defect::TooLoud => self.gain_db += 30.0,
            Defect::HeavyDistortion => {
                self.nonlinearity.a2 *= 40.0;
                self.nonlinearity.a3 *= 40.0;
            }
            // The physical defects have no physics here (the physical rig models them);
            // these are behavioural stand-ins with the same direction of effect.
            // Seal leak: low frequencies lost, as a high-pass moved from 40 Hz to 240 Hz.
            Defect::SealLeak => self.highpass_hz *= 6.0,
            // Blocked damper: the main resonance damped flat and the top end 3 dB down.
            Defect::BlockedDamper => {
                self.resonance_gain_db = 0.0;
                self.lowpass_hz *= 0.5;
            }
            // Weak motor: Bl −30 % is 20·log10(0.7) = −3.1 dB of sensitivity.
            Defect::WeakMotor => self.gain_db += 20.0 * 0.7f64.log10(),
            // Rub: no impulses in a polynomial; a steep cubic (a3 ×15) gives high-order-ish
            // distortion instead.
            Defect::Rub => self.nonlinearity.a3 *= 15.0,
        }
        self
    }
}

/// One behavioural earpiece: filters, gain, then the polynomial at 4× oversampling.
#[derive(Debug, Clone, PartialEq)]
pub struct BehaviouralEarphone {
    /// The unit's parameters.
    pub params: EarphoneParams,
}

impl BehaviouralEarphone {
    /// An earpiece with the given parameters.
    pub fn new(params: EarphoneParams) -> Self {
        BehaviouralEarphone { params }
    }
}

impl Dut for BehaviouralEarphone {
    fn respond(&self, drive: &[f64], sample_rate_hz: u32) -> Vec<f64> {
        let p = &self.params;
        if p.dead {
            return vec![0.0; drive.len()];
        }
        let g = p.linear_gain();
        let mut x: Vec<f64> = drive.iter().map(|v| v * g).collect();
        cascade_process(&p.sections(sample_rate_hz), &mut x);
        p.nonlinearity.apply_oversampled(&x, Oversampler4::shared())
    }
}

/// A plain test device: biquads, a gain, then the polynomial at 4× oversampling; no spread,
/// no defects. The analysis tests use it as a system whose response is known in closed
/// form. The biquads must be designed at the rate the device is driven at.
#[derive(Debug, Clone, PartialEq)]
pub struct PolynomialDut {
    /// Filter chain, applied in order.
    pub biquads: Vec<Biquad>,
    /// Linear gain applied before the polynomial, full scale per full scale.
    pub gain: f64,
    /// Coefficient of x².
    pub a2: f64,
    /// Coefficient of x³.
    pub a3: f64,
}

impl Dut for PolynomialDut {
    fn respond(&self, drive: &[f64], _sample_rate_hz: u32) -> Vec<f64> {
        let mut x: Vec<f64> = drive.iter().map(|v| v * self.gain).collect();
        cascade_process(&self.biquads, &mut x);
        Polynomial {
            a2: self.a2,
            a3: self.a3,
        }
        .apply_oversampled(&x, Oversampler4::shared())
    }
}
