//! A coupler: a chain of elements from the reference plane to a termination, with taps.
//!
//! The model the correction and the simulated rig evaluate: given a frequency, the input
//! impedance at the reference plane (where the earphone's outlet sits) and, at each named
//! microphone tap, the pressure per input volume velocity and per input pressure.
use super::air::Air;
use super::elements::Element;
use super::termination::Termination;
use super::C64;
use std::collections::BTreeMap;

/// One item of a coupler chain: an element, or a named microphone tap at this node.
#[derive(Debug, Clone, PartialEq)]
pub enum ChainItem {
    /// An acoustic element.
    Element(Element),
    /// A microphone at the node between the previous and the next element.
    Tap(String),
}

/// A coupler model ready to evaluate.
#[derive(Debug, Clone, PartialEq)]
pub struct Coupler {
    /// Model id.
    pub id: String,
    /// Air the model is evaluated in.
    pub air: Air,
    /// Chain from the reference plane inward.
    pub chain: Vec<ChainItem>,
    /// What ends the chain.
    pub termination: Termination,
}

/// What a coupler does at one frequency.
#[derive(Debug, Clone, PartialEq)]
pub struct CouplerPoint {
    /// Input impedance at the reference plane, Pa·s/m³.
    pub input_impedance: C64,
    /// Per tap: (transfer impedance p_tap/U_in Pa·s/m³, pressure transfer p_tap/p_in).
    /// Taps with the same name: the one nearest the termination wins.
    pub taps: BTreeMap<String, (C64, C64)>,
}

impl Coupler {
    /// Number of taps in the chain (the length [`Coupler::evaluate_into`] needs).
    pub fn n_taps(&self) -> usize {
        self.chain
            .iter()
            .filter(|i| matches!(i, ChainItem::Tap(_)))
            .count()
    }

    /// Tap names in chain order (the order [`Coupler::evaluate_into`] writes).
    pub fn tap_names(&self) -> impl Iterator<Item = &str> {
        self.chain.iter().filter_map(|i| match i {
            ChainItem::Tap(name) => Some(name.as_str()),
            ChainItem::Element(_) => None,
        })
    }

    /// Evaluate at `freq_hz` (Hz, > 0) without allocating: returns the input impedance
    /// (Pa·s/m³) and writes, for each tap in chain order, (p_tap/U_in Pa·s/m³, p_tap/p_in)
    /// into `taps_out`.
    ///
    /// Walks the chain from the termination back to the reference plane carrying the state
    /// [p; U] of the node (ABCD convention of [`super::twoport`]: [p1; U1] = M·[p2; U2]),
    /// starting from [Z_T; 1] (or [1; 0] for a rigid end). A tap stores the node pressure;
    /// at the reference plane every stored pressure is divided by U_in and p_in. A chain
    /// whose input impedance is infinite (rigid end, nothing in between) gives non-finite
    /// values.
    ///
    /// # Panics
    /// If `taps_out.len() != self.n_taps()` (a programmer error).
    pub fn evaluate_into(&self, freq_hz: f64, taps_out: &mut [(C64, C64)]) -> C64 {
        evaluate_chain_into(&self.air, &self.chain, &self.termination, freq_hz, taps_out)
    }

    /// Evaluate at one frequency (Hz, > 0).
    pub fn evaluate(&self, freq_hz: f64) -> CouplerPoint {
        let mut taps = vec![(C64::new(0.0, 0.0), C64::new(0.0, 0.0)); self.n_taps()];
        self.point(freq_hz, &mut taps)
    }

    /// Evaluate at each of `freqs_hz` (Hz, > 0), reusing one tap buffer.
    pub fn evaluate_many(&self, freqs_hz: &[f64]) -> Vec<CouplerPoint> {
        let mut taps = vec![(C64::new(0.0, 0.0), C64::new(0.0, 0.0)); self.n_taps()];
        freqs_hz.iter().map(|&f| self.point(f, &mut taps)).collect()
    }

    /// [`Coupler::evaluate_into`] with the taps named.
    fn point(&self, freq_hz: f64, taps: &mut [(C64, C64)]) -> CouplerPoint {
        let input_impedance = self.evaluate_into(freq_hz, taps);
        CouplerPoint {
            input_impedance,
            taps: self
                .tap_names()
                .map(str::to_owned)
                .zip(taps.iter().copied())
                .collect(),
        }
    }
}

/// [`Coupler::evaluate_into`] over borrowed parts (a loaded model evaluates without
/// building a [`Coupler`]): the input impedance, and per tap in chain order
/// (p_tap/U_in, p_tap/p_in) in `taps_out`.
///
/// # Panics
/// If `taps_out.len()` is not the number of taps in `chain` (a programmer error).
pub fn evaluate_chain_into(
    air: &Air,
    chain: &[ChainItem],
    termination: &Termination,
    freq_hz: f64,
    taps_out: &mut [(C64, C64)],
) -> C64 {
    let n_taps = chain
        .iter()
        .filter(|i| matches!(i, ChainItem::Tap(_)))
        .count();
    assert_eq!(taps_out.len(), n_taps, "taps_out length");
    let (mut p, mut u) = match termination.impedance(freq_hz, air) {
        None => (C64::new(1.0, 0.0), C64::new(0.0, 0.0)),
        Some(z) => (z, C64::new(1.0, 0.0)),
    };
    let mut k = taps_out.len();
    for item in chain.iter().rev() {
        match item {
            ChainItem::Element(e) => {
                let m = e.two_port(freq_hz, air);
                let p1 = m.a * p + m.b * u;
                let u1 = m.c * p + m.d * u;
                // Keep the state near unit size; only ratios matter.
                let scale = 1.0 / p1.norm().max(u1.norm() * 1e7).max(1e-300);
                p = p1 * scale;
                u = u1 * scale;
                for t in taps_out[k..].iter_mut() {
                    t.0 *= scale;
                }
            }
            ChainItem::Tap(_) => {
                k -= 1;
                taps_out[k] = (p, C64::new(0.0, 0.0));
            }
        }
    }
    for t in taps_out.iter_mut() {
        let p_tap = t.0;
        *t = (p_tap / u, p_tap / p);
    }
    p / u
}
