//! The engine: one unit end to end on a bench, as a library function.
//!
//! A [`Bench`] is set up once per plan on a station ([`Bench::new`]: plan, station file,
//! fixture, calibration policy, hearing-safety set-up, store); then each unit is tested
//! ([`Bench::test_unit`]: pilot, guarded sweep, analysis, correction, checks, listening
//! steps, verdict) into a [`UnitOutcome`] — the result, the record to append and the typed
//! safety events — which [`Bench::record`] appends to the store in one transaction.
//! `tragus run` (one unit) and `tragus station` (the operator loop) both go through here,
//! so they test and record a unit in exactly the same way; nothing here prints or exits.

pub mod archive;
pub mod derive;
mod error;
pub mod history;
pub mod line;
mod prepare;
pub mod reanalyze;
mod record;
pub mod replay;
pub mod tally;

pub use error::{BenchError, Cause, ErrorKind};
pub use prepare::{load, load_coupler, load_station, Prepared};

use crate::calibration::policy::{self, CalibrationSource};
use crate::rig::simulated::{PhysicalPopulation, SimUnit, SimulatedRig, UnitKind};
use crate::rig::Rig;
use crate::safety::event::SafetyEvent;
use crate::safety::listening_steps::{run_listening_steps, Heard, ListeningBench};
use crate::safety::setup::{BenchPaths, SafeOutcome, SafetySetup};
use crate::station::{Mode, RigKind, Station, StationInfo};
use crate::store::{NewRecord, StoredRecord};
use std::path::{Path, PathBuf};

/// Default store directory when neither the options nor the station name one.
pub const DEFAULT_STORE: &str = "tragus-data";
/// Default station id when no station file names one.
pub const DEFAULT_STATION_ID: &str = "bench-1";

/// How a bench is set up: the caller's choices, before anything is loaded.
pub struct BenchOptions<'a> {
    /// The plan file.
    pub plan: &'a Path,
    /// The station file, loaded.
    pub station: Option<&'a Station>,
    /// A fixture model (wins over the station's fixture).
    pub fixture: Option<&'a Path>,
    /// The rig (wins over the station's and the plan's rig).
    pub rig: Option<RigKind>,
    /// The store directory (wins over the station's store).
    pub store: Option<PathBuf>,
    /// Station id when there is no station file.
    pub station_id: Option<String>,
    /// The operator (default: the `USER` environment variable).
    pub operator: Option<String>,
    /// A calibration file named explicitly (wins over the station's calibration file).
    pub calibration: Option<&'a Path>,
    /// Outside production (the station's `mode: engineering` means the same).
    pub non_production: bool,
    /// Sound-card settings (the station's, with the caller's overrides applied).
    pub soundcard: crate::rig::SoundcardSpec,
    /// Record a hearing-safety refusal of the plan in the store (a run; not a validation,
    /// which only checks).
    pub record_refusals: bool,
}

/// Everything that stays the same from unit to unit on one bench.
pub struct Bench {
    /// The plan and everything built from it once.
    pub prep: Prepared,
    /// The exact inputs (plan, station file, calibration file), archived with each record.
    pub inputs: archive::Inputs,
    /// The station's signing key (the station file's `signing_key`), signing every row.
    pub signer: Option<crate::keys::StationKey>,
    /// The store directory.
    pub store: PathBuf,
    /// The station's identity, recorded with every result.
    pub station: StationInfo,
    /// The operator at the station.
    pub operator: String,
    /// Simulated rig only: take as long as the sweep would take to play on a real sound
    /// card (operator training, and a real window for Ctrl-C during a unit in tests).
    pub pace_realtime: bool,
    seed: u64,
    rig: RigKind,
    /// The simulated population, built once per bench (simulated rig only; `None` for the
    /// behavioural rig v1): its fixture's per-frequency tables are made at the first unit
    /// and shared by every later one.
    population: Option<PhysicalPopulation>,
    // Read only by the sound-card rig, which a build without the feature does not have.
    #[cfg_attr(not(feature = "soundcard"), allow(dead_code))]
    soundcard: crate::rig::SoundcardSpec,
    /// Hearing safety on this bench for this plan (caps, gains, budget).
    pub safety: SafetySetup,
    /// How many retests a unit gets here: the plan's and the station's `max_retests`.
    pub retest_rule: history::RetestRule,
}

/// What the simulated rig is told to put in the fixture.
#[derive(Debug, Clone)]
pub struct SimChoice {
    /// The kind of unit (nominal or a named defect).
    pub kind: UnitKind,
    /// Plan channel index that carries the defect.
    pub defect_channel: usize,
    /// The name as the user wrote it (recorded).
    pub label: String,
    /// Amplifier gain fault, dB (0 = as calibrated).
    pub amplifier_db: f64,
    /// How many times the unit was reseated before this test (0: first seating); a
    /// reseated unit meets fresh converter noise ([`SimulatedRig::with_reseat`]).
    pub reseat: u32,
}

/// One unit tested, not yet recorded: what the store is to hold.
pub struct UnitOutcome {
    /// The result, verdict decided.
    pub result: crate::result::UnitResult,
    /// The record to append.
    pub record: NewRecord,
    /// The raw capture, as a 32-bit float WAV file.
    pub capture_wav: Vec<u8>,
    /// The unit's sweep safety events (scale-down, abandon, guard trip), typed.
    pub events: Vec<SafetyEvent>,
    /// Its listening steps as heard, with their safety events.
    pub heard: Vec<Heard>,
}

/// One tested and recorded unit.
pub struct Tested {
    /// The result, as recorded.
    pub result: crate::result::UnitResult,
    /// The record as stored (id, hashes).
    pub stored: StoredRecord,
}

/// Why a unit has no record.
#[derive(Debug)]
pub enum UnitStop {
    /// The operator abandoned the unit before it was recorded.
    Abandoned,
    /// An error.
    Error(BenchError),
}

impl From<BenchError> for UnitStop {
    fn from(e: BenchError) -> Self {
        UnitStop::Error(e)
    }
}

impl Bench {
    /// Load the plan on the station and decide rig, calibration, hearing safety, store,
    /// station id and operator. A plan hearing safety refuses is recorded in the store
    /// (when `record_refusals`) and returned as [`BenchError::Refused`].
    pub fn new(o: BenchOptions) -> Result<Bench, BenchError> {
        let (prep, plan_reads) =
            crate::config::recording_reads(|| Prepared::on_station(o.plan, o.station, o.fixture));
        let mut prep = prep?;
        let mut inputs = archive::Inputs::default();
        inputs.add_plan(o.plan, &plan_reads, o.fixture)?;
        if let Some(st) = o.station {
            inputs.add_station(st)?;
        }
        let rig = o
            .rig
            .or(o.station.map(|s| s.rig))
            .unwrap_or(prep.plan.rig.kind());
        let calibration = match (
            o.calibration,
            o.station.and_then(|s| s.calibration.as_deref()),
        ) {
            (Some(p), _) => CalibrationSource::Option(p),
            (None, Some(p)) => CalibrationSource::Station(p),
            (None, None) => CalibrationSource::None,
        };
        let non_production =
            o.non_production || o.station.is_some_and(|s| s.mode == Mode::Engineering);
        let calibration_path = match calibration {
            CalibrationSource::Option(p) | CalibrationSource::Station(p) => Some(p.to_path_buf()),
            CalibrationSource::None => None,
        };
        let (decision, calibration_reads) = crate::config::recording_reads(|| {
            policy::decide(
                &prep.plan,
                calibration,
                non_production,
                rig,
                crate::calibration::Calibration::today_utc(),
            )
        });
        let decision = decision?;
        if let (Some(path), Some(_)) = (&calibration_path, &decision.info.sha256) {
            inputs.add_calibration(path, &calibration_reads)?;
        }
        prep.calibration = decision.info;
        prep.calibration_offsets_db = decision.offsets_db;
        let cal = decision.for_safety;
        let caps = o.station.map(|s| s.caps).unwrap_or_default();
        let store = o
            .store
            .clone()
            .or_else(|| o.station.and_then(|s| s.store.clone()))
            .unwrap_or_else(|| PathBuf::from(DEFAULT_STORE));
        let station = match o.station {
            Some(s) => s.info(),
            None => StationInfo {
                id: o
                    .station_id
                    .clone()
                    .unwrap_or_else(|| DEFAULT_STATION_ID.to_string()),
                mode: Mode::Production,
                sha256: None,
            },
        };
        let operator = o
            .operator
            .clone()
            .or_else(|| std::env::var("USER").ok())
            .unwrap_or_else(|| "unknown".into());
        let monitors = o.station.map_or(&[][..], |s| &s.drive_monitors[..]);
        let correction_grid_db = (0..prep.plan.channels.len())
            .map(|i| prep.corrections.channel(i).map(|c| c.grid_gain_db()))
            .collect();
        let setup = SafetySetup::for_plan(BenchPaths {
            plan: &prep.plan,
            grid_hz: prep.analyzer.grid_hz(),
            correction_grid_db,
            caps,
            calibration: cal.as_ref(),
            monitors,
            rig,
            non_production,
        });
        let safety = match setup {
            Ok(s) => s,
            Err(refusal) => {
                if o.record_refusals {
                    record::record_refusal(&store, &station.id, &operator, &prep.plan, &refusal);
                }
                return Err(BenchError::Refused(refusal));
            }
        };
        // Refused before anything is tested, rather than at the first unit.
        #[cfg(not(feature = "soundcard"))]
        if rig == RigKind::Soundcard {
            return Err(BenchError::bad_input(format!(
                "--rig soundcard: {}",
                crate::rig::SOUNDCARD_NOT_BUILT
            )));
        }
        let signer = match o.station.and_then(|s| s.signing_key.as_deref()) {
            None => None,
            Some(path) => {
                let key = crate::keys::StationKey::load(path)
                    .map_err(|e| BenchError::BadInput(Box::new(e)))?;
                // A key of another station would sign rows its keyring entry does not cover.
                if key.station() != station.id {
                    return Err(BenchError::bad_input(format!(
                        "{}: expected a key of station `{}`, found one of station `{}`",
                        path.display(),
                        station.id,
                        key.station()
                    )));
                }
                Some(key)
            }
        };
        let seed = prep.plan.rig.seed();
        let retest_rule =
            history::RetestRule::of(prep.plan.max_retests, o.station.and_then(|s| s.max_retests));
        let population = match rig {
            RigKind::Simulated => prepare::simulated_population(&prep.plan, o.station, o.fixture)?,
            RigKind::Soundcard => None,
        };
        Ok(Bench {
            prep,
            inputs,
            signer,
            store,
            station,
            operator,
            pace_realtime: false,
            seed,
            rig,
            population,
            soundcard: o.soundcard,
            safety,
            retest_rule,
        })
    }

    /// The earlier records of `serial` in this bench's store (any station, any day), oldest
    /// first: what the operator is shown before the unit is tested, and what its retest limit
    /// is counted from ([`history`]).
    pub fn history(&self, serial: &str) -> Result<history::UnitHistory, BenchError> {
        history::UnitHistory::read(&self.store, serial)
    }

    /// True when the store does not exist yet (a new station): the caller shows the
    /// cautions ([`crate::safety::CAUTIONS`]) once, before anything plays.
    pub fn is_new_store(&self) -> bool {
        !self.store.join(crate::store::DB_FILE).exists()
    }

    /// The rig this bench plays on.
    pub fn rig_kind(&self) -> RigKind {
        self.rig
    }

    /// Parse a simulated unit's kind (`unit`) and the plan channel that carries its defect.
    pub fn sim_choice(&self, unit: &str, channel: Option<&str>) -> Result<SimChoice, BenchError> {
        let kind = unit
            .parse::<UnitKind>()
            .map_err(|e| BenchError::bad_input(format!("--sim-unit: {e}")))?;
        let plan = &self.prep.plan;
        let defect_channel = match channel {
            None => 0,
            Some(name) => plan.channel_index(name).ok_or_else(|| {
                BenchError::bad_input(format!(
                    "--sim-channel: expected one of the plan's channels ({}), found `{name}`",
                    plan.channels
                        .iter()
                        .map(|c| c.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                ))
            })?,
        };
        Ok(SimChoice {
            kind,
            defect_channel,
            label: unit.to_string(),
            amplifier_db: 0.0,
            reseat: 0,
        })
    }

    /// The seed of the simulated population (the plan's `rig.seed` unless set).
    pub fn population_seed(&self) -> u64 {
        self.seed
    }

    /// Simulate another population (another draw of units and noise) than the plan's seed.
    pub fn set_population_seed(&mut self, seed: u64) {
        self.seed = seed;
    }

    /// The simulated population this bench tests (`None`: sound card, or the behavioural
    /// rig v1 when no fixture model is known).
    pub fn population(&self) -> Option<&PhysicalPopulation> {
        self.population.as_ref()
    }

    /// Test another bench's population (a clone of it, sharing its fixture tables) in place
    /// of this bench's own: benches of one line make the tables once.
    pub fn share_population(&mut self, population: Option<PhysicalPopulation>) {
        if population.is_some() {
            self.population = population;
        }
    }

    /// Expected time one unit's sweep plays, s (for a progress indicator).
    pub fn stimulus_duration_s(&self) -> f64 {
        let s = &self.prep.stimulus;
        s.n_samples() as f64 / f64::from(s.sample_rate_hz)
    }

    fn make_rig(&self, serial: &str, sim: &SimChoice) -> Result<Box<dyn Rig>, BenchError> {
        if self.rig == RigKind::Soundcard {
            return self.soundcard_rig();
        }
        let routes = self
            .prep
            .plan
            .channels
            .iter()
            .map(|c| (c.output, c.input))
            .collect();
        let unit = SimUnit {
            serial: serial.to_string(),
            kind: sim.kind,
            defect_channel: sim.defect_channel,
        };
        let monitors: Vec<(usize, usize)> = self
            .safety
            .monitors
            .iter()
            .map(|m| (m.output, m.input))
            .collect();
        let rig = match &self.population {
            Some(pop) => pop.rig(routes, self.seed, unit),
            // No fixture model known: the behavioural unit (rig v1).
            None => SimulatedRig::new(routes, self.seed, unit),
        };
        Ok(Box::new(
            rig.with_drive_monitors(monitors)
                .with_amplifier_gain_db(sim.amplifier_db)
                .with_reseat(sim.reseat),
        ))
    }

    /// Test one unit: pilot, guarded sweep, analysis, correction, checks, then (for a unit
    /// whose measured checks passed) the listening steps, each answered by `listen` (pass,
    /// fail, or `None` for no answer). Nothing is recorded yet: see [`Bench::record`].
    pub fn test_unit(
        &mut self,
        serial: &str,
        sim: &SimChoice,
        listen: &dyn Fn(&str) -> Option<bool>,
    ) -> Result<UnitOutcome, BenchError> {
        // The one serial rule (also checked by the command line before anything loads).
        crate::serial::check_serial(serial)
            .map_err(|e| BenchError::bad_input(format!("--serial: {e}")))?;
        let history = self.history(serial)?.note(&self.retest_rule);
        let mut rig = self.make_rig(serial, sim)?;
        tracing::info!(serial = %serial, rig = rig.name(), "playing the stimulus");
        let started = std::time::Instant::now();
        let outcome =
            self.safety
                .run(rig.as_mut(), &self.prep.stimulus, self.prep.plan.n_inputs())?;
        if self.pace_realtime {
            let play = std::time::Duration::from_secs_f64(self.stimulus_duration_s());
            std::thread::sleep(play.saturating_sub(started.elapsed()));
        }
        let simulated_unit = (self.rig == RigKind::Simulated).then(|| sim.label.clone());
        let mut playback = serde_json::json!({
            "abandoned": false,
            "calibration_offsets_db": self.prep.calibration_offsets_db,
            "drive_gain_db": null,
        });
        let (capture, mut result) = match outcome {
            SafeOutcome::Swept {
                capture,
                drive_gain_db,
                safety,
            } => {
                playback["drive_gain_db"] = serde_json::json!(drive_gain_db);
                let mut result = self.prep.judge_capture(
                    &capture,
                    serial,
                    rig.name(),
                    simulated_unit,
                    &drive_gain_db,
                )?;
                result.safety = Some(safety);
                (capture, result)
            }
            SafeOutcome::Abandoned {
                capture,
                reason,
                safety,
            } => {
                playback["abandoned"] = serde_json::json!(true);
                let mut result = self
                    .prep
                    .unjudged(serial, rig.name(), simulated_unit, reason);
                result.safety = Some(safety);
                (capture, result)
            }
        };
        result.station = Some(self.station.clone());
        result.device_latency_samples = capture.device_latency_samples;
        // The measured verdict (before any listening step), and the retest limit: a unit
        // retested too often is a FAIL and gets no listening step.
        result.verdict = prepare::decide_verdict(&self.prep.plan, &result, 0);
        history::apply(&mut result, &history);
        let (store, operator) = (self.store.clone(), self.operator.clone());
        let ledger = move |since: i64| -> Result<crate::safety::dose::ExposureLedger, String> {
            let exposures = crate::store::Store::open(&store)
                .and_then(|st| st.exposures_for(&operator, since))
                .map_err(|e| format!("cannot read the dose ledger: {e}"))?;
            crate::safety::dose::ExposureLedger::from_exposures(exposures)
                .map_err(|e| e.to_string())
        };
        let listening = run_listening_steps(
            &ListeningBench {
                plan: &self.prep.plan,
                safety: &self.safety,
                grid_hz: self.prep.analyzer.grid_hz(),
                n_outputs: self.prep.stimulus.channels.len(),
                operator: &self.operator,
                ledger: &ledger,
            },
            rig.as_mut(),
            &result.serial,
            result.verdict,
            &result.channels,
            listen,
        )?;
        let n_listening = listening.checks.len();
        result.checks.extend(listening.checks);
        if let Some(s) = &mut result.safety {
            s.events.extend(listening.notes);
        }
        result.verdict = prepare::decide_verdict(&self.prep.plan, &result, n_listening);
        history::apply(&mut result, &history);
        // Shown once by whoever reports the unit, kept in the store; the log has them only at
        // debug level, so that no message is printed twice.
        for e in result.safety.iter().flat_map(|s| &s.events) {
            tracing::debug!(serial = %result.serial, "hearing safety: {e}");
        }
        let events = result
            .safety
            .as_ref()
            .map(|s| s.audit_events.clone())
            .unwrap_or_default();
        let result_json = serde_json::to_string(&result)
            .map_err(|e| BenchError::retest(format!("cannot serialise the result: {e}")))?;
        let capture_wav = crate::wav::encode_wav_f32(capture.sample_rate_hz, &capture.channels)
            .map_err(|e| BenchError::retest(format!("cannot encode the raw capture: {e}")))?;
        let record = NewRecord {
            time_utc: result.time_utc.clone(),
            serial: result.serial.clone(),
            plan_id: result.plan.id.clone(),
            plan_revision: result.plan.revision,
            plan_sha256: result.plan.sha256.clone(),
            software_version: result.tool.version.clone(),
            station: self.station.id.clone(),
            operator: self.operator.clone(),
            rig: result.rig.clone(),
            verdict: result.verdict,
            result_json,
            calibration_mode: result.calibration.mode.clone(),
            calibration_sha256: result.calibration.sha256.clone(),
            build: result.tool.build.clone(),
            inputs_json: self.inputs.links_json(),
            playback_json: playback.to_string(),
        };
        Ok(UnitOutcome {
            result,
            record,
            capture_wav,
            events,
            heard: listening.heard,
        })
    }

    /// Append a tested unit to the store: its record and raw capture in one transaction
    /// (never half a record), then its safety events and listening exposures. A verdict the
    /// store does not hold was never given: a record that cannot be written is an error.
    pub fn record(&self, outcome: UnitOutcome) -> Result<Tested, BenchError> {
        record::record_unit(
            &self.store,
            &self.operator,
            &self.inputs,
            self.signer.as_ref(),
            outcome,
        )
    }

    /// Write a checkpoint of this bench's store, signed with the station key, into `dir`
    /// (created if needed) as `<station>-<UTC time>.checkpoint.json`, and return its path.
    /// The station loop writes one at the end of each session (a shift); handed off the
    /// station, it lets `verify --checkpoint` prove that no record up to it was removed,
    /// changed or reordered. Refused without a station key.
    pub fn write_checkpoint(&self, dir: &Path) -> Result<PathBuf, BenchError> {
        let key = self.signer.as_ref().ok_or_else(|| {
            BenchError::bad_input(
                "a checkpoint is signed with the station key: the station file names no \
                 `signing_key` (tragus keys new --station FILE makes one)",
            )
        })?;
        let not_written = |e: &dyn std::fmt::Display| {
            BenchError::retest(format!("the checkpoint was not written: {e}"))
        };
        let store = crate::store::Store::open(&self.store).map_err(|e| not_written(&e))?;
        let cp = store.checkpoint(key).map_err(|e| not_written(&e))?;
        std::fs::create_dir_all(dir).map_err(|e| not_written(&e))?;
        let stamp: String = cp
            .time_utc
            .chars()
            .filter(|c| c.is_ascii_alphanumeric())
            .collect();
        let path = dir.join(format!("{}-{stamp}.checkpoint.json", self.station.id));
        cp.write(&path).map_err(|e| not_written(&e))?;
        Ok(path)
    }

    /// Test one unit and record it. `abandon` is asked once more just before the record is
    /// written: when it says yes, nothing is written ([`UnitStop::Abandoned`]).
    pub fn test_and_record(
        &mut self,
        serial: &str,
        sim: &SimChoice,
        abandon: &dyn Fn() -> bool,
        listen: &dyn Fn(&str) -> Option<bool>,
    ) -> Result<Tested, UnitStop> {
        let outcome = self.test_unit(serial, sim, listen)?;
        if abandon() {
            return Err(UnitStop::Abandoned);
        }
        Ok(self.record(outcome)?)
    }

    /// The sound-card rig on this bench's devices, with the plan's routes (after the
    /// station's channel map). Opened per unit: a device lost between units is found at the
    /// next unit, not carried as a stale stream.
    #[cfg(feature = "soundcard")]
    fn soundcard_rig(&self) -> Result<Box<dyn Rig>, BenchError> {
        let plan = &self.prep.plan;
        let routes = plan.channels.iter().map(|c| (c.output, c.input)).collect();
        let mut spec = self.soundcard.clone();
        spec.extra_inputs = self.safety.monitors.iter().map(|m| m.input).collect();
        let rig = crate::rig::soundcard::SoundcardRig::open(spec, routes, plan.sample_rate_hz)?;
        Ok(Box::new(rig))
    }

    #[cfg(not(feature = "soundcard"))]
    fn soundcard_rig(&self) -> Result<Box<dyn Rig>, BenchError> {
        Err(BenchError::bad_input(format!(
            "--rig soundcard: {}",
            crate::rig::SOUNDCARD_NOT_BUILT
        )))
    }
}
