//! The simulated rig: a behavioural earphone model and a seeded population.
//!
//! Stands in for a sound card and a fixture: [`SimulatedRig::play_and_capture`] drives each
//! routed output through a device under test ([`Dut`]), then adds what the station's input
//! converter adds — a latency, converter noise and clipping at ±1.0 full scale. The device
//! is behind the [`Dut`] trait so that a physical earphone model can replace the
//! behavioural one ([`BehaviouralEarphone`]) without touching the rig.
//!
//! Population: every serial number is one unit. Its manufacturing spread is drawn from a
//! ChaCha20 generator seeded by (population seed, serial, channel), so the same serial is
//! always the same unit; a named [`Defect`] can be put on one channel. The converter noise
//! is seeded as well, from (seed, serial, run number): a fresh rig's first capture of a unit
//! is always the same, and repeated runs on one rig differ as real repeats would.
//!
//! Every number in this module and its children is an invented demo value for the
//! invented "Ember E2" earbud; none is measured or taken from any product.

pub mod biquad;
pub mod earphone;
pub mod nonlinear;
pub mod oversample;
pub mod physical;
pub mod population;

pub use biquad::Biquad;
pub use earphone::{BehaviouralEarphone, EarphoneParams, PolynomialDut};
pub use nonlinear::{MotorNonlinearity, Rub, SolveReport, SolverSettings};
pub use oversample::{Oversampler4, Polynomial};
pub use physical::{
    Fixture, PhysicalEarphone, PhysicalParams, PhysicalRigError, Simulation, DRIVE_V_PER_FS,
    MIC_FS_PER_PA, NOMINAL_NONLINEARITY,
};
pub use population::{
    declared_unit_params, physical_unit_params, PhysicalPopulation, PhysicalSpread, UnitSpread,
    PHYSICAL_SPREAD,
};

use super::{Capture, Guard, Rig, RigError};
use crate::dsp::sweep::Stimulus;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha20Rng;
use rand_distr::StandardNormal;
use sha2::{Digest, Sha256};
use std::fmt;
use std::str::FromStr;

/// A device under test as the simulated rig sees it.
///
/// # For implementations
/// `respond` maps the drive (full scale, as the output converter sends it) at
/// `sample_rate_hz` to the acoustic output as the input converter sees it (full scale),
/// before noise, latency and clipping, which the rig adds. Return exactly `drive.len()`
/// samples, take the signal as zero before sample 0 (start from rest), be deterministic,
/// and never panic on any drive signal.
pub trait Dut: Send + Sync {
    /// Drive (full scale) at `sample_rate_hz` → output as the input converter sees it
    /// (full scale), before noise and latency.
    fn respond(&self, drive: &[f64], sample_rate_hz: u32) -> Vec<f64>;

    /// [`Dut::respond`] plus problems that make the capture a retest (a model that could
    /// not be solved, say); the rig copies them into [`Capture::faults`]. The default
    /// reports none.
    fn respond_with_faults(&self, drive: &[f64], sample_rate_hz: u32) -> (Vec<f64>, Vec<String>) {
        (self.respond(drive, sample_rate_hz), Vec::new())
    }
}

/// Drive-monitor input: volts peak per full scale (invented: a line input reaching full
/// scale at 1 V peak, so the default 0.707 V drive cap sits at −3 dBFS on it).
pub const MONITOR_V_PER_FS: f64 = 1.0;

/// Default latency of the simulated converters, samples (an invented, typical-looking
/// round trip).
pub const DEFAULT_LATENCY_SAMPLES: usize = 96;
/// Default converter noise, dBFS rms (Gaussian, white).
pub const DEFAULT_NOISE_RMS_DBFS: f64 = -96.0;
/// Half-width of the uniform gain spread of nominal units, dB.
pub const GAIN_SPREAD_DB: f64 = 0.4;
/// Half-width of the uniform spread of the main resonance frequency, fraction (±2 %).
pub const RESONANCE_SPREAD: f64 = 0.02;
/// Half-width of the uniform spread of a2 and a3, fraction (±10 %).
pub const NONLINEARITY_SPREAD: f64 = 0.10;

/// A named manufacturing defect of the simulated population (invented demo magnitudes; see
/// [`EarphoneParams::with_defect`] for the behavioural rig and
/// [`PhysicalParams::with_defect`] for the physical one).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Defect {
    /// Drive inverted: the response has the opposite sign.
    ReversedPolarity,
    /// The earpiece makes no sound; only converter noise is captured.
    DeadChannel,
    /// Sensitivity 6 dB low.
    LowSensitivity,
    /// Main resonance moved down 25 %.
    ResonanceShift,
    /// 30 dB too loud, so the input converter clips.
    Clipping,
    /// Distortion about 10 % THD at the sweep level.
    HeavyDistortion,
    /// The earpiece does not seal on the fixture: low frequencies drop.
    SealLeak,
    /// The outlet damper is clogged (resistance ×10).
    BlockedDamper,
    /// Force factor 30 % low.
    WeakMotor,
    /// The voice coil rubs in the gap at large excursion (impulsive distortion).
    Rub,
    /// 30 dB more sensitive than its design and than the plan declares, with no other
    /// change (a far more efficient driver fitted by mistake): what the hearing-safety pilot
    /// and guard exist for.
    TooLoud,
}

impl Defect {
    /// Every defect, in a fixed order.
    pub const ALL: [Defect; 11] = [
        Defect::ReversedPolarity,
        Defect::DeadChannel,
        Defect::LowSensitivity,
        Defect::ResonanceShift,
        Defect::Clipping,
        Defect::HeavyDistortion,
        Defect::SealLeak,
        Defect::BlockedDamper,
        Defect::WeakMotor,
        Defect::Rub,
        Defect::TooLoud,
    ];

    /// The kebab-case name used on the command line and in records.
    pub fn name(self) -> &'static str {
        match self {
            Defect::ReversedPolarity => "reversed-polarity",
            Defect::DeadChannel => "dead-channel",
            Defect::LowSensitivity => "low-sensitivity",
            Defect::ResonanceShift => "resonance-shift",
            Defect::Clipping => "clipping",
            Defect::HeavyDistortion => "heavy-distortion",
            Defect::SealLeak => "seal-leak",
            Defect::BlockedDamper => "blocked-damper",
            Defect::WeakMotor => "weak-motor",
            Defect::Rub => "rub",
            Defect::TooLoud => "too-loud",
        }
    }
}

impl fmt::Display for Defect {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A unit kind or defect name that is not known.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("expected {expected}, found \"{found}\"{hint}")]
pub struct UnknownUnitKind {
    /// The list of accepted names.
    pub expected: String,
    /// The name given.
    pub found: String,
    /// ` (did you mean "…"?)` or empty.
    pub hint: String,
}

fn unknown(found: &str, accepted: &[&str]) -> UnknownUnitKind {
    let best = accepted
        .iter()
        .map(|a| (strsim::levenshtein(found, a), *a))
        .min();
    let hint = match best {
        Some((d, a)) if d <= 3 => format!(" (did you mean \"{a}\"?)"),
        _ => String::new(),
    };
    UnknownUnitKind {
        expected: format!("one of {}", accepted.join(", ")),
        found: found.to_string(),
        hint,
    }
}

impl FromStr for Defect {
    type Err = UnknownUnitKind;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Defect::ALL
            .into_iter()
            .find(|d| d.name() == s)
            .ok_or_else(|| {
                let names: Vec<&str> = Defect::ALL.iter().map(|d| d.name()).collect();
                unknown(s, &names)
            })
    }
}

/// What kind of unit the rig simulates.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum UnitKind {
    /// A good unit (with manufacturing spread).
    Nominal,
    /// The design itself: the nominal parameters with no manufacturing spread, on every
    /// channel (the unit a source model in a plan describes exactly).
    Design,
    /// A unit with one defect on [`SimUnit::defect_channel`].
    Defect(Defect),
}

impl fmt::Display for UnitKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            UnitKind::Nominal => f.write_str("nominal"),
            UnitKind::Design => f.write_str("design"),
            UnitKind::Defect(d) => d.fmt(f),
        }
    }
}

impl FromStr for UnitKind {
    type Err = UnknownUnitKind;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "nominal" => return Ok(UnitKind::Nominal),
            "design" => return Ok(UnitKind::Design),
            _ => {}
        }
        Defect::from_str(s).map(UnitKind::Defect).map_err(|_| {
            let mut names = vec!["nominal", "design"];
            names.extend(Defect::ALL.iter().map(|d| d.name()));
            unknown(s, &names)
        })
    }
}

/// One member of the simulated population.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SimUnit {
    /// Serial number (`E2-000123` in the demo); picks the unit's spread.
    pub serial: String,
    /// Nominal, or which defect.
    pub kind: UnitKind,
    /// Plan channel index (index into the rig's routes) that carries the defect.
    pub defect_channel: usize,
}

/// A ChaCha20 generator seeded by SHA-256 over a purpose tag and the given parts, so that
/// seeds are stable across platforms and releases (unlike `std`'s hashers).
fn seeded_rng(purpose: &str, seed: u64, serial: &str, index: u64) -> ChaCha20Rng {
    let mut h = Sha256::new();
    h.update(b"tragus-simulated-rig/");
    h.update(purpose.as_bytes());
    h.update(seed.to_le_bytes());
    h.update((serial.len() as u64).to_le_bytes());
    h.update(serial.as_bytes());
    h.update(index.to_le_bytes());
    ChaCha20Rng::from_seed(h.finalize().into())
}

/// Parameters of channel `channel` of unit `serial` in population `seed`, before defects:
/// nominal values with uniform spread (gain ±0.4 dB, main resonance ±2 %, a2 and a3 ±10 %).
pub fn unit_params(seed: u64, serial: &str, channel: usize) -> EarphoneParams {
    let mut rng = seeded_rng("unit", seed, serial, channel as u64);
    let mut p = EarphoneParams::NOMINAL;
    p.gain_db += rng.random_range(-GAIN_SPREAD_DB..=GAIN_SPREAD_DB);
    p.resonance_hz *= 1.0 + rng.random_range(-RESONANCE_SPREAD..=RESONANCE_SPREAD);
    p.nonlinearity.a2 *= 1.0 + rng.random_range(-NONLINEARITY_SPREAD..=NONLINEARITY_SPREAD);
    p.nonlinearity.a3 *= 1.0 + rng.random_range(-NONLINEARITY_SPREAD..=NONLINEARITY_SPREAD);
    p
}

/// The simulated rig: devices under test on routes, plus latency, noise and clipping.
pub struct SimulatedRig {
    /// (output channel, input channel) per plan channel.
    routes: Vec<(usize, usize)>,
    /// One device per route.
    duts: Vec<Box<dyn Dut>>,
    /// Behavioural parameters per route (empty when built from custom devices or v2).
    params: Vec<EarphoneParams>,
    /// Physical parameters per route (empty unless built by [`SimulatedRig::physical`]).
    physical: Vec<PhysicalParams>,
    /// The simulated unit (None for custom devices).
    unit: Option<SimUnit>,
    seed: u64,
    /// What seeds the noise besides `seed`: the serial, or a fixed tag.
    noise_tag: String,
    latency_samples: usize,
    noise_rms_dbfs: Option<f64>,
    n_runs: u64,
    /// The run-time guard, when armed.
    guard: Option<Guard>,
    /// The outputs as last played (after any guard fade), for inspection.
    last_played: Vec<Vec<f32>>,
    /// Drive monitors: (output, input), both 0-based; each input carries its output's
    /// amplifier voltage on a [`MONITOR_V_PER_FS`] scale.
    monitors: Vec<(usize, usize)>,
    /// The amplifier's gain error, linear (1 = as calibrated): a fault injection that
    /// scales every output's drive, what the units hear and what the monitors see alike.
    amplifier_gain: f64,
    /// A gain change during a run: from this many output samples after the rig was built
    /// (counted over every play), the amplifier's gain error is this (linear).
    amplifier_change: Option<(u64, f64)>,
    /// Output samples played so far, over every play (the clock of `amplifier_change`).
    clock_samples: u64,
}

impl SimulatedRig {
    /// A rig measuring `unit` of population `seed`: one [`BehaviouralEarphone`] per route
    /// (output, input), each with its own spread; the defect, if any, on
    /// `unit.defect_channel`. Latency 96 samples, noise −96 dBFS rms.
    pub fn new(routes: Vec<(usize, usize)>, seed: u64, unit: SimUnit) -> Self {
        let params: Vec<EarphoneParams> = (0..routes.len())
            .map(|c| {
                let p = match unit.kind {
                    UnitKind::Design => EarphoneParams::NOMINAL,
                    _ => unit_params(seed, &unit.serial, c),
                };
                match unit.kind {
                    UnitKind::Defect(d) if c == unit.defect_channel => p.with_defect(d),
                    _ => p,
                }
            })
            .collect();
        let duts = params
            .iter()
            .map(|p| Box::new(BehaviouralEarphone::new(*p)) as Box<dyn Dut>)
            .collect();
        SimulatedRig {
            routes,
            duts,
            params,
            physical: Vec::new(),
            noise_tag: unit.serial.clone(),
            unit: Some(unit),
            seed,
            latency_samples: DEFAULT_LATENCY_SAMPLES,
            noise_rms_dbfs: Some(DEFAULT_NOISE_RMS_DBFS),
            n_runs: 0,
            guard: None,
            last_played: Vec::new(),
            monitors: Vec::new(),
            amplifier_gain: 1.0,
            amplifier_change: None,
            clock_samples: 0,
        }
    }

    /// A rig around given devices, one per route (for tests of the analysis with a known
    /// system). Same defaults: latency 96 samples, noise −96 dBFS rms seeded by `seed`.
    ///
    /// # Panics
    /// When `duts` and `routes` differ in length (a programming error).
    pub fn with_duts(routes: Vec<(usize, usize)>, duts: Vec<Box<dyn Dut>>, seed: u64) -> Self {
        assert_eq!(routes.len(), duts.len(), "one device per route");
        SimulatedRig {
            routes,
            duts,
            params: Vec::new(),
            physical: Vec::new(),
            unit: None,
            seed,
            noise_tag: "custom-devices".into(),
            latency_samples: DEFAULT_LATENCY_SAMPLES,
            noise_rms_dbfs: Some(DEFAULT_NOISE_RMS_DBFS),
            n_runs: 0,
            guard: None,
            last_played: Vec::new(),
            monitors: Vec::new(),
            amplifier_gain: 1.0,
            amplifier_change: None,
            clock_samples: 0,
        }
    }

    /// Wire drive monitors: each `(output, input)` (0-based) records that output's
    /// amplifier voltage at [`MONITOR_V_PER_FS`] volts per full scale, through the same
    /// converter latency, noise and clipping as every input.
    pub fn with_drive_monitors(mut self, monitors: Vec<(usize, usize)>) -> Self {
        self.monitors = monitors;
        self
    }

    /// Inject an amplifier gain fault: every output's drive is `gain_db` louder than the
    /// calibration ([`DRIVE_V_PER_FS`]) says (an amplifier turned up after calibration).
    pub fn with_amplifier_gain_db(mut self, gain_db: f64) -> Self {
        self.amplifier_gain = 10f64.powf(gain_db / 20.0);
        self
    }

    /// Inject an amplifier gain change: `after_samples` output samples after the rig was
    /// built (counted over every play, pilot and sweep alike), the gain error becomes
    /// `gain_db` (a knob turned, or an intermittent fault, while a plan runs).
    pub fn with_amplifier_change(mut self, after_samples: u64, gain_db: f64) -> Self {
        self.amplifier_change = Some((after_samples, 10f64.powf(gain_db / 20.0)));
        self
    }

    /// The unit reseated `reseat` times before this test (0: its first seating): the
    /// converter noise of a reseated unit is drawn afresh, as an operator's retest after
    /// reseating a unit meets new noise; the unit itself is the same.
    pub fn with_reseat(mut self, reseat: u32) -> Self {
        if let (Some(unit), true) = (&self.unit, reseat > 0) {
            self.noise_tag = format!("{}#reseat-{reseat}", unit.serial);
        }
        self
    }

    /// Set the latency, samples.
    pub fn with_latency_samples(mut self, latency_samples: usize) -> Self {
        self.latency_samples = latency_samples;
        self
    }

    /// Set the converter noise, dBFS rms; `None` for none at all.
    pub fn with_noise_rms_dbfs(mut self, noise_rms_dbfs: Option<f64>) -> Self {
        self.noise_rms_dbfs = noise_rms_dbfs;
        self
    }

    /// The latency, samples.
    pub fn latency_samples(&self) -> usize {
        self.latency_samples
    }

    /// The converter noise, dBFS rms (`None`: noiseless).
    pub fn noise_rms_dbfs(&self) -> Option<f64> {
        self.noise_rms_dbfs
    }

    /// The simulated unit, when the rig was built with [`SimulatedRig::new`].
    pub fn unit(&self) -> Option<&SimUnit> {
        self.unit.as_ref()
    }

    /// The behavioural parameters per route (spread and defect applied); empty for a rig
    /// built with [`SimulatedRig::with_duts`] or [`SimulatedRig::physical`].
    pub fn earphone_params(&self) -> &[EarphoneParams] {
        &self.params
    }

    /// A rig measuring `unit` of population `seed` with the physical earphone (v2): each
    /// route's earpiece is the nominal demo driver with its own seeded spread
    /// ([`physical_unit_params`]), seated in `fixture` and read at its microphone tap
    /// `tap`; the defect, if any, on `unit.defect_channel`. Latency 96 samples, noise
    /// −96 dBFS rms. To measure many units in one fixture, build a [`PhysicalPopulation`]
    /// once and call [`PhysicalPopulation::rig`], which shares the per-frequency tables.
    pub fn physical(
        routes: Vec<(usize, usize)>,
        seed: u64,
        unit: SimUnit,
        fixture: crate::acoustics::network::Coupler,
        tap: &str,
    ) -> Result<Self, PhysicalRigError> {
        Ok(PhysicalPopulation::new(fixture, tap)?.rig(routes, seed, unit))
    }

    /// A v2 rig from per-route physical earpieces already built (see
    /// [`PhysicalPopulation::rig`]).
    pub(crate) fn from_physical(
        routes: Vec<(usize, usize)>,
        seed: u64,
        unit: SimUnit,
        earpieces: Vec<PhysicalEarphone>,
    ) -> Self {
        let physical = earpieces.iter().map(|e| e.params.clone()).collect();
        let duts = earpieces
            .into_iter()
            .map(|e| Box::new(e) as Box<dyn Dut>)
            .collect();
        SimulatedRig {
            routes,
            duts,
            params: Vec::new(),
            physical,
            noise_tag: unit.serial.clone(),
            unit: Some(unit),
            seed,
            latency_samples: DEFAULT_LATENCY_SAMPLES,
            noise_rms_dbfs: Some(DEFAULT_NOISE_RMS_DBFS),
            n_runs: 0,
            guard: None,
            last_played: Vec::new(),
            monitors: Vec::new(),
            amplifier_gain: 1.0,
            amplifier_change: None,
            clock_samples: 0,
        }
    }

    /// The physical parameters per route (spread and defect applied); empty unless built
    /// with [`SimulatedRig::physical`] or [`PhysicalPopulation::rig`].
    pub fn physical_params(&self) -> &[PhysicalParams] {
        &self.physical
    }

    fn bad(message: String) -> RigError {
        RigError::BadInput {
            path: "simulated rig".into(),
            message,
        }
    }
}

impl Rig for SimulatedRig {
    fn name(&self) -> &str {
        "simulated"
    }

    fn play_and_capture(
        &mut self,
        stimulus: &Stimulus,
        n_inputs: usize,
    ) -> Result<Capture, RigError> {
        self.play_guarded(&stimulus.channels, stimulus.sample_rate_hz, n_inputs)
    }

    fn play_raw(
        &mut self,
        outputs: &[Vec<f32>],
        sample_rate_hz: u32,
        n_inputs: usize,
    ) -> Result<Capture, RigError> {
        self.play_guarded(outputs, sample_rate_hz, n_inputs)
    }

    fn arm_guard(&mut self, guard: Option<Guard>) {
        self.guard = guard;
    }
}

impl SimulatedRig {
    /// Output samples played so far over every play (the clock of
    /// [`SimulatedRig::with_amplifier_change`]).
    pub fn clock_samples(&self) -> u64 {
        self.clock_samples
    }

    /// The outputs as last played, after any fade the guard applied (one per output).
    pub fn last_played(&self) -> &[Vec<f32>] {
        &self.last_played
    }

    /// Play through the guard when one is armed ([`Guard::play_offline`]).
    fn play_guarded(
        &mut self,
        outputs: &[Vec<f32>],
        fs: u32,
        n_inputs: usize,
    ) -> Result<Capture, RigError> {
        let (capture, played) = match self.guard.clone() {
            Some(g) => g.play_offline(outputs, |o| self.simulate(o, fs, n_inputs))?,
            None => (self.simulate(outputs, fs, n_inputs)?, outputs.to_vec()),
        };
        self.clock_samples += played.iter().map(Vec::len).max().unwrap_or(0) as u64;
        self.last_played = played;
        Ok(capture)
    }

    /// The unit's response to `outputs`, as the inputs capture it.
    fn simulate(
        &mut self,
        outputs: &[Vec<f32>],
        fs: u32,
        n_inputs: usize,
    ) -> Result<Capture, RigError> {
        if let Some(unit) = &self.unit {
            if matches!(unit.kind, UnitKind::Defect(_)) && unit.defect_channel >= self.routes.len()
            {
                return Err(Self::bad(format!(
                    "expected a defect channel below {} (the plan's channel count), found {}",
                    self.routes.len(),
                    unit.defect_channel
                )));
            }
        }
        let n_outputs = outputs.len();
        if let Some(&(o, _)) = self.routes.iter().find(|(o, _)| *o >= n_outputs) {
            return Err(Self::bad(format!(
                "expected output channels below {n_outputs} (the stimulus has {n_outputs}), \
                 found a route from output {o}"
            )));
        }
        let n = outputs.iter().map(Vec::len).min().unwrap_or(0);
        if let Some(&(o, _)) = self.monitors.iter().find(|(o, _)| *o >= n_outputs) {
            return Err(Self::bad(format!(
                "expected output channels below {n_outputs}, found a drive monitor of output {o}"
            )));
        }
        let n_channels = self
            .routes
            .iter()
            .chain(&self.monitors)
            .map(|&(_, i)| i + 1)
            .max()
            .unwrap_or(0)
            .max(n_inputs);
        let mut acoustic = vec![vec![0.0f64; n]; n_channels];
        let mut faults = Vec::new();
        // The amplifier's gain error at each sample of this play.
        let amp: Vec<f64> = (0..n as u64)
            .map(|k| match self.amplifier_change {
                Some((at, g)) if self.clock_samples + k >= at => g,
                _ => self.amplifier_gain,
            })
            .collect();
        for &(o, i) in &self.monitors {
            let to_input = DRIVE_V_PER_FS / MONITOR_V_PER_FS;
            for (k, (&v, a)) in outputs[o][..n.saturating_sub(self.latency_samples)]
                .iter()
                .zip(&amp)
                .enumerate()
            {
                acoustic[i][k + self.latency_samples] += f64::from(v) * a * to_input;
            }
        }
        for (c, (&(o, i), dut)) in self.routes.iter().zip(&self.duts).enumerate() {
            let drive: Vec<f64> = outputs[o][..n]
                .iter()
                .zip(&amp)
                .map(|(&v, a)| f64::from(v) * a)
                .collect();
            let (out, dut_faults) = dut.respond_with_faults(&drive, fs);
            faults.extend(
                dut_faults
                    .into_iter()
                    .map(|f| format!("channel {c} (input {}): {f}", i + 1)),
            );
            // Latency: capture sample k holds the device's output at k − latency.
            for (k, v) in out
                .iter()
                .take(n.saturating_sub(self.latency_samples))
                .enumerate()
            {
                acoustic[i][k + self.latency_samples] += v;
            }
        }
        let mut noise_rng = seeded_rng("noise", self.seed, &self.noise_tag, self.n_runs);
        self.n_runs += 1;
        let sigma = self.noise_rms_dbfs.map(|db| 10f64.powf(db / 20.0));
        let channels = acoustic
            .into_iter()
            .map(|ch| {
                ch.into_iter()
                    .map(|v| {
                        let noise = match sigma {
                            Some(s) => s * noise_rng.sample::<f64, _>(StandardNormal),
                            None => 0.0,
                        };
                        // The input converter clips at full scale (and never passes NaN).
                        let s = v + noise;
                        if s.is_nan() {
                            0.0
                        } else {
                            s.clamp(-1.0, 1.0) as f32
                        }
                    })
                    .collect()
            })
            .collect();
        Ok(Capture {
            sample_rate_hz: fs,
            channels,
            xruns: 0,
            faults,
            device_latency_samples: None,
            guard_trip: None,
        })
    }
}
