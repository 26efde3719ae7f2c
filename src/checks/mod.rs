//! Checks: measurements → a verdict per check and per unit.
//!
//! Sits after the analysis (and the coupler correction) and before the store. Each check
//! kind lives in its own file; [`judge`] runs a plan's checks in plan order. Margins are in
//! dB (THD margins in dB of the ratio limit/measured): positive inside the limits, negative
//! outside; a margin of exactly 0 dB is inside (a limit is met when it is reached).
//!
//! Rules that hold for every kind:
//! - A check on a channel whose measurement is not valid is a retest, never judged: its
//!   numbers are garbage (no signal, clipping, …), so they say nothing about the unit.
//! - A check that cannot be judged on a valid measurement (no grid point in its band, every
//!   distortion value unmeasured there, a harmonic that was not analysed) is a retest too,
//!   with a detail saying why: it is a configuration problem of plan and stimulus, and a
//!   check that was not judged must never count as a pass.
//! - A check with no channels applies to every plan channel.
//! - Results come in plan order of the checks, then in plan order of the channels.
//! - Band edges are inclusive, with a relative tolerance of [`FREQ_REL_TOL`].
//!
//! The unit verdict is made in [`verdict`].

pub mod distortion;
pub mod limit_line;
pub mod verdict;

/// Declares the judging module of every check kind and the dispatch over them, from the one
/// list in the plan's registry ([`crate::for_each_check_kind`]).
macro_rules! judge_modules {
    ($($kind:ident),*) => {
        $(pub mod $kind;)*

        /// The finding of the kind's own judge (each returns `None` for another kind).
        fn dispatch(
            kind: &CheckKind,
            m: &ChannelMeasurement,
            nominal_impedance_ohm: Option<f64>,
        ) -> Finding {
            $(
                if let Some(f) = $kind::judge_kind(kind, m, nominal_impedance_ohm) {
                    return f;
                }
            )*
            Finding::retest(format!("no judge for check kind `{}`", kind.name()))
        }
    };
}
crate::for_each_check_kind!(judge_modules);

use crate::analysis::ChannelMeasurement;
use crate::plan::{Band, CheckKind, CheckSpec, Plan};
use crate::Verdict;

/// Relative tolerance when a grid frequency is compared with a frequency written in the
/// plan (band edges, limit-line ends). Grid frequencies are computed (IEC 61260-1 base-10
/// midbands, `1000·10^(k/…)`), so a grid point meant to be 10 kHz may be 10000.000000002 Hz;
/// 1e-9 is far above that rounding (a few ULP, ~1e-15 relative) and far below the grid's
/// spacing (1/24 octave is ~3 % relative).
pub const FREQ_REL_TOL: f64 = 1e-9;

/// The outcome of one check on one channel (or a channel pair, for balance).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CheckResult {
    /// Check id from the plan.
    pub id: String,
    /// Check kind (`response`, `sensitivity`, …).
    pub kind: String,
    /// Channel name, or `a/b` for a balance check.
    pub channel: String,
    /// Verdict of this check.
    pub verdict: Verdict,
    /// Smallest margin found, dB (positive: inside the limits); `null` for polarity.
    pub worst_margin_db: Option<f64>,
    /// Frequency of the worst margin, Hz; `null` when not frequency-dependent.
    pub at_hz: Option<f64>,
    /// One line in words: what was measured against what.
    pub detail: String,
}

/// What a check kind found, before it is labelled with check id, kind and channel.
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    /// Verdict of the check.
    pub verdict: Verdict,
    /// Smallest margin, dB; `None` when the check has no margin or was not judged.
    pub worst_margin_db: Option<f64>,
    /// Where the smallest margin is, Hz.
    pub at_hz: Option<f64>,
    /// One line in words.
    pub detail: String,
}

impl Finding {
    /// A check that could not be judged; `detail` says why.
    pub fn retest(detail: impl Into<String>) -> Finding {
        Finding {
            verdict: Verdict::Retest,
            worst_margin_db: None,
            at_hz: None,
            detail: detail.into(),
        }
    }

    /// A judged check: pass when `margin_db ≥ 0`, fail otherwise (a NaN margin fails, so
    /// an arithmetic accident can never pass a unit).
    pub fn judged(margin_db: f64, at_hz: Option<f64>, detail: impl Into<String>) -> Finding {
        let verdict = if margin_db >= 0.0 {
            Verdict::Pass
        } else {
            Verdict::Fail
        };
        Finding {
            verdict,
            worst_margin_db: Some(margin_db),
            at_hz,
            detail: detail.into(),
        }
    }

    fn label(self, spec: &CheckSpec, channel: &str) -> CheckResult {
        CheckResult {
            id: spec.id.clone(),
            kind: spec.kind.name().to_string(),
            channel: channel.to_string(),
            verdict: self.verdict,
            worst_margin_db: self.worst_margin_db,
            at_hz: self.at_hz,
            detail: self.detail,
        }
    }
}

/// Judge every check of `plan` against the measurements (one per plan channel, in plan
/// order) and return the check results and the unit verdict.
///
/// Measurements are matched to plan channels by name, so their order does not matter; a
/// plan channel without a measurement makes its checks (and the unit) a retest.
pub fn judge(plan: &Plan, channels: &[ChannelMeasurement]) -> (Vec<CheckResult>, Verdict) {
    let judged = judge_checks(plan, channels);
    let unit = verdict::unit_verdict(
        judged.any_channel_invalid,
        judged.results.iter().map(|r| r.verdict),
        [],
    );
    (judged.results, unit)
}

/// The check results of a unit, and whether any of its channels was not validly measured
/// (which makes the unit a retest whatever the checks say).
#[derive(Debug, Clone)]
pub struct JudgedChecks {
    /// One result per check and channel, in plan order (listening steps excluded).
    pub results: Vec<CheckResult>,
    /// A plan channel has no measurement, or a measurement is not valid.
    pub any_channel_invalid: bool,
}

/// Judge every measured check of `plan` (see [`judge`]) without deciding the unit verdict.
pub fn judge_checks(plan: &Plan, channels: &[ChannelMeasurement]) -> JudgedChecks {
    let find = |name: &str| channels.iter().find(|m| m.name == name);
    let mut results = Vec::new();
    for spec in &plan.checks {
        // A listening step is judged by the operator, after the measurement (the bench
        // adds its result); nothing here can judge it.
        if matches!(spec.kind, CheckKind::Listening { .. }) {
            continue;
        }
        let names = check_channels(plan, spec);
        if let CheckKind::Balance {
            band,
            max_diff_db,
            smoothing_fraction,
        } = &spec.kind
        {
            let label = names.join("/");
            let finding = match names.as_slice() {
                [a, b] => match (find(a), find(b)) {
                    (Some(ma), Some(mb)) => {
                        balance::judge(ma, mb, *band, *max_diff_db, *smoothing_fraction)
                    }
                    (None, _) => no_measurement(a),
                    (_, None) => no_measurement(b),
                },
                _ => Finding::retest(format!(
                    "balance needs exactly two channels, the check has {} ({})",
                    names.len(),
                    if names.is_empty() {
                        "none".to_string()
                    } else {
                        names.join(", ")
                    }
                )),
            };
            results.push(finding.label(spec, &label));
            continue;
        }
        for name in &names {
            let finding = match find(name) {
                Some(m) => judge_channel(&spec.kind, m, plan.nominal_impedance_ohm),
                None => no_measurement(name),
            };
            results.push(finding.label(spec, name));
        }
    }
    let any_invalid = plan
        .channels
        .iter()
        .any(|c| find(&c.name).is_none_or(|m| !m.is_valid()))
        || channels.iter().any(|m| !m.is_valid());
    JudgedChecks {
        results,
        any_channel_invalid: any_invalid,
    }
}

/// Judge one single-channel check kind on one measurement (`nominal_impedance_ohm`: the
/// plan's, for sensitivities in dB SPL/mW).
fn judge_channel(
    kind: &CheckKind,
    m: &ChannelMeasurement,
    nominal_impedance_ohm: Option<f64>,
) -> Finding {
    if let Some(f) = invalid_measurement(m) {
        return f;
    }
    dispatch(kind, m, nominal_impedance_ohm)
}

/// The channels a check applies to, in plan channel order: the check's own list, or every
/// plan channel when the list is empty. Names the plan does not know keep their listed
/// order after the known ones (they are judged as missing measurements); repeats are
/// dropped.
pub fn check_channels(plan: &Plan, spec: &CheckSpec) -> Vec<String> {
    if spec.channels.is_empty() {
        return plan.channels.iter().map(|c| c.name.clone()).collect();
    }
    let mut names: Vec<&String> = Vec::new();
    for n in &spec.channels {
        if !names.contains(&n) {
            names.push(n);
        }
    }
    // Stable sort: unknown names (usize::MAX) stay in listed order at the end.
    names.sort_by_key(|n| plan.channel_index(n).unwrap_or(usize::MAX));
    names.into_iter().cloned().collect()
}

/// A retest finding when `m` is not valid, saying why.
pub fn invalid_measurement(m: &ChannelMeasurement) -> Option<Finding> {
    if m.is_valid() {
        return None;
    }
    let reasons: Vec<String> = m.retest_reasons.iter().map(|r| r.to_string()).collect();
    Some(Finding::retest(format!(
        "not judged: measurement of {} not valid: {}",
        m.name,
        reasons.join("; ")
    )))
}

fn no_measurement(name: &str) -> Finding {
    Finding::retest(format!("not judged: no measurement for channel {name}"))
}

/// True when `freq_hz` lies in `band`, edges included (with [`FREQ_REL_TOL`]).
pub fn in_band(freq_hz: f64, band: Band) -> bool {
    freq_hz >= band.low_hz * (1.0 - FREQ_REL_TOL) && freq_hz <= band.high_hz * (1.0 + FREQ_REL_TOL)
}

/// Indices of the grid points inside `band`.
pub fn band_indices(freqs_hz: &[f64], band: Band) -> Vec<usize> {
    (0..freqs_hz.len())
        .filter(|&i| in_band(freqs_hz[i], band))
        .collect()
}

/// Mean of `curve_db` over the grid points inside `band` (a plain dB average on the log
/// grid, every grid point weighted alike); NaN points are skipped. `None` when no point
/// with a number lies in the band.
pub fn band_mean_db(freqs_hz: &[f64], curve_db: &[f64], band: Band) -> Option<(f64, usize)> {
    let values: Vec<f64> = band_indices(freqs_hz, band)
        .into_iter()
        .filter_map(|i| curve_db.get(i).copied())
        .filter(|v| !v.is_nan())
        .collect();
    if values.is_empty() {
        None
    } else {
        Some((
            values.iter().sum::<f64>() / values.len() as f64,
            values.len(),
        ))
    }
}

/// A retest finding when an array of the measurement does not match the grid in length
/// (an analysis bug or a hand-edited record; judging it would misplace frequencies).
pub fn grid_mismatch(m: &ChannelMeasurement, what: &str, len: usize) -> Option<Finding> {
    let n = m.frequencies_hz.len();
    (len != n).then(|| {
        Finding::retest(format!(
            "not judged: {what} of {} has {len} points, the frequency grid has {n}",
            m.name
        ))
    })
}

/// A band in words, e.g. `100 Hz–10.0 kHz`.
pub fn format_band(band: Band) -> String {
    format!("{}–{}", format_hz(band.low_hz), format_hz(band.high_hz))
}

/// A frequency for people: three significant digits, in Hz below 1 kHz and in kHz from
/// there (`125 Hz`, `20.6 Hz`, `2.81 kHz`, `12.5 kHz`).
pub fn format_hz(freq_hz: f64) -> String {
    if !freq_hz.is_finite() {
        return format!("{freq_hz} Hz");
    }
    // Decide the unit and decimals on the rounded value so 999.7 Hz reads "1.00 kHz",
    // not "1000 Hz", and 9.996 kHz reads "10.0 kHz", not "10.00 kHz".
    let sig3 = |v: f64| -> String {
        let a = v.abs();
        if a < 9.995 {
            format!("{v:.2}")
        } else if a < 99.95 {
            format!("{v:.1}")
        } else {
            format!("{v:.0}")
        }
    };
    if freq_hz.abs() < 999.5 {
        format!("{} Hz", sig3(freq_hz))
    } else {
        format!("{} kHz", sig3(freq_hz / 1000.0))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn format_hz_three_significant_digits() {
        // The brief's examples ("2.81 kHz", "125 Hz") and the unit switch at the rounding
        // boundary; expected strings written by hand.
        assert_eq!(format_hz(2810.0), "2.81 kHz");
        assert_eq!(format_hz(125.0), "125 Hz");
        assert_eq!(format_hz(19.9526), "20.0 Hz");
        assert_eq!(format_hz(999.7), "1.00 kHz");
        assert_eq!(format_hz(9996.0), "10.0 kHz");
        assert_eq!(format_hz(12589.25), "12.6 kHz");
        assert_eq!(format_hz(5.0), "5.00 Hz");
    }

    #[test]
    fn band_edges_are_inclusive_within_rounding() {
        let band = Band {
            low_hz: 100.0,
            high_hz: 10_000.0,
        };
        // 10^4 computed as 1000·10^(10/10) carries rounding; it must count as inside.
        assert!(in_band(1000.0 * 10f64.powf(10.0 / 10.0), band));
        assert!(in_band(100.0, band));
        // One 1/24-octave step beyond an edge is well outside the tolerance.
        assert!(!in_band(10_000.0 * 2f64.powf(1.0 / 24.0), band));
        assert!(!in_band(100.0 / 2f64.powf(1.0 / 24.0), band));
    }
}
