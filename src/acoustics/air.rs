//! Properties of air from temperature and static pressure.
//!
//! The first thing every acoustic model asks for: density, speed of sound, viscosity, γ and
//! the Prandtl number feed the tube, slit and cavity elements ([`super::elements`]) and the
//! radiation impedances ([`super::termination`]).

/// Air at one temperature and static pressure (SI units).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Air {
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Static pressure, Pa.
    pub static_pressure_pa: f64,
    /// Density ρ, kg/m³.
    pub density_kg_m3: f64,
    /// Speed of sound c, m/s.
    pub speed_of_sound_m_s: f64,
    /// Dynamic viscosity η, Pa·s.
    pub viscosity_pa_s: f64,
    /// Ratio of specific heats γ.
    pub gamma: f64,
    /// Prandtl number Pr.
    pub prandtl: f64,
}

impl Air {
    /// Air at `temperature_c` (°C) and `static_pressure_pa` (Pa).
    ///
    /// Keefe (1984), "Acoustical wave propagation in cylindrical ducts: transmission line
    /// parameter approximations for isothermal and nonisothermal boundary conditions",
    /// JASA 75(1), 58–62, with ΔT = T − 26.85 °C (fits for dry air near 300 K and 1 atm):
    /// ρ = 1.1769(1 − 0.00335ΔT) kg/m³, η = 1.846e-5(1 + 0.0025ΔT) Pa·s,
    /// c = 347.23(1 + 0.00166ΔT) m/s, γ = 1.4017(1 − 0.00002ΔT), √Pr = 0.8410(1 − 0.0002ΔT).
    /// (The √Pr slope 0.0002 reproduces Pr = 0.70922 at 20 °C; one public implementation
    /// codes 0.00002, which gives 0.70748; to confirm against the paper.)
    ///
    /// Static pressure: Keefe's fits are for 101 325 Pa. For an ideal gas ρ = pM/(RT), so the
    /// density is scaled by p/101 325; c = √(γp/ρ) = √(γRT/M), η and the Prandtl number do
    /// not depend on pressure (kinetic theory), so they are left as they are.
    pub fn new(temperature_c: f64, static_pressure_pa: f64) -> Self {
        let dt = temperature_c - 26.85;
        let sqrt_pr = 0.8410 * (1.0 - 0.0002 * dt);
        Air {
            temperature_c,
            static_pressure_pa,
            density_kg_m3: 1.1769 * (1.0 - 0.00335 * dt) * static_pressure_pa / 101_325.0,
            speed_of_sound_m_s: 347.23 * (1.0 + 0.00166 * dt),
            viscosity_pa_s: 1.846e-5 * (1.0 + 0.0025 * dt),
            gamma: 1.4017 * (1.0 - 0.00002 * dt),
            prandtl: sqrt_pr * sqrt_pr,
        }
    }

    /// Adiabatic bulk modulus ρc², Pa.
    pub fn bulk_modulus_pa(&self) -> f64 {
        self.density_kg_m3 * self.speed_of_sound_m_s * self.speed_of_sound_m_s
    }

    /// 20 °C, 101 325 Pa.
    pub fn standard() -> Self {
        Self::new(20.0, 101_325.0)
    }

    /// Characteristic impedance of a duct of cross-section `area_m2`: ρc/S, Pa·s/m³.
    pub fn duct_impedance(&self, area_m2: f64) -> f64 {
        self.density_kg_m3 * self.speed_of_sound_m_s / area_m2
    }
}
