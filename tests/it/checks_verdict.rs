//! Verdict rules across checks and channels: invalid measurements, channel selection and
//! order, and the unit verdict (brief "checks v1"; docs/architecture.md "a retest is never counted as
//! a pass").

use crate::support::checks_fixture;

use checks_fixture::*;
use tragus::checks::judge;
use tragus::checks::verdict::unit_verdict;
use tragus::plan::{CheckKind, Polarity};
use tragus::Verdict::{self, Fail, Pass, Retest};

#[test]
fn unit_verdict_table() {
    // (any channel invalid, check verdicts) → unit verdict; the rule of the brief:
    // retest if a channel is invalid, else fail if a check failed, else (never a pass
    // for an unjudged check) retest if a check was not judged, else pass.
    let table: &[(bool, &[Verdict], Verdict)] = &[
        (false, &[], Pass),
        (false, &[Pass, Pass], Pass),
        (false, &[Pass, Fail], Fail),
        (false, &[Fail, Retest], Fail),
        (false, &[Pass, Retest], Retest),
        (true, &[], Retest),
        (true, &[Pass, Pass], Retest),
        (true, &[Fail, Pass], Retest),
    ];
    for (invalid, checks, want) in table {
        assert_eq!(
            unit_verdict(*invalid, checks.iter().copied(), []),
            *want,
            "invalid={invalid} checks={checks:?}"
        );
    }
}

#[test]
fn invalid_channel_is_retest_and_not_judged() {
    // Left is clipped and its response would fail the ±1 dB lines badly; right is valid
    // and fails its polarity. The left checks are retests, right is judged, the unit is a
    // retest (nothing is known about a unit with an invalid channel).
    let p = plan(
        &["left", "right"],
        vec![
            check("fr", &[], flat_response(1.0)),
            check(
                "pol",
                &["right"],
                CheckKind::Polarity {
                    expected: Polarity::Negative,
                },
            ),
        ],
    );
    let left = clipped(measurement("left", &[30.0; 7]));
    let right = measurement("right", &[0.0; 7]);
    let (results, unit) = judge(&p, &[left, right]);
    let summary: Vec<(&str, &str, Verdict)> = results
        .iter()
        .map(|r| (r.id.as_str(), r.channel.as_str(), r.verdict))
        .collect();
    assert_eq!(
        summary,
        [
            ("fr", "left", Retest),
            ("fr", "right", Pass),
            ("pol", "right", Fail)
        ]
    );
    assert_eq!(results[0].worst_margin_db, None);
    assert_eq!(
        results[0].detail,
        "not judged: measurement of left not valid: clipping (17 samples at full scale)"
    );
    assert_eq!(unit, Retest);
}

#[test]
fn invalid_channel_makes_unit_retest_even_without_checks_on_it() {
    let p = plan(
        &["left", "right"],
        vec![check("fr", &["right"], flat_response(1.0))],
    );
    let (results, unit) = judge(
        &p,
        &[
            clipped(measurement("left", &[0.0; 7])),
            measurement("right", &[0.0; 7]),
        ],
    );
    assert_eq!(results.len(), 1);
    assert_eq!(results[0].verdict, Pass);
    assert_eq!(unit, Retest);
}

#[test]
fn empty_channel_list_applies_to_every_channel_in_plan_order() {
    // Measurements handed over in reverse order; results still follow plan order.
    let p = plan(
        &["left", "right"],
        vec![
            check("fr", &[], flat_response(3.0)),
            check(
                "pol",
                &[],
                CheckKind::Polarity {
                    expected: Polarity::Positive,
                },
            ),
        ],
    );
    let (results, unit) = judge(
        &p,
        &[
            measurement("right", &[0.0; 7]),
            measurement("left", &[0.0; 7]),
        ],
    );
    let order: Vec<(&str, &str)> = results
        .iter()
        .map(|r| (r.id.as_str(), r.channel.as_str()))
        .collect();
    assert_eq!(
        order,
        [
            ("fr", "left"),
            ("fr", "right"),
            ("pol", "left"),
            ("pol", "right")
        ]
    );
    assert_eq!(unit, Pass);
}

#[test]
fn missing_measurement_is_a_retest() {
    let p = plan(
        &["left", "right"],
        vec![check("fr", &[], flat_response(3.0))],
    );
    let (results, unit) = judge(&p, &[measurement("left", &[0.0; 7])]);
    assert_eq!(results[1].channel, "right");
    assert_eq!(results[1].verdict, Retest);
    assert_eq!(
        results[1].detail,
        "not judged: no measurement for channel right"
    );
    assert_eq!(unit, Retest);
}

#[test]
fn fail_on_valid_measurement_is_not_hidden_by_an_unjudged_check() {
    // THD band with every point null → retest (configuration); response fails → unit fail.
    let p = plan(
        &["left"],
        vec![
            check("fr", &[], flat_response(1.0)),
            check(
                "thd",
                &[],
                CheckKind::Thd {
                    band: band(125.0, 8000.0),
                    max_percent: 1.0,
                },
            ),
        ],
    );
    let (results, unit) = judge(
        &p,
        &[measurement("left", &[0.0, 0.0, 0.0, 2.0, 0.0, 0.0, 0.0])],
    );
    assert_eq!(results[0].verdict, Fail);
    assert_eq!(results[1].verdict, Retest);
    assert_eq!(unit, Fail);
}

#[test]
fn null_harmonics_give_no_nan_anywhere() {
    // Distortion nulls above half the grid, as when n·f passes the sweep's stop frequency.
    let mut m = measurement("left", &[0.0; 7]);
    m.thd_percent = vec![Some(0.3), Some(0.2), Some(0.1), None, None, None, None];
    m.harmonics_db.insert(
        "2".into(),
        vec![
            Some(-50.0),
            Some(-54.0),
            Some(-60.0),
            None,
            None,
            None,
            None,
        ],
    );
    m.rub_buzz_db = vec![Some(-40.0), None, Some(-45.0), None, None, None, None];
    let p = plan(
        &["left"],
        vec![
            check(
                "thd",
                &[],
                CheckKind::Thd {
                    band: band(125.0, 8000.0),
                    max_percent: 1.0,
                },
            ),
            check(
                "hd2",
                &[],
                CheckKind::Harmonic {
                    order: 2,
                    band: band(125.0, 8000.0),
                    max_db: -40.0,
                },
            ),
            check(
                "rb",
                &[],
                CheckKind::RubBuzz {
                    band: band(125.0, 8000.0),
                    max_db: -30.0,
                },
            ),
        ],
    );
    let (results, unit) = judge(&p, &[m]);
    // Maxima by hand: THD 0.3 % at 125 Hz → 20·lg(1/0.3) = 10.46 dB; HD2 −50 dB → 10 dB;
    // rub and buzz −40 dB → 10 dB. Tolerance: a few ULP of one log10.
    let want = [20.0 * (1.0f64 / 0.3).log10(), 10.0, 10.0];
    for (r, w) in results.iter().zip(want) {
        let got = r.worst_margin_db.expect("margin");
        assert!(got.is_finite() && (got - w).abs() < 1e-9, "{}: {got}", r.id);
        assert_eq!(r.at_hz, Some(125.0), "{}", r.id);
        assert_eq!(r.verdict, Pass);
    }
    assert_eq!(unit, Pass);
    // And the JSON written for the store has numbers, not nulls, for these margins.
    let json = serde_json::to_value(&results).unwrap();
    assert!(json
        .as_array()
        .unwrap()
        .iter()
        .all(|r| r["worst_margin_db"].is_f64()));
}

// The listening steps count only after the measured checks passed, with the same rule
// (fail over retest over pass); an invalid measurement is a retest whatever anyone heard.
// The rule is the README's ("Listening steps") and the decision record of 2026-12-04.
#[test]
fn unit_verdict_with_listening_steps() {
    let table: &[(bool, &[Verdict], &[Verdict], Verdict)] = &[
        (false, &[Pass], &[Pass], Pass),
        (false, &[Pass], &[Fail], Fail),
        (false, &[Pass], &[Retest], Retest),
        (false, &[Pass], &[Retest, Fail], Fail),
        (false, &[Fail], &[Pass], Fail),
        (false, &[Retest], &[Pass], Retest),
        (false, &[Pass, Retest], &[Fail], Retest),
        (true, &[Pass], &[Pass], Retest),
        (false, &[], &[Fail], Fail),
    ];
    for (invalid, checks, heard, want) in table {
        assert_eq!(
            unit_verdict(*invalid, checks.iter().copied(), heard.iter().copied()),
            *want,
            "invalid={invalid} checks={checks:?} listening={heard:?}"
        );
    }
}
