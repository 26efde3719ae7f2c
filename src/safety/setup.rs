//! Hearing safety on one bench, per unit: the plan-time budget, the pilot tone before the
//! sweep and the decision it leads to, and the guard armed while the sweep plays.
//!
//! [`SafetySetup`] is built once per plan on a station from the caps, the bench's gains (the
//! calibration, or the simulated rig's own constants) and the plan; [`SafetySetup::run`]
//! then tests one unit through any [`Rig`]:
//!
//! 1. the pilot ([`pilot`]) on every driven output at once, [`pilot::DEFAULT_BELOW_SWEEP_DB`]
//!    below the sweep, guarded like the sweep;
//! 2. per channel, the pilot's level at the microphone gives the unit's real sensitivity at
//!    the pilot frequency; the sweep's worst level at the microphone and at the reference
//!    position is extrapolated from it (plus the declared response peak above the
//!    sensitivity and the correction's range) and the sweep is played as planned, scaled
//!    down, or abandoned ([`pilot::decide_sweep`]; never scaled up);
//! 3. the sweep plays with the guard armed: a watched input over its limit fades every output
//!    to silence ([`crate::rig::Guard`]).

use super::budget::{correction_extremes, max_a_weighting_db, Budget, SINE_CREST_DB};
use super::event::{SafetyEvent, SafetyKind};
use super::monitor::{decide_monitor, drive_peak_limit_v, MonitorChannel, MonitorPath};
use super::pilot::{self, PilotReading, PilotSpec, ReadSettings, SweepDecision, SweepLimits};
use super::weighting::a_weighting_db;
use crate::dsp::sweep::Stimulus;
use crate::rig::{Capture, Guard, GuardTrip, Rig, RigError};
use crate::station::Caps;

/// The pilot frequency, Hz: inside every earphone's band, where A-weighting is 0 dB and
/// where declared sensitivities are usually given (common practice).
pub const PILOT_FREQ_HZ: f64 = 1000.0;
/// Margin kept under a cap when a sweep is scaled down, dB (covers the pilot's reading error
/// and a unit's small nonlinearity between the pilot and the sweep level).
pub const SCALE_MARGIN_DB: f64 = 1.0;
/// A sweep scaled down by more than this is abandoned: its signal-to-noise ratio would no
/// longer support a verdict, and a unit that much louder than declared is suspect anyway.
pub const MAX_SCALE_DOWN_DB: f64 = 20.0;
/// Response peak above the sensitivity assumed when the plan declares no product: earphone
/// responses in an ear simulator rise some 10–15 dB at the ear-canal resonance (from
/// memory); the larger value is taken.
pub const ASSUMED_RESPONSE_PEAK_DB: f64 = 15.0;
/// Guard watch block, s: the level is checked once per block of about 5 ms.
pub const GUARD_BLOCK_S: f64 = 256.0 / 48_000.0;
/// Pre-roll before the pilot, s: the pilot reading takes its noise from it and needs at least
/// one analysis window (the pilot's steady part, 80 ms).
pub const PILOT_PRE_ROLL_S: f64 = 0.1;

/// One plan channel's path on the bench, as far as safety needs it.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SafePath {
    /// Plan channel name.
    pub channel: String,
    /// Device output (0-based).
    pub output: usize,
    /// Device input (0-based).
    pub input: usize,
    /// Volts peak per full scale of the output, when known.
    pub drive_v_peak_per_fs: Option<f64>,
    /// Full scale per pascal of the input's microphone, when known.
    pub mic_fs_per_pa: Option<f64>,
    /// The fixture→reference correction over the sweep band as (frequency Hz, 20·lg|C| dB)
    /// points; `None` = not corrected (the fixture is taken as the reference).
    #[serde(skip)]
    pub correction_db: Option<Vec<(f64, f64)>>,
    /// 20·lg|C| over the sweep band, (min, max); `None` = not corrected.
    pub correction_db_range: Option<(f64, f64)>,
    /// 20·lg|C| at the pilot frequency (0 when not corrected).
    pub correction_at_pilot_db: f64,
}

/// Everything fixed per plan on a bench.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SafetySetup {
    /// The station's caps.
    pub caps: Caps,
    /// Where the gains come from (`calibration <sha256>`, `simulated rig constants`, or
    /// `none`).
    pub gains_source: String,
    /// Per plan channel.
    pub paths: Vec<SafePath>,
    /// The station's drive monitors (empty: the drive is not monitored and the drive caps
    /// rest on the calibration).
    pub monitors: Vec<MonitorPath>,
    /// The sweep's plan-time budget.
    pub budget: Budget,
    /// Planned sweep level, dBFS.
    pub sweep_dbfs: f64,
    /// Sweep band, Hz.
    pub band_hz: (f64, f64),
    /// The declared response peak above the sensitivity (or [`ASSUMED_RESPONSE_PEAK_DB`]).
    pub response_peak_db: f64,
    /// Largest rig latency the pilot reading searches, s.
    pub max_latency_s: f64,
}

/// The pilot's reading on one channel and what it implies.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct PilotChannel {
    /// Plan channel.
    pub channel: String,
    /// The reading (level in dBFS at the input, SNR, presence, clipping).
    pub reading: PilotReading,
    /// Rms level at the microphone, dB SPL (with a microphone calibration).
    pub spl_db: Option<f64>,
    /// The unit's sensitivity at the pilot frequency at the microphone, dB SPL/V (with both
    /// calibrations).
    pub sensitivity_db_spl_per_v: Option<f64>,
    /// What this channel alone would allow.
    pub decision: SweepDecision,
}

/// The pilot step of one unit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct PilotReport {
    /// The tone played.
    pub spec: PilotSpec,
    /// Per channel with a calibrated microphone.
    pub channels: Vec<PilotChannel>,
    /// Per drive monitor whose output the pilot drove.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub monitors: Vec<MonitorChannel>,
    /// The unit's decision: the most restrictive channel's or monitor's.
    pub decision: SweepDecision,
}

/// What safety did for one unit (the `safety` section of the result JSON).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct UnitSafety {
    /// Where the gains came from.
    pub gains_source: String,
    /// The station's caps.
    pub caps: Caps,
    /// The sweep's plan-time budget.
    pub budget: Budget,
    /// The pilot, when one was played (needs a microphone calibration).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pilot: Option<PilotReport>,
    /// Lowest gain applied to the planned sweep on any output, dB (0 = as planned; negative
    /// = scaled down; each output's own gain is in the events).
    pub sweep_gain_db: f64,
    /// Per input channel watched, the guard's lowest limit during the sweep, full scale.
    pub guard_limits_fs: Vec<Option<f64>>,
    /// The guard's trip, if it tripped.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub guard_trip: Option<GuardTrip>,
    /// Every refusal, scale-down, trip and warning, in words.
    pub events: Vec<String>,
    /// The events the store keeps in its safety-event chain, typed where they happened.
    #[serde(skip)]
    pub audit_events: Vec<SafetyEvent>,
}

impl UnitSafety {
    /// The sweep is abandoned for `reason`: said in words and kept for the audit trail with
    /// the pilot's numbers.
    fn abandon(&mut self, reason: &str) {
        self.events.push(reason.to_string());
        self.audit_events.push(SafetyEvent::new(
            SafetyKind::SweepAbandoned,
            reason,
            &self.pilot,
        ));
    }
}

/// How one unit's safe run ended.
pub enum SafeOutcome {
    /// The sweep played (possibly scaled down, possibly tripped: see the safety report).
    Swept {
        /// Capture of the sweep, as recorded.
        capture: Capture,
        /// Per plan channel, the gain its output played at relative to the plan, dB (0 = as
        /// planned): the analysis adds it back to the levels.
        drive_gain_db: Vec<f64>,
        /// What safety did.
        safety: UnitSafety,
    },
    /// The sweep was not played (verdict retest); the capture is the pilot's.
    Abandoned {
        /// The pilot capture.
        capture: Capture,
        /// Why, in words.
        reason: String,
        /// What safety did.
        safety: UnitSafety,
    },
}

impl SafetySetup {
    /// The guard for these paths while a signal plays whose frequency in watch block `b`
    /// lies in `band_of_block(b)` (Hz, low and high). Each microphone input is watched
    /// against the lower of the microphone's peak cap and the reference position's peak cap
    /// brought to the microphone at those frequencies (p_ref = C·p_mic, so p_mic ≤ cap_ref /
    /// max|C| over them), and never above the input's clipping point (a clipped input no
    /// longer says how loud it is). Harmonics of the signal lie at other frequencies; they
    /// are some 40 dB down in a unit that passes and are not counted.
    fn guard_with(
        &self,
        sample_rate_hz: u32,
        n_blocks: usize,
        band_of_block: impl Fn(usize) -> (f64, f64),
    ) -> Guard {
        let n_in = self.paths.iter().map(|p| p.input + 1).max().unwrap_or(0);
        let mut limits_fs: Vec<Option<Vec<f64>>> = vec![None; n_in];
        let clip = f64::from(pilot::CLIP_FS);
        for p in &self.paths {
            let per_block: Vec<f64> = match p.mic_fs_per_pa {
                // Uncalibrated: at least an input that clips trips the guard.
                None => vec![clip],
                Some(fs_per_pa) => (0..n_blocks.max(1))
                    .map(|b| {
                        let (lo, hi) = band_of_block(b);
                        let cap_db = self.mic_peak_limit_db(p, lo, hi);
                        let p_peak_pa = crate::calibration::P_REF_PA * 10f64.powf(cap_db / 20.0);
                        (p_peak_pa * fs_per_pa).min(clip)
                    })
                    .collect(),
            };
            limits_fs[p.input] = Some(match limits_fs[p.input].take() {
                // Two channels on one input: the lower limit block by block.
                Some(old) => (0..old.len().max(per_block.len()))
                    .map(|b| {
                        let a = old.get(b).or(old.last()).copied().unwrap_or(clip);
                        let c = per_block
                            .get(b)
                            .or(per_block.last())
                            .copied()
                            .unwrap_or(clip);
                        a.min(c)
                    })
                    .collect(),
                None => per_block,
            });
        }
        // Drive monitors: the peak volts the caps allow, on the input's scale.
        let drive_v = drive_peak_limit_v(&self.caps);
        for m in &self.monitors {
            if limits_fs.len() <= m.input {
                limits_fs.resize(m.input + 1, None);
            }
            let limit = m
                .input_v_peak_per_fs
                .map_or(clip, |v| (drive_v / v).min(clip));
            let old = limits_fs[m.input].take();
            limits_fs[m.input] = Some(match old {
                Some(v) => v.into_iter().map(|x| x.min(limit)).collect(),
                None => vec![limit],
            });
        }
        let fs = f64::from(sample_rate_hz);
        Guard {
            limits_fs,
            block_frames: self.block_frames(sample_rate_hz),
            fade_frames: ((super::ramp::DEFAULT_FADE_S * fs).round() as usize).max(1),
        }
    }

    /// The highest peak level at the microphone, dB SPL, while the signal is between
    /// `lo_hz` and `hi_hz`: the lowest of
    /// - the microphone's peak cap;
    /// - the reference position's peak cap less the largest correction there (p_ref = C·p);
    /// - each A-weighted cap plus a sine's crest factor less the largest A-weighting (and,
    ///   for the reference position, correction) there: a sine held at that peak has an
    ///   A-weighted level at the cap, so the A-weighted level of a whole sweep, an average
    ///   of such moments, stays under it.
    pub fn mic_peak_limit_db(&self, p: &SafePath, lo_hz: f64, hi_hz: f64) -> f64 {
        let c = &self.caps;
        let (lo, hi) = (lo_hz.min(hi_hz) / 1.03, lo_hz.max(hi_hz) * 1.03);
        // A(f) and A(f) + C(f) over the frequencies in between: the correction's points
        // there, the ends, and a fine log grid (A-weighting is smooth).
        let mut freqs: Vec<f64> = (0..=16)
            .map(|k| lo * (hi / lo).powf(f64::from(k) / 16.0))
            .collect();
        if let Some(points) = &p.correction_db {
            freqs.extend(
                points
                    .iter()
                    .map(|&(f, _)| f)
                    .filter(|f| (lo..=hi).contains(f)),
            );
        }
        let a_max = freqs
            .iter()
            .map(|&f| a_weighting_db(f))
            .fold(f64::NEG_INFINITY, f64::max);
        let ac_max = freqs
            .iter()
            .map(|&f| a_weighting_db(f) + correction_at(p, f))
            .fold(f64::NEG_INFINITY, f64::max);
        let c_max = max_correction_db(p, lo_hz, hi_hz);
        [
            c.max_spl_mic_peak_db,
            c.max_spl_reference_peak_db - c_max,
            c.max_spl_mic_dba + SINE_CREST_DB - a_max,
            c.max_spl_reference_dba + SINE_CREST_DB - ac_max,
        ]
        .into_iter()
        .fold(f64::INFINITY, f64::min)
    }

    fn block_frames(&self, sample_rate_hz: u32) -> usize {
        ((GUARD_BLOCK_S * f64::from(sample_rate_hz)).round() as usize).max(1)
    }

    /// The guard while a tone at `freq_hz` plays (the pilot).
    pub fn guard_for_tone(&self, sample_rate_hz: u32, freq_hz: f64) -> Guard {
        self.guard_with(sample_rate_hz, 1, |_| (freq_hz, freq_hz))
    }

    /// The guard while the plan's sweep plays: block by block, the frequencies the sweep can
    /// be at given a device latency of up to [`SafetySetup::max_latency_s`] (an exponential
    /// sweep is at f1·exp(t/L) at time t into the sweep; Farina 2000).
    pub fn guard_for_sweep(&self, stimulus: &Stimulus) -> Guard {
        let n = stimulus.channels.iter().map(Vec::len).max().unwrap_or(0);
        self.guard_for_sweep_params(&stimulus.sweep, n)
    }

    /// [`SafetySetup::guard_for_sweep`] for any sweep (`sweep.start_sample` into buffers of
    /// `n_samples`): a listening step's too.
    pub fn guard_for_sweep_params(
        &self,
        sw: &crate::dsp::sweep::SweepParams,
        n_samples: usize,
    ) -> Guard {
        let fs = f64::from(sw.sample_rate_hz);
        let block = self.block_frames(sw.sample_rate_hz);
        let n_blocks = n_samples.div_ceil(block) + 1;
        let lat = (self.max_latency_s * fs).ceil() as usize;
        let start = sw.start_sample;
        let end = start + sw.n_sweep_samples.saturating_sub(1);
        let (f1, f2, l_s) = (sw.f1_hz, sw.f2_hz, sw.l_s);
        let f_at = move |k: usize| -> f64 {
            let t = (k.clamp(start, end) - start) as f64 / fs;
            (f1 * (t / l_s).exp()).min(f2)
        };
        self.guard_with(sw.sample_rate_hz, n_blocks, move |b| {
            // Capture block b holds what was sent up to `lat` samples earlier.
            let first = (b * block).saturating_sub(lat);
            let last = (b + 1) * block;
            (f_at(first), f_at(last))
        })
    }

    /// The limits a channel's sweep must keep, in dB SPL rms at the microphone at the pilot
    /// frequency as the pilot measures it: each cap brought back to that point.
    fn pilot_cap_db(&self, p: &SafePath) -> f64 {
        let c = &self.caps;
        let peak = self.response_peak_db;
        let max_a = max_a_weighting_db(self.band_hz);
        let c_p = p.correction_at_pilot_db;
        let (c_min, mic_a) = correction_extremes(p.correction_db.as_deref(), max_a);
        // Reference position: L_ref = L_mic(pilot f) + C(pilot f) + response peak; at the
        // microphone the worst point is where C is smallest: L_mic,worst = L_ref − C_min, and
        // its A-weighted level at most L_ref + max[A(f) − C(f)] (module budget).
        [
            c.max_spl_reference_peak_db - (c_p + peak + SINE_CREST_DB),
            c.max_spl_reference_dba - (c_p + peak + max_a),
            c.max_spl_mic_peak_db - (c_p - c_min + peak + SINE_CREST_DB),
            c.max_spl_mic_dba - (c_p + peak + mic_a),
        ]
        .into_iter()
        .fold(f64::INFINITY, f64::min)
    }

    /// Test one unit safely: pilot, decision, guarded sweep. `stimulus` is the plan's.
    pub fn run(
        &self,
        rig: &mut dyn Rig,
        stimulus: &Stimulus,
        n_inputs: usize,
    ) -> Result<SafeOutcome, RigError> {
        // The monitor inputs are recorded too, whatever the plan reads.
        let n_inputs = self
            .monitors
            .iter()
            .map(|m| m.input + 1)
            .fold(n_inputs, usize::max);
        let guard = self.guard_for_sweep(stimulus);
        rig.arm_guard(Some(
            self.guard_for_tone(stimulus.sample_rate_hz, PILOT_FREQ_HZ),
        ));
        let mut safety = UnitSafety {
            gains_source: self.gains_source.clone(),
            caps: self.caps,
            budget: self.budget.clone(),
            pilot: None,
            sweep_gain_db: 0.0,
            guard_limits_fs: guard
                .limits_fs
                .iter()
                .map(|l| l.as_ref().and_then(|v| v.iter().copied().reduce(f64::min)))
                .collect(),
            guard_trip: None,
            events: self
                .budget
                .unchecked
                .iter()
                .map(|u| format!("not bounded before playing: {u}"))
                .collect(),
            audit_events: Vec::new(),
        };
        let calibrated = self.paths.iter().all(|p| p.mic_fs_per_pa.is_some());
        for m in self
            .monitors
            .iter()
            .filter(|m| m.input_v_peak_per_fs.is_none())
        {
            safety.events.push(format!(
                "the drive monitor of output {} (input {}) has no calibrated gain \
                 (`tragus calibrate monitor`): it is watched for clipping only",
                m.output + 1,
                m.input + 1
            ));
        }
        let mut gain_db = 0.0;
        let mut output_gains_db = vec![0.0f64; stimulus.channels.len()];
        if calibrated || !self.monitors.is_empty() {
            let (report, pilot_capture) = self.pilot(rig, stimulus, n_inputs)?;
            let decision = report.decision;
            safety.pilot = Some(report);
            if pilot_capture.xruns > 0 || !pilot_capture.faults.is_empty() {
                let reason = format!(
                    "sweep abandoned: the pilot tone's recording is not usable ({}); its level \
                     is unknown, so the unit was not swept",
                    if pilot_capture.faults.is_empty() {
                        format!("{} xrun(s)", pilot_capture.xruns)
                    } else {
                        pilot_capture.faults.join("; ")
                    }
                );
                safety.abandon(&reason);
                return Ok(SafeOutcome::Abandoned {
                    capture: pilot_capture,
                    reason,
                    safety,
                });
            }
            if let Some(trip) = pilot_capture.guard_trip.clone() {
                let reason = format!(
                    "hearing-safety guard tripped during the pilot tone (input {} at {:.3} FS, \
                     limit {:.3} FS); the unit was not swept",
                    trip.input + 1,
                    trip.peak_fs,
                    trip.limit_fs
                );
                safety.abandon(&reason);
                safety.audit_events.push(SafetyEvent::new(
                    SafetyKind::GuardTripped,
                    &reason,
                    &trip,
                ));
                safety.guard_trip = Some(trip);
                return Ok(SafeOutcome::Abandoned {
                    capture: pilot_capture,
                    reason,
                    safety,
                });
            }
            match decision {
                SweepDecision::Proceed { .. } => {}
                SweepDecision::ScaleDown { gain_db: g, .. } => {
                    gain_db = g;
                    let mut scaled_words = Vec::new();
                    // Each output by its own channels' decisions: a loud left bud does not
                    // make the right one quieter.
                    let report = safety.pilot.as_ref().map_or(&[][..], |r| &r.channels[..]);
                    let by_name =
                        |c: &PilotChannel| self.paths.iter().find(|p| p.channel == c.channel);
                    for (p, c) in report.iter().filter_map(|c| by_name(c).map(|p| (p, c))) {
                        if let SweepDecision::ScaleDown {
                            gain_db: g,
                            expected_db,
                            planned_expected_db,
                            ..
                        } = c.decision
                        {
                            output_gains_db[p.output] = output_gains_db[p.output].min(g);
                            scaled_words.push(format!(
                                "channel {}: sweep scaled down by {:.1} dB: the pilot says the \
                                 planned sweep would reach {planned_expected_db:.1} dB SPL at the \
                                 microphone at {} Hz, over the level the caps allow there; \
                                 played for {expected_db:.1} dB SPL",
                                p.channel, -g, PILOT_FREQ_HZ
                            ));
                        }
                    }
                    let monitors = safety.pilot.as_ref().map_or(&[][..], |r| &r.monitors[..]);
                    for m in monitors {
                        if let SweepDecision::ScaleDown {
                            gain_db: g,
                            expected_db,
                            planned_expected_db,
                            ..
                        } = m.decision
                        {
                            output_gains_db[m.output] = output_gains_db[m.output].min(g);
                            scaled_words.push(format!(
                                "output {}: sweep scaled down by {:.1} dB: its drive monitor \
                                 says the planned sweep would drive {:.3} V peak, over the \
                                 drive cap of {:.3} V; played for {:.3} V peak",
                                m.output + 1,
                                -g,
                                10f64.powf(planned_expected_db / 20.0),
                                drive_peak_limit_v(&self.caps),
                                10f64.powf(expected_db / 20.0)
                            ));
                        }
                    }
                    if gain_db < 0.0 {
                        safety.audit_events.push(SafetyEvent::new(
                            SafetyKind::SweepScaledDown,
                            scaled_words.join("; "),
                            &safety.pilot,
                        ));
                    }
                    safety.events.extend(scaled_words);
                }
                SweepDecision::Abandon { reason } => {
                    // Name the channel that stopped it, as every channel-level reason does.
                    let who = safety
                        .pilot
                        .as_ref()
                        .and_then(|r| {
                            r.channels
                                .iter()
                                .find(|c| matches!(c.decision, SweepDecision::Abandon { .. }))
                        })
                        .map(|c| format!("{}: ", c.channel))
                        .or_else(|| {
                            safety.pilot.as_ref().and_then(|r| {
                                r.monitors
                                    .iter()
                                    .find(|m| matches!(m.decision, SweepDecision::Abandon { .. }))
                                    .map(|m| format!("output {}: ", m.output + 1))
                            })
                        })
                        .unwrap_or_default();
                    let reason = format!("{who}sweep abandoned: {reason}");
                    safety.abandon(&reason);
                    return Ok(SafeOutcome::Abandoned {
                        capture: pilot_capture,
                        reason,
                        safety,
                    });
                }
            }
        }
        if !calibrated {
            safety.events.push(
                "no pilot tone at the microphones: without a microphone calibration its level \
                 cannot be judged; the guard watches the microphone inputs for clipping only"
                    .into(),
            );
        }
        safety.sweep_gain_db = gain_db;
        rig.arm_guard(Some(guard));
        let mut capture = if output_gains_db.iter().all(|&g| g == 0.0) {
            rig.play_and_capture(stimulus, n_inputs)?
        } else {
            let mut scaled = stimulus.clone();
            for (ch, &g_db) in scaled.channels.iter_mut().zip(&output_gains_db) {
                let g = 10f64.powf(g_db / 20.0);
                for s in ch.iter_mut() {
                    *s = (f64::from(*s) * g) as f32;
                }
            }
            rig.play_and_capture(&scaled, n_inputs)?
        };
        if let Some(trip) = capture.guard_trip.clone() {
            let ms = |n: usize| n as f64 * 1e3 / f64::from(stimulus.sample_rate_hz);
            let what = match self.monitors.iter().find(|m| m.input == trip.input) {
                Some(m) => match m.input_v_peak_per_fs {
                    Some(v) => format!(
                        "the drive monitor of output {} (input {}) reached {:.3} V peak \
                         (limit {:.3} V)",
                        m.output + 1,
                        m.input + 1,
                        trip.peak_fs * v,
                        trip.limit_fs * v
                    ),
                    None => format!(
                        "the drive monitor of output {} (input {}) clipped ({:.3} FS)",
                        m.output + 1,
                        m.input + 1,
                        trip.peak_fs
                    ),
                },
                None => format!(
                    "input {} reached {:.3} FS (limit {:.3} FS)",
                    trip.input + 1,
                    trip.peak_fs,
                    trip.limit_fs
                ),
            };
            let event = format!(
                "hearing-safety guard tripped: {what} at {:.1} ms; output faded to silence by \
                 {:.1} ms",
                ms(trip.first_over_sample),
                ms(trip.silent_from_sample)
            );
            safety.events.push(event.clone());
            safety
                .audit_events
                .push(SafetyEvent::new(SafetyKind::GuardTripped, &event, &trip));
            capture.faults.push(event);
            safety.guard_trip = Some(trip);
        }
        let drive_gain_db = self
            .paths
            .iter()
            .map(|p| output_gains_db[p.output])
            .collect();
        Ok(SafeOutcome::Swept {
            capture,
            drive_gain_db,
            safety,
        })
    }

    /// Play the pilot on every driven output and read it on every channel.
    fn pilot(
        &self,
        rig: &mut dyn Rig,
        stimulus: &Stimulus,
        n_inputs: usize,
    ) -> Result<(PilotReport, Capture), RigError> {
        let fs = stimulus.sample_rate_hz;
        let spec = PilotSpec::below_sweep(PILOT_FREQ_HZ, self.sweep_dbfs);
        let tone = pilot::generate_pilot(&spec, fs).map_err(|e| RigError::Fault(e.to_string()))?;
        let pre = (PILOT_PRE_ROLL_S * f64::from(fs)).round() as usize;
        let tail = (self.max_latency_s * f64::from(fs)).ceil() as usize + pre / 2;
        let n = pre + tone.len() + tail;
        let mut outputs = vec![vec![0.0f32; n]; stimulus.channels.len()];
        for &o in &stimulus.driven_outputs {
            outputs[o][pre..pre + tone.len()].copy_from_slice(&tone);
        }
        let capture = rig.play_raw(&outputs, fs, n_inputs)?;
        let settings = ReadSettings {
            tone_start: pre,
            max_latency_s: self.max_latency_s,
            min_snr_db: pilot::MIN_SNR_DB,
        };
        let mut channels = Vec::new();
        for p in self.paths.iter().filter(|p| p.mic_fs_per_pa.is_some()) {
            let samples = capture.channels.get(p.input).map_or(&[][..], Vec::as_slice);
            let reading = pilot::read_pilot(samples, fs, &spec, &settings)
                .map_err(|e| RigError::Fault(format!("pilot tone, channel {}: {e}", p.channel)))?;
            let spl_db = p.mic_fs_per_pa.map(|m| reading.spl_db(m));
            let sensitivity_db_spl_per_v = match (spl_db, p.drive_v_peak_per_fs) {
                (Some(l), Some(v)) => {
                    let v_rms = 10f64.powf(spec.level_dbfs / 20.0) * v / std::f64::consts::SQRT_2;
                    Some(l - 20.0 * v_rms.log10())
                }
                _ => None,
            };
            let limits = SweepLimits {
                cap_db: self.pilot_cap_db(p),
                margin_db: SCALE_MARGIN_DB,
                min_sweep_dbfs: self.sweep_dbfs - MAX_SCALE_DOWN_DB,
            };
            let decision = pilot::decide_sweep(
                &reading,
                spl_db.unwrap_or(reading.level_dbfs),
                spec.level_dbfs,
                self.sweep_dbfs,
                &limits,
            )
            .map_err(|e| RigError::Fault(format!("pilot tone, channel {}: {e}", p.channel)))?;
            channels.push(PilotChannel {
                channel: p.channel.clone(),
                reading,
                spl_db,
                sensitivity_db_spl_per_v,
                decision,
            });
        }
        let mut monitors = Vec::new();
        for m in &self.monitors {
            if !stimulus.driven_outputs.contains(&m.output) {
                continue;
            }
            let samples = capture.channels.get(m.input).map_or(&[][..], Vec::as_slice);
            let what = |e: pilot::PilotError| {
                RigError::Fault(format!(
                    "pilot tone, drive monitor of output {}: {e}",
                    m.output + 1
                ))
            };
            let reading = pilot::read_pilot(samples, fs, &spec, &settings).map_err(what)?;
            monitors.push(
                decide_monitor(
                    m,
                    &reading,
                    spec.level_dbfs,
                    self.sweep_dbfs,
                    self.sweep_dbfs - MAX_SCALE_DOWN_DB,
                    SCALE_MARGIN_DB,
                    &self.caps,
                )
                .map_err(what)?,
            );
        }
        let decision = most_restrictive(
            channels
                .iter()
                .map(|c| c.decision)
                .chain(monitors.iter().map(|m| m.decision)),
        );
        Ok((
            PilotReport {
                spec,
                channels,
                monitors,
                decision,
            },
            capture,
        ))
    }
}

/// The largest 20·lg|C| of a path's correction between `lo_hz` and `hi_hz` (widened by 3 %
/// either side, the grid's spacing); 0 dB when not corrected; the nearest point when none
/// lies in between.
fn max_correction_db(p: &SafePath, lo_hz: f64, hi_hz: f64) -> f64 {
    let Some(points) = p.correction_db.as_ref().filter(|v| !v.is_empty()) else {
        return 0.0;
    };
    let (lo, hi) = (lo_hz.min(hi_hz) / 1.03, lo_hz.max(hi_hz) * 1.03);
    let inside = points
        .iter()
        .filter(|(f, _)| (lo..=hi).contains(f))
        .map(|&(_, c)| c)
        .reduce(f64::max);
    inside.unwrap_or_else(|| {
        let mid = (lo * hi).sqrt();
        points
            .iter()
            .min_by(|a, b| (a.0 / mid).ln().abs().total_cmp(&(b.0 / mid).ln().abs()))
            .map_or(0.0, |&(_, c)| c)
    })
}

/// 20·lg|C| of a path's correction at `freq_hz` (linear in log frequency between its
/// points, held at the ends); 0 dB when not corrected.
pub fn correction_at(p: &SafePath, freq_hz: f64) -> f64 {
    match p.correction_db.as_deref() {
        Some(points) if !points.is_empty() => super::listening::response_at(points, freq_hz),
        _ => 0.0,
    }
}

/// The unit's decision from its channels': any abandon abandons; else the lowest gain.
fn most_restrictive(decisions: impl Iterator<Item = SweepDecision>) -> SweepDecision {
    let mut out: Option<SweepDecision> = None;
    for d in decisions {
        out = Some(match (out, d) {
            (None, d) => d,
            (Some(a @ SweepDecision::Abandon { .. }), _) => a,
            (_, d @ SweepDecision::Abandon { .. }) => d,
            (Some(a), d) => {
                if gain_of(&d) < gain_of(&a) {
                    d
                } else {
                    a
                }
            }
        });
    }
    out.unwrap_or(SweepDecision::Proceed {
        sweep_dbfs: 0.0,
        expected_db: f64::NEG_INFINITY,
    })
}

fn gain_of(d: &SweepDecision) -> f64 {
    match d {
        SweepDecision::ScaleDown { gain_db, .. } => *gain_db,
        _ => 0.0,
    }
}

/// A plan that hearing safety refuses on a bench: nothing may play. Shown as its message
/// (exit 2 at the command line) and kept in the store as a `plan_refused` event.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{message}")]
pub struct SafetyRefusal {
    /// The refusal in words, with the numbers that decided it.
    pub message: String,
    /// The plan-time budget's numbers, JSON.
    pub detail_json: String,
}

impl SafetyRefusal {
    /// The refusal as the event the store keeps.
    pub fn event(&self) -> SafetyEvent {
        SafetyEvent {
            kind: SafetyKind::PlanRefused,
            message: self.message.clone(),
            detail_json: self.detail_json.clone(),
        }
    }
}

/// What hearing safety needs to know of a plan on a bench.
pub struct BenchPaths<'a> {
    /// The plan (after the station's channel map and fixture).
    pub plan: &'a crate::plan::Plan,
    /// The analysis grid, Hz (where the corrections are tabulated).
    pub grid_hz: &'a [f64],
    /// The fixture→reference correction of each plan channel on `grid_hz`, dB (`None`: not
    /// corrected).
    pub correction_grid_db: Vec<Option<&'a [f64]>>,
    /// The station's caps.
    pub caps: Caps,
    /// The calibration that gives the bench's gains, if any.
    pub calibration: Option<&'a crate::calibration::Calibration>,
    /// The station's drive monitors.
    pub monitors: &'a [crate::station::DriveMonitor],
    /// The rig that will play.
    pub rig: crate::station::RigKind,
    /// Outside production (`--non-production` or `mode: engineering`).
    pub non_production: bool,
}

/// The station's drive monitors for this plan, with their gains: the calibration's
/// `monitor:` entries, or on the simulated rig without a calibration its own monitor gain.
/// A monitor on an input the plan records is refused (it would read the unit as volts).
fn drive_monitors(
    plan: &crate::plan::Plan,
    monitors: &[crate::station::DriveMonitor],
    cal: Option<&crate::calibration::Calibration>,
    sim_constants: bool,
) -> Result<Vec<MonitorPath>, String> {
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
            Ok(MonitorPath {
                output: m.output,
                input: m.input,
                input_v_peak_per_fs: input_v,
                calibrated_v_peak_per_fs: drive_v,
            })
        })
        .collect()
}

impl SafetySetup {
    /// Hearing safety for this plan on this bench: the bench's gains (the calibration, or
    /// the simulated rig's own constants), the correction's range per channel, and the
    /// sweep's plan-time budget, which refuses (with the numbers) a plan that could exceed a
    /// cap. A production station on a sound card needs the plan's declared product
    /// sensitivity to bound the level before playing, and every driven output monitored.
    pub fn for_plan(b: BenchPaths) -> Result<SafetySetup, SafetyRefusal> {
        use super::budget::{sine_budget, ChannelPath};
        use crate::rig::simulated::{DRIVE_V_PER_FS, MIC_FS_PER_PA};
        use crate::station::RigKind;
        let plan = b.plan;
        let cal = b.calibration;
        let (gains_source, sim_constants) = match (cal, b.rig) {
            (Some(c), _) => (format!("calibration {}", c.sha256()), false),
            (None, RigKind::Simulated) => ("simulated rig constants".to_string(), true),
            (None, RigKind::Soundcard) => ("none".to_string(), false),
        };
        let band_hz = (plan.stimulus.start_hz, plan.stimulus.stop_hz);
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
                let curve: Option<Vec<(f64, f64)>> =
                    b.correction_grid_db.get(i).copied().flatten().map(|gain| {
                        b.grid_hz
                            .iter()
                            .zip(gain)
                            .filter(|(f, _)| (band_hz.0..=band_hz.1).contains(*f))
                            .map(|(&f, &g)| (f, g))
                            .collect()
                    });
                let range = curve.as_ref().map(|pts| {
                    pts.iter()
                        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &(_, x)| {
                            (lo.min(x), hi.max(x))
                        })
                });
                // The grid is log-spaced and sorted; the nearest point above is close enough
                // for a level bound (24 or more points per octave: within 3 % of the
                // frequency).
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
            &b.caps,
        );
        let refuse = |message: String| SafetyRefusal {
            detail_json: super::event::to_json(&budget),
            message,
        };
        if let Some(refusal) = budget.refusal() {
            return Err(refuse(format!(
                "hearing safety: plan `{}`: {refusal}",
                plan.id
            )));
        }
        let production_soundcard = b.rig == RigKind::Soundcard && !b.non_production;
        if production_soundcard && !budget.unchecked.is_empty() {
            return Err(refuse(format!(
                "hearing safety: plan `{}`: production needs every sound level bounded before \
                 playing, but {}; declare the product's sensitivity (`product:` in the plan) \
                 and calibrate every drive output; nothing was played",
                plan.id,
                budget.unchecked.join("; ")
            )));
        }
        for u in &budget.unchecked {
            tracing::warn!("hearing safety: not bounded before playing: {u}");
        }
        let monitors = drive_monitors(plan, b.monitors, cal, sim_constants)
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
        if production_soundcard && !unmonitored.is_empty() {
            return Err(refuse(format!(
                "hearing safety: plan `{}`: production needs the drive of every output \
                 monitored, but output(s) {} have no drive monitor with a calibrated gain; wire \
                 each amplifier output back into a spare input, list it under \
                 `drive_monitors:` in the station file and calibrate it (`tragus calibrate \
                 monitor` or `calibrate drive --input`); nothing was played",
                plan.id,
                unmonitored
                    .iter()
                    .map(|o| (o + 1).to_string())
                    .collect::<Vec<_>>()
                    .join(", ")
            )));
        }
        Ok(SafetySetup {
            caps: b.caps,
            gains_source,
            paths,
            monitors,
            budget,
            sweep_dbfs: plan.stimulus.level_dbfs,
            band_hz,
            response_peak_db: plan
                .product
                .map_or(ASSUMED_RESPONSE_PEAK_DB, |p| p.response_peak_db),
            max_latency_s: match b.rig {
                RigKind::Simulated => pilot::DEFAULT_MAX_LATENCY_S,
                // Through a sound server the latency is tens of milliseconds and moves
                // between runs (measured 53–75 ms through PulseAudio here).
                RigKind::Soundcard => 0.3,
            },
        })
    }
}
