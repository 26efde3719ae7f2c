//! Noise exposure of operators who listen: the NIOSH daily dose, the WHO/ITU-T H.870 weekly
//! sound dose, a plain-data ledger of listening exposures, and the decision whether the next
//! listening step may start.
//!
//! Sits beside the data flow (issue 5 point 6): the CLI keeps the ledger in the store, asks
//! [`ExposureLedger::decide_next`] before every listening step, and shows and records the
//! decision's numbers. No I/O here.
//!
//! # Formulas
//!
//! - **NIOSH REL** (NIOSH Criteria for a Recommended Standard: Occupational Noise Exposure,
//!   revised 1998, publication 98-126, ch. 1): 85 dB(A) for 8 h with a 3 dB exchange rate, so
//!   the allowed time at level L is `T = 480 / 2^((L − 85)/3)` min and the daily dose is
//!   `D = 100 %·Σ tᵢ/Tᵢ`. Every exposure counts, whatever its level: NIOSH dosimetry integrates
//!   only from 80 dB(A) (from memory), so counting quieter steps as well errs on the side of
//!   the operator.
//! - **WHO/ITU-T H.870** (ITU-T H.870 (2018, 2022), "Guidelines for safe listening devices/
//!   systems"): weekly sound dose `E = Σ p_A²·t` in Pa²h with `p_A = 20 µPa·10^(L/20)` the
//!   A-weighted rms pressure (ISO 1683 reference); reference 1.6 Pa²h for adults (80 dB(A) for
//!   40 h a week) and 0.51 Pa²h for children and sensitive listeners (75 dB(A) for 40 h a week,
//!   0.506 Pa²h, rounded in the recommendation). Its dose is `100 %·E/E_ref`.
//!
//! # Windows
//!
//! Exposures start at a time in **whole unix seconds (UTC)**, `start_unix_s`, and last
//! `duration_s`. The NIOSH dose counts the part of each exposure that lies inside the shift
//! window the caller gives (start and length: the station knows its shift plan); the weekly
//! dose counts the part that lies at or after `now − 7 days`, including anything stamped after
//! `now` (a clock set back must not hide exposure). An exposure across a window edge counts
//! pro rata.
//!
//! # Thresholds
//!
//! A warning when a dose would be at or above [`WARN_PERCENT`] (50 %) after the next step: the
//! "action level" of occupational-noise practice (common practice; the US OSHA hearing
//! conservation amendment sets its action level at a 50 % dose, from memory). A refusal when a
//! dose would reach or pass [`REFUSE_PERCENT`] (100 %), as issue 5 asks. By default both
//! figures, NIOSH and weekly, can warn and refuse ([`DosePolicy::weekly_dose_limits`]).

use crate::calibration::P_REF_PA;
use std::fmt;

/// NIOSH REL criterion level, dB(A) (NIOSH 98-126 ch. 1).
pub const NIOSH_CRITERION_DBA: f64 = 85.0;
/// NIOSH REL criterion duration, minutes (8 h; NIOSH 98-126 ch. 1).
pub const NIOSH_CRITERION_MIN: f64 = 480.0;
/// NIOSH REL exchange rate, dB per halving of the allowed time (NIOSH 98-126 ch. 1).
pub const NIOSH_EXCHANGE_DB: f64 = 3.0;
/// WHO/ITU-T H.870 weekly reference for adults, Pa²h (80 dB(A) for 40 h).
pub const WEEKLY_ADULT_PA2H: f64 = 1.6;
/// WHO/ITU-T H.870 weekly reference for children and sensitive listeners, Pa²h (75 dB(A) for
/// 40 h, rounded in the recommendation).
pub const WEEKLY_SENSITIVE_PA2H: f64 = 0.51;
/// Length of the weekly window, s (7 days).
pub const WEEK_S: i64 = 7 * 24 * 3600;
/// Default warning threshold, % of a dose after the next step (module doc).
pub const WARN_PERCENT: f64 = 50.0;
/// Default refusal threshold, % of a dose after the next step (issue 5).
pub const REFUSE_PERCENT: f64 = 100.0;

/// NIOSH allowed exposure time at `level_dba`, minutes: `480 / 2^((L − 85)/3)`.
pub fn niosh_allowed_min(level_dba: f64) -> f64 {
    NIOSH_CRITERION_MIN / 2f64.powf((level_dba - NIOSH_CRITERION_DBA) / NIOSH_EXCHANGE_DB)
}

/// NIOSH dose of `duration_s` at `level_dba`, % of the daily allowance.
pub fn niosh_dose_percent(level_dba: f64, duration_s: f64) -> f64 {
    if duration_s == 0.0 {
        // 0 s counts nothing even where the allowed time underflows to 0 (0/0).
        return 0.0;
    }
    100.0 * (duration_s / 60.0) / niosh_allowed_min(level_dba)
}

/// Mean-square A-weighted pressure of `level_dba`, Pa²: `(20 µPa)²·10^(L/10)`.
pub fn mean_square_pa2(level_dba: f64) -> f64 {
    P_REF_PA * P_REF_PA * 10f64.powf(level_dba / 10.0)
}

/// Sound exposure of `duration_s` at `level_dba`, Pa²h (ITU-T H.870: E = p_A²·t).
pub fn sound_exposure_pa2h(level_dba: f64, duration_s: f64) -> f64 {
    mean_square_pa2(level_dba) * duration_s / 3600.0
}

/// Which WHO/ITU-T H.870 weekly reference applies.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum WeeklyReference {
    /// Adults: 1.6 Pa²h (80 dB(A) for 40 h a week).
    Adult,
    /// Children and sensitive listeners: 0.51 Pa²h (75 dB(A) for 40 h a week).
    Sensitive,
}

impl WeeklyReference {
    /// The reference exposure, Pa²h.
    pub fn pa2h(self) -> f64 {
        match self {
            WeeklyReference::Adult => WEEKLY_ADULT_PA2H,
            WeeklyReference::Sensitive => WEEKLY_SENSITIVE_PA2H,
        }
    }

    /// Words for messages.
    pub fn words(self) -> &'static str {
        match self {
            WeeklyReference::Adult => "adult",
            WeeklyReference::Sensitive => "sensitive listener",
        }
    }
}

/// When to warn and when to refuse.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct DosePolicy {
    /// Warn when a dose after the next step is at or above this, %.
    pub warn_percent: f64,
    /// Refuse when a dose after the next step is at or above this, %.
    pub refuse_percent: f64,
    /// The weekly reference the weekly dose is taken against.
    pub weekly_reference: WeeklyReference,
    /// Whether the weekly dose warns and refuses too (true) or is only reported (false). True
    /// by default: the weekly reference is the stricter one for an operator who listens every
    /// shift (85 dB(A) for 8 h a day five days a week is 100 % NIOSH each day but 316 % of the
    /// adult weekly reference).
    pub weekly_dose_limits: bool,
}

impl Default for DosePolicy {
    fn default() -> Self {
        DosePolicy {
            warn_percent: WARN_PERCENT,
            refuse_percent: REFUSE_PERCENT,
            weekly_reference: WeeklyReference::Adult,
            weekly_dose_limits: true,
        }
    }
}

/// One listening exposure of one operator.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Exposure {
    /// Operator id as the station records it.
    pub operator: String,
    /// Start, whole seconds since 1970-01-01T00:00:00Z.
    pub start_unix_s: i64,
    /// A-weighted level at the reference (ear-equivalent) position, dB(A) re 20 µPa.
    pub level_dba: f64,
    /// Duration, s.
    pub duration_s: f64,
}

/// The shift whose NIOSH dose is counted.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ShiftWindow {
    /// Start of the shift, whole unix seconds (UTC).
    pub start_unix_s: i64,
    /// Length of the shift, s (a NIOSH dose is per day; a shift is at most that).
    pub length_s: f64,
}

/// What an error is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Subject {
    /// An exposure of the ledger, by index.
    Exposure(usize),
    /// The next listening step asked about.
    NextStep,
}

impl fmt::Display for Subject {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Subject::Exposure(i) => write!(f, "exposure {i} of the ledger"),
            Subject::NextStep => write!(f, "the next listening step"),
        }
    }
}

/// Why a dose cannot be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DoseError {
    /// An empty operator id.
    #[error("expected an operator id in {subject}, found an empty one")]
    EmptyOperator {
        /// Where.
        subject: Subject,
    },
    /// A level that is NaN or infinite.
    #[error("expected a finite level in dB(A) in {subject}, found {found_dba}")]
    BadLevel {
        /// Where.
        subject: Subject,
        /// The level found, dB(A).
        found_dba: f64,
    },
    /// A duration that is negative, NaN or infinite.
    #[error("expected a finite duration of 0 s or more in {subject}, found {found_s} s")]
    BadDuration {
        /// Where.
        subject: Subject,
        /// The duration found, s.
        found_s: f64,
    },
    /// A shift of no length.
    #[error("expected a shift length above 0 s, found {found_s} s")]
    BadShift {
        /// The length found, s.
        found_s: f64,
    },
    /// Thresholds out of order or not finite.
    #[error(
        "expected dose thresholds 0 % < warning < refusal, found warning {warn_percent} % and refusal {refuse_percent} %"
    )]
    BadPolicy {
        /// Warning threshold found, %.
        warn_percent: f64,
        /// Refusal threshold found, %.
        refuse_percent: f64,
    },
}

fn check_exposure(
    subject: Subject,
    operator: &str,
    level_dba: f64,
    duration_s: f64,
) -> Result<(), DoseError> {
    if operator.trim().is_empty() {
        return Err(DoseError::EmptyOperator { subject });
    }
    if !level_dba.is_finite() {
        return Err(DoseError::BadLevel {
            subject,
            found_dba: level_dba,
        });
    }
    if !(duration_s.is_finite() && duration_s >= 0.0) {
        return Err(DoseError::BadDuration {
            subject,
            found_s: duration_s,
        });
    }
    Ok(())
}

fn check_policy(policy: &DosePolicy) -> Result<(), DoseError> {
    let (w, r) = (policy.warn_percent, policy.refuse_percent);
    if !(w.is_finite() && r.is_finite() && w > 0.0 && w < r) {
        return Err(DoseError::BadPolicy {
            warn_percent: w,
            refuse_percent: r,
        });
    }
    Ok(())
}

/// Seconds of `[start, start + duration)` inside `[from, to)`.
fn overlap_s(start_unix_s: i64, duration_s: f64, from_unix_s: f64, to_unix_s: f64) -> f64 {
    // Unix seconds fit f64 exactly (< 2^53).
    let start = start_unix_s as f64;
    let end = start + duration_s;
    (end.min(to_unix_s) - start.max(from_unix_s)).max(0.0)
}

/// Minutes left: the fraction of the allowance left times the full allowance at the level,
/// 0 when nothing is left (also where the allowance at an absurdly low level is infinite).
fn minutes_left(fraction_left: f64, allowance_min: f64) -> f64 {
    if fraction_left <= 0.0 {
        0.0
    } else {
        fraction_left * allowance_min
    }
}

/// An operator's doses now.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DoseStatus {
    /// NIOSH dose over the shift window, %.
    pub niosh_percent: f64,
    /// Weekly sound dose over the last 7 days, Pa²h.
    pub weekly_pa2h: f64,
    /// Weekly sound dose over the last 7 days, % of the weekly reference.
    pub weekly_percent: f64,
    /// The weekly reference used, Pa²h.
    pub weekly_reference_pa2h: f64,
    /// Seconds listened inside the shift window.
    pub shift_listened_s: f64,
}

/// A ledger of listening exposures: plain data, validated on entry.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize)]
pub struct ExposureLedger {
    exposures: Vec<Exposure>,
}

impl ExposureLedger {
    /// An empty ledger.
    pub fn new() -> Self {
        ExposureLedger::default()
    }

    /// A ledger holding `exposures` (for example read back from the store).
    ///
    /// # Errors
    ///
    /// The first exposure with an empty operator, a non-finite level or a negative or
    /// non-finite duration, by index.
    pub fn from_exposures(exposures: Vec<Exposure>) -> Result<Self, DoseError> {
        for (i, e) in exposures.iter().enumerate() {
            check_exposure(Subject::Exposure(i), &e.operator, e.level_dba, e.duration_s)?;
        }
        Ok(ExposureLedger { exposures })
    }

    /// Add one exposure.
    ///
    /// # Errors
    ///
    /// As [`ExposureLedger::from_exposures`]; the ledger is unchanged then.
    pub fn push(&mut self, exposure: Exposure) -> Result<(), DoseError> {
        let subject = Subject::Exposure(self.exposures.len());
        check_exposure(
            subject,
            &exposure.operator,
            exposure.level_dba,
            exposure.duration_s,
        )?;
        self.exposures.push(exposure);
        Ok(())
    }

    /// The exposures, in the order they were entered.
    pub fn exposures(&self) -> &[Exposure] {
        &self.exposures
    }

    /// `operator`'s NIOSH dose over `shift` and weekly dose over the 7 days up to `now_unix_s`.
    ///
    /// # Errors
    ///
    /// A shift of no length, or a policy whose thresholds are out of order.
    pub fn status(
        &self,
        operator: &str,
        shift: ShiftWindow,
        now_unix_s: i64,
        policy: &DosePolicy,
    ) -> Result<DoseStatus, DoseError> {
        check_policy(policy)?;
        if !(shift.length_s.is_finite() && shift.length_s > 0.0) {
            return Err(DoseError::BadShift {
                found_s: shift.length_s,
            });
        }
        let shift_from = shift.start_unix_s as f64;
        let shift_to = shift_from + shift.length_s;
        let week_from = (now_unix_s - WEEK_S) as f64;
        let mut niosh_percent = 0.0;
        let mut weekly_pa2h = 0.0;
        let mut shift_listened_s = 0.0;
        for e in self.exposures.iter().filter(|e| e.operator == operator) {
            let in_shift_s = overlap_s(e.start_unix_s, e.duration_s, shift_from, shift_to);
            niosh_percent += niosh_dose_percent(e.level_dba, in_shift_s);
            shift_listened_s += in_shift_s;
            let in_week_s = overlap_s(e.start_unix_s, e.duration_s, week_from, f64::INFINITY);
            weekly_pa2h += sound_exposure_pa2h(e.level_dba, in_week_s);
        }
        let reference_pa2h = policy.weekly_reference.pa2h();
        Ok(DoseStatus {
            niosh_percent,
            weekly_pa2h,
            weekly_percent: 100.0 * weekly_pa2h / reference_pa2h,
            weekly_reference_pa2h: reference_pa2h,
            shift_listened_s,
        })
    }

    /// Whether `operator` may start a listening step of `duration_s` at `level_dba` now. The
    /// step counts in full in both windows (it starts now, inside the shift).
    ///
    /// # Errors
    ///
    /// As [`ExposureLedger::status`], and an empty operator, non-finite level or negative
    /// duration for the step.
    pub fn decide_next(
        &self,
        operator: &str,
        shift: ShiftWindow,
        now_unix_s: i64,
        level_dba: f64,
        duration_s: f64,
        policy: &DosePolicy,
    ) -> Result<DoseDecision, DoseError> {
        check_exposure(Subject::NextStep, operator, level_dba, duration_s)?;
        let status = self.status(operator, shift, now_unix_s, policy)?;
        let niosh_left = (policy.refuse_percent - status.niosh_percent).max(0.0) / 100.0;
        let niosh = DoseFigure {
            current_percent: status.niosh_percent,
            after_percent: status.niosh_percent + niosh_dose_percent(level_dba, duration_s),
            minutes_left_at_level: minutes_left(niosh_left, niosh_allowed_min(level_dba)),
        };
        let reference_pa2h = policy.weekly_reference.pa2h();
        let weekly_left = (policy.refuse_percent - status.weekly_percent).max(0.0) / 100.0;
        let weekly = DoseFigure {
            current_percent: status.weekly_percent,
            after_percent: status.weekly_percent
                + 100.0 * sound_exposure_pa2h(level_dba, duration_s) / reference_pa2h,
            minutes_left_at_level: minutes_left(
                weekly_left,
                reference_pa2h / mean_square_pa2(level_dba) * 60.0,
            ),
        };
        // The governing figure is the counted one with the highest dose after the step.
        let governing = if policy.weekly_dose_limits && weekly.after_percent > niosh.after_percent {
            DoseCriterion::Weekly
        } else {
            DoseCriterion::Niosh
        };
        let after = match governing {
            DoseCriterion::Niosh => niosh.after_percent,
            DoseCriterion::Weekly => weekly.after_percent,
        };
        let verdict = if after >= policy.refuse_percent {
            DoseVerdict::Refuse
        } else if after >= policy.warn_percent {
            DoseVerdict::Warn
        } else {
            DoseVerdict::Allowed
        };
        let minutes_left_at_level = if policy.weekly_dose_limits {
            niosh
                .minutes_left_at_level
                .min(weekly.minutes_left_at_level)
        } else {
            niosh.minutes_left_at_level
        };
        Ok(DoseDecision {
            verdict,
            governing,
            level_dba,
            duration_s,
            niosh,
            weekly,
            minutes_left_at_level,
            policy: *policy,
        })
    }
}

/// Whether the next listening step may start.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum DoseVerdict {
    /// Below the warning threshold after the step.
    Allowed,
    /// At or above the warning threshold after the step, below the refusal threshold.
    Warn,
    /// The step would reach or pass the refusal threshold: do not start it.
    Refuse,
}

/// Which dose figure decided.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum DoseCriterion {
    /// NIOSH REL, per shift.
    Niosh,
    /// WHO/ITU-T H.870, per week.
    Weekly,
}

/// One dose figure before and after the next step.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct DoseFigure {
    /// Dose now, %.
    pub current_percent: f64,
    /// Dose after the step, %.
    pub after_percent: f64,
    /// Minutes of listening at the step's level from now until the refusal threshold (0 when
    /// already there).
    pub minutes_left_at_level: f64,
}

/// The decision for the next listening step, with the numbers for a plain-words message
/// (its `Display` is that message).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DoseDecision {
    /// Allowed, warn or refuse.
    pub verdict: DoseVerdict,
    /// The figure that decided (the counted one with the highest dose after the step).
    pub governing: DoseCriterion,
    /// The step's level, dB(A).
    pub level_dba: f64,
    /// The step's duration, s.
    pub duration_s: f64,
    /// NIOSH dose over the shift.
    pub niosh: DoseFigure,
    /// Weekly sound dose (WHO/ITU-T H.870) over the last 7 days.
    pub weekly: DoseFigure,
    /// Minutes left at this level before a counted figure reaches the refusal threshold.
    pub minutes_left_at_level: f64,
    /// The policy applied.
    pub policy: DosePolicy,
}

impl fmt::Display for DoseDecision {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let head = match self.verdict {
            DoseVerdict::Allowed => "listening step allowed",
            DoseVerdict::Warn => "hearing dose warning",
            DoseVerdict::Refuse => "listening step refused",
        };
        let verb = match self.verdict {
            DoseVerdict::Refuse => "would take",
            _ => "takes",
        };
        write!(
            f,
            "{head}: {:.1} dB(A) for {:.0} s {verb} the NIOSH shift dose from {:.1} % to {:.1} % \
             and the weekly dose (WHO/ITU-T H.870, {} {} Pa²h) from {:.1} % to {:.1} %",
            self.level_dba,
            self.duration_s,
            self.niosh.current_percent,
            self.niosh.after_percent,
            self.policy.weekly_reference.words(),
            self.policy.weekly_reference.pa2h(),
            self.weekly.current_percent,
            self.weekly.after_percent,
        )?;
        match self.verdict {
            DoseVerdict::Allowed => write!(
                f,
                "; {:.0} min left at this level",
                self.minutes_left_at_level
            ),
            DoseVerdict::Warn => write!(
                f,
                "; warning from {:.0} %, refusal at {:.0} %; {:.0} min left at this level",
                self.policy.warn_percent, self.policy.refuse_percent, self.minutes_left_at_level
            ),
            DoseVerdict::Refuse => write!(
                f,
                "; refusal at {:.0} %; {:.1} min left at this level; lower the level, shorten \
                 the step or let another operator listen",
                self.policy.refuse_percent, self.minutes_left_at_level
            ),
        }
    }
}
