//! Unit history on the bench: a serial's earlier records, read before it is tested, decide
//! whether it has been retested too often and whether it passes after a fail.
//!
//! Definitions (a contract: docs/engineer/history.md, the result JSON's `history` object):
//!
//! - A unit's **earlier tests** are every record of its serial in the store when it is
//!   tested, written by any station, on any day, under any plan (a store is one test step
//!   of a line).
//! - Its **retests** are the earlier tests since its last PASS (all earlier tests when it
//!   never passed): the test now is retest number `retests` (0: its first test, or its first
//!   since a pass — a unit that passed and comes back, from a rework or an audit, starts
//!   counting again). Every verdict counts, RETEST (no valid measurement) included: the rule
//!   bounds how often a unit is put on the fixture, whatever the reason.
//! - **Too many retests**: `retests > max_retests`. The unit is tested and recorded as
//!   usual (its measurement is kept), but its verdict is FAIL, whatever it measured, and its
//!   listening steps are not played. With the default `max_retests` 3 a unit gets its first
//!   test and three retests; its fifth test, and every later one, is a FAIL. A later PASS is
//!   then impossible under this limit, so the FAIL sticks until an engineer raises the limit.
//! - **max_retests**: the plan's `max_retests:` and the station's `max_retests:`; when both
//!   are set the stricter (smaller) applies — a plan states what the product allows, a line
//!   may be stricter, neither may loosen the other; when neither, [`DEFAULT_MAX_RETESTS`].
//! - **Passed after a fail**: the unit passes now and at least one of its retests (earlier
//!   tests since its last pass) was a FAIL. A flag for the line lead, not a verdict.
//!
//! The record keeps the facts and what they decided (`history` in the result JSON,
//! [`HistoryNote`]); a re-analysis applies the rule again from them ([`carry_over`]), since
//! the store holds later records of the unit by then.

use super::BenchError;
use crate::result::UnitResult;
use crate::store::history::{EarlierTest, HistoryNote};
use crate::Verdict;
use std::path::Path;

/// `max_retests` when neither the plan nor the station sets it: a first test and three
/// retests (common practice: a unit that fails three times more is not re-seated again).
pub const DEFAULT_MAX_RETESTS: u32 = 3;

/// How many earlier tests the one-line history shows (the latest ones).
const SHOWN: usize = 5;

/// The retest limit of a bench and where it came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RetestRule {
    /// Retests allowed.
    pub max_retests: u32,
    /// `plan`, `station`, `plan and station` (equal) or `default`.
    pub from: &'static str,
}

impl RetestRule {
    /// The stricter of the plan's and the station's limits, or the default (module doc).
    pub fn of(plan: Option<u32>, station: Option<u32>) -> RetestRule {
        let (max_retests, from) = match (plan, station) {
            (None, None) => (DEFAULT_MAX_RETESTS, "default"),
            (Some(p), None) => (p, "plan"),
            (None, Some(s)) => (s, "station"),
            (Some(p), Some(s)) if p == s => (p, "plan and station"),
            (Some(p), Some(s)) if p < s => (p, "plan"),
            (Some(_), Some(s)) => (s, "station"),
        };
        RetestRule { max_retests, from }
    }
}

/// A serial's earlier records, oldest first, as the bench read them before testing it.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct UnitHistory {
    /// The serial.
    pub serial: String,
    /// Its earlier records, oldest first.
    pub earlier: Vec<EarlierTest>,
}

impl UnitHistory {
    /// The history of `serial` in the store in `store_dir`; empty when there is no store
    /// yet (nothing is created).
    pub fn read(store_dir: &Path, serial: &str) -> Result<UnitHistory, BenchError> {
        let mut h = UnitHistory {
            serial: serial.to_string(),
            earlier: Vec::new(),
        };
        if !store_dir.join(crate::store::DB_FILE).exists() {
            return Ok(h);
        }
        h.earlier = crate::store::Store::open(store_dir)
            .and_then(|st| st.unit_history(serial))
            .map_err(|e| {
                BenchError::retest(format!(
                    "cannot read the earlier records of {serial} (its retest limit depends on \
                     them): {e}"
                ))
            })?;
        Ok(h)
    }

    /// The earlier records since the last pass (all of them when it never passed).
    fn since_last_pass(&self) -> &[EarlierTest] {
        let start = self
            .earlier
            .iter()
            .rposition(|t| t.verdict == Verdict::Pass)
            .map_or(0, |i| i + 1);
        &self.earlier[start..]
    }

    /// What the record is to say under `rule`; the flags are decided by [`apply`].
    pub fn note(&self, rule: &RetestRule) -> HistoryNote {
        let count = |v: Verdict| self.earlier.iter().filter(|t| t.verdict == v).count() as u64;
        let since = self.since_last_pass();
        HistoryNote {
            earlier_tests: self.earlier.len() as u64,
            earlier_pass: count(Verdict::Pass),
            earlier_fail: count(Verdict::Fail),
            earlier_retest: count(Verdict::Retest),
            retests: since.len() as u64,
            fails_since_pass: since.iter().filter(|t| t.verdict == Verdict::Fail).count() as u64,
            max_retests: rule.max_retests,
            max_retests_from: rule.from.to_string(),
            too_many_retests: false,
            passed_after_fail: false,
            rule: RULE.to_string(),
        }
    }

    /// One line for the operator before the unit is tested, `None` for a unit never tested:
    /// `E2-000123 tested 2× before: FAIL 2026-12-01 line3-st1 (plan demo-earbud r5; failed
    /// sens), RETEST …`, then what the test now is under `rule`.
    pub fn summary_line(&self, rule: &RetestRule) -> Option<String> {
        if self.earlier.is_empty() {
            return None;
        }
        let n = self.earlier.len();
        let shown = &self.earlier[n.saturating_sub(SHOWN)..];
        let items: Vec<String> = shown
            .iter()
            .map(|t| {
                let why = if t.too_many_retests {
                    "; too many retests".to_string()
                } else if t.failed_checks.is_empty() {
                    String::new()
                } else {
                    format!("; failed {}", t.failed_checks.join(", "))
                };
                format!(
                    "{} {} {} (plan {} r{}{why})",
                    t.verdict.word(),
                    t.time_utc.get(..10).unwrap_or(&t.time_utc),
                    t.station,
                    t.plan_id,
                    t.plan_revision
                )
            })
            .collect();
        let latest = if shown.len() < n {
            format!(" (the latest {})", shown.len())
        } else {
            String::new()
        };
        let retests = self.since_last_pass().len() as u32;
        let now = if retests == 0 {
            String::new()
        } else if retests > rule.max_retests {
            format!(
                "; this is retest {retests}, max_retests {} ({}): it will be a FAIL, too many \
                 retests",
                rule.max_retests, rule.from
            )
        } else {
            format!(
                "; this is retest {retests} of at most {} ({})",
                rule.max_retests, rule.from
            )
        };
        Some(format!(
            "{} tested {n}× before{latest}: {}{now}",
            self.serial,
            items.join(", ")
        ))
    }
}

/// The rule in words, recorded with every unit.
pub const RULE: &str = "retests = earlier records of this serial in the store since its last \
    pass (all of them if it never passed); more than max_retests: FAIL, too many retests; a \
    pass after a fail since the last pass is flagged";

/// Apply the history rule to a judged result: record `note` with its flags decided, and
/// make the verdict FAIL when the unit has been retested too often. Idempotent: the bench
/// applies it to the measured verdict (so a unit that is a FAIL anyway is not played its
/// listening steps) and again to the final one.
pub fn apply(result: &mut UnitResult, note: &HistoryNote) {
    let mut note = note.clone();
    note.too_many_retests = note.retests > u64::from(note.max_retests);
    if note.too_many_retests {
        result.verdict = Verdict::Fail;
    }
    note.passed_after_fail = result.verdict == Verdict::Pass && note.fails_since_pass > 0;
    result.history = Some(note);
}

/// Re-analysis of a stored record: apply the rule again from the `history` object of its
/// stored result (`stored`, the result JSON), which holds the facts read at test time. A
/// record written before unit history existed has none, and nothing changes.
pub fn carry_over(
    stored: &serde_json::Value,
    result: &mut UnitResult,
    record_id: i64,
) -> Result<(), BenchError> {
    let Some(h) = stored.get("history").filter(|h| !h.is_null()) else {
        return Ok(());
    };
    let note: HistoryNote = serde_json::from_value(h.clone()).map_err(|e| {
        BenchError::bad_input(format!(
            "record #{record_id}: expected a history object with the counts and the retest \
             limit in its result, found {h} ({e})"
        ))
    })?;
    apply(result, &note);
    Ok(())
}

/// What the history decided about a tested unit, in words, for the operator (empty when
/// nothing): the FAIL for too many retests, the pass after a fail.
pub fn outcome_lines(note: Option<&HistoryNote>) -> Vec<String> {
    let Some(n) = note else {
        return Vec::new();
    };
    let mut out = Vec::new();
    if n.too_many_retests {
        out.push(format!(
            "FAIL: too many retests (retest {} since its last pass; max_retests {} from the {})",
            n.retests, n.max_retests, n.max_retests_from
        ));
    }
    if n.passed_after_fail {
        out.push(format!(
            "passed after a fail ({} fail{} since its last pass)",
            n.fails_since_pass,
            if n.fails_since_pass == 1 { "" } else { "s" }
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(id: i64, v: Verdict) -> EarlierTest {
        EarlierTest {
            record_id: id,
            time_utc: "2026-12-01T08:00:00.000Z".into(),
            station: "larkspur-line3-st1".into(),
            plan_id: "demo-earbud".into(),
            plan_revision: 5,
            verdict: v,
            failed_checks: if v == Verdict::Fail {
                vec!["sens".into()]
            } else {
                vec![]
            },
            too_many_retests: false,
        }
    }

    #[test]
    fn the_stricter_limit_applies() {
        assert_eq!(RetestRule::of(None, None).max_retests, DEFAULT_MAX_RETESTS);
        assert_eq!(
            RetestRule::of(Some(5), Some(2)),
            RetestRule {
                max_retests: 2,
                from: "station"
            }
        );
        assert_eq!(
            RetestRule::of(Some(1), Some(2)),
            RetestRule {
                max_retests: 1,
                from: "plan"
            }
        );
        assert_eq!(RetestRule::of(None, Some(7)).from, "station");
    }

    // Hand-worked history: pass, fail, retest, fail. The retests are the three records after
    // the pass (fails since: 2); with max_retests 3 this test is retest 3, allowed.
    #[test]
    fn retests_count_from_the_last_pass() {
        use Verdict::*;
        let h = UnitHistory {
            serial: "E2-000123".into(),
            earlier: vec![t(1, Pass), t(2, Fail), t(3, Retest), t(4, Fail)],
        };
        let n = h.note(&RetestRule::of(None, None));
        assert_eq!(
            (
                n.earlier_tests,
                n.earlier_pass,
                n.earlier_fail,
                n.earlier_retest
            ),
            (4, 1, 2, 1)
        );
        assert_eq!((n.retests, n.fails_since_pass), (3, 2));
        let line = h.summary_line(&RetestRule::of(None, None)).unwrap();
        assert!(
            line.starts_with("E2-000123 tested 4× before: PASS 2026-12-01"),
            "{line}"
        );
        assert!(
            line.contains("FAIL 2026-12-01 larkspur-line3-st1 (plan demo-earbud r5; failed sens)"),
            "{line}"
        );
        assert!(
            line.ends_with("this is retest 3 of at most 3 (default)"),
            "{line}"
        );
    }
}
