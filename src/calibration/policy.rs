//! Which calibration a bench applies to a plan, and whether the bench may test with it.
//!
//! The rules (README, "Levels and calibration"):
//! - a plan in dB SPL/V needs a calibration in date covering its channels (a past-due one
//!   only outside production);
//! - a plan in dB FS/FS is judged in dB FS/FS: a calibration is never applied to it (one
//!   named explicitly is refused, a station's is left aside for the results but still gives
//!   the bench's gains to hearing safety); on a sound card it runs only outside production,
//!   because digital levels hold only for the gains of the bench they were measured on.
//!
//! A refusal means no unit is tested on a station that is not fit to test it.

use super::{format_date, load_calibration, Calibration, CalibrationError, CalibrationInfo};
use crate::plan::{LevelUnit, Plan};
use crate::station::RigKind;
use std::path::Path;

/// Where the calibration for a run comes from.
#[derive(Debug, Clone, Copy)]
pub enum CalibrationSource<'a> {
    /// None named.
    None,
    /// Named explicitly (`--calibration FILE`).
    Option(&'a Path),
    /// The station file's `calibration:`.
    Station(&'a Path),
}

/// What the bench applies for a plan.
#[derive(Debug, Clone)]
pub struct CalibrationDecision {
    /// The calibration's mode and identity, recorded with every result.
    pub info: CalibrationInfo,
    /// Per plan channel, the dB that turn dB FS/FS into dB SPL/V (`None`: uncalibrated).
    pub offsets_db: Option<Vec<f64>>,
    /// The calibration whose gains bound the sound levels, if one was loaded (also for a
    /// dB FS/FS plan on a station with a calibration).
    pub for_safety: Option<Calibration>,
}

/// Why a bench may not test with a plan's calibration.
#[derive(Debug, thiserror::Error)]
pub enum PolicyError {
    /// The calibration file has problems, each `path:line:col: message`.
    #[error("invalid calibration ({} problem(s)):\n{}", .0.len(), .0.join("\n"))]
    Invalid(Vec<String>),
    /// The calibration could not be read.
    #[error(transparent)]
    File(CalibrationError),
    /// The plan and the calibration (or its absence) do not go together.
    #[error("{0}")]
    Refused(String),
}

/// The id of the first check whose limits are in dB SPL (it needs a calibration), if any.
pub fn plan_needs_calibration(plan: &Plan) -> Option<String> {
    plan.checks
        .iter()
        .find(|c| c.kind.needs_calibration())
        .map(|c| c.id.clone())
}

/// Decide, from the plan's level unit, the rig, the mode and the calibration, whether this
/// bench may test units with this plan; then load the calibration it needs and give the
/// per-channel dB SPL/V offsets and the calibration facts that go into every record.
pub fn decide(
    plan: &Plan,
    source: CalibrationSource,
    non_production: bool,
    rig: RigKind,
    today: time::Date,
) -> Result<CalibrationDecision, PolicyError> {
    let level_unit = plan.level_unit;
    let mode = if non_production {
        "non-production"
    } else {
        "production"
    };
    if level_unit == LevelUnit::DbFsPerFs {
        if let CalibrationSource::Option(path) = source {
            return Err(PolicyError::Refused(format!(
                "--calibration {}: plan `{}` writes its levels in dB FS/FS (level_unit: \
                 db_fs_per_fs), so a calibration would not apply to it; drop --calibration, or \
                 write the plan's absolute limits in dB SPL/V (level_unit: db_spl_per_v)",
                path.display(),
                plan.id
            )));
        }
        if rig == RigKind::Soundcard && !non_production {
            return Err(PolicyError::Refused(format!(
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
        return Ok(CalibrationDecision {
            info: CalibrationInfo {
                mode: if non_production {
                    "non-production".into()
                } else {
                    "uncalibrated".into()
                },
                sha256: None,
                due_date: None,
                level_unit: level_unit.name().into(),
            },
            offsets_db: None,
            for_safety,
        });
    }

    let path = match source {
        CalibrationSource::Option(p) | CalibrationSource::Station(p) => p,
        CalibrationSource::None => {
            return Err(PolicyError::Refused(format!(
                "plan `{}` writes its levels in dB SPL/V{}, which needs a calibration: give \
                 --calibration CAL.yaml (made with `tragus calibrate`) or name it in the \
                 station file; no unit was tested",
                plan.id,
                plan_needs_calibration(plan)
                    .map(|c| format!(" (check `{c}`)"))
                    .unwrap_or_default()
            )))
        }
    };
    let cal = load_calibration(path).map_err(|e| match e {
        CalibrationError::Invalid(problems) => {
            PolicyError::Invalid(problems.iter().map(|p| p.to_string()).collect())
        }
        other => PolicyError::File(other),
    })?;
    if let Err(e) = cal.check_due(today) {
        if !non_production {
            return Err(PolicyError::Refused(format!(
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
            PolicyError::Refused(format!(
                "{e}; no unit was tested (the plan's levels are dB SPL/V, which cannot be \
                 judged without it)"
            ))
        })?;
    Ok(CalibrationDecision {
        info: CalibrationInfo {
            mode: mode.into(),
            sha256: Some(cal.sha256()),
            due_date: Some(format_date(cal.due_date)),
            level_unit: level_unit.name().into(),
        },
        offsets_db: Some(offsets),
        for_safety: Some(cal),
    })
}
