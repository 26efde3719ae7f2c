//! The physical population (simulated rig v2): a nominal earpiece (the demo one, or the
//! plan's own product from its earphone file), seeded manufacturing spread per serial and
//! channel, and the named defects as changes of the physics.
//!
//! Sits between [`super::physical`] (one earpiece in a fixture) and [`super::SimulatedRig`]
//! (routes, latency, noise, clipping). Seeding is the one of the behavioural population:
//! a ChaCha20 stream per (population seed, serial, channel), so a serial is always the same
//! unit. The spread is the demo one ([`PHYSICAL_SPREAD`], uniform) unless the earphone file
//! declares its own ([`UnitSpread::Declared`]: normal σ per parameter, truncated at ±3σ,
//! [`crate::models::earphone::spread`]). All magnitudes are invented demo values.

use super::nonlinear::Rub;
use super::physical::{Fixture, PhysicalEarphone, PhysicalParams, PhysicalRigError};
use super::{seeded_rng, Defect, SimUnit, SimulatedRig, UnitKind};
use crate::acoustics::network::Coupler;
use crate::acoustics::source::EarphoneModel;
use crate::models::earphone::spread::TRUNCATE_SIGMAS;
use crate::models::earphone::EarphoneSpread;
use rand::Rng;
use rand_distr::StandardNormal;
use std::sync::Arc;

/// How the units of a population vary around its nominal earpiece.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum UnitSpread {
    /// The demo population's uniform spread ([`PHYSICAL_SPREAD`], [`physical_unit_params`]):
    /// an earphone file without a `spread:` section gets it.
    Demo,
    /// The σ an earphone file declares ([`declared_unit_params`]).
    Declared(EarphoneSpread),
}

/// Half-widths of the uniform manufacturing spread of the physical population, fractions.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PhysicalSpread {
    /// Force factor Bl.
    pub bl: f64,
    /// Moving mass Mms.
    pub mms: f64,
    /// Suspension compliance Cms.
    pub cms: f64,
    /// Mechanical resistance Rms.
    pub rms: f64,
    /// Outlet damper resistance.
    pub damper_resistance: f64,
    /// Front volume.
    pub front_volume: f64,
    /// Each nonlinear coefficient (b1, b2, k1, k2), drawn independently.
    pub nonlinearity: f64,
}

/// The spread of the demo population (invented, of the order a careful earbud line holds;
/// common practice for which parts vary most: the suspension, glued and formed, more than
/// the motor): Bl ±3 %, Mms ±3 %, Cms ±8 %, Rms ±10 %, damper resistance ±5 %, front
/// volume ±3 %, nonlinear coefficients ±10 %.
pub const PHYSICAL_SPREAD: PhysicalSpread = PhysicalSpread {
    bl: 0.03,
    mms: 0.03,
    cms: 0.08,
    rms: 0.10,
    damper_resistance: 0.05,
    front_volume: 0.03,
    nonlinearity: 0.10,
};

/// `nominal` with the seeded spread of channel `channel` of unit `serial` in population
/// `seed` ([`PHYSICAL_SPREAD`], uniform, one draw per parameter in a fixed order).
pub fn physical_unit_params(
    seed: u64,
    serial: &str,
    channel: usize,
    nominal: &PhysicalParams,
) -> PhysicalParams {
    let mut rng = seeded_rng("physical-unit", seed, serial, channel as u64);
    let s = PHYSICAL_SPREAD;
    let mut draw = |half: f64| 1.0 + rng.random_range(-half..=half);
    let mut p = nominal.clone();
    p.model.bl_t_m *= draw(s.bl);
    p.model.mms_kg *= draw(s.mms);
    p.model.cms_m_per_n *= draw(s.cms);
    p.model.rms_n_s_per_m *= draw(s.rms);
    p.model.damper_resistance_pa_s_m3 *= draw(s.damper_resistance);
    p.model.front_volume_m3 *= draw(s.front_volume);
    p.nonlinearity.bl_b1_per_m *= draw(s.nonlinearity);
    p.nonlinearity.bl_b2_per_m2 *= draw(s.nonlinearity);
    p.nonlinearity.k_k1_per_m *= draw(s.nonlinearity);
    p.nonlinearity.k_k2_per_m2 *= draw(s.nonlinearity);
    p
}

/// `nominal` with the declared spread `spread` for channel `channel` of unit `serial` in
/// population `seed`: one truncated standard normal draw per model parameter
/// ([`EarphoneSpread::vary`], fixed order), then one per nonlinear coefficient (b1, b2, k1,
/// k2), each scaled by `1 + σ·z`. A draw beyond ±3σ is drawn again. A σ of 0 leaves its
/// parameter exactly nominal.
pub fn declared_unit_params(
    seed: u64,
    serial: &str,
    channel: usize,
    nominal: &PhysicalParams,
    spread: &EarphoneSpread,
) -> PhysicalParams {
    let mut rng = seeded_rng("physical-unit-declared", seed, serial, channel as u64);
    let mut z = || loop {
        let d: f64 = rng.sample(StandardNormal);
        if d.abs() <= TRUNCATE_SIGMAS {
            return d;
        }
    };
    let mut p = nominal.clone();
    p.model = spread.vary(&nominal.model, &mut z);
    let s = spread.nonlinearity;
    let n = &mut p.nonlinearity;
    for c in [
        &mut n.bl_b1_per_m,
        &mut n.bl_b2_per_m2,
        &mut n.k_k1_per_m,
        &mut n.k_k2_per_m2,
    ] {
        *c *= 1.0 + s * z();
    }
    p
}

/// Damper resistance factor of a blocked (clogged) outlet damper.
pub const BLOCKED_DAMPER_FACTOR: f64 = 10.0;
/// Force-factor factor of a weak motor (a partly demagnetised magnet): −30 %.
pub const WEAK_MOTOR_FACTOR: f64 = 0.7;
/// Voice-coil resistance factor of a low-sensitivity unit (a bad joint in series with the
/// coil doubling Re: half the current where Re dominates Ze, ≈ −6 dB below the resonance).
pub const LOW_SENSITIVITY_RE_FACTOR: f64 = 2.0;
/// Moving-mass factor of a resonance shift (adhesive on the diaphragm): 1/0.75², so the
/// mass-controlled resonance in the fixture moves down by 25 %.
pub const RESONANCE_SHIFT_MASS_FACTOR: f64 = 1.0 / (0.75 * 0.75);
/// Amplifier gain factor of a clipping unit (its gain stage set 20 dB high: the demo
/// sweep's peak, ≈ −14 dBFS at the microphone, lands at ≈ +6 dBFS).
pub const CLIPPING_DRIVE_FACTOR: f64 = 10.0;
/// Nonlinear coefficient factor of a heavily distorting unit (a voice coil wound off
/// centre and a stiff, uneven surround).
pub const HEAVY_DISTORTION_FACTOR: f64 = 40.0;

/// The `too-loud` defect's sound pressure gain: +30 dB (the unit of issue 5's guard check).
pub const TOO_LOUD_GAIN: f64 = 31.622_776_601_683_793;

/// The rub of the `rub` defect (invented): a coil sitting off centre touches beyond
/// ±0.35 µm (the nominal unit's excursion at the demo level, −18 dBFS, grows from ≈ 0.25 µm
/// below 300 Hz to ≈ 0.5 µm at 1 kHz, towards its in-fixture resonance) with 0.065 mN of
/// friction (a tenth of the motor force Bl·e/Re at that level).
pub const DEFECT_RUB: Rub = Rub {
    clearance_m: 0.35e-6,
    friction_force_n: 0.065e-3,
};

impl PhysicalParams {
    /// This earpiece with `defect` applied (invented magnitudes, the constants above):
    /// seal leak → [`super::physical::seal_leak_branch`] at the reference plane; blocked
    /// damper → damper resistance ×10; weak motor → Bl ×0.7; rub → [`DEFECT_RUB`]; reversed
    /// polarity → the coil driven inverted; dead channel → open coil, silent; clipping →
    /// amplifier +14 dB, so the input converter clips; low sensitivity → Re ×2; resonance
    /// shift → Mms ×1.78; heavy distortion → nonlinear coefficients ×6; too loud → sound
    /// pressure ×[`TOO_LOUD_GAIN`] (+30 dB).
    pub fn with_defect(mut self, defect: Defect) -> Self {
        match defect {
            Defect::SealLeak => self.seal_leak = true,
            Defect::BlockedDamper => {
                self.model.damper_resistance_pa_s_m3 *= BLOCKED_DAMPER_FACTOR;
            }
            Defect::WeakMotor => self.model.bl_t_m *= WEAK_MOTOR_FACTOR,
            Defect::Rub => self.rub = Some(DEFECT_RUB),
            Defect::ReversedPolarity => self.inverted = !self.inverted,
            Defect::DeadChannel => self.dead = true,
            Defect::Clipping => self.drive_v_per_fs *= CLIPPING_DRIVE_FACTOR,
            Defect::LowSensitivity => self.model.re_ohm *= LOW_SENSITIVITY_RE_FACTOR,
            Defect::ResonanceShift => self.model.mms_kg *= RESONANCE_SHIFT_MASS_FACTOR,
            Defect::HeavyDistortion => {
                self.nonlinearity = self.nonlinearity.scaled(HEAVY_DISTORTION_FACTOR);
            }
            Defect::TooLoud => self.acoustic_gain *= TOO_LOUD_GAIN,
        }
        self
    }
}

/// The physical population in one fixture: the nominal earpiece, its spread and the
/// fixture (with its seal-leak variant), whose per-frequency tables are shared by every unit
/// measured (built at the first unit, reused by every later one: a line's set-up).
#[derive(Debug, Clone)]
pub struct PhysicalPopulation {
    nominal: PhysicalParams,
    spread: UnitSpread,
    fixture: Arc<Fixture>,
    leaky: Arc<Fixture>,
}

impl PhysicalPopulation {
    /// The demo population ([`PhysicalParams::nominal`] in the fixture's air) in the fixture
    /// `coupler`, read at its microphone tap `tap`.
    pub fn new(coupler: Coupler, tap: &str) -> Result<Self, PhysicalRigError> {
        let nominal = PhysicalParams::nominal(coupler.air);
        Self::with_nominal(coupler, tap, nominal)
    }

    /// A population around another nominal earpiece.
    pub fn with_nominal(
        coupler: Coupler,
        tap: &str,
        nominal: PhysicalParams,
    ) -> Result<Self, PhysicalRigError> {
        let fixture = Fixture::new(coupler, tap)?;
        let leaky = fixture.with_seal_leak();
        Ok(PhysicalPopulation {
            nominal,
            spread: UnitSpread::Demo,
            fixture: Arc::new(fixture),
            leaky: Arc::new(leaky),
        })
    }

    /// The population of an earphone file's product in the fixture `coupler`: `model` as the
    /// nominal earpiece, in the fixture's air (one air for the whole rig: the earpiece sits
    /// in the fixture), with the demo nonlinearity, no rub and the demo converters
    /// ([`PhysicalParams::nominal`] for everything the file does not say); its declared
    /// `spread`, else the demo spread.
    pub fn of_product(
        coupler: Coupler,
        tap: &str,
        model: &EarphoneModel,
        spread: Option<&EarphoneSpread>,
    ) -> Result<Self, PhysicalRigError> {
        let mut nominal = PhysicalParams::nominal(coupler.air);
        nominal.model = EarphoneModel {
            air: coupler.air,
            ..model.clone()
        };
        let pop = Self::with_nominal(coupler, tap, nominal)?;
        Ok(match spread {
            Some(s) => pop.with_spread(UnitSpread::Declared(*s)),
            None => pop,
        })
    }

    /// The same population with another spread.
    pub fn with_spread(mut self, spread: UnitSpread) -> Self {
        self.spread = spread;
        self
    }

    /// How the units vary.
    pub fn spread(&self) -> &UnitSpread {
        &self.spread
    }

    /// The nominal earpiece (before spread).
    pub fn nominal(&self) -> &PhysicalParams {
        &self.nominal
    }

    /// The fixture (without seal leak).
    pub fn fixture(&self) -> &Arc<Fixture> {
        &self.fixture
    }

    /// Channel `channel` of `unit` in population `seed`: spread, then the unit's defect when
    /// it is on this channel.
    pub fn unit_params(&self, seed: u64, unit: &SimUnit, channel: usize) -> PhysicalParams {
        let p = match (unit.kind, &self.spread) {
            (UnitKind::Design, _) => self.nominal.clone(),
            (_, UnitSpread::Demo) => {
                physical_unit_params(seed, &unit.serial, channel, &self.nominal)
            }
            (_, UnitSpread::Declared(s)) => {
                declared_unit_params(seed, &unit.serial, channel, &self.nominal, s)
            }
        };
        match unit.kind {
            UnitKind::Defect(d) if channel == unit.defect_channel => p.with_defect(d),
            _ => p,
        }
    }

    /// The earpiece of channel `channel` of `unit`, seated in the shared fixture.
    pub fn earpiece(&self, seed: u64, unit: &SimUnit, channel: usize) -> PhysicalEarphone {
        let p = self.unit_params(seed, unit, channel);
        let fixture = if p.seal_leak {
            Arc::clone(&self.leaky)
        } else {
            Arc::clone(&self.fixture)
        };
        PhysicalEarphone::in_fixture(p, fixture)
    }

    /// A rig measuring `unit` of population `seed` on `routes` (output, input), one earpiece
    /// per route. Cheap once the fixture's tables exist for the stimulus length.
    pub fn rig(&self, routes: Vec<(usize, usize)>, seed: u64, unit: SimUnit) -> SimulatedRig {
        let earpieces = (0..routes.len())
            .map(|c| self.earpiece(seed, &unit, c))
            .collect();
        SimulatedRig::from_physical(routes, seed, unit, earpieces)
    }
}
