//! Limits far outside anything the product could produce: warnings, not refusals.
//!
//! A plan that declares its product (`product:`: sensitivity S in dB SPL/V, tolerance ±T,
//! response peak P above S) says which levels a conforming unit can have: its response lies
//! within **S − T − P to S + T + P** (the *declared range*) wherever it is not rolling off.
//! P is the declared peak above the sensitivity; the product declares no dip, so the same P
//! is taken below it, which the margin below makes harmless. A level limit more than
//! [`FAR_DB`] (20 dB) outside the declared range is almost surely a typo or a limit written
//! in another unit, and `validate` warns about it:
//!
//! | limit | far above the range | far below the range |
//! | --- | --- | --- |
//! | sensitivity `min_db` | every unit fails it | it passes units far below their declaration |
//! | sensitivity `max_db` | it fails no unit | every unit fails it |
//! | response lower line (any point) | every unit fails it there | — (roll-off is normal) |
//! | response upper line (any point) | it fails no unit there | — (roll-off is normal) |
//!
//! A response line gets one warning, at its point furthest out. Not compared, and why:
//!
//! - plans whose levels are dB FS/FS (`level_unit: db_fs_per_fs`, the default without a dB
//!   SPL check), for sensitivity checks in `db` and for response lines: digital levels
//!   depend on the bench's gains (converter, amplifier, microphone), which only a
//!   calibration knows; the stimulus level in dBFS gives the drive relative to full scale,
//!   not in volts, so no conversion from dB SPL/V exists in the plan;
//! - normalised responses (`normalize:`): relative to the unit's own level;
//! - plans without `product:`: nothing is declared; relative limits (THD, harmonics,
//!   rub and buzz, balance): the declaration says nothing about them (their impossible
//!   values are refused instead).
//!
//! Limits in dB SPL/mW are compared with the declared range converted with the plan's
//! `nominal_impedance_ohm`: `L(1 mW) = L(1 V) + 10·lg(R / 1000 Ω)`.

use super::response::crossing::round2;
use super::response::PlacedLine;
use crate::config::{Location, Problem};
use crate::plan::{LevelUnit, ProductSpec, SensitivityUnit};

/// How far outside the declared range, dB, a limit must be to be warned about: twice the
/// widest tolerance a datasheet gives for an earphone's sensitivity (±3 dB is common
/// practice) plus its largest usual response peak (some 10 dB), so that no limit a test
/// engineer could mean is warned about, while a limit in the wrong unit (dB FS against dB
/// SPL, some 100 dB) or with a sign typo always is.
pub const FAR_DB: f64 = 20.0;

/// Which side of a measurement a limit bounds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(in crate::plan) enum Side {
    /// A lowest allowed level.
    Lower,
    /// A highest allowed level.
    Upper,
}

/// What the limit bounds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Shape {
    /// A band's mean level (a sensitivity check).
    Window,
    /// The response at one frequency (a point of a response limit line).
    Line,
}

/// One absolute level limit of a check, with where it is written.
#[derive(Debug, Clone)]
pub(in crate::plan) struct LevelLimit {
    /// How messages name it (`check sens: min_db`, `check fr: upper`).
    what: String,
    side: Side,
    shape: Shape,
    /// The unit it is written in; `Db` is the plan's level unit.
    unit: SensitivityUnit,
    value_db: f64,
    /// For a line point, its frequency, Hz.
    freq_hz: Option<f64>,
    /// Where it is written.
    at: Location,
    /// For a point of a CSV file, where the plan names the file.
    named_at: Option<Location>,
}

impl LevelLimit {
    /// A sensitivity check's `min_db` or `max_db`.
    pub(in crate::plan) fn window(
        what: String,
        side: Side,
        unit: SensitivityUnit,
        value_db: f64,
        at: Location,
    ) -> LevelLimit {
        LevelLimit {
            what,
            side,
            shape: Shape::Window,
            unit,
            value_db,
            freq_hz: None,
            at,
            named_at: None,
        }
    }

    /// Every point of a response limit line (in the plan's level unit).
    pub(in crate::plan) fn of_line(
        side: Side,
        line: &PlacedLine,
    ) -> impl Iterator<Item = LevelLimit> + '_ {
        line.line
            .points
            .iter()
            .enumerate()
            .map(move |(i, &(hz, db))| {
                let (at, named) = line.point_at(i);
                LevelLimit {
                    what: line.what.clone(),
                    side,
                    shape: Shape::Line,
                    unit: SensitivityUnit::Db,
                    value_db: db,
                    freq_hz: Some(hz),
                    at,
                    named_at: named.cloned(),
                }
            })
    }
}

/// The warnings of a valid plan's level limits against its product's declaration (module
/// doc), unsorted; none without a declaration.
pub(in crate::plan) fn warnings(
    limits: &[LevelLimit],
    level_unit: LevelUnit,
    product: Option<&ProductSpec>,
    nominal_impedance_ohm: Option<f64>,
) -> Vec<Problem> {
    let Some(p) = product else {
        return Vec::new();
    };
    let mut found: Vec<Far> = Vec::new();
    for l in limits {
        let (offset_db, unit) = match (l.unit, level_unit) {
            (SensitivityUnit::Db, LevelUnit::DbFsPerFs) => continue,
            (SensitivityUnit::Db, LevelUnit::DbSplPerV) | (SensitivityUnit::DbSplPerV, _) => {
                (0.0, "dB SPL/V")
            }
            (SensitivityUnit::DbSplPerMw, _) => match nominal_impedance_ohm {
                Some(r) => (10.0 * (r / 1000.0).log10(), "dB SPL/mW"),
                None => continue,
            },
        };
        let spread = p.tolerance_db + p.response_peak_db;
        let centre = p.sensitivity_db_spl_per_v + offset_db;
        let (lo, hi) = (centre - spread, centre + spread);
        let (out_db, above) = if l.value_db - hi > FAR_DB {
            (l.value_db - hi, true)
        } else if lo - l.value_db > FAR_DB && l.shape == Shape::Window {
            (lo - l.value_db, false)
        } else {
            continue;
        };
        let far = Far {
            limit: l,
            above,
            out_db,
            centre,
            unit,
        };
        // One warning per line and direction: its point furthest out.
        match found
            .iter_mut()
            .find(|f| f.limit.what == l.what && f.above == above)
        {
            Some(f) if f.out_db >= out_db => {}
            Some(f) => *f = far,
            None => found.push(far),
        }
    }
    found.iter().map(|f| f.problem(p)).collect()
}

/// A limit far outside the declared levels.
struct Far<'a> {
    limit: &'a LevelLimit,
    /// Above the declared levels (else below).
    above: bool,
    /// How far outside them, dB.
    out_db: f64,
    /// The declared sensitivity in the limit's unit.
    centre: f64,
    unit: &'static str,
}

impl Far<'_> {
    fn problem(&self, p: &ProductSpec) -> Problem {
        let (l, unit) = (self.limit, self.unit);
        let consequence = match (l.side, self.above) {
            (Side::Lower, true) | (Side::Upper, false) => "every unit would fail it",
            (Side::Upper, true) => "it would fail no unit",
            (Side::Lower, false) => "it would pass units far below their declaration",
        };
        let at_hz = l.freq_hz.map(|f| format!(" at {f} Hz")).unwrap_or_default();
        let named = l
            .named_at
            .as_ref()
            .map(|n| {
                format!(
                    "; {} is named at {}:{}:{}",
                    l.at.path, n.path, n.line, n.col
                )
            })
            .unwrap_or_default();
        let spread = p.tolerance_db + p.response_peak_db;
        Problem {
            location: l.at.clone(),
            message: format!(
                "{}: {} {unit}{at_hz} lies {} dB {} the levels the product declares ({} to {} \
                 {unit}: sensitivity {} ± {} dB with a response peak of {} dB), more than \
                 {FAR_DB} dB outside them: {consequence}{named}",
                l.what,
                l.value_db,
                round2(self.out_db),
                if self.above { "above" } else { "below" },
                round2(self.centre - spread),
                round2(self.centre + spread),
                round2(self.centre),
                p.tolerance_db,
                p.response_peak_db,
            ),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn product() -> ProductSpec {
        ProductSpec {
            sensitivity_db: 100.0,
            sensitivity_unit: SensitivityUnit::DbSplPerV,
            tolerance_db: 2.0,
            response_peak_db: 8.0,
            sensitivity_db_spl_per_v: 100.0,
        }
    }

    fn window(side: Side, db: f64) -> LevelLimit {
        LevelLimit::window(
            "check s: x".into(),
            side,
            SensitivityUnit::Db,
            db,
            Location {
                path: "p.yaml".into(),
                line: 1,
                col: 1,
            },
        )
    }

    // Declared range 100 ± (2 + 8) = 90 to 110; far = more than 20 dB outside: above 130,
    // below 70 (the definition in the module doc).
    #[test]
    fn only_limits_more_than_far_outside_the_declared_range_warn() {
        let p = product();
        let w = |l: LevelLimit, unit| warnings(&[l], unit, Some(&p), None);
        assert!(w(window(Side::Lower, 130.0), LevelUnit::DbSplPerV).is_empty());
        assert_eq!(w(window(Side::Lower, 130.5), LevelUnit::DbSplPerV).len(), 1);
        assert!(w(window(Side::Upper, 70.0), LevelUnit::DbSplPerV).is_empty());
        assert_eq!(w(window(Side::Upper, 69.0), LevelUnit::DbSplPerV).len(), 1);
        // Digital levels are not compared.
        assert!(w(window(Side::Lower, 500.0), LevelUnit::DbFsPerFs).is_empty());
        assert!(warnings(
            &[window(Side::Lower, 500.0)],
            LevelUnit::DbSplPerV,
            None,
            None
        )
        .is_empty());
    }
}
