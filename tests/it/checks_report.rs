//! The human report: words, alignment and colour. Expected strings are written by hand
//! from the layout in `tragus::report` (brief "checks v1": verdict word always, colour
//! only when asked, aligned columns, margins to 2 decimals, "—" when none).

use crate::support::checks_fixture;

use checks_fixture::*;
use tragus::checks::CheckResult;
use tragus::report::render_human;
use tragus::result::{CalibrationInfo, PlanInfo, ToolInfo, UnitResult};
use tragus::Verdict;

fn result(verdict: Verdict, checks: Vec<CheckResult>) -> UnitResult {
    let p = plan(&["left", "right"], vec![]);
    UnitResult {
        tool: ToolInfo::default(),
        plan: PlanInfo::from(&p),
        serial: "E2-000123".into(),
        verdict,
        time_utc: "2025-03-04T05:06:07.089Z".into(),
        rig: "simulated".into(),
        simulated_unit: Some("nominal".into()),
        station: None,
        device_latency_samples: None,
        retest_reasons: vec![],
        channels: vec![
            measurement("left", &[0.0; 7]),
            measurement("right", &[0.0; 7]),
        ],
        checks,
        calibration: CalibrationInfo::uncalibrated(),
        safety: None,
        history: None,
    }
}

fn cr(
    id: &str,
    kind: &str,
    channel: &str,
    v: Verdict,
    m: Option<f64>,
    at: Option<f64>,
) -> CheckResult {
    CheckResult {
        id: id.into(),
        kind: kind.into(),
        channel: channel.into(),
        verdict: v,
        worst_margin_db: m,
        at_hz: at,
        detail: format!("{id} detail"),
    }
}

/// The lines of the table that follows the line `title`, header first.
fn table<'a>(text: &'a str, title: &str) -> Vec<&'a str> {
    text.lines()
        .skip_while(|l| *l != title)
        .skip(1)
        .take_while(|l| !l.is_empty())
        .collect()
}

/// Character (not byte) column of `needle` in `line`.
fn col(line: &str, needle: &str) -> usize {
    let b = line
        .find(needle)
        .unwrap_or_else(|| panic!("{needle:?} not in {line:?}"));
    line[..b].chars().count()
}

fn pass_result() -> UnitResult {
    result(
        Verdict::Pass,
        vec![
            cr(
                "fr",
                "response",
                "left",
                Verdict::Pass,
                Some(1.7),
                Some(2810.0),
            ),
            cr(
                "sens",
                "sensitivity",
                "right",
                Verdict::Pass,
                Some(12.345),
                None,
            ),
            cr("pol", "polarity", "left", Verdict::Pass, None, None),
            cr(
                "thd-low",
                "thd",
                "right",
                Verdict::Pass,
                Some(0.5),
                Some(125.0),
            ),
        ],
    )
}

#[test]
fn pass_report_has_words_header_and_aligned_columns() {
    let text = render_human(&pass_result(), false);
    assert!(!text.contains('\x1b'), "no ANSI without colour");
    assert!(text.contains("E2-000123"));
    assert!(text.contains("ember-e2-eol rev 3"));
    assert!(
        text.contains("verdict: PASS · all 4 checks passed"),
        "{text}"
    );
    // The block word: first row of P, A, S, S in 5-column glyphs two spaces apart.
    assert!(text.contains("####    ###    ####   ####"), "{text}");

    let t = table(&text, "checks");
    assert_eq!(t.len(), 5, "{t:?}");
    let header = t[0];
    for name in [
        "check",
        "kind",
        "channel",
        "verdict",
        "margin dB",
        "at",
        "detail",
    ] {
        assert!(header.contains(name), "{header}");
    }
    // Left-aligned columns start where their header starts; right-aligned ones end
    // where their header ends.
    let verdict_col = col(header, "verdict");
    let margin_end = col(header, "margin dB") + "margin dB".len();
    let at_end = col(header, "  at  ") + "  at".len();
    let detail_col = col(header, "detail");
    let rows = [
        ("1.70", "2.81 kHz", "fr detail"),
        ("12.35", "—", "sens detail"),
        ("—", "—", "pol detail"),
        ("0.50", "125 Hz", "thd-low detail"),
    ];
    for (line, (margin, at, detail)) in t[1..].iter().zip(rows) {
        assert_eq!(col(line, "PASS"), verdict_col, "{line}");
        let chars: Vec<char> = line.chars().collect();
        // The cell text that ends exactly at character column `end`.
        let ends_at = |end: usize, s: &str| {
            let n = s.chars().count();
            chars[end - n..end].iter().collect::<String>() == s && chars[end - n - 1] == ' '
        };
        assert!(ends_at(margin_end, margin), "margin {margin:?} in {line}");
        assert!(ends_at(at_end, at), "at {at:?} in {line}");
        assert_eq!(col(line, detail), detail_col, "{line}");
        assert!(line.ends_with(detail), "{line}");
    }

    let ch = table(&text, "channels");
    assert_eq!(ch.len(), 3, "{ch:?}");
    assert!(ch[1].contains("134 samples"), "{}", ch[1]);
    assert!(ch[1].contains("positive"));
    assert!(ch[1].contains("71.3 dB"));
    assert!(ch[1].contains("-9.8 dBFS"));
    assert!(ch[1].contains("valid"));
}

#[test]
fn fail_report_says_fail_and_colours_only_when_asked() {
    let r = result(
        Verdict::Fail,
        vec![
            cr(
                "fr",
                "response",
                "left",
                Verdict::Fail,
                Some(-3.0),
                Some(7943.28),
            ),
            cr(
                "fr",
                "response",
                "right",
                Verdict::Pass,
                Some(0.25),
                Some(100.0),
            ),
            cr(
                "bal",
                "balance",
                "left/right",
                Verdict::Pass,
                Some(0.5),
                Some(500.0),
            ),
        ],
    );
    let plain = render_human(&r, false);
    assert!(!plain.contains('\x1b'));
    assert!(
        plain.contains("verdict: FAIL · 1 of 3 checks failed"),
        "{plain}"
    );
    assert!(plain.contains("#####   ###   #####  #"), "{plain}");
    let t = table(&plain, "checks");
    assert!(t[1].contains("FAIL") && t[1].contains("-3.00") && t[1].contains("7.94 kHz"));
    assert!(t[3].contains("left/right"));
    assert_eq!(col(t[1], "FAIL"), col(t[0], "verdict"));
    assert_eq!(col(t[2], "PASS"), col(t[0], "verdict"));

    let coloured = render_human(&r, true);
    // ECMA-48 SGR: bold red around the verdict word.
    assert!(coloured.contains("\x1b[1;31mFAIL\x1b[0m"), "{coloured}");
    // Stripping the escapes gives back the plain text: colour adds, never replaces.
    let stripped = strip_ansi(&coloured);
    assert_eq!(stripped, plain);
}

#[test]
fn retest_report_gives_reasons_in_words() {
    let mut r = result(
        Verdict::Retest,
        vec![
            cr("fr", "response", "left", Verdict::Retest, None, None),
            cr("thd", "thd", "right", Verdict::Retest, None, None),
        ],
    );
    r.channels[0] = clipped(r.channels[0].clone());
    r.checks[1].detail = "not judged: THD not measured at any of the 7 points".into();
    r.retest_reasons.push("rig fault: 3 xruns".into());
    let text = render_human(&r, false);
    assert!(text.contains("verdict: RETEST"), "{text}");
    let reasons = table(&text, "retest reasons");
    assert_eq!(
        reasons,
        [
            "  - rig fault: 3 xruns",
            "  - left: clipping (17 samples at full scale)",
            "  - check thd on right: not judged: THD not measured at any of the 7 points",
        ]
    );
    let ch = table(&text, "channels");
    assert!(ch[1].ends_with("not valid"), "{}", ch[1]);
}

fn strip_ansi(s: &str) -> String {
    let mut out = String::new();
    let mut it = s.chars().peekable();
    while let Some(c) = it.next() {
        if c == '\x1b' {
            for d in it.by_ref() {
                if d == 'm' {
                    break;
                }
            }
        } else {
            out.push(c);
        }
    }
    out
}
