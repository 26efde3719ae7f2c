//! A coupler: a chain of elements from the reference plane to a termination, with taps.
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
    pub taps: BTreeMap<String, (C64, C64)>,
}

impl Coupler {
    /// Evaluate at one frequency.
    pub fn evaluate(&self, freq_hz: f64) -> CouplerPoint {
        let _ = freq_hz;
        unimplemented!("acoustics helper")
    }
}
