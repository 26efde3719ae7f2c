//! The unit verdict from the channels' validity and the check verdicts.
//!
//! Called at the end of [`super::judge`]. The rule, in order:
//! 1. retest when any measured channel is not valid (or a plan channel has no measurement):
//!    nothing is known about the unit, whatever the checks said;
//! 2. fail when any check failed: a limit was broken on a valid measurement, and a check
//!    that could not be judged elsewhere does not make that broken limit less broken;
//! 3. retest when any check could not be judged (a configuration problem, see
//!    [`super`]): an unjudged check is never counted as a pass;
//! 4. pass otherwise, including a plan without checks on valid measurements.
//!
//! This differs from folding [`Verdict::worst`] over the checks only in case 2 versus 3:
//! a check-level retest on a valid measurement does not hide a fail.

use crate::Verdict;

/// Unit verdict: see the module doc for the rule.
pub fn unit_verdict(
    any_channel_invalid: bool,
    check_verdicts: impl IntoIterator<Item = Verdict>,
) -> Verdict {
    if any_channel_invalid {
        return Verdict::Retest;
    }
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
