//! The `balance` check: the level difference between two channels within ±`max_diff_db`.
//!
//! Called from [`super::judge`] with the check's two channels a and b in plan channel
//! order. The difference `a − b` is taken point by point on the common grid, of the
//! unsmoothed responses or of both smoothed alike; the margin is
//! `max_diff_db − max |a − b|` over the grid points in the band, at the point of the
//! largest absolute difference. The result is labelled `a/b`.

use super::{band_indices, format_band, format_hz, grid_mismatch, invalid_measurement, Finding};
use crate::analysis::ChannelMeasurement;
use crate::plan::Band;

/// Judge the balance of `a` against `b` over `band`.
pub fn judge(
    a: &ChannelMeasurement,
    b: &ChannelMeasurement,
    band: Band,
    max_diff_db: f64,
    smoothing_fraction: Option<u32>,
) -> Finding {
    if let Some(f) = invalid_measurement(a).or_else(|| invalid_measurement(b)) {
        return f;
    }
    if a.frequencies_hz != b.frequencies_hz {
        return Finding::retest(format!(
            "not judged: {} and {} were measured on different frequency grids",
            a.name, b.name
        ));
    }
    let curves = match smoothing_fraction {
        None => (a.response_db.clone(), b.response_db.clone()),
        Some(0) => return Finding::retest("not judged: smoothing over 1/0 octave is not defined"),
        Some(k) => (a.smoothed_response_db(k), b.smoothed_response_db(k)),
    };
    if let Some(f) = grid_mismatch(a, "response", curves.0.len())
        .or_else(|| grid_mismatch(b, "response", curves.1.len()))
    {
        return f;
    }
    let mut finding = judge_curves(&a.frequencies_hz, &curves.0, &curves.1, band, max_diff_db);
    if let Some(k) = smoothing_fraction {
        finding.detail.push_str(&format!("; 1/{k}-octave smoothed"));
    }
    finding
}

/// Judge two grid curves (same grid) against each other over `band`. NaN points are not
/// judged; a band without a judged point is a retest.
pub fn judge_curves(
    freqs_hz: &[f64],
    a_db: &[f64],
    b_db: &[f64],
    band: Band,
    max_diff_db: f64,
) -> Finding {
    let mut worst: Option<(f64, f64)> = None; // (a − b, freq)
    let mut n = 0usize;
    for i in band_indices(freqs_hz, band) {
        let (Some(a), Some(b)) = (a_db.get(i), b_db.get(i)) else {
            continue;
        };
        let d = a - b;
        if d.is_nan() {
            continue;
        }
        n += 1;
        if worst.is_none_or(|(w, _)| d.abs() > w.abs()) {
            worst = Some((d, freqs_hz[i]));
        }
    }
    let Some((d, f)) = worst else {
        return Finding::retest(format!(
            "not judged: no grid point with both levels in the band {}",
            format_band(band)
        ));
    };
    Finding::judged(
        max_diff_db - d.abs(),
        Some(f),
        format!(
            "largest difference {d:+.2} dB at {} over {} ({n} points), limit ±{max_diff_db:.2} dB",
            format_hz(f),
            format_band(band)
        ),
    )
}

/// This kind's judge in the registry's dispatch ([`super`]) for one channel: a balance
/// compares two channels, which [`super::judge_checks`] hands to [`judge`]; on one it cannot
/// be judged. `None` for another kind.
pub fn judge_kind(
    kind: &crate::plan::CheckKind,
    _m: &ChannelMeasurement,
    _nominal_impedance_ohm: Option<f64>,
) -> Option<Finding> {
    matches!(kind, crate::plan::CheckKind::Balance { .. })
        .then(|| Finding::retest("balance compares two channels and cannot be judged on one"))
}
