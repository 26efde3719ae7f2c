//! The unit verdict from the measurement's validity and the check verdicts: the one place a
//! unit's verdict is decided (for [`super::judge`], `analyze`, and the bench after the
//! guard and the listening steps).
//!
//! The rule, in order:
//! 1. retest when the measurement is not valid: a measured channel is not valid (or a plan
//!    channel has no measurement), the capture had faults, the sweep was abandoned or the
//!    guard tripped: nothing is known about the unit, whatever the checks said;
//! 2. fail when any check failed: a limit was broken on a valid measurement, and a check
//!    that could not be judged elsewhere does not make that broken limit less broken;
//! 3. retest when any check could not be judged (a configuration problem, see
//!    [`super`]): an unjudged check is never counted as a pass;
//! 4. the listening steps, played only for a unit whose measured checks passed, are then
//!    judged the same way (fail over retest over pass);
//! 5. pass otherwise, including a plan without checks on valid measurements.
//!
//! This differs from folding [`Verdict::worst`] over the checks only in case 2 versus 3:
//! a check-level retest on a valid measurement does not hide a fail.

use crate::Verdict;

/// Unit verdict: see the module doc for the rule. `measurement_invalid` says the
/// measurement cannot support a verdict; `check_verdicts` are the measured checks';
/// `listening_verdicts` the operator's steps' (empty where none were played).
pub fn unit_verdict(
    measurement_invalid: bool,
    check_verdicts: impl IntoIterator<Item = Verdict>,
    listening_verdicts: impl IntoIterator<Item = Verdict>,
) -> Verdict {
    if measurement_invalid {
        return Verdict::Retest;
    }
    match fold_checks(check_verdicts) {
        Verdict::Pass => fold_checks(listening_verdicts),
        measured => measured,
    }
}

/// Fail over retest over pass, for checks judged on a valid measurement.
fn fold_checks(check_verdicts: impl IntoIterator<Item = Verdict>) -> Verdict {
    let (mut any_fail, mut any_retest) = (false, false);
    for v in check_verdicts {
        match v {
            Verdict::Fail => any_fail = true,
            Verdict::Retest => any_retest = true,
            Verdict::Pass => {}
        }
    }
    if any_fail {
        Verdict::Fail
    } else if any_retest {
        Verdict::Retest
    } else {
        Verdict::Pass
    }
}
