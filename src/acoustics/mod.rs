//! Acoustic models: air, two-port elements, couplers, sources, fixture→reference correction.
//!
//! Sits beside the analysis: a measurement made in the station's fixture is corrected to the
//! reference coupler the limits are written for (docs/architecture.md, "Acoustic models"). Convention
//! throughout: e^{jωt} time dependence, acoustic impedance in Pa·s/m³, volume velocity in
//! m³/s, pressure in Pa, SI units in every name. Two-ports are ABCD (transfer) matrices from
//! the reference plane inward: `[p1; U1] = [A B; C D]·[p2; U2]`.
//!
//! Layout: [`air`] (properties from temperature and pressure), [`bessel`] (Bessel ratio and
//! Struve functions), [`twoport`] (matrices and
//! their algebra), [`elements`] (tube, slit, cavity, lumped, leak, side branch),
//! [`termination`] (rigid, radiating, tabulated, eardrum), [`eardrum`] (Kringlebotn 1988),
//! [`network`] (a coupler: chain + taps → input impedance and transfer functions),
//! [`source`] (volume-velocity, Thévenin, virtual earphone), [`canonical`] (the hashed
//! descriptions of elements, terminations and earphones), [`correction`] (fixture →
//! reference). Physics only: the YAML formats of coupler and earphone models are
//! [`crate::models`], and the correction of a plan's measurements (built once, applied to
//! each) is the stage [`crate::correction`].

pub mod air;

pub mod bessel;
pub mod canonical;
pub mod correction;
pub mod eardrum;
pub mod elements;
pub mod network;
pub mod source;
pub mod termination;
pub mod twoport;

/// Complex number type of all acoustic quantities.
pub type C64 = realfft::num_complex::Complex<f64>;
