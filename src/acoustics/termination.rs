//! What ends a coupler or a branch: rigid wall, radiating open end, a table, an eardrum.
use super::air::Air;
use super::C64;

/// A termination impedance.
#[derive(Debug, Clone, PartialEq)]
pub enum Termination {
    /// Rigid wall: U = 0.
    Rigid,
    /// Open end of radius `radius_m` in an infinite baffle (low-frequency piston form).
    OpenBaffled {
        /// Radius, m.
        radius_m: f64,
    },
    /// Open end of an unflanged tube of radius `radius_m`.
    OpenUnbaffled {
        /// Radius, m.
        radius_m: f64,
    },
    /// A tabulated impedance (Hz, Re, Im), interpolated linearly in log-frequency.
    Table {
        /// (frequency Hz, impedance Pa·s/m³) points, ascending.
        points: Vec<(f64, C64)>,
    },
    /// The Kringlebotn (1988) middle-ear network.
    Eardrum,
}

impl Termination {
    /// Impedance at `freq_hz`; `None` for rigid (infinite impedance).
    pub fn impedance(&self, freq_hz: f64, air: &Air) -> Option<C64> {
        let _ = (freq_hz, air);
        unimplemented!("acoustics helper")
    }
}
