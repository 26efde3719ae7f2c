//! A unit's history: every earlier record of a serial number, whichever station wrote it
//! into this store, on whichever day, under whichever plan.
//!
//! The bench reads it before it tests a unit ([`crate::bench::history`] applies the retest
//! rule and flags a pass after a fail; docs/engineer/history.md), the audit report reads
//! each unit's first record ([`Store::first_record_ids`]) for first-pass yield. Both go by
//! chain order (record id): the order the store appended the records in, which is the order
//! the units were tested in on one store.

use std::collections::HashMap;

use serde::{Deserialize, Serialize};

use super::record::verdict_from_word;
use super::{Store, StoreError};
use crate::Verdict;

/// One earlier record of a unit, as its history shows it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct EarlierTest {
    /// The record's id (chain order).
    pub record_id: i64,
    /// When the unit was measured, UTC, as recorded.
    pub time_utc: String,
    /// The station that tested it.
    pub station: String,
    /// The plan that judged it.
    pub plan_id: String,
    /// Its revision.
    pub plan_revision: u32,
    /// The recorded verdict.
    pub verdict: Verdict,
    /// Ids of the checks that failed (on any channel), in result order, each once.
    pub failed_checks: Vec<String>,
    /// The record was a FAIL for too many retests ([`HistoryNote::too_many_retests`]).
    pub too_many_retests: bool,
}

/// What the record of a unit says about its history (`history` in the result JSON): the
/// facts the bench read from the store before testing it, and what they decided.
///
/// The counts are facts at test time; the two flags follow from them, the limit and the
/// verdict by the rule in [`crate::bench::history`] (docs/engineer/history.md), so that a
/// re-analysis can apply the rule again without the store as it was then.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct HistoryNote {
    /// Earlier records of this serial in the store (any station, plan and day).
    pub earlier_tests: u64,
    /// Of those, how many passed.
    pub earlier_pass: u64,
    /// How many failed.
    pub earlier_fail: u64,
    /// How many were retests (no valid measurement).
    pub earlier_retest: u64,
    /// Earlier records since the unit's last pass (all of them when it never passed):
    /// this test is retest number `retests` of the unit (0: not a retest).
    pub retests: u64,
    /// Of those, how many failed.
    pub fails_since_pass: u64,
    /// The retest limit that applied.
    pub max_retests: u32,
    /// Where the limit came from: `plan`, `station`, `plan and station` or `default`.
    pub max_retests_from: String,
    /// `retests` exceeded `max_retests`: the unit is a FAIL whatever it measured.
    pub too_many_retests: bool,
    /// The unit passes now after a fail since its last pass.
    pub passed_after_fail: bool,
    /// The rule, in words.
    pub rule: String,
}

/// The parts of a stored result the history shows: which checks failed, and whether the
/// verdict was the retest rule's. Everything else in the document is skipped unbuilt.
#[derive(Debug, Default, Deserialize)]
#[serde(default)]
struct ResultDoc {
    checks: Vec<CheckDoc>,
    history: Option<NoteDoc>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(default)]
struct CheckDoc {
    id: String,
    verdict: String,
}

#[derive(Debug, Default, Deserialize)]
#[serde(default)]
struct NoteDoc {
    too_many_retests: bool,
}

impl Store {
    /// Every record of `serial` in this store, oldest first (chain order), from any station,
    /// plan and day. A record whose result JSON cannot be read still counts, with no failed
    /// checks (its verdict column is what was decided).
    pub fn unit_history(&self, serial: &str) -> Result<Vec<EarlierTest>, StoreError> {
        let mut stmt = self
            .conn
            .prepare(
                "SELECT id, time_utc, station, plan_id, plan_revision, verdict, result_json \
                 FROM records WHERE serial = ?1 ORDER BY id",
            )
            .map_err(|e| self.err(e))?;
        let mut rows = stmt.query([serial]).map_err(|e| self.err(e))?;
        let mut out = Vec::new();
        while let Some(row) = rows.next().map_err(|e| self.err(e))? {
            let corrupt = |column: &'static str, e: rusqlite::Error| StoreError::Corrupt {
                id: row.get(0).unwrap_or_default(),
                column,
                detail: e.to_string(),
            };
            let record_id: i64 = row.get(0).map_err(|e| corrupt("id", e))?;
            let revision: i64 = row.get(4).map_err(|e| corrupt("plan_revision", e))?;
            let verdict_text: String = row.get(5).map_err(|e| corrupt("verdict", e))?;
            let verdict = verdict_from_word(&verdict_text).ok_or_else(|| StoreError::Corrupt {
                id: record_id,
                column: "verdict",
                detail: format!("{verdict_text:?} is not pass, fail or retest"),
            })?;
            let result_json: String = row.get(6).map_err(|e| corrupt("result_json", e))?;
            let doc: ResultDoc = serde_json::from_str(&result_json).unwrap_or_default();
            let mut failed_checks: Vec<String> = Vec::new();
            for c in doc.checks.into_iter().filter(|c| c.verdict == "fail") {
                if !failed_checks.contains(&c.id) {
                    failed_checks.push(c.id);
                }
            }
            out.push(EarlierTest {
                record_id,
                time_utc: row.get(1).map_err(|e| corrupt("time_utc", e))?,
                station: row.get(2).map_err(|e| corrupt("station", e))?,
                plan_id: row.get(3).map_err(|e| corrupt("plan_id", e))?,
                plan_revision: u32::try_from(revision).map_err(|_| StoreError::Corrupt {
                    id: record_id,
                    column: "plan_revision",
                    detail: format!("{revision} is not a revision number"),
                })?,
                verdict,
                failed_checks,
                too_many_retests: doc.history.is_some_and(|h| h.too_many_retests),
            });
        }
        Ok(out)
    }

    /// The id of each serial's first record in this store (its first test ever, store-wide).
    pub fn first_record_ids(&self) -> Result<HashMap<String, i64>, StoreError> {
        let mut stmt = self
            .conn
            .prepare("SELECT serial, MIN(id) FROM records GROUP BY serial")
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?)))
            .map_err(|e| self.err(e))?;
        rows.collect::<Result<HashMap<_, _>, _>>()
            .map_err(|e| self.err(e))
    }
}
