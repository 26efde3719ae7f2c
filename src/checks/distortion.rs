//! The distortion checks: `thd`, `harmonic` (one order) and `rub_buzz`, each a maximum over
//! a band of excitation frequencies.
//!
//! Called from [`super::judge`]. The analysis quotes distortion at the excitation frequency
//! f and leaves a point `null` where n·f was not measured (above the sweep's stop
//! frequency or the Nyquist frequency). Null points are skipped; when every point in the
//! band is null the check is a retest, not a fail: the plan asks for distortion where its
//! own stimulus cannot measure any, which is a configuration problem to fix, and a check
//! that measured nothing must not pass either. NaN values are treated as null.
//!
//! Margins:
//! - THD: `20·lg(max_percent / measured)` dB, the limit-to-measured ratio in dB (positive
//!   inside); a measured THD of 0 % has no finite margin and passes with margin `null`;
//! - HDn and rub and buzz (both dB re fundamental): `max_db − measured`.

use super::{band_indices, format_band, format_hz, grid_mismatch, Finding};
use crate::analysis::ChannelMeasurement;
use crate::plan::Band;
use crate::Verdict;

/// The largest value of a nullable grid curve in a band.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BandMax {
    /// No grid point lies in the band.
    NoPoints,
    /// Every point in the band is null; how many there are.
    AllNull {
        /// Grid points in the band.
        n_points: usize,
    },
    /// The maximum over the measured points.
    Max {
        /// Largest value (unit of the curve).
        value: f64,
        /// Excitation frequency of the largest value, Hz (the first, on ties).
        at_hz: f64,
        /// Measured (non-null) points in the band.
        n_measured: usize,
        /// Null points in the band (skipped).
        n_null: usize,
    },
}

/// Maximum of `values` over the grid points inside `band`, skipping null and NaN.
pub fn band_max(freqs_hz: &[f64], values: &[Option<f64>], band: Band) -> BandMax {
    let idx = band_indices(freqs_hz, band);
    if idx.is_empty() {
        return BandMax::NoPoints;
    }
    let mut best: Option<(f64, f64)> = None;
    let mut n_measured = 0;
    for &i in &idx {
        let Some(v) = values.get(i).copied().flatten().filter(|v| !v.is_nan()) else {
            continue;
        };
        n_measured += 1;
        if best.is_none_or(|(b, _)| v > b) {
            best = Some((v, freqs_hz[i]));
        }
    }
    match best {
        None => BandMax::AllNull {
            n_points: idx.len(),
        },
        Some((value, at_hz)) => BandMax::Max {
            value,
            at_hz,
            n_measured,
            n_null: idx.len() - n_measured,
        },
    }
}

/// Judge THD (%, re fundamental) of `m` over `band` against `max_percent`.
pub fn judge_thd(m: &ChannelMeasurement, band: Band, max_percent: f64) -> Finding {
    if let Some(f) = grid_mismatch(m, "thd_percent", m.thd_percent.len()) {
        return f;
    }
    judge_thd_curve(&m.frequencies_hz, &m.thd_percent, band, max_percent)
}

/// Judge a THD curve (%) over `band` against `max_percent`.
pub fn judge_thd_curve(
    freqs_hz: &[f64],
    thd_percent: &[Option<f64>],
    band: Band,
    max_percent: f64,
) -> Finding {
    let (value, at_hz, counts) = match measured_max(freqs_hz, thd_percent, band, "THD") {
        Ok(x) => x,
        Err(f) => return f,
    };
    let detail = format!(
        "max THD {value:.3} % at {} over {}{counts}, limit {max_percent:.3} %",
        format_hz(at_hz),
        format_band(band)
    );
    if value <= 0.0 {
        // No distortion measured at all: inside any positive limit, with no finite margin.
        return Finding {
            verdict: if max_percent >= 0.0 {
                Verdict::Pass
            } else {
                Verdict::Fail
            },
            worst_margin_db: None,
            at_hz: Some(at_hz),
            detail,
        };
    }
    Finding::judged(20.0 * (max_percent / value).log10(), Some(at_hz), detail)
}

/// Judge harmonic `order` (HDn, dB re fundamental) of `m` over `band` against `max_db`.
pub fn judge_harmonic(m: &ChannelMeasurement, order: usize, band: Band, max_db: f64) -> Finding {
    let Some(curve) = m.harmonics_db.get(&order.to_string()) else {
        let analysed: Vec<&str> = m.harmonics_db.keys().map(String::as_str).collect();
        return Finding::retest(format!(
            "not judged: harmonic {order} was not analysed (analysed: {})",
            if analysed.is_empty() {
                "none".to_string()
            } else {
                analysed.join(", ")
            }
        ));
    };
    if let Some(f) = grid_mismatch(m, &format!("harmonic {order}"), curve.len()) {
        return f;
    }
    judge_db_curve(
        &m.frequencies_hz,
        curve,
        band,
        max_db,
        &format!("HD{order}"),
    )
}

/// Judge the rub-and-buzz indicator (dB re fundamental) of `m` over `band` against `max_db`.
pub fn judge_rub_buzz(m: &ChannelMeasurement, band: Band, max_db: f64) -> Finding {
    if let Some(f) = grid_mismatch(m, "rub_buzz_db", m.rub_buzz_db.len()) {
        return f;
    }
    judge_db_curve(
        &m.frequencies_hz,
        &m.rub_buzz_db,
        band,
        max_db,
        "rub and buzz",
    )
}

/// Judge a dB curve's maximum over `band` against `max_db`; `what` names it in the detail.
pub fn judge_db_curve(
    freqs_hz: &[f64],
    values_db: &[Option<f64>],
    band: Band,
    max_db: f64,
    what: &str,
) -> Finding {
    let (value, at_hz, counts) = match measured_max(freqs_hz, values_db, band, what) {
        Ok(x) => x,
        Err(f) => return f,
    };
    Finding::judged(
        max_db - value,
        Some(at_hz),
        format!(
            "max {what} {value:.2} dB at {} over {}{counts}, limit {max_db:.2} dB",
            format_hz(at_hz),
            format_band(band)
        ),
    )
}

/// The band maximum with a note on skipped points, or the retest finding when there is
/// nothing to judge.
fn measured_max(
    freqs_hz: &[f64],
    values: &[Option<f64>],
    band: Band,
    what: &str,
) -> Result<(f64, f64, String), Finding> {
    match band_max(freqs_hz, values, band) {
        BandMax::NoPoints => Err(Finding::retest(format!(
            "not judged: no grid point in the band {}",
            format_band(band)
        ))),
        BandMax::AllNull { n_points } => Err(Finding::retest(format!(
            "not judged: {what} not measured at any of the {n_points} points in {} \
             (n·f beyond the sweep's stop frequency or the Nyquist frequency); narrow the band or raise the stop frequency",
            format_band(band)
        ))),
        BandMax::Max {
            value,
            at_hz,
            n_measured,
            n_null,
        } => {
            let counts = if n_null == 0 {
                String::new()
            } else {
                format!(" ({n_measured} points measured, {n_null} not measured)")
            };
            Ok((value, at_hz, counts))
        }
    }
}
