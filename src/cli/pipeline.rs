//! One unit through the stages: capture → measurement → verdicts → result.

use super::Exit;
use crate::acoustics::apply::PlanCorrections;
use crate::acoustics::model::{load_model, CouplerModel, ModelError};
use crate::analysis::Analyzer;
use crate::checks;
use crate::dsp::sweep::Stimulus;
use crate::plan::{load_plan, Plan, PlanError};
use crate::result::{now_utc_rfc3339, CalibrationInfo, PlanInfo, ToolInfo, UnitResult};
use crate::rig::Capture;
use crate::station::Station;
use crate::Verdict;
use std::path::Path;

/// Load a plan; problems become one bad-input error listing every `path:line:col` line.
pub(crate) fn load(path: &Path) -> Result<Plan, Exit> {
    load_plan(path).map_err(|e| match e {
        PlanError::Invalid(problems) => Exit::problems("plan", &problems),
        other => Exit::bad_input(other),
    })
}

/// Everything built once per plan.
pub(crate) struct Prepared {
    pub plan: Plan,
    pub stimulus: Stimulus,
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
) -> Result<(), Exit> {
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
                return Err(Exit::bad_input(anyhow::anyhow!(
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

/// Load the plan (with the station's fixture model when given) and build everything a
/// unit needs: stimulus, analyzer, corrections.
pub(crate) fn prepare(path: &Path, fixture: Option<&Path>) -> Result<Prepared, Exit> {
    prepare_on(path, None, fixture)
}

/// Like [`prepare`], on a station: its channel map and fixture are applied first; an
/// explicit `fixture` (`--fixture`) wins over the station's.
pub(crate) fn prepare_on(
    path: &Path,
    station: Option<&Station>,
    fixture: Option<&Path>,
) -> Result<Prepared, Exit> {
    let mut plan = load(path)?;
    if let Some(st) = station {
        st.apply_to_plan(&mut plan).map_err(Exit::bad_input)?;
    }
    if let Some(f) = fixture {
        let model = load_model(f).map_err(|e| match e {
            ModelError::Invalid(problems) => Exit::problems("coupler model", &problems),
            other => Exit::bad_input(other),
        })?;
        use_station_fixture(&mut plan, &model, None, "--fixture")?;
    } else if let Some(fx) = station.and_then(|s| s.fixture.as_ref()) {
        use_station_fixture(&mut plan, &fx.model, fx.tap.as_deref(), "station fixture")?;
    }
    let stimulus = Stimulus::from_plan(&plan).map_err(Exit::bad_input)?;
    let analyzer = Analyzer::new(&plan, &stimulus).map_err(Exit::bad_input)?;
    let started = std::time::Instant::now();
    let corrections = PlanCorrections::new(&plan, &analyzer).map_err(Exit::bad_input)?;
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

/// The id of the first check whose limits are in dB SPL (it needs a calibration), if any.
pub(crate) fn plan_needs_calibration(plan: &Plan) -> Option<String> {
    plan.checks
        .iter()
        .find(|c| c.kind.needs_calibration())
        .map(|c| c.id.clone())
}

/// Analyse a capture and judge it. `drive_gain_db` (per plan channel, or empty) is the gain
/// the sweep was played at relative to the plan (a hearing-safety scale-down): the capture is
/// analysed as recorded (clipping and noise are what they were) and its levels are then
/// brought back to the plan's.
pub(crate) fn judge_capture(
    prep: &mut Prepared,
    capture: &Capture,
    serial: &str,
    rig: &str,
    simulated_unit: Option<String>,
    drive_gain_db: &[f64],
) -> Result<UnitResult, Exit> {
    let mut channels = prep
        .analyzer
        .analyze(capture, &prep.plan.channels)
        .map_err(Exit::bad_input)?;
    for (m, &g) in channels.iter_mut().zip(drive_gain_db) {
        if g != 0.0 {
            crate::calibration::shift_levels_db(m, -g);
        }
    }
    prep.corrections.apply(&mut channels);
    if let Some(offsets) = &prep.calibration_offsets_db {
        for (m, &o) in channels.iter_mut().zip(offsets) {
            crate::calibration::apply_offset(m, o);
        }
    }
    let (checks, mut verdict) = checks::judge(&prep.plan, &channels);
    let mut retest_reasons = Vec::new();
    for ch in &channels {
        for r in &ch.retest_reasons {
            retest_reasons.push(format!("{}: {}", ch.name, r));
        }
    }
    if !retest_reasons.is_empty() {
        verdict = Verdict::Retest;
    }
    Ok(UnitResult {
        tool: ToolInfo::default(),
        plan: PlanInfo::from(&prep.plan),
        serial: serial.to_string(),
        verdict,
        time_utc: now_utc_rfc3339(),
        rig: rig.to_string(),
        simulated_unit,
        station: None,
        device_latency_samples: None,
        retest_reasons,
        channels,
        checks,
        calibration: prep.calibration.clone(),
        safety: None,
    })
}

/// The result of a unit that was not measured (the sweep was abandoned for safety): verdict
/// retest, the reason in words, no measurement and no check.
pub(crate) fn unjudged(
    prep: &Prepared,
    serial: &str,
    rig: &str,
    simulated_unit: Option<String>,
    reason: String,
) -> UnitResult {
    UnitResult {
        tool: ToolInfo::default(),
        plan: PlanInfo::from(&prep.plan),
        serial: serial.to_string(),
        verdict: Verdict::Retest,
        time_utc: now_utc_rfc3339(),
        rig: rig.to_string(),
        simulated_unit,
        station: None,
        device_latency_samples: None,
        retest_reasons: vec![reason],
        channels: Vec::new(),
        checks: Vec::new(),
        calibration: prep.calibration.clone(),
        safety: None,
    }
}
