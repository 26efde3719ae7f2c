//! The units: an index of every serial, then a place for each unit, reachable by its
//! anchor ([`unit_anchor`]).
//!
//! So that 10 000 units stay a file a browser opens, a unit gets one of two forms:
//! - a **detailed section**: a chart per response check at full detail against its limits,
//!   then per record its check table with margins and its provenance (plan, calibration,
//!   capture, software, station, operator, record and previous hash, signature). Units
//!   that need a look (a record not passing, or more than one record) come first, by
//!   serial, then passing units by serial, up to the detail limit;
//! - a **row** in the compact table of the other units: latest verdict, time, station,
//!   plan, worst margin, record id and hash. Every row carries the unit's anchor too.

use std::collections::BTreeMap;
use std::fmt::Write as _;

use super::curves::unit_chart;
use super::html::{escape, num, table_end, table_head, unit_anchor, verdict_badge};
use super::limits::LimitBook;
use super::load::RecordView;
use super::plot::{PlotError, SERIES};
use super::sections::badge_of;
use crate::Verdict;

/// A unit: its serial and its records in chain order (indices into the record list).
pub(crate) struct Unit<'a> {
    pub serial: &'a str,
    pub records: Vec<&'a RecordView>,
}

impl Unit<'_> {
    fn latest(&self) -> &RecordView {
        self.records.last().expect("a unit has at least one record")
    }

    /// A record not passing, or more than one record.
    pub fn needs_a_look(&self) -> bool {
        self.records.len() > 1
            || self
                .records
                .iter()
                .any(|r| r.record.verdict != Verdict::Pass)
    }
}

/// Units by serial.
pub(crate) fn units_of(records: &[RecordView]) -> Vec<Unit<'_>> {
    let mut by: BTreeMap<&str, Vec<&RecordView>> = BTreeMap::new();
    for r in records {
        by.entry(r.record.serial.as_str()).or_default().push(r);
    }
    by.into_iter()
        .map(|(serial, records)| Unit { serial, records })
        .collect()
}

/// Which units get a detailed section: those needing a look first, then passing ones, by
/// serial, at most `limit`.
pub(crate) fn choose_detailed(units: &[Unit<'_>], limit: usize) -> Vec<bool> {
    let mut detailed = vec![false; units.len()];
    let mut room = limit;
    for pass in [true, false] {
        for (i, u) in units.iter().enumerate() {
            if room == 0 {
                return detailed;
            }
            if u.needs_a_look() == pass {
                detailed[i] = true;
                room -= 1;
            }
        }
    }
    detailed
}

/// The index of every serial, each a link to its unit.
pub(crate) fn index_section(out: &mut String, units: &[Unit<'_>]) {
    let _ = writeln!(
        out,
        "<section class=\"block\" id=\"units-index\"><h2>Units by serial ({})</h2>\n<div class=\"index\">",
        units.len()
    );
    for u in units {
        let word = u.latest().record.verdict.word().to_lowercase();
        let _ = writeln!(
            out,
            "<a class=\"{word}\" href=\"#{}\">{}</a>",
            escape(&unit_anchor(u.serial)),
            escape(u.serial)
        );
    }
    out.push_str("</div>\n<p class=\"note\">Red: latest record failed; ochre: latest record is a retest.</p></section>\n");
}

fn provenance(out: &mut String, r: &RecordView) {
    let rec = &r.record;
    let code = |s: &str| format!("<code>{}</code>", escape(s));
    let station = match &r.station_mode {
        Some(m) => format!("{} ({} mode)", escape(&rec.station), escape(m)),
        None => escape(&rec.station),
    };
    let rig = match &r.simulated_unit {
        Some(u) => format!("{} (simulated unit: {})", escape(&rec.rig), escape(u)),
        None => escape(&rec.rig),
    };
    let mut calibration = match (&rec.calibration_mode, &rec.calibration_sha256) {
        (None, _) => "not recorded (record written before store schema 2)".to_string(),
        (Some(m), None) => format!("{}, no calibration applied", escape(m)),
        (Some(m), Some(s)) => format!("{}, SHA-256 {}", escape(m), code(s)),
    };
    if let Some(u) = &r.level_unit {
        calibration.push_str(&format!("; levels in {}", escape(u)));
    }
    let rows: [(&str, String); 10] = [
        (
            "plan",
            format!(
                "{} revision {}, SHA-256 {}",
                escape(&rec.plan_id),
                rec.plan_revision,
                code(&rec.plan_sha256)
            ),
        ),
        ("calibration", calibration),
        ("capture", format!("SHA-256 {}", code(&rec.capture_sha256))),
        (
            "software",
            format!("tragus {}", escape(&rec.software_version)),
        ),
        ("station", station),
        ("operator", escape(&rec.operator)),
        ("rig", rig),
        ("record hash", code(&rec.record_hash)),
        ("previous hash", code(&rec.prev_hash)),
        (
            "signature",
            "none (this store does not hold record signatures yet)".into(),
        ),
    ];
    out.push_str("<table class=\"prov\"><tbody>\n");
    for (k, v) in rows {
        let _ = writeln!(out, "<tr><th>{k}</th><td>{v}</td></tr>");
    }
    out.push_str("</tbody></table>\n");
}

fn check_table(out: &mut String, r: &RecordView) {
    if r.checks.is_empty() {
        out.push_str("<p class=\"note\">No check was judged (the sweep was not played, or the result holds none).</p>\n");
        return;
    }
    table_head(
        out,
        "checks",
        &[
            "check",
            "kind",
            "channel",
            "verdict",
            "#margin dB",
            "#at",
            "detail",
        ],
    );
    for c in &r.checks {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td>{}</td></tr>",
            escape(&c.id),
            escape(&c.kind),
            escape(&c.channel),
            verdict_badge(&c.verdict),
            num(c.margin_db, 2),
            c.at_hz.map_or("—".into(), crate::checks::format_hz),
            escape(&c.detail)
        );
    }
    table_end(out);
}

/// A unit's detailed section.
fn detailed(out: &mut String, u: &Unit<'_>, book: &LimitBook) -> Result<(), PlotError> {
    let latest = u.latest();
    let _ = writeln!(
        out,
        "<section class=\"unit\" id=\"{}\" data-serial=\"{}\"><h3>{} {}</h3>\n<p class=\"note\">{} record(s); latest #{} at {} on {}, plan {} revision {}</p>",
        escape(&unit_anchor(u.serial)),
        escape(u.serial),
        escape(u.serial),
        badge_of(latest),
        u.records.len(),
        latest.record.id,
        escape(&latest.record.time_utc),
        escape(&latest.record.station),
        escape(&latest.record.plan_id),
        latest.record.plan_revision,
    );
    // One chart per response check id, in order of first appearance.
    let mut checks: Vec<&str> = Vec::new();
    for r in &u.records {
        for c in r.checks.iter().filter(|c| c.kind == "response") {
            if !checks.contains(&c.id.as_str()) {
                checks.push(&c.id);
            }
        }
    }
    let mut charts = String::new();
    for check in checks {
        if let Some((svg, channels)) = unit_chart(u.serial, check, &u.records, book)? {
            let mut legend = String::new();
            for (i, ch) in channels.iter().enumerate() {
                let c = SERIES[i % SERIES.len()];
                let _ = write!(
                    legend,
                    "<span class=\"key\" style=\"background:#{:02x}{:02x}{:02x}\"></span>{}",
                    c.0,
                    c.1,
                    c.2,
                    escape(ch)
                );
            }
            let earlier = if u.records.len() > 1 {
                "; earlier records faded"
            } else {
                ""
            };
            let _ = writeln!(
                charts,
                "<figure class=\"unit-chart\" data-check=\"{c}\">{svg}<figcaption><b>{c}</b>{legend}{earlier}; circles: worst point of a failing channel (4)</figcaption></figure>",
                c = escape(check),
            );
        }
    }
    if !charts.is_empty() {
        let _ = writeln!(out, "<div class=\"grid2\">{charts}</div>");
    }
    for r in u.records.iter().rev() {
        let _ = writeln!(
            out,
            "<h4>record #{} · {} · {}</h4>",
            r.record.id,
            escape(&r.record.time_utc),
            badge_of(r)
        );
        if let Some(why) = &r.unreadable {
            let _ = writeln!(out, "<p class=\"note\">{}</p>", escape(why));
        }
        for (title, lines) in [
            ("retest reasons", &r.retest_reasons),
            ("hearing safety", &r.safety_notes),
        ] {
            if !lines.is_empty() {
                let _ = write!(out, "<p><b>{title}</b></p><ul>");
                for l in lines {
                    let _ = write!(out, "<li>{}</li>", escape(l));
                }
                out.push_str("</ul>\n");
            }
        }
        check_table(out, r);
        provenance(out, r);
    }
    out.push_str("</section>\n");
    Ok(())
}

/// The worst margin of a record's checks: (check, channel, margin dB).
fn worst(r: &RecordView) -> Option<(&str, &str, f64)> {
    r.checks
        .iter()
        .filter_map(|c| c.margin_db.map(|m| (c.id.as_str(), c.channel.as_str(), m)))
        .min_by(|a, b| a.2.total_cmp(&b.2))
}

/// Every unit: the detailed sections, then the compact table of the others.
pub(crate) fn units_section(
    out: &mut String,
    units: &[Unit<'_>],
    detailed_flags: &[bool],
    book: &LimitBook,
    detail_note: &str,
) -> Result<(), PlotError> {
    out.push_str("<section class=\"block\" id=\"units\"><h2>Units</h2>\n");
    let _ = writeln!(out, "<p class=\"note\">{}</p>", escape(detail_note));
    for (u, _) in units.iter().zip(detailed_flags).filter(|(_, d)| **d) {
        detailed(out, u, book)?;
    }
    let compact: Vec<&Unit<'_>> = units
        .iter()
        .zip(detailed_flags)
        .filter(|(_, d)| !**d)
        .map(|(u, _)| u)
        .collect();
    if !compact.is_empty() {
        let _ = writeln!(
            out,
            "<h3 id=\"compact-units\">Other units ({})</h3>",
            compact.len()
        );
        table_head(
            out,
            "compact",
            &[
                "serial",
                "#records",
                "latest",
                "time (UTC)",
                "station",
                "plan",
                "worst margin",
                "#record",
                "record hash",
            ],
        );
        for u in compact {
            let r = u.latest();
            let worst = worst(r).map_or("—".into(), |(c, ch, m)| {
                format!("{} {} {:.2} dB", escape(c), escape(ch), m)
            });
            let _ = writeln!(
                out,
                "<tr id=\"{}\"><td>{}</td><td class=\"n\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{} r{}</td><td>{}</td><td class=\"n\">{}</td><td><code>{}</code></td></tr>",
                escape(&unit_anchor(u.serial)),
                escape(u.serial),
                u.records.len(),
                badge_of(r),
                escape(&r.record.time_utc),
                escape(&r.record.station),
                escape(&r.record.plan_id),
                r.record.plan_revision,
                worst,
                r.record.id,
                escape(&r.record.record_hash.chars().take(16).collect::<String>()),
            );
        }
        table_end(out);
    }
    out.push_str("</section>\n");
    Ok(())
}
