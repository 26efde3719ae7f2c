//! One unit through the stages: capture → measurement → verdicts → result.

use super::Exit;
use crate::analysis::Analyzer;
use crate::checks;
use crate::dsp::sweep::Stimulus;
use crate::plan::{load_plan, Plan, PlanError};
use crate::result::{now_utc_rfc3339, PlanInfo, ToolInfo, UnitResult};
use crate::rig::Capture;
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
}

pub(crate) fn prepare(path: &Path) -> Result<Prepared, Exit> {
    let plan = load(path)?;
    let stimulus = Stimulus::from_plan(&plan).map_err(Exit::bad_input)?;
    let analyzer = Analyzer::new(&plan, &stimulus).map_err(Exit::bad_input)?;
    Ok(Prepared {
        plan,
        stimulus,
        analyzer,
    })
}

/// Analyse a capture and judge it.
pub(crate) fn judge_capture(
    prep: &mut Prepared,
    capture: &Capture,
    serial: &str,
    rig: &str,
    simulated_unit: Option<String>,
) -> Result<UnitResult, Exit> {
    let channels = prep
        .analyzer
        .analyze(capture, &prep.plan.channels)
        .map_err(Exit::bad_input)?;
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
        retest_reasons,
        channels,
        checks,
    })
}
