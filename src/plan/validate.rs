//! Stage two of plan loading: validation and the typed [`Plan`].
//!
//! [`load_plan`] reads the file ([`crate::config::load_file`]), [`super::raw::parse`] (stage
//! one) decodes it, and [`Plan::from_raw`] checks every field and cross-field rule, reads
//! limit-line CSV files relative to the plan ([`limit_csv`]), fills in defaults, converts
//! channel numbers from the 1-based numbers of the YAML to the 0-based indices of
//! [`ChannelSpec`](super::ChannelSpec), and hashes the result ([`super::hash`]). Every problem
//! of both stages is returned at once, each at the value that caused it, sorted by file, line
//! and column.
//!
//! Stage two is split by plan section: each section's file (`stimulus.rs`, `analysis.rs`,
//! `channels.rs`, `correction.rs`, `product.rs`, `rig.rs`, and [`super::checks`] with one
//! file per check kind) holds that section's schema and the methods of the shared
//! `Validator` that check it. This file holds the entry points, the value checks every
//! section uses, the top-level keys and the order the sections are validated in.
//!
//! # Defaults
//!
//! | key | default | why |
//! | --- | --- | --- |
//! | `description` | empty | |
//! | `stimulus.fade_in_s`, `fade_out_s` | [`DEFAULT_FADE_S`] = 5 ms | a half-cosine this long removes the click of the sweep's abrupt ends at a cost of a few samples (common practice) |
//! | `stimulus.silence_before_s` | [`DEFAULT_SILENCE_BEFORE_S`] = 0.1 s | room for the noise window of the SNR estimate, at least [`MIN_SILENCE_BEFORE_S`] |
//! | `stimulus.silence_after_s` | [`DEFAULT_SILENCE_AFTER_S`] = 0.2 s | room for latency and the impulse-response tail |
//! | `analysis` | [`DEFAULT_MAX_HARMONIC`](super::DEFAULT_MAX_HARMONIC), [`DEFAULT_POINTS_PER_OCTAVE`](super::DEFAULT_POINTS_PER_OCTAVE), [`DEFAULT_MIN_SNR_DB`](super::DEFAULT_MIN_SNR_DB) | |
//! | `rig` | simulated, seed [`DEFAULT_RIG_SEED`] | a plan runs without hardware |
//! | check `channels` | every channel of the plan | |

use super::raw::{self, RawPair, RawPlan, Section};
use super::stimulus::SweepBand;
use super::{Band, CheckSpec, LevelUnit, Location, Plan, PlanError, Problem};
use crate::config::{found_scalar, is_id, label, Pos};
use marked_yaml::Spanned;
use std::path::{Path, PathBuf};

// The limits and defaults of each section, under the paths they have always had.
pub use super::analysis::{MAX_HARMONIC_LIMIT, MAX_POINTS_PER_OCTAVE, MIN_HARMONIC_SEPARATION_S};
pub use super::channels::MAX_CHANNEL_NUMBER;
pub use super::checks::limit_csv::{self, parse_limit_csv, CsvPoint};
pub use super::checks::MAX_SMOOTHING_FRACTION;
pub use super::rig::DEFAULT_RIG_SEED;
pub use super::stimulus::{
    DEFAULT_FADE_S, DEFAULT_SILENCE_AFTER_S, DEFAULT_SILENCE_BEFORE_S, DURATION_RANGE_S,
    LEVEL_RANGE_DBFS, MAX_SILENCE_S, MIN_SILENCE_BEFORE_S,
};

/// Range of a declared nominal impedance, Ω: earphones are 8 Ω to a few hundred, some
/// studio headphones 600 Ω; the range leaves room at both ends and refuses a value in kΩ
/// or mΩ written by mistake.
pub const NOMINAL_IMPEDANCE_RANGE_OHM: (f64, f64) = (1.0, 2000.0);
/// Range of the sample rate, Hz.
pub const SAMPLE_RATE_RANGE_HZ: (u32, u32) = (8_000, 384_000);

/// Load, validate and hash a plan file (read by [`crate::config::load_file`]: a regular
/// file of at most [`crate::config::MAX_CONFIG_BYTES`], UTF-8).
pub fn load_plan(path: &Path) -> Result<Plan, PlanError> {
    crate::config::load_file(path, load_plan_str)
}

/// Load a plan from text; `path` is used in messages and to resolve relative CSV paths.
pub fn load_plan_str(text: &str, path: &Path) -> Result<Plan, PlanError> {
    load_checked_str(text, path).map(|c| c.plan)
}

/// A valid plan and the warnings its validation gave: limits that no unit of the declared
/// product could meet or that none could fail ([`super::checks::plausible`]). A warning does
/// not refuse the plan; `tragus validate` prints them with their positions.
#[derive(Debug, Clone)]
pub struct CheckedPlan {
    /// The plan.
    pub plan: Plan,
    /// Its warnings, `path:line:col` of the value each is about, in file order.
    pub warnings: Vec<Problem>,
}

/// [`load_plan`], keeping the warnings.
pub fn load_plan_checked(path: &Path) -> Result<CheckedPlan, PlanError> {
    crate::config::load_file(path, load_checked_str)
}

/// [`load_plan_str`], keeping the warnings.
pub fn load_checked_str(text: &str, path: &Path) -> Result<CheckedPlan, PlanError> {
    let label = path.display().to_string();
    let (raw, mut problems) = raw::parse(text, &label);
    if let Some(raw) = raw {
        match Plan::checked_from_raw(&raw, path) {
            Ok(mut checked) if problems.is_empty() => {
                crate::config::sort_problems(&mut checked.warnings, &label);
                return Ok(checked);
            }
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
        Plan::checked_from_raw(raw, source).map(|c| c.plan)
    }

    /// [`Plan::from_raw`], keeping the warnings (unsorted).
    pub fn checked_from_raw(raw: &RawPlan, source: &Path) -> Result<CheckedPlan, Vec<Problem>> {
        let mut v = Validator {
            path: source.display().to_string(),
            dir: source.parent().unwrap_or(Path::new(".")).to_path_buf(),
            problems: Vec::new(),
            nominal_impedance_ohm: None,
            level_limits: Vec::new(),
        };
        let plan = v.plan(raw, source);
        match plan {
            Some(plan) if v.problems.is_empty() => {
                let warnings = super::checks::plausible::warnings(
                    &v.level_limits,
                    plan.level_unit,
                    plan.product.as_ref(),
                    plan.nominal_impedance_ohm,
                );
                Ok(CheckedPlan { plan, warnings })
            }
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

/// Stage two's state: the plan's problems so far and what later sections need of earlier
/// ones. Each section's file adds the methods that validate it.
pub(super) struct Validator {
    /// The plan file's label in problems.
    pub(super) path: String,
    /// The plan's directory, against which the files it names resolve.
    pub(super) dir: PathBuf,
    /// Problems found so far.
    pub(super) problems: Vec<Problem>,
    /// The plan's `nominal_impedance_ohm`, once read (checks in dB SPL/mW need it).
    pub(super) nominal_impedance_ohm: Option<f64>,
    /// Absolute level limits the checks hold, with where each is written: compared with
    /// the product's declaration once the whole plan is read (warnings only).
    pub(super) level_limits: Vec<super::checks::plausible::LevelLimit>,
}

impl Validator {
    /// Record a problem at `pos` of the plan file.
    pub(super) fn report(&mut self, pos: Pos, message: String) {
        self.problems.push(Problem {
            location: pos.at(&self.path),
            message,
        });
    }

    /// Record a problem anywhere (in a file the plan names).
    pub(super) fn report_at(&mut self, location: Location, message: String) {
        self.problems.push(Problem { location, message });
    }

    /// A required key: reports it missing (at the mapping) unless stage one rejected it.
    pub(super) fn required<'v, T, S>(
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
    pub(super) fn required_positive<S>(
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
    pub(super) fn finite(&mut self, v: &Spanned<f64>, what: &str) -> Option<f64> {
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
    pub(super) fn in_range(
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
    pub(super) fn int_in_range(
        &mut self,
        v: &Spanned<i128>,
        what: &str,
        lo: i128,
        hi: i128,
    ) -> Option<i128> {
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
                        found_scalar(other)
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

    /// Every section in the order later ones need earlier ones, then the hash.
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
                        found_scalar(v)
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
        let max_retests = match &t.max_retests {
            None => Some(None),
            Some(v) => self
                .int_in_range(v, "max_retests", 0, i128::from(super::MAX_RETESTS_LIMIT))
                .map(|n| Some(n as u32)),
        };

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
            (Some(b), Some(fs), Some(a)) => Some(crate::dsp::sweep::needed_band_hz(
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
        let product_earphone = raw
            .product
            .as_ref()
            .map_or(Some(None), |p| self.earphone(p));

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
            max_retests: max_retests?,
            product_earphone: product_earphone?,
        };
        plan.sha256 = super::hash::plan_sha256(&plan);
        Some(plan)
    }

    /// A band `[low_hz, high_hz]` inside the sweep band.
    pub(super) fn band(
        &mut self,
        v: &Spanned<RawPair>,
        what: &str,
        sweep: Option<SweepBand>,
    ) -> Option<Band> {
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
    pub(super) fn pair(
        &mut self,
        v: &Spanned<RawPair>,
        what: &str,
        shape: &str,
    ) -> Option<(f64, f64)> {
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
}
