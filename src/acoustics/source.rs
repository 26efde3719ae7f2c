//! Sources that drive a coupler: ideal volume velocity, a tabulated Thévenin pair, and a
//! virtual earphone (a lumped electro-mechano-acoustic model of a small dynamic driver).
//!
//! Sits between the coupler models ([`super::network`]) and the fixture→reference
//! correction ([`super::correction`]): the correction needs the source impedance Zs, and the
//! simulated rig needs the pressure a source makes in a load. Every source is reduced, per
//! frequency, to a Thévenin pair at its outlet (the reference plane): the open-circuit
//! pressure per volt `p_oc` (Pa/V, the pressure with the outlet blocked, U_out = 0) and the
//! source impedance `Zs` (Pa·s/m³, looking back into the outlet with the drive shorted).
//! Loaded by `Z_L`, the outlet pressure is `p_oc·Z_L/(Zs+Z_L)` and the volume velocity into
//! the load `p_oc/(Zs+Z_L)` (Thévenin's theorem; Beranek & Mellow 2012, *Acoustics: Sound
//! Fields and Transducers*, ch. 3, "Electro-mechano-acoustical circuits").
//! An ideal volume-velocity source has Zs = ∞; its "per volt" quantities are per unit volume
//! velocity (1 m³/s).
use super::air::Air;
use super::elements::{Element, TubeLoss};
use super::twoport::TwoPort;
use super::C64;
use std::fmt::Write as _;
use std::path::Path;

/// Errors of the sources: reading a Thévenin table, evaluating outside it.
#[derive(Debug, thiserror::Error)]
pub enum SourceError {
    /// A Thévenin CSV could not be read.
    #[error("{path}: cannot read the source table: {source}")]
    Io {
        /// File path.
        path: String,
        /// The I/O error.
        #[source]
        source: std::io::Error,
    },
    /// A Thévenin CSV is malformed at `line:col` (1-based).
    #[error("{path}:{line}:{col}: {message}")]
    Csv {
        /// File path.
        path: String,
        /// Line, 1-based.
        line: usize,
        /// Column (character), 1-based.
        col: usize,
        /// What was expected, what was found.
        message: String,
    },
    /// The Thévenin table has no points.
    #[error("the thevenin source table is empty")]
    EmptyTable,
    /// Asked for a frequency outside a Thévenin table (no extrapolation).
    #[error("frequency {freq_hz} hz is outside the source table ({min_hz}..{max_hz} hz)")]
    OutOfRange {
        /// Requested frequency, Hz.
        freq_hz: f64,
        /// Lowest tabulated frequency, Hz.
        min_hz: f64,
        /// Highest tabulated frequency, Hz.
        max_hz: f64,
    },
}

/// A source's Thévenin pair at its outlet at one frequency.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TheveninPair {
    /// Open-circuit pressure (outlet blocked) per volt of drive, Pa/V.
    pub p_oc_pa_per_v: C64,
    /// Source impedance looking back into the outlet, drive shorted, Pa·s/m³.
    pub z_s_pa_s_m3: C64,
}

impl TheveninPair {
    /// Outlet pressure per volt when loaded by `z_load_pa_s_m3`, Pa/V: `p_oc·Z_L/(Zs+Z_L)`.
    pub fn pressure_at_load(&self, z_load_pa_s_m3: C64) -> C64 {
        self.p_oc_pa_per_v * z_load_pa_s_m3 / (self.z_s_pa_s_m3 + z_load_pa_s_m3)
    }
    /// Volume velocity into the load per volt, m³/(s·V): `p_oc/(Zs+Z_L)`.
    pub fn volume_velocity_into(&self, z_load_pa_s_m3: C64) -> C64 {
        self.p_oc_pa_per_v / (self.z_s_pa_s_m3 + z_load_pa_s_m3)
    }
}

/// What drives the coupler.
#[derive(Debug, Clone, PartialEq)]
pub enum Source {
    /// Ideal volume-velocity source (Zs = ∞): 1 m³/s whatever the load.
    VolumeVelocity,
    /// A measured or modelled Thévenin pair, tabulated and interpolated linearly in
    /// log-frequency (real and imaginary parts separately); no extrapolation.
    Thevenin {
        /// (frequency Hz, p_oc Pa/V, Zs Pa·s/m³), ascending in frequency.
        table: Vec<(f64, C64, C64)>,
    },
    /// The lumped model of a small dynamic driver with its front and rear acoustics.
    VirtualEarphone(EarphoneModel),
}

impl Source {
    /// The Thévenin pair at `freq_hz`; `None` for the ideal volume-velocity source.
    pub fn thevenin(&self, freq_hz: f64) -> Result<Option<TheveninPair>, SourceError> {
        match self {
            Source::VolumeVelocity => Ok(None),
            Source::Thevenin { table } => interpolate_table(table, freq_hz).map(Some),
            Source::VirtualEarphone(m) => Ok(Some(m.thevenin(freq_hz))),
        }
    }

    /// Source impedance at `freq_hz`, Pa·s/m³; `None` = infinite (ideal volume velocity).
    pub fn impedance(&self, freq_hz: f64) -> Result<Option<C64>, SourceError> {
        Ok(self.thevenin(freq_hz)?.map(|t| t.z_s_pa_s_m3))
    }

    /// Outlet pressure in `z_load_pa_s_m3`: Pa/V for a Thévenin source, Pa per m³/s for
    /// the ideal volume-velocity source (p = U·Z_L).
    pub fn pressure_at_load(&self, freq_hz: f64, z_load_pa_s_m3: C64) -> Result<C64, SourceError> {
        Ok(match self.thevenin(freq_hz)? {
            None => z_load_pa_s_m3,
            Some(t) => t.pressure_at_load(z_load_pa_s_m3),
        })
    }

    /// Volume velocity into `z_load_pa_s_m3`: m³/(s·V) for a Thévenin source, 1 for the
    /// ideal volume-velocity source.
    pub fn volume_velocity_into(
        &self,
        freq_hz: f64,
        z_load_pa_s_m3: C64,
    ) -> Result<C64, SourceError> {
        Ok(match self.thevenin(freq_hz)? {
            None => C64::new(1.0, 0.0),
            Some(t) => t.volume_velocity_into(z_load_pa_s_m3),
        })
    }

    /// Canonical one-line description of the source (every parameter with its full `f64`
    /// round-trip digits), used for the correction's identity hash.
    pub fn description(&self) -> String {
        match self {
            Source::VolumeVelocity => "volume-velocity".to_string(),
            Source::Thevenin { table } => {
                let mut s = String::from("thevenin");
                for (f, p, z) in table {
                    // `{:?}` on f64 prints the shortest string that round-trips, so the
                    // description changes exactly when a value does.
                    let _ = write!(s, ";{:?},{:?},{:?},{:?},{:?}", f, p.re, p.im, z.re, z.im);
                }
                s
            }
            Source::VirtualEarphone(m) => {
                format!("virtual-earphone;{}", super::canonical::canonical_json(m))
            }
        }
    }

    /// The kind as written in a plan: `volume_velocity`, `thevenin_csv`, `virtual_earphone`.
    pub fn kind_name(&self) -> &'static str {
        match self {
            Source::VolumeVelocity => "volume_velocity",
            Source::Thevenin { .. } => "thevenin_csv",
            Source::VirtualEarphone(_) => "virtual_earphone",
        }
    }

    /// Load a Thévenin table from a CSV file with the header `hz,p_re,p_im,z_re,z_im`
    /// (p in Pa/V, z in Pa·s/m³). Blank lines and lines starting with `#` are skipped.
    /// Frequencies must be positive and strictly ascending.
    pub fn thevenin_from_csv(path: &Path) -> Result<Source, SourceError> {
        let text = std::fs::read_to_string(path).map_err(|source| SourceError::Io {
            path: path.display().to_string(),
            source,
        })?;
        parse_thevenin_csv(&text, &path.display().to_string())
    }
}

/// Parse the text of a Thévenin CSV (see [`Source::thevenin_from_csv`]); `path` is used
/// in error messages only.
pub fn parse_thevenin_csv(text: &str, path: &str) -> Result<Source, SourceError> {
    const HEADER: [&str; 5] = ["hz", "p_re", "p_im", "z_re", "z_im"];
    let err = |line: usize, col: usize, message: String| SourceError::Csv {
        path: path.to_string(),
        line,
        col,
        message,
    };
    let mut table: Vec<(f64, C64, C64)> = Vec::new();
    let mut seen_header = false;
    let mut last_line = 0;
    for (i, raw) in text.lines().enumerate() {
        let line_no = i + 1;
        last_line = line_no;
        let trimmed = raw.trim();
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        // (1-based column of the field's first non-blank character, field text)
        let mut fields: Vec<(usize, &str)> = Vec::new();
        let mut start = 0usize;
        for part in raw.split(',') {
            let lead = part.len() - part.trim_start().len();
            let col = raw[..start + lead].chars().count() + 1;
            fields.push((col, part.trim()));
            start += part.len() + 1;
        }
        if !seen_header {
            let names: Vec<&str> = fields.iter().map(|f| f.1).collect();
            if names != HEADER {
                return Err(err(
                    line_no,
                    1,
                    format!("expected the header \"hz,p_re,p_im,z_re,z_im\", found \"{trimmed}\""),
                ));
            }
            seen_header = true;
            continue;
        }
        if fields.len() != 5 {
            let col = if fields.len() > 5 {
                fields[5].0
            } else {
                raw.chars().count() + 1
            };
            return Err(err(
                line_no,
                col,
                format!(
                    "expected 5 fields (hz,p_re,p_im,z_re,z_im), found {}",
                    fields.len()
                ),
            ));
        }
        let mut v = [0.0f64; 5];
        for (k, (col, s)) in fields.iter().enumerate() {
            v[k] = match s.parse::<f64>() {
                Ok(x) if x.is_finite() => x,
                _ => {
                    return Err(err(
                        line_no,
                        *col,
                        format!("expected a finite number for {}, found \"{s}\"", HEADER[k]),
                    ))
                }
            };
        }
        let col_hz = fields[0].0;
        if v[0] <= 0.0 {
            return Err(err(
                line_no,
                col_hz,
                format!("expected a positive frequency, found {}", fields[0].1),
            ));
        }
        if let Some(&(prev, _, _)) = table.last() {
            if v[0] <= prev {
                return Err(err(
                    line_no,
                    col_hz,
                    format!(
                        "expected a frequency above the previous row's {prev} hz, found {}",
                        fields[0].1
                    ),
                ));
            }
        }
        table.push((v[0], C64::new(v[1], v[2]), C64::new(v[3], v[4])));
    }
    if !seen_header {
        return Err(err(
            last_line.max(1),
            1,
            "expected the header \"hz,p_re,p_im,z_re,z_im\", found an empty file".to_string(),
        ));
    }
    if table.is_empty() {
        return Err(err(
            last_line + 1,
            1,
            "expected at least one data row, found none".to_string(),
        ));
    }
    Ok(Source::Thevenin { table })
}

/// Linear interpolation in log-frequency of (p_oc, Zs) ([`crate::dsp::interp`]); exact at
/// the table points.
fn interpolate_table(table: &[(f64, C64, C64)], freq_hz: f64) -> Result<TheveninPair, SourceError> {
    let (first, last) = match (table.first(), table.last()) {
        (Some(a), Some(b)) => (a, b),
        _ => return Err(SourceError::EmptyTable),
    };
    let out_of_range = || SourceError::OutOfRange {
        freq_hz,
        min_hz: first.0,
        max_hz: last.0,
    };
    // `!(a <= b)` also rejects NaN.
    if !(freq_hz >= first.0 && freq_hz <= last.0) {
        return Err(out_of_range());
    }
    use crate::dsp::interp::{bracket, Bracket};
    let at = |i: usize| TheveninPair {
        p_oc_pa_per_v: table[i].1,
        z_s_pa_s_m3: table[i].2,
    };
    Ok(match bracket(table.len(), |i| table[i].0, freq_hz) {
        Bracket::Below => at(0),
        Bracket::Above => at(table.len() - 1),
        Bracket::At(i) => at(i),
        // The table's frequencies are checked ascending when it is read.
        Bracket::Invalid { lo } => at(lo),
        Bracket::Between { lo, t } => {
            let ((_, p0, z0), (_, p1, z1)) = (table[lo], table[lo + 1]);
            TheveninPair {
                p_oc_pa_per_v: p0 + (p1 - p0) * t,
                z_s_pa_s_m3: z0 + (z1 - z0) * t,
            }
        }
    })
}

/// A small dynamic driver with rear volume and vent, front volume, outlet tube and damper.
///
/// The analogous circuit (Beranek & Mellow 2012, ch. 3; Kinsler et al. 2000, *Fundamentals
/// of Acoustics*, 4th ed., ch. 14) transformed to the acoustic side of the diaphragm: the
/// voltage e through Ze = Re + jωLe drives the force Bl·i; the mechanical impedance
/// Zm = Rms + jωMms + 1/(jωCms) carries the diaphragm velocity v, and the diaphragm moves
/// U = Sd·v. Eliminating i and v gives, on the acoustic side, a pressure generator
/// `p_g = e·Bl/(Ze·Sd)` in series with `(Bl/Sd)²/Ze + Zm/Sd²` (the electrical branch
/// reflected through the gyrator Bl and the transformer Sd), in series with the rear load
/// (rear cavity ∥ rear vent, vented to the outside); the front cavity is a shunt at the
/// diaphragm's front node, then the outlet tube and the outlet damper lead to the outlet
/// (the reference plane).
#[derive(Debug, Clone, PartialEq)]
pub struct EarphoneModel {
    /// Voice-coil DC resistance Re, Ω.
    pub re_ohm: f64,
    /// Voice-coil inductance Le, H.
    pub le_h: f64,
    /// Force factor Bl, T·m.
    pub bl_t_m: f64,
    /// Moving mass Mms, kg.
    pub mms_kg: f64,
    /// Suspension compliance Cms, m/N.
    pub cms_m_per_n: f64,
    /// Mechanical resistance Rms, N·s/m.
    pub rms_n_s_per_m: f64,
    /// Effective diaphragm area Sd, m².
    pub sd_m2: f64,
    /// Rear volume, m³.
    pub rear_volume_m3: f64,
    /// Rear vent from the rear volume to the outside (a tube or a slit); its far end is
    /// taken at atmospheric pressure (p = 0): a sub-millimetre vent's own impedance dwarfs
    /// its radiation impedance (common practice).
    pub rear_vent: Element,
    /// Front volume between diaphragm and outlet tube, m³.
    pub front_volume_m3: f64,
    /// Outlet tube length, m.
    pub outlet_length_m: f64,
    /// Outlet tube radius, m.
    pub outlet_radius_m: f64,
    /// Loss model of the outlet tube.
    pub outlet_loss: TubeLoss,
    /// Outlet damper (mesh) acoustic resistance, Pa·s/m³.
    pub damper_resistance_pa_s_m3: f64,
    /// Outlet damper inertance, kg/m⁴.
    pub damper_inertance_kg_m4: f64,
    /// Air the acoustic parts are evaluated in.
    pub air: Air,
}

/// The parts of the earphone's circuit at one frequency, for the Thévenin reduction and
/// for callers who want to solve the circuit themselves.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EarphoneParts {
    /// Driving pressure per volt on the acoustic side, `Bl/(Ze·Sd)`, Pa/V.
    pub p_drive_pa_per_v: C64,
    /// Series impedance of driver + rear load on the acoustic side, Pa·s/m³.
    pub z_series_pa_s_m3: C64,
    /// Admittance of the front cavity, m³/(Pa·s).
    pub y_front_m3_pa_s: C64,
    /// Outlet tube followed by the damper, from the front node to the outlet.
    pub outlet: TwoPort,
}

impl EarphoneModel {
    /// Invented demo values for a ~10 mm earbud driver ("Ember E2"): not a measured part.
    /// Re 24 Ω, Le 30 µH, Bl 0.5 T·m, Mms 12 mg, Cms 53 mm/N (free-air fs ≈ 200 Hz),
    /// Rms 0.02 N·s/m, Sd 60 mm², rear 300 mm³ vented by a 0.8 mm-radius × 1 mm tube, front
    /// 80 mm³, outlet 1.2 mm radius × 2 mm, damper 6·10⁶ Pa·s/m³ + 200 kg/m⁴. In the 2 cm³
    /// coupler this reads ≈ 144 dB SPL/V flat to 500 Hz, falling gently to ≈ 119 dB SPL/V
    /// at 5–8 kHz. The wide rear vent keeps the rear load's anti-resonance (vent inertance
    /// with the rear volume) near 4 kHz, where the mass-controlled diaphragm hides it; a
    /// narrow vent put it at 1.6 kHz as a deep notch.
    pub fn demo(air: Air) -> Self {
        EarphoneModel {
            re_ohm: 24.0,
            le_h: 30e-6,
            bl_t_m: 0.5,
            mms_kg: 12e-6,
            cms_m_per_n: 53e-3,
            rms_n_s_per_m: 0.02,
            sd_m2: 60e-6,
            rear_volume_m3: 300e-9,
            rear_vent: Element::Tube {
                length_m: 1e-3,
                radius_m: 0.8e-3,
                loss: TubeLoss::ZwikkerKosten,
            },
            front_volume_m3: 80e-9,
            outlet_length_m: 2e-3,
            outlet_radius_m: 1.2e-3,
            outlet_loss: TubeLoss::ZwikkerKosten,
            damper_resistance_pa_s_m3: 6e6,
            damper_inertance_kg_m4: 200.0,
            air,
        }
    }

    /// Free-air resonance 1/(2π√(Mms·Cms)), Hz (Beranek & Mellow 2012, ch. 3).
    pub fn free_air_resonance_hz(&self) -> f64 {
        1.0 / (2.0 * std::f64::consts::PI * (self.mms_kg * self.cms_m_per_n).sqrt())
    }

    /// Electrical impedance of the blocked voice coil Re + jωLe, Ω.
    pub fn electrical_impedance_ohm(&self, freq_hz: f64) -> C64 {
        let w = 2.0 * std::f64::consts::PI * freq_hz;
        C64::new(self.re_ohm, w * self.le_h)
    }

    /// Mechanical impedance Rms + jωMms + 1/(jωCms), N·s/m.
    pub fn mechanical_impedance_n_s_per_m(&self, freq_hz: f64) -> C64 {
        let w = 2.0 * std::f64::consts::PI * freq_hz;
        C64::new(
            self.rms_n_s_per_m,
            w * self.mms_kg - 1.0 / (w * self.cms_m_per_n),
        )
    }

    /// Impedance of the rear load (rear cavity ∥ vent to the outside), Pa·s/m³.
    pub fn rear_impedance_pa_s_m3(&self, freq_hz: f64) -> C64 {
        let y_cavity = self.cavity_admittance(freq_hz, self.rear_volume_m3);
        let vent = self.rear_vent.two_port(freq_hz, &self.air);
        // Far end at p = 0: [p1; U1] = [a b; c d]·[0; U2] → Z = b/d.
        let y_vent = vent.d / vent.b;
        C64::new(1.0, 0.0) / (y_cavity + y_vent)
    }

    /// The outlet tube followed by the damper, front node → outlet.
    pub fn outlet_two_port(&self, freq_hz: f64) -> TwoPort {
        let w = 2.0 * std::f64::consts::PI * freq_hz;
        let tube = Element::Tube {
            length_m: self.outlet_length_m,
            radius_m: self.outlet_radius_m,
            loss: self.outlet_loss,
        }
        .two_port(freq_hz, &self.air);
        let damper = TwoPort::series(C64::new(
            self.damper_resistance_pa_s_m3,
            w * self.damper_inertance_kg_m4,
        ));
        tube.then(&damper)
    }

    /// The circuit's parts at `freq_hz` (see [`EarphoneParts`]).
    pub fn parts(&self, freq_hz: f64) -> EarphoneParts {
        let ze = self.electrical_impedance_ohm(freq_hz);
        let zm = self.mechanical_impedance_n_s_per_m(freq_hz);
        let sd = self.sd_m2;
        let bl = self.bl_t_m;
        // Beranek & Mellow 2012, ch. 3: the electrical impedance seen through the gyrator Bl
        // becomes the mobility Ze/Bl², in the impedance analogy a series (Bl)²/Ze; the
        // transformer Sd scales mechanical to acoustic impedance by 1/Sd².
        let z_driver = (bl * bl / ze + zm) / (sd * sd);
        EarphoneParts {
            p_drive_pa_per_v: C64::new(bl, 0.0) / (ze * sd),
            z_series_pa_s_m3: z_driver + self.rear_impedance_pa_s_m3(freq_hz),
            y_front_m3_pa_s: self.cavity_admittance(freq_hz, self.front_volume_m3),
            outlet: self.outlet_two_port(freq_hz),
        }
    }

    /// The two-port from the acoustic drive node (behind the series driver impedance) to
    /// the outlet: series driver+rear, shunt front cavity, outlet tube, damper.
    pub fn chain(&self, freq_hz: f64) -> (C64, TwoPort) {
        let parts = self.parts(freq_hz);
        let t = TwoPort::series(parts.z_series_pa_s_m3)
            .then(&TwoPort::shunt(parts.y_front_m3_pa_s))
            .then(&parts.outlet);
        (parts.p_drive_pa_per_v, t)
    }

    /// Thévenin pair at the outlet at `freq_hz`.
    pub fn thevenin(&self, freq_hz: f64) -> TheveninPair {
        let (p_g, t) = self.chain(freq_hz);
        // [p_g; U1] = [a b; c d]·[p2; U2]. Blocked outlet (U2 = 0): p2 = p_g/a. With p_g
        // shorted: a·p2 + b·U2 = 0, and U2 flows out of the source, so looking back
        // p2/(−U2) = b/a.
        TheveninPair {
            p_oc_pa_per_v: p_g / t.a,
            z_s_pa_s_m3: t.b / t.a,
        }
    }

    /// Outlet pressure per volt when loaded by `z_load_pa_s_m3`, Pa/V.
    pub fn pressure_at_load(&self, freq_hz: f64, z_load_pa_s_m3: C64) -> C64 {
        self.thevenin(freq_hz).pressure_at_load(z_load_pa_s_m3)
    }

    /// Volume velocity into `z_load_pa_s_m3` per volt, m³/(s·V).
    pub fn volume_velocity_into(&self, freq_hz: f64, z_load_pa_s_m3: C64) -> C64 {
        self.thevenin(freq_hz).volume_velocity_into(z_load_pa_s_m3)
    }

    /// Adiabatic cavity admittance jωV/(ρc²) (Beranek & Mellow 2012, ch. 3, acoustic
    /// compliance), m³/(Pa·s).
    fn cavity_admittance(&self, freq_hz: f64, volume_m3: f64) -> C64 {
        let w = 2.0 * std::f64::consts::PI * freq_hz;
        let rho_c2 = self.air.density_kg_m3 * self.air.speed_of_sound_m_s.powi(2);
        C64::new(0.0, w * volume_m3 / rho_c2)
    }
}
