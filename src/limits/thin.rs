//! Thinning a limit line to a few breakpoints, with a bounded and one-sided error.
//!
//! A derived line has one point per grid frequency (some two hundred on the demo grid);
//! a line an engineer can read and defend has a few dozen. [`thin`] keeps the line within
//! a corridor in dB versus log-frequency and draws the fewest straight pieces it can
//! through it, greedily: from each breakpoint the longest piece whose every grid point stays
//! inside the corridor (the range of slopes that does so is narrowed point by point; the
//! piece ends where that range becomes empty, on the middle slope of the last range).
//!
//! # The bound, and in which direction
//!
//! Read as the checks read a line — straight in dB versus log10 frequency between points
//! ([`crate::dsp::interp::interpolate_log_f`], the rule of `checks::limit_line`), widened at
//! its ends by [`LINE_REL_TOL`] — the thinned line `T` and the unthinned line `U` (the grid
//! points themselves, read by the same rule) satisfy, everywhere in U's span:
//!
//! - upper line: `U(f) ≤ T(f) ≤ U(f) + max_error_db`;
//! - lower line: `U(f) − max_error_db ≤ T(f) ≤ U(f)`.
//!
//! So thinning only ever *widens* the limits, by at most `max_error_db`: a response the
//! unthinned lines accept is accepted by the thinned ones; a response up to `max_error_db`
//! beyond an unthinned line may be accepted too. This is conservative for the golden units
//! (thinning never rejects one) and not for a marginal reject (it may pass one that lies less
//! than `max_error_db` outside).
//!
//! `T − U` is straight between consecutive breakpoints of either line, so its extremes are
//! at the grid frequencies and at T's own breakpoints: [`thin`] checks the bound at exactly
//! those frequencies, on the line *as written* (frequencies to six significant digits,
//! levels rounded outward to [`LEVEL_STEP_DB`], both parsed back), and only returns a line
//! that meets it. The corridor it aims for is narrower than the bound by a reserve for that
//! rounding; should the written line still miss (a very steep slope), it tries again with
//! a larger reserve, and in the end keeps every grid point at its exact frequency.

use super::LimitsError;
use crate::dsp::interp::interpolate_log_f;

/// Precision of the levels written to a limit CSV, dB; levels are rounded outward to it
/// (an upper line up, a lower line down).
pub const LEVEL_STEP_DB: f64 = 0.001;

/// Smallest `max_error_db` accepted: ten steps of the written precision.
pub const MIN_MAX_ERROR_DB: f64 = 0.01;

/// The relative widening of a line's ends when it is read: the checks' `FREQ_REL_TOL`
/// (`checks` sits beside this module, not below it, so the value is repeated here; a test
/// holds the two equal).
pub const LINE_REL_TOL: f64 = 1e-9;

/// Which limit a line is: the side it may move to when thinned.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Side {
    /// An upper limit (may move up).
    Upper,
    /// A lower limit (may move down).
    Lower,
}

impl Side {
    fn sign(self) -> f64 {
        match self {
            Side::Upper => 1.0,
            Side::Lower => -1.0,
        }
    }

    /// `upper` or `lower`.
    pub fn word(self) -> &'static str {
        match self {
            Side::Upper => "upper",
            Side::Lower => "lower",
        }
    }
}

/// A thinned line as it is written.
#[derive(Debug, Clone, PartialEq)]
pub struct ThinnedLine {
    /// Upper or lower.
    pub side: Side,
    /// The breakpoints as written, `(frequency, level)` text.
    pub fields: Vec<(String, String)>,
    /// The breakpoints as a reader parses them back, (Hz, dB).
    pub points: Vec<(f64, f64)>,
    /// Points of the unthinned line.
    pub n_unthinned: usize,
    /// The bound asked for, dB.
    pub max_error_db: f64,
    /// Largest distance of the written line from the unthinned one, dB (≤ `max_error_db`).
    pub worst_error_db: f64,
}

/// The level of `points` at `freq_hz` read as the checks read a line.
pub fn level_at(points: &[(f64, f64)], freq_hz: f64) -> Option<f64> {
    interpolate_log_f(points.len(), |i| points[i], freq_hz, LINE_REL_TOL)
}

/// Thin the line `line_db` on `freqs_hz` (ascending, at least 2 points) as `side` with the
/// error bound `max_error_db` (module doc). `bounds_hz` is the range its written ends must
/// stay in (the sweep: a plan refuses a line point outside it).
pub fn thin(
    freqs_hz: &[f64],
    line_db: &[f64],
    side: Side,
    max_error_db: f64,
    bounds_hz: (f64, f64),
) -> Result<ThinnedLine, LimitsError> {
    let n = freqs_hz.len();
    if n < 2 || line_db.len() != n {
        return Err(LimitsError(format!(
            "a limit line needs at least 2 grid points with a level, found {} frequencies and \
             {} levels",
            n,
            line_db.len()
        )));
    }
    if freqs_hz.windows(2).any(|w| !(w[0] > 0.0 && w[1] > w[0])) {
        return Err(LimitsError(
            "the grid frequencies must be positive and strictly ascending".into(),
        ));
    }
    if line_db.iter().any(|v| !v.is_finite()) {
        return Err(LimitsError(
            "the line has a level that is not a number".into(),
        ));
    }
    if max_error_db.is_nan() || max_error_db < MIN_MAX_ERROR_DB {
        return Err(LimitsError(format!(
            "expected a thinning error of at least {MIN_MAX_ERROR_DB} dB (ten steps of the \
             written {LEVEL_STEP_DB} dB), found {max_error_db}"
        )));
    }
    let exact: Vec<(f64, f64)> = freqs_hz
        .iter()
        .copied()
        .zip(line_db.iter().copied())
        .collect();
    for reserve in [0.1, 0.2, 0.3, 0.4] {
        let lo = reserve * max_error_db;
        let hi = max_error_db * (1.0 - reserve) - LEVEL_STEP_DB;
        let vertices = corridor_path(freqs_hz, line_db, side, lo, hi);
        let fields = written(&vertices, side, bounds_hz, false);
        if let Some(line) = checked(fields, &exact, side, max_error_db) {
            return Ok(line);
        }
    }
    // Every grid point at its exact frequency, levels rounded outward: within one step.
    let fields = written(&exact, side, bounds_hz, true);
    checked(fields, &exact, side, max_error_db).ok_or_else(|| {
        LimitsError(format!(
            "the {} line could not be written within {max_error_db} dB of the derived one",
            side.word()
        ))
    })
}

/// The greedy path through the corridor `U + s·[lo, hi]` (module doc), vertices at grid
/// frequencies, (Hz, dB).
fn corridor_path(
    freqs_hz: &[f64],
    line_db: &[f64],
    side: Side,
    lo: f64,
    hi: f64,
) -> Vec<(f64, f64)> {
    let s = side.sign();
    let (a_off, b_off) = if s > 0.0 { (lo, hi) } else { (-hi, -lo) };
    let tube = |j: usize| (line_db[j] + a_off, line_db[j] + b_off);
    let x: Vec<f64> = freqs_hz.iter().map(|f| f.log10()).collect();
    let n = x.len();
    let (t0, t1) = tube(0);
    let mut vertices = vec![(0usize, 0.5 * (t0 + t1))];
    let mut a = 0usize;
    while a < n - 1 {
        let ya = vertices.last().expect("a start vertex").1;
        let (mut smin, mut smax) = (f64::NEG_INFINITY, f64::INFINITY);
        let mut end = a;
        let mut slope = 0.0;
        for j in a + 1..n {
            let dx = x[j] - x[a];
            let (l, h) = tube(j);
            let (nmin, nmax) = (smin.max((l - ya) / dx), smax.min((h - ya) / dx));
            if nmin > nmax {
                break;
            }
            (smin, smax, end) = (nmin, nmax, j);
            slope = 0.5 * (smin + smax);
        }
        vertices.push((end, ya + slope * (x[end] - x[a])));
        a = end;
    }
    vertices
        .into_iter()
        .map(|(j, y)| (freqs_hz[j], y))
        .collect()
}

/// The text of a line's points: levels rounded outward; frequencies to six significant
/// digits (`exact`: as they are), the first rounded down and the last up (inside
/// `bounds_hz`) so that the span still covers every grid point.
fn written(
    points: &[(f64, f64)],
    side: Side,
    bounds_hz: (f64, f64),
    exact: bool,
) -> Vec<(String, String)> {
    let last = points.len() - 1;
    points
        .iter()
        .enumerate()
        .map(|(i, &(f, v))| {
            let freq = if exact {
                format!("{f}")
            } else if i == 0 {
                freq_text(f, Round::Down, bounds_hz)
            } else if i == last {
                freq_text(f, Round::Up, bounds_hz)
            } else {
                freq_text(f, Round::Nearest, bounds_hz)
            };
            (freq, level_text(v, side))
        })
        .collect()
}

#[derive(Clone, Copy)]
enum Round {
    Down,
    Up,
    Nearest,
}

/// `f` to six significant digits, rounded as asked and kept inside `bounds`, without
/// trailing zeros.
fn freq_text(f: f64, round: Round, bounds: (f64, f64)) -> String {
    let decimals = (5 - f.log10().floor() as i32).clamp(0, 12);
    let scale = 10f64.powi(decimals);
    let r = match round {
        Round::Down => (f * scale).floor() / scale,
        Round::Up => (f * scale).ceil() / scale,
        Round::Nearest => (f * scale).round() / scale,
    };
    let r = r.clamp(bounds.0, bounds.1);
    let mut s = format!("{r:.prec$}", prec = decimals as usize);
    if s.contains('.') {
        s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    }
    s
}

/// `v` rounded outward (up for an upper line) to [`LEVEL_STEP_DB`], as text.
pub fn level_text(v: f64, side: Side) -> String {
    let steps = v / LEVEL_STEP_DB;
    let r = match side {
        Side::Upper => steps.ceil(),
        Side::Lower => steps.floor(),
    } * LEVEL_STEP_DB;
    let s = format!("{r:.3}");
    if s == "-0.000" {
        "0.000".into()
    } else {
        s
    }
}

/// The written line if, parsed back, it meets the bound against `exact` (module doc).
fn checked(
    fields: Vec<(String, String)>,
    exact: &[(f64, f64)],
    side: Side,
    max_error_db: f64,
) -> Option<ThinnedLine> {
    let points: Vec<(f64, f64)> = fields
        .iter()
        .map(|(f, v)| Some((f.parse().ok()?, v.parse().ok()?)))
        .collect::<Option<_>>()?;
    if points.windows(2).any(|w| w[1].0 <= w[0].0) {
        return None;
    }
    let worst = deviation(&points, exact, side)?;
    (worst.0 >= 0.0 && worst.1 <= max_error_db).then_some(ThinnedLine {
        side,
        fields,
        points,
        n_unthinned: exact.len(),
        max_error_db,
        worst_error_db: worst.1,
    })
}

/// The smallest and largest signed distance `s·(T − U)` (s = +1 upper, −1 lower) of the
/// line `thinned` from the line `exact`, at every frequency where `T − U` can have an
/// extreme: `exact`'s points and `thinned`'s points inside `exact`'s span. `None` when
/// `thinned` does not cover a point of `exact`.
pub fn deviation(thinned: &[(f64, f64)], exact: &[(f64, f64)], side: Side) -> Option<(f64, f64)> {
    let s = side.sign();
    let (first, last) = (exact.first()?.0, exact.last()?.0);
    let inside = thinned
        .iter()
        .map(|p| p.0)
        .filter(|&f| f >= first && f <= last);
    let mut range = (f64::INFINITY, f64::NEG_INFINITY);
    for f in exact.iter().map(|p| p.0).chain(inside) {
        let d = s * (level_at(thinned, f)? - level_at(exact, f)?);
        range = (range.0.min(d), range.1.max(d));
    }
    Some(range)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(n: usize) -> Vec<f64> {
        (0..n).map(|k| 50.0 * 2f64.powf(k as f64 / 24.0)).collect()
    }

    #[test]
    fn a_straight_line_keeps_its_two_ends() {
        // Straight in log f (by construction): one piece suffices.
        let f = grid(100);
        let v: Vec<f64> = f.iter().map(|x| 3.0 * x.log10() - 2.0).collect();
        let t = thin(&f, &v, Side::Upper, 0.25, (20.0, 20_000.0)).unwrap();
        assert_eq!(t.points.len(), 2);
        assert!(t.worst_error_db <= 0.25);
    }

    #[test]
    fn a_peak_is_followed_within_the_bound_on_the_allowed_side() {
        let f = grid(150);
        let v: Vec<f64> = f
            .iter()
            .map(|x| 8.0 * (-(x.log10() - 3.0).powi(2) / 0.01).exp())
            .collect();
        for side in [Side::Upper, Side::Lower] {
            let t = thin(&f, &v, side, 0.2, (20.0, 20_000.0)).unwrap();
            assert!(t.points.len() < 40, "{} points", t.points.len());
            let exact: Vec<(f64, f64)> = f.iter().copied().zip(v.iter().copied()).collect();
            let (lo, hi) = deviation(&t.points, &exact, side).unwrap();
            assert!(lo >= 0.0 && hi <= 0.2, "{lo} {hi}");
        }
    }

    #[test]
    fn written_precision() {
        assert_eq!(level_text(1.2341, Side::Upper), "1.235");
        assert_eq!(level_text(1.2349, Side::Lower), "1.234");
        assert_eq!(level_text(-0.0004, Side::Upper), "0.000");
        assert_eq!(
            freq_text(1059.2537, Round::Nearest, (20.0, 20e3)),
            "1059.25"
        );
        assert_eq!(freq_text(50.118_72, Round::Down, (20.0, 20e3)), "50.1187");
        assert_eq!(freq_text(19_999.99, Round::Up, (20.0, 20e3)), "20000");
    }

    #[test]
    fn refuses_bad_input() {
        let f = grid(10);
        assert!(thin(&f, &[0.0; 10], Side::Upper, 0.001, (20.0, 2e4)).is_err());
        assert!(thin(&f[..1], &[0.0], Side::Upper, 0.25, (20.0, 2e4)).is_err());
        assert!(thin(&f, &[f64::NAN; 10], Side::Upper, 0.25, (20.0, 2e4)).is_err());
    }
}
