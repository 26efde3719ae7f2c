//! Stage two of plan loading: validation and the typed [`Plan`].
//!
//! [`load_plan`] reads the file, [`super::raw::parse`] (stage one) decodes it, and
//! [`Plan::from_raw`] checks every field and cross-field rule, reads limit-line CSV files
//! relative to the plan ([`limit_csv`]), fills in defaults, converts channel numbers from
//! the 1-based numbers of the YAML to the 0-based indices of [`ChannelSpec`], and hashes the
//! result ([`super::hash`]). Every problem of both stages is returned at once, each at the
//! value that caused it, sorted by file, line and column.
//!
//! # Defaults
//!
//! | key | default | why |
//! | --- | --- | --- |
//! | `description` | empty | |
//! | `stimulus.fade_in_s`, `fade_out_s` | [`DEFAULT_FADE_S`] = 5 ms | a half-cosine this long removes the click of the sweep's abrupt ends at a cost of a few samples (common practice) |
//! | `stimulus.silence_before_s` | [`DEFAULT_SILENCE_BEFORE_S`] = 0.1 s | room for the noise window of the SNR estimate, at least [`MIN_SILENCE_BEFORE_S`] |
//! | `stimulus.silence_after_s` | [`DEFAULT_SILENCE_AFTER_S`] = 0.2 s | room for latency and the impulse-response tail |
//! | `analysis` | [`DEFAULT_MAX_HARMONIC`], [`DEFAULT_POINTS_PER_OCTAVE`], [`DEFAULT_MIN_SNR_DB`] | |
//! | `rig` | simulated, seed [`DEFAULT_RIG_SEED`] | a plan runs without hardware |
//! | check `channels` | every channel of the plan | |

pub mod limit_csv;

pub use limit_csv::{parse_limit_csv, CsvPoint};

use super::raw::{
    self, is_channel_name, is_id, label, suggest, Pos, RawCorrection, RawCorrectionEntry, RawLimit,
    RawList, RawPair, RawPlan, RawSource, Section,
};
use super::{
    AnalysisSpec, Band, ChannelSpec, CheckKind, CheckSpec, CorrectionSpec, LevelUnit, LimitLine,
    Location, Normalize, Plan, PlanError, Polarity, Problem, ProductSpec, RigSpec, SensitivityUnit,
    StimulusSpec, DEFAULT_MAX_HARMONIC, DEFAULT_MIN_SNR_DB, DEFAULT_POINTS_PER_OCTAVE,
};
use crate::acoustics::earphone_file::{load_earphone_str, EarphoneFileError};
use crate::acoustics::model::{load_model_str, CouplerModel, ModelError};
use crate::acoustics::source::{parse_thevenin_csv, Source, SourceError};
use crate::config::read_data_file;
use crate::dsp::sweep::SweepParams;
use marked_yaml::Spanned;
use std::path::{Path, PathBuf};

/// Smallest time between the impulse responses of neighbouring harmonics n−1 and n that the
/// analysis can separate, s. They lie `L·ln(n/(n−1))` apart (Novak et al. 2015, Δt_n =
/// L·ln n); the analysis windows each harmonic within that gap.
pub const MIN_HARMONIC_SEPARATION_S: f64 = 0.004;
/// Range of a declared nominal impedance, Ω: earphones are 8 Ω to a few hundred, some
/// studio headphones 600 Ω; the range leaves room at both ends and refuses a value in kΩ
/// or mΩ written by mistake.
pub const NOMINAL_IMPEDANCE_RANGE_OHM: (f64, f64) = (1.0, 2000.0);
/// Default half-cosine fade-in and fade-out, s.
pub const DEFAULT_FADE_S: f64 = 0.005;
/// Default silence before the sweep, s.
pub const DEFAULT_SILENCE_BEFORE_S: f64 = 0.1;
/// Default silence after the sweep, s.
pub const DEFAULT_SILENCE_AFTER_S: f64 = 0.2;
/// Default seed of the simulated rig.
pub const DEFAULT_RIG_SEED: u64 = 1;
/// Shortest silence before the sweep, s: the SNR noise window needs it.
pub const MIN_SILENCE_BEFORE_S: f64 = 0.02;
/// Longest silence before or after the sweep, s.
pub const MAX_SILENCE_S: f64 = 10.0;
/// Range of the requested sweep duration, s.
pub const DURATION_RANGE_S: (f64, f64) = (0.1, 60.0);
/// Range of the sweep's peak level, dBFS.
pub const LEVEL_RANGE_DBFS: (f64, f64) = (-100.0, 0.0);
/// Range of the sample rate, Hz.
pub const SAMPLE_RATE_RANGE_HZ: (u32, u32) = (8_000, 384_000);
/// Highest harmonic order a plan may ask for.
pub const MAX_HARMONIC_LIMIT: usize = 20;
/// Highest points-per-octave of the analysis grid.
pub const MAX_POINTS_PER_OCTAVE: u32 = 96;
/// Finest fractional-octave smoothing, 1/N octave with N at most this.
pub const MAX_SMOOTHING_FRACTION: u32 = 48;
/// Highest output or input channel number (1-based) a plan may name; bounds the buffers a
/// stimulus allocates (64 covers station interfaces; common practice).
pub const MAX_CHANNEL_NUMBER: usize = 64;

/// Load, validate and hash a plan file (read by [`crate::config::load_file`]: a regular
/// file of at most [`crate::config::MAX_CONFIG_BYTES`], UTF-8).
pub fn load_plan(path: &Path) -> Result<Plan, PlanError> {
    crate::config::load_file(path, load_plan_str)
}

/// Load a plan from text; `path` is used in messages and to resolve relative CSV paths.
pub fn load_plan_str(text: &str, path: &Path) -> Result<Plan, PlanError> {
    let label = path.display().to_string();
    let (raw, mut problems) = raw::parse(text, &label);
    if let Some(raw) = raw {
        match Plan::from_raw(&raw, path) {
            Ok(plan) if problems.is_empty() => return Ok(plan),
            Ok(_) => {}
            Err(more) => problems.extend(more),
        }
    }
    if problems.is_empty() {
        // Stage one refuses only with a problem; kept so the error is never empty.
        problems.push(Problem {
            location: Pos::default().at(&label),
            message: "the plan could not be read".into(),
        });
    }
    crate::config::sort_problems(&mut problems, &label);
    Err(PlanError::Invalid(problems))
}

impl Plan {
    /// Stage two: validate a decoded plan, read its limit files (relative to `source`'s
    /// directory), apply defaults and hash it. Returns every problem found.
    pub fn from_raw(raw: &RawPlan, source: &Path) -> Result<Plan, Vec<Problem>> {
        let mut v = Validator {
            path: source.display().to_string(),
            dir: source.parent().unwrap_or(Path::new(".")).to_path_buf(),
            problems: Vec::new(),
            nominal_impedance_ohm: None,
        };
        let plan = v.plan(raw, source);
        match plan {
            Some(plan) if v.problems.is_empty() => Ok(plan),
            _ => {
                if v.problems.is_empty() && raw.n_problems == 0 {
                    // Every refusal above reports why; kept so that an error is never silent.
                    v.problems.push(Problem {
                        location: raw.top.pos.at(&v.path),
                        message: "the plan is incomplete".into(),
                    });
                }
                Err(v.problems)
            }
        }
    }
}

struct Validator {
    path: String,
    dir: PathBuf,
    problems: Vec<Problem>,
    /// The plan's `nominal_impedance_ohm`, once read (checks in dB SPL/mW need it).
    nominal_impedance_ohm: Option<f64>,
}

/// The sweep band and rate, once they are known to be valid.
#[derive(Clone, Copy)]
struct SweepBand {
    start_hz: f64,
    stop_hz: f64,
}

const CHECK_KINDS: [&str; 8] = [
    "response",
    "sensitivity",
    "thd",
    "harmonic",
    "rub_buzz",
    "polarity",
    "balance",
    "listening",
];

/// Durations a listening step may have, s: long enough to hear a rattle through a slow
/// sweep, short enough to keep the operator's exposure small (common practice).
const LISTEN_DURATION_S: (f64, f64) = (0.5, 30.0);

/// Keys every check takes.
const COMMON_CHECK_KEYS: [&str; 3] = ["id", "kind", "channels"];

/// Keys each check kind takes besides [`COMMON_CHECK_KEYS`].
fn kind_keys(kind: &str) -> &'static [&'static str] {
    match kind {
        "response" => &["upper", "lower", "smoothing", "normalize"],
        "sensitivity" => &["band_hz", "min_db", "max_db", "unit"],
        "thd" => &["band_hz", "max_percent"],
        "harmonic" => &["order", "band_hz", "max_db"],
        "rub_buzz" => &["band_hz", "max_db"],
        "polarity" => &["expected"],
        "balance" => &["band_hz", "max_diff_db", "smoothing"],
        "listening" => &["band_hz", "level_dbfs", "duration_s"],
        _ => &[],
    }
}

impl Validator {
    fn report(&mut self, pos: Pos, message: String) {
        self.problems.push(Problem {
            location: pos.at(&self.path),
            message,
        });
    }

    fn report_at(&mut self, location: Location, message: String) {
        self.problems.push(Problem { location, message });
    }

    /// A required key: reports it missing (at the mapping) unless stage one rejected it.
    fn required<'v, T, S>(
        &mut self,
        sec: &Section<S>,
        value: &'v Option<Spanned<T>>,
        ctx: &str,
        key: &str,
    ) -> Option<&'v Spanned<T>> {
        if value.is_none() && !sec.was_rejected(key) {
            let msg = if ctx.is_empty() {
                format!("missing required key `{key}`")
            } else {
                format!("{ctx}: missing required key `{key}`")
            };
            self.report(sec.pos, msg);
        }
        value.as_ref()
    }

    /// A required limit that must be a finite number above 0 (`unit` for the message).
    fn required_positive<S>(
        &mut self,
        sec: &Section<S>,
        value: &Option<Spanned<f64>>,
        ctx: &str,
        key: &str,
        unit: &str,
    ) -> Option<f64> {
        let what = label(ctx, key);
        let v = self.required(sec, value, ctx, key)?;
        let x = self.finite(v, &what)?;
        if x > 0.0 {
            Some(x)
        } else {
            self.report(
                Pos::of_value(v),
                format!("{what}: expected a limit above 0 {unit}, found {x}"),
            );
            None
        }
    }

    /// A finite number, or a problem.
    fn finite(&mut self, v: &Spanned<f64>, what: &str) -> Option<f64> {
        if v.is_finite() {
            Some(**v)
        } else {
            self.report(
                Pos::of_value(v),
                format!("{what}: expected a finite number, found {}", **v),
            );
            None
        }
    }

    /// A finite number within `[lo, hi]`, or a problem saying what was expected.
    fn in_range(
        &mut self,
        v: &Spanned<f64>,
        what: &str,
        lo: f64,
        hi: f64,
        unit: &str,
    ) -> Option<f64> {
        let x = self.finite(v, what)?;
        if x >= lo && x <= hi {
            Some(x)
        } else {
            self.report(
                Pos::of_value(v),
                format!("{what}: expected {lo} to {hi}{unit}, found {x}"),
            );
            None
        }
    }

    /// A whole number within `[lo, hi]`.
    fn int_in_range(&mut self, v: &Spanned<i128>, what: &str, lo: i128, hi: i128) -> Option<i128> {
        if **v >= lo && **v <= hi {
            Some(**v)
        } else {
            self.report(
                Pos::of_value(v),
                format!(
                    "{what}: expected a whole number from {lo} to {hi}, found {}",
                    **v
                ),
            );
            None
        }
    }

    /// `product:`: the declared sensitivity (per V, or per mW with the plan's nominal
    /// impedance), its tolerance and the response peak above it.
    fn product(&mut self, sec: &Section<raw::RawProduct>) -> Option<ProductSpec> {
        let p = &sec.value;
        let value = self
            .required(sec, &p.sensitivity_db, "product", "sensitivity_db")
            .and_then(|v| self.in_range(v, "product.sensitivity_db", 40.0, 200.0, " dB"));
        let unit = self
            .required(sec, &p.sensitivity_unit, "product", "sensitivity_unit")
            .and_then(|u| match u.as_str() {
                "db_spl_per_v" => Some((SensitivityUnit::DbSplPerV, u)),
                "db_spl_per_mw" => Some((SensitivityUnit::DbSplPerMw, u)),
                other => {
                    self.report(
                        Pos::of_value(u),
                        format!(
                            "product.sensitivity_unit: expected db_spl_per_v or db_spl_per_mw, \
                             found {}",
                            raw::found_scalar(other)
                        ),
                    );
                    None
                }
            });
        let tolerance_db = self
            .required(sec, &p.tolerance_db, "product", "tolerance_db")
            .and_then(|v| self.in_range(v, "product.tolerance_db", 0.0, 20.0, " dB"));
        let response_peak_db = self
            .required(sec, &p.response_peak_db, "product", "response_peak_db")
            .and_then(|v| self.in_range(v, "product.response_peak_db", 0.0, 40.0, " dB"));
        let (unit, unit_pos) = unit?;
        let value = value?;
        let per_v = match unit {
            SensitivityUnit::DbSplPerMw => match self.nominal_impedance_ohm {
                Some(r) => value - 10.0 * (r / 1000.0).log10(),
                None => {
                    self.report(
                        Pos::of_value(unit_pos),
                        "product.sensitivity_unit: db_spl_per_mw needs the plan's \
                         `nominal_impedance_ohm` (the earphone's declared impedance), found none"
                            .into(),
                    );
                    return None;
                }
            },
            _ => value,
        };
        Some(ProductSpec {
            sensitivity_db: value,
            sensitivity_unit: unit,
            tolerance_db: tolerance_db?,
            response_peak_db: response_peak_db?,
            sensitivity_db_spl_per_v: per_v,
        })
    }

    /// `level_unit:`, or the default: dB SPL/V when a check is written in dB SPL, else dB
    /// FS/FS. A plan that declares digital levels cannot also hold a dB SPL check.
    fn level_unit(
        &mut self,
        v: Option<&Spanned<String>>,
        checks: Option<&[CheckSpec]>,
    ) -> Option<LevelUnit> {
        let spl_check = checks
            .unwrap_or_default()
            .iter()
            .find(|c| c.kind.needs_calibration());
        let Some(v) = v else {
            return Some(if spl_check.is_some() {
                LevelUnit::DbSplPerV
            } else {
                LevelUnit::DbFsPerFs
            });
        };
        let unit = match v.as_str() {
            "db_fs_per_fs" => LevelUnit::DbFsPerFs,
            "db_spl_per_v" => LevelUnit::DbSplPerV,
            other => {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "level_unit: expected db_fs_per_fs (uncalibrated digital transfer) or \
                         db_spl_per_v (calibrated), found {}",
                        raw::found_scalar(other)
                    ),
                );
                return None;
            }
        };
        if let (LevelUnit::DbFsPerFs, Some(c)) = (unit, spl_check) {
            self.report(
                Pos::of_value(v),
                format!(
                    "level_unit: expected db_spl_per_v, since check `{}` is written in dB SPL; \
                     found db_fs_per_fs",
                    c.id
                ),
            );
            return None;
        }
        Some(unit)
    }

    fn plan(&mut self, raw: &RawPlan, source: &Path) -> Option<Plan> {
        let top = &raw.top;
        let t = &top.value;

        let id = self.required(top, &t.plan, "", "plan").and_then(|v| {
            if is_id(v) {
                Some(v.to_string())
            } else {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "plan: expected an id of lowercase letters, digits, `.`, `_` and `-`, \
                         starting with a letter or digit, found {}",
                        raw::found_scalar(v)
                    ),
                );
                None
            }
        });
        let revision = self
            .required(top, &t.revision, "", "revision")
            .and_then(|v| self.int_in_range(v, "revision", 1, i128::from(u32::MAX)))
            .map(|r| r as u32);
        let description = t
            .description
            .as_ref()
            .map_or(String::new(), |d| d.to_string());
        let sample_rate_hz = self
            .required(top, &t.sample_rate_hz, "", "sample_rate_hz")
            .and_then(|v| {
                let (lo, hi) = SAMPLE_RATE_RANGE_HZ;
                if **v >= i128::from(lo) && **v <= i128::from(hi) {
                    Some(**v as u32)
                } else {
                    self.report(
                        Pos::of_value(v),
                        format!(
                            "sample_rate_hz: expected a sample rate from {lo} to {hi} Hz, found {}",
                            **v
                        ),
                    );
                    None
                }
            });

        let nominal_impedance_ohm = match &t.nominal_impedance_ohm {
            None => Some(None),
            Some(v)
                if **v >= NOMINAL_IMPEDANCE_RANGE_OHM.0 && **v <= NOMINAL_IMPEDANCE_RANGE_OHM.1 =>
            {
                Some(Some(**v))
            }
            Some(v) => {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "nominal_impedance_ohm: expected {} to {} Ω, found {}",
                        NOMINAL_IMPEDANCE_RANGE_OHM.0, NOMINAL_IMPEDANCE_RANGE_OHM.1, **v
                    ),
                );
                None
            }
        };
        self.nominal_impedance_ohm = nominal_impedance_ohm.flatten();

        if raw.stimulus.is_none() && !top.was_rejected("stimulus") {
            self.report(top.pos, "missing required key `stimulus`".into());
        }
        let (stimulus, sweep, band) = match &raw.stimulus {
            Some(s) => self.stimulus(s, sample_rate_hz),
            None => (None, None, None),
        };
        let duration_pos = raw.stimulus.as_ref().map_or(top.pos, |s| {
            s.value.duration_s.as_ref().map_or(s.pos, Pos::of_value)
        });
        let analysis = self.analysis(raw.analysis.as_ref(), sweep.as_ref(), duration_pos);

        if raw.channels.is_none() && !top.was_rejected("channels") {
            self.report(top.pos, "missing required key `channels`".into());
        }
        let (mut channels, channel_names) = match &raw.channels {
            Some(c) => self.channels(c),
            None => (None, None),
        };
        let needed_hz = match (band, sample_rate_hz, analysis.as_ref()) {
            (Some(b), Some(fs), Some(a)) => Some(crate::acoustics::apply::needed_band_hz(
                b.start_hz,
                b.stop_hz,
                f64::from(fs),
                a.max_harmonic,
            )),
            _ => None,
        };
        let corrections = self.corrections(raw, needed_hz);
        if let (Some(chs), Some(corr)) = (channels.as_mut(), corrections.as_ref()) {
            for (ch, c) in chs.iter_mut().zip(corr) {
                ch.correction = c.clone();
            }
        }

        let rig = self.rig(raw.rig.as_ref());

        if raw.checks.is_none() && !top.was_rejected("checks") {
            self.report(top.pos, "missing required key `checks`".into());
        }
        let checks = raw.checks.as_ref().and_then(|c| {
            self.checks(
                c,
                channel_names.as_deref(),
                band,
                analysis.as_ref().map(|a| a.max_harmonic),
            )
        });

        let level_unit = self.level_unit(t.level_unit.as_ref(), checks.as_deref());
        let product = match &raw.product {
            None => Some(None),
            Some(p) => self.product(p).map(Some),
        };

        corrections?;
        let mut plan = Plan {
            id: id?,
            revision: revision?,
            description,
            sha256: String::new(),
            source: source.to_path_buf(),
            sample_rate_hz: sample_rate_hz?,
            stimulus: stimulus?,
            analysis: analysis?,
            channels: channels?,
            rig: rig?,
            checks: checks?,
            nominal_impedance_ohm: nominal_impedance_ohm?,
            level_unit: level_unit?,
            product: product?,
        };
        plan.sha256 = super::hash::plan_sha256(&plan);
        Some(plan)
    }

    fn stimulus(
        &mut self,
        sec: &Section<raw::RawStimulus>,
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

    fn analysis(
        &mut self,
        sec: Option<&Section<raw::RawAnalysis>>,
        sweep: Option<&SweepParams>,
        duration_pos: Pos,
    ) -> Option<AnalysisSpec> {
        let l = |k: &str| label("analysis", k);
        let (max_harmonic_value, ppo_value, snr_value) = match sec {
            Some(s) => (
                s.value.max_harmonic.as_ref(),
                s.value.points_per_octave.as_ref(),
                s.value.min_snr_db.as_ref(),
            ),
            None => (None, None, None),
        };
        let max_harmonic = match max_harmonic_value {
            None => Some(DEFAULT_MAX_HARMONIC),
            Some(v) => self
                .int_in_range(v, &l("max_harmonic"), 1, MAX_HARMONIC_LIMIT as i128)
                .map(|n| n as usize),
        };
        let points_per_octave = match ppo_value {
            None => Some(DEFAULT_POINTS_PER_OCTAVE),
            Some(v) => self
                .int_in_range(
                    v,
                    &l("points_per_octave"),
                    1,
                    i128::from(MAX_POINTS_PER_OCTAVE),
                )
                .map(|n| n as u32),
        };
        let min_snr_db = match snr_value {
            None => Some(DEFAULT_MIN_SNR_DB),
            Some(v) => self.finite(v, &l("min_snr_db")).and_then(|x| {
                if x >= 0.0 {
                    Some(x)
                } else {
                    self.report(
                        Pos::of_value(v),
                        format!("{}: expected 0 dB or more, found {x}", l("min_snr_db")),
                    );
                    None
                }
            }),
        };
        if let (Some(n), Some(p)) = (max_harmonic, sweep) {
            if !self.harmonics_separate(n, p, max_harmonic_value, duration_pos) {
                return None;
            }
        }
        Some(AnalysisSpec {
            max_harmonic: max_harmonic?,
            points_per_octave: points_per_octave?,
            min_snr_db: min_snr_db?,
        })
    }

    /// Whether harmonics up to `n` lie at least [`MIN_HARMONIC_SEPARATION_S`] apart; reports
    /// the separation found, the largest order that works and the duration that would.
    fn harmonics_separate(
        &mut self,
        n: usize,
        p: &SweepParams,
        written: Option<&Spanned<i128>>,
        duration_pos: Pos,
    ) -> bool {
        // Neighbouring harmonics n−1 and n lie L·ln(n/(n−1)) apart (Novak et al. 2015).
        let gap_s = |l_s: f64, n: usize| l_s * (n as f64 / (n as f64 - 1.0)).ln();
        // The closest pair is the highest; the rounding allowance keeps a value computed to
        // exactly the limit from failing on the last bit.
        let fits = |l_s: f64, n: usize| {
            n < 2 || gap_s(l_s, n) >= MIN_HARMONIC_SEPARATION_S * (1.0 - 1e-12)
        };
        if fits(p.l_s, n) {
            return true;
        }
        let largest = (1..n).rev().find(|&m| fits(p.l_s, m)).unwrap_or(1);
        // Shortest requested duration whose synchronized L separates harmonic n: the
        // smallest whole k = f1·L with k/f1·ln(n/(n−1)) ≥ the limit; T̂ rounds to k from
        // (k − ½)/f1·ln(f2/f1) on (Novak et al. 2015, eq. 12). Rounded up for the message
        // and confirmed with the same synchronization.
        let ln_band = (p.f2_hz / p.f1_hz).ln();
        let l_needed = MIN_HARMONIC_SEPARATION_S / (n as f64 / (n as f64 - 1.0)).ln();
        let k = (p.f1_hz * l_needed * (1.0 - 1e-12)).ceil().max(1.0);
        let t_exact = (k - 0.5) / p.f1_hz * ln_band;
        let needed = [1000.0, 1e6].iter().find_map(|scale| {
            let t = (t_exact * scale).ceil() / scale;
            SweepParams::synchronized(p.sample_rate_hz, p.f1_hz, p.f2_hz, t, 1.0, 0.0, 0.0, 0.0)
                .ok()
                .filter(|q| fits(q.l_s, n))
                .map(|_| t)
        });
        let gap_ms = gap_s(p.l_s, n) * 1e3;
        let min_ms = MIN_HARMONIC_SEPARATION_S * 1e3;
        let duration_hint = match needed {
            Some(t) if t <= DURATION_RANGE_S.1 => format!(", or a duration_s of at least {t} s"),
            _ => String::new(),
        };
        let body = format!(
            "harmonics {} and {n} lie {gap_ms:.1} ms apart in this sweep (L·ln({n}/{}) with \
             L = {:.4} s), at least {min_ms} ms is needed to separate them; use max_harmonic \
             {largest} or less{duration_hint}",
            n - 1,
            n - 1,
            p.l_s
        );
        match written {
            Some(v) => self.report(Pos::of_value(v), format!("analysis.max_harmonic: {body}")),
            None => self.report(
                duration_pos,
                format!("stimulus.duration_s: with the default max_harmonic {n}, {body}"),
            ),
        }
        false
    }

    /// The typed channels when all are valid, and the channel names when every channel has
    /// a valid unique one (so that checks can be told about names they get wrong even while
    /// a channel has another problem).
    fn channels(
        &mut self,
        list: &RawList<raw::RawChannel>,
    ) -> (Option<Vec<ChannelSpec>>, Option<Vec<String>>) {
        let mut out = Vec::new();
        let mut ok = true;
        let mut names_ok = true;
        if list.items.is_empty() {
            self.report(
                list.pos,
                "channels: expected at least one channel, found none".into(),
            );
            return (None, None);
        }
        // (name, where) and (input, channel label, where) seen so far.
        let mut names: Vec<(String, Pos)> = Vec::new();
        let mut inputs: Vec<(usize, String, Pos)> = Vec::new();
        for (i, item) in list.items.iter().enumerate() {
            let Some(sec) = item else {
                ok = false;
                names_ok = false;
                continue;
            };
            let c = &sec.value;
            let fallback_ctx = format!("channel #{}", i + 1);
            let ctx = match &c.name {
                Some(v) if is_channel_name(v) => format!("channel {}", v.as_str()),
                _ => fallback_ctx.clone(),
            };
            let name = self
                .required(sec, &c.name, &fallback_ctx, "name")
                .and_then(|v| {
                    if !is_channel_name(v) {
                        self.report(
                            Pos::of_value(v),
                            format!(
                            "{fallback_ctx}: name: expected lowercase letters, digits, `_` or `-`, \
                             found {}",
                            raw::found_scalar(v)
                        ),
                        );
                        return None;
                    }
                    if let Some((_, first)) = names.iter().find(|(n, _)| n == v.as_str()) {
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "channel {}: expected a unique name, found one already given at \
                             line {} column {}",
                                v.as_str(),
                                first.line,
                                first.col
                            ),
                        );
                        return None;
                    }
                    names.push((v.to_string(), Pos::of_value(v)));
                    Some(v.to_string())
                });
            names_ok &= name.is_some();
            let mut number = |v: &Option<Spanned<i128>>, key: &str| {
                self.required(sec, v, &ctx, key).and_then(|v| {
                    self.int_in_range(v, &label(&ctx, key), 1, MAX_CHANNEL_NUMBER as i128)
                        .map(|n| (n as usize - 1, Pos::of_value(v)))
                })
            };
            let output = number(&c.output, "output");
            let input = number(&c.input, "input");
            if let Some((idx, pos)) = input {
                if let Some((_, other, _)) = inputs.iter().find(|(n, _, _)| *n == idx) {
                    let msg = format!(
                        "{}: expected an input of its own, found input {} already used by {other}",
                        label(&ctx, "input"),
                        idx + 1
                    );
                    self.report(pos, msg);
                    ok = false;
                } else {
                    inputs.push((idx, ctx.clone(), pos));
                }
            }
            match (name, output, input) {
                (Some(name), Some((output, _)), Some((input, _))) => out.push(ChannelSpec {
                    name,
                    output,
                    input,
                    correction: None,
                }),
                _ => ok = false,
            }
        }
        let names = names_ok.then(|| names.into_iter().map(|(n, _)| n).collect());
        (ok.then_some(out), names)
    }

    /// Each channel's correction (in the order of the plan's channel items): its own entry,
    /// else the plan-wide one. `None` when any entry could not be read (reported).
    fn corrections(
        &mut self,
        raw: &RawPlan,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<Vec<Option<CorrectionSpec>>> {
        let plan_wide = match &raw.correction {
            None | Some(RawCorrectionEntry::Off(_)) => Some(None),
            Some(RawCorrectionEntry::On(sec)) => {
                self.correction(sec, "correction", needed_hz).map(Some)
            }
        };
        let n_items = raw.channels.as_ref().map_or(0, |l| l.items.len());
        let mut ok = plan_wide.is_some();
        let mut out = Vec::with_capacity(n_items);
        for i in 0..n_items {
            let entry = raw.channel_corrections.get(i).and_then(Option::as_ref);
            let c = match entry {
                None => plan_wide.clone().flatten(),
                Some(RawCorrectionEntry::Off(_)) => None,
                Some(RawCorrectionEntry::On(sec)) => {
                    let ctx = raw
                        .channels
                        .as_ref()
                        .and_then(|l| l.items.get(i))
                        .and_then(Option::as_ref)
                        .and_then(|c| c.value.name.as_ref())
                        .filter(|n| is_channel_name(n))
                        .map_or_else(
                            || format!("channel #{}: correction", i + 1),
                            |n| format!("channel {}: correction", n.as_str()),
                        );
                    let c = self.correction(sec, &ctx, needed_hz);
                    ok &= c.is_some();
                    c
                }
            };
            out.push(c);
        }
        ok.then_some(out)
    }

    /// One `correction:` mapping: its files loaded (problems in them at their own
    /// positions), taps checked against the models, the source read.
    fn correction(
        &mut self,
        sec: &Section<RawCorrection>,
        ctx: &str,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<CorrectionSpec> {
        let c = &sec.value;
        let fixture = self
            .required(sec, &c.fixture, ctx, "fixture")
            .and_then(|v| self.coupler_file(v, &label(ctx, "fixture")));
        let reference = self
            .required(sec, &c.reference, ctx, "reference")
            .and_then(|v| self.coupler_file(v, &label(ctx, "reference")));
        let fixture_tap = self
            .required(sec, &c.fixture_tap, ctx, "fixture_tap")
            .and_then(|v| self.tap(v, fixture.as_ref(), &label(ctx, "fixture_tap")));
        let reference_tap = self
            .required(sec, &c.reference_tap, ctx, "reference_tap")
            .and_then(|v| self.tap(v, reference.as_ref(), &label(ctx, "reference_tap")));
        let source = self
            .required(sec, &c.source, ctx, "source")
            .and_then(|v| self.source(v, &label(ctx, "source"), needed_hz));
        Some(CorrectionSpec {
            fixture: fixture?,
            fixture_tap: fixture_tap?,
            reference: reference?,
            reference_tap: reference_tap?,
            source: source?,
        })
    }

    /// Problems of a file the plan names, each prefixed with the plan key that names it.
    fn file_problems(&mut self, problems: Vec<Problem>, what: &str) {
        for p in problems {
            let message = format!("{what}: {}", p.message);
            self.report_at(p.location, message);
        }
    }

    /// Load a coupler model file named at `v` (relative to the plan).
    fn coupler_file(&mut self, v: &Spanned<String>, what: &str) -> Option<CouplerModel> {
        let file = self.dir.join(v.as_str());
        let text = match read_data_file(&file, "coupler model") {
            Ok(t) => t,
            Err(why) => {
                self.report(Pos::of_value(v), format!("{what}: {why}"));
                return None;
            }
        };
        match load_model_str(&text, &file) {
            Ok(m) => Some(m),
            Err(ModelError::Invalid(problems)) => {
                self.file_problems(problems, what);
                None
            }
            Err(e @ ModelError::Io { .. }) => {
                self.report(Pos::of_value(v), format!("{what}: {e}"));
                None
            }
        }
    }

    /// A tap name that `model` has (no further problem when the model could not be read).
    fn tap(
        &mut self,
        v: &Spanned<String>,
        model: Option<&CouplerModel>,
        what: &str,
    ) -> Option<String> {
        let model = model?;
        let taps = model.tap_names();
        if taps.contains(&v.as_str()) {
            return Some(v.to_string());
        }
        let hint = match suggest(v, taps.iter().copied()) {
            Some(s) => format!(", did you mean `{s}`?"),
            None => String::new(),
        };
        self.report(
            Pos::of_value(v),
            format!(
                "{what}: expected a tap of coupler {} ({}), found {}{hint}",
                model.id,
                taps.join(", "),
                raw::found_scalar(v)
            ),
        );
        None
    }

    /// The correction's source: a name, or a mapping naming an earphone or Thévenin file.
    fn source(
        &mut self,
        v: &Spanned<RawSource>,
        what: &str,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<Source> {
        const KINDS: [&str; 3] = ["volume_velocity", "virtual_earphone", "thevenin_csv"];
        let pos = Pos::of_value(v);
        match &**v {
            RawSource::Name(name) if name == "volume_velocity" => Some(Source::VolumeVelocity),
            RawSource::Name(name) if KINDS.contains(&name.as_str()) => {
                self.report(
                    pos,
                    format!("{what}: `{name}` names a file: write `{{{name}: FILE}}`"),
                );
                None
            }
            RawSource::Name(name) => {
                let hint = match suggest(name, KINDS) {
                    Some(s) => format!(", did you mean `{s}`?"),
                    None => String::new(),
                };
                self.report(
                    pos,
                    format!(
                        "{what}: expected volume_velocity, {{virtual_earphone: FILE}} or \
                         {{thevenin_csv: FILE}}, found {}{hint}",
                        raw::found_scalar(name)
                    ),
                );
                None
            }
            RawSource::Map(m) => match (&m.virtual_earphone, &m.thevenin_csv) {
                (Some(file), None) => self.earphone_file(file, &format!("{what}.virtual_earphone")),
                (None, Some(file)) => {
                    self.thevenin_file(file, &format!("{what}.thevenin_csv"), needed_hz)
                }
                (a, b) => {
                    let found = if a.is_some() && b.is_some() {
                        "both"
                    } else {
                        "neither"
                    };
                    self.report(
                        pos,
                        format!(
                            "{what}: expected one of virtual_earphone, thevenin_csv, found {found}"
                        ),
                    );
                    None
                }
            },
        }
    }

    fn earphone_file(&mut self, v: &Spanned<String>, what: &str) -> Option<Source> {
        let file = self.dir.join(v.as_str());
        let text = match read_data_file(&file, "earphone") {
            Ok(t) => t,
            Err(why) => {
                self.report(Pos::of_value(v), format!("{what}: {why}"));
                return None;
            }
        };
        match load_earphone_str(&text, &file) {
            Ok(m) => Some(Source::VirtualEarphone(m)),
            Err(EarphoneFileError::Invalid(problems)) => {
                self.file_problems(problems, what);
                None
            }
            Err(e @ EarphoneFileError::Io { .. }) => {
                self.report(Pos::of_value(v), format!("{what}: {e}"));
                None
            }
        }
    }

    fn thevenin_file(
        &mut self,
        v: &Spanned<String>,
        what: &str,
        needed_hz: Option<(f64, f64)>,
    ) -> Option<Source> {
        let file = self.dir.join(v.as_str());
        let file_label = file.display().to_string();
        let text = match read_data_file(&file, "thevenin") {
            Ok(t) => t,
            Err(why) => {
                self.report(Pos::of_value(v), format!("{what}: {why}"));
                return None;
            }
        };
        let source = match parse_thevenin_csv(&text, &file_label) {
            Ok(s) => s,
            Err(SourceError::Csv {
                path,
                line,
                col,
                message,
            }) => {
                self.report_at(Location { path, line, col }, format!("{what}: {message}"));
                return None;
            }
            Err(e) => {
                self.report(Pos::of_value(v), format!("{what}: {e}"));
                return None;
            }
        };
        if let (Source::Thevenin { table }, Some((lo, hi))) = (&source, needed_hz) {
            let (first, last) = (table.first()?.0, table.last()?.0);
            if first > lo || last < hi {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "{what}: expected a table covering {lo} to {hi} Hz (the sweep, and \
                         the harmonics up to n·f that the analysis reports), found {first} to \
                         {last} Hz"
                    ),
                );
                return None;
            }
        }
        Some(source)
    }

    fn rig(&mut self, sec: Option<&Section<raw::RawRig>>) -> Option<RigSpec> {
        let Some(sec) = sec else {
            return Some(RigSpec::Simulated {
                seed: DEFAULT_RIG_SEED,
            });
        };
        let r = &sec.value;
        let kind = self.required(sec, &r.kind, "rig", "kind")?;
        let seed = match &r.seed {
            None => Some(DEFAULT_RIG_SEED),
            Some(v) => self
                .int_in_range(v, "rig.seed", 0, i128::from(u64::MAX))
                .map(|s| s as u64),
        };
        match kind.as_str() {
            "simulated" => Some(RigSpec::Simulated { seed: seed? }),
            "soundcard" => {
                if let Some(v) = &r.seed {
                    self.report(
                        Pos::of_value(v),
                        "rig.seed: not allowed for a soundcard rig (only a simulated rig has a \
                         seed)"
                            .into(),
                    );
                    return None;
                }
                Some(RigSpec::Soundcard)
            }
            other => {
                let hint = match suggest(other, ["simulated", "soundcard"]) {
                    Some(s) => format!(", did you mean `{s}`?"),
                    None => String::new(),
                };
                self.report(
                    Pos::of_value(kind),
                    format!(
                        "rig.kind: expected `simulated` or `soundcard`, found {}{hint}",
                        raw::found_scalar(other)
                    ),
                );
                None
            }
        }
    }

    fn checks(
        &mut self,
        list: &RawList<raw::RawCheck>,
        channels: Option<&[String]>,
        band: Option<SweepBand>,
        max_harmonic: Option<usize>,
    ) -> Option<Vec<CheckSpec>> {
        if list.items.is_empty() {
            self.report(
                list.pos,
                "checks: expected at least one check, found none (a plan without checks would \
                 pass every unit)"
                    .into(),
            );
            return None;
        }
        let mut out = Vec::new();
        let mut ok = true;
        let mut ids: Vec<(String, Pos)> = Vec::new();
        for (i, item) in list.items.iter().enumerate() {
            let Some(sec) = item else {
                ok = false;
                continue;
            };
            match self.check(sec, i + 1, &mut ids, channels, band, max_harmonic) {
                Some(c) => out.push(c),
                None => ok = false,
            }
        }
        ok.then_some(out)
    }

    fn check(
        &mut self,
        sec: &Section<raw::RawCheck>,
        ordinal: usize,
        ids: &mut Vec<(String, Pos)>,
        channels: Option<&[String]>,
        band: Option<SweepBand>,
        max_harmonic: Option<usize>,
    ) -> Option<CheckSpec> {
        let c = &sec.value;
        let fallback_ctx = format!("check #{ordinal}");
        let ctx = match &c.id {
            Some(v) if is_id(v) => format!("check {}", v.as_str()),
            _ => fallback_ctx.clone(),
        };
        let id = self
            .required(sec, &c.id, &fallback_ctx, "id")
            .and_then(|v| {
                if !is_id(v) {
                    self.report(
                        Pos::of_value(v),
                        format!(
                        "{fallback_ctx}: id: expected lowercase letters, digits, `.`, `_` and `-`, \
                         starting with a letter or digit, found {}",
                        raw::found_scalar(v)
                    ),
                    );
                    return None;
                }
                if let Some((_, first)) = ids.iter().find(|(n, _)| n == v.as_str()) {
                    self.report(
                        Pos::of_value(v),
                        format!(
                            "check {}: expected a unique id, found one already given at line {} \
                         column {}",
                            v.as_str(),
                            first.line,
                            first.col
                        ),
                    );
                    return None;
                }
                ids.push((v.to_string(), Pos::of_value(v)));
                Some(v.to_string())
            });
        let l = |k: &str| label(&ctx, k);

        // Channels first: they do not depend on the kind.
        let check_channels = self.check_channels(c.channels.as_ref(), &ctx, channels);

        let kind_v = self.required(sec, &c.kind, &ctx, "kind")?;
        let kind = kind_v.as_str();
        if !CHECK_KINDS.contains(&kind) {
            let hint = match suggest(kind, CHECK_KINDS) {
                Some(s) => format!(", did you mean `{s}`?"),
                None => String::new(),
            };
            self.report(
                Pos::of_value(kind_v),
                format!(
                    "{}: expected one of {}, found {}{hint}",
                    l("kind"),
                    CHECK_KINDS.join(", "),
                    raw::found_scalar(kind)
                ),
            );
            return None;
        }
        let allowed = kind_keys(kind);
        let mut keys_ok = true;
        for (key, pos) in c.present_keys() {
            if COMMON_CHECK_KEYS.contains(&key) || allowed.contains(&key) {
                continue;
            }
            let users: Vec<&str> = CHECK_KINDS
                .iter()
                .copied()
                .filter(|k| kind_keys(k).contains(&key))
                .collect();
            self.report(
                pos,
                format!(
                    "{}: not allowed in a {kind} check (it belongs to {} checks); a {kind} check \
                     takes {}",
                    l(key),
                    users.join(" and "),
                    COMMON_CHECK_KEYS
                        .iter()
                        .chain(allowed)
                        .copied()
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            );
            keys_ok = false;
        }

        let req_f64 = |me: &mut Self, v: &Option<Spanned<f64>>, key: &str| {
            me.required(sec, v, &ctx, key)
                .and_then(|v| me.finite(v, &label(&ctx, key)))
        };
        let band_of = |me: &mut Self| {
            me.required(sec, &c.band_hz, &ctx, "band_hz")
                .and_then(|v| me.band(v, &label(&ctx, "band_hz"), band))
        };

        let kind_spec = match kind {
            "response" => {
                let upper = c
                    .upper
                    .as_ref()
                    .and_then(|v| self.limit(v, &l("upper"), band));
                let lower = c
                    .lower
                    .as_ref()
                    .and_then(|v| self.limit(v, &l("lower"), band));
                if c.upper.is_none()
                    && c.lower.is_none()
                    && !sec.was_rejected("upper")
                    && !sec.was_rejected("lower")
                {
                    self.report(
                        sec.pos,
                        format!(
                            "{ctx}: expected at least one of `upper` or `lower`, found neither"
                        ),
                    );
                }
                let smoothing = self.smoothing(c.smoothing.as_ref(), &l("smoothing"));
                let normalize = match &c.normalize {
                    None => Some(None),
                    Some(n) => self.normalize(n, &ctx, band).map(Some),
                };
                let upper = match (&c.upper, upper) {
                    (None, _) => Some(None),
                    (Some(_), Some(u)) => Some(Some(u)),
                    (Some(_), None) => None,
                };
                let lower = match (&c.lower, lower) {
                    (None, _) => Some(None),
                    (Some(_), Some(u)) => Some(Some(u)),
                    (Some(_), None) => None,
                };
                (|| {
                    let (upper, lower) = (upper?, lower?);
                    (upper.is_some() || lower.is_some()).then_some(())?;
                    Some(CheckKind::Response {
                        upper,
                        lower,
                        smoothing_fraction: smoothing?,
                        normalize: normalize?,
                    })
                })()
            }
            "sensitivity" => {
                let b = band_of(self);
                let min_db = req_f64(self, &c.min_db, "min_db");
                let max_db = req_f64(self, &c.max_db, "max_db");
                if let (Some(lo), Some(hi), Some(v)) = (min_db, max_db, &c.max_db) {
                    if lo > hi {
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "{}: expected at least min_db {lo} dB, found {hi}",
                                l("max_db")
                            ),
                        );
                        return None;
                    }
                }
                let unit = match &c.unit {
                    None => Some(SensitivityUnit::Db),
                    Some(u) => match u.as_str() {
                        "db" => Some(SensitivityUnit::Db),
                        "db_spl_per_v" => Some(SensitivityUnit::DbSplPerV),
                        "db_spl_per_mw" => Some(SensitivityUnit::DbSplPerMw),
                        other => {
                            self.report(
                                Pos::of_value(u),
                                format!(
                                    "{}: expected db, db_spl_per_v or db_spl_per_mw, found {}",
                                    l("unit"),
                                    raw::found_scalar(other)
                                ),
                            );
                            None
                        }
                    },
                };
                if let (Some(SensitivityUnit::DbSplPerMw), Some(u), None) =
                    (unit, &c.unit, self.nominal_impedance_ohm)
                {
                    self.report(
                        Pos::of_value(u),
                        format!(
                            "{}: db_spl_per_mw needs the plan's `nominal_impedance_ohm` (the \
                             earphone's declared impedance), found none",
                            l("unit")
                        ),
                    );
                    return None;
                }
                (|| {
                    Some(CheckKind::Sensitivity {
                        band: b?,
                        min_db: min_db?,
                        max_db: max_db?,
                        unit: unit?,
                    })
                })()
            }
            "thd" => {
                let b = band_of(self);
                let max_percent =
                    self.required_positive(sec, &c.max_percent, &ctx, "max_percent", "%");
                (|| {
                    Some(CheckKind::Thd {
                        band: b?,
                        max_percent: max_percent?,
                    })
                })()
            }
            "harmonic" => {
                let b = band_of(self);
                let order = self.required(sec, &c.order, &ctx, "order").and_then(|v| {
                    let hi = max_harmonic.unwrap_or(MAX_HARMONIC_LIMIT);
                    if **v >= 2 && **v <= hi as i128 {
                        Some(**v as usize)
                    } else {
                        let why = if max_harmonic.is_some() {
                            format!("max_harmonic {hi}")
                        } else {
                            format!("{hi}")
                        };
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "{}: expected a harmonic order from 2 to {why}, found {}",
                                l("order"),
                                **v
                            ),
                        );
                        None
                    }
                });
                let max_db = req_f64(self, &c.max_db, "max_db");
                (|| {
                    Some(CheckKind::Harmonic {
                        order: order?,
                        band: b?,
                        max_db: max_db?,
                    })
                })()
            }
            "rub_buzz" => {
                let b = band_of(self);
                let max_db = req_f64(self, &c.max_db, "max_db");
                (|| {
                    Some(CheckKind::RubBuzz {
                        band: b?,
                        max_db: max_db?,
                    })
                })()
            }
            "listening" => {
                let b = band_of(self);
                let level_dbfs = self
                    .required(sec, &c.level_dbfs, &ctx, "level_dbfs")
                    .and_then(|v| self.in_range(v, &l("level_dbfs"), -80.0, 0.0, " dBFS"));
                let duration_s = self
                    .required(sec, &c.duration_s, &ctx, "duration_s")
                    .and_then(|v| {
                        self.in_range(
                            v,
                            &l("duration_s"),
                            LISTEN_DURATION_S.0,
                            LISTEN_DURATION_S.1,
                            " s",
                        )
                    });
                (|| {
                    Some(CheckKind::Listening {
                        band: b?,
                        level_dbfs: level_dbfs?,
                        duration_s: duration_s?,
                    })
                })()
            }
            "polarity" => self
                .required(sec, &c.expected, &ctx, "expected")
                .and_then(|v| match v.as_str() {
                    "positive" => Some(CheckKind::Polarity {
                        expected: Polarity::Positive,
                    }),
                    "negative" => Some(CheckKind::Polarity {
                        expected: Polarity::Negative,
                    }),
                    other => {
                        let hint = match suggest(other, ["positive", "negative"]) {
                            Some(s) => format!(", did you mean `{s}`?"),
                            None => String::new(),
                        };
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "{}: expected `positive` or `negative`, found {}{hint}",
                                l("expected"),
                                raw::found_scalar(other)
                            ),
                        );
                        None
                    }
                }),
            "balance" => {
                let b = band_of(self);
                let max_diff_db =
                    self.required_positive(sec, &c.max_diff_db, &ctx, "max_diff_db", "dB");
                let smoothing = self.smoothing(c.smoothing.as_ref(), &l("smoothing"));
                let n = match (&c.channels, &check_channels) {
                    (Some(_), Some(list)) => Some(list.len()),
                    (None, _) => channels.map(<[_]>::len),
                    _ => None,
                };
                let mut two = true;
                if let Some(n) = n {
                    if n != 2 {
                        two = false;
                        let (pos, msg) = match &c.channels {
                            Some(v) => (
                                Pos::of_value(v),
                                format!(
                                    "{}: a balance check compares exactly two channels, found {n}",
                                    l("channels")
                                ),
                            ),
                            None => (
                                Pos::of_value(kind_v),
                                format!(
                                    "{ctx}: a balance check compares exactly two channels, found \
                                     {n} in the plan; name two with `channels: [a, b]`"
                                ),
                            ),
                        };
                        self.report(pos, msg);
                    }
                }
                (|| {
                    two.then_some(())?;
                    Some(CheckKind::Balance {
                        band: b?,
                        max_diff_db: max_diff_db?,
                        smoothing_fraction: smoothing?,
                    })
                })()
            }
            _ => None,
        };
        keys_ok.then_some(())?;
        Some(CheckSpec {
            id: id?,
            channels: check_channels?,
            kind: kind_spec?,
        })
    }

    /// The channels a check names (every plan channel when it names none).
    fn check_channels(
        &mut self,
        given: Option<&Spanned<Vec<Spanned<String>>>>,
        ctx: &str,
        plan_channels: Option<&[String]>,
    ) -> Option<Vec<String>> {
        let Some(list) = given else {
            return plan_channels.map(<[String]>::to_vec);
        };
        let what = label(ctx, "channels");
        if list.is_empty() {
            self.report(
                Pos::of_value(list),
                format!("{what}: expected at least one channel name, found an empty list"),
            );
            return None;
        }
        let mut out: Vec<String> = Vec::new();
        let mut ok = true;
        for name in list.iter() {
            if out.iter().any(|n| n == name.as_str()) {
                self.report(
                    Pos::of_value(name),
                    format!(
                        "{what}: expected each channel once, found `{}` twice",
                        name.as_str()
                    ),
                );
                ok = false;
                continue;
            }
            if let Some(chans) = plan_channels {
                if !chans.iter().any(|c| c == name.as_str()) {
                    let hint = match suggest(name, chans.iter().map(String::as_str)) {
                        Some(s) => format!(", did you mean `{s}`?"),
                        None => String::new(),
                    };
                    let known: Vec<&str> = chans.iter().map(String::as_str).collect();
                    self.report(
                        Pos::of_value(name),
                        format!(
                            "{what}: expected a channel of the plan ({}), found {}{hint}",
                            known.join(", "),
                            raw::found_scalar(name)
                        ),
                    );
                    ok = false;
                    continue;
                }
            } else {
                ok = false;
            }
            out.push(name.to_string());
        }
        ok.then_some(out)
    }

    /// A band `[low_hz, high_hz]` inside the sweep band.
    fn band(&mut self, v: &Spanned<RawPair>, what: &str, sweep: Option<SweepBand>) -> Option<Band> {
        let (low, high) = self.pair(v, what, "[low_hz, high_hz]")?;
        if low >= high {
            self.report(
                Pos::of_value(v),
                format!("{what}: expected low_hz below high_hz, found [{low}, {high}]"),
            );
            return None;
        }
        if let Some(s) = sweep {
            if low < s.start_hz || high > s.stop_hz {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "{what}: expected a band inside the sweep, {} to {} Hz, found [{low}, {high}]",
                        s.start_hz, s.stop_hz
                    ),
                );
                return None;
            }
        }
        Some(Band {
            low_hz: low,
            high_hz: high,
        })
    }

    /// Two finite numbers.
    fn pair(&mut self, v: &Spanned<RawPair>, what: &str, shape: &str) -> Option<(f64, f64)> {
        let items = &v.0;
        if items.len() != 2 {
            self.report(
                Pos::of_value(v),
                format!(
                    "{what}: expected two numbers {shape}, found {} number{}",
                    items.len(),
                    if items.len() == 1 { "" } else { "s" }
                ),
            );
            return None;
        }
        let a = self.finite(&items[0], what);
        let b = self.finite(&items[1], what);
        Some((a?, b?))
    }

    /// `1/N` octave smoothing; `Some(None)` when absent.
    fn smoothing(&mut self, v: Option<&Spanned<String>>, what: &str) -> Option<Option<u32>> {
        let Some(v) = v else {
            return Some(None);
        };
        let n = v
            .trim()
            .strip_prefix("1/")
            .and_then(|n| n.trim().parse::<u32>().ok())
            .filter(|n| (1..=MAX_SMOOTHING_FRACTION).contains(n));
        match n {
            Some(n) => Some(Some(n)),
            None => {
                self.report(
                    Pos::of_value(v),
                    format!(
                        "{what}: expected `1/N` octave with N from 1 to {MAX_SMOOTHING_FRACTION}, \
                         found {}",
                        raw::found_scalar(v)
                    ),
                );
                None
            }
        }
    }

    fn normalize(
        &mut self,
        v: &Spanned<raw::RawNormalize>,
        ctx: &str,
        sweep: Option<SweepBand>,
    ) -> Option<Normalize> {
        match (&v.at_hz, &v.band_hz) {
            (Some(at), None) => {
                let what = label(ctx, "normalize.at_hz");
                let f = self.finite(at, &what)?;
                if let Some(s) = sweep {
                    if f < s.start_hz || f > s.stop_hz {
                        self.report(
                            Pos::of_value(at),
                            format!(
                                "{what}: expected a frequency inside the sweep, {} to {} Hz, found {f}",
                                s.start_hz, s.stop_hz
                            ),
                        );
                        return None;
                    }
                }
                Some(Normalize::AtHz(f))
            }
            (None, Some(b)) => self
                .band(b, &label(ctx, "normalize.band_hz"), sweep)
                .map(Normalize::Band),
            (Some(_), Some(_)) | (None, None) => {
                let found = if v.at_hz.is_some() { "both" } else { "neither" };
                self.report(
                    Pos::of_value(v),
                    format!(
                        "{}: expected exactly one of `at_hz` or `band_hz`, found {found}",
                        label(ctx, "normalize")
                    ),
                );
                None
            }
        }
    }

    /// Resolve a limit line (reading its CSV) and check its points.
    fn limit(
        &mut self,
        v: &Spanned<RawLimit>,
        what: &str,
        sweep: Option<SweepBand>,
    ) -> Option<LimitLine> {
        let value_pos = Pos::of_value(v);
        let mut all_points_ok = true;
        // (hz, db, where) per point.
        let (points, origin): (Vec<(f64, f64, Location)>, String) = match &**v {
            RawLimit::Csv(rel) => {
                if rel.trim().parse::<f64>().is_ok() {
                    self.report(
                        value_pos,
                        format!(
                            "{what}: expected a CSV file path or a list of [hz, db] points, \
                             found the number {}",
                            rel.trim()
                        ),
                    );
                    return None;
                }
                let file = self.dir.join(rel);
                let file_label = file.display().to_string();
                let text = match read_data_file(&file, "limit") {
                    Ok(t) => t,
                    Err(why) => {
                        self.report(value_pos, format!("{what}: {why}"));
                        return None;
                    }
                };
                let (points, problems) = parse_limit_csv(&text, &file_label);
                for p in problems {
                    all_points_ok = false;
                    let message = format!("{what}: {}", p.message);
                    self.report_at(p.location, message);
                }
                (
                    points
                        .into_iter()
                        .map(|p| (p.freq_hz, p.level_db, p.location))
                        .collect(),
                    rel.clone(),
                )
            }
            RawLimit::Points(items) => {
                // Bad points are reported and left out, so that the good ones are still
                // checked for order and range; the line is refused at the end.
                let mut pts = Vec::new();
                for item in items {
                    match self.pair(item, what, "[hz, db]") {
                        Some((hz, db)) => pts.push((hz, db, Pos::of_value(item).at(&self.path))),
                        None => all_points_ok = false,
                    }
                }
                (pts, "inline".to_string())
            }
        };
        let mut ok = all_points_ok;
        if all_points_ok && points.len() < 2 {
            self.report(
                value_pos,
                format!("{what}: expected at least 2 points, found {}", points.len()),
            );
            ok = false;
        }
        for (k, (hz, _, loc)) in points.iter().enumerate() {
            if k > 0 {
                let (prev, _, prev_loc) = &points[k - 1];
                if hz <= prev {
                    let at = if prev_loc.path == loc.path {
                        format!("line {}", prev_loc.line)
                    } else {
                        prev_loc.path.clone()
                    };
                    self.report_at(
                        loc.clone(),
                        format!(
                            "{what}: expected frequencies in strictly ascending order, found {hz} Hz \
                             after {prev} Hz ({at})"
                        ),
                    );
                    ok = false;
                }
            }
            if let Some(s) = sweep {
                if *hz < s.start_hz || *hz > s.stop_hz {
                    self.report_at(
                        loc.clone(),
                        format!(
                            "{what}: expected a frequency inside the sweep, {} to {} Hz, found {hz}",
                            s.start_hz, s.stop_hz
                        ),
                    );
                    ok = false;
                }
            }
        }
        ok.then(|| LimitLine {
            points: points.iter().map(|(hz, db, _)| (*hz, *db)).collect(),
            origin,
        })
    }
}
