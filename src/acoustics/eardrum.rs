//! The Kringlebotn (1988) lumped middle-ear network as an eardrum impedance.
use super::C64;

/// Input impedance of the Kringlebotn (1988) network at `freq_hz`, Pa·s/m³.
pub fn kringlebotn_impedance(freq_hz: f64) -> C64 {
    let _ = freq_hz;
    unimplemented!("acoustics helper")
}
