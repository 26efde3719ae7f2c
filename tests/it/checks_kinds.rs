//! Each check kind on hand-built measurements. Every expected margin is worked out in the
//! test from the kind's definition (brief "checks v1" and the module docs of
//! `tragus::checks::*`), not taken from the implementation.

use crate::support::checks_fixture;

use checks_fixture::*;
use tragus::checks::judge;
use tragus::plan::{CheckKind, Normalize, Polarity, SensitivityUnit};
use tragus::Verdict;

/// Sums of a handful of dB values and base-10 logs: a few ULP, far below 1e-9 dB.
const TOL_DB: f64 = 1e-9;

fn one(kind: CheckKind, m: tragus::analysis::ChannelMeasurement) -> tragus::checks::CheckResult {
    let p = plan(&[&m.name.clone()], vec![check("c", &[], kind)]);
    let (mut results, _) = judge(&p, &[m]);
    assert_eq!(results.len(), 1);
    results.remove(0)
}

#[test]
fn response_normalised_to_band_mean_against_sloped_lower_line() {
    // Grid 125…8k; normalisation band 500–2000 Hz holds 12, 10, 13 dB → mean 35/3 dB.
    let r = [9.5, 11.0, 12.0, 10.0, 13.0, 9.0, 3.0];
    let mean = (12.0 + 10.0 + 13.0) / 3.0;
    let kind = CheckKind::Response {
        upper: Some(line(&[(125.0, 3.0), (8000.0, 3.0)])),
        // Lower: −3 dB to 1 kHz, then straight in log f to −9 dB at 8 kHz.
        lower: Some(line(&[(125.0, -3.0), (1000.0, -3.0), (8000.0, -9.0)])),
        smoothing_fraction: None,
        normalize: Some(Normalize::Band(band(500.0, 2000.0))),
    };
    // Margins by hand (n = r − 35/3): 125: −2.17+3 = 0.83; 250: 2.33; 500: 2.67;
    // 1k: 1.33; 2k: lower = −3 − 6·lg2/lg8 = −5 → 1.67 (upper); 4k: lower −7 → 4.33;
    // 8k: (3 − 35/3) + 9 = 1/3 → the worst, at 8 kHz.
    let got = one(kind.clone(), measurement("left", &r));
    assert_eq!(got.verdict, Verdict::Pass);
    close(got.worst_margin_db, (3.0 - mean) + 9.0, TOL_DB);
    assert_eq!(got.at_hz, Some(8000.0));
    assert!(
        got.detail.contains("normalised to the mean"),
        "{}",
        got.detail
    );

    // Drop 4 kHz to 1 dB: n = 1 − 35/3; lower at 4 kHz = −3 − 6·(lg4/lg8) = −7 dB
    // (log-linear interpolation), so the margin is (1 − 35/3) + 7 = −11/3 → fail there.
    let mut r2 = r;
    r2[5] = 1.0;
    let got = one(kind, measurement("left", &r2));
    assert_eq!(got.verdict, Verdict::Fail);
    close(got.worst_margin_db, (1.0 - mean) + 7.0, TOL_DB);
    assert_eq!(got.at_hz, Some(4000.0));
    assert!(
        got.detail.contains("below the lower line"),
        "{}",
        got.detail
    );
    assert!(
        got.detail.contains("1 of 7 points outside"),
        "{}",
        got.detail
    );
}

#[test]
fn response_line_spanning_part_of_the_grid_judges_only_its_span() {
    // Upper line only over 500–2000 Hz: 6 dB → 0 dB; at 1 kHz (the geometric mean) it is
    // 3 dB. Points outside the span are 20 dB, which any extrapolation would fail.
    let r = [20.0, 20.0, 5.0, 2.5, -1.0, 20.0, 20.0];
    let kind = CheckKind::Response {
        upper: Some(line(&[(500.0, 6.0), (2000.0, 0.0)])),
        lower: None,
        smoothing_fraction: None,
        normalize: None,
    };
    // Margins: 500: 6 − 5 = 1; 1k: 3 − 2.5 = 0.5; 2k: 0 − (−1) = 1 → 0.5 at 1 kHz.
    let got = one(kind, measurement("left", &r));
    assert_eq!(got.verdict, Verdict::Pass);
    close(got.worst_margin_db, 0.5, TOL_DB);
    assert_eq!(got.at_hz, Some(1000.0));
    assert!(got.detail.contains("all 3 points"), "{}", got.detail);
}

#[test]
fn response_line_ending_between_grid_points() {
    // Upper line (300 Hz, 5 dB)–(3 kHz, 15 dB): 10 dB per decade, so at f it is
    // 5 + 10·lg(f/300). Grid points inside: 500, 1k, 2k. Flat 0 dB response → the
    // smallest margin is at 500 Hz: 5 + 10·lg(5/3) = 7.218 dB.
    let kind = CheckKind::Response {
        upper: Some(line(&[(300.0, 5.0), (3000.0, 15.0)])),
        lower: None,
        smoothing_fraction: None,
        normalize: None,
    };
    let got = one(kind, measurement("left", &[0.0; 7]));
    close(
        got.worst_margin_db,
        5.0 + 10.0 * (5.0f64 / 3.0).log10(),
        TOL_DB,
    );
    assert_eq!(got.at_hz, Some(500.0));
    assert!(got.detail.contains("all 3 points"), "{}", got.detail);
}

#[test]
fn response_without_overlap_is_a_retest_not_a_pass() {
    let kind = CheckKind::Response {
        upper: Some(line(&[(10_000.0, 0.0), (20_000.0, 0.0)])),
        lower: None,
        smoothing_fraction: None,
        normalize: None,
    };
    let got = one(kind, measurement("left", &[0.0; 7]));
    assert_eq!(got.verdict, Verdict::Retest);
    assert_eq!(got.worst_margin_db, None);
    assert_eq!(
        got.detail,
        "not judged: no grid point lies in the limit lines' span \
         (lines 10.0 kHz–20.0 kHz, grid 125 Hz–8.00 kHz)"
    );
}

#[test]
fn sensitivity_is_the_db_mean_over_the_band_edges_included() {
    // Band 250–2000 Hz holds 2, 3, 5, 4 dB (edges included) → mean 3.5 dB; limits 0…4 dB
    // → margin min(3.5 − 0, 4 − 3.5) = 0.5 dB. Were the edges excluded, the mean would be
    // 4 dB and the margin 0.
    let r = [1.0, 2.0, 3.0, 5.0, 4.0, 0.0, -10.0];
    let kind = |max_db| CheckKind::Sensitivity {
        band: band(250.0, 2000.0),
        min_db: 0.0,
        max_db,
        unit: SensitivityUnit::Db,
    };
    let got = one(kind(4.0), measurement("left", &r));
    assert_eq!(got.verdict, Verdict::Pass);
    close(got.worst_margin_db, 0.5, TOL_DB);
    assert_eq!(got.at_hz, None);
    assert!(got.detail.contains("mean level 3.50 dB"), "{}", got.detail);
    // Upper limit 3 dB: margin 3 − 3.5 = −0.5 → fail.
    let got = one(kind(3.0), measurement("left", &r));
    assert_eq!(got.verdict, Verdict::Fail);
    close(got.worst_margin_db, -0.5, TOL_DB);
}

#[test]
fn sensitivity_band_without_grid_points_is_a_retest() {
    let kind = CheckKind::Sensitivity {
        band: band(130.0, 240.0),
        min_db: -1.0,
        max_db: 1.0,
        unit: SensitivityUnit::Db,
    };
    let got = one(kind, measurement("left", &[0.0; 7]));
    assert_eq!(got.verdict, Verdict::Retest);
    assert_eq!(
        got.detail,
        "not judged: no grid point with a level in the band 130 Hz–240 Hz"
    );
}

#[test]
fn thd_max_in_band_skips_null_points() {
    let mut m = measurement("left", &[0.0; 7]);
    m.thd_percent = vec![
        Some(5.0), // 125 Hz, outside the band
        Some(0.5),
        None,
        Some(1.0),
        Some(2.0), // 2 kHz: the in-band maximum
        None,
        Some(9.0), // 8 kHz, outside the band
    ];
    let kind = |max_percent| CheckKind::Thd {
        band: band(250.0, 4000.0),
        max_percent,
    };
    // Margin 20·lg(limit/measured): 20·lg(3/2) = 3.52 dB inside.
    let got = one(kind(3.0), m.clone());
    assert_eq!(got.verdict, Verdict::Pass);
    close(got.worst_margin_db, 20.0 * (3.0f64 / 2.0).log10(), TOL_DB);
    assert_eq!(got.at_hz, Some(2000.0));
    assert!(got.detail.contains("2 not measured"), "{}", got.detail);
    // Limit 1 %: 20·lg(1/2) = −6.02 dB → fail.
    let got = one(kind(1.0), m);
    assert_eq!(got.verdict, Verdict::Fail);
    close(got.worst_margin_db, 20.0 * 0.5f64.log10(), TOL_DB);
}

#[test]
fn thd_with_every_point_null_is_a_retest_with_reason() {
    let kind = CheckKind::Thd {
        band: band(125.0, 8000.0),
        max_percent: 1.0,
    };
    let got = one(kind, measurement("left", &[0.0; 7]));
    assert_eq!(got.verdict, Verdict::Retest);
    assert_eq!(got.worst_margin_db, None);
    assert!(
        got.detail
            .starts_with("not judged: THD not measured at any of the 7 points in 125 Hz–8.00 kHz"),
        "{}",
        got.detail
    );
}

#[test]
fn harmonic_order_is_read_from_its_own_curve() {
    let mut m = measurement("left", &[0.0; 7]);
    m.harmonics_db.insert(
        "3".into(),
        vec![
            Some(-60.0),
            Some(-50.0),
            Some(-45.0),
            None,
            Some(-55.0),
            None,
            None,
        ],
    );
    // HD2 louder everywhere, to show order 3 is the one judged.
    m.harmonics_db.insert("2".into(), vec![Some(-20.0); 7]);
    let kind = |order| CheckKind::Harmonic {
        order,
        band: band(125.0, 1000.0),
        max_db: -48.0,
    };
    // HD3 over 125–1000 Hz: max −45 dB at 500 Hz; margin −48 − (−45) = −3 dB → fail.
    let got = one(kind(3), m.clone());
    assert_eq!(got.verdict, Verdict::Fail);
    close(got.worst_margin_db, -3.0, TOL_DB);
    assert_eq!(got.at_hz, Some(500.0));
    assert!(got.detail.contains("HD3"), "{}", got.detail);
    // Order 7 was not analysed: retest, naming what was.
    let got = one(kind(7), m);
    assert_eq!(got.verdict, Verdict::Retest);
    assert_eq!(
        got.detail,
        "not judged: harmonic 7 was not analysed (analysed: 2, 3)"
    );
}

#[test]
fn rub_buzz_max_in_band() {
    let mut m = measurement("left", &[0.0; 7]);
    m.rub_buzz_db = vec![
        Some(-20.0), // 125 Hz, outside
        Some(-38.0),
        Some(-42.0),
        Some(-35.0),
        Some(-50.0),
        None,
        None,
    ];
    // Over 250–2000 Hz the max is −35 dB at 1 kHz; margin −30 − (−35) = 5 dB.
    let kind = CheckKind::RubBuzz {
        band: band(250.0, 2000.0),
        max_db: -30.0,
    };
    let got = one(kind, m);
    assert_eq!(got.verdict, Verdict::Pass);
    close(got.worst_margin_db, 5.0, TOL_DB);
    assert_eq!(got.at_hz, Some(1000.0));
}

#[test]
fn polarity_has_no_margin() {
    let mut m = measurement("left", &[0.0; 7]);
    m.polarity = Polarity::Negative;
    let got = one(
        CheckKind::Polarity {
            expected: Polarity::Positive,
        },
        m.clone(),
    );
    assert_eq!(got.verdict, Verdict::Fail);
    assert_eq!((got.worst_margin_db, got.at_hz), (None, None));
    assert_eq!(got.detail, "polarity negative, expected positive");
    let got = one(
        CheckKind::Polarity {
            expected: Polarity::Negative,
        },
        m,
    );
    assert_eq!(got.verdict, Verdict::Pass);
}

#[test]
fn balance_worst_absolute_difference_in_band() {
    let left = measurement("left", &[0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0]);
    let right = measurement("right", &[0.5, 1.2, 1.0, 3.5, 4.1, 0.0, 0.0]);
    // a − b over 250–2000 Hz: −0.2, +1.0, −0.5, −0.1 → |d| max 1.0 at 500 Hz; the 5 and 6
    // dB differences at 4k/8k are outside the band. Margin 1.5 − 1.0 = 0.5 dB.
    let kind = CheckKind::Balance {
        band: band(250.0, 2000.0),
        max_diff_db: 1.5,
        smoothing_fraction: None,
    };
    // Listed as right, left: the pair is still taken in plan channel order.
    let p = plan(
        &["left", "right"],
        vec![check("bal", &["right", "left"], kind)],
    );
    let (results, unit) = judge(&p, &[left, right]);
    assert_eq!(results.len(), 1);
    let got = &results[0];
    assert_eq!(got.channel, "left/right");
    assert_eq!(got.kind, "balance");
    assert_eq!(got.verdict, Verdict::Pass);
    close(got.worst_margin_db, 0.5, TOL_DB);
    assert_eq!(got.at_hz, Some(500.0));
    assert!(got.detail.contains("+1.00 dB"), "{}", got.detail);
    assert_eq!(unit, Verdict::Pass);
}

#[test]
fn balance_needs_two_channels() {
    let kind = CheckKind::Balance {
        band: band(250.0, 2000.0),
        max_diff_db: 1.5,
        smoothing_fraction: None,
    };
    let p = plan(&["a", "b", "c"], vec![check("bal", &[], kind)]);
    let ms = [
        measurement("a", &[0.0; 7]),
        measurement("b", &[0.0; 7]),
        measurement("c", &[0.0; 7]),
    ];
    let (results, unit) = judge(&p, &ms);
    assert_eq!(results[0].verdict, Verdict::Retest);
    assert_eq!(
        results[0].detail,
        "balance needs exactly two channels, the check has 3 (a, b, c)"
    );
    assert_eq!(unit, Verdict::Retest);
}

#[test]
fn response_smoothed_path_normalised_at_a_frequency_between_grid_points() {
    // The smoothed path normalises by the judged curve interpolated linearly in log f.
    // A stand-in for a smoothed curve (smoothing itself is the analysis's job):
    use tragus::checks::response::{judge_grid_curve, level_on_grid_db};
    let curve = [0.0, 0.0, 4.0, 8.0, 6.0, 2.0, -4.0];
    let f_norm = (500.0f64 * 1000.0).sqrt();
    // Geometric mean of 500 Hz and 1 kHz ⇒ reference (4 + 8)/2 = 6 dB; normalised curve
    // [−6, −6, −2, 2, 0, −4, −10] against +3/−8 dB: margins 2, 2, 5, 1, 3, 4, −2 → −2 dB
    // at 8 kHz.
    let up = line(&[(125.0, 3.0), (8000.0, 3.0)]);
    let lo = line(&[(125.0, -8.0), (8000.0, -8.0)]);
    let level = |f| level_on_grid_db(&GRID_HZ, &curve, f);
    let got = judge_grid_curve(
        &GRID_HZ,
        &curve,
        Some(&up),
        Some(&lo),
        Some(Normalize::AtHz(f_norm)),
        level,
    );
    assert_eq!(got.verdict, Verdict::Fail);
    close(got.worst_margin_db, -2.0, TOL_DB);
    assert_eq!(got.at_hz, Some(8000.0));
    assert!(
        got.detail
            .ends_with("normalised to the level at 707 Hz (6.00 dB)"),
        "{}",
        got.detail
    );

    // A normalisation frequency off the grid has no level: retest, not a silent 0 dB.
    let got = judge_grid_curve(
        &GRID_HZ,
        &curve,
        Some(&up),
        None,
        Some(Normalize::AtHz(20.0)),
        level,
    );
    assert_eq!(got.verdict, Verdict::Retest);
    assert_eq!(
        got.detail,
        "not judged: no level at the normalisation frequency 20.0 Hz"
    );
}
