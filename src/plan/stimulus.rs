//! The `stimulus:` section: the synchronized exponential sweep, its fades and the silences
//! around it. Its schema ([`RawStimulus`]) and its validation, which also synchronizes the
//! sweep ([`SweepParams::synchronized`]) so that later sections can check against it.

use super::raw::Section;
use super::validate::Validator;
use super::StimulusSpec;
use crate::config::{label, Pos};
use crate::dsp::sweep::SweepParams;
use marked_yaml::Spanned;
use serde::Deserialize;

/// Default half-cosine fade-in and fade-out, s.
pub const DEFAULT_FADE_S: f64 = 0.005;
/// Default silence before the sweep, s.
pub const DEFAULT_SILENCE_BEFORE_S: f64 = 0.1;
/// Default silence after the sweep, s.
pub const DEFAULT_SILENCE_AFTER_S: f64 = 0.2;
/// Shortest silence before the sweep, s: the SNR noise window needs it.
pub const MIN_SILENCE_BEFORE_S: f64 = 0.02;
/// Longest silence before or after the sweep, s.
pub const MAX_SILENCE_S: f64 = 10.0;
/// Range of the requested sweep duration, s.
pub const DURATION_RANGE_S: (f64, f64) = (0.1, 60.0);
/// Range of the sweep's peak level, dBFS.
pub const LEVEL_RANGE_DBFS: (f64, f64) = (-100.0, 0.0);

/// `stimulus:` keys (frequencies Hz, durations s, level dBFS).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawStimulus {
    /// Sweep start frequency, Hz.
    pub start_hz: Option<Spanned<f64>>,
    /// Sweep stop frequency, Hz.
    pub stop_hz: Option<Spanned<f64>>,
    /// Requested sweep duration, s.
    pub duration_s: Option<Spanned<f64>>,
    /// Peak level, dBFS.
    pub level_dbfs: Option<Spanned<f64>>,
    /// Fade-in, s.
    pub fade_in_s: Option<Spanned<f64>>,
    /// Fade-out, s.
    pub fade_out_s: Option<Spanned<f64>>,
    /// Silence before the sweep, s.
    pub silence_before_s: Option<Spanned<f64>>,
    /// Silence after the sweep, s.
    pub silence_after_s: Option<Spanned<f64>>,
}

/// The sweep band, once both ends are known to be valid: bands, limit lines and
/// normalisation frequencies of the checks must lie inside it.
#[derive(Clone, Copy)]
pub(super) struct SweepBand {
    /// Sweep start frequency, Hz.
    pub(super) start_hz: f64,
    /// Sweep stop frequency, Hz.
    pub(super) stop_hz: f64,
}

impl Validator {
    /// `stimulus:`: the typed section, the synchronized sweep (when the sweep keys and
    /// `sample_rate_hz` are valid) and the sweep band (when both ends are).
    pub(super) fn stimulus(
        &mut self,
        sec: &Section<RawStimulus>,
        sample_rate_hz: Option<u32>,
    ) -> (Option<StimulusSpec>, Option<SweepParams>, Option<SweepBand>) {
        let s = &sec.value;
        let ctx = "stimulus";
        let l = |k: &str| label(ctx, k);

        let start = self
            .required(sec, &s.start_hz, ctx, "start_hz")
            .and_then(|v| {
                let x = self.finite(v, &l("start_hz"))?;
                if x > 0.0 {
                    Some(x)
                } else {
                    self.report(
                        Pos::of_value(v),
                        format!(
                            "{}: expected a frequency above 0 Hz, found {x}",
                            l("start_hz")
                        ),
                    );
                    None
                }
            });
        let stop = self
            .required(sec, &s.stop_hz, ctx, "stop_hz")
            .and_then(|v| {
                let x = self.finite(v, &l("stop_hz"))?;
                let mut ok = true;
                if let Some(f1) = start {
                    if x <= f1 {
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "{}: expected a frequency above start_hz {f1} Hz, found {x}",
                                l("stop_hz")
                            ),
                        );
                        ok = false;
                    }
                }
                if let Some(fs) = sample_rate_hz {
                    let nyquist = f64::from(fs) / 2.0;
                    if ok && x >= nyquist {
                        self.report(
                            Pos::of_value(v),
                            format!(
                            "{}: expected a frequency below the Nyquist frequency {nyquist} Hz \
                             (half of sample_rate_hz {fs}), found {x}",
                            l("stop_hz")
                        ),
                        );
                        ok = false;
                    }
                } else {
                    ok = false;
                }
                (ok && x > 0.0).then_some(x)
            });
        let (dlo, dhi) = DURATION_RANGE_S;
        let duration = self
            .required(sec, &s.duration_s, ctx, "duration_s")
            .and_then(|v| self.in_range(v, &l("duration_s"), dlo, dhi, " s"));
        let (llo, lhi) = LEVEL_RANGE_DBFS;
        let level = self
            .required(sec, &s.level_dbfs, ctx, "level_dbfs")
            .and_then(|v| self.in_range(v, &l("level_dbfs"), llo, lhi, " dBFS"));
        let mut non_negative = |v: &Option<Spanned<f64>>, key: &str, default: f64| match v {
            None => Some(default),
            Some(v) => {
                let x = self.finite(v, &l(key))?;
                if x >= 0.0 {
                    Some(x)
                } else {
                    self.report(
                        Pos::of_value(v),
                        format!("{}: expected 0 s or more, found {x}", l(key)),
                    );
                    None
                }
            }
        };
        let fade_in = non_negative(&s.fade_in_s, "fade_in_s", DEFAULT_FADE_S);
        let fade_out = non_negative(&s.fade_out_s, "fade_out_s", DEFAULT_FADE_S);
        let silence_before = match &s.silence_before_s {
            None => Some(DEFAULT_SILENCE_BEFORE_S),
            Some(v) => self.in_range(
                v,
                &l("silence_before_s"),
                MIN_SILENCE_BEFORE_S,
                MAX_SILENCE_S,
                " s (the silence before the sweep is the noise window of the SNR estimate)",
            ),
        };
        let silence_after = match &s.silence_after_s {
            None => Some(DEFAULT_SILENCE_AFTER_S),
            Some(v) => self.in_range(v, &l("silence_after_s"), 0.0, MAX_SILENCE_S, " s"),
        };

        let mut sweep = None;
        if let (Some(fs), Some(f1), Some(f2), Some(t)) = (sample_rate_hz, start, stop, duration) {
            match SweepParams::synchronized(fs, f1, f2, t, 1.0, 0.0, 0.0, 0.0) {
                Ok(p) => sweep = Some(p),
                Err(e) => {
                    let pos = s.duration_s.as_ref().map_or(sec.pos, Pos::of_value);
                    self.report(pos, format!("{}: {e}", l("duration_s")));
                }
            }
        }
        let mut fades_ok = true;
        if let (Some(p), Some(fi), Some(fo)) = (&sweep, fade_in, fade_out) {
            let half = p.duration_s / 2.0;
            if fi + fo > half {
                let (key, value) = match (&s.fade_out_s, &s.fade_in_s) {
                    (Some(v), _) => ("fade_out_s", Some(v)),
                    (None, Some(v)) => ("fade_in_s", Some(v)),
                    (None, None) => ("fade_out_s", None),
                };
                self.report(
                    value.map_or(sec.pos, Pos::of_value),
                    format!(
                        "{}: expected fade_in_s + fade_out_s of at most half the sweep \
                         ({half:.4} s of the synchronized {:.4} s), found {} s",
                        l(key),
                        p.duration_s,
                        fi + fo
                    ),
                );
                fades_ok = false;
            }
        }
        let spec = (|| {
            fades_ok.then_some(())?;
            Some(StimulusSpec {
                start_hz: start?,
                stop_hz: stop?,
                duration_s: duration?,
                level_dbfs: level?,
                fade_in_s: fade_in?,
                fade_out_s: fade_out?,
                silence_before_s: silence_before?,
                silence_after_s: silence_after?,
            })
        })();
        let band = match (start, stop) {
            (Some(start_hz), Some(stop_hz)) => Some(SweepBand { start_hz, stop_hz }),
            _ => None,
        };
        (spec, sweep, band)
    }
}
