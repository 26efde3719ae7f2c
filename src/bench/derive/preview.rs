//! The preview page: one self-contained HTML file with an SVG per check.
//!
//! A response check is drawn over log frequency: the golden curves (thin, teal), their mean
//! (amber), the derived lines as written (dark, solid), the unthinned lines (dotted) and the
//! old plan's lines (grey, dashed). A scalar check is a strip of the golden values with the
//! old (dashed) and new (solid) limits. Each figure has a table beside it: Cp, Cpk and how
//! many golden and validation units pass. Everything is inline, so the file can be mailed.

use super::checks::{clamp_words, DerivedCheck};
use super::report::{CheckReport, Counts, DeriveReport};
use plotters::prelude::*;

const FONT: &str = "sans-serif";
const INK: RGBColor = RGBColor(0x22, 0x2b, 0x36);
const GRID: RGBColor = RGBColor(0xdd, 0xe2, 0xe8);
const GOLDEN: RGBColor = RGBColor(0x2a, 0x8c, 0x82);
const MEAN: RGBColor = RGBColor(0xc7, 0x7d, 0x12);
const OLD: RGBColor = RGBColor(0x9a, 0xa3, 0xad);

/// `&`, `<`, `>` and `"` escaped for HTML text and attributes.
pub fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// The whole page.
pub fn page(report: &DeriveReport, checks: &[DerivedCheck]) -> Result<String, String> {
    let mut h = String::new();
    let title = format!(
        "Derived limits: {} revision {} → {}",
        report.plan.id, report.plan.revision, report.new_plan.revision
    );
    h.push_str("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">");
    h.push_str(&format!("<title>{}</title>", escape(&title)));
    h.push_str(
        "<style>body{font-family:sans-serif;color:#222b36;max-width:70em;margin:2em auto;\
         padding:0 1em}table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid \
         #dde2e8;padding:.2em .6em;text-align:right}th{background:#f3f5f8}td.l,th.l{text-align:\
         left}figure{margin:1em 0}figcaption{font-size:.9em}.warn{color:#a33}</style>",
    );
    h.push_str("</head><body>\n");
    h.push_str(&format!("<h1>{}</h1>\n", escape(&title)));
    let g = &report.golden;
    h.push_str(&format!(
        "<p>New plan <code>{}</code> (sha256 <code>{}</code>) from <code>{}</code>. Made {} by \
         {} {}.</p>\n",
        escape(&report.new_plan.path),
        escape(&report.new_plan.sha256),
        escape(&report.plan.path),
        escape(&report.created_utc),
        escape(&report.tool.name),
        escape(&report.tool.build)
    ));
    h.push_str(&format!(
        "<p>Golden units: {} (measured {} to {}); the new plan passes {} of them{}.",
        g.n_units,
        escape(g.first_time_utc.as_deref().unwrap_or("?")),
        escape(g.last_time_utc.as_deref().unwrap_or("?")),
        g.n_pass,
        share(g.predicted_yield)
    ));
    if let Some(v) = &report.validation {
        h.push_str(&format!(
            " Validation units: {}; predicted yield {} of {}{}.",
            v.n_units,
            v.n_pass,
            v.n_units,
            share(v.predicted_yield)
        ));
    }
    h.push_str("</p>\n");
    let failing: Vec<String> = g
        .units
        .iter()
        .filter(|u| !u.failed_checks.is_empty())
        .map(|u| format!("{} ({})", u.serial, u.failed_checks.join(", ")))
        .collect();
    if !failing.is_empty() {
        h.push_str(&format!(
            "<p class=\"warn\">Golden units the new plan fails: {}.</p>\n",
            escape(&failing.join("; "))
        ));
    }
    let s = &report.settings;
    h.push_str(&format!(
        "<p>k = {}, half-width {}–{} dB, σ smoothing {}, thinning within {} dB (lines only \
         widened), scalar method {}.</p>\n",
        s.k,
        s.min_half_width_db,
        s.max_half_width_db,
        s.smoothing_fraction
            .map_or("none".into(), |n| format!("1/{n} octave")),
        s.max_error_db,
        match s.method {
            crate::limits::Method::Sigma => "mean ± k·σ".to_string(),
            crate::limits::Method::Quantile(q) => format!("{q}-quantile"),
        }
    ));
    for d in checks {
        h.push_str(&section(&d.report, d)?);
    }
    if !report.kept.is_empty() {
        h.push_str("<h2>Kept as they were</h2><ul>");
        for k in &report.kept {
            h.push_str(&format!(
                "<li><b>{}</b> ({}): {}</li>",
                escape(&k.id),
                escape(&k.kind),
                escape(&k.reason)
            ));
        }
        h.push_str("</ul>\n");
    }
    h.push_str("</body></html>\n");
    Ok(h)
}

fn share(y: Option<f64>) -> String {
    y.map_or(String::new(), |y| format!(" ({:.1} %)", 100.0 * y))
}

fn opt(v: Option<f64>, decimals: usize) -> String {
    v.map_or("–".into(), |v| format!("{v:.decimals$}"))
}

fn counts(c: Option<Counts>) -> String {
    c.map_or("–".into(), |c| {
        let mut s = format!("{} pass, {} fail", c.n_pass, c.n_fail);
        if c.n_retest > 0 {
            s.push_str(&format!(", {} not judged", c.n_retest));
        }
        s
    })
}

fn section(r: &CheckReport, d: &DerivedCheck) -> Result<String, String> {
    let mut h = format!(
        "<h2>{} <small>({}, {})</small></h2>\n<figure>",
        escape(&r.id),
        escape(&r.kind),
        escape(&r.channels.join(", "))
    );
    let svg = match &d.curve {
        Some(_) => response_svg(r, d)?,
        None => strip_svg(r)?,
    };
    h.push_str(&svg);
    h.push_str(&format!(
        "<figcaption>{} from {} golden value(s) of {} unit(s).</figcaption></figure>\n",
        escape(&r.quantity),
        r.n_values,
        r.n_units
    ));
    h.push_str("<table><tr><th class=\"l\">old limits</th><th class=\"l\">new limits</th>\
                <th>Cp</th><th>Cpk</th><th class=\"l\">golden</th><th class=\"l\">validation</th></tr>");
    let at = |f: Option<f64>| {
        f.map_or(String::new(), |f| {
            format!(" at {}", crate::checks::format_hz(f))
        })
    };
    h.push_str(&format!(
        "<tr><td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}{}</td><td>{}{}</td>\
         <td class=\"l\">{}</td><td class=\"l\">{}</td></tr></table>\n",
        escape(&r.old_limits.to_string()),
        escape(&r.new_limits.to_string()),
        opt(r.cp, 2),
        escape(&at(r.cp_at_hz)),
        opt(r.cpk, 2),
        escape(&at(r.cpk_at_hz)),
        counts(Some(r.golden_counts)),
        counts(r.validation_counts)
    ));
    if let Some(s) = &r.golden {
        h.push_str(&format!(
            "<p>Golden mean {:.3} dB, σ {:.3} dB, range {:.3} to {:.3} dB{}.</p>\n",
            s.mean,
            s.sd,
            s.min,
            s.max,
            r.clamp
                .and_then(clamp_words)
                .map_or(String::new(), |w| format!("; the limit was {w}"))
        ));
    }
    for l in &r.lines {
        h.push_str(&format!(
            "<p>{} line <code>{}</code>: {} points from {} on the grid, within {:.3} dB of the \
             derived line (bound {} dB).</p>\n",
            l.side.word(),
            escape(&l.file),
            l.n_points,
            l.n_unthinned,
            l.worst_error_db,
            l.max_error_db
        ));
    }
    Ok(h)
}

fn plot_err<E: std::fmt::Display>(e: E) -> String {
    format!("cannot draw the preview: {e}")
}

fn with_title(svg: String, title: &str) -> String {
    let svg = svg.replacen(
        "<svg ",
        &format!("<svg role=\"img\" aria-label=\"{}\" ", escape(title)),
        1,
    );
    match svg.find('>') {
        Some(i) => format!(
            "{}<title>{}</title>{}",
            &svg[..=i],
            escape(title),
            &svg[i + 1..]
        ),
        None => svg,
    }
}

fn response_svg(r: &CheckReport, d: &DerivedCheck) -> Result<String, String> {
    let c = d.curve.as_ref().expect("a response check");
    let f = &c.stats.freqs_hz;
    let written: Vec<&Vec<(f64, f64)>> = d.files.iter().map(|l| &l.line.points).collect();
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for v in c
        .envelope
        .upper_db
        .iter()
        .chain(&c.envelope.lower_db)
        .chain(written.iter().flat_map(|p| p.iter().map(|x| &x.1)))
    {
        lo = lo.min(*v);
        hi = hi.max(*v);
    }
    let (lo, hi) = ((lo - 3.0).floor(), (hi + 3.0).ceil());
    let (f_lo, f_hi) = (f[0], f[f.len() - 1]);
    let clamp = |v: f64| v.clamp(lo, hi);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (860, 420)).into_drawing_area();
        root.fill(&WHITE).map_err(plot_err)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(50)
            .build_cartesian_2d((f_lo..f_hi).log_scale(), lo..hi)
            .map_err(plot_err)?;
        chart
            .configure_mesh()
            .x_labels(10)
            .x_label_formatter(&|v| {
                if *v >= 1000.0 {
                    let k = format!("{:.3}", v / 1000.0);
                    format!("{}k", k.trim_end_matches('0').trim_end_matches('.'))
                } else {
                    format!("{v:.0}")
                }
            })
            .x_desc("frequency, Hz")
            .y_desc("dB")
            .light_line_style(GRID.mix(0.5))
            .bold_line_style(GRID)
            .axis_style(INK)
            .label_style((FONT, 12).into_font().color(&INK))
            .draw()
            .map_err(plot_err)?;
        for g in &c.golden_db {
            let pts: Vec<(f64, f64)> = f.iter().copied().zip(g.iter().map(|v| clamp(*v))).collect();
            chart
                .draw_series(std::iter::once(PathElement::new(pts, GOLDEN.mix(0.35))))
                .map_err(plot_err)?;
        }
        let mean: Vec<(f64, f64)> = f
            .iter()
            .copied()
            .zip(c.stats.mean_db.iter().map(|v| clamp(*v)))
            .collect();
        chart
            .draw_series(std::iter::once(PathElement::new(
                mean,
                MEAN.stroke_width(2),
            )))
            .map_err(plot_err)?;
        for old in [&c.old_upper, &c.old_lower].into_iter().flatten() {
            let pts: Vec<(f64, f64)> = old.iter().map(|&(x, v)| (x, clamp(v))).collect();
            chart
                .draw_series(DashedLineSeries::new(pts, 6, 4, OLD.stroke_width(2)))
                .map_err(plot_err)?;
        }
        for (side_line, side) in [
            (&c.envelope.upper_db, "upper"),
            (&c.envelope.lower_db, "lower"),
        ] {
            if !r.lines.iter().any(|l| l.side.word() == side) {
                continue;
            }
            let pts: Vec<(f64, f64)> = f
                .iter()
                .copied()
                .zip(side_line.iter().map(|v| clamp(*v)))
                .collect();
            chart
                .draw_series(DashedLineSeries::new(
                    pts,
                    2,
                    3,
                    INK.mix(0.6).stroke_width(1),
                ))
                .map_err(plot_err)?;
        }
        for p in &written {
            let pts: Vec<(f64, f64)> = p.iter().map(|&(x, v)| (x, clamp(v))).collect();
            chart
                .draw_series(std::iter::once(PathElement::new(
                    pts.clone(),
                    INK.stroke_width(2),
                )))
                .map_err(plot_err)?;
            chart
                .draw_series(pts.into_iter().map(|p| Circle::new(p, 3, INK.filled())))
                .map_err(plot_err)?;
        }
        root.present().map_err(plot_err)?;
    }
    Ok(with_title(
        svg,
        &format!(
            "{}: golden curves, their mean, the derived lines (solid, with breakpoints), the \
             unthinned lines (dotted) and the old lines (dashed)",
            r.id
        ),
    ))
}

fn strip_svg(r: &CheckReport) -> Result<String, String> {
    let old: Vec<f64> = r
        .old_limits
        .as_object()
        .map(|o| o.values().filter_map(|v| v.as_f64()).collect())
        .unwrap_or_default();
    // The old THD limit is in %; on this chart's dB scale only the new limits are drawn.
    let old_db: Vec<f64> = if r.kind == "thd" {
        old.iter().map(|p| 20.0 * (p / 100.0).log10()).collect()
    } else {
        old
    };
    let new: Vec<f64> = r.lsl_db.into_iter().chain(r.usl_db).collect();
    let all: Vec<f64> = r
        .values_db
        .iter()
        .chain(&new)
        .chain(&old_db)
        .copied()
        .filter(|v| v.is_finite())
        .collect();
    let lo = all.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = all.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let pad = ((hi - lo) * 0.08).max(0.5);
    let (lo, hi) = (lo - pad, hi + pad);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (860, 150)).into_drawing_area();
        root.fill(&WHITE).map_err(plot_err)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .x_label_area_size(34)
            .build_cartesian_2d(lo..hi, 0.0..1.0)
            .map_err(plot_err)?;
        chart
            .configure_mesh()
            .disable_y_mesh()
            .disable_y_axis()
            .x_desc(r.quantity.as_str())
            .light_line_style(GRID.mix(0.5))
            .bold_line_style(GRID)
            .axis_style(INK)
            .label_style((FONT, 12).into_font().color(&INK))
            .draw()
            .map_err(plot_err)?;
        let n = r.values_db.len().max(1) as f64;
        chart
            .draw_series(r.values_db.iter().enumerate().map(|(i, &v)| {
                Circle::new(
                    (v, 0.15 + 0.7 * (i as f64 + 0.5) / n),
                    3,
                    GOLDEN.mix(0.7).filled(),
                )
            }))
            .map_err(plot_err)?;
        for v in old_db {
            chart
                .draw_series(DashedLineSeries::new(
                    vec![(v, 0.0), (v, 1.0)],
                    5,
                    4,
                    OLD.stroke_width(2),
                ))
                .map_err(plot_err)?;
        }
        if let Some(s) = &r.golden {
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(s.mean, 0.0), (s.mean, 1.0)],
                    MEAN.stroke_width(2),
                )))
                .map_err(plot_err)?;
        }
        for v in new {
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(v, 0.0), (v, 1.0)],
                    INK.stroke_width(2),
                )))
                .map_err(plot_err)?;
        }
        root.present().map_err(plot_err)?;
    }
    Ok(with_title(
        svg,
        &format!(
            "{}: golden values, their mean, the new limits (solid) and the old (dashed)",
            r.id
        ),
    ))
}
