//! The `sensitivity` check: a channel's mean level over a band within `[min_db, max_db]`.
//!
//! Called from [`super::judge`]. The level is the plain mean of the unsmoothed
//! `response_db` over the grid points inside the band (band edges included). Because the
//! grid is logarithmic, every fractional octave weighs the same, the way a limit drawn on
//! a log-frequency plot reads.
//!
//! The alternative, a power average `10·lg(mean 10^(r/10))`, was considered and not taken:
//! it is dominated by the loudest points, so one resonance (the ear-canal peak near 3 kHz
//! of an in-ear response, a sharp fixture mode) would set the sensitivity of the whole
//! band and a unit with a taller peak but a weaker band would read as more sensitive.
//! The dB mean tracks the broadband level that a sensitivity limit means; a power average
//! belongs to a check of radiated power, which this is not. On a flat response the two
//! agree; the power average is never below the dB mean (Jensen's inequality).
//!
//! Margin: `min(mean − min_db, max_db − mean)`; it has no frequency (`at_hz` is `null`).
//!
//! Units ([`SensitivityUnit`]): `db` compares the response as measured; `db_spl_per_v` needs
//! a calibrated response (`dB SPL/V`); `db_spl_per_mw` converts the calibrated mean to 1 mW
//! into the plan's nominal impedance R, `L(1 mW) = L(1 V) + 10·lg(R / 1000 Ω)` (1 mW into R
//! takes √(R · 1 mW) volts; 32 Ω: −14.95 dB). A check in dB SPL on an uncalibrated response
//! is not judged (retest): the run refuses that case before it measures.

use super::{band_mean_db, format_band, grid_mismatch, Finding};
use crate::analysis::ChannelMeasurement;
use crate::plan::{Band, SensitivityUnit};

/// Judge the mean level of `m` over `band` against `[min_db, max_db]`.
pub fn judge(m: &ChannelMeasurement, band: Band, min_db: f64, max_db: f64) -> Finding {
    if let Some(f) = grid_mismatch(m, "response_db", m.response_db.len()) {
        return f;
    }
    judge_curve(&m.frequencies_hz, &m.response_db, band, min_db, max_db)
}

/// Judge the mean level of `m` over `band` against limits written in `unit`.
pub fn judge_in(
    m: &ChannelMeasurement,
    band: Band,
    min_db: f64,
    max_db: f64,
    unit: SensitivityUnit,
    nominal_impedance_ohm: Option<f64>,
) -> Finding {
    let shift_db = match unit {
        SensitivityUnit::Db => return judge(m, band, min_db, max_db),
        _ if m.unit != crate::calibration::UNIT_DB_SPL_PER_V => {
            return Finding::retest(format!(
                "not judged: limits in {} need a calibrated response (dB SPL/V), found {}",
                unit.name(),
                m.unit
            ))
        }
        SensitivityUnit::DbSplPerV => 0.0,
        SensitivityUnit::DbSplPerMw => match nominal_impedance_ohm {
            Some(r) => crate::calibration::db_per_v_to_db_per_mw(0.0, r),
            None => {
                return Finding::retest(
                    "not judged: limits in db_spl_per_mw need the plan's nominal_impedance_ohm",
                )
            }
        },
    };
    if let Some(f) = grid_mismatch(m, "response_db", m.response_db.len()) {
        return f;
    }
    let shifted: Vec<f64> = m.response_db.iter().map(|r| r + shift_db).collect();
    judge_curve(&m.frequencies_hz, &shifted, band, min_db, max_db)
}

/// Judge the mean of a grid curve over `band`; a band without a grid point is a retest.
pub fn judge_curve(
    freqs_hz: &[f64],
    curve_db: &[f64],
    band: Band,
    min_db: f64,
    max_db: f64,
) -> Finding {
    let Some((mean_db, n)) = band_mean_db(freqs_hz, curve_db, band) else {
        return Finding::retest(format!(
            "not judged: no grid point with a level in the band {}",
            format_band(band)
        ));
    };
    let margin_db = (mean_db - min_db).min(max_db - mean_db);
    Finding::judged(
        margin_db,
        None,
        format!(
            "mean level {mean_db:.2} dB over {} ({n} points), limits {min_db:.2} to {max_db:.2} dB",
            format_band(band)
        ),
    )
}

/// This kind's judge in the registry's dispatch ([`super`]): `None` for another kind.
pub fn judge_kind(
    kind: &crate::plan::CheckKind,
    m: &ChannelMeasurement,
    nominal_impedance_ohm: Option<f64>,
) -> Option<Finding> {
    use crate::plan::CheckKind;
    let CheckKind::Sensitivity {
        band,
        min_db,
        max_db,
        unit,
    } = kind else {
        return None;
    };
    Some(judge_in(m, *band, *min_db, *max_db, *unit, nominal_impedance_ohm))
}
