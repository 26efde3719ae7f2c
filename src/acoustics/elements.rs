//! Acoustic elements as two-ports: lossy tube, slit, cavity, lumped R/M/C, leak, side branch.
use super::air::Air;
use super::twoport::TwoPort;
use super::C64;

/// How a tube's visco-thermal losses are modelled.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TubeLoss {
    /// No losses (plane waves, k = ω/c).
    Lossless,
    /// Full low-reduced-frequency model (Zwikker–Kosten), Bessel functions of complex argument.
    ZwikkerKosten,
    /// Keefe (1984) large-radius approximation.
    Keefe,
}

/// One element of a coupler chain, from the reference plane inward.
#[derive(Debug, Clone, PartialEq)]
pub enum Element {
    /// Cylindrical tube.
    Tube {
        /// Length, m.
        length_m: f64,
        /// Radius, m.
        radius_m: f64,
        /// Loss model.
        loss: TubeLoss,
    },
    /// Narrow rectangular slit (Stinson 1991), propagating along `length_m`.
    Slit {
        /// Length along the propagation direction, m.
        length_m: f64,
        /// Width (the long side of the cross-section), m.
        width_m: f64,
        /// Gap 2h (the short side), m.
        gap_m: f64,
    },
    /// Lumped adiabatic cavity (shunt compliance V/(ρc²)).
    Cavity {
        /// Volume, m³.
        volume_m3: f64,
    },
    /// Series lumped impedance R + jωM + 1/(jωC) (omit a part with 0 / `None`).
    Series {
        /// Resistance, Pa·s/m³.
        resistance_pa_s_m3: f64,
        /// Inertance, kg/m⁴.
        inertance_kg_m4: f64,
        /// Compliance, m³/Pa; `None` for none (a compliance of 0 would be an open circuit).
        compliance_m3_pa: Option<f64>,
    },
    /// Shunt branch to ground through an impedance given by a sub-chain ending in a
    /// termination (a leak to the outside, a side volume through a slit).
    Branch {
        /// Elements of the branch from the junction outward.
        elements: Vec<Element>,
        /// What ends the branch.
        termination: super::termination::Termination,
    },
}

impl Element {
    /// The element's two-port at `freq_hz` in `air`.
    pub fn two_port(&self, freq_hz: f64, air: &Air) -> TwoPort {
        let _ = (freq_hz, air);
        unimplemented!("acoustics helper")
    }
}

/// Propagation constant Γ (1/m) and characteristic impedance Z_c (Pa·s/m³) of a tube.
pub fn tube_propagation(freq_hz: f64, radius_m: f64, loss: TubeLoss, air: &Air) -> (C64, C64) {
    let _ = (freq_hz, radius_m, loss, air);
    unimplemented!("acoustics helper")
}
