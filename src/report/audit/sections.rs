//! The store-wide sections of the audit report: identity and verification, counts and
//! yields, the Pareto of failing checks, the scalar checks' distributions, the response
//! overlays, the hearing-safety rows, and the footnotes.

use std::fmt::Write as _;

use super::curves::Overlay;
use super::html::{escape, num, pct, table_end, table_head, unit_anchor, verdict_badge};
use super::load::RecordView;
use super::plot::{histogram_svg, pareto_svg, PlotError};
use super::stats::{histogram, ParetoBar, Scalar, Tally};
use crate::store::{StoredExposure, StoredSafetyEvent, VerifyReport};

/// Most rows of the safety-event and exposure tables (the newest are kept).
pub const MAX_SAFETY_ROWS: usize = 2000;

/// Longest debug text of the verification report shown verbatim.
const MAX_VERIFY_DEBUG: usize = 20_000;

/// What the store section shows besides the verification report.
pub(crate) struct StoreFacts<'a> {
    pub dir: &'a str,
    pub db_file: &'a str,
    pub schema: i64,
    pub n_selected: usize,
    pub n_units: u64,
}

/// Identity of the store and the result of verifying it. Problems and notices are shown
/// through their `Display`, so kinds added to the store later show without a change here;
/// the full report, whatever fields it gains (signatures, checkpoints), is also shown as
/// read.
pub(crate) fn store_section(out: &mut String, facts: &StoreFacts<'_>, v: &VerifyReport) {
    out.push_str("<section class=\"block\" id=\"store\"><h2>Store and verification</h2>\n");
    table_head(out, "facts", &["", ""]);
    let rows: [(&str, String); 7] = [
        ("directory", format!("<code>{}</code>", escape(facts.dir))),
        (
            "database",
            format!("<code>{}</code>", escape(facts.db_file)),
        ),
        ("schema version", facts.schema.to_string()),
        ("records in the store", v.n_records.to_string()),
        (
            "records in this report",
            format!(
                "<span id=\"n-records\" data-value=\"{0}\">{0}</span>",
                facts.n_selected
            ),
        ),
        (
            "units in this report",
            format!(
                "<span id=\"n-units\" data-value=\"{0}\">{0}</span>",
                facts.n_units
            ),
        ),
        ("capture files rehashed", v.n_captures_checked.to_string()),
    ];
    for (k, val) in rows {
        let _ = writeln!(out, "<tr><th>{k}</th><td>{val}</td></tr>");
    }
    table_end(out);
    let (class, word) = if v.is_intact() {
        (
            "ok",
            "INTACT: every record hash, chain link and capture, and every safety-event and \
             exposure row, checks out"
                .to_string(),
        )
    } else {
        (
            "bad",
            format!("NOT INTACT: {} problem(s) found", v.problems.len()),
        )
    };
    let _ = writeln!(
        out,
        "<p><span class=\"status {class}\" id=\"verify-status\" data-intact=\"{}\">{word}</span></p>",
        v.is_intact()
    );
    out.push_str("<h3>Hash chains</h3>\n");
    table_head(
        out,
        "chains",
        &["chain", "#rows", "head hash (keep it elsewhere)"],
    );
    for (name, n, head) in [
        ("records", v.n_records, &v.head_hash),
        (
            "safety_events",
            v.n_safety_events,
            &v.safety_events_head_hash,
        ),
        ("exposures", v.n_exposures, &v.exposures_head_hash),
    ] {
        let _ = writeln!(
            out,
            "<tr><td>{name}</td><td class=\"n\">{n}</td><td><code>{}</code></td></tr>",
            escape(head)
        );
    }
    table_end(out);
    if !v.problems.is_empty() {
        out.push_str("<h3>Problems</h3>\n<ol id=\"problems\">\n");
        for p in &v.problems {
            let _ = writeln!(out, "<li>{}</li>", escape(&p.to_string()));
        }
        out.push_str("</ol>\n");
    }
    if !v.notices.is_empty() {
        out.push_str("<h3>Notices (not tampering)</h3>\n<ul id=\"notices\">\n");
        for n in &v.notices {
            let _ = writeln!(out, "<li>{}</li>", escape(&n.to_string()));
        }
        out.push_str("</ul>\n");
    }
    // The place for record signatures and signed checkpoints: this store's verification
    // does not report them yet; when it does, they are shown here.
    out.push_str(
        "<h3 id=\"signatures\">Signatures and checkpoints</h3>\n\
         <table class=\"signatures\"><tbody>\n\
         <tr><th>record signatures</th><td>not reported by this store's verification \
         (records are not yet signed by a station key)</td></tr>\n\
         <tr><th>signed checkpoints</th><td>not reported by this store's verification</td></tr>\n\
         </tbody></table>\n",
    );
    let mut debug = format!("{v:#?}");
    if debug.len() > MAX_VERIFY_DEBUG {
        let cut = (0..=MAX_VERIFY_DEBUG)
            .rev()
            .find(|&i| debug.is_char_boundary(i))
            .unwrap_or(0);
        debug.truncate(cut);
        debug.push_str("\n… (cut; run `tragus verify` for the whole report)");
    }
    let _ = writeln!(
        out,
        "<details><summary>The verification report as returned by the store</summary><pre>{}</pre></details>",
        escape(&debug)
    );
    out.push_str("</section>\n");
}

fn tally_row(out: &mut String, label: &str, t: &Tally, extra: &str) {
    let _ = writeln!(
        out,
        "<tr><td>{}</td>{extra}<td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td>\
         <td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td>\
         <td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
        escape(label),
        t.units,
        t.records,
        t.pass,
        t.fail,
        t.retest,
        pct(t.yield_fraction()),
        pct(t.first_pass_yield()),
        t.retested_units,
        pct(t.retest_rate()),
    );
}

const TALLY_COLUMNS: [&str; 9] = [
    "#units",
    "#records",
    "#pass",
    "#fail",
    "#retest",
    "#yield",
    "#first-pass yield",
    "#retested units",
    "#retest rate",
];

/// A group table: one row per group and its tally.
pub(crate) struct Groups<'a> {
    pub id: &'a str,
    pub title: &'a str,
    pub key_title: &'a str,
    pub rows: Vec<(String, Tally, String)>,
    /// Title of an extra column after the key, if any.
    pub extra_title: Option<&'a str>,
}

/// Counts and yields: the totals as figures, then one table per grouping.
pub(crate) fn yield_section(out: &mut String, total: &Tally, groups: &[Groups<'_>]) {
    out.push_str(
        "<section class=\"block\" id=\"yield\"><h2>Counts and yield</h2>\n<div class=\"kpi\">\n",
    );
    let figures: [(&str, &str, String, Option<f64>); 8] = [
        ("units", "k-units", total.units.to_string(), None),
        ("records", "k-records", total.records.to_string(), None),
        ("pass (latest)", "k-pass", total.pass.to_string(), None),
        ("fail (latest)", "k-fail", total.fail.to_string(), None),
        (
            "retest (latest)",
            "k-retest",
            total.retest.to_string(),
            None,
        ),
        (
            "yield",
            "yield",
            pct(total.yield_fraction()),
            total.yield_fraction(),
        ),
        (
            "first-pass yield",
            "first-pass-yield",
            pct(total.first_pass_yield()),
            total.first_pass_yield(),
        ),
        (
            "retest rate",
            "retest-rate",
            pct(total.retest_rate()),
            total.retest_rate(),
        ),
    ];
    for (label, id, shown, value) in figures {
        let data = value.map_or(String::new(), |v| format!(" data-value=\"{v}\""));
        let _ = writeln!(
            out,
            "<div><b id=\"{id}\"{data}>{shown}</b><span>{label}</span></div>"
        );
    }
    out.push_str("</div>\n<p class=\"note\">Definitions in the notes at the end (1).</p>\n");
    for g in groups {
        let _ = writeln!(out, "<h3 id=\"{}\">{}</h3>", g.id, escape(g.title));
        let mut cols: Vec<&str> = vec![g.key_title];
        cols.extend(g.extra_title);
        cols.extend(TALLY_COLUMNS);
        table_head(out, "groups", &cols);
        for (key, t, extra) in &g.rows {
            let extra = match g.extra_title {
                Some(_) => format!("<td>{extra}</td>"),
                None => String::new(),
            };
            tally_row(out, key, t, &extra);
        }
        table_end(out);
    }
    out.push_str("</section>\n");
}

/// Most bars drawn in the Pareto chart (the table lists every check).
const MAX_PARETO_BARS: usize = 20;

/// The Pareto of failing checks: chart and table.
pub(crate) fn pareto_section(out: &mut String, bars: &[ParetoBar]) -> Result<(), PlotError> {
    out.push_str("<section class=\"block\" id=\"pareto\"><h2>Failing checks (Pareto)</h2>\n");
    if bars.is_empty() {
        out.push_str("<p>No check failed in the records of this report.</p></section>\n");
        return Ok(());
    }
    let drawn: Vec<(String, u64, f64)> = bars
        .iter()
        .take(MAX_PARETO_BARS)
        .map(|b| (b.check.clone(), b.count, b.cumulative_pct))
        .collect();
    let svg = pareto_svg(
        "Failing checks by count, with the cumulative share",
        &drawn,
        (900, 320),
    )?;
    let _ = writeln!(
        out,
        "<figure class=\"pareto\">{svg}<figcaption><span class=\"key\" style=\"background:#2f4b7c\"></span>records failing the check\
         <span class=\"key\" style=\"background:#b26b00\"></span>cumulative share of all check failures{}</figcaption></figure>",
        if bars.len() > MAX_PARETO_BARS {
            format!(" (the {MAX_PARETO_BARS} most frequent; the table lists all)")
        } else {
            String::new()
        }
    );
    table_head(
        out,
        "pareto",
        &["check", "#records failing it", "#cumulative %"],
    );
    for b in bars {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{:.1}</td></tr>",
            escape(&b.check),
            b.count,
            b.cumulative_pct
        );
    }
    table_end(out);
    out.push_str("<p class=\"note\">A record counts once per check, however many channels failed it (2).</p></section>\n");
    Ok(())
}

/// One histogram and summary per scalar check.
pub(crate) fn scalar_section(out: &mut String, scalars: &[Scalar]) -> Result<(), PlotError> {
    out.push_str(
        "<section class=\"block\" id=\"scalars\"><h2>Scalar checks: margins and capability</h2>\n",
    );
    if scalars.is_empty() {
        out.push_str("<p>No scalar check with a margin in these records.</p></section>\n");
        return Ok(());
    }
    table_head(
        out,
        "scalars",
        &[
            "check", "kind", "#n", "#mean dB", "#σ dB", "#min dB", "#max dB", "#outside", "#Cpk",
        ],
    );
    for s in scalars {
        let m = &s.summary;
        let _ = writeln!(
            out,
            "<tr><td><a href=\"#scalar-{id}\">{id}</a></td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td>\
             <td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
            escape(&s.kind),
            m.n,
            num(Some(m.mean), 2),
            num(Some(m.sd), 2),
            num(Some(m.min), 2),
            num(Some(m.max), 2),
            m.n_outside,
            num(m.cpk, 2),
            id = escape(&s.check),
        );
    }
    table_end(out);
    out.push_str("<div class=\"grid2\">\n");
    for s in scalars {
        let m = &s.summary;
        let lo = m.min.min(0.0);
        let hi = m.max.max(0.0);
        let (lo, hi) = if hi - lo < 1e-9 {
            (lo - 0.5, hi + 0.5)
        } else {
            (lo, hi)
        };
        let span = hi - lo;
        let n_bins = ((m.n as f64).sqrt().ceil() as usize).clamp(6, 40);
        let bins = histogram(&s.margins_db, lo - 0.02 * span, hi + 0.02 * span, n_bins);
        let title = format!("{}: worst margins of {} values", s.check, m.n);
        let svg = histogram_svg(&title, &bins, m.mean, (560, 280))?;
        let _ = writeln!(
            out,
            "<figure class=\"histogram\" id=\"scalar-{id}\" data-check=\"{id}\">{svg}<figcaption><b>{id}</b> ({kind}): \
             n = {n}, mean {mean} dB, σ {sd} dB, Cpk {cpk} against the limit at 0 dB margin (3)\
             <span class=\"key\" style=\"background:#b42318\"></span>limit\
             <span class=\"key\" style=\"background:#b26b00\"></span>mean</figcaption></figure>",
            id = escape(&s.check),
            kind = escape(&s.kind),
            n = m.n,
            mean = num(Some(m.mean), 2),
            sd = num(Some(m.sd), 2),
            cpk = num(m.cpk, 2),
        );
    }
    out.push_str("</div></section>\n");
    Ok(())
}

/// The response overlays, one figure each.
pub(crate) fn response_section(
    out: &mut String,
    overlays: &[Overlay],
    max_units: usize,
    plan_files: &[(String, String, u32, String, usize)],
) {
    out.push_str("<section class=\"block\" id=\"responses\"><h2>Response checks: every unit against the limits</h2>\n");
    if plan_files.is_empty() {
        out.push_str("<p class=\"note\">No plan file was given for limit lines (--limits-from): curves are drawn without limits.</p>\n");
    } else {
        table_head(
            out,
            "plan-files",
            &[
                "plan file given for limit lines",
                "plan",
                "SHA-256",
                "#records it judged",
            ],
        );
        for (path, id, rev, sha, n) in plan_files {
            let _ = writeln!(
                out,
                "<tr><td><code>{}</code></td><td>{} r{rev}</td><td><code>{}</code></td><td class=\"n\">{n}</td></tr>",
                escape(path),
                escape(id),
                escape(sha)
            );
        }
        table_end(out);
    }
    if overlays.is_empty() {
        out.push_str("<p>No response check in these records.</p></section>\n");
        return;
    }
    for o in overlays {
        let limits = if o.has_limits {
            "limit lines from the plan file with this SHA-256".to_string()
        } else {
            format!(
                "no limit lines: the plan file with SHA-256 {}… was not given (--limits-from)",
                o.plan_sha256.chars().take(12).collect::<String>()
            )
        };
        let drawn = if o.n_drawn_units < o.n_units {
            format!(
                "curves of {} of {} units drawn (at most {max_units}: failing units take up to half, each group an even sample by serial); the band spans every curve that passed the check",
                o.n_drawn_units, o.n_units
            )
        } else {
            format!("all {} units drawn", o.n_units)
        };
        let skipped = if o.n_not_normalised > 0 {
            format!(
                "; {} curve(s) without the check's reference level not drawn",
                o.n_not_normalised
            )
        } else {
            String::new()
        };
        let _ = writeln!(
            out,
            "<figure class=\"overlay\" data-check=\"{c}\" data-plan=\"{p}\" data-revision=\"{r}\">\n<h3>{c} · plan {p} revision {r}</h3>\n{svg}\
             <figcaption>{n} units, {f} failing; {drawn}{skipped}; {limits} (4).\
             <span class=\"key\" style=\"background:#6b7a8f\"></span>units\
             <span class=\"key\" style=\"background:#b42318\"></span>failing units\
             <span class=\"key\" style=\"background:#d3d7de;height:9px\"></span>min–max of the curves that passed\
             <span class=\"key\" style=\"background:#1f2933\"></span>limits (outside washed red)</figcaption></figure>",
            c = escape(&o.check),
            p = escape(&o.plan_id),
            r = o.plan_revision,
            svg = o.svg,
            n = o.n_units,
            f = o.n_failing,
        );
    }
    out.push_str("</section>\n");
}

/// A serial as a link to its unit when the unit is in the report.
fn serial_cell(serial: Option<&str>, in_report: &dyn Fn(&str) -> bool) -> String {
    match serial {
        Some(s) if in_report(s) => {
            format!("<a href=\"#{}\">{}</a>", escape(&unit_anchor(s)), escape(s))
        }
        Some(s) => escape(s),
        None => "—".into(),
    }
}

fn utc_of_unix(s: i64) -> String {
    let fmt = time::macros::format_description!("[year]-[month]-[day]T[hour]:[minute]:[second]Z");
    time::OffsetDateTime::from_unix_timestamp(s)
        .ok()
        .and_then(|t| t.format(&fmt).ok())
        .unwrap_or_else(|| format!("unix {s}"))
}

/// The hearing-safety events and listening exposures of the selection.
pub(crate) fn safety_section(
    out: &mut String,
    events: &[StoredSafetyEvent],
    exposures: &[StoredExposure],
    in_report: &dyn Fn(&str) -> bool,
) {
    out.push_str("<section class=\"block\" id=\"safety\"><h2>Hearing safety</h2>\n");
    let _ = writeln!(out, "<h3>Safety events ({})</h3>", events.len());
    if events.is_empty() {
        out.push_str("<p>None in this report's window.</p>\n");
    } else {
        table_head(
            out,
            "events",
            &[
                "#id",
                "time (UTC)",
                "station",
                "operator",
                "serial",
                "plan",
                "kind",
                "message",
                "#record",
            ],
        );
        let skip = events.len().saturating_sub(MAX_SAFETY_ROWS);
        for e in &events[skip..] {
            let _ = writeln!(
                out,
                "<tr data-kind=\"{kind}\"><td class=\"n\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td>\
                 <td>{kind}</td><td>{}</td><td class=\"n\">{}</td></tr>",
                e.id,
                escape(&e.time_utc),
                escape(&e.station),
                escape(&e.operator),
                serial_cell(e.serial.as_deref(), in_report),
                escape(&e.plan_id),
                escape(&e.message),
                e.record_id.map_or("—".into(), |r| r.to_string()),
                kind = escape(e.kind.word()),
            );
        }
        table_end(out);
        if skip > 0 {
            let _ = writeln!(
                out,
                "<p class=\"note\">The {MAX_SAFETY_ROWS} newest of {} events are listed.</p>",
                events.len()
            );
        }
    }
    let _ = writeln!(out, "<h3>Listening exposures ({})</h3>", exposures.len());
    if exposures.is_empty() {
        out.push_str("<p>None in this report's window.</p>\n");
    } else {
        table_head(
            out,
            "exposures",
            &[
                "#id",
                "operator",
                "station",
                "start (UTC)",
                "#level dB(A)",
                "#duration s",
                "serial",
                "plan",
                "#record",
            ],
        );
        let skip = exposures.len().saturating_sub(MAX_SAFETY_ROWS);
        for x in &exposures[skip..] {
            let _ = writeln!(
                out,
                "<tr><td class=\"n\">{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"n\">{:.1}</td><td class=\"n\">{:.1}</td>\
                 <td>{}</td><td>{}</td><td class=\"n\">{}</td></tr>",
                x.id,
                escape(&x.operator),
                escape(&x.station),
                utc_of_unix(x.start_unix_s),
                x.level_dba,
                x.duration_s,
                serial_cell(Some(&x.serial), in_report),
                escape(&x.plan_id),
                x.record_id.map_or("—".into(), |r| r.to_string()),
            );
        }
        table_end(out);
        if skip > 0 {
            let _ = writeln!(
                out,
                "<p class=\"note\">The {MAX_SAFETY_ROWS} newest of {} exposures are listed.</p>",
                exposures.len()
            );
        }
    }
    out.push_str("</section>\n");
}

/// The footnotes: every definition the figures use.
pub(crate) fn notes_section(out: &mut String, detail_note: &str) {
    let _ = write!(
        out,
        "<section class=\"block\" id=\"notes\"><h2>Notes</h2>\n<ol class=\"foot\">\n\
<li>A <b>unit</b> is a serial number; its records are taken in chain order (by record id) within this report's selection. \
<b>Records</b>: records selected. <b>Units</b>: distinct serials among them. <b>Pass / fail / retest</b>: units by the verdict of their \
latest record (they add up to the units). <b>Yield</b> = units whose latest record passed ÷ units. <b>First-pass yield</b> = units whose \
first test ever passed ÷ units whose first test ever is in the selection; a unit's first test ever is its first record in the whole store \
(any station, plan and day), as the station loop counts it, so a unit first tested before a time window is not in the window's first-pass yield. \
<b>Retested units</b>: units with more than one record; <b>retest rate</b> = retested units ÷ units. \
A group (UTC day, plan revision, station) is counted as if the selection held only its records, so a unit tested on two days counts on both \
(in the first-pass yield of the day of its first test only).</li>\n\
<li>The Pareto counts, per check id, the records in which that check failed on at least one channel, most frequent first; the cumulative \
share is the running sum over all such counts.</li>\n\
<li>Scalar checks are the kinds other than response whose results carry a worst margin (dB, positive inside the limits). Each unit contributes \
its first record that judged the check, every channel of it. The margin is the distance to the nearer limit, so the limit is 0 dB and \
Cpk = (mean − 0) / (3σ), σ the sample standard deviation; by the definition Cpk = min(USL − μ, μ − LSL) / (3σ), one-sided when there is one \
limit (Montgomery, <i>Introduction to Statistical Quality Control</i>, process capability; from memory). For a check with two limits \
(sensitivity, balance) the margin folds both sides into one: when the units sit on one side of the centre this equals the Cpk of the value; \
for a process centred between its limits it reads higher than the value's Cpk.</li>\n\
<li>Curves are the recorded responses (<code>response_db</code>, unsmoothed). A check that smooths judged the smoothed curve, so a drawn \
curve may cross a line where the check passed; its worst margin and frequency are in the unit's check table. A check that normalises is \
drawn shifted by the level it subtracts, taken from the unsmoothed curve (an approximation). Limit lines are drawn only from a plan file \
whose SHA-256 equals the records' plan SHA-256.</li>\n\
<li>{}</li>\n</ol></section>\n",
        escape(detail_note)
    );
}

/// A record's verdict as a badge, for tables.
pub(crate) fn badge_of(r: &RecordView) -> String {
    verdict_badge(&r.record.verdict.word().to_lowercase())
}
