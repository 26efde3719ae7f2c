//! Plans that cannot be wrong in obvious ways: limits no unit can meet are refused, limits
//! far outside anything the declared product could produce are warned about (not refused).
//!
//! Each test breaks one thing in an otherwise valid plan and reads the message the user
//! reads, with its `path:line:col`. Positions are those of the offending value in the text
//! (1-based line, column in characters, found with `at` below); levels in the messages are
//! worked by hand from the values written, with the rules in docs/engineer/validate.md.

use crate::support::common::{root, tragus};
use std::path::Path;
use tragus::plan::{load_plan, load_plan_checked, load_plan_str, PlanError};

fn problems_of(r: Result<tragus::plan::Plan, PlanError>) -> Vec<String> {
    match r {
        Ok(_) => panic!("the plan should not load"),
        Err(PlanError::Invalid(p)) => p.iter().map(ToString::to_string).collect(),
        Err(e) => panic!("unexpected error {e}"),
    }
}

fn problems(text: &str) -> Vec<String> {
    problems_of(load_plan_str(text, Path::new("t.yaml")))
}

/// Warnings of a plan that must load (`path:line:col: message`).
fn warnings(dir: &Path, text: &str) -> Vec<String> {
    let path = dir.join("p.yaml");
    std::fs::write(&path, text).unwrap();
    match load_plan_checked(&path) {
        Ok(c) => c.warnings.iter().map(ToString::to_string).collect(),
        Err(e) => panic!("the plan should load: {e}"),
    }
}

/// `line:col` of the first `needle` on 1-based `line` of `text` (columns count characters).
fn at(text: &str, line: usize, needle: &str) -> String {
    let l = text.lines().nth(line - 1).unwrap();
    let byte = l
        .find(needle)
        .unwrap_or_else(|| panic!("`{needle}` on line {line}"));
    format!("{line}:{}", l[..byte].chars().count() + 1)
}

/// A valid plan; `CHECK` is replaced by the check under test (line 9).
const BASE: &str = "\
plan: p
revision: 1
sample_rate_hz: 48000
stimulus: {start_hz: 20, stop_hz: 20000, duration_s: 1, level_dbfs: -20}
channels: [{name: a, output: 1, input: 1}]
level_unit: db_spl_per_v
product: {sensitivity_db: 100, sensitivity_unit: db_spl_per_v, tolerance_db: 2, response_peak_db: 8}
checks:
  - CHECK
";

fn plan(check: &str) -> String {
    BASE.replace("CHECK", check)
}

#[test]
fn the_base_plan_loads_without_warnings() {
    let dir = tempfile::tempdir().unwrap();
    let text = plan("{id: s, kind: sensitivity, band_hz: [500, 2000], min_db: 95, max_db: 105}");
    assert_eq!(warnings(dir.path(), &text), Vec::<String>::new());
}

// --- refusals --------------------------------------------------------------------------

#[test]
fn crossed_inline_limit_lines_are_refused_at_the_worst_point() {
    // Lower line: 0 dB at 100 Hz to 10 dB at 10 kHz, straight in dB against lg f, so 5 dB at
    // 1 kHz (the geometric mean). The upper line's 1 kHz point, 4 dB, lies 1 dB below it;
    // its other points lie above the lower line.
    let text = plan(
        "{id: fr, kind: response, upper: [[100, 6], [1000, 4], [10000, 12]], \
         lower: [[100, 0], [10000, 10]]}",
    );
    let p = problems(&text);
    assert_eq!(
        p,
        [format!(
            "t.yaml:{}: check fr: expected the upper limit line at or above the lower one \
             wherever both are defined, found it 1 dB below at 1000 Hz (upper 4 dB, lower 5 dB, \
             each read straight in dB against log frequency between its points, as the check \
             reads it): no unit can pass there",
            at(&text, 9, "[1000, 4]")
        )]
    );
}

#[test]
fn crossed_csv_limit_lines_are_refused_at_the_csv_line_naming_the_plan_position() {
    let dir = tempfile::tempdir().unwrap();
    // The upper line dips to -3 dB at 2 kHz (line 4 of its CSV, after a header and a
    // comment); the lower line is -1 dB flat: 2 dB crossed there, nowhere else.
    std::fs::write(
        dir.path().join("up.csv"),
        "hz,db\n# upper\n20,3\n2000,-3\n20000,3\n",
    )
    .unwrap();
    std::fs::write(dir.path().join("lo.csv"), "20,-1\n20000,-1\n").unwrap();
    let text = plan("{id: fr, kind: response, upper: up.csv, lower: lo.csv}");
    let path = dir.path().join("p.yaml");
    std::fs::write(&path, &text).unwrap();
    let up = dir.path().join("up.csv").display().to_string();
    assert_eq!(
        problems_of(load_plan(&path)),
        [format!(
            "{up}:4:1: check fr: expected the upper limit line at or above the lower one \
             wherever both are defined, found it 2 dB below at 2000 Hz (upper -3 dB, lower -1 \
             dB, each read straight in dB against log frequency between its points, as the \
             check reads it): no unit can pass there; {up} is named at {}:{}",
            path.display(),
            at(&text, 9, "up.csv")
        )]
    );
}

#[test]
fn thd_limit_above_100_percent_is_refused() {
    let text = plan("{id: thd, kind: thd, band_hz: [100, 2000], max_percent: 300}");
    assert_eq!(
        problems(&text),
        [format!(
            "t.yaml:{}: check thd: max_percent: expected a limit above 0 % and at most 100 % of \
             the fundamental, found 300",
            at(&text, 9, "300")
        )]
    );
}

#[test]
fn thd_limit_of_0_percent_is_refused() {
    // The other end of (0, 100]: a limit of 0 % fails every unit.
    let text = plan("{id: thd, kind: thd, band_hz: [100, 2000], max_percent: 0}");
    assert_eq!(
        problems(&text),
        [format!(
            "t.yaml:{}: check thd: max_percent: expected a limit above 0 %, found 0",
            at(&text, 9, "0}")
        )]
    );
}

#[test]
fn harmonic_limit_above_0_db_re_fundamental_is_refused() {
    let text = plan("{id: hd3, kind: harmonic, order: 3, band_hz: [100, 2000], max_db: 6}");
    assert_eq!(
        problems(&text),
        [format!(
            "t.yaml:{}: check hd3: max_db: expected a limit at or below 0 dB re the fundamental \
             (a negative number: how far below the tone it must stay), found 6",
            at(&text, 9, "6}")
        )]
    );
}

#[test]
fn rub_and_buzz_limit_above_0_db_re_fundamental_is_refused() {
    let text = plan("{id: rb, kind: rub_buzz, band_hz: [100, 1500], max_db: 0.5}");
    assert_eq!(
        problems(&text),
        [format!(
            "t.yaml:{}: check rb: max_db: expected a limit at or below 0 dB re the fundamental \
             (a negative number: how far below the tone it must stay), found 0.5",
            at(&text, 9, "0.5")
        )]
    );
}

#[test]
fn sensitivity_window_with_min_above_max_is_refused() {
    let text = plan("{id: s, kind: sensitivity, band_hz: [500, 2000], min_db: 104, max_db: 96}");
    assert_eq!(
        problems(&text),
        [format!(
            "t.yaml:{}: check s: max_db: expected at least min_db 104 dB, found 96",
            at(&text, 9, "96")
        )]
    );
}

#[test]
fn reversed_band_is_refused() {
    let text = plan("{id: s, kind: sensitivity, band_hz: [2000, 500], min_db: 96, max_db: 104}");
    assert_eq!(
        problems(&text),
        [format!(
            "t.yaml:{}: check s: band_hz: expected low_hz below high_hz, found [2000, 500]",
            at(&text, 9, "[2000")
        )]
    );
}

#[test]
fn max_retests_out_of_range_is_refused() {
    let text = format!(
        "{}max_retests: -1\n",
        plan("{id: pol, kind: polarity, expected: positive}")
    );
    assert_eq!(
        problems(&text),
        ["t.yaml:10:14: max_retests: expected a whole number from 0 to 100, found -1"]
    );
}

// --- warnings --------------------------------------------------------------------------

// The product declares 100 dB SPL/V ± 2 dB with an 8 dB response peak: declared levels 90
// to 110 dB SPL/V; a warning needs a limit more than 20 dB outside them (below 70 or above
// 130 dB SPL/V).

#[test]
fn sensitivity_window_far_above_the_product_warns_that_every_unit_fails() {
    let dir = tempfile::tempdir().unwrap();
    // 138 − 110 = 28 dB above: a window in dB SPL/mW written as if per V, say.
    let text = plan("{id: s, kind: sensitivity, band_hz: [500, 2000], min_db: 138, max_db: 142}");
    let w = warnings(dir.path(), &text);
    let p = dir.path().join("p.yaml").display().to_string();
    let declared = "(90 to 110 dB SPL/V: sensitivity 100 ± 2 dB with a response peak of 8 dB), \
                    more than 20 dB outside them";
    assert_eq!(
        w,
        [
            format!(
                "{p}:{}: check s: min_db: 138 dB SPL/V lies 28 dB above the levels the product \
                 declares {declared}: every unit would fail it",
                at(&text, 9, "138")
            ),
            format!(
                "{p}:{}: check s: max_db: 142 dB SPL/V lies 32 dB above the levels the product \
                 declares {declared}: it would fail no unit",
                at(&text, 9, "142")
            ),
        ]
    );
}

#[test]
fn sensitivity_window_of_plus_minus_200_db_warns_at_both_limits() {
    let dir = tempfile::tempdir().unwrap();
    let text = plan("{id: s, kind: sensitivity, band_hz: [500, 2000], min_db: -200, max_db: 200}");
    let w = warnings(dir.path(), &text);
    assert_eq!(w.len(), 2, "{w:#?}");
    // -200 is 290 dB below 90; 200 is 90 dB above 110.
    assert!(
        w[0].contains(&format!(
            "{}: check s: min_db: -200 dB SPL/V lies 290 dB below",
            at(&text, 9, "-200")
        )) && w[0].ends_with("it would pass units far below their declaration"),
        "{}",
        w[0]
    );
    assert!(
        w[1].contains(&format!(
            "{}: check s: max_db: 200 dB SPL/V lies 90 dB above",
            at(&text, 9, "200}")
        )) && w[1].ends_with("it would fail no unit"),
        "{}",
        w[1]
    );
}

#[test]
fn sensitivity_in_db_spl_per_mw_is_compared_after_conversion() {
    let dir = tempfile::tempdir().unwrap();
    // 32 Ω: L(1 mW) = L(1 V) + 10·lg(0.032) = L(1 V) − 14.95 dB (IEC 60268-7 definition of
    // the per-milliwatt sensitivity; from memory), so the declared levels are 75.05 to
    // 95.05 dB SPL/mW and a max_db of 50 lies 25.05 dB below them.
    let text = format!(
        "nominal_impedance_ohm: 32\n{}",
        plan(
            "{id: s, kind: sensitivity, unit: db_spl_per_mw, band_hz: [500, 2000], min_db: 40, \
             max_db: 50}"
        )
    );
    let w = warnings(dir.path(), &text);
    assert_eq!(w.len(), 2, "{w:#?}");
    assert!(
        w[1].contains(&format!(
            "{}: check s: max_db: 50 dB SPL/mW lies 25.05 dB below the levels the product \
             declares (75.05 to 95.05 dB SPL/mW",
            at(&text, 10, "50}")
        )) && w[1].ends_with("every unit would fail it"),
        "{}",
        w[1]
    );
}

#[test]
fn response_line_far_above_the_product_warns_once_at_its_furthest_point() {
    let dir = tempfile::tempdir().unwrap();
    // A lower line in dB FS written into a dB SPL/V plan the other way round: 135 and
    // 140 dB SPL/V, 25 and 30 dB above 110; one warning, at 140 (line 3 of the CSV).
    std::fs::write(dir.path().join("lo.csv"), "hz,db\n100,135\n1000,140\n").unwrap();
    let text = plan("{id: fr, kind: response, lower: lo.csv}");
    let w = warnings(dir.path(), &text);
    let csv = dir.path().join("lo.csv").display().to_string();
    let p = dir.path().join("p.yaml").display().to_string();
    assert_eq!(
        w,
        [format!(
            "{csv}:3:1: check fr: lower: 140 dB SPL/V at 1000 Hz lies 30 dB above the levels \
             the product declares (90 to 110 dB SPL/V: sensitivity 100 ± 2 dB with a response \
             peak of 8 dB), more than 20 dB outside them: every unit would fail it; {csv} is \
             named at {p}:{}",
            at(&text, 9, "lo.csv")
        )]
    );
}

#[test]
fn response_line_below_the_product_does_not_warn() {
    // Roll-off: an upper line 40 dB under the declared levels at 20 kHz is a normal limit
    // for an earphone that falls off there.
    let dir = tempfile::tempdir().unwrap();
    let text = plan("{id: fr, kind: response, upper: [[20, 115], [10000, 115], [20000, 50]]}");
    assert_eq!(warnings(dir.path(), &text), Vec::<String>::new());
}

#[test]
fn digital_level_plans_are_not_compared_with_the_product() {
    // dB FS/FS levels depend on the bench's gains; the plan cannot convert them (no warning,
    // docs/engineer/validate.md says so).
    let dir = tempfile::tempdir().unwrap();
    let text = plan("{id: s, kind: sensitivity, band_hz: [500, 2000], min_db: 300, max_db: 400}")
        .replace("level_unit: db_spl_per_v", "level_unit: db_fs_per_fs");
    assert_eq!(warnings(dir.path(), &text), Vec::<String>::new());
}

#[test]
fn validate_prints_warnings_with_their_positions_and_exits_0() {
    let dir = tempfile::tempdir().unwrap();
    let text = plan("{id: s, kind: sensitivity, band_hz: [500, 2000], min_db: 138, max_db: 142}");
    let path = dir.path().join("p.yaml");
    std::fs::write(&path, &text).unwrap();
    let out = tragus().arg("validate").arg(&path).output().unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let stdout = String::from_utf8_lossy(&out.stdout);
    let lines: Vec<&str> = stdout.lines().collect();
    assert_eq!(lines.len(), 3, "{stdout}");
    let p = path.display().to_string();
    assert!(
        lines[0].starts_with(&format!(
            "{p}:{}: warning: check s: min_db: 138",
            at(&text, 9, "138")
        )),
        "{stdout}"
    );
    assert!(
        lines[2].starts_with(&format!("{p}: ok (plan p revision 1")),
        "{stdout}"
    );

    let out = tragus()
        .arg("validate")
        .arg(&path)
        .args(["--json", "-"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(j["valid"], true);
    let w = &j["files"][0]["warnings"];
    assert_eq!(w.as_array().map(Vec::len), Some(2), "{j}");
    assert_eq!(
        (w[0]["line"].as_u64(), w[0]["col"].as_u64()),
        (Some(9), Some(62))
    );
}

#[test]
fn shipped_plans_still_load_without_warnings() {
    for p in [
        "plans/demo-earbud.yaml",
        "plans/loopback.yaml",
        "plans/examples/corrected-2cc.yaml",
    ] {
        let c = load_plan_checked(&root().join(p)).unwrap_or_else(|e| panic!("{p}: {e}"));
        assert!(c.warnings.is_empty(), "{p}: {:#?}", c.warnings);
    }
}
