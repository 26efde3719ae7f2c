//! The physical device under test: amplifier → dynamic driver (nonlinear motor and
//! suspension) → front volume, outlet tube, damper → fixture coupler → microphone →
//! input converter.
//!
//! Sits behind [`super::Dut`] in the simulated rig (version 2). The linear part is exactly
//! the virtual earphone of [`crate::acoustics::source::EarphoneModel`] (Beranek & Mellow
//! 2012, ch. 3) loaded by the input impedance of the fixture's [`Coupler`], with the
//! pressure transfer of the fixture's microphone tap: the same physics the fixture →
//! reference correction relies on, so that the correction can be proven end to end. The
//! nonlinear part (force factor and stiffness varying with excursion, voice-coil rub) and
//! its solver are in [`super::nonlinear`].
//!
//! Speed: the coupler, the rear vent and the outlet tube need Bessel functions per
//! frequency; they are evaluated once per (FFT length, rate) and cached in the [`Fixture`]
//! shared by all units measured in it. Per unit only the lumped driver parts are
//! recomputed (a few complex operations per bin).
//!
//! Every number here is an invented demo value for the invented "Ember E2" earbud.

use super::nonlinear::{
    fast_even_len, solve, LinearBins, MotorNonlinearity, Plans, Rub, SolveReport, SolverSettings,
};
use super::Dut;
use crate::acoustics::air::Air;
use crate::acoustics::elements::{Element, TubeLoss};
use crate::acoustics::network::{ChainItem, Coupler};
use crate::acoustics::source::EarphoneModel;
use crate::acoustics::termination::Termination;
use crate::acoustics::twoport::TwoPort;
use crate::acoustics::C64;
use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use std::f64::consts::PI;
use std::sync::{Arc, Mutex};

/// Amplifier gain: volts peak at the voice coil per full scale of drive (invented: a
/// headphone-output stage giving 0.25 V peak at 0 dBFS, so −12 dBFS is 63 mV peak, a
/// usual earbud test level).
pub const DRIVE_V_PER_FS: f64 = 0.25;

/// Microphone and input converter: full scale per pascal (invented: a measurement
/// microphone and converter reaching full scale at 100 Pa peak, 131 dB SPL).
pub const MIC_FS_PER_PA: f64 = 1.0 / 100.0;

/// Why a physical rig cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PhysicalRigError {
    /// The fixture model has no microphone tap of that name; fix the tap name or the model.
    #[error(
        "fixture `{coupler}`: expected a microphone tap named one of {known}, found \"{tap}\""
    )]
    UnknownTap {
        /// Coupler id.
        coupler: String,
        /// Tap names the model has.
        known: String,
        /// The name asked for.
        tap: String,
    },
}

/// Everything that makes one physical earpiece (one channel of a unit).
#[derive(Debug, Clone, PartialEq)]
pub struct PhysicalParams {
    /// The small-signal driver and its acoustics (Bl, Cms are the values at rest, x = 0).
    pub model: EarphoneModel,
    /// Excursion dependence of Bl and K.
    pub nonlinearity: MotorNonlinearity,
    /// Voice-coil rub, when the coil touches.
    pub rub: Option<Rub>,
    /// Amplifier gain, V peak per full scale.
    pub drive_v_per_fs: f64,
    /// Microphone and converter, full scale per Pa.
    pub mic_fs_per_pa: f64,
    /// Sound pressure of this earpiece relative to its design, linear (1 = as designed): a
    /// defect that makes a unit louder without changing anything else.
    pub acoustic_gain: f64,
    /// Voice-coil leads swapped: the drive reaches the coil inverted.
    pub inverted: bool,
    /// Open voice coil: no sound at all.
    pub dead: bool,
    /// The earpiece does not seal on the fixture: [`seal_leak_branch`] at the reference
    /// plane.
    pub seal_leak: bool,
}

/// The leak of an earpiece that does not seal on the fixture (invented): a gap of 0.2 mm
/// between the nozzle and the seal, 5 mm wide and 2 mm long, to the room, as a shunt branch
/// at the reference plane (slit after Stinson 1991, radiating as a baffled piston of about
/// the slit's size). Its impedance (≈ 5·10⁶ Pa·s/m³ resistance plus ≈ 2400 kg/m⁴ of mass)
/// is of the order of the earpiece's source impedance (its compliant diaphragm) below a
/// few hundred hertz, so the level there drops by ≈ 7 dB in the demo fixtures; its mass
/// and the fixture cavity make a damped Helmholtz resonance near 2 kHz (+2 dB in fixture
/// A, −0.5 dB in B).
pub fn seal_leak_branch() -> Element {
    Element::Branch {
        elements: vec![Element::Slit {
            length_m: 2.0e-3,
            width_m: 5.0e-3,
            gap_m: 0.2e-3,
        }],
        termination: Termination::OpenBaffled { radius_m: 0.5e-3 },
    }
}

impl PhysicalParams {
    /// The nominal demo earpiece in `air`: [`EarphoneModel::demo`], the nominal nonlinear
    /// coefficients [`NOMINAL_NONLINEARITY`], no rub, [`DRIVE_V_PER_FS`], [`MIC_FS_PER_PA`].
    pub fn nominal(air: Air) -> Self {
        PhysicalParams {
            model: EarphoneModel::demo(air),
            nonlinearity: NOMINAL_NONLINEARITY,
            rub: None,
            drive_v_per_fs: DRIVE_V_PER_FS,
            mic_fs_per_pa: MIC_FS_PER_PA,
            acoustic_gain: 1.0,
            inverted: false,
            dead: false,
            seal_leak: false,
        }
    }

    /// Full-scale gain of the chain ahead of the driver and after the microphone, with
    /// polarity: drive_v_per_fs·mic_fs_per_pa·acoustic_gain·(±1).
    pub fn converter_gain(&self) -> f64 {
        let g = self.drive_v_per_fs * self.mic_fs_per_pa * self.acoustic_gain;
        if self.inverted {
            -g
        } else {
            g
        }
    }
}

/// Invented nominal nonlinearity of the demo micro-driver, whose linear range is about
/// ±20 µm: Bl falls to 68 % (outward) and 83 % (inward) at ±50 µm, the suspension stiffens
/// to 165 % and 135 % there (common practice for the shape of these curves: Bl(x) falling
/// either side of the rest position, K(x) rising, both somewhat asymmetric). Sealed in a
/// coupler at the demo level (−18 dBFS, ≈ 0.25 µm peak below the resonance) the distortion
/// is small; it grows with excursion: with level, towards the resonance, and at low
/// frequencies when a leak lets the diaphragm move as in free air (≈ 35 µm).
pub const NOMINAL_NONLINEARITY: MotorNonlinearity = MotorNonlinearity {
    bl_b1_per_m: -1500.0,
    bl_b2_per_m2: -1.0e8,
    k_k1_per_m: 3000.0,
    k_k2_per_m2: 2.0e8,
};

/// The fixture the earpieces sit in: a coupler model, its microphone tap, and the cache of
/// per-frequency tables shared by every unit measured in it.
pub struct Fixture {
    coupler: Coupler,
    tap: String,
    tap_index: usize,
    cache: Mutex<Vec<Arc<Tables>>>,
}

impl std::fmt::Debug for Fixture {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Fixture")
            .field("coupler", &self.coupler.id)
            .field("tap", &self.tap)
            .finish()
    }
}

/// The parts of the earphone that the per-bin tables depend on (not spread in the
/// population); a unit whose parts differ gets its own tables.
#[derive(Debug, Clone, PartialEq)]
struct Geometry {
    rear_volume_m3: f64,
    rear_vent: Element,
    outlet_length_m: f64,
    outlet_radius_m: f64,
    outlet_loss: TubeLoss,
    air: Air,
}

impl Geometry {
    fn of(m: &EarphoneModel) -> Self {
        Geometry {
            rear_volume_m3: m.rear_volume_m3,
            rear_vent: m.rear_vent.clone(),
            outlet_length_m: m.outlet_length_m,
            outlet_radius_m: m.outlet_radius_m,
            outlet_loss: m.outlet_loss,
            air: m.air,
        }
    }
}

/// Per-bin tables for one oversampled FFT length and rate.
struct Tables {
    n_base: usize,
    oversample: usize,
    rate_hz: f64,
    geometry: Geometry,
    /// Frequency of each oversampled bin, Hz (bin 0 evaluated just above DC).
    freqs_hz: Vec<f64>,
    z_in: Vec<C64>,
    t_tap: Vec<C64>,
    z_rear: Vec<C64>,
    outlet_tube: Vec<TwoPort>,
    plans: Plans,
    base_fwd: Arc<dyn RealToComplex<f64>>,
    base_inv: Arc<dyn ComplexToReal<f64>>,
}

/// Bin 0 (DC) is evaluated at this fraction of the bin spacing: the excursion's static
/// limit x/F → 1/K needs the models just above 0 Hz, where jω terms vanish.
const DC_FRACTION_OF_BIN: f64 = 1e-3;

impl Fixture {
    /// The fixture `coupler` read at microphone tap `tap`.
    pub fn new(coupler: Coupler, tap: &str) -> Result<Self, PhysicalRigError> {
        let tap_index = coupler.tap_names().position(|t| t == tap).ok_or_else(|| {
            PhysicalRigError::UnknownTap {
                coupler: coupler.id.clone(),
                known: coupler.tap_names().collect::<Vec<_>>().join(", "),
                tap: tap.to_string(),
            }
        })?;
        Ok(Fixture {
            coupler,
            tap: tap.to_string(),
            tap_index,
            cache: Mutex::new(Vec::new()),
        })
    }

    /// The same fixture with an earpiece that does not seal: [`seal_leak_branch`] first in
    /// the chain, at the reference plane.
    pub fn with_seal_leak(&self) -> Fixture {
        let mut coupler = self.coupler.clone();
        coupler.id = format!("{}+seal-leak", coupler.id);
        coupler
            .chain
            .insert(0, ChainItem::Element(seal_leak_branch()));
        Fixture {
            coupler,
            tap: self.tap.clone(),
            tap_index: self.tap_index,
            cache: Mutex::new(Vec::new()),
        }
    }

    /// The coupler model.
    pub fn coupler(&self) -> &Coupler {
        &self.coupler
    }

    /// The microphone tap name.
    pub fn tap(&self) -> &str {
        &self.tap
    }

    /// (input impedance Pa·s/m³, pressure transfer p_tap/p_in) at `freq_hz`.
    pub fn point(&self, freq_hz: f64) -> (C64, C64) {
        let mut taps = vec![(C64::new(0.0, 0.0), C64::new(0.0, 0.0)); self.coupler.n_taps()];
        let z = self.coupler.evaluate_into(freq_hz, &mut taps);
        (z, taps[self.tap_index].1)
    }

    fn tables(
        &self,
        model: &EarphoneModel,
        n_base: usize,
        oversample: usize,
        rate_hz: f64,
    ) -> Arc<Tables> {
        let geometry = Geometry::of(model);
        let mut cache = self.cache.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(t) = cache.iter().find(|t| {
            t.n_base == n_base
                && t.oversample == oversample
                && t.rate_hz == rate_hz
                && t.geometry == geometry
        }) {
            return Arc::clone(t);
        }
        let n = n_base * oversample;
        let nb = n / 2 + 1;
        let df = rate_hz / n_base as f64;
        let mut taps = vec![(C64::new(0.0, 0.0), C64::new(0.0, 0.0)); self.coupler.n_taps()];
        let mut t = Tables {
            n_base,
            oversample,
            rate_hz,
            geometry,
            freqs_hz: Vec::with_capacity(nb),
            z_in: Vec::with_capacity(nb),
            t_tap: Vec::with_capacity(nb),
            z_rear: Vec::with_capacity(nb),
            outlet_tube: Vec::with_capacity(nb),
            plans: Plans::new(n),
            base_fwd: RealFftPlanner::<f64>::new().plan_fft_forward(n_base),
            base_inv: RealFftPlanner::<f64>::new().plan_fft_inverse(n_base),
        };
        let tube = Element::Tube {
            length_m: model.outlet_length_m,
            radius_m: model.outlet_radius_m,
            loss: model.outlet_loss,
        };
        for k in 0..nb {
            let f = if k == 0 {
                DC_FRACTION_OF_BIN * df
            } else {
                k as f64 * df
            };
            let z = self.coupler.evaluate_into(f, &mut taps);
            t.freqs_hz.push(f);
            t.z_in.push(z);
            t.t_tap.push(taps[self.tap_index].1);
            t.z_rear.push(model.rear_impedance_pa_s_m3(f));
            t.outlet_tube.push(tube.two_port(f, &model.air));
        }
        let t = Arc::new(t);
        cache.push(Arc::clone(&t));
        t
    }
}

/// The small-signal quantities of one earpiece at one frequency, from the acoustic
/// driving pressure p_g (see [`LinearBins`]).
#[derive(Debug, Clone, Copy)]
struct BinValues {
    pg_per_v: C64,
    hv: C64,
    hx: C64,
    y_e: C64,
    hp: C64,
}

/// The circuit of [`EarphoneModel::chain`] (series driver+rear, shunt front cavity, outlet
/// tube, damper) loaded by the fixture, solved from the driving pressure p_g: with
/// [p_g; U_d] = M·[p_ref; U_ref] and p_ref = Z_in·U_ref, U_d/p_g = (c·Z_in + d)/(a·Z_in + b)
/// and p_ref/p_g = Z_in/(a·Z_in + b), the latter equal to the Thévenin form
/// p_oc·Z_in/(Zs + Z_in) with p_oc = p_g/a, Zs = b/a.
fn bin_values(
    m: &EarphoneModel,
    freq_hz: f64,
    z_in: C64,
    t_tap: C64,
    z_rear: C64,
    outlet_tube: &TwoPort,
) -> BinValues {
    let w = 2.0 * PI * freq_hz;
    let jw = C64::new(0.0, w);
    let ze = m.electrical_impedance_ohm(freq_hz);
    let zm = m.mechanical_impedance_n_s_per_m(freq_hz);
    let (bl, sd) = (m.bl_t_m, m.sd_m2);
    let z_driver = (bl * bl / ze + zm) / (sd * sd);
    let rho_c2 = m.air.density_kg_m3 * m.air.speed_of_sound_m_s.powi(2);
    let y_front = jw * m.front_volume_m3 / rho_c2;
    let damper = TwoPort::series(C64::new(
        m.damper_resistance_pa_s_m3,
        w * m.damper_inertance_kg_m4,
    ));
    let chain = TwoPort::series(z_driver + z_rear)
        .then(&TwoPort::shunt(y_front))
        .then(&outlet_tube.then(&damper));
    let den = chain.a * z_in + chain.b;
    let hu = (chain.c * z_in + chain.d) / den;
    let hv = hu / sd;
    BinValues {
        pg_per_v: C64::new(bl, 0.0) / (ze * sd),
        hv,
        hx: hv / jw,
        y_e: ze.inv(),
        hp: t_tap * z_in / den,
    }
}

/// One physical earpiece in a fixture, as the simulated rig drives it.
#[derive(Debug, Clone)]
pub struct PhysicalEarphone {
    /// The earpiece.
    pub params: PhysicalParams,
    fixture: Arc<Fixture>,
    /// Solver settings.
    pub settings: SolverSettings,
}

/// The result of one simulation: the output and what the solver did.
#[derive(Debug, Clone)]
pub struct Simulation {
    /// Output as the input converter sees it, full scale (before noise, latency, clipping).
    pub output_fs: Vec<f64>,
    /// What the nonlinear solver did.
    pub report: SolveReport,
    /// Problems that make the capture a retest (empty when valid).
    pub faults: Vec<String>,
}

impl PhysicalEarphone {
    /// An earpiece with `params` in `fixture` (the seal-leak variant of the fixture when
    /// `params.seal_leak`, built here).
    pub fn new(params: PhysicalParams, fixture: Arc<Fixture>) -> Self {
        let fixture = if params.seal_leak {
            Arc::new(fixture.with_seal_leak())
        } else {
            fixture
        };
        PhysicalEarphone {
            params,
            fixture,
            settings: SolverSettings::default(),
        }
    }

    /// An earpiece sharing an already built fixture as it is (the caller has applied any
    /// seal leak; used by the population to share the leaky fixture's cache too).
    pub fn in_fixture(params: PhysicalParams, fixture: Arc<Fixture>) -> Self {
        PhysicalEarphone {
            params,
            fixture,
            settings: SolverSettings::default(),
        }
    }

    /// The same earpiece with other solver settings.
    pub fn with_settings(mut self, settings: SolverSettings) -> Self {
        self.settings = settings;
        self
    }

    /// The fixture this earpiece sits in (with the seal leak when it has one).
    pub fn fixture(&self) -> &Fixture {
        &self.fixture
    }

    /// The per-frequency circuit values the solver uses, at any `freq_hz` (not only a bin).
    fn small_signal_bin(&self, freq_hz: f64) -> BinValues {
        let m = &self.params.model;
        let (z_in, t_tap) = self.fixture.point(freq_hz);
        let tube = Element::Tube {
            length_m: m.outlet_length_m,
            radius_m: m.outlet_radius_m,
            loss: m.outlet_loss,
        }
        .two_port(freq_hz, &m.air);
        bin_values(
            m,
            freq_hz,
            z_in,
            t_tap,
            m.rear_impedance_pa_s_m3(freq_hz),
            &tube,
        )
    }

    /// Small-signal response at `freq_hz`: converter full scale out per full scale of drive
    /// (zero when dead), through the same per-frequency circuit the solver uses.
    pub fn small_signal_response(&self, freq_hz: f64) -> C64 {
        if self.params.dead {
            return C64::new(0.0, 0.0);
        }
        let b = self.small_signal_bin(freq_hz);
        b.pg_per_v * b.hp * self.params.converter_gain()
    }

    /// Small-signal diaphragm excursion per full scale of drive at `freq_hz`, m.
    pub fn small_signal_excursion_m(&self, freq_hz: f64) -> C64 {
        let b = self.small_signal_bin(freq_hz);
        let g = if self.params.inverted { -1.0 } else { 1.0 };
        b.pg_per_v * b.hx * self.params.drive_v_per_fs * g
    }

    /// Simulate `drive` (full scale at `sample_rate_hz`, zero before sample 0): the output
    /// and the solver's report. Never panics; a non-converged solve or a non-finite value
    /// is reported in `faults` (and non-finite samples are zeroed).
    pub fn simulate(&self, drive: &[f64], sample_rate_hz: u32) -> Simulation {
        let len = drive.len();
        let p = &self.params;
        if p.dead || len == 0 {
            return Simulation {
                output_fs: vec![0.0; len],
                report: SolveReport {
                    iterations: 0,
                    converged: true,
                    relative_change: 0.0,
                    peak_excursion_m: 0.0,
                },
                faults: Vec::new(),
            };
        }
        let fs = f64::from(sample_rate_hz);
        let os = self.settings.oversample.max(1);
        let tail = (self.settings.tail_s.max(0.0) * fs).ceil() as usize;
        let n_base = fast_even_len(len + tail);
        let n = n_base * os;
        let tables = self.fixture.tables(&p.model, n_base, os, fs);

        // Per-unit linear bins (cheap: the expensive parts come from the tables).
        let nb = n / 2 + 1;
        let mut bins = LinearBins {
            pg_per_v: Vec::with_capacity(nb),
            hv: Vec::with_capacity(nb),
            hx: Vec::with_capacity(nb),
            y_e: Vec::with_capacity(nb),
            hp: Vec::with_capacity(nb),
            bl0_t_m: p.model.bl_t_m,
            k0_n_per_m: 1.0 / p.model.cms_m_per_n,
            sd_m2: p.model.sd_m2,
        };
        for k in 0..nb {
            let b = bin_values(
                &p.model,
                tables.freqs_hz[k],
                tables.z_in[k],
                tables.t_tap[k],
                tables.z_rear[k],
                &tables.outlet_tube[k],
            );
            bins.pg_per_v.push(b.pg_per_v);
            bins.hv.push(b.hv);
            bins.hx.push(b.hx);
            bins.y_e.push(b.y_e);
            bins.hp.push(b.hp);
        }

        // Drive spectrum at the base rate, then zero-padded to the oversampled grid (ideal
        // band-limited interpolation); the base Nyquist bin is dropped (nothing is played
        // there).
        let mut base = vec![0.0; n_base];
        for (b, d) in base.iter_mut().zip(drive) {
            *b = if d.is_finite() { *d } else { 0.0 };
        }
        let mut base_spec = tables.base_fwd.make_output_vec();
        tables
            .base_fwd
            .process(&mut base, &mut base_spec)
            .expect("lengths come from the same plan");
        let volts = p.drive_v_per_fs * if p.inverted { -1.0 } else { 1.0 };
        let up = os as f64 * volts;
        let mut e_spec = vec![C64::new(0.0, 0.0); nb];
        for (e, b) in e_spec.iter_mut().zip(&base_spec[..n_base / 2]) {
            *e = b * up;
        }

        let (p_spec, report) = solve(
            &e_spec,
            &bins,
            &p.nonlinearity,
            p.rub.as_ref(),
            &tables.plans,
            &self.settings,
        );

        // Back to the base rate: keep the base band (an ideal decimation filter).
        let mut out_spec = tables.base_inv.make_input_vec();
        let g = p.mic_fs_per_pa * p.acoustic_gain;
        for (o, s) in out_spec.iter_mut().zip(&p_spec[..n_base / 2]) {
            *o = s * g;
        }
        out_spec[0].im = 0.0;
        let mut out = tables.base_inv.make_output_vec();
        tables
            .base_inv
            .process(&mut out_spec, &mut out)
            .expect("lengths come from the same plan");
        let scale = 1.0 / n as f64;
        let mut faults = Vec::new();
        let mut n_bad = 0usize;
        let output_fs: Vec<f64> = out[..len]
            .iter()
            .map(|v| {
                let v = v * scale;
                if v.is_finite() {
                    v
                } else {
                    n_bad += 1;
                    0.0
                }
            })
            .collect();
        if !report.converged {
            faults.push(format!(
                "physical earphone model did not converge: relative change {:.1e} after {} \
                 iteration(s) (peak excursion {:.1} um)",
                report.relative_change,
                report.iterations,
                report.peak_excursion_m * 1e6
            ));
        }
        if n_bad > 0 {
            faults.push(format!(
                "physical earphone model produced {n_bad} non-finite sample(s), set to zero"
            ));
        }
        Simulation {
            output_fs,
            report,
            faults,
        }
    }
}

impl Dut for PhysicalEarphone {
    fn respond(&self, drive: &[f64], sample_rate_hz: u32) -> Vec<f64> {
        self.simulate(drive, sample_rate_hz).output_fs
    }

    fn respond_with_faults(&self, drive: &[f64], sample_rate_hz: u32) -> (Vec<f64>, Vec<String>) {
        let s = self.simulate(drive, sample_rate_hz);
        (s.output_fs, s.faults)
    }
}
