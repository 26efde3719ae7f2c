//! SVG plots over log frequency, written as plain SVG text (no dependency).
//!
//! At the end of the data flow, beside the terminal and JSON reports: a [`Plot`] is a title
//! and one or more stacked [`Panel`]s sharing a logarithmic frequency axis; each panel holds
//! [`Series`] of (frequency Hz, value) points in its own unit (dB, degrees). Used by
//! `tragus coupler --svg` (impedance magnitude and phase) and meant for response plots.
//!
//! Style: our own plain one — white background, light grey grid at decades (and 2…9 minor
//! lines) and at "nice" value steps, one colour per series in a fixed palette, a legend
//! per panel. Non-finite values break a line instead of drawing to infinity.

use std::fmt::Write as _;

/// A figure: a title over panels that share the frequency axis.
#[derive(Debug, Clone, PartialEq)]
pub struct Plot {
    /// Title at the top (the model id, the serial …).
    pub title: String,
    /// Frequency axis range, Hz; `None` = the range of the data.
    pub freq_range_hz: Option<(f64, f64)>,
    /// Panels from top to bottom.
    pub panels: Vec<Panel>,
}

/// One panel: a value axis and its series.
#[derive(Debug, Clone, PartialEq)]
pub struct Panel {
    /// Value axis label, with its unit (`|Z| dB re 1 Pa·s/m³`).
    pub y_label: String,
    /// Value axis range; `None` = the data's range, widened to whole grid steps.
    pub y_range: Option<(f64, f64)>,
    /// Grid step of the value axis; `None` = a 1-2-5 step giving about 6 lines.
    pub y_step: Option<f64>,
    /// The curves.
    pub series: Vec<Series>,
}

/// One curve of (frequency Hz, value) points, ascending in frequency.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Legend text.
    pub label: String,
    /// Points (frequency Hz, value in the panel's unit).
    pub points: Vec<(f64, f64)>,
}

/// Colours of series, in order (chosen to stay apart for common colour-vision deficiencies).
const PALETTE: [&str; 8] = [
    "#1f5fa8", "#d2691e", "#2e8b57", "#b22234", "#6a3d9a", "#8c6d1f", "#00838f", "#555555",
];

// Layout, in SVG user units (px).
const WIDTH: f64 = 900.0;
const PANEL_HEIGHT: f64 = 300.0;
const TITLE_HEIGHT: f64 = 44.0;
const GAP: f64 = 36.0;
const LEFT: f64 = 78.0;
const RIGHT: f64 = 24.0;
const BOTTOM_AXIS: f64 = 44.0;

impl Plot {
    /// The plot as a standalone SVG document.
    pub fn to_svg(&self) -> String {
        let (f_lo, f_hi) = self.freq_range();
        let n = self.panels.len().max(1) as f64;
        let height = TITLE_HEIGHT + n * PANEL_HEIGHT + (n - 1.0) * GAP + BOTTOM_AXIS;
        let mut s = String::new();
        let _ = writeln!(
            s,
            r#"<svg xmlns="http://www.w3.org/2000/svg" width="{WIDTH}" height="{height}" viewBox="0 0 {WIDTH} {height}" font-family="sans-serif" font-size="12">"#
        );
        let _ = writeln!(s, "<title>{}</title>", escape(&self.title));
        let _ = writeln!(
            s,
            r##"<rect x="0" y="0" width="{WIDTH}" height="{height}" fill="#ffffff"/>"##
        );
        let _ = writeln!(
            s,
            r#"<text x="{}" y="28" text-anchor="middle" font-size="16" font-weight="bold">{}</text>"#,
            WIDTH / 2.0,
            escape(&self.title)
        );
        let x0 = LEFT;
        let x1 = WIDTH - RIGHT;
        let lx =
            |f: f64| x0 + (f.log10() - f_lo.log10()) / (f_hi.log10() - f_lo.log10()) * (x1 - x0);
        for (pi, panel) in self.panels.iter().enumerate() {
            let top = TITLE_HEIGHT + pi as f64 * (PANEL_HEIGHT + GAP);
            let bottom = top + PANEL_HEIGHT;
            let is_last = pi + 1 == self.panels.len();
            panel.write(
                &mut s,
                pi,
                (x0, x1),
                (top, bottom),
                (f_lo, f_hi),
                &lx,
                is_last,
            );
        }
        s.push_str("</svg>\n");
        s
    }

    fn freq_range(&self) -> (f64, f64) {
        if let Some((a, b)) = self.freq_range_hz.filter(|(a, b)| *a > 0.0 && b > a) {
            return (a, b);
        }
        let mut lo = f64::INFINITY;
        let mut hi = 0.0f64;
        for p in &self.panels {
            for s in &p.series {
                for &(f, _) in &s.points {
                    if f > 0.0 && f.is_finite() {
                        lo = lo.min(f);
                        hi = hi.max(f);
                    }
                }
            }
        }
        if lo.is_finite() && hi > lo {
            (lo, hi)
        } else {
            (20.0, 20_000.0)
        }
    }
}

impl Panel {
    #[allow(clippy::too_many_arguments)]
    fn write(
        &self,
        s: &mut String,
        index: usize,
        (x0, x1): (f64, f64),
        (top, bottom): (f64, f64),
        (f_lo, f_hi): (f64, f64),
        lx: &dyn Fn(f64) -> f64,
        freq_labels: bool,
    ) {
        let (y_lo, y_hi, step) = self.value_axis();
        let ly = |v: f64| bottom - (v - y_lo) / (y_hi - y_lo) * (bottom - top);
        let _ = writeln!(s, r#"<g class="panel" id="panel-{index}">"#);
        // Frequency grid: decades labelled, 2…9 minor lines.
        let mut decade = 10f64.powi(f_lo.log10().floor() as i32);
        while decade <= f_hi * (1.0 + 1e-9) {
            for m in 1..10 {
                let f = decade * f64::from(m);
                if f < f_lo * (1.0 - 1e-9) || f > f_hi * (1.0 + 1e-9) {
                    continue;
                }
                let x = lx(f);
                let (stroke, width) = if m == 1 {
                    ("#b0b0b0", 1.0)
                } else {
                    ("#e4e4e4", 0.7)
                };
                let _ = writeln!(
                    s,
                    r#"<line x1="{x:.2}" y1="{top:.2}" x2="{x:.2}" y2="{bottom:.2}" stroke="{stroke}" stroke-width="{width}"/>"#
                );
                if freq_labels && (m == 1 || m == 2 || m == 5) {
                    let _ = writeln!(
                        s,
                        r#"<text x="{x:.2}" y="{:.2}" text-anchor="middle">{}</text>"#,
                        bottom + 16.0,
                        freq_text(f)
                    );
                }
            }
            decade *= 10.0;
        }
        // Value grid.
        let mut k = (y_lo / step).ceil() as i64;
        while (k as f64) * step <= y_hi + step * 1e-9 {
            let v = k as f64 * step;
            let y = ly(v);
            let _ = writeln!(
                s,
                r##"<line x1="{x0:.2}" y1="{y:.2}" x2="{x1:.2}" y2="{y:.2}" stroke="#d0d0d0" stroke-width="0.8"/>"##
            );
            let _ = writeln!(
                s,
                r#"<text x="{:.2}" y="{:.2}" text-anchor="end">{}</text>"#,
                x0 - 6.0,
                y + 4.0,
                number_text(v, step)
            );
            k += 1;
        }
        let _ = writeln!(
            s,
            r##"<rect x="{x0:.2}" y="{top:.2}" width="{:.2}" height="{:.2}" fill="none" stroke="#333333" stroke-width="1"/>"##,
            x1 - x0,
            bottom - top
        );
        let mid = (top + bottom) / 2.0;
        let _ = writeln!(
            s,
            r#"<text x="18" y="{mid:.2}" text-anchor="middle" transform="rotate(-90 18 {mid:.2})">{}</text>"#,
            escape(&self.y_label)
        );
        if freq_labels {
            let _ = writeln!(
                s,
                r#"<text x="{:.2}" y="{:.2}" text-anchor="middle">frequency (Hz)</text>"#,
                (x0 + x1) / 2.0,
                bottom + 36.0
            );
        }
        // Curves, clipped to the panel.
        let _ = writeln!(
            s,
            r#"<clipPath id="clip-{index}"><rect x="{x0:.2}" y="{top:.2}" width="{:.2}" height="{:.2}"/></clipPath>"#,
            x1 - x0,
            bottom - top
        );
        let _ = writeln!(s, r#"<g clip-path="url(#clip-{index})">"#);
        for (si, series) in self.series.iter().enumerate() {
            let colour = PALETTE[si % PALETTE.len()];
            let mut d = String::new();
            let mut pen_down = false;
            for &(f, v) in &series.points {
                if !(f > 0.0 && f.is_finite() && v.is_finite()) {
                    pen_down = false;
                    continue;
                }
                let _ = write!(
                    d,
                    "{}{:.2},{:.2} ",
                    if pen_down { "L" } else { "M" },
                    lx(f),
                    ly(v)
                );
                pen_down = true;
            }
            if !d.is_empty() {
                let _ = writeln!(
                    s,
                    r#"<path d="{}" fill="none" stroke="{colour}" stroke-width="1.6"/>"#,
                    d.trim_end()
                );
            }
        }
        s.push_str("</g>\n");
        // Legend, top right inside the panel.
        if !self.series.is_empty() {
            let w = 14.0
                + 7.0
                    * self
                        .series
                        .iter()
                        .map(|x| x.label.chars().count())
                        .max()
                        .unwrap_or(0) as f64
                + 30.0;
            let h = 8.0 + 16.0 * self.series.len() as f64;
            let lx0 = x1 - w - 8.0;
            let ly0 = top + 8.0;
            let _ = writeln!(
                s,
                r##"<g class="legend"><rect x="{lx0:.2}" y="{ly0:.2}" width="{w:.2}" height="{h:.2}" fill="#ffffff" fill-opacity="0.9" stroke="#999999" stroke-width="0.8"/>"##
            );
            for (si, series) in self.series.iter().enumerate() {
                let colour = PALETTE[si % PALETTE.len()];
                let y = ly0 + 14.0 + 16.0 * si as f64;
                let _ = writeln!(
                    s,
                    r#"<line x1="{:.2}" y1="{:.2}" x2="{:.2}" y2="{:.2}" stroke="{colour}" stroke-width="2.4"/>"#,
                    lx0 + 8.0,
                    y - 4.0,
                    lx0 + 30.0,
                    y - 4.0
                );
                let _ = writeln!(
                    s,
                    r#"<text x="{:.2}" y="{y:.2}">{}</text>"#,
                    lx0 + 36.0,
                    escape(&series.label)
                );
            }
            s.push_str("</g>\n");
        }
        s.push_str("</g>\n");
    }

    /// (low, high, step) of the value axis.
    fn value_axis(&self) -> (f64, f64, f64) {
        let (mut lo, mut hi) = match self.y_range.filter(|(a, b)| b > a) {
            Some(r) => r,
            None => {
                let mut lo = f64::INFINITY;
                let mut hi = f64::NEG_INFINITY;
                for s in &self.series {
                    for &(_, v) in &s.points {
                        if v.is_finite() {
                            lo = lo.min(v);
                            hi = hi.max(v);
                        }
                    }
                }
                if !lo.is_finite() {
                    (0.0, 1.0)
                } else if hi - lo < 1e-9 {
                    (lo - 1.0, hi + 1.0)
                } else {
                    (lo, hi)
                }
            }
        };
        let step = self
            .y_step
            .filter(|s| *s > 0.0 && s.is_finite())
            .unwrap_or_else(|| nice_step((hi - lo) / 6.0));
        if self.y_range.is_none() {
            lo = (lo / step).floor() * step;
            hi = (hi / step).ceil() * step;
            if hi <= lo {
                hi = lo + step;
            }
        }
        (lo, hi, step)
    }
}

/// The 1-2-5 × 10ⁿ step nearest above `raw`.
fn nice_step(raw: f64) -> f64 {
    if !(raw > 0.0 && raw.is_finite()) {
        return 1.0;
    }
    let p = 10f64.powf(raw.log10().floor());
    let m = raw / p;
    let n = if m <= 1.0 {
        1.0
    } else if m <= 2.0 {
        2.0
    } else if m <= 5.0 {
        5.0
    } else {
        10.0
    };
    n * p
}

/// `20`, `500`, `1k`, `2k`, `20k` (Hz).
fn freq_text(f: f64) -> String {
    if f >= 1000.0 {
        let k = f / 1000.0;
        if (k - k.round()).abs() < 1e-9 {
            format!("{}k", k.round())
        } else {
            format!("{k:.1}k")
        }
    } else {
        format!("{}", f.round())
    }
}

fn number_text(v: f64, step: f64) -> String {
    let decimals = if step >= 1.0 {
        0
    } else {
        (-step.log10().floor()) as usize
    };
    let v = if v.abs() < step * 1e-9 { 0.0 } else { v };
    format!("{v:.decimals$}")
}

/// Text safe inside SVG elements and attributes.
fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            c if c.is_control() => {}
            c => out.push(c),
        }
    }
    out
}
