//! Acoustic elements as two-ports: lossy tube, slit, cavity, lumped R/M/C, leak, side branch.
//!
//! Each element turns (frequency, air) into an ABCD matrix ([`super::twoport`]); a coupler
//! ([`super::network`]) multiplies them from the reference plane inward.
//!
//! Tube losses: [`TubeLoss::ZwikkerKosten`] (the exact low-reduced-frequency model, with the
//! Bessel ratio of [`super::bessel`]) is accurate for every radius and frequency an earphone
//! coupler has (r_v from below 1 to several hundred) and is the default. [`TubeLoss::Keefe`]
//! is the wide-duct expansion to order 1/r_v² (Keefe 1984); it is cheaper and agrees with
//! Zwikker–Kosten to better than 1e-3 once r_v ≳ 10, and is kept as a cross-check.
use super::air::Air;
use super::bessel::j1_over_z_j0;
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
    /// The element's two-port at `freq_hz` (Hz, > 0) in `air`. Allocates nothing.
    ///
    /// Tube and slit: [cosh ΓL, Z_c sinh ΓL; sinh ΓL/Z_c, cosh ΓL] (Beranek & Mellow 2012,
    /// transmission-line two-port). Cavity: shunt jωV/(ρc²) (adiabatic compliance). Series:
    /// R + jωM + 1/(jωC). Branch: shunt admittance 1/Z_branch, Z_branch the input impedance of
    /// the branch chain loaded by its termination (a rigid end gives Y = C/A of the chain).
    pub fn two_port(&self, freq_hz: f64, air: &Air) -> TwoPort {
        let omega = 2.0 * std::f64::consts::PI * freq_hz;
        let j = C64::new(0.0, 1.0);
        match self {
            Element::Tube {
                length_m,
                radius_m,
                loss,
            } => {
                let (gamma, zc) = tube_propagation(freq_hz, *radius_m, *loss, air);
                line_two_port(gamma, zc, *length_m)
            }
            Element::Slit {
                length_m,
                width_m,
                gap_m,
            } => {
                let (gamma, zc) = slit_propagation(freq_hz, *width_m, *gap_m, air);
                line_two_port(gamma, zc, *length_m)
            }
            Element::Cavity { volume_m3 } => {
                TwoPort::shunt(j * omega * volume_m3 / air.bulk_modulus_pa())
            }
            Element::Series {
                resistance_pa_s_m3,
                inertance_kg_m4,
                compliance_m3_pa,
            } => {
                let mut z = C64::new(*resistance_pa_s_m3, omega * inertance_kg_m4);
                if let Some(c) = compliance_m3_pa {
                    z += (j * omega * c).inv();
                }
                TwoPort::series(z)
            }
            Element::Branch {
                elements,
                termination,
            } => {
                let m = elements.iter().fold(TwoPort::identity(), |acc, e| {
                    acc.then(&e.two_port(freq_hz, air))
                });
                // Y = 1/Z_in written so that a rigid end with no elements gives Y = 0.
                let y = match termination.impedance(freq_hz, air) {
                    None => m.c / m.a,
                    Some(z) => (m.c * z + m.d) / (m.a * z + m.b),
                };
                TwoPort::shunt(y)
            }
        }
    }
}

/// Two-port of a uniform line of length `length_m` with propagation constant `gamma` (1/m)
/// and characteristic impedance `zc` (Pa·s/m³).
pub fn line_two_port(gamma: C64, zc: C64, length_m: f64) -> TwoPort {
    let gl = gamma * length_m;
    let (ch, sh) = (gl.cosh(), gl.sinh());
    TwoPort {
        a: ch,
        b: zc * sh,
        c: sh / zc,
        d: ch,
    }
}

/// Propagation constant Γ (1/m) and characteristic impedance Z_c (Pa·s/m³) of a tube of
/// radius `radius_m` at `freq_hz` (> 0).
///
/// Lossless: Γ = jω/c, Z_c = ρc/S. Zwikker–Kosten (low reduced frequency; Zwikker & Kosten
/// 1949, in the form of Tijdeman 1975 / Keefe 1984 eq. 2–4): series impedance per length
/// Z = (jωρ/S)/(1 − F(k_v a)), shunt admittance per length Y = (jωS/(ρc²))·[1 + (γ−1)F(k_t a)],
/// F(x) = 2J1(x)/(x·J0(x)), k_v = ((1 − j)/√2)·√(ωρ/η), k_t = √Pr·k_v. Keefe (1984, eq. 7–8):
/// Z = (jωρ/S)[1 + √2(1 − j)/r_v − 3j/r_v²], Y = (jωS/(ρc²))[1 + (γ−1)(√2(1 − j)/r_t + j/r_t²)],
/// r_v = a√(ωρ/η), r_t = √Pr·r_v. Then Γ = √(ZY), Z_c = √(Z/Y) (principal roots: Re Γ ≥ 0).
pub fn tube_propagation(freq_hz: f64, radius_m: f64, loss: TubeLoss, air: &Air) -> (C64, C64) {
    let omega = 2.0 * std::f64::consts::PI * freq_hz;
    let rho = air.density_kg_m3;
    let area = std::f64::consts::PI * radius_m * radius_m;
    let j = C64::new(0.0, 1.0);
    let z_series = j * omega * rho / area;
    let y_shunt = j * omega * area / air.bulk_modulus_pa();
    let (z, y) = match loss {
        TubeLoss::Lossless => {
            return (
                j * omega / air.speed_of_sound_m_s,
                C64::new(air.duct_impedance(area), 0.0),
            )
        }
        TubeLoss::ZwikkerKosten => {
            let r_v = radius_m * (omega * rho / air.viscosity_pa_s).sqrt();
            let x_v = C64::new(1.0, -1.0) * (r_v / std::f64::consts::SQRT_2);
            let x_t = x_v * air.prandtl.sqrt();
            let f_v = 2.0 * j1_over_z_j0(x_v);
            let f_t = 2.0 * j1_over_z_j0(x_t);
            (
                z_series / (1.0 - f_v),
                y_shunt * (1.0 + (air.gamma - 1.0) * f_t),
            )
        }
        TubeLoss::Keefe => {
            let r_v = radius_m * (omega * rho / air.viscosity_pa_s).sqrt();
            let r_t = air.prandtl.sqrt() * r_v;
            let s2 = std::f64::consts::SQRT_2;
            (
                z_series * (1.0 + C64::new(s2, -s2) / r_v - j * 3.0 / (r_v * r_v)),
                y_shunt * (1.0 + (air.gamma - 1.0) * (C64::new(s2, -s2) / r_t + j / (r_t * r_t))),
            )
        }
    };
    ((z * y).sqrt(), (z / y).sqrt())
}

/// Zwikker–Kosten viscous function F(x) = 2J1(x)/(x·J0(x)) for complex x (1 at x = 0).
pub fn zk_f(x: C64) -> C64 {
    2.0 * j1_over_z_j0(x)
}

/// tanh(z)/z for complex z, without the overflow of sinh/cosh at large |Re z|.
fn tanh_over_z(z: C64) -> C64 {
    if z.norm() < 1e-4 {
        // tanh z / z = 1 − z²/3 + 2z⁴/15 − …; the z⁴ term is below 1e-17 here.
        return 1.0 - z * z / 3.0;
    }
    let t = if z.re.abs() > 20.0 {
        // tanh z = ±(1 − 2e^{∓2z}/(1 + e^{∓2z})); e^{−40} < 1e-17.
        C64::new(z.re.signum(), 0.0)
    } else {
        z.tanh()
    };
    t / z
}

/// Effective density ρ_eff (kg/m³) and bulk modulus K_eff (Pa) of air in a slit of gap 2h =
/// `gap_m`, Stinson (1991, JASA 89(2), eq. for the parallel-plate case) and Stinson &
/// Champoux (1992, JASA 91(2)): ρ_eff = ρ/[1 − tanh(sh)/(sh)],
/// K_eff = ρc²/[1 + (γ − 1)·tanh(s_t h)/(s_t h)], s = √(jωρ/η), s_t = √Pr·s.
///
/// With e^{jωt}, s = √(jωρ/η) = (1 + j)√(ωρ/(2η)); taking √(−j) instead (the e^{−iωt}
/// convention) would make the resistance Re(jωρ_eff) negative.
pub fn slit_effective(freq_hz: f64, gap_m: f64, air: &Air) -> (C64, C64) {
    let omega = 2.0 * std::f64::consts::PI * freq_hz;
    let rho = air.density_kg_m3;
    let h = gap_m / 2.0;
    let s = C64::new(0.0, omega * rho / air.viscosity_pa_s).sqrt();
    let sh = s * h;
    let sth = sh * air.prandtl.sqrt();
    let rho_eff = rho / (1.0 - tanh_over_z(sh));
    let k_eff = air.bulk_modulus_pa() / (1.0 + (air.gamma - 1.0) * tanh_over_z(sth));
    (rho_eff, k_eff)
}

/// Propagation constant Γ (1/m) and characteristic impedance Z_c (Pa·s/m³) of a slit of
/// cross-section `width_m` × `gap_m`: series jωρ_eff/S and shunt jωS/K_eff per unit length
/// (S = width·gap), so Γ = jω√(ρ_eff/K_eff) and Z_c = √(ρ_eff·K_eff)/S.
pub fn slit_propagation(freq_hz: f64, width_m: f64, gap_m: f64, air: &Air) -> (C64, C64) {
    let omega = 2.0 * std::f64::consts::PI * freq_hz;
    let (rho_eff, k_eff) = slit_effective(freq_hz, gap_m, air);
    let area = width_m * gap_m;
    let j = C64::new(0.0, 1.0);
    let z = j * omega * rho_eff / area;
    let y = j * omega * area / k_eff;
    ((z * y).sqrt(), (z / y).sqrt())
}
