//! The Kringlebotn (1988) lumped middle-ear network as an eardrum impedance.
//!
//! Used as [`super::termination::Termination::Eardrum`], the load at the inner end of an ear
//! canal or ear simulator model.
use super::C64;

/// Input impedance of the Kringlebotn (1988) network at `freq_hz` (Hz, > 0), Pa·s/m³.
///
/// Kringlebotn, "Network model for the human middle ear", Scand. Audiol. 17:75–85 (1988).
/// Topology Z = Z1a + Z1b + [Z2 ∥ (Z3 + (Z4 ∥ Z5))] with
/// Z1a = (Ra + jωLa + 1/(jωCa)) ∥ 1/(jωCt),
/// Z1b = jωLd + [(Rs + jωLs + 1/(jωCs)) ∥ (Rr + 1/(jωCr))], Z2 = Rm + 1/(jωCm),
/// Z3 = Ro + jωLo, Z4 = Ri + 1/(jωCi), Z5 = Rc + jωLc + 1/(jωCc).
/// Element values as coded in a public implementation of the model, in CGS acoustic units
/// (R dyn·s/cm⁵, L g/cm⁴, C cm⁵/dyn), to confirm against the paper; converted here to SI
/// (R ×1e5 Pa·s/m³, L ×1e5 kg/m⁴, C ×1e-5 m³/Pa). The model is stated valid up to about
/// 2.5 kHz; above that it is an extrapolation.
pub fn kringlebotn_impedance(freq_hz: f64) -> C64 {
    const R: f64 = 1e5;
    const L: f64 = 1e5;
    const C: f64 = 1e-5;
    let w = 2.0 * std::f64::consts::PI * freq_hz;
    let j = C64::new(0.0, 1.0);
    let res = |r: f64| C64::new(r * R, 0.0);
    let ind = |l: f64| j * w * (l * L);
    let cap = |c: f64| (j * w * (c * C)).inv();
    let par = |a: C64, b: C64| a * b / (a + b);

    let z1a = par(res(60.0) + ind(1e-3) + cap(3.9e-6), cap(0.4e-6));
    let z1b = ind(7.5e-3)
        + par(
            res(20.0) + ind(66e-3) + cap(0.3e-6),
            res(120.0) + cap(1.3e-6),
        );
    let z2 = res(120.0) + cap(0.38e-6);
    let z3 = res(20.0) + ind(22e-3);
    let z4 = res(6000.0) + cap(0.3e-6);
    let z5 = res(330.0) + ind(46e-3) + cap(0.56e-6);
    z1a + z1b + par(z2, z3 + par(z4, z5))
}
