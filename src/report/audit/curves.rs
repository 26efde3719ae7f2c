//! Response curves for the report's charts: the population overlay of each response check
//! and the full-detail chart of one unit, both against the check's limit lines when the
//! plan file that judged the records was given ([`super::limits`]).
//!
//! Overlays stay small whatever the number of units: the min–max band of every curve that
//! passed the check is computed on the full grid and drawn as one shape; individual curves are drawn for at
//! most a given number of units (every failing unit first, then an even sample of the
//! others by serial), each thinned to at most [`MAX_OVERLAY_POINTS`] points. A unit's own
//! chart draws every grid point.

use std::collections::BTreeMap;

use super::limits::{reference_level, LimitBook, ResponseLimits};
use super::load::{Curve, RecordView};
use super::plot::{Pen, PlotCurve, PlotError, ResponseChart};

/// Most points of one curve in an overlay (the analysis grid has 240 at 24 per octave).
pub const MAX_OVERLAY_POINTS: usize = 200;

/// Size of an overlay chart, px.
const OVERLAY_SIZE: (u32, u32) = (900, 380);
/// Size of a unit's chart, px.
const UNIT_SIZE: (u32, u32) = (640, 300);

/// One response check of one plan version, across the units.
#[derive(Debug, Clone)]
pub(crate) struct Overlay {
    pub check: String,
    pub plan_id: String,
    pub plan_revision: u32,
    pub plan_sha256: String,
    /// Units with a curve for this check.
    pub n_units: usize,
    /// Units whose check failed (on any channel).
    pub n_failing: usize,
    /// Units whose curves are drawn one by one.
    pub n_drawn_units: usize,
    /// Curves not drawn because they could not be normalised as the check does.
    pub n_not_normalised: usize,
    /// Whether limit lines were drawn (the plan file was given).
    pub has_limits: bool,
    pub svg: String,
}

/// The curve a response check judged, shifted as its normalisation does (approximately:
/// the check normalises the smoothed curve); `None` when no reference level exists.
fn prepared(curve: &Curve, limits: Option<&ResponseLimits>) -> Option<Vec<(f64, f64)>> {
    let shift = match limits.and_then(|l| l.normalize) {
        Some(n) => reference_level(curve, n)?,
        None => 0.0,
    };
    Some(
        curve
            .freqs_hz
            .iter()
            .zip(&curve.db)
            .map(|(&f, &d)| (f, d - shift))
            .collect(),
    )
}

/// Keep at most `max` points, evenly, the last one always.
fn thin(points: Vec<(f64, f64)>, max: usize) -> Vec<(f64, f64)> {
    if points.len() <= max || max < 2 {
        return points;
    }
    let stride = points.len().div_ceil(max - 1);
    let last = points.len() - 1;
    points
        .into_iter()
        .enumerate()
        .filter(|(i, _)| i % stride == 0 || *i == last)
        .map(|(_, p)| p)
        .collect()
}

/// The curves a check names: its channel, or each of `a/b`.
fn curves_for<'a>(r: &'a RecordView, channel: &str) -> impl Iterator<Item = &'a Curve> {
    let names: Vec<String> = channel.split('/').map(str::to_owned).collect();
    r.curves.iter().filter(move |c| names.contains(&c.channel))
}

fn y_label(unit: &str, limits: Option<&ResponseLimits>) -> String {
    let unit = if unit.is_empty() { "dB" } else { unit };
    match limits.and_then(|l| l.normalize) {
        Some(_) => format!("response re its reference level, {unit}"),
        None => format!("response, {unit}"),
    }
}

/// One overlay per response check and plan version (id, revision, SHA-256), in that order;
/// each unit's latest record of that plan version stands for the unit.
pub(crate) fn overlays(
    records: &[RecordView],
    book: &LimitBook,
    max_units: usize,
) -> Result<Vec<Overlay>, PlotError> {
    // (plan id, revision, sha, check) → serial → index of the unit's latest record.
    type Key = (String, u32, String, String);
    let mut groups: BTreeMap<Key, BTreeMap<&str, usize>> = BTreeMap::new();
    for (i, r) in records.iter().enumerate() {
        for c in r.checks.iter().filter(|c| c.kind == "response") {
            let key = (
                r.record.plan_id.clone(),
                r.record.plan_revision,
                r.record.plan_sha256.clone(),
                c.id.clone(),
            );
            groups
                .entry(key)
                .or_default()
                .insert(r.record.serial.as_str(), i);
        }
    }
    let mut out = Vec::new();
    for ((plan_id, plan_revision, plan_sha256, check), units) in groups {
        let limits = book.response(&plan_sha256, &check);
        // Per unit: its prepared curves, each with whether the check failed on it.
        type UnitCurves = Vec<(Vec<(f64, f64)>, bool)>;
        let mut failing: Vec<UnitCurves> = Vec::new();
        let mut others: Vec<UnitCurves> = Vec::new();
        let mut unit_label = String::new();
        let mut not_normalised = 0usize;
        let mut grid: Option<Vec<f64>> = None;
        let mut env_lo: Vec<f64> = Vec::new();
        let mut env_hi: Vec<f64> = Vec::new();
        for &i in units.values() {
            let r = &records[i];
            let mut unit_curves = Vec::new();
            let mut failed = false;
            for c in r.checks.iter().filter(|c| c.id == check) {
                let this_failed = c.verdict == "fail";
                failed |= this_failed;
                for curve in curves_for(r, &c.channel) {
                    if unit_label.is_empty() {
                        unit_label = curve.unit.clone();
                    }
                    let Some(points) = prepared(curve, limits) else {
                        not_normalised += 1;
                        continue;
                    };
                    let g = grid.get_or_insert_with(|| curve.freqs_hz.clone());
                    // The band shows the curves that passed; failing ones are drawn each.
                    if !this_failed && *g == curve.freqs_hz {
                        if env_lo.is_empty() {
                            env_lo = vec![f64::INFINITY; g.len()];
                            env_hi = vec![f64::NEG_INFINITY; g.len()];
                        }
                        for (k, &(_, d)) in points.iter().enumerate() {
                            if d.is_finite() {
                                env_lo[k] = env_lo[k].min(d);
                                env_hi[k] = env_hi[k].max(d);
                            }
                        }
                    }
                    unit_curves.push((points, this_failed));
                }
            }
            if unit_curves.is_empty() {
                continue;
            }
            if failed {
                failing.push(unit_curves);
            } else {
                others.push(unit_curves);
            }
        }
        let n_units = failing.len() + others.len();
        if n_units == 0 {
            continue;
        }
        let n_failing = failing.len();
        // Failing units take up to half the room (more when there are few others), the
        // others the rest; each an even sample by serial when there are too many.
        let n_fail_drawn =
            n_failing.min((max_units / 2).max(max_units.saturating_sub(others.len())));
        let n_other_drawn = others.len().min(max_units - n_fail_drawn);
        let mut curves: Vec<PlotCurve> = Vec::new();
        let mut failed_curves: Vec<PlotCurve> = Vec::new();
        for (group, n) in [(&others, n_other_drawn), (&failing, n_fail_drawn)] {
            for k in even_sample(group.len(), n) {
                for (points, failed) in &group[k] {
                    let curve = PlotCurve {
                        points: thin(points.clone(), MAX_OVERLAY_POINTS),
                        pen: if *failed {
                            Pen::Failing
                        } else {
                            Pen::Population
                        },
                    };
                    if *failed {
                        failed_curves.push(curve);
                    } else {
                        curves.push(curve);
                    }
                }
            }
        }
        // Failing curves on top.
        curves.append(&mut failed_curves);
        let envelope: Vec<(f64, f64, f64)> = match &grid {
            Some(g) if others.len() > 1 => g
                .iter()
                .zip(env_lo.iter().zip(&env_hi))
                .filter(|(_, (lo, hi))| lo.is_finite() && hi.is_finite())
                .map(|(&f, (&lo, &hi))| (f, lo, hi))
                .collect(),
            _ => Vec::new(),
        };
        let title = format!("{check}: {n_units} units, plan {plan_id} revision {plan_revision}");
        let chart = ResponseChart {
            title,
            y_label: y_label(&unit_label, limits),
            upper: limits.and_then(|l| l.upper.clone()),
            lower: limits.and_then(|l| l.lower.clone()),
            envelope: thin_envelope(envelope),
            curves,
            markers: Vec::new(),
            size: OVERLAY_SIZE,
        };
        out.push(Overlay {
            svg: chart.to_svg()?,
            check,
            plan_id,
            plan_revision,
            plan_sha256,
            n_units,
            n_failing,
            n_drawn_units: n_fail_drawn + n_other_drawn,
            n_not_normalised: not_normalised,
            has_limits: limits.is_some(),
        });
    }
    Ok(out)
}

/// `n` indices spread evenly over `0..len` (all of them when `n >= len`).
fn even_sample(len: usize, n: usize) -> Vec<usize> {
    if n >= len {
        (0..len).collect()
    } else {
        (0..n).map(|k| k * len / n).collect()
    }
}

fn thin_envelope(e: Vec<(f64, f64, f64)>) -> Vec<(f64, f64, f64)> {
    if e.len() <= MAX_OVERLAY_POINTS {
        return e;
    }
    let stride = e.len().div_ceil(MAX_OVERLAY_POINTS - 1);
    let last = e.len() - 1;
    e.into_iter()
        .enumerate()
        .filter(|(i, _)| i % stride == 0 || *i == last)
        .map(|(_, p)| p)
        .collect()
}

/// A unit's chart for one response check: every record's curves at full detail (earlier
/// records faded), channel colours in order of first appearance, the worst point of each
/// failing channel of the latest record marked. `None` when no record has a curve.
pub(crate) fn unit_chart(
    serial: &str,
    check: &str,
    unit_records: &[&RecordView],
    book: &LimitBook,
) -> Result<Option<(String, Vec<String>)>, PlotError> {
    let Some(latest) = unit_records.last() else {
        return Ok(None);
    };
    let limits = book.response(&latest.record.plan_sha256, check);
    let mut channels: Vec<String> = Vec::new();
    let mut curves = Vec::new();
    let mut markers = Vec::new();
    let mut unit_label = String::new();
    for (k, r) in unit_records.iter().enumerate() {
        let is_latest = k + 1 == unit_records.len();
        // Limits hold only for the plan version that judged this record.
        let lim = book.response(&r.record.plan_sha256, check);
        for c in r.checks.iter().filter(|c| c.id == check) {
            for curve in curves_for(r, &c.channel) {
                let Some(points) = prepared(curve, lim) else {
                    continue;
                };
                if unit_label.is_empty() {
                    unit_label = curve.unit.clone();
                }
                let i = match channels.iter().position(|n| *n == curve.channel) {
                    Some(i) => i,
                    None => {
                        channels.push(curve.channel.clone());
                        channels.len() - 1
                    }
                };
                if is_latest && c.verdict == "fail" {
                    if let Some(at) = c.at_hz {
                        if let Some(y) = level_on(&points, at) {
                            markers.push((at, y));
                        }
                    }
                }
                curves.push(PlotCurve {
                    points,
                    pen: Pen::Series {
                        i,
                        faded: !is_latest,
                    },
                });
            }
        }
    }
    if curves.is_empty() {
        return Ok(None);
    }
    // Latest record's curves on top.
    curves.sort_by_key(|c| !matches!(c.pen, Pen::Series { faded: true, .. }));
    let chart = ResponseChart {
        title: format!("{serial}: {check}"),
        y_label: y_label(&unit_label, limits),
        upper: limits.and_then(|l| l.upper.clone()),
        lower: limits.and_then(|l| l.lower.clone()),
        envelope: Vec::new(),
        curves,
        markers,
        size: UNIT_SIZE,
    };
    Ok(Some((chart.to_svg()?, channels)))
}

/// Level of a prepared curve at `f` (linear in log f between its points).
fn level_on(points: &[(f64, f64)], f: f64) -> Option<f64> {
    let i = points.partition_point(|p| p.0 < f);
    let (a, b) = match (i.checked_sub(1).and_then(|j| points.get(j)), points.get(i)) {
        (_, Some(b)) if b.0 == f => return Some(b.1).filter(|v| v.is_finite()),
        (Some(a), Some(b)) => (a, b),
        _ => return None,
    };
    let t = (f / a.0).ln() / (b.0 / a.0).ln();
    let v = a.1 + t * (b.1 - a.1);
    v.is_finite().then_some(v)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn thinning_keeps_ends_and_bounds_the_count() {
        let pts: Vec<(f64, f64)> = (0..240).map(|i| (f64::from(i) + 1.0, 0.0)).collect();
        let t = thin(pts, MAX_OVERLAY_POINTS);
        assert!(t.len() <= MAX_OVERLAY_POINTS, "{}", t.len());
        assert_eq!(t.first().unwrap().0, 1.0);
        assert_eq!(t.last().unwrap().0, 240.0);
    }

    #[test]
    fn levels_on_a_curve_interpolate_in_log_frequency() {
        let pts = [(100.0, 0.0), (10000.0, 20.0)];
        assert!((level_on(&pts, 1000.0).unwrap() - 10.0).abs() < 1e-9);
        assert_eq!(level_on(&pts, 50.0), None);
        assert_eq!(level_on(&pts, 100.0), Some(0.0));
    }
}
