//! Interpolation in log frequency: the one place where a value between two tabulated
//! frequencies is read, for limit lines, measured responses, correction curves, impedance
//! tables and source tables alike.
//!
//! Between two points (f0, y0) and (f1, y1) the value is `y0 + t·(y1 − y0)` with
//! `t = (lg f − lg f0)/(lg f1 − lg f0)`: straight in dB (or in the complex value) against
//! log frequency, the way response curves and limit lines are drawn and read (*common
//! practice*). At a tabulated frequency the tabulated value is returned exactly.

/// Where a frequency falls among tabulated frequencies (ascending).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Bracket {
    /// At or below the first frequency.
    Below,
    /// At or above the last frequency.
    Above,
    /// Exactly at the frequency of point `i` (an interior point).
    At(usize),
    /// Strictly between points `lo` and `lo + 1`, a fraction `t` of the way in log
    /// frequency.
    Between {
        /// The point below.
        lo: usize,
        /// Fraction of the way to the point above, in log frequency (0 < t < 1).
        t: f64,
    },
    /// The two points around it do not make a segment (frequencies not positive and
    /// ascending): no value can be read there.
    Invalid {
        /// The point below.
        lo: usize,
    },
}

/// The fraction of the way from `f0_hz` to `f1_hz` that `freq_hz` lies, in log frequency.
pub fn log_fraction(f0_hz: f64, f1_hz: f64, freq_hz: f64) -> f64 {
    (freq_hz.log10() - f0_hz.log10()) / (f1_hz.log10() - f0_hz.log10())
}

/// Where `freq_hz` falls among `n ≥ 1` ascending frequencies `freq_of(i)`.
pub fn bracket(n: usize, freq_of: impl Fn(usize) -> f64, freq_hz: f64) -> Bracket {
    if n == 0 || freq_hz <= freq_of(0) {
        return Bracket::Below;
    }
    if freq_hz >= freq_of(n - 1) {
        return Bracket::Above;
    }
    // Binary search for the last point at or below freq_hz; f_first < freq_hz < f_last
    // here, so 1 ≤ hi ≤ n − 1.
    let (mut lo, mut hi) = (0usize, n - 1);
    while hi - lo > 1 {
        let mid = (lo + hi) / 2;
        if freq_of(mid) <= freq_hz {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let (f0, f1) = (freq_of(lo), freq_of(hi));
    if freq_hz == f0 {
        return Bracket::At(lo);
    }
    if !(f0 > 0.0 && f1 > f0) {
        return Bracket::Invalid { lo };
    }
    Bracket::Between {
        lo,
        t: log_fraction(f0, f1, freq_hz),
    }
}

/// `n` points `point(i) = (freq_hz, level_db)` read at `freq_hz` (module rule). `None`
/// outside the span widened by the relative tolerance `rel_tol` at both ends, for no
/// points, for a non-positive or non-finite frequency, or on an invalid segment; inside the
/// widened ends, the end value.
pub fn interpolate_log_f(
    n: usize,
    point: impl Fn(usize) -> (f64, f64),
    freq_hz: f64,
    rel_tol: f64,
) -> Option<f64> {
    if n == 0 || !(freq_hz > 0.0 && freq_hz.is_finite()) {
        return None;
    }
    let (f_first, v_first) = point(0);
    let (f_last, v_last) = point(n - 1);
    if freq_hz < f_first * (1.0 - rel_tol) || freq_hz > f_last * (1.0 + rel_tol) {
        return None;
    }
    match bracket(n, |i| point(i).0, freq_hz) {
        Bracket::Below => Some(v_first),
        Bracket::Above => Some(v_last),
        Bracket::At(i) => Some(point(i).1),
        Bracket::Between { lo, t } => {
            let (v0, v1) = (point(lo).1, point(lo + 1).1);
            Some(v0 + t * (v1 - v0))
        }
        Bracket::Invalid { .. } => None,
    }
}

/// `points` (Hz, value) read at `freq_hz` (module rule), held at the end values beyond the
/// span; on an invalid segment, the value below. At least one point.
///
/// # Panics
/// With no points (a programmer error: callers hold non-empty tables).
pub fn interpolate_log_f_held<V>(points: &[(f64, V)], freq_hz: f64) -> V
where
    V: Copy
        + std::ops::Add<Output = V>
        + std::ops::Sub<Output = V>
        + std::ops::Mul<f64, Output = V>,
{
    match bracket(points.len(), |i| points[i].0, freq_hz) {
        Bracket::Below => points[0].1,
        Bracket::Above => points[points.len() - 1].1,
        Bracket::At(i) => points[i].1,
        Bracket::Between { lo, t } => {
            let (v0, v1) = (points[lo].1, points[lo + 1].1);
            v0 + (v1 - v0) * t
        }
        Bracket::Invalid { lo } => points[lo].1,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // At the geometric mean of two points the value is the arithmetic mean of theirs (the
    // defining property of straight lines in log frequency).
    #[test]
    fn geometric_mean_gives_arithmetic_mean() {
        let pts = [(100.0, 0.0), (400.0, 6.0)];
        let v = interpolate_log_f_held(&pts, 200.0);
        assert!((v - 3.0).abs() < 1e-12, "{v}");
        let w = interpolate_log_f(2, |i| pts[i], 200.0, 1e-9).unwrap();
        assert!((w - 3.0).abs() < 1e-12, "{w}");
    }

    #[test]
    fn ends_and_exact_points() {
        let pts = [(100.0, 1.0), (200.0, 2.0), (400.0, 4.0)];
        assert_eq!(interpolate_log_f_held(&pts, 50.0), 1.0);
        assert_eq!(interpolate_log_f_held(&pts, 1000.0), 4.0);
        assert_eq!(interpolate_log_f_held(&pts, 200.0), 2.0);
        assert_eq!(interpolate_log_f(3, |i| pts[i], 99.0, 1e-9), None);
        assert_eq!(interpolate_log_f(3, |i| pts[i], 401.0, 1e-9), None);
        assert_eq!(interpolate_log_f(3, |i| pts[i], 400.0, 1e-9), Some(4.0));
        assert_eq!(interpolate_log_f(0, |i| pts[i], 200.0, 1e-9), None);
    }
}
