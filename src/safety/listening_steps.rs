//! The listening steps of one unit: the operator hears the unit and answers pass or fail.
//!
//! Played only for a unit whose measured checks passed (README, "Listening steps"). Each
//! step's sweep is capped by its A-weighted level at the reference position (from the
//! unit's corrected response) and by the guard's limits, counted against the operator's
//! noise dose (NIOSH over the shift, WHO/ITU-T H.870 over seven days), played under the
//! guard, and judged by the operator's answer. The caller reads the dose ledger (the store
//! is above this layer) and adds the step results to the unit.

use super::dose::{DosePolicy, DoseVerdict, ExposureLedger, ShiftWindow};
use super::event::{to_json, SafetyEvent, SafetyKind};
use super::setup::{correction_at, SafetySetup, SCALE_MARGIN_DB};
use crate::analysis::ChannelMeasurement;
use crate::checks::{check_channels, CheckResult};
use crate::plan::{CheckKind, Plan};
use crate::rig::{Rig, RigError};
use crate::Verdict;

/// One listening step as it happened, for the store: what the operator heard, and the
/// safety events it raised.
#[derive(Debug, Clone)]
pub struct Heard {
    /// Start, unix seconds.
    pub start_unix_s: i64,
    /// A-weighted level at the reference position, dB(A); `None` when it did not play.
    pub level_dba: Option<f64>,
    /// Duration, s.
    pub duration_s: f64,
    /// Its safety events (scale-down, dose warning or refusal).
    pub events: Vec<SafetyEvent>,
}

/// What the listening steps of one unit gave.
#[derive(Debug, Clone, Default)]
pub struct ListeningOutcome {
    /// One check result per step and channel group, in plan order.
    pub checks: Vec<CheckResult>,
    /// The steps as heard (or refused), for the store.
    pub heard: Vec<Heard>,
    /// Safety notes in words, for the unit's safety report.
    pub notes: Vec<String>,
}

/// Why the listening steps could not go on.
#[derive(Debug, thiserror::Error)]
pub enum ListeningError {
    /// The step's signal cannot be made (a plan problem).
    #[error("{0}")]
    Signal(String),
    /// The operator's dose ledger could not be read or used: test the unit again.
    #[error("{0}")]
    Dose(String),
    /// The rig failed while playing a step.
    #[error(transparent)]
    Rig(#[from] RigError),
}

/// The bench a unit's listening steps play on.
pub struct ListeningBench<'a> {
    /// The plan (its listening checks).
    pub plan: &'a Plan,
    /// Hearing safety on this bench.
    pub safety: &'a SafetySetup,
    /// The analysis grid, Hz (of the measured responses).
    pub grid_hz: &'a [f64],
    /// Number of device outputs the stimulus drives.
    pub n_outputs: usize,
    /// The operator who listens.
    pub operator: &'a str,
    /// The operator's exposures since the given unix time (seven days back from now).
    pub ledger: &'a dyn Fn(i64) -> Result<ExposureLedger, String>,
}

/// Play and judge the listening steps of unit `serial`, whose measured verdict is
/// `measured` and whose corrected measurements are `channels` (plan order). `listen` asks
/// the operator (pass, fail, or `None` for no answer).
pub fn run_listening_steps(
    b: &ListeningBench,
    rig: &mut dyn Rig,
    serial: &str,
    measured: Verdict,
    channels: &[ChannelMeasurement],
    listen: &dyn Fn(&str) -> Option<bool>,
) -> Result<ListeningOutcome, ListeningError> {
    let plan = b.plan;
    let mut out = ListeningOutcome::default();
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
        let judged = |out: &mut ListeningOutcome, verdict: Verdict, detail: String| {
            out.checks.push(CheckResult {
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
                &mut out,
                Verdict::Retest,
                format!("not played: the measured checks gave {}", measured.word()),
            );
            continue;
        }
        let fs = plan.sample_rate_hz;
        let band_hz = (band.low_hz, band.high_hz);
        let pad_s = 0.05;
        let sweep = super::listening::listening_sweep(fs, band_hz, level_dbfs, duration_s, pad_s)
            .map_err(|e| ListeningError::Signal(e.to_string()))?;
        let signal: Vec<f32> = sweep.samples().into_iter().map(|v| v as f32).collect();
        // The loudest moment must keep the guard's limits too: a sweep is at one frequency
        // at a time, so its instantaneous peak at the microphone at f is A·(V/FS)·|H_mic(f)|,
        // against the limit the guard applies at f.
        let mut inst_headroom_db = f64::INFINITY;
        // The level each ear would get: per channel from its corrected response in dB
        // SPL/V (a dB FS/FS response with the bench's gains), the loudest decides.
        let mut la_max = f64::NEG_INFINITY;
        let mut unbounded = None;
        for name in &names {
            let Some(i) = plan.channel_index(name) else {
                continue;
            };
            let path = &b.safety.paths[i];
            let m = &channels[i];
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
            let response: Vec<(f64, f64)> = b
                .grid_hz
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
                let c = correction_at(path, f);
                let mic_peak_db = peak_v_db + h - c;
                let limit = b.safety.mic_peak_limit_db(path, f, f);
                inst_headroom_db = inst_headroom_db.min(limit - mic_peak_db);
            }
            match super::listening::reference_level_dba(&signal, fs, v, &response) {
                Ok(la) => la_max = la_max.max(la),
                Err(_) => {
                    unbounded = Some(name.clone());
                    break;
                }
            }
        }
        if let Some(name) = unbounded {
            judged(
                &mut out,
                Verdict::Retest,
                format!(
                    "not played: its level at the reference position cannot be bounded for \
                     channel {name} (no drive or microphone calibration)"
                ),
            );
            continue;
        }
        let caps = &b.safety.caps;
        let cap = caps.max_spl_reference_dba - SCALE_MARGIN_DB;
        let gain_db = (cap - la_max)
            .min(inst_headroom_db - SCALE_MARGIN_DB)
            .min(0.0);
        let la = la_max + gain_db;
        let mut events: Vec<SafetyEvent> = Vec::new();
        if gain_db < 0.0 {
            let words = format!(
                "listening step {} scaled down by {:.1} dB: it would reach {la_max:.1} dB(A) at \
                 the reference position (cap {:.1} dB(A)) and its loudest moment would pass \
                 the guard's limit by {:.1} dB",
                spec.id,
                -gain_db,
                caps.max_spl_reference_dba,
                (-inst_headroom_db).max(0.0)
            );
            out.notes.push(words.clone());
            let detail = serde_json::json!({
                "step": spec.id,
                "gain_db": gain_db,
                "planned_reference_dba": la_max,
                "played_reference_dba": la,
                "cap_reference_dba": caps.max_spl_reference_dba,
                "guard_headroom_db": inst_headroom_db,
            });
            events.push(SafetyEvent {
                kind: SafetyKind::ListeningScaledDown,
                message: words,
                detail_json: detail.to_string(),
            });
        }
        // The operator's dose: this shift (the last 8 h) and the last 7 days.
        let now = time::OffsetDateTime::now_utc().unix_timestamp();
        let ledger = (b.ledger)(now - 7 * 24 * 3600).map_err(ListeningError::Dose)?;
        // The window reaches an hour past now, so that a step still running at `now` (a
        // simulated rig plays faster than real time) counts whole, not pro rata.
        let shift = ShiftWindow {
            start_unix_s: now - 8 * 3600,
            length_s: 9.0 * 3600.0,
        };
        let decision = ledger
            .decide_next(
                b.operator,
                shift,
                now,
                la,
                duration_s,
                &DosePolicy::default(),
            )
            .map_err(|e| ListeningError::Dose(e.to_string()))?;
        let words = decision.to_string();
        match decision.verdict {
            DoseVerdict::Allowed => {}
            DoseVerdict::Warn => events.push(SafetyEvent {
                kind: SafetyKind::DoseWarning,
                message: words.clone(),
                detail_json: to_json(&decision),
            }),
            DoseVerdict::Refuse => events.push(SafetyEvent {
                kind: SafetyKind::DoseRefused,
                message: words.clone(),
                detail_json: to_json(&decision),
            }),
        }
        if decision.verdict != DoseVerdict::Allowed {
            out.notes.push(format!("operator {}: {words}", b.operator));
        }
        if decision.verdict == DoseVerdict::Refuse {
            judged(&mut out, Verdict::Retest, format!("not played: {words}"));
            out.heard.push(Heard {
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
        let mut outputs = vec![vec![0.0f32; n]; b.n_outputs];
        for name in &names {
            if let Some(i) = plan.channel_index(name) {
                let o = plan.channels[i].output;
                for (d, &x) in outputs[o][pad..].iter_mut().zip(&signal) {
                    *d = (f64::from(x) * g) as f32;
                }
            }
        }
        rig.arm_guard(Some(b.safety.guard_for_sweep_params(&sweep, n)));
        let capture = rig.play_raw(&outputs, fs, plan.n_inputs())?;
        out.heard.push(Heard {
            start_unix_s: now,
            level_dba: Some(la),
            duration_s,
            events,
        });
        if let Some(t) = capture.guard_trip {
            judged(
                &mut out,
                Verdict::Retest,
                format!(
                    "hearing-safety guard tripped while listening (input {} at {:.3} FS, limit \
                     {:.3} FS)",
                    t.input + 1,
                    t.peak_fs,
                    t.limit_fs
                ),
            );
            continue;
        }
        let prompt = format!(
            "listen to {serial} ({label}, {:.0} Hz–{:.0} Hz, {la:.1} dB(A) at the ear): pass or \
             fail?",
            band_hz.0, band_hz.1
        );
        let detail = format!("{la:.1} dB(A) at the reference position for {duration_s:.1} s");
        match listen(&prompt) {
            Some(true) => judged(&mut out, Verdict::Pass, format!("operator: pass; {detail}")),
            Some(false) => judged(&mut out, Verdict::Fail, format!("operator: fail; {detail}")),
            None => judged(
                &mut out,
                Verdict::Retest,
                format!("no answer from the operator; {detail}"),
            ),
        }
    }
    Ok(out)
}
