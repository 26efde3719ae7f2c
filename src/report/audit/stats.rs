//! The figures of the audit report: counts and yields (overall and per group), the Pareto
//! of failing checks, and the distribution of each scalar check with its Cpk.
//!
//! Definitions (also in the report's footnote, docs/architecture.md, "Audit report and
//! export", and docs/engineer/history.md); a **unit** is a serial number, its records taken
//! in chain order (by id):
//! - *records*: records in the selection; *units*: distinct serials among them;
//! - *pass / fail / retest*: units by the verdict of their latest record (they add up to
//!   the units);
//! - *yield*: units passing on their latest record ÷ units;
//! - *first-pass yield*: units whose first test ever passed ÷ units whose first test ever
//!   is in the selection. A unit's first test ever is its first record in the whole store
//!   ([`FirstTests`], any station, plan and day), the same rule as the station loop's
//!   ([`crate::bench::tally`]): a unit whose first record lies before a time window, or on a
//!   station or plan the selection leaves out, is not in the first-pass yield of the window;
//! - *retested units*: units with more than one record; *retest rate*: retested units ÷
//!   units; *re-tests*: records − units.
//!
//! A group (a UTC day, a plan revision, a station) is counted as if the selection held only
//! that group's records, so a unit tested on two days counts on both; its first test ever
//! lies in one group only, so it counts in the first-pass yield of that one.

use std::collections::{BTreeMap, HashMap};

use super::load::RecordView;
use crate::Verdict;

/// Counts of a set of records (module doc for the definitions).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub(crate) struct Tally {
    pub records: u64,
    pub units: u64,
    pub pass: u64,
    pub fail: u64,
    pub retest: u64,
    /// Units whose first test ever is among the records.
    pub first_tested: u64,
    /// Of those, units whose first test ever passed.
    pub first_pass: u64,
    pub retested_units: u64,
}

/// Each serial's first record in the whole store (its first test ever), by record id.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub(crate) struct FirstTests(HashMap<String, i64>);

impl FirstTests {
    /// Read from the store.
    pub fn of_store(store: &crate::store::Store) -> Result<FirstTests, crate::store::StoreError> {
        store.first_record_ids().map(FirstTests)
    }

    /// True when `r` is its unit's first test ever. A serial the map does not know (a
    /// record appended after the map was read) was not tested before it.
    fn is_first(&self, r: &RecordView, first_in_set: bool) -> bool {
        match self.0.get(&r.record.serial) {
            Some(id) => *id == r.record.id,
            None => first_in_set,
        }
    }
}

/// `num / den`, `None` when there is nothing to divide.
pub(crate) fn ratio(num: u64, den: u64) -> Option<f64> {
    (den > 0).then(|| num as f64 / den as f64)
}

impl Tally {
    /// Count `records`, given in chain order; `first` names each unit's first test ever.
    pub fn of<'a>(records: impl IntoIterator<Item = &'a RecordView>, first: &FirstTests) -> Tally {
        // serial → (verdict of its first test ever when among the records, latest verdict,
        // records)
        let mut units: HashMap<&str, (Option<Verdict>, Verdict, u64)> = HashMap::new();
        let mut n = 0u64;
        for r in records {
            n += 1;
            let v = r.record.verdict;
            let seen = units.contains_key(r.record.serial.as_str());
            let first_ever = first.is_first(r, !seen).then_some(v);
            units
                .entry(r.record.serial.as_str())
                .and_modify(|u| {
                    u.0 = u.0.or(first_ever);
                    u.1 = v;
                    u.2 += 1;
                })
                .or_insert((first_ever, v, 1));
        }
        let mut t = Tally {
            records: n,
            units: units.len() as u64,
            ..Tally::default()
        };
        for (first, latest, count) in units.values() {
            match latest {
                Verdict::Pass => t.pass += 1,
                Verdict::Fail => t.fail += 1,
                Verdict::Retest => t.retest += 1,
            }
            t.first_tested += u64::from(first.is_some());
            t.first_pass += u64::from(*first == Some(Verdict::Pass));
            t.retested_units += u64::from(*count > 1);
        }
        t
    }

    /// Units passing on their latest record ÷ units.
    pub fn yield_fraction(&self) -> Option<f64> {
        ratio(self.pass, self.units)
    }

    /// Units whose first test ever passed ÷ units whose first test ever is counted here.
    pub fn first_pass_yield(&self) -> Option<f64> {
        ratio(self.first_pass, self.first_tested)
    }

    /// Units with more than one record ÷ units.
    pub fn retest_rate(&self) -> Option<f64> {
        ratio(self.retested_units, self.units)
    }
}

/// Tallies per group key, groups in key order.
pub(crate) fn tally_by(
    records: &[RecordView],
    first: &FirstTests,
    key: impl Fn(&RecordView) -> String,
) -> Vec<(String, Tally)> {
    let mut groups: BTreeMap<String, Vec<&RecordView>> = BTreeMap::new();
    for r in records {
        groups.entry(key(r)).or_default().push(r);
    }
    groups
        .into_iter()
        .map(|(k, rs)| (k, Tally::of(rs, first)))
        .collect()
}

/// The UTC day of a record (`YYYY-MM-DD`, the first ten characters of `time_utc`).
pub(crate) fn day_of(r: &RecordView) -> String {
    r.record.time_utc.chars().take(10).collect()
}

/// One bar of the Pareto of failing checks.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ParetoBar {
    /// Check id.
    pub check: String,
    /// Records in which this check failed on at least one channel.
    pub count: u64,
    /// Running share of all counted failures up to and including this bar, percent.
    pub cumulative_pct: f64,
}

/// Failing checks by the number of records they failed in, most first (ties by id).
pub(crate) fn pareto(records: &[RecordView]) -> Vec<ParetoBar> {
    let mut counts: HashMap<&str, u64> = HashMap::new();
    for r in records {
        let mut seen: Vec<&str> = Vec::new();
        for c in r.checks.iter().filter(|c| c.verdict == "fail") {
            if !seen.contains(&c.id.as_str()) {
                seen.push(&c.id);
                *counts.entry(&c.id).or_default() += 1;
            }
        }
    }
    let mut bars: Vec<(&str, u64)> = counts.into_iter().collect();
    bars.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(b.0)));
    let total: u64 = bars.iter().map(|b| b.1).sum();
    let mut running = 0u64;
    bars.into_iter()
        .map(|(check, count)| {
            running += count;
            ParetoBar {
                check: check.to_owned(),
                count,
                cumulative_pct: 100.0 * running as f64 / total as f64,
            }
        })
        .collect()
}

/// A scalar check's margins over the units, with their summary.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Scalar {
    /// Check id.
    pub check: String,
    /// Check kind.
    pub kind: String,
    /// One margin per unit and channel, dB (each unit's first record that judged it).
    pub margins_db: Vec<f64>,
    /// Summary of `margins_db`.
    pub summary: Summary,
}

/// Mean, standard deviation and capability of a sample of margins.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Summary {
    pub n: usize,
    pub mean: f64,
    /// Sample standard deviation (n − 1); NaN below two values.
    pub sd: f64,
    pub min: f64,
    pub max: f64,
    /// Values below 0 dB (outside the limits).
    pub n_outside: usize,
    /// Cpk against the one lower limit at 0 dB margin; `None` when σ is 0 or undefined.
    pub cpk: Option<f64>,
}

/// Process capability index Cpk = min(USL − μ, μ − LSL) / (3σ), the one existing side
/// when only one limit is given (Montgomery, *Introduction to Statistical Quality
/// Control*, the chapter on process capability; from memory). `None` when σ is not
/// positive or there is no limit.
pub(crate) fn cpk(mean: f64, sd: f64, lsl: Option<f64>, usl: Option<f64>) -> Option<f64> {
    if !(sd > 0.0 && sd.is_finite()) {
        return None;
    }
    let sides = [usl.map(|u| u - mean), lsl.map(|l| mean - l)];
    sides
        .into_iter()
        .flatten()
        .reduce(f64::min)
        .map(|d| d / (3.0 * sd))
}

/// Summary of `values` (at least one) against a lower limit of 0 dB margin.
pub(crate) fn summarize(values: &[f64]) -> Summary {
    let n = values.len();
    let mean = values.iter().sum::<f64>() / n as f64;
    let sd = if n > 1 {
        (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
    } else {
        f64::NAN
    };
    Summary {
        n,
        mean,
        sd,
        min: values.iter().copied().fold(f64::INFINITY, f64::min),
        max: values.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        n_outside: values.iter().filter(|v| **v < 0.0).count(),
        cpk: cpk(mean, sd, Some(0.0), None),
    }
}

/// Every check kind other than `response` whose results carry a margin, in the order the
/// checks first appear; each unit contributes its first record that judged the check.
pub(crate) fn scalars(records: &[RecordView]) -> Vec<Scalar> {
    let mut order: Vec<(String, String)> = Vec::new();
    let mut margins: HashMap<String, Vec<f64>> = HashMap::new();
    // (check id, serial) pairs already counted: a unit's later records are retests.
    let mut counted: HashMap<(&str, &str), i64> = HashMap::new();
    for r in records {
        for c in &r.checks {
            if c.kind == "response" || c.verdict == "retest" {
                continue;
            }
            let Some(m) = c.margin_db else { continue };
            let first = *counted
                .entry((c.id.as_str(), r.record.serial.as_str()))
                .or_insert(r.record.id);
            if first != r.record.id {
                continue;
            }
            if !margins.contains_key(&c.id) {
                order.push((c.id.clone(), c.kind.clone()));
            }
            margins.entry(c.id.clone()).or_default().push(m);
        }
    }
    order
        .into_iter()
        .map(|(check, kind)| {
            let margins_db = margins.remove(&check).unwrap_or_default();
            Scalar {
                summary: summarize(&margins_db),
                check,
                kind,
                margins_db,
            }
        })
        .collect()
}

/// Equal-width histogram bins over `[lo, hi]`: (left edge, width, count).
pub(crate) fn histogram(values: &[f64], lo: f64, hi: f64, n_bins: usize) -> Vec<(f64, f64, u64)> {
    let n_bins = n_bins.max(1);
    let width = ((hi - lo) / n_bins as f64).max(f64::MIN_POSITIVE);
    let mut counts = vec![0u64; n_bins];
    for v in values {
        let i = ((v - lo) / width).floor();
        let i = if i < 0.0 {
            0
        } else {
            (i as usize).min(n_bins - 1)
        };
        counts[i] += 1;
    }
    counts
        .into_iter()
        .enumerate()
        .map(|(i, c)| (lo + i as f64 * width, width, c))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    // Cpk by its definition (Montgomery, process capability; from memory): a process
    // centred between limits 3σ away on each side has Cpk 1; off-centre, the nearer side
    // decides; one limit, that side alone.
    #[test]
    fn cpk_follows_its_definition() {
        assert_eq!(cpk(0.0, 1.0, Some(-3.0), Some(3.0)), Some(1.0));
        assert_eq!(cpk(1.0, 1.0, Some(-3.0), Some(3.0)), Some(2.0 / 3.0));
        assert_eq!(cpk(2.0, 0.5, Some(0.0), None), Some(2.0 / 1.5));
        assert_eq!(cpk(2.0, 0.0, Some(0.0), None), None);
        assert_eq!(cpk(2.0, 1.0, None, None), None);
    }

    #[test]
    fn summary_uses_the_sample_standard_deviation() {
        // 2, 4, 4, 4, 5, 5, 7, 9: mean 5, sum of squares 32, sample variance 32/7.
        let s = summarize(&[2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0]);
        assert_eq!(s.mean, 5.0);
        assert!((s.sd - (32.0f64 / 7.0).sqrt()).abs() < 1e-12);
        assert_eq!((s.min, s.max, s.n_outside), (2.0, 9.0, 0));
    }

    #[test]
    fn histogram_puts_the_top_edge_in_the_last_bin() {
        let h = histogram(&[0.0, 0.5, 1.0, 2.0], 0.0, 2.0, 2);
        assert_eq!(h.iter().map(|b| b.2).collect::<Vec<_>>(), [2, 2]);
    }
}
