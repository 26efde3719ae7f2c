//! The running counts of an operator session: what the line lead reads off the station.
//!
//! Definitions (a contract: the summary JSON and the screen use them; docs/engineer/history.md):
//! - a **unit** is a distinct serial number; a **test** is one completed, recorded
//!   measurement of a unit. The same serial again is a retest of that unit, not a new unit.
//! - `tested`: units tested this session; `tests`: tests completed (= records written).
//! - `pass`, `fail`, `retest`: units by their **latest** verdict (they add up to
//!   `tested`): what the line does with each unit now.
//! - `retested`: tests of a unit already tested this session (= `tests − tested`).
//! - `first_tested`: units whose **first test ever** was in this session: no earlier record
//!   of the serial in the store (any station, any day) when it was tested. A unit first
//!   tested in an earlier session (or on another station writing to the same store) is not
//!   one, whatever it did this session.
//! - `first_pass`: of those, units whose first test passed; first-pass yield
//!   = `first_pass / first_tested` (common practice: a unit that passes only on a retest is
//!   not a first-pass unit, and a unit enters the yield once, in the session of its first
//!   test, so the yields of successive sessions combine into the yield of the line).
//!
//! The audit report counts first-pass yield by the same rule over a selection of records
//! ([`crate::report`]'s audit statistics).

use crate::Verdict;
use std::collections::HashMap;

/// One unit's history in the session.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct UnitHistory {
    /// The verdict of its first test ever, when that was in this session.
    first_ever: Option<Verdict>,
    latest: Verdict,
}

/// Counts of an operator session, fed one completed test at a time.
#[derive(Debug, Clone, Default)]
pub struct Tally {
    units: HashMap<String, UnitHistory>,
    tests: u64,
}

/// The counts at one moment (field names are the summary JSON's).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Counts {
    /// Distinct units tested.
    pub tested: u64,
    /// Completed tests (records written).
    pub tests: u64,
    /// Units whose latest verdict is pass.
    pub pass: u64,
    /// Units whose latest verdict is fail.
    pub fail: u64,
    /// Units whose latest verdict is retest (still to be tested again).
    pub retest: u64,
    /// Tests of a unit already tested this session.
    pub retested: u64,
    /// Units whose first test ever (store-wide) was in this session.
    pub first_tested: u64,
    /// Of those, units whose first test passed.
    pub first_pass: u64,
    /// `first_pass / first_tested`, 0 to 1; `None` before the first such unit.
    pub first_pass_yield: Option<f64>,
}

impl Tally {
    /// An empty session.
    pub fn new() -> Self {
        Tally::default()
    }

    /// Count one completed test, without knowing the store: a serial new to the session
    /// is taken to be tested for the first time ever. Returns true when the serial was
    /// already tested this session (a retest of that unit).
    pub fn add(&mut self, serial: &str, verdict: Verdict) -> bool {
        let first_ever = !self.units.contains_key(serial);
        self.add_tested(serial, verdict, first_ever)
    }

    /// Count one completed test; `first_ever`: the store held no earlier record of the
    /// serial when it was tested (the result's `history.earlier_tests` is 0). Returns true
    /// when the serial was already tested this session.
    pub fn add_tested(&mut self, serial: &str, verdict: Verdict, first_ever: bool) -> bool {
        self.tests += 1;
        match self.units.get_mut(serial) {
            Some(h) => {
                h.latest = verdict;
                true
            }
            None => {
                self.units.insert(
                    serial.to_string(),
                    UnitHistory {
                        first_ever: first_ever.then_some(verdict),
                        latest: verdict,
                    },
                );
                false
            }
        }
    }

    /// The counts now.
    pub fn counts(&self) -> Counts {
        let tested = self.units.len() as u64;
        let latest = |v: Verdict| self.units.values().filter(|h| h.latest == v).count() as u64;
        let first_tested = self
            .units
            .values()
            .filter(|h| h.first_ever.is_some())
            .count() as u64;
        let first_pass = self
            .units
            .values()
            .filter(|h| h.first_ever == Some(Verdict::Pass))
            .count() as u64;
        Counts {
            tested,
            tests: self.tests,
            pass: latest(Verdict::Pass),
            fail: latest(Verdict::Fail),
            retest: latest(Verdict::Retest),
            retested: self.tests - tested,
            first_tested,
            first_pass,
            first_pass_yield: (first_tested > 0).then(|| first_pass as f64 / first_tested as f64),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-counted session: A pass, B fail, A again fail (retest of A), C retest, B pass.
    // By the definitions in the module doc: units A, B, C (tested 3), tests 5, latest
    // verdicts A fail, B pass, C retest; retested 2; first-pass units: A only → FPY 1/3.
    #[test]
    fn counts_follow_the_definitions() {
        let mut t = Tally::new();
        assert!(!t.add("A", Verdict::Pass));
        assert!(!t.add("B", Verdict::Fail));
        assert!(t.add("A", Verdict::Fail));
        assert!(!t.add("C", Verdict::Retest));
        assert!(t.add("B", Verdict::Pass));
        let c = t.counts();
        assert_eq!(
            (
                c.tested,
                c.tests,
                c.pass,
                c.fail,
                c.retest,
                c.retested,
                c.first_pass
            ),
            (3, 5, 1, 1, 1, 2, 1)
        );
        // Exact ratio of small integers: 1/3 in f64 both ways.
        assert_eq!(c.first_pass_yield, Some(1.0 / 3.0));
    }

    // A second session on the same store: A (first tested before, fails again, then passes)
    // is no first test here; D is new and passes; E is new and fails. By the definitions:
    // tested 3, first_tested 2 (D, E), first_pass 1 (D) → FPY 1/2, whatever A did.
    #[test]
    fn units_first_tested_in_an_earlier_session_are_not_in_the_yield() {
        let mut t = Tally::new();
        assert!(!t.add_tested("A", Verdict::Fail, false));
        assert!(!t.add_tested("D", Verdict::Pass, true));
        assert!(t.add_tested("A", Verdict::Pass, false));
        assert!(!t.add_tested("E", Verdict::Fail, true));
        let c = t.counts();
        assert_eq!((c.tested, c.first_tested, c.first_pass), (3, 2, 1));
        assert_eq!(c.first_pass_yield, Some(0.5));
    }

    #[test]
    fn empty_session_has_no_yield() {
        assert_eq!(Tally::new().counts().first_pass_yield, None);
    }
}
