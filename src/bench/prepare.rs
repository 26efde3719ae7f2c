//! Everything built once per plan on a bench, and one capture judged with it.

use super::error::BenchError;
use crate::analysis::{Analyzer, Outputs};
use crate::correction::PlanCorrections;
use crate::dsp::sweep::Stimulus;
use crate::models::coupler::{load_model, CouplerModel, ModelError};
use crate::plan::{load_plan, Plan, PlanError};
use crate::result::{now_utc_rfc3339, CalibrationInfo, PlanInfo, ToolInfo, UnitResult};
use crate::rig::simulated::PhysicalPopulation;
use crate::rig::Capture;
use crate::station::Station;
use std::path::Path;

/// Load a plan; problems become one error listing every `path:line:col` line.
pub fn load(path: &Path) -> Result<Plan, BenchError> {
    load_plan(path).map_err(|e| match e {
        PlanError::Invalid(problems) => BenchError::problems("plan", &problems),
        other => BenchError::BadInput(Box::new(other)),
    })
}

/// Load a station file; problems become one error listing every line.
pub fn load_station(path: &Path) -> Result<Station, BenchError> {
    crate::station::load_station(path).map_err(|e| match e {
        crate::station::StationError::Invalid(problems) => {
            BenchError::problems("station file", &problems)
        }
        other => BenchError::BadInput(Box::new(other)),
    })
}

/// Load a coupler model; problems become one error listing every line.
pub fn load_coupler(path: &Path) -> Result<CouplerModel, BenchError> {
    load_model(path).map_err(|e| match e {
        ModelError::Invalid(problems) => BenchError::problems("coupler model", &problems),
        other => BenchError::BadInput(Box::new(other)),
    })
}

/// Everything built once per plan. Cloning is cheap (the analyzer's tables and transform
/// plans are shared, the clone gets its own scratch): a batch keeps one per thread.
#[derive(Clone)]
pub struct Prepared {
    /// The plan, after the station's channel map and fixture.
    pub plan: Plan,
    /// The signal every unit gets.
    pub stimulus: Stimulus,
    /// The deconvolution and measurement, planned once.
    pub analyzer: Analyzer,
    /// The fixture→reference correction of each channel, tabulated for `analyzer`.
    pub corrections: PlanCorrections,
    /// The calibration's mode and identity, recorded with the result.
    pub calibration: CalibrationInfo,
    /// Per plan channel, the dB that turn dB FS/FS into dB SPL/V (`None`: uncalibrated).
    pub calibration_offsets_db: Option<Vec<f64>>,
}

/// Replace the fixture model of every corrected channel with the station's own
/// (`--fixture` or the station file's `fixture:`); its tap must be the one the plan names,
/// or `tap` when the station names one. `label` names the source in messages.
fn use_station_fixture(
    plan: &mut Plan,
    model: &CouplerModel,
    tap: Option<&str>,
    label: &str,
) -> Result<(), BenchError> {
    let taps = model.tap_names();
    if plan.channels.iter().all(|c| c.correction.is_none()) {
        tracing::warn!(
            fixture = %model.source.display(),
            "{label} given, but the plan corrects no channel; the model is not used"
        );
    }
    for ch in &mut plan.channels {
        if let Some(c) = &mut ch.correction {
            let wanted = tap.unwrap_or(&c.fixture_tap).to_string();
            if !taps.contains(&wanted.as_str()) {
                return Err(BenchError::bad_input(format!(
                    "{label} {}: expected a tap `{wanted}` (the plan's fixture_tap for channel \
                     {}), found taps {}",
                    model.source.display(),
                    ch.name,
                    taps.join(", ")
                )));
            }
            c.fixture = model.clone();
            c.fixture_tap = wanted;
        }
    }
    Ok(())
}

impl Prepared {
    /// Load the plan (with the fixture model `fixture` when given) and build everything a
    /// unit needs: stimulus, analyzer, corrections.
    pub fn new(path: &Path, fixture: Option<&Path>) -> Result<Prepared, BenchError> {
        Prepared::on_station(path, None, fixture)
    }

    /// Like [`Prepared::new`], on a station: its channel map and fixture are applied first;
    /// an explicit `fixture` (`--fixture`) wins over the station's.
    pub fn on_station(
        path: &Path,
        station: Option<&Station>,
        fixture: Option<&Path>,
    ) -> Result<Prepared, BenchError> {
        let mut plan = load(path)?;
        if let Some(st) = station {
            st.apply_to_plan(&mut plan)
                .map_err(|e| BenchError::BadInput(Box::new(e)))?;
        }
        if let Some(f) = fixture {
            let model = load_coupler(f)?;
            use_station_fixture(&mut plan, &model, None, "--fixture")?;
        } else if let Some(fx) = station.and_then(|s| s.fixture.as_ref()) {
            use_station_fixture(&mut plan, &fx.model, fx.tap.as_deref(), "station fixture")?;
        }
        let stimulus = Stimulus::from_plan(&plan).map_err(|e| BenchError::BadInput(e.into()))?;
        let analyzer =
            Analyzer::new(&plan, &stimulus).map_err(|e| BenchError::BadInput(e.into()))?;
        let started = std::time::Instant::now();
        let corrections =
            PlanCorrections::new(&plan, &analyzer).map_err(|e| BenchError::BadInput(e.into()))?;
        if corrections.any() {
            tracing::info!(
                setup_ms = started.elapsed().as_secs_f64() * 1e3,
                "fixture→reference correction tabulated"
            );
        }
        Ok(Prepared {
            plan,
            stimulus,
            analyzer,
            corrections,
            calibration: CalibrationInfo::uncalibrated(),
            calibration_offsets_db: None,
        })
    }

    /// From now on, analyse only what the plan's checks read ([`Outputs::for_checks`]): a
    /// plan without distortion checks skips the harmonic and rub-and-buzz analysis (their
    /// outputs read `null`). For batches that only judge (replay); a station keeps every
    /// output in its records.
    pub fn analyze_only_what_checks_read(&mut self) {
        self.analyzer
            .set_outputs(Outputs::for_checks(&self.plan.checks));
    }

    /// Analyse a capture and judge it. `drive_gain_db` (per plan channel, or empty) is the
    /// gain the sweep was played at relative to the plan (a hearing-safety scale-down): the
    /// capture is analysed as recorded (clipping and noise are what they were) and its
    /// levels are then brought back to the plan's. The verdict is the measured one
    /// ([`crate::checks::verdict::unit_verdict`] without listening steps).
    pub fn judge_capture(
        &mut self,
        capture: &Capture,
        serial: &str,
        rig: &str,
        simulated_unit: Option<String>,
        drive_gain_db: &[f64],
    ) -> Result<UnitResult, BenchError> {
        let mut channels = self
            .analyzer
            .analyze(capture, &self.plan.channels)
            .map_err(|e| BenchError::BadInput(e.into()))?;
        for (m, &g) in channels.iter_mut().zip(drive_gain_db) {
            if g != 0.0 {
                crate::calibration::shift_levels_db(m, -g);
            }
        }
        self.corrections.apply(&mut channels);
        if let Some(offsets) = &self.calibration_offsets_db {
            for (m, &o) in channels.iter_mut().zip(offsets) {
                crate::calibration::apply_offset(m, o);
            }
        }
        let checks = crate::checks::judge_checks(&self.plan, &channels);
        let mut retest_reasons = Vec::new();
        for ch in &channels {
            for r in &ch.retest_reasons {
                retest_reasons.push(format!("{}: {}", ch.name, r));
            }
        }
        let mut result = self.result_of(serial, rig, simulated_unit);
        result.retest_reasons = retest_reasons;
        result.channels = channels;
        result.checks = checks.results;
        result.verdict = decide_verdict(&self.plan, &result, 0);
        Ok(result)
    }

    /// The result of a unit that was not measured (the sweep was abandoned for safety):
    /// verdict retest, the reason in words, no measurement and no check.
    pub fn unjudged(
        &self,
        serial: &str,
        rig: &str,
        simulated_unit: Option<String>,
        reason: String,
    ) -> UnitResult {
        let mut result = self.result_of(serial, rig, simulated_unit);
        result.retest_reasons = vec![reason];
        result
    }

    /// A result of this plan for one unit, stamped now: no measurement, no check, verdict
    /// retest until one is decided.
    fn result_of(&self, serial: &str, rig: &str, simulated_unit: Option<String>) -> UnitResult {
        UnitResult {
            tool: ToolInfo::default(),
            plan: PlanInfo::from(&self.plan),
            serial: serial.to_string(),
            verdict: crate::Verdict::Retest,
            time_utc: now_utc_rfc3339(),
            rig: rig.to_string(),
            simulated_unit,
            station: None,
            device_latency_samples: None,
            retest_reasons: Vec::new(),
            channels: Vec::new(),
            checks: Vec::new(),
            calibration: self.calibration.clone(),
            safety: None,
            history: None,
        }
    }
}

/// The unit verdict of `result` from everything it holds: whether its measurement is valid
/// (a plan channel without a valid measurement, capture faults, an abandoned sweep, a guard
/// trip), its measured checks and its listening checks (the last `n_listening` check
/// results). The one place the bench decides a verdict, by the one rule in
/// [`crate::checks::verdict`].
pub(crate) fn decide_verdict(
    plan: &Plan,
    result: &UnitResult,
    n_listening: usize,
) -> crate::Verdict {
    let measured = |name: &str| result.channels.iter().find(|m| m.name == name);
    let invalid = plan
        .channels
        .iter()
        .any(|c| measured(&c.name).is_none_or(|m| !m.is_valid()))
        || result.channels.iter().any(|m| !m.is_valid())
        || !result.retest_reasons.is_empty()
        || result
            .safety
            .as_ref()
            .is_some_and(|s| s.guard_trip.is_some());
    let split = result.checks.len() - n_listening.min(result.checks.len());
    let (measured, listening) = result.checks.split_at(split);
    crate::checks::verdict::unit_verdict(
        invalid,
        measured.iter().map(|c| c.verdict),
        listening.iter().map(|c| c.verdict),
    )
}

/// The simulated population of a bench, made once: the plan's own product
/// ([`crate::plan::Plan::simulated_earphone`], else the demo earbud) in the fixture the
/// correction models, so the correction can be judged against the physics it assumes; a
/// plan that names `product.earphone` but corrects no channel is seated in the station's
/// fixture (or `--fixture`). `None` (the behavioural rig v1) when no fixture is known and
/// the plan names no earphone.
pub(super) fn simulated_population(
    plan: &crate::plan::Plan,
    station: Option<&Station>,
    fixture: Option<&Path>,
) -> Result<Option<PhysicalPopulation>, BenchError> {
    let bad = |e: crate::rig::simulated::PhysicalRigError| BenchError::BadInput(e.into());
    let seat = match simulated_fixture(plan)? {
        Some(found) => Some(found),
        None if plan.product_earphone.is_some() => match (fixture, station) {
            (Some(f), _) => {
                let m = load_coupler(f)?;
                let tap = m.tap_names().first().map(|t| t.to_string());
                Some((m.coupler(), tap.unwrap_or_default()))
            }
            (None, Some(Station {
                fixture: Some(fx), ..
            })) => {
                let tap = fx
                    .tap
                    .clone()
                    .or_else(|| fx.model.tap_names().first().map(|t| t.to_string()));
                Some((fx.model.coupler(), tap.unwrap_or_default()))
            }
            _ => {
                return Err(BenchError::bad_input(
                    "--rig simulated: the plan names its earphone (product.earphone), which                      the simulated rig seats in a fixture: expected a corrected channel, a                      station fixture or --fixture, found none",
                ))
            }
        },
        None => None,
    };
    let Some((coupler, tap)) = seat else {
        return Ok(None);
    };
    tracing::info!(fixture = %coupler.id, "simulated rig: physical earphone");
    let pop = match plan.simulated_earphone() {
        Some(e) => {
            tracing::info!(
                earphone = e.named_by,
                "simulated rig: the plan's own product"
            );
            PhysicalPopulation::of_product(coupler, &tap, e.model, e.spread).map_err(bad)?
        }
        None => PhysicalPopulation::new(coupler, &tap).map_err(bad)?,
    };
    Ok(Some(pop))
}

/// The fixture the simulated rig puts the unit in: the one the plan's correction names
/// (after `--fixture` or the station's fixture), shared by every corrected channel since a
/// station has one fixture. `None` when no channel is corrected.
fn simulated_fixture(
    plan: &crate::plan::Plan,
) -> Result<Option<(crate::acoustics::network::Coupler, String)>, BenchError> {
    let mut found: Option<&crate::plan::CorrectionSpec> = None;
    for c in plan.channels.iter().filter_map(|c| c.correction.as_ref()) {
        match found {
            None => found = Some(c),
            Some(f) if f.fixture.sha256 == c.fixture.sha256 && f.fixture_tap == c.fixture_tap => {}
            Some(f) => {
                return Err(BenchError::bad_input(format!(
                    "--rig simulated: expected one fixture model and tap for every corrected \
                     channel (the simulated station has one fixture), found `{}` tap `{}` and \
                     `{}` tap `{}`; give --fixture to use one",
                    f.fixture.id, f.fixture_tap, c.fixture.id, c.fixture_tap
                )))
            }
        }
    }
    Ok(found.map(|c| (c.fixture.coupler(), c.fixture_tap.clone())))
}
