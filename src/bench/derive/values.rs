//! What each check judges, read off a unit's measurements the way the check reads it.
//!
//! The checks ([`crate::checks`]) turn a measurement into a margin; a derivation needs the
//! measured quantity itself, before any limit: the judged curve of a response check, the
//! band mean of a sensitivity check, the band maximum of a distortion check, the largest
//! channel difference of a balance check. Each function here follows its check's module
//! doc rule for rule (smoothing, normalisation, band edges, skipped points, units), using
//! the checks' own helpers where they are public; `tests/it/limits_derive.rs` holds the
//! two together (every golden unit re-judged by the real checks under the derived plan).

use crate::analysis::ChannelMeasurement;
use crate::checks::distortion::{band_max, BandMax};
use crate::checks::response::level_on_grid_db;
use crate::checks::{band_indices, band_mean_db, format_band};
use crate::plan::{Band, CheckKind, Normalize, SensitivityUnit};

/// The curve a response check judges: the response (smoothed over 1/N octave when the
/// check smooths), less the normalisation reference when it normalises.
pub fn judged_curve(
    m: &ChannelMeasurement,
    smoothing_fraction: Option<u32>,
    normalize: Option<Normalize>,
) -> Result<Vec<f64>, String> {
    let curve = match smoothing_fraction {
        None | Some(0) => m.response_db.clone(),
        Some(k) => m.smoothed_response_db(k),
    };
    let freqs = &m.frequencies_hz;
    if curve.len() != freqs.len() {
        return Err(format!(
            "channel {}: response of {} points on a grid of {}",
            m.name,
            curve.len(),
            freqs.len()
        ));
    }
    let reference = match normalize {
        None => return Ok(curve),
        Some(Normalize::AtHz(f)) => match smoothing_fraction {
            None => Some(m.level_at_db(f)),
            Some(_) => level_on_grid_db(freqs, &curve, f),
        },
        Some(Normalize::Band(b)) => band_mean_db(freqs, &curve, b).map(|(v, _)| v),
    };
    let reference = reference.filter(|v| v.is_finite()).ok_or_else(|| {
        format!(
            "channel {}: no level at the normalisation reference",
            m.name
        )
    })?;
    Ok(curve.iter().map(|r| r - reference).collect())
}

/// The value of a single-channel scalar check on `m`, in dB (THD as `20·lg(THD/100 %)`);
/// `Ok(None)` for a kind without a value to derive (polarity, listening, response, balance).
pub fn channel_value(
    kind: &CheckKind,
    m: &ChannelMeasurement,
    nominal_impedance_ohm: Option<f64>,
) -> Result<Option<f64>, String> {
    let freqs = &m.frequencies_hz;
    let v = match kind {
        CheckKind::Sensitivity { band, unit, .. } => {
            let shift = match unit {
                SensitivityUnit::Db => 0.0,
                _ if m.unit != crate::calibration::UNIT_DB_SPL_PER_V => {
                    return Err(format!(
                        "channel {}: limits in {} need a calibrated response (dB SPL/V), \
                         found {}",
                        m.name,
                        unit.name(),
                        m.unit
                    ))
                }
                SensitivityUnit::DbSplPerV => 0.0,
                SensitivityUnit::DbSplPerMw => {
                    let r = nominal_impedance_ohm
                        .ok_or("db_spl_per_mw needs the plan's nominal_impedance_ohm")?;
                    crate::calibration::db_per_v_to_db_per_mw(0.0, r)
                }
            };
            let (mean, _) = band_mean_db(freqs, &m.response_db, *band).ok_or_else(|| {
                format!(
                    "channel {}: no grid point in {}",
                    m.name,
                    format_band(*band)
                )
            })?;
            mean + shift
        }
        CheckKind::Thd { band, .. } => {
            let pct = band_maximum(freqs, &m.thd_percent, *band, &m.name, "THD")?;
            // A THD of exactly 0 % has no dB value: put it far below anything measured.
            20.0 * (pct.max(1e-10) / 100.0).log10()
        }
        CheckKind::Harmonic { order, band, .. } => {
            let curve = m
                .harmonics_db
                .get(&order.to_string())
                .ok_or_else(|| format!("channel {}: harmonic {order} was not analysed", m.name))?;
            band_maximum(freqs, curve, *band, &m.name, &format!("HD{order}"))?
        }
        CheckKind::RubBuzz { band, .. } => {
            band_maximum(freqs, &m.rub_buzz_db, *band, &m.name, "rub and buzz")?
        }
        _ => return Ok(None),
    };
    Ok(Some(v))
}

fn band_maximum(
    freqs: &[f64],
    values: &[Option<f64>],
    band: Band,
    channel: &str,
    what: &str,
) -> Result<f64, String> {
    if values.len() != freqs.len() {
        return Err(format!("channel {channel}: {what} does not match the grid"));
    }
    match band_max(freqs, values, band) {
        BandMax::Max { value, .. } => Ok(value),
        _ => Err(format!(
            "channel {channel}: {what} not measured in {}",
            format_band(band)
        )),
    }
}

/// The largest absolute level difference of `a` and `b` over `band` (smoothed alike when
/// the check smooths), dB: what a balance check compares with its `max_diff_db`.
pub fn balance_value(
    a: &ChannelMeasurement,
    b: &ChannelMeasurement,
    band: Band,
    smoothing_fraction: Option<u32>,
) -> Result<f64, String> {
    if a.frequencies_hz != b.frequencies_hz {
        return Err(format!("{} and {} are on different grids", a.name, b.name));
    }
    let (ca, cb) = match smoothing_fraction {
        None | Some(0) => (a.response_db.clone(), b.response_db.clone()),
        Some(k) => (a.smoothed_response_db(k), b.smoothed_response_db(k)),
    };
    band_indices(&a.frequencies_hz, band)
        .into_iter()
        .filter_map(|i| Some(ca.get(i)? - cb.get(i)?))
        .filter(|d| !d.is_nan())
        .map(f64::abs)
        .fold(None, |m: Option<f64>, d| Some(m.map_or(d, |m| m.max(d))))
        .ok_or_else(|| format!("no grid point in {}", format_band(band)))
}
