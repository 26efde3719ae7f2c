//! The running counts of an operator session: what the line lead reads off the station.
//!
//! Definitions (a contract: the summary JSON and the screen use them):
//! - a **unit** is a distinct serial number; a **test** is one completed, recorded
//!   measurement of a unit. The same serial again is a retest of that unit, not a new unit.
//! - `tested`: units tested this session; `tests`: tests completed (= records written).
//! - `pass`, `fail`, `retest`: units by their **latest** verdict (they add up to
//!   `tested`): what the line does with each unit now.
//! - `retested`: tests of a unit already tested this session (= `tests − tested`).
//! - `first_pass`: units whose **first** test passed; first-pass yield
//!   = `first_pass / tested` (common practice: a unit that passes only on a retest is not a
//!   first-pass unit).

use crate::Verdict;
use std::collections::HashMap;

/// One unit's history in the session.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct UnitHistory {
    first: Verdict,
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
    /// Units whose first test passed.
    pub first_pass: u64,
    /// `first_pass / tested`, 0 to 1; `None` before the first unit.
    pub first_pass_yield: Option<f64>,
}

impl Tally {
    /// An empty session.
    pub fn new() -> Self {
        Tally::default()
    }

    /// Count one completed test; returns true when the serial was already tested (a
    /// retest of that unit).
    pub fn add(&mut self, serial: &str, verdict: Verdict) -> bool {
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
                        first: verdict,
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
        let first_pass = self
            .units
            .values()
            .filter(|h| h.first == Verdict::Pass)
            .count() as u64;
        Counts {
            tested,
            tests: self.tests,
            pass: latest(Verdict::Pass),
            fail: latest(Verdict::Fail),
            retest: latest(Verdict::Retest),
            retested: self.tests - tested,
            first_pass,
            first_pass_yield: (tested > 0).then(|| first_pass as f64 / tested as f64),
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

    #[test]
    fn empty_session_has_no_yield() {
        assert_eq!(Tally::new().counts().first_pass_yield, None);
    }
}
