//! Reports: the human-readable account of one unit result.
//!
//! The last stage of the data flow: the CLI hands a finished [`UnitResult`] (after the
//! checks, before or after the store) to [`render_human`] and prints the text. The layout
//! is made for a station screen read from a step away: a header (serial, plan, time, rig),
//! the unit verdict as a large block word and as a plain word, the reasons for a retest in
//! words, an aligned table of the checks, and an aligned table of the channels.
//!
//! The verdict is always written as a word; colour (ANSI escapes) only adds to it and is
//! off when `color` is false, so a log or a colour-blind reader loses nothing.

pub mod audit;
pub mod export;
pub mod svg;

use crate::checks::format_hz;
use crate::result::UnitResult;
use crate::Verdict;

/// Shown in a table cell that has no value.
const NONE_CELL: &str = "—";

/// Render `result` for a terminal; `color` adds ANSI colour to the verdicts.
pub fn render_human(result: &UnitResult, color: bool) -> String {
    let mut out = String::new();
    let paint = |v: Verdict, s: &str| paint(color, v, s);

    // Header.
    out.push_str(&format!(
        "{} {} · unit result\n",
        result.tool.name, result.tool.version
    ));
    let serial = if result.serial.is_empty() {
        "(none)"
    } else {
        result.serial.as_str()
    };
    let sha_short: String = result.plan.sha256.chars().take(12).collect();
    let rig = match &result.simulated_unit {
        Some(u) => format!("{} ({u})", result.rig),
        None => result.rig.clone(),
    };
    let header = [
        ("serial", serial.to_string()),
        (
            "plan",
            format!(
                "{} rev {} · sha256 {sha_short}…",
                result.plan.id, result.plan.revision
            ),
        ),
        ("time", result.time_utc.clone()),
        ("rig", rig),
        ("calib.", calibration_line(&result.calibration)),
    ];
    for (k, v) in header {
        out.push_str(&format!("  {k:<8}{v}\n"));
    }
    out.push('\n');

    // The verdict, large and plain.
    for line in block_word(result.verdict.word()) {
        out.push_str("  ");
        out.push_str(&paint(result.verdict, &line));
        out.push('\n');
    }
    out.push('\n');
    out.push_str(&format!(
        "  verdict: {} · {}\n",
        paint(result.verdict, result.verdict.word()),
        summary(result)
    ));

    // Retest reasons in words.
    let reasons = retest_reasons(result);
    if !reasons.is_empty() {
        out.push_str("\nretest reasons\n");
        for r in reasons {
            out.push_str(&format!("  - {r}\n"));
        }
    }

    // Checks.
    out.push_str("\nchecks\n");
    if result.checks.is_empty() {
        out.push_str(if result.channels.is_empty() && result.safety.is_some() {
            "  (none judged: the sweep was not played)\n"
        } else {
            "  (the plan has no checks)\n"
        });
    } else {
        let mut t = Table::new(&[
            ("check", Align::Left),
            ("kind", Align::Left),
            ("channel", Align::Left),
            ("verdict", Align::Left),
            ("margin dB", Align::Right),
            ("at", Align::Right),
            ("detail", Align::Left),
        ]);
        for c in &result.checks {
            // A check not judged because its channel's measurement is not valid would only
            // repeat that channel's reasons, which the retest reasons above already give.
            let detail = match echoed_channel(result, c) {
                Some(ch) => format!("not judged: measurement of {ch} not valid (retest reasons)"),
                None => c.detail.clone(),
            };
            t.row(vec![
                Cell::plain(&c.id),
                Cell::plain(&c.kind),
                Cell::plain(&c.channel),
                Cell::verdict(c.verdict),
                Cell::plain(&format_margin(c.worst_margin_db)),
                Cell::plain(&c.at_hz.map_or(NONE_CELL.to_string(), format_hz)),
                Cell::plain(&detail),
            ]);
        }
        t.render(&mut out, color);
    }

    // Channels.
    out.push_str("\nchannels\n");
    if result.channels.is_empty() {
        out.push_str("  (no channel measured)\n");
    } else {
        let mut t = Table::new(&[
            ("channel", Align::Left),
            ("latency", Align::Right),
            ("polarity", Align::Left),
            ("SNR", Align::Right),
            ("peak", Align::Right),
            ("measurement", Align::Left),
        ]);
        for m in &result.channels {
            let polarity = match m.polarity {
                crate::plan::Polarity::Positive => "positive",
                crate::plan::Polarity::Negative => "negative",
            };
            let state = if m.is_valid() {
                Cell::plain("valid")
            } else {
                Cell {
                    text: "not valid".into(),
                    verdict: Some(Verdict::Retest),
                }
            };
            t.row(vec![
                Cell::plain(&m.name),
                Cell::plain(&format!("{} samples", m.latency_samples)),
                Cell::plain(polarity),
                Cell::plain(&format!("{:.1} dB", m.snr_db)),
                Cell::plain(&format!("{:.1} dBFS", m.peak_dbfs)),
                state,
            ]);
        }
        t.render(&mut out, color);
    }

    // Corrections: one line per channel when any channel was corrected.
    if result.channels.iter().any(|m| m.correction.is_some()) {
        out.push_str("\ncorrection (fixture → reference the limits are written for)\n");
        for m in &result.channels {
            let line = match &m.correction {
                Some(c) => format!(
                    "{} ({}) → {} ({}), {} source, sha256 {}…",
                    c.fixture.id,
                    c.fixture.tap,
                    c.reference.id,
                    c.reference.tap,
                    c.source,
                    c.sha256.chars().take(12).collect::<String>()
                ),
                None => "none (as measured in the fixture)".to_string(),
            };
            out.push_str(&format!("  {:<8}{line}\n", m.name));
        }
    }
    if let Some(s) = &result.safety {
        out.push_str(&safety_block(
            s,
            !result.channels.is_empty(),
            &safety_notes(result),
        ));
    }
    out
}

/// The hearing-safety block: where the gains came from, the closest cap of the plan-time
/// budget, the pilot's reading per channel, whether the sweep played (`swept`: the unit has
/// measurements) and the `notes` ([`safety_notes`]) in words.
fn safety_block(s: &crate::safety::setup::UnitSafety, swept: bool, notes: &[&str]) -> String {
    let mut out = String::from("\nhearing safety\n");
    out.push_str(&format!("  gains   {}\n", s.gains_source));
    if let Some(item) = s
        .budget
        .items
        .iter()
        .max_by(|a, b| a.excess_db().total_cmp(&b.excess_db()))
    {
        out.push_str(&format!(
            "  budget  closest cap: {} ({:.1} dB under it)\n",
            item.describe(),
            -item.excess_db()
        ));
    }
    if let Some(p) = &s.pilot {
        for c in &p.channels {
            let level = match (c.spl_db, c.sensitivity_db_spl_per_v) {
                (Some(l), Some(sv)) => {
                    format!("{l:.1} dB SPL at the microphone ({sv:.1} dB SPL/V)")
                }
                (Some(l), None) => format!("{l:.1} dB SPL at the microphone"),
                _ => format!("{:.1} dBFS", c.reading.level_dbfs),
            };
            out.push_str(&format!(
                "  pilot   {:<8}{} Hz at {:.0} dBFS: {level}, SNR {:.0} dB\n",
                c.channel, p.spec.freq_hz, p.spec.level_dbfs, c.reading.snr_db
            ));
        }
        for m in &p.monitors {
            let gain = match (m.measured_v_peak_per_fs, m.calibrated_v_peak_per_fs) {
                (Some(v), Some(cal)) => format!(
                    "{v:.4} V peak/FS, calibrated {cal:.4} ({:+.1} dB)",
                    20.0 * (v / cal).log10()
                ),
                (Some(v), None) => format!("{v:.4} V peak/FS"),
                _ => format!("{:.1} dBFS at the input", m.reading.level_dbfs),
            };
            out.push_str(&format!(
                "  drive   output {} (monitor input {}): {gain}, SNR {:.0} dB\n",
                m.output + 1,
                m.input + 1,
                m.reading.snr_db
            ));
        }
    }
    out.push_str(&format!(
        "  sweep   {}\n",
        if !swept {
            "not played".to_string()
        } else if s.sweep_gain_db < 0.0 {
            format!("scaled down by {:.1} dB", -s.sweep_gain_db)
        } else {
            "as planned".to_string()
        }
    ));
    for e in notes {
        out.push_str(&format!("  note    {e}\n"));
    }
    out
}

/// The hearing-safety events a reader has not already been given as a retest reason (an
/// abandoned sweep is both; a guard trip is also every channel's rig fault), so each is
/// said once.
fn safety_notes(result: &UnitResult) -> Vec<&str> {
    let reasons = retest_reasons(result);
    result
        .safety
        .iter()
        .flat_map(|s| &s.events)
        .map(String::as_str)
        .filter(|e| !reasons.iter().any(|r| r.contains(e)))
        .collect()
}

/// The invalid channel a retest check only echoes (its verdict comes from that channel's
/// measurement, whose reasons are listed on their own), if any.
fn echoed_channel<'a>(result: &UnitResult, c: &'a crate::checks::CheckResult) -> Option<&'a str> {
    if c.verdict != Verdict::Retest {
        return None;
    }
    c.channel.split('/').find(|ch| {
        result
            .channels
            .iter()
            .any(|m| m.name == *ch && !m.is_valid())
    })
}

/// One line after the verdict word: how many checks failed or could not be judged.
fn summary(result: &UnitResult) -> String {
    let n = result.checks.len();
    let count = |v: Verdict| result.checks.iter().filter(|c| c.verdict == v).count();
    let (n_fail, n_retest) = (count(Verdict::Fail), count(Verdict::Retest));
    match result.verdict {
        Verdict::Pass => format!("all {n} checks passed"),
        Verdict::Fail => format!("{n_fail} of {n} checks failed"),
        Verdict::Retest if n_retest > 0 => {
            format!("{n_retest} of {n} checks not judged; test the unit again")
        }
        Verdict::Retest => "measurement not valid; test the unit again".to_string(),
    }
}

/// The calibration header line: mode, and the file's hash and due date when one was applied.
fn calibration_line(c: &crate::result::CalibrationInfo) -> String {
    match (&c.sha256, &c.due_date) {
        (Some(sha), Some(due)) => format!(
            "{} · sha256 {}… · due {due} · dB SPL/V",
            c.mode,
            sha.chars().take(12).collect::<String>()
        ),
        _ => format!("{} · dB FS/FS", c.mode),
    }
}

/// Every reason for a retest in words, each once: the unit's, each invalid channel's (the
/// unit's list usually holds them already, as `channel: reason`), and each check that could
/// not be judged (without the checks that only echo an invalid channel).
fn retest_reasons(result: &UnitResult) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    let mut add = |r: String| {
        if !out.contains(&r) {
            out.push(r);
        }
    };
    for r in &result.retest_reasons {
        add(r.clone());
    }
    for m in &result.channels {
        for r in &m.retest_reasons {
            add(format!("{}: {r}", m.name));
        }
    }
    for c in result
        .checks
        .iter()
        .filter(|c| c.verdict == Verdict::Retest)
    {
        if echoed_channel(result, c).is_none() {
            add(format!("check {} on {}: {}", c.id, c.channel, c.detail));
        }
    }
    out
}

/// The operator's view of one unit, read from a step away: the verdict in block letters
/// and as a word, the reasons for a retest, the hearing-safety notes not among them (a
/// scaled-down sweep), and one line per failed check with its worst margin (negative:
/// outside the limit) and where it is. `color` adds ANSI colour.
pub fn render_operator(result: &UnitResult, color: bool) -> String {
    let mut out = String::new();
    out.push_str(&format!("unit {}\n", result.serial));
    for line in block_word(result.verdict.word()) {
        out.push_str("  ");
        out.push_str(&paint(color, result.verdict, &line));
        out.push('\n');
    }
    out.push_str(&format!(
        "  {} · {}\n",
        paint(color, result.verdict, result.verdict.word()),
        summary(result)
    ));
    for r in retest_reasons(result) {
        out.push_str(&format!("  retest: {r}\n"));
    }
    // The operator reads this screen, not the log: a scaled-down sweep belongs here.
    for e in safety_notes(result) {
        out.push_str(&format!("  note: {e}\n"));
    }
    for c in result.checks.iter().filter(|c| c.verdict != Verdict::Pass) {
        let at = c
            .at_hz
            .map(|f| format!(" at {}", format_hz(f)))
            .unwrap_or_default();
        out.push_str(&format!(
            "  {} {} on {}: margin {} dB{at}\n",
            paint(color, c.verdict, c.verdict.word()),
            c.id,
            c.channel,
            format_margin(c.worst_margin_db)
        ));
    }
    out
}

/// A margin for the table: two decimals, or a dash when there is none.
fn format_margin(margin_db: Option<f64>) -> String {
    match margin_db {
        Some(v) => format!("{v:.2}"),
        None => NONE_CELL.to_string(),
    }
}

/// Wrap `s` in the verdict's ANSI colour when `color` is on.
fn paint(color: bool, v: Verdict, s: &str) -> String {
    if !color {
        return s.to_string();
    }
    // SGR codes (ECMA-48): 1 bold; 32 green, 31 red, 33 yellow; 0 reset.
    let code = match v {
        Verdict::Pass => "1;32",
        Verdict::Fail => "1;31",
        Verdict::Retest => "1;33",
    };
    format!("\x1b[{code}m{s}\x1b[0m")
}

/// The verdict word in 5-row block letters (`#`), for reading from a distance.
fn block_word(word: &str) -> Vec<String> {
    let glyph = |c: char| -> [&'static str; 5] {
        match c {
            'A' => [" ### ", "#   #", "#####", "#   #", "#   #"],
            'E' => ["#####", "#    ", "#### ", "#    ", "#####"],
            'F' => ["#####", "#    ", "#### ", "#    ", "#    "],
            'I' => ["#####", "  #  ", "  #  ", "  #  ", "#####"],
            'L' => ["#    ", "#    ", "#    ", "#    ", "#####"],
            'P' => ["#### ", "#   #", "#### ", "#    ", "#    "],
            'R' => ["#### ", "#   #", "#### ", "#  # ", "#   #"],
            'S' => [" ####", "#    ", " ### ", "    #", "#### "],
            'T' => ["#####", "  #  ", "  #  ", "  #  ", "  #  "],
            _ => ["     ", "     ", "     ", "     ", "     "],
        }
    };
    (0..5)
        .map(|row| {
            let line: Vec<&str> = word.chars().map(|c| glyph(c)[row]).collect();
            line.join("  ").trim_end().to_string()
        })
        .collect()
}

#[derive(Clone, Copy)]
enum Align {
    Left,
    Right,
}

struct Cell {
    text: String,
    /// Coloured as this verdict when colour is on.
    verdict: Option<Verdict>,
}

impl Cell {
    fn plain(s: &str) -> Cell {
        Cell {
            text: s.to_string(),
            verdict: None,
        }
    }

    fn verdict(v: Verdict) -> Cell {
        Cell {
            text: v.word().to_string(),
            verdict: Some(v),
        }
    }
}

/// A text table: columns padded to their widest cell (in characters, so `—` counts as
/// one), two spaces apart; the last column is not padded. Colour is applied after
/// padding so escapes never shift a column.
struct Table {
    headers: Vec<(&'static str, Align)>,
    rows: Vec<Vec<Cell>>,
}

impl Table {
    fn new(headers: &[(&'static str, Align)]) -> Table {
        Table {
            headers: headers.to_vec(),
            rows: Vec::new(),
        }
    }

    fn row(&mut self, cells: Vec<Cell>) {
        debug_assert_eq!(cells.len(), self.headers.len());
        self.rows.push(cells);
    }

    fn render(&self, out: &mut String, color: bool) {
        let width = |s: &str| s.chars().count();
        let widths: Vec<usize> = (0..self.headers.len())
            .map(|j| {
                self.rows
                    .iter()
                    .map(|r| width(&r[j].text))
                    .chain([width(self.headers[j].0)])
                    .max()
                    .unwrap_or(0)
            })
            .collect();
        let last = self.headers.len() - 1;
        let pad = |j: usize, s: &str| -> String {
            if j == last && matches!(self.headers[j].1, Align::Left) {
                return s.to_string();
            }
            let fill = " ".repeat(widths[j] - width(s));
            match self.headers[j].1 {
                Align::Left => format!("{s}{fill}"),
                Align::Right => format!("{fill}{s}"),
            }
        };
        let headers: Vec<String> = self
            .headers
            .iter()
            .enumerate()
            .map(|(j, (h, _))| pad(j, h))
            .collect();
        out.push_str("  ");
        out.push_str(headers.join("  ").trim_end());
        out.push('\n');
        for r in &self.rows {
            let cells: Vec<String> = r
                .iter()
                .enumerate()
                .map(|(j, c)| {
                    let padded = pad(j, &c.text);
                    match c.verdict {
                        Some(v) => paint(color, v, &padded),
                        None => padded,
                    }
                })
                .collect();
            out.push_str("  ");
            out.push_str(cells.join("  ").trim_end());
            out.push('\n');
        }
    }
}
