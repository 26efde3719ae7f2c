//! Crossed limit lines: a response check whose upper line lies below its lower line
//! anywhere both are defined passes no unit there, so the plan is refused.
//!
//! Both lines are read exactly as the check reads them ([`crate::dsp::interp`]: straight in
//! dB against log frequency between points, undefined outside a line's span). The
//! difference upper − lower is then straight in dB against log frequency between any two
//! neighbouring points of either line, so its lowest value over the overlap is at one of
//! those points: comparing the two lines at every point of either line inside the overlap
//! finds every crossing, and the worst one exactly.

use super::PlacedLine;
use crate::plan::checks::CheckInput;
use crate::plan::validate::Validator;

/// Below this, dB, "upper below lower" is rounding of lines that only touch (the level
/// interpolated between two points carries a few ULP of error).
const TOUCH_TOLERANCE_DB: f64 = 1e-9;

/// Where the upper line lies furthest below the lower one.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(in crate::plan) struct Crossing {
    /// Frequency, Hz: a point of one of the lines.
    pub freq_hz: f64,
    /// The upper line there, dB.
    pub upper_db: f64,
    /// The lower line there, dB.
    pub lower_db: f64,
    /// Index of the upper line's point at `freq_hz`, if it has one there.
    pub upper_point: Option<usize>,
    /// Index of the lower line's point at `freq_hz`, if it has one there.
    pub lower_point: Option<usize>,
}

fn level(points: &[(f64, f64)], freq_hz: f64) -> Option<f64> {
    // Tolerance 0: every frequency asked for lies inside both spans.
    crate::dsp::interp::interpolate_log_f(points.len(), |i| points[i], freq_hz, 0.0)
}

/// The worst place where `upper` lies below `lower` (points ascending in frequency), or
/// `None` when it never does or the lines do not overlap.
pub(in crate::plan) fn worst_crossing(
    upper: &[(f64, f64)],
    lower: &[(f64, f64)],
) -> Option<Crossing> {
    let lo = upper.first()?.0.max(lower.first()?.0);
    let hi = upper.last()?.0.min(lower.last()?.0);
    if lo > hi {
        return None;
    }
    let mut worst: Option<Crossing> = None;
    let candidates = upper.iter().chain(lower).map(|p| p.0);
    for f in candidates.filter(|f| (lo..=hi).contains(f)) {
        let (Some(u), Some(l)) = (level(upper, f), level(lower, f)) else {
            continue;
        };
        if u - l >= -TOUCH_TOLERANCE_DB {
            continue;
        }
        if worst.is_none_or(|w| u - l < w.upper_db - w.lower_db) {
            worst = Some(Crossing {
                freq_hz: f,
                upper_db: u,
                lower_db: l,
                upper_point: upper.iter().position(|p| p.0 == f),
                lower_point: lower.iter().position(|p| p.0 == f),
            });
        }
    }
    worst
}

/// Refuse the check when its upper line lies below its lower line anywhere (module doc);
/// the problem is at the point of the worst crossing (the CSV line, with the plan position
/// naming the file, for a point read from a CSV). True when refused.
pub(super) fn refuse_crossed(
    v: &mut Validator,
    check: &CheckInput,
    upper: &PlacedLine,
    lower: &PlacedLine,
) -> bool {
    let Some(c) = worst_crossing(&upper.line.points, &lower.line.points) else {
        return false;
    };
    let (at, named) = match (c.upper_point, c.lower_point) {
        (Some(i), _) => upper.point_at(i),
        (None, Some(i)) => lower.point_at(i),
        // A candidate is always a point of one of the lines.
        (None, None) => (upper.named_at.clone(), None),
    };
    let file_note = match named {
        Some(plan_at) => format!(
            "; {} is named at {}:{}:{}",
            at.path, plan_at.path, plan_at.line, plan_at.col
        ),
        None => String::new(),
    };
    v.report_at(
        at,
        format!(
            "{}: expected the upper limit line at or above the lower one wherever both are \
             defined, found it {} dB below at {} Hz (upper {} dB, lower {} dB, each read \
             straight in dB against log frequency between its points, as the check reads \
             it): no unit can pass there{file_note}",
            check.ctx,
            round2(c.lower_db - c.upper_db),
            c.freq_hz,
            round2(c.upper_db),
            round2(c.lower_db),
        ),
    );
    true
}

/// A level for messages: to 0.01 dB, without trailing zeros (`3.5`, `-2`, `0.33`).
pub(in crate::plan) fn round2(x: f64) -> String {
    let s = format!("{:.2}", x);
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Oracle: the definition of the interpolation (straight in dB against lg f), worked by
    // hand: the lower line from (100, 0) to (10 000, 10) is 5 dB at 1 kHz (the geometric
    // mean), so an upper line point of 4 dB there is 1 dB below it.
    #[test]
    fn worst_crossing_is_found_at_a_point_of_either_line() {
        let lower = [(100.0, 0.0), (10_000.0, 10.0)];
        let upper = [(100.0, 6.0), (1000.0, 4.0), (10_000.0, 12.0)];
        let c = worst_crossing(&upper, &lower).expect("crossed");
        assert_eq!(c.freq_hz, 1000.0);
        assert!((c.lower_db - 5.0).abs() < 1e-12);
        assert_eq!((c.upper_point, c.lower_point), (Some(1), None));
    }

    #[test]
    fn touching_and_disjoint_lines_are_not_crossed() {
        let lower = [(100.0, 0.0), (10_000.0, 10.0)];
        assert_eq!(
            worst_crossing(&[(100.0, 0.0), (10_000.0, 10.0)], &lower),
            None
        );
        assert_eq!(
            worst_crossing(&[(20.0, -50.0), (90.0, -50.0)], &lower),
            None
        );
    }

    #[test]
    fn levels_round_for_messages() {
        assert_eq!(round2(3.5), "3.5");
        assert_eq!(round2(-2.0), "-2");
        assert_eq!(round2(1.0 / 3.0), "0.33");
        assert_eq!(round2(-0.001), "0");
    }
}
