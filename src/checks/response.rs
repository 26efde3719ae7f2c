//! The `response` check: a channel's frequency response between limit lines.
//!
//! Called from [`super::judge`]. The curve judged is `response_db` on the analysis grid,
//! or that response smoothed over 1/N octave (power domain, by the analysis), optionally
//! normalised by subtracting a reference level:
//! - `AtHz(f)` without smoothing: the unsmoothed level at `f` from the fine spectrum
//!   ([`ChannelMeasurement::level_at_db`]), so `f` need not be a grid point;
//! - `AtHz(f)` with smoothing: the smoothed grid curve interpolated linearly in dB versus
//!   log-frequency at `f` (the same rule as limit lines). The reference then comes from the
//!   very curve that is judged: normalising a smoothed curve by an unsmoothed level would
//!   shift it by whatever ripple happens to sit at `f`;
//! - `Band(b)`: the mean dB of the judged curve's grid points inside `b`.
//!
//! At each grid point where at least one line is defined the margin is
//! `min(upper − r, r − lower)` over the lines defined there; the worst margin is the
//! minimum over points, and the check fails when it is below 0 dB.

use super::limit_line::interpolate_log_f;
use super::{band_mean_db, format_band, format_hz, grid_mismatch, Finding};
use crate::analysis::ChannelMeasurement;
use crate::plan::{LimitLine, Normalize};

/// Judge `m` against the limit lines (at least one present).
pub fn judge(
    m: &ChannelMeasurement,
    upper: Option<&LimitLine>,
    lower: Option<&LimitLine>,
    smoothing_fraction: Option<u32>,
    normalize: Option<Normalize>,
) -> Finding {
    if upper.is_none() && lower.is_none() {
        return Finding::retest("not judged: the check has neither an upper nor a lower line");
    }
    if let Some(f) = grid_mismatch(m, "response_db", m.response_db.len()) {
        return f;
    }
    let freqs = &m.frequencies_hz;
    match smoothing_fraction {
        None => judge_grid_curve(freqs, &m.response_db, upper, lower, normalize, |f_hz| {
            Some(m.level_at_db(f_hz))
        }),
        Some(0) => Finding::retest("not judged: smoothing over 1/0 octave is not defined"),
        Some(k) => {
            let curve = m.smoothed_response_db(k);
            if let Some(f) = grid_mismatch(m, "smoothed response", curve.len()) {
                return f;
            }
            let mut f = judge_grid_curve(freqs, &curve, upper, lower, normalize, |f_hz| {
                level_on_grid_db(freqs, &curve, f_hz)
            });
            f.detail.push_str(&format!("; 1/{k}-octave smoothed"));
            f
        }
    }
}

/// Normalise a grid curve (already smoothed, if the check smooths) and judge it against
/// the lines. `level_at_db` gives the reference level for [`Normalize::AtHz`] (`None` or a
/// non-finite level when there is none: a retest); a band reference is the curve's own
/// mean over the band. `freqs_hz` and `curve_db` have the same length.
pub fn judge_grid_curve(
    freqs_hz: &[f64],
    curve_db: &[f64],
    upper: Option<&LimitLine>,
    lower: Option<&LimitLine>,
    normalize: Option<Normalize>,
    level_at_db: impl Fn(f64) -> Option<f64>,
) -> Finding {
    let (reference_db, note) = match normalize {
        None => return judge_curve(freqs_hz, curve_db, upper, lower),
        Some(Normalize::AtHz(f_hz)) => match level_at_db(f_hz).filter(|v| v.is_finite()) {
            Some(v) => (
                v,
                format!("normalised to the level at {} ({v:.2} dB)", format_hz(f_hz)),
            ),
            None => {
                return Finding::retest(format!(
                    "not judged: no level at the normalisation frequency {}",
                    format_hz(f_hz)
                ))
            }
        },
        Some(Normalize::Band(b)) => match band_mean_db(freqs_hz, curve_db, b) {
            Some((v, _)) if v.is_finite() => (
                v,
                format!("normalised to the mean over {} ({v:.2} dB)", format_band(b)),
            ),
            _ => {
                return Finding::retest(format!(
                    "not judged: no level over the normalisation band {}",
                    format_band(b)
                ))
            }
        },
    };
    let judged: Vec<f64> = curve_db.iter().map(|r| r - reference_db).collect();
    let mut finding = judge_curve(freqs_hz, &judged, upper, lower);
    finding.detail.push_str("; ");
    finding.detail.push_str(&note);
    finding
}

/// Level of a grid curve at `freq_hz`, interpolated linearly in dB versus log-frequency;
/// `None` outside the grid.
pub fn level_on_grid_db(freqs_hz: &[f64], curve_db: &[f64], freq_hz: f64) -> Option<f64> {
    let n = freqs_hz.len().min(curve_db.len());
    interpolate_log_f(n, |i| (freqs_hz[i], curve_db[i]), freq_hz)
}

/// Judge an already smoothed and normalised curve on its grid against the lines. Points
/// where neither line is defined, and NaN points, are not judged; a check with no judged
/// point is a retest.
pub fn judge_curve(
    freqs_hz: &[f64],
    curve_db: &[f64],
    upper: Option<&LimitLine>,
    lower: Option<&LimitLine>,
) -> Finding {
    struct Worst {
        margin_db: f64,
        freq_hz: f64,
        response_db: f64,
        line_db: f64,
        is_upper: bool,
    }
    let mut worst: Option<Worst> = None;
    let (mut n_judged, mut n_outside) = (0usize, 0usize);
    for (&f, &r) in freqs_hz.iter().zip(curve_db) {
        if r.is_nan() {
            continue;
        }
        let up = upper
            .and_then(|l| l.level_at_db(f))
            .map(|v| (v - r, v, true));
        let lo = lower
            .and_then(|l| l.level_at_db(f))
            .map(|v| (r - v, v, false));
        let here = match (up, lo) {
            (Some(u), Some(l)) => {
                if l.0 < u.0 {
                    l
                } else {
                    u
                }
            }
            (Some(u), None) => u,
            (None, Some(l)) => l,
            (None, None) => continue,
        };
        n_judged += 1;
        if here.0 < 0.0 {
            n_outside += 1;
        }
        if worst.as_ref().is_none_or(|w| here.0 < w.margin_db) {
            worst = Some(Worst {
                margin_db: here.0,
                freq_hz: f,
                response_db: r,
                line_db: here.1,
                is_upper: here.2,
            });
        }
    }
    let Some(w) = worst else {
        let span = |l: Option<&LimitLine>| {
            l.and_then(LimitLine::span_hz)
                .map(|(a, b)| format!("{}–{}", format_hz(a), format_hz(b)))
        };
        let lines: Vec<String> = [span(upper), span(lower)].into_iter().flatten().collect();
        let grid = match (freqs_hz.first(), freqs_hz.last()) {
            (Some(&a), Some(&b)) => format!("{}–{}", format_hz(a), format_hz(b)),
            _ => "empty".to_string(),
        };
        return Finding::retest(format!(
            "not judged: no grid point lies in the limit lines' span (lines {}, grid {grid})",
            if lines.is_empty() {
                "without points".to_string()
            } else {
                lines.join(" and ")
            }
        ));
    };
    let side = match (w.is_upper, w.margin_db >= 0.0) {
        (true, true) => "below the upper line",
        (true, false) => "above the upper line",
        (false, true) => "above the lower line",
        (false, false) => "below the lower line",
    };
    let head = if n_outside == 0 {
        format!("inside the limits at all {n_judged} points; closest")
    } else {
        format!("{n_outside} of {n_judged} points outside; worst")
    };
    let detail = format!(
        "{head} {:.2} dB {side} at {} (response {:.2} dB, line {:.2} dB)",
        w.margin_db.abs(),
        format_hz(w.freq_hz),
        w.response_db,
        w.line_db
    );
    Finding::judged(w.margin_db, Some(w.freq_hz), detail)
}

/// This kind's judge in the registry's dispatch ([`super`]): `None` for another kind.
pub fn judge_kind(
    kind: &crate::plan::CheckKind,
    m: &ChannelMeasurement,
    _nominal_impedance_ohm: Option<f64>,
) -> Option<Finding> {
    use crate::plan::CheckKind;
    let CheckKind::Response {
        upper,
        lower,
        smoothing_fraction,
        normalize,
    } = kind else {
        return None;
    };
    Some(judge(
        m,
        upper.as_ref(),
        lower.as_ref(),
        *smoothing_fraction,
        *normalize,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Verdict;

    fn line(points: &[(f64, f64)]) -> LimitLine {
        LimitLine {
            points: points.to_vec(),
            origin: "inline".into(),
        }
    }

    #[test]
    fn worst_margin_over_both_lines() {
        // Hand computation: flat lines +3 / −3 dB; margin_i = min(3 − r_i, r_i + 3):
        // r = [0, 2, −1] → [3, 1, 2]; worst 1 dB at 1 kHz (upper side).
        let f = [100.0, 1000.0, 10_000.0];
        let r = [0.0, 2.0, -1.0];
        let up = line(&[(100.0, 3.0), (10_000.0, 3.0)]);
        let lo = line(&[(100.0, -3.0), (10_000.0, -3.0)]);
        let got = judge_curve(&f, &r, Some(&up), Some(&lo));
        assert_eq!(got.verdict, Verdict::Pass);
        assert_eq!(got.worst_margin_db, Some(1.0));
        assert_eq!(got.at_hz, Some(1000.0));
        assert!(
            got.detail.contains("below the upper line"),
            "{}",
            got.detail
        );
    }

    #[test]
    fn smoothed_grid_interpolation_in_log_frequency() {
        // Oracle: at the geometric mean of two grid points the level is the mean of dB.
        let f = [100.0, 400.0];
        let r = [-6.0, 2.0];
        // Tolerance 1e-12 dB: rounding of the log10 ratio (0.30103/0.60206).
        let got = level_on_grid_db(&f, &r, 200.0).unwrap();
        assert!((got + 2.0).abs() < 1e-12, "{got}");
        assert_eq!(level_on_grid_db(&f, &r, 50.0), None);
    }
}
