//! One unit end to end on a bench: rig → capture → judge → record. Shared by `tragus run`
//! (one unit) and `tragus station` (the operator loop), so both test and record a unit in
//! exactly the same way.

use super::{pipeline, Exit};
use crate::plan::RigSpec;
use crate::rig::simulated::{SimUnit, SimulatedRig, UnitKind};
use crate::rig::Rig;
use crate::safety::station::{SafeOutcome, SafePath, SafetySetup};
use crate::station::{Mode, Station, StationInfo, StationRig};
use crate::store::{NewRecord, Store, StoredRecord};
use anyhow::Context;
use std::path::{Path, PathBuf};

/// Which rig plays the plan.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum RigChoice {
    /// The simulated earphone and fixture (no hardware).
    Simulated,
    /// A sound card (needs a station configuration; not in this build yet).
    Soundcard,
}

/// Default store directory when neither `--store` nor the station names one.
pub(crate) const DEFAULT_STORE: &str = "tragus-data";
/// Default station id when no station file names one.
pub(crate) const DEFAULT_STATION_ID: &str = "bench-1";

/// How a bench is set up: the command's options, before anything is loaded.
pub(crate) struct BenchOptions<'a> {
    pub plan: &'a Path,
    pub station: Option<&'a Station>,
    /// `--fixture` (wins over the station's fixture).
    pub fixture: Option<&'a Path>,
    /// `--rig` (wins over the station's and the plan's rig).
    pub rig: Option<RigChoice>,
    /// `--store` (wins over the station's store).
    pub store: Option<PathBuf>,
    /// Station id when there is no station file.
    pub station_id: Option<String>,
    pub operator: Option<String>,
    /// `--calibration` (wins over the station's calibration file).
    pub calibration: Option<&'a Path>,
    /// `--non-production` (the station's `mode: engineering` means the same).
    pub non_production: bool,
    /// Sound-card settings (the station's, with command-line options applied).
    pub soundcard: crate::rig::SoundcardSpec,
    /// Record a hearing-safety refusal of the plan in the store (`run`, `station`; not
    /// `validate`, which only checks).
    pub record_refusals: bool,
}

/// Everything that stays the same from unit to unit on one bench.
pub(crate) struct Bench {
    pub prep: pipeline::Prepared,
    pub store: PathBuf,
    pub station: StationInfo,
    pub operator: String,
    /// Simulated rig only: take as long as the sweep would take to play on a real sound
    /// card (operator training, and a real window for Ctrl-C during a unit in tests).
    pub pace_realtime: bool,
    seed: u64,
    rig: RigChoice,
    // Read only by the sound-card rig, which a build without the feature does not have.
    #[cfg_attr(not(feature = "soundcard"), allow(dead_code))]
    soundcard: crate::rig::SoundcardSpec,
    /// Hearing safety on this bench for this plan (caps, gains, budget).
    pub safety: SafetySetup,
}

/// What the simulated rig is told to put in the fixture.
#[derive(Debug, Clone)]
pub(crate) struct SimChoice {
    pub kind: UnitKind,
    /// Plan channel index that carries the defect.
    pub defect_channel: usize,
    /// The name as the user wrote it (recorded).
    pub label: String,
    /// Amplifier gain fault, dB (0 = as calibrated).
    pub amplifier_db: f64,
}

/// One tested and recorded unit.
pub(crate) struct Tested {
    pub result: crate::result::UnitResult,
    pub stored: StoredRecord,
}

/// Why a unit has no record.
pub(crate) enum UnitStop {
    /// The operator abandoned the unit (second Ctrl-C) before it was recorded.
    Abandoned,
    /// An error, with its exit code.
    Error(Exit),
}

impl From<Exit> for UnitStop {
    fn from(e: Exit) -> Self {
        UnitStop::Error(e)
    }
}

impl Bench {
    /// Load the plan on the station and decide rig, store, station id and operator.
    pub fn new(o: BenchOptions) -> Result<Bench, Exit> {
        let mut prep = pipeline::prepare_on(o.plan, o.station, o.fixture)?;
        let rig = o.rig.unwrap_or(match o.station.map(|s| s.rig) {
            Some(StationRig::Simulated) => RigChoice::Simulated,
            Some(StationRig::Soundcard) => RigChoice::Soundcard,
            None => match prep.plan.rig {
                RigSpec::Simulated { .. } => RigChoice::Simulated,
                RigSpec::Soundcard => RigChoice::Soundcard,
            },
        });
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
        let cal = use_calibration(
            &mut prep,
            calibration,
            non_production,
            rig,
            crate::calibration::Calibration::today_utc(),
        )?;
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
        let safety = match safety_setup(&prep, caps, cal.as_ref(), monitors, rig, non_production) {
            Ok(s) => s,
            Err(refusal) => {
                if o.record_refusals {
                    record_refusal(&store, &station.id, &operator, &prep.plan, &refusal);
                }
                return Err(refusal.exit);
            }
        };
        // Refused before anything is tested, rather than at the first unit.
        #[cfg(not(feature = "soundcard"))]
        if rig == RigChoice::Soundcard {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "--rig soundcard: {}",
                super::devices::NOT_BUILT
            )));
        }
        let seed = match prep.plan.rig {
            RigSpec::Simulated { seed } => seed,
            RigSpec::Soundcard => 1,
        };
        Ok(Bench {
            prep,
            store,
            station,
            operator,
            pace_realtime: false,
            seed,
            rig,
            soundcard: o.soundcard,
            safety,
        })
    }

    /// On the first run on a store (a new station), the cautions, once, before anything
    /// plays (on stderr, so JSON on stdout stays clean).
    pub fn show_cautions_if_new(&self) {
        if !self.store.join(crate::store::DB_FILE).exists() {
            eprint!("{}", crate::safety::CAUTIONS);
        }
    }

    /// Parse `--sim-unit` / `--sim-channel` against this plan.
    pub fn sim_choice(&self, unit: &str, channel: Option<&str>) -> Result<SimChoice, Exit> {
        let kind = unit
            .parse::<UnitKind>()
            .map_err(|e| Exit::bad_input(anyhow::anyhow!("--sim-unit: {e}")))?;
        let plan = &self.prep.plan;
        let defect_channel = match channel {
            None => 0,
            Some(name) => plan.channel_index(name).ok_or_else(|| {
                Exit::bad_input(anyhow::anyhow!(
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
        })
    }

    /// Expected time one unit's sweep plays, s (for a progress indicator).
    pub fn stimulus_duration_s(&self) -> f64 {
        let s = &self.prep.stimulus;
        s.n_samples() as f64 / f64::from(s.sample_rate_hz)
    }

    fn make_rig(&self, serial: &str, sim: &SimChoice) -> Result<Box<dyn Rig>, Exit> {
        if self.rig == RigChoice::Soundcard {
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
        let rig = match simulated_fixture(&self.prep.plan)? {
            // The physical unit (rig v2) in the fixture the correction models, so the
            // correction can be judged against the physics it assumes.
            Some((coupler, tap)) => {
                tracing::info!(fixture = %coupler.id, "simulated rig: physical earphone");
                SimulatedRig::physical(routes, self.seed, unit, coupler, &tap)
                    .map_err(Exit::bad_input)?
            }
            // No fixture model known: the behavioural unit (rig v1).
            None => SimulatedRig::new(routes, self.seed, unit),
        };
        Ok(Box::new(
            rig.with_drive_monitors(monitors)
                .with_amplifier_gain_db(sim.amplifier_db),
        ))
    }

    /// Test one unit and record it. `abandon` is asked once more just before the record is
    /// written: when it says yes, nothing is written ([`UnitStop::Abandoned`]). The store
    /// appends a record and its capture in one transaction, so there is never half a record.
    pub fn test_unit(
        &mut self,
        serial: &str,
        sim: &SimChoice,
        abandon: &dyn Fn() -> bool,
        listen: &dyn Fn(&str) -> Option<bool>,
    ) -> Result<Tested, UnitStop> {
        if serial.trim().is_empty() {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "--serial: expected a serial number, found an empty string"
            ))
            .into());
        }
        let mut rig = self.make_rig(serial, sim)?;
        tracing::info!(serial = %serial, rig = rig.name(), "playing the stimulus");
        let started = std::time::Instant::now();
        let outcome = self
            .safety
            .run(rig.as_mut(), &self.prep.stimulus, self.prep.plan.n_inputs())
            .map_err(Exit::from_rig)?;
        if self.pace_realtime {
            let play = std::time::Duration::from_secs_f64(self.stimulus_duration_s());
            std::thread::sleep(play.saturating_sub(started.elapsed()));
        }
        let simulated_unit = (self.rig == RigChoice::Simulated).then(|| sim.label.clone());
        let (capture, result) = match outcome {
            SafeOutcome::Swept {
                capture,
                drive_gain_db,
                safety,
            } => {
                let mut result = pipeline::judge_capture(
                    &mut self.prep,
                    &capture,
                    serial,
                    rig.name(),
                    simulated_unit,
                    &drive_gain_db,
                )?;
                if safety.guard_trip.is_some() {
                    result.verdict = crate::Verdict::Retest;
                }
                result.safety = Some(safety);
                (capture, result)
            }
            SafeOutcome::Abandoned {
                capture,
                reason,
                safety,
            } => {
                let mut result =
                    pipeline::unjudged(&self.prep, serial, rig.name(), simulated_unit, reason);
                result.safety = Some(safety);
                (capture, result)
            }
        };
        let mut result = result;
        result.station = Some(self.station.clone());
        result.device_latency_samples = capture.device_latency_samples;
        let heard = self.listening_steps(rig.as_mut(), &mut result, listen)?;
        // Every refusal, scale-down, trip and dose warning goes to the log too.
        for e in result.safety.iter().flat_map(|s| &s.events) {
            tracing::warn!(serial = %result.serial, "hearing safety: {e}");
        }

        // Record before reporting: a verdict the store does not hold was never given.
        let result_json = serde_json::to_string(&result)
            .context("cannot serialise the result")
            .map_err(Exit::retest)?;
        let wav = crate::wav::encode_wav_f32(capture.sample_rate_hz, &capture.channels)
            .context("cannot encode the raw capture")
            .map_err(Exit::retest)?;
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
        };
        if abandon() {
            return Err(UnitStop::Abandoned);
        }
        let stored = Store::open(&self.store)
            .and_then(|mut s| {
                let stored = s.append(&record, &wav)?;
                record_unit_events(&mut s, &result, &self.operator, stored.id);
                record_listening(&mut s, &result, &self.operator, stored.id, &heard);
                Ok(stored)
            })
            .with_context(|| {
                format!(
                    "{}: the unit was NOT recorded; test it again",
                    self.store.display()
                )
            })
            .map_err(Exit::retest)?;
        tracing::info!(record = stored.id, hash = %stored.record_hash, "recorded");
        Ok(Tested { result, stored })
    }
}

/// Where the calibration for a run comes from.
#[derive(Debug, Clone, Copy)]
pub(crate) enum CalibrationSource<'a> {
    /// None named.
    None,
    /// `--calibration FILE` (the user asked for it explicitly).
    Option(&'a Path),
    /// The station file's `calibration:`.
    Station(&'a Path),
}

/// Decide, from the plan's level unit, the rig, the mode and the calibration, whether this
/// bench may test units with this plan; then load the calibration it needs and set the
/// per-channel dB SPL/V offsets and the calibration facts that go into every record.
///
/// The rules (README, "Levels and calibration"):
/// - a plan in dB SPL/V needs a calibration in date covering its channels (a past-due one
///   only with `--non-production`);
/// - a plan in dB FS/FS is judged in dB FS/FS: a calibration is never applied to it (an
///   explicit `--calibration` is refused, a station's is left aside); on the sound card it
///   runs only outside production, because digital levels hold only for the gains of the
///   bench they were measured on.
///
/// Refusals are bad input (exit 2): no unit is tested on a station that is not fit to test
/// it.
pub(crate) fn use_calibration(
    prep: &mut pipeline::Prepared,
    source: CalibrationSource,
    non_production: bool,
    rig: RigChoice,
    today: time::Date,
) -> Result<Option<crate::calibration::Calibration>, Exit> {
    use crate::calibration::{load_calibration, CalibrationError};
    use crate::plan::LevelUnit;
    use crate::result::CalibrationInfo;
    let plan = &prep.plan;
    let level_unit = plan.level_unit;
    let mode = if non_production {
        "non-production"
    } else {
        "production"
    };
    if level_unit == LevelUnit::DbFsPerFs {
        if let CalibrationSource::Option(path) = source {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "--calibration {}: plan `{}` writes its levels in dB FS/FS (level_unit: \
                 db_fs_per_fs), so a calibration would not apply to it; drop --calibration, or \
                 write the plan's absolute limits in dB SPL/V (level_unit: db_spl_per_v)",
                path.display(),
                plan.id
            )));
        }
        if rig == RigChoice::Soundcard && !non_production {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "plan `{}` writes its levels in dB FS/FS (level_unit: db_fs_per_fs), which \
                 hold only for the gains of the bench they were measured on: production on a \
                 sound card needs a plan in dB SPL/V (level_unit: db_spl_per_v) and a \
                 calibration; use --non-production (or a station in `mode: engineering`) for \
                 engineering measurements; no unit was tested",
                plan.id
            )));
        }
        // Not applied to the results, but the bench's gains still bound the levels.
        let for_safety = match source {
            CalibrationSource::Station(path) => {
                tracing::info!(
                    calibration = %path.display(),
                    "the plan's levels are dB FS/FS: the station's calibration is not applied \
                     to the results (its gains still bound the sound levels)"
                );
                match load_calibration(path) {
                    Ok(c) => Some(c),
                    Err(e) => {
                        tracing::warn!("{e}: the sound levels are bounded without it");
                        None
                    }
                }
            }
            _ => None,
        };
        prep.calibration = CalibrationInfo {
            mode: if non_production {
                "non-production".into()
            } else {
                "uncalibrated".into()
            },
            sha256: None,
            due_date: None,
            level_unit: level_unit.name().into(),
        };
        prep.calibration_offsets_db = None;
        return Ok(for_safety);
    }

    let path = match source {
        CalibrationSource::Option(p) | CalibrationSource::Station(p) => p,
        CalibrationSource::None => {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "plan `{}` writes its levels in dB SPL/V{}, which needs a calibration: give \
                 --calibration CAL.yaml (made with `tragus calibrate`) or name it in the \
                 station file; no unit was tested",
                plan.id,
                pipeline::plan_needs_calibration(plan)
                    .map(|c| format!(" (check `{c}`)"))
                    .unwrap_or_default()
            )))
        }
    };
    let cal = load_calibration(path).map_err(|e| match e {
        CalibrationError::Invalid(problems) => Exit::problems("calibration", &problems),
        other => Exit::bad_input(other),
    })?;
    if let Err(e) = cal.check_due(today) {
        if !non_production {
            return Err(Exit::bad_input(anyhow::anyhow!(
                "{e}; no unit was tested (use --non-production only outside production)"
            )));
        }
        tracing::warn!("{e}; testing anyway: --non-production");
    }
    let offsets = plan
        .channels
        .iter()
        .map(|c| cal.offset_db(&c.name, c.output, c.input))
        .collect::<Result<Vec<f64>, CalibrationError>>()
        .map_err(|e| {
            Exit::bad_input(anyhow::anyhow!(
                "{e}; no unit was tested (the plan's levels are dB SPL/V, which cannot be \
                 judged without it)"
            ))
        })?;
    prep.calibration = CalibrationInfo {
        mode: mode.into(),
        sha256: Some(cal.sha256()),
        due_date: Some(crate::calibration::format_date(cal.due_date)),
        level_unit: level_unit.name().into(),
    };
    prep.calibration_offsets_db = Some(offsets);
    Ok(Some(cal))
}

impl Bench {
    /// The plan's listening steps for one unit whose measured checks passed (README,
    /// "Listening steps"): each step's sweep is capped by its A-weighted level at the
    /// reference position (from the unit's corrected response), checked against the
    /// operator's noise dose, played under the guard, and judged by the operator's answer
    /// (`listen`: pass, fail, or `None` for no answer). Adds one check result per step and
    /// updates the unit verdict; returns what was heard, for the store.
    fn listening_steps(
        &self,
        rig: &mut dyn Rig,
        result: &mut crate::result::UnitResult,
        listen: &dyn Fn(&str) -> Option<bool>,
    ) -> Result<Vec<Heard>, Exit> {
        use crate::checks::{check_channels, CheckResult};
        use crate::plan::CheckKind;
        use crate::safety::dose::{DosePolicy, DoseVerdict, ExposureLedger, ShiftWindow};
        use crate::store::SafetyKind;
        use crate::Verdict;
        let plan = &self.prep.plan;
        let measured = result.verdict;
        let mut heard = Vec::new();
        let mut verdicts = Vec::new();
        for spec in &plan.checks {
            let CheckKind::Listening {
                band,
                level_dbfs,
                duration_s,
            } = spec.kind
            else {
                continue;
            };
            let names = check_channels(plan, spec);
            let label = names.join("/");
            let mut judged = |verdict: Verdict, detail: String| {
                verdicts.push(verdict);
                result.checks.push(CheckResult {
                    id: spec.id.clone(),
                    kind: "listening".into(),
                    channel: label.clone(),
                    verdict,
                    worst_margin_db: None,
                    at_hz: None,
                    detail,
                });
            };
            if measured != Verdict::Pass {
                judged(
                    Verdict::Retest,
                    format!("not played: the measured checks gave {}", measured.word()),
                );
                continue;
            }
            let fs = plan.sample_rate_hz;
            let band_hz = (band.low_hz, band.high_hz);
            let pad_s = 0.05;
            let sweep = crate::safety::listening::listening_sweep(
                fs, band_hz, level_dbfs, duration_s, pad_s,
            )
            .map_err(Exit::bad_input)?;
            let signal: Vec<f32> = sweep.samples().into_iter().map(|v| v as f32).collect();
            // The loudest moment must keep the guard's limits too: a sweep is at one
            // frequency at a time, so its instantaneous peak at the microphone at f is
            // A·(V/FS)·|H_mic(f)|, against the limit the guard applies at f.
            let mut inst_headroom_db = f64::INFINITY;
            // The level each ear would get: per channel from its corrected response in
            // dB SPL/V (a dB FS/FS response with the bench's gains), the loudest decides.
            let mut la_max = f64::NEG_INFINITY;
            let mut unbounded = None;
            for name in &names {
                let Some(i) = plan.channel_index(name) else {
                    continue;
                };
                let path = &self.safety.paths[i];
                let m = &result.channels[i];
                let offset = if m.unit == crate::calibration::UNIT_DB_SPL_PER_V {
                    Some(0.0)
                } else {
                    path.mic_fs_per_pa
                        .zip(path.drive_v_peak_per_fs)
                        .map(|(mic, v)| crate::calibration::response_offset_db(mic, v))
                };
                let (Some(offset), Some(v)) = (offset, path.drive_v_peak_per_fs) else {
                    unbounded = Some(name.clone());
                    break;
                };
                let grid = self.prep.analyzer.grid_hz();
                let response: Vec<(f64, f64)> = grid
                    .iter()
                    .zip(&m.response_db)
                    .filter(|(_, r)| r.is_finite())
                    .map(|(&f, &r)| (f, r + offset))
                    .collect();
                let peak_v_db = level_dbfs + 20.0 * v.log10();
                for &(f, h) in response
                    .iter()
                    .filter(|(f, _)| (band_hz.0..=band_hz.1).contains(f))
                {
                    let c = crate::safety::station::correction_at(path, f);
                    let mic_peak_db = peak_v_db + h - c;
                    let limit = self.safety.mic_peak_limit_db(path, f, f);
                    inst_headroom_db = inst_headroom_db.min(limit - mic_peak_db);
                }
                match crate::safety::listening::reference_level_dba(&signal, fs, v, &response) {
                    Ok(la) => la_max = la_max.max(la),
                    Err(_) => {
                        unbounded = Some(name.clone());
                        break;
                    }
                }
            }
            if let Some(name) = unbounded {
                judged(
                    Verdict::Retest,
                    format!(
                        "not played: its level at the reference position cannot be bounded \
                         for channel {name} (no drive or microphone calibration)"
                    ),
                );
                continue;
            }
            let cap =
                self.safety.caps.max_spl_reference_dba - crate::safety::station::SCALE_MARGIN_DB;
            let gain_db = (cap - la_max)
                .min(inst_headroom_db - crate::safety::station::SCALE_MARGIN_DB)
                .min(0.0);
            let la = la_max + gain_db;
            let mut events: Vec<(SafetyKind, String, String)> = Vec::new();
            if gain_db < 0.0 {
                let words = format!(
                    "listening step {} scaled down by {:.1} dB: it would reach {la_max:.1} dB(A) \
                     at the reference position (cap {:.1} dB(A)) and its loudest moment would \
                     pass the guard's limit by {:.1} dB",
                    spec.id,
                    -gain_db,
                    self.safety.caps.max_spl_reference_dba,
                    (-inst_headroom_db).max(0.0)
                );
                if let Some(s) = &mut result.safety {
                    s.events.push(words.clone());
                }
                let detail = serde_json::json!({
                    "step": spec.id,
                    "gain_db": gain_db,
                    "planned_reference_dba": la_max,
                    "played_reference_dba": la,
                    "cap_reference_dba": self.safety.caps.max_spl_reference_dba,
                    "guard_headroom_db": inst_headroom_db,
                });
                events.push((SafetyKind::ListeningScaledDown, words, detail.to_string()));
            }
            // The operator's dose: this shift (the last 8 h) and the last 7 days.
            let now = time::OffsetDateTime::now_utc().unix_timestamp();
            let ledger = Store::open(&self.store)
                .and_then(|st| st.exposures_for(&self.operator, now - 7 * 24 * 3600))
                .map_err(|e| Exit::retest(anyhow::anyhow!("cannot read the dose ledger: {e}")))
                .and_then(|x| {
                    ExposureLedger::from_exposures(x)
                        .map_err(|e| Exit::retest(anyhow::anyhow!("{e}")))
                })?;
            // The window reaches an hour past now, so that a step still running at `now`
            // (a simulated rig plays faster than real time) counts whole, not pro rata.
            let shift = ShiftWindow {
                start_unix_s: now - 8 * 3600,
                length_s: 9.0 * 3600.0,
            };
            let decision = ledger
                .decide_next(
                    &self.operator,
                    shift,
                    now,
                    la,
                    duration_s,
                    &DosePolicy::default(),
                )
                .map_err(|e| Exit::retest(anyhow::anyhow!("{e}")))?;
            let words = decision.to_string();
            match decision.verdict {
                DoseVerdict::Allowed => {}
                DoseVerdict::Warn => {
                    events.push((SafetyKind::DoseWarning, words.clone(), to_json(&decision)))
                }
                DoseVerdict::Refuse => {
                    events.push((SafetyKind::DoseRefused, words.clone(), to_json(&decision)))
                }
            }
            if decision.verdict != DoseVerdict::Allowed {
                if let Some(s) = &mut result.safety {
                    s.events
                        .push(format!("operator {}: {words}", self.operator));
                }
            }
            if decision.verdict == DoseVerdict::Refuse {
                judged(Verdict::Retest, format!("not played: {words}"));
                heard.push(Heard {
                    start_unix_s: now,
                    level_dba: None,
                    duration_s,
                    events,
                });
                continue;
            }
            // Play it, guarded, on the step's outputs.
            let g = 10f64.powf(gain_db / 20.0);
            let pad = sweep.start_sample;
            let n = signal.len() + 2 * pad;
            let mut outputs = vec![vec![0.0f32; n]; self.prep.stimulus.channels.len()];
            for name in &names {
                if let Some(i) = plan.channel_index(name) {
                    let o = plan.channels[i].output;
                    for (d, &x) in outputs[o][pad..].iter_mut().zip(&signal) {
                        *d = (f64::from(x) * g) as f32;
                    }
                }
            }
            rig.arm_guard(Some(self.safety.guard_for_sweep_params(&sweep, n)));
            let capture = rig
                .play_raw(&outputs, fs, plan.n_inputs())
                .map_err(Exit::from_rig)?;
            heard.push(Heard {
                start_unix_s: now,
                level_dba: Some(la),
                duration_s,
                events,
            });
            if let Some(t) = capture.guard_trip {
                judged(
                    Verdict::Retest,
                    format!(
                        "hearing-safety guard tripped while listening (input {} at {:.3} FS, \
                         limit {:.3} FS)",
                        t.input + 1,
                        t.peak_fs,
                        t.limit_fs
                    ),
                );
                continue;
            }
            let prompt = format!(
                "listen to {} ({label}, {:.0} Hz–{:.0} Hz, {la:.1} dB(A) at the ear): pass or fail?",
                result.serial, band_hz.0, band_hz.1
            );
            let detail = format!("{la:.1} dB(A) at the reference position for {duration_s:.1} s",);
            match listen(&prompt) {
                Some(true) => judged(Verdict::Pass, format!("operator: pass; {detail}")),
                Some(false) => judged(Verdict::Fail, format!("operator: fail; {detail}")),
                None => judged(
                    Verdict::Retest,
                    format!("no answer from the operator; {detail}"),
                ),
            }
        }
        if measured == Verdict::Pass {
            if verdicts.contains(&Verdict::Fail) {
                result.verdict = Verdict::Fail;
            } else if verdicts.contains(&Verdict::Retest) {
                result.verdict = Verdict::Retest;
            }
        }
        Ok(heard)
    }

    /// The sound-card rig on this bench's devices, with the plan's routes (after the
    /// station's channel map). Opened per unit: a device lost between units is found at the
    /// next unit, not carried as a stale stream.
    #[cfg(feature = "soundcard")]
    fn soundcard_rig(&self) -> Result<Box<dyn Rig>, Exit> {
        let plan = &self.prep.plan;
        let routes = plan.channels.iter().map(|c| (c.output, c.input)).collect();
        let mut spec = self.soundcard.clone();
        spec.extra_inputs = self.safety.monitors.iter().map(|m| m.input).collect();
        let rig = crate::rig::soundcard::SoundcardRig::open(spec, routes, plan.sample_rate_hz)
            .map_err(Exit::from_rig)?;
        Ok(Box::new(rig))
    }

    #[cfg(not(feature = "soundcard"))]
    fn soundcard_rig(&self) -> Result<Box<dyn Rig>, Exit> {
        Err(Exit::bad_input(anyhow::anyhow!(
            "--rig soundcard: {}",
            super::devices::NOT_BUILT
        )))
    }
}

/// The fixture the simulated rig puts the unit in: the one the plan's correction names
/// (after `--fixture` or the station's fixture), shared by every corrected channel since a
/// station has one fixture. `None` when no channel is corrected.
fn simulated_fixture(
    plan: &crate::plan::Plan,
) -> Result<Option<(crate::acoustics::network::Coupler, String)>, Exit> {
    let mut found: Option<&crate::plan::CorrectionSpec> = None;
    for c in plan.channels.iter().filter_map(|c| c.correction.as_ref()) {
        match found {
            None => found = Some(c),
            Some(f) if f.fixture.sha256 == c.fixture.sha256 && f.fixture_tap == c.fixture_tap => {}
            Some(f) => {
                return Err(Exit::bad_input(anyhow::anyhow!(
                    "--rig simulated: expected one fixture model and tap for every corrected \
                     channel (the simulated station has one fixture), found `{}` tap `{}` and \
                     `{}` tap `{}`; give --fixture to use one",
                    f.fixture.id,
                    f.fixture_tap,
                    c.fixture.id,
                    c.fixture_tap
                )))
            }
        }
    }
    Ok(found.map(|c| (c.fixture.coupler(), c.fixture_tap.clone())))
}

/// Load a station file; problems become one bad-input error listing every line.
pub(crate) fn load_station(path: &Path) -> Result<Station, Exit> {
    crate::station::load_station(path).map_err(|e| match e {
        crate::station::StationError::Invalid(problems) => {
            Exit::problems("station file", &problems)
        }
        other => Exit::bad_input(other),
    })
}

/// A plan hearing safety refused on this bench: the exit, and what the store records.
pub(crate) struct Refusal {
    /// The refusal as the command reports it (exit 2).
    pub exit: Exit,
    /// The words shown.
    pub message: String,
    /// The budget's numbers, JSON.
    pub detail_json: String,
}

/// Record a plan refusal in the store (created if needed): the refusal belongs to the
/// station's safety history even though no unit was tested. A store that cannot take it is
/// reported and does not change the refusal.
fn record_refusal(
    store: &Path,
    station: &str,
    operator: &str,
    plan: &crate::plan::Plan,
    refusal: &Refusal,
) {
    use crate::store::{NewSafetyEvent, SafetyKind};
    let event = NewSafetyEvent {
        time_utc: crate::result::now_utc_rfc3339(),
        station: station.to_string(),
        operator: operator.to_string(),
        serial: None,
        plan_id: plan.id.clone(),
        plan_sha256: Some(plan.sha256.clone()),
        kind: SafetyKind::PlanRefused,
        message: refusal.message.clone(),
        detail_json: refusal.detail_json.clone(),
        record_id: None,
    };
    if let Err(e) = Store::open(store).and_then(|mut s| s.append_safety_event(&event)) {
        tracing::warn!("{}: the refusal was not recorded: {e}", store.display());
    }
}

/// The safety events of one recorded unit (scale-down, abandon, guard trip), appended to the
/// store's safety-event chain next to its record. The record itself already holds them in
/// its result; these rows let an auditor list every safety event of a station at once.
fn record_unit_events(
    store: &mut Store,
    result: &crate::result::UnitResult,
    operator: &str,
    record_id: i64,
) {
    use crate::store::{NewSafetyEvent, SafetyKind};
    let Some(s) = &result.safety else { return };
    let abandoned = result.channels.is_empty();
    let mut events: Vec<(SafetyKind, String, String)> = Vec::new();
    if abandoned {
        let reason = result.retest_reasons.first().cloned().unwrap_or_default();
        events.push((SafetyKind::SweepAbandoned, reason, to_json(&s.pilot)));
    } else if s.sweep_gain_db < 0.0 {
        let words = s
            .events
            .iter()
            .filter(|e| e.contains("sweep scaled down"))
            .cloned()
            .collect::<Vec<_>>()
            .join("; ");
        events.push((SafetyKind::SweepScaledDown, words, to_json(&s.pilot)));
    }
    if let Some(trip) = &s.guard_trip {
        let words = s
            .events
            .iter()
            .find(|e| e.contains("guard tripped"))
            .cloned()
            .unwrap_or_default();
        events.push((SafetyKind::GuardTripped, words, to_json(trip)));
    }
    for (kind, message, detail_json) in events {
        let event = NewSafetyEvent {
            time_utc: result.time_utc.clone(),
            station: result
                .station
                .as_ref()
                .map_or_else(String::new, |st| st.id.clone()),
            operator: operator.to_string(),
            serial: Some(result.serial.clone()),
            plan_id: result.plan.id.clone(),
            plan_sha256: Some(result.plan.sha256.clone()),
            kind,
            message,
            detail_json,
            record_id: Some(record_id),
        };
        if let Err(e) = store.append_safety_event(&event) {
            tracing::warn!("the safety event was not recorded (the unit's record holds it): {e}");
        }
    }
}

/// One listening step as it happened, for the store: what the operator heard, and the dose
/// events it raised.
pub(crate) struct Heard {
    /// Start, unix seconds.
    start_unix_s: i64,
    /// A-weighted level at the reference position, dB(A); `None` when it did not play.
    level_dba: Option<f64>,
    /// Duration, s.
    duration_s: f64,
    /// Its safety events (scale-down, dose warning or refusal), with words and numbers.
    events: Vec<(crate::store::SafetyKind, String, String)>,
}

/// The exposures and dose events of a unit's listening steps, next to its record.
fn record_listening(
    store: &mut Store,
    result: &crate::result::UnitResult,
    operator: &str,
    record_id: i64,
    heard: &[Heard],
) {
    use crate::store::{NewExposure, NewSafetyEvent};
    let station = result
        .station
        .as_ref()
        .map_or_else(String::new, |st| st.id.clone());
    for h in heard {
        if let Some(level_dba) = h.level_dba {
            let e = NewExposure {
                operator: operator.to_string(),
                station: station.clone(),
                start_unix_s: h.start_unix_s,
                level_dba,
                duration_s: h.duration_s,
                serial: result.serial.clone(),
                plan_id: result.plan.id.clone(),
                record_id: Some(record_id),
            };
            if let Err(e) = store.append_exposure(&e) {
                tracing::warn!("the listening exposure was not recorded: {e}");
            }
        }
        for (kind, message, detail_json) in &h.events {
            let event = NewSafetyEvent {
                time_utc: result.time_utc.clone(),
                station: station.clone(),
                operator: operator.to_string(),
                serial: Some(result.serial.clone()),
                plan_id: result.plan.id.clone(),
                plan_sha256: Some(result.plan.sha256.clone()),
                kind: *kind,
                message: message.clone(),
                detail_json: detail_json.clone(),
                record_id: Some(record_id),
            };
            if let Err(e) = store.append_safety_event(&event) {
                tracing::warn!("the listening step's safety event was not recorded: {e}");
            }
        }
    }
}

/// A value as JSON text for a safety event's numbers (`{}` if it cannot be written).
fn to_json<T: serde::Serialize>(v: &T) -> String {
    serde_json::to_string(v).unwrap_or_else(|_| "{}".into())
}

/// The station's drive monitors for this plan, with their gains: the calibration's
/// `monitor:` entries, or on the simulated rig without a calibration its own monitor gain.
/// A monitor on an input the plan records is refused (it would read the unit as volts).
fn drive_monitors(
    plan: &crate::plan::Plan,
    monitors: &[crate::station::DriveMonitor],
    cal: Option<&crate::calibration::Calibration>,
    sim_constants: bool,
) -> Result<Vec<crate::safety::monitor::MonitorPath>, String> {
    use crate::rig::simulated::{DRIVE_V_PER_FS, MONITOR_V_PER_FS};
    monitors
        .iter()
        .map(|m| {
            if let Some(c) = plan.channels.iter().find(|c| c.input == m.input) {
                return Err(format!(
                    "the drive monitor of output {} is wired into input {}, which channel `{}` \
                     records; give the monitor an input of its own",
                    m.output + 1,
                    m.input + 1,
                    c.name
                ));
            }
            let (input_v, drive_v) = match cal {
                Some(cal) => (
                    cal.monitor.get(&(m.input + 1)).map(|x| x.volts_peak_per_fs),
                    cal.drive.get(&(m.output + 1)).map(|d| d.volts_peak_per_fs),
                ),
                None if sim_constants => (Some(MONITOR_V_PER_FS), Some(DRIVE_V_PER_FS)),
                None => (None, None),
            };
            Ok(crate::safety::monitor::MonitorPath {
                output: m.output,
                input: m.input,
                input_v_peak_per_fs: input_v,
                calibrated_v_peak_per_fs: drive_v,
            })
        })
        .collect()
}

/// Hearing safety for this plan on this bench: the bench's gains (the calibration, or the
/// simulated rig's own constants), the correction's range per channel, and the sweep's
/// plan-time budget, which refuses (exit 2, with the numbers) a plan that could exceed a cap.
/// A production station needs the plan's declared product sensitivity to bound the level
/// before playing.
pub(crate) fn safety_setup(
    prep: &pipeline::Prepared,
    caps: crate::station::Caps,
    cal: Option<&crate::calibration::Calibration>,
    monitors: &[crate::station::DriveMonitor],
    rig: RigChoice,
    non_production: bool,
) -> Result<SafetySetup, Refusal> {
    use crate::rig::simulated::{DRIVE_V_PER_FS, MIC_FS_PER_PA};
    use crate::safety::budget::{sine_budget, ChannelPath};
    use crate::safety::station::{ASSUMED_RESPONSE_PEAK_DB, PILOT_FREQ_HZ};
    let plan = &prep.plan;
    let (gains_source, sim_constants) = match (cal, rig) {
        (Some(c), _) => (format!("calibration {}", c.sha256()), false),
        (None, RigChoice::Simulated) => ("simulated rig constants".to_string(), true),
        (None, RigChoice::Soundcard) => ("none".to_string(), false),
    };
    let grid = prep.analyzer.grid_hz();
    let paths: Vec<SafePath> = plan
        .channels
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let (drive, mic) = match cal {
                Some(cal) => (
                    cal.drive.get(&(c.output + 1)).map(|d| d.volts_peak_per_fs),
                    cal.microphone.get(&(c.input + 1)).map(|m| m.fs_per_pa),
                ),
                None if sim_constants => (Some(DRIVE_V_PER_FS), Some(MIC_FS_PER_PA)),
                None => (None, None),
            };
            let band = (plan.stimulus.start_hz, plan.stimulus.stop_hz);
            let curve: Option<Vec<(f64, f64)>> = prep.corrections.channel(i).map(|cc| {
                grid.iter()
                    .zip(cc.grid_gain_db())
                    .filter(|(f, _)| (band.0..=band.1).contains(*f))
                    .map(|(&f, &g)| (f, g))
                    .collect()
            });
            let range = curve.as_ref().map(|pts| {
                pts.iter()
                    .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &(_, x)| {
                        (lo.min(x), hi.max(x))
                    })
            });
            // The grid is log-spaced and sorted; the nearest point above is close enough for
            // a level bound (24 or more points per octave: within 3 % of the frequency).
            let at_pilot = curve.as_ref().map_or(0.0, |pts| {
                pts.iter()
                    .find(|(f, _)| *f >= PILOT_FREQ_HZ)
                    .or(pts.last())
                    .map_or(0.0, |&(_, g)| g)
            });
            SafePath {
                channel: c.name.clone(),
                output: c.output,
                input: c.input,
                drive_v_peak_per_fs: drive,
                mic_fs_per_pa: mic,
                correction_db: curve,
                correction_db_range: range,
                correction_at_pilot_db: at_pilot,
            }
        })
        .collect();
    let band_hz = (plan.stimulus.start_hz, plan.stimulus.stop_hz);
    let budget_paths: Vec<ChannelPath> = paths
        .iter()
        .map(|p| ChannelPath {
            channel: p.channel.clone(),
            drive_v_peak_per_fs: p.drive_v_peak_per_fs,
            correction_db: p.correction_db.clone(),
        })
        .collect();
    let budget = sine_budget(
        "the sweep",
        plan.stimulus.level_dbfs,
        band_hz,
        plan.product.as_ref(),
        &budget_paths,
        &caps,
    );
    let refuse = |message: String| Refusal {
        detail_json: to_json(&budget),
        exit: Exit::bad_input(anyhow::anyhow!("{message}")),
        message,
    };
    if let Some(refusal) = budget.refusal() {
        return Err(refuse(format!(
            "hearing safety: plan `{}`: {refusal}",
            plan.id
        )));
    }
    if rig == RigChoice::Soundcard && !non_production && !budget.unchecked.is_empty() {
        return Err(refuse(format!(
            "hearing safety: plan `{}`: production needs every sound level bounded before \
             playing, but {}; declare the product's sensitivity (`product:` in the plan) and \
             calibrate every drive output; nothing was played",
            plan.id,
            budget.unchecked.join("; ")
        )));
    }
    for u in &budget.unchecked {
        tracing::warn!("hearing safety: not bounded before playing: {u}");
    }
    let monitors = drive_monitors(plan, monitors, cal, sim_constants)
        .map_err(|m| refuse(format!("hearing safety: plan `{}`: {m}", plan.id)))?;
    // A real amplifier can be turned up after its calibration; only a monitor sees that.
    let unmonitored: Vec<usize> = plan
        .channels
        .iter()
        .map(|c| c.output)
        .filter(|o| {
            !monitors
                .iter()
                .any(|m| m.output == *o && m.input_v_peak_per_fs.is_some())
        })
        .collect();
    if rig == RigChoice::Soundcard && !non_production && !unmonitored.is_empty() {
        return Err(refuse(format!(
            "hearing safety: plan `{}`: production needs the drive of every output monitored, \
             but output(s) {} have no drive monitor with a calibrated gain; wire each \
             amplifier output back into a spare input, list it under `drive_monitors:` in the \
             station file and calibrate it (`tragus calibrate monitor` or `calibrate drive \
             --input`); nothing was played",
            plan.id,
            unmonitored
                .iter()
                .map(|o| (o + 1).to_string())
                .collect::<Vec<_>>()
                .join(", ")
        )));
    }
    Ok(SafetySetup {
        caps,
        gains_source,
        paths,
        monitors,
        budget,
        sweep_dbfs: plan.stimulus.level_dbfs,
        band_hz,
        response_peak_db: plan
            .product
            .map_or(ASSUMED_RESPONSE_PEAK_DB, |p| p.response_peak_db),
        max_latency_s: match rig {
            RigChoice::Simulated => crate::safety::pilot::DEFAULT_MAX_LATENCY_S,
            // Through a sound server the latency is tens of milliseconds and moves between
            // runs (measured 53–75 ms through PulseAudio here).
            RigChoice::Soundcard => 0.3,
        },
    })
}
