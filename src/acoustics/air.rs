//! Properties of air from temperature and static pressure.

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
    /// Air at `temperature_c` and `static_pressure_pa` (formulas and sources in the impl).
    pub fn new(temperature_c: f64, static_pressure_pa: f64) -> Self {
        let _ = (temperature_c, static_pressure_pa);
        unimplemented!("acoustics helper")
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
