//! Limit lines: the level a line allows at a frequency.
//!
//! Used by the response check ([`super::response`]). A line is a list of (frequency Hz,
//! level dB) points; between points it is straight on a dB-versus-log-frequency plot (the
//! way limit lines are drawn and read, *common practice*), so the level at the geometric
//! mean of two points is the arithmetic mean of their levels. Outside the span of its
//! points a line is undefined: it neither passes nor fails a response point there. Both
//! ends are widened by [`super::FREQ_REL_TOL`] so that a computed grid point meant to sit
//! on an end is judged by it.

use super::FREQ_REL_TOL;
use crate::plan::LimitLine;

impl LimitLine {
    /// Level of the line at `freq_hz`, dB; `None` outside the line's span.
    pub fn level_at_db(&self, freq_hz: f64) -> Option<f64> {
        interpolate_log_f(self.points.len(), |i| self.points[i], freq_hz)
    }

    /// Lowest and highest frequency of the line, Hz; `None` for a line without points.
    pub fn span_hz(&self) -> Option<(f64, f64)> {
        Some((self.points.first()?.0, self.points.last()?.0))
    }
}

/// Interpolate `n` points `point(i) = (freq_hz, level_db)`, frequencies ascending,
/// linearly in dB versus log10 frequency at `freq_hz` ([`crate::dsp::interp`]). `None`
/// outside the span (widened by [`FREQ_REL_TOL`]), for no points, or for a non-positive or
/// non-finite frequency (log-frequency is undefined there). A query at a point's frequency
/// returns that point's level exactly.
pub fn interpolate_log_f(
    n: usize,
    point: impl Fn(usize) -> (f64, f64),
    freq_hz: f64,
) -> Option<f64> {
    crate::dsp::interp::interpolate_log_f(n, point, freq_hz, FREQ_REL_TOL)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(points: &[(f64, f64)]) -> LimitLine {
        LimitLine {
            points: points.to_vec(),
            origin: "inline".into(),
        }
    }

    #[test]
    fn exact_points_reproduce_and_geometric_mean_is_mean_of_db() {
        // Oracle: linear in log f ⇒ at √(f0·f1) the level is (v0 + v1)/2 (brief's oracle,
        // follows from the definition). Tolerance 1e-12 dB: a few ULP of the log10 sums.
        let l = line(&[
            (100.0, -3.0),
            (1000.0, 0.0),
            (8000.0, 6.0),
            (16000.0, -10.0),
        ]);
        for &(f, v) in &l.points {
            assert_eq!(l.level_at_db(f), Some(v));
        }
        for w in l.points.windows(2) {
            let gm = (w[0].0 * w[1].0).sqrt();
            let got = l.level_at_db(gm).unwrap();
            assert!((got - (w[0].1 + w[1].1) / 2.0).abs() < 1e-12, "{got}");
        }
        // A quarter of the way in log f: 100 → 1000 Hz, 10^2.25 Hz ⇒ −3 + 0.25·3 = −2.25 dB.
        let got = l.level_at_db(10f64.powf(2.25)).unwrap();
        assert!((got + 2.25).abs() < 1e-12);
    }

    #[test]
    fn undefined_outside_its_span() {
        let l = line(&[(200.0, 1.0), (2000.0, 2.0)]);
        assert_eq!(l.level_at_db(199.0), None);
        assert_eq!(l.level_at_db(2001.0), None);
        assert_eq!(l.level_at_db(0.0), None);
        assert_eq!(l.level_at_db(f64::NAN), None);
        assert_eq!(line(&[]).level_at_db(1000.0), None);
        assert_eq!(l.span_hz(), Some((200.0, 2000.0)));
        // A grid point one rounding step past the end still belongs to the line.
        assert_eq!(l.level_at_db(2000.0 * (1.0 + 1e-13)), Some(2.0));
    }

    #[test]
    fn single_point_line_is_defined_at_its_frequency_only() {
        let l = line(&[(1000.0, 4.0)]);
        assert_eq!(l.level_at_db(1000.0), Some(4.0));
        assert_eq!(l.level_at_db(1001.0), None);
    }
}
