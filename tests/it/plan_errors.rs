//! What a user reads when a plan is wrong: every problem at once, as `path:line:col: message`.
//!
//! The expected strings are the interface (docs/architecture.md: `tragus validate` prints one line per
//! problem). Line and column of each were counted in the fixture by hand (1-based, the
//! column of the offending value, or of the key for unknown keys, or of the mapping's first
//! key for missing keys).

use std::path::Path;
use tragus::plan::{load_plan, load_plan_str, PlanError};

/// Every problem line of a plan that must fail.
fn problems(path: &str) -> Vec<String> {
    match load_plan(Path::new(path)) {
        Ok(_) => panic!("{path} should not load"),
        Err(PlanError::Invalid(p)) => p.iter().map(ToString::to_string).collect(),
        Err(e) => panic!("{path}: unexpected error {e}"),
    }
}

fn problems_str(text: &str) -> Vec<String> {
    match load_plan_str(text, Path::new("t.yaml")) {
        Ok(_) => panic!("plan should not load:\n{text}"),
        Err(PlanError::Invalid(p)) => p.iter().map(ToString::to_string).collect(),
        Err(e) => panic!("unexpected error {e}"),
    }
}

/// `line:col` of the first `needle` on 1-based `line` of `text` (columns count characters).
fn at(text: &str, line: usize, needle: &str) -> String {
    let l = text.lines().nth(line - 1).unwrap();
    let byte = l.find(needle).unwrap();
    format!("{line}:{}", l[..byte].chars().count() + 1)
}

/// A valid plan to break one thing in.
const GOOD: &str = "\
plan: p
revision: 1
sample_rate_hz: 48000
stimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -6}
channels: [{name: a, output: 1, input: 1}]
checks: [{id: pol, kind: polarity, expected: positive}]
";

#[test]
fn good_plan_loads() {
    // The base of the single-fault tests below must itself be valid.
    assert!(load_plan_str(GOOD, Path::new("t.yaml")).is_ok());
}

#[test]
fn every_problem_of_a_bad_plan_is_reported_in_order() {
    let f = "tests/data/plans/bad-many.yaml";
    let expected = [
        "3:11: revision: expected a whole number from 1 to 4294967295, found 0",
        "6:3: stimulus: missing required key `duration_s`",
        "7:12: stimulus.stop_hz: expected a frequency below the Nyquist frequency 24000 Hz \
         (half of sample_rate_hz 48000), found 30000",
        "8:3: stimulus: unknown key `duraton_s`, did you mean `duration_s`?",
        "9:15: stimulus.level_dbfs: expected a number, found `loud`",
        "12:3: analysis: unknown key `max_harmonics`, did you mean `max_harmonic`?",
        "15:37: channel right: input: expected an input of its own, found input 1 already used \
         by channel left",
        "19:35: check fr: upper: expected frequencies in strictly ascending order, found 1000 Hz \
         after 2000 Hz (line 19)",
        "20:12: check fr: order: not allowed in a response check (it belongs to harmonic \
         checks); a response check takes id, kind, channels, upper, lower, smoothing, normalize",
        "21:6: check thd: missing required key `max_percent`",
        "22:19: check x: kind: expected one of response, sensitivity, thd, harmonic, rub_buzz, \
         polarity, balance, listening, found `rubbuzz`, did you mean `rub_buzz`?",
        "23:47: check bal: channels: expected a channel of the plan (left, right), found \
         `rihgt`, did you mean `right`?",
    ]
    .map(|s| format!("{f}:{s}"));
    assert_eq!(problems(f), expected);
}

#[test]
fn csv_problems_point_into_the_csv() {
    let expected = [
        "tests/data/plans/bad-csv.yaml:11:12: check fr: lower: cannot read limit file \
         tests/data/plans/limits/no-such-file.csv: file not found",
        // Line 4 `1000,ten`: the level field starts at column 6.
        "tests/data/plans/limits/bad-upper.csv:4:6: check fr: upper: expected a level in dB, \
         found `ten`",
        // Line 6 ` 10,10` follows 500 Hz (line 5); its field starts after one blank.
        "tests/data/plans/limits/bad-upper.csv:6:2: check fr: upper: expected frequencies in \
         strictly ascending order, found 10 Hz after 500 Hz (line 5)",
        "tests/data/plans/limits/bad-upper.csv:6:2: check fr: upper: expected a frequency \
         inside the sweep, 20 to 20000 Hz, found 10",
        "tests/data/plans/limits/bad-upper.csv:7:1: check fr: upper: expected 2 columns \
         (hz,db), found 3 columns",
    ];
    assert_eq!(problems("tests/data/plans/bad-csv.yaml"), expected);
}

/// L of the synchronized sweep straight from Novak, Simon & Lotton (JAES 2015, eq. 12):
/// L = round(f1·T̂/ln(f2/f1))/f1.
fn novak_l(f1: f64, f2: f64, t: f64) -> f64 {
    (f1 * t / (f2 / f1).ln()).round() / f1
}

#[test]
fn harmonic_separation_message_gives_gap_largest_order_and_duration() {
    let (f1, f2, t, n) = (500.0, 20000.0, 0.1, 10usize);
    let l = novak_l(f1, f2, t);
    // Harmonic n's impulse response lies L·ln n before the linear one (Novak et al. 2015),
    // so neighbours n−1 and n lie L·ln(n/(n−1)) apart.
    let gap = |l: f64, n: usize| l * (n as f64 / (n as f64 - 1.0)).ln();
    let limit = tragus::plan::validate::MIN_HARMONIC_SEPARATION_S;
    let largest = (2..=n).filter(|&m| gap(l, m) >= limit).max().unwrap();
    // Shortest requested duration, in whole milliseconds, whose L separates harmonic n.
    let needed_ms = (100..60_000)
        .find(|&ms| gap(novak_l(f1, f2, ms as f64 / 1000.0), n) >= limit)
        .unwrap();
    assert_eq!((largest, needed_ms), (7, 137)); // worked by hand: L = 14/500 s
    let expected = format!(
        "tests/data/plans/bad-separation.yaml:6:26: analysis.max_harmonic: harmonics 9 and 10 \
         lie {:.1} ms apart in this sweep (L·ln(10/9) with L = {l:.4} s), at least 4 ms is \
         needed to separate them; use max_harmonic {largest} or less, or a duration_s of at \
         least {} s",
        gap(l, n) * 1e3,
        needed_ms as f64 / 1000.0
    );
    assert_eq!(problems("tests/data/plans/bad-separation.yaml"), [expected]);
}

#[test]
fn default_max_harmonic_too_high_for_the_sweep_points_at_the_duration() {
    // The default max_harmonic 5 needs L ≥ 4 ms / ln(5/4) = 17.9 ms. With f1 = 60 Hz,
    // f2 = 20 kHz, T̂ = 0.1 s: f1·T̂/ln(f2/f1) = 6/5.81 = 1.03, so k = 1 and L = 1/60 s =
    // 16.7 ms (Novak et al. 2015, eq. 12): too short.
    let text = GOOD
        .replace("start_hz: 20,", "start_hz: 60,")
        .replace("duration_s: 1,", "duration_s: 0.1,");
    let l = novak_l(60.0, 20000.0, 0.1);
    assert!((l - 1.0 / 60.0).abs() < 1e-12); // 1e-12: rounding of 1/60 only
    let p = problems_str(&text);
    assert_eq!(p.len(), 1, "{p:?}");
    assert!(
        p[0].starts_with(&format!(
            "t.yaml:{}: stimulus.duration_s: with the default max_harmonic 5, harmonics 4 \
             and 5 lie {:.1} ms apart",
            at(&text, 4, "0.1"),
            l * (5f64 / 4.0).ln() * 1e3
        )),
        "{}",
        p[0]
    );
    assert!(p[0].contains("use max_harmonic 4 or less"), "{}", p[0]);
}

#[test]
fn nyquist_is_half_the_sample_rate() {
    // 22 kHz is above Nyquist at 44.1 kHz (22.05 kHz is the limit, stop must be below it).
    let text = GOOD
        .replace("sample_rate_hz: 48000", "sample_rate_hz: 44100")
        .replace("stop_hz: 20000", "stop_hz: 22050");
    assert_eq!(
        problems_str(&text),
        [format!(
            "t.yaml:{}: stimulus.stop_hz: expected a frequency below the Nyquist frequency \
             22050 Hz (half of sample_rate_hz 44100), found 22050",
            at(&text, 4, "22050")
        )]
    );
    let ok = text.replace("stop_hz: 22050", "stop_hz: 22000");
    assert!(load_plan_str(&ok, Path::new("t.yaml")).is_ok());
}

#[test]
fn unknown_top_level_key_suggests_the_nearest() {
    let text = GOOD.replace("checks:", "chekcs:");
    assert_eq!(
        problems_str(&text),
        [
            "t.yaml:1:1: missing required key `checks`",
            "t.yaml:6:1: unknown key `chekcs`, did you mean `checks`?",
        ]
    );
    // Far from every key: the message lists what is expected instead.
    let text = format!("{GOOD}zzz: 1\n");
    assert_eq!(
        problems_str(&text),
        [
            "t.yaml:7:1: unknown key `zzz`, expected one of plan, revision, description, \
          sample_rate_hz, nominal_impedance_ohm, level_unit, stimulus, analysis, channels, rig, product, checks, \
          correction, max_retests"
        ]
    );
}

#[test]
fn limit_lines_must_ascend_and_stay_in_the_sweep() {
    let text = GOOD.replace(
        "checks: [{id: pol, kind: polarity, expected: positive}]",
        "checks:\n  - id: fr\n    kind: response\n    lower: [[20, -1], [20, -1], [30000, -1]]\n",
    );
    assert_eq!(
        problems_str(&text),
        [
            format!(
                "t.yaml:{}: check fr: lower: expected frequencies in strictly ascending order, \
                 found 20 Hz after 20 Hz (line 9)",
                at(&text, 9, "[20, -1], [30000")
            ),
            format!(
                "t.yaml:{}: check fr: lower: expected a frequency inside the sweep, 20 to 20000 \
                 Hz, found 30000",
                at(&text, 9, "[30000")
            ),
        ]
    );
    let one = text.replace("[[20, -1], [20, -1], [30000, -1]]", "[[20, -1]]");
    assert_eq!(
        problems_str(&one),
        ["t.yaml:9:12: check fr: lower: expected at least 2 points, found 1"]
    );
}

#[test]
fn yaml_syntax_errors_have_a_position() {
    let text = GOOD.replace("revision: 1", "revision: [1");
    let p = problems_str(&text);
    assert_eq!(p.len(), 1);
    assert!(p[0].starts_with("t.yaml:3:"), "{}", p[0]);
    assert!(p[0].contains("invalid YAML"), "{}", p[0]);
    let dup = format!("{GOOD}plan: q\n");
    assert_eq!(
        problems_str(&dup),
        ["t.yaml:7:1: duplicate key `plan`, first given at line 1 column 1"]
    );
}

#[test]
fn shape_errors() {
    assert_eq!(
        problems_str("- a\n- b\n"),
        ["t.yaml:1:1: expected a mapping of plan keys at the top level, found a list"]
    );
    let empty = problems_str("");
    assert_eq!(
        empty,
        [
            "plan",
            "revision",
            "sample_rate_hz",
            "stimulus",
            "channels",
            "checks"
        ]
        .map(|k| format!("t.yaml:1:1: missing required key `{k}`"))
    );
    let text = GOOD.replace(
        "channels: [{name: a, output: 1, input: 1}]",
        "channels: {name: a}",
    );
    assert_eq!(
        problems_str(&text),
        ["t.yaml:5:11: channels: expected a list of channels, found a mapping"]
    );
}

#[test]
fn kind_specific_rules() {
    let checks = "checks:
  - {id: s, kind: sensitivity, band_hz: [2000, 500], min_db: -8, max_db: -20}
  - {id: h, kind: harmonic, order: 9, band_hz: [100, 5000], max_db: -40}
  - {id: b, kind: balance, band_hz: [200, 5000], max_diff_db: 2}
  - {id: r, kind: response, smoothing: 1/6}
  - {id: n, kind: response, upper: [[20, 1], [20000, 1]], normalize: {at_hz: 10, band_hz: [1, 2]}}
";
    let text = GOOD.replace(
        "checks: [{id: pol, kind: polarity, expected: positive}]\n",
        checks,
    );
    let expected = [
        // At the band value.
        (
            at(&text, 7, "[2000"),
            "check s: band_hz: expected low_hz below high_hz, found [2000, 500]",
        ),
        (
            at(&text, 7, "-20}"),
            "check s: max_db: expected at least min_db -8 dB, found -20",
        ),
        (
            at(&text, 8, "9,"),
            "check h: order: expected a harmonic order from 2 to max_harmonic 5, found 9",
        ),
        // With no `channels:` to point at, at the kind that needs two.
        (
            at(&text, 9, "balance"),
            "check b: a balance check compares exactly two channels, found 1 in the plan; name \
             two with `channels: [a, b]`",
        ),
        // A missing key is reported at the mapping (its first key).
        (
            at(&text, 10, "id"),
            "check r: expected at least one of `upper` or `lower`, found neither",
        ),
        (
            at(&text, 11, "{at_hz"),
            "check n: normalize: expected exactly one of `at_hz` or `band_hz`, found both",
        ),
    ]
    .map(|(pos, msg)| format!("t.yaml:{pos}: {msg}"));
    assert_eq!(problems_str(&text), expected);
}

#[test]
fn non_utf8_file_is_located() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bin.yaml");
    std::fs::write(&path, b"plan: p\nrevision: \xff\n").unwrap();
    match load_plan(&path) {
        Err(PlanError::Invalid(p)) => assert_eq!(
            p[0].to_string(),
            format!(
                "{}:2:11: expected UTF-8 text, found byte 0xff",
                path.display()
            )
        ),
        other => panic!("{other:?}"),
    }
}

#[test]
fn missing_file_is_an_io_error() {
    let e = load_plan(Path::new("tests/data/plans/no-such-plan.yaml")).unwrap_err();
    assert!(matches!(e, PlanError::Io { .. }), "{e}");
    assert!(e
        .to_string()
        .starts_with("tests/data/plans/no-such-plan.yaml: cannot read plan"));
}
