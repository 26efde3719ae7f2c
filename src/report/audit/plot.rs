//! The report's charts, drawn with `plotters` into SVG text that the page inlines.
//!
//! Our own look: white plotting area, thin cool-grey grid, slate for the population,
//! brick red for what failed, limits as dark lines with the region beyond them washed in
//! red. Legends are written in HTML beside each figure (smaller than SVG legends and
//! readable by assistive technology). Every value drawn is clamped to the visible range, so
//! an off-scale curve (a dead channel) runs along the border instead of across the page.

use plotters::prelude::*;

/// Plot text.
const FONT: &str = "sans-serif";
/// Text and axes.
pub(crate) const INK: RGBColor = RGBColor(0x1f, 0x29, 0x33);
/// Decade and labelled grid lines.
const GRID_BOLD: RGBColor = RGBColor(0xc9, 0xce, 0xd6);
/// Minor grid lines.
const GRID_LIGHT: RGBColor = RGBColor(0xec, 0xef, 0xf3);
/// The population of curves, and neutral bars.
pub(crate) const SLATE: RGBColor = RGBColor(0x6b, 0x7a, 0x8f);
/// Failing units, limits exceeded.
pub(crate) const BRICK: RGBColor = RGBColor(0xb4, 0x23, 0x18);
/// Bars of the Pareto and histograms.
pub(crate) const INDIGO: RGBColor = RGBColor(0x2f, 0x4b, 0x7c);
/// A second accent (mean lines, cumulative share).
pub(crate) const OCHRE: RGBColor = RGBColor(0xb2, 0x6b, 0x00);
/// Colours of the channels in one unit's plot, in order.
pub(crate) const SERIES: [RGBColor; 4] = [
    RGBColor(0x2f, 0x4b, 0x7c),
    RGBColor(0x8a, 0x4f, 0x9e),
    RGBColor(0x1f, 0x7a, 0x6d),
    RGBColor(0xb2, 0x6b, 0x00),
];

/// A chart could not be drawn (a plotters error, in words).
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("cannot draw a chart: {0}")]
pub struct PlotError(pub String);

fn pe<E: std::fmt::Display>(e: E) -> PlotError {
    PlotError(e.to_string())
}

/// How a curve is drawn.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Pen {
    /// One of many: thin, translucent slate.
    Population,
    /// A failing unit among many: brick red.
    Failing,
    /// One of a unit's own curves: series colour `i`, solid; `faded` for earlier records.
    Series { i: usize, faded: bool },
}

/// A curve to draw: points (Hz, dB); NaN values break the line.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct PlotCurve {
    pub points: Vec<(f64, f64)>,
    pub pen: Pen,
}

/// A response chart: curves over log frequency with optional limit lines.
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct ResponseChart {
    /// Accessible title (the SVG `<title>`).
    pub title: String,
    /// Value axis label, with its unit.
    pub y_label: String,
    pub upper: Option<Vec<(f64, f64)>>,
    pub lower: Option<Vec<(f64, f64)>>,
    /// Min–max band of the whole population: (Hz, low dB, high dB).
    pub envelope: Vec<(f64, f64, f64)>,
    pub curves: Vec<PlotCurve>,
    /// Marked points (Hz, dB): worst margins.
    pub markers: Vec<(f64, f64)>,
    /// Pixel size.
    pub size: (u32, u32),
}

/// Labelled frequency ticks: 1, 2 and 5 of each decade inside the range.
fn freq_ticks(lo: f64, hi: f64) -> (Vec<f64>, Vec<f64>) {
    let (mut bold, mut light) = (Vec::new(), Vec::new());
    let mut decade = 10f64.powf(lo.log10().floor());
    while decade <= hi {
        for m in 1..10 {
            let f = decade * f64::from(m);
            if f < lo * 0.999 || f > hi * 1.001 {
                continue;
            }
            if matches!(m, 1 | 2 | 5) {
                bold.push(f);
            } else {
                light.push(f);
            }
        }
        decade *= 10.0;
    }
    (bold, light)
}

/// `20 Hz`, `500 Hz`, `1 kHz`, `2.5 kHz`, `20 kHz` (axis labels: short, no padding).
pub(crate) fn hz_label(f: f64) -> String {
    if f >= 1000.0 {
        let k = f / 1000.0;
        if (k - k.round()).abs() < 1e-9 {
            format!("{k:.0} kHz")
        } else {
            format!("{k:.1} kHz")
        }
    } else {
        format!("{f:.0} Hz")
    }
}

/// Counts: a label at whole numbers only.
fn integer_label(v: &f64) -> String {
    if (v - v.round()).abs() < 1e-9 {
        format!("{v:.0}")
    } else {
        String::new()
    }
}

/// The frequency axis: the data's range widened to the 1-2-5 values around it (20.24 Hz
/// to 19.78 kHz becomes 20 Hz to 20 kHz).
fn nice_freq_range(lo: f64, hi: f64) -> (f64, f64) {
    let down = |f: f64| {
        let d = 10f64.powf(f.log10().floor());
        [5.0, 2.0, 1.0]
            .into_iter()
            .map(|m| m * d)
            .find(|v| *v <= f * 1.000_001)
            .unwrap_or(d)
    };
    let up = |f: f64| {
        let d = 10f64.powf(f.log10().floor());
        [1.0, 2.0, 5.0, 10.0]
            .into_iter()
            .map(|m| m * d)
            .find(|v| *v >= f * 0.999_999)
            .unwrap_or(10.0 * d)
    };
    (down(lo), up(hi))
}

/// A value range with room around it, rounded out to whole `step`s.
fn padded(lo: f64, hi: f64, pad: f64, step: f64) -> (f64, f64) {
    let (lo, hi) = if lo.is_finite() && hi.is_finite() && hi > lo {
        (lo, hi)
    } else if lo.is_finite() {
        (lo - 1.0, lo + 1.0)
    } else {
        (-1.0, 1.0)
    };
    (
        ((lo - pad) / step).floor() * step,
        ((hi + pad) / step).ceil() * step,
    )
}

/// The `q` quantile (0…1) of finite values, by rank.
fn quantile(sorted: &[f64], q: f64) -> Option<f64> {
    if sorted.is_empty() {
        return None;
    }
    let i = ((sorted.len() - 1) as f64 * q).round() as usize;
    sorted.get(i).copied()
}

impl ResponseChart {
    fn ranges(&self) -> ((f64, f64), (f64, f64)) {
        let mut f_lo = f64::INFINITY;
        let mut f_hi = f64::NEG_INFINITY;
        let mut levels: Vec<f64> = Vec::new();
        let mut note_f = |f: f64| {
            if f.is_finite() && f > 0.0 {
                f_lo = f_lo.min(f);
                f_hi = f_hi.max(f);
            }
        };
        for c in &self.curves {
            for &(f, d) in &c.points {
                note_f(f);
                if d.is_finite() {
                    levels.push(d);
                }
            }
        }
        for &(f, lo, hi) in &self.envelope {
            note_f(f);
            levels.extend([lo, hi].into_iter().filter(|v| v.is_finite()));
        }
        let lines: Vec<f64> = [&self.upper, &self.lower]
            .into_iter()
            .flatten()
            .flatten()
            .map(|&(f, d)| {
                note_f(f);
                d
            })
            .collect();
        (f_lo, f_hi) = if f_lo < f_hi {
            nice_freq_range(f_lo, f_hi)
        } else {
            (20.0, 20000.0)
        };
        // The population decides the range by its 1st to 99th percentile, so one dead
        // channel does not flatten every other curve; the lines always fit.
        levels.sort_by(f64::total_cmp);
        let mut lo = quantile(&levels, 0.01).unwrap_or(f64::NAN);
        let mut hi = quantile(&levels, 0.99).unwrap_or(f64::NAN);
        for d in lines {
            lo = if lo.is_nan() { d } else { lo.min(d) };
            hi = if hi.is_nan() { d } else { hi.max(d) };
        }
        ((f_lo, f_hi), padded(lo, hi, 3.0, 5.0))
    }

    /// The chart as SVG text.
    pub fn to_svg(&self) -> Result<String, PlotError> {
        let ((f_lo, f_hi), (y_lo, y_hi)) = self.ranges();
        let clamp = |d: f64| d.clamp(y_lo, y_hi);
        let (bold, light) = freq_ticks(f_lo, f_hi);
        let mut svg = String::new();
        {
            let root = SVGBackend::with_string(&mut svg, self.size).into_drawing_area();
            root.fill(&WHITE).map_err(pe)?;
            let x = (f_lo..f_hi)
                .log_scale()
                .with_key_points(bold)
                .with_light_points(light);
            let mut chart = ChartBuilder::on(&root)
                .margin(10)
                .margin_right(18)
                .x_label_area_size(38)
                .y_label_area_size(54)
                .build_cartesian_2d(x, y_lo..y_hi)
                .map_err(pe)?;
            chart
                .configure_mesh()
                .x_label_formatter(&|f| hz_label(*f))
                .y_label_formatter(&|d| format!("{d:.0}"))
                .x_desc("frequency")
                .y_desc(self.y_label.as_str())
                .y_max_light_lines(1)
                .bold_line_style(GRID_BOLD)
                .light_line_style(GRID_LIGHT)
                .axis_style(INK)
                .label_style((FONT, 13).into_font().color(&INK))
                .axis_desc_style((FONT, 13).into_font().color(&INK))
                .draw()
                .map_err(pe)?;
            let wash = BRICK.mix(0.11).filled();
            if let Some(u) = &self.upper {
                let pts: Vec<(f64, f64)> = u.iter().map(|&(f, d)| (f, clamp(d))).collect();
                chart
                    .draw_series(AreaSeries::new(pts, y_hi, wash))
                    .map_err(pe)?;
            }
            if let Some(l) = &self.lower {
                let pts: Vec<(f64, f64)> = l.iter().map(|&(f, d)| (f, clamp(d))).collect();
                chart
                    .draw_series(AreaSeries::new(pts, y_lo, wash))
                    .map_err(pe)?;
            }
            if !self.envelope.is_empty() {
                let band: Vec<(f64, f64)> = self
                    .envelope
                    .iter()
                    .map(|&(f, _, hi)| (f, clamp(hi)))
                    .chain(self.envelope.iter().rev().map(|&(f, lo, _)| (f, clamp(lo))))
                    .collect();
                chart
                    .draw_series(std::iter::once(Polygon::new(
                        band,
                        SLATE.mix(0.16).filled(),
                    )))
                    .map_err(pe)?;
            }
            for c in &self.curves {
                let style = match c.pen {
                    Pen::Population => SLATE.mix(0.45).stroke_width(1),
                    Pen::Failing => BRICK.mix(0.9).stroke_width(1),
                    Pen::Series { i, faded } => {
                        let colour = SERIES[i % SERIES.len()];
                        if faded {
                            colour.mix(0.45).stroke_width(1)
                        } else {
                            colour.stroke_width(2)
                        }
                    }
                };
                for seg in segments(&c.points) {
                    let pts: Vec<(f64, f64)> = seg.iter().map(|&(f, d)| (f, clamp(d))).collect();
                    chart
                        .draw_series(std::iter::once(PathElement::new(pts, style)))
                        .map_err(pe)?;
                }
            }
            for line in [&self.upper, &self.lower].into_iter().flatten() {
                let pts: Vec<(f64, f64)> = line.iter().map(|&(f, d)| (f, clamp(d))).collect();
                chart
                    .draw_series(std::iter::once(PathElement::new(pts, INK.stroke_width(2))))
                    .map_err(pe)?;
            }
            chart
                .draw_series(
                    self.markers
                        .iter()
                        .map(|&(f, d)| Circle::new((f, clamp(d)), 5, BRICK.stroke_width(2))),
                )
                .map_err(pe)?;
            root.present().map_err(pe)?;
        }
        Ok(finish(svg, &self.title))
    }
}

/// Runs of finite points (a NaN level ends a run).
fn segments(points: &[(f64, f64)]) -> Vec<&[(f64, f64)]> {
    points
        .split(|(f, d)| !(f.is_finite() && d.is_finite()))
        .filter(|s| s.len() > 1)
        .collect()
}

/// A histogram of margins with the limit (0 dB margin) and the mean marked.
pub(crate) fn histogram_svg(
    title: &str,
    bins: &[(f64, f64, u64)],
    mean: f64,
    size: (u32, u32),
) -> Result<String, PlotError> {
    let x_lo = bins.first().map_or(-1.0, |b| b.0);
    let x_hi = bins.last().map_or(1.0, |b| b.0 + b.1);
    let y_hi = bins.iter().map(|b| b.2).max().unwrap_or(1).max(1) as f64 * 1.12;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        root.fill(&WHITE).map_err(pe)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(10)
            .margin_right(18)
            .x_label_area_size(38)
            .y_label_area_size(48)
            .build_cartesian_2d(x_lo..x_hi, 0.0..y_hi)
            .map_err(pe)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_desc("worst margin, dB (negative: outside the limits)")
            .y_desc("units × channels")
            .x_label_formatter(&|v| format!("{v:.1}"))
            .y_label_formatter(&integer_label)
            .bold_line_style(GRID_BOLD)
            .light_line_style(TRANSPARENT)
            .axis_style(INK)
            .label_style((FONT, 13).into_font().color(&INK))
            .axis_desc_style((FONT, 13).into_font().color(&INK))
            .draw()
            .map_err(pe)?;
        if x_lo < 0.0 {
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(x_lo, 0.0), (0.0_f64.min(x_hi), y_hi)],
                    BRICK.mix(0.09).filled(),
                )))
                .map_err(pe)?;
        }
        chart
            .draw_series(bins.iter().filter(|b| b.2 > 0).map(|&(left, w, n)| {
                let colour = if left + w <= 0.0 { BRICK } else { INDIGO };
                Rectangle::new([(left, 0.0), (left + w, n as f64)], colour.filled())
            }))
            .map_err(pe)?;
        for (x, colour) in [(0.0, BRICK), (mean, OCHRE)] {
            if x >= x_lo && x <= x_hi {
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        vec![(x, 0.0), (x, y_hi)],
                        colour.stroke_width(2),
                    )))
                    .map_err(pe)?;
            }
        }
        root.present().map_err(pe)?;
    }
    Ok(finish(svg, title))
}

/// The Pareto of failing checks: bars by count and the cumulative share as a line on a
/// right-hand percent axis.
pub(crate) fn pareto_svg(
    title: &str,
    bars: &[(String, u64, f64)],
    size: (u32, u32),
) -> Result<String, PlotError> {
    // A segmented axis over 0..k has k + 1 segments.
    let last = i32::try_from(bars.len().max(1) - 1).unwrap_or(i32::MAX);
    let y_hi = bars.iter().map(|b| b.1).max().unwrap_or(1).max(1) as f64 * 1.1;
    let label = |v: &SegmentValue<i32>| -> String {
        match v {
            SegmentValue::CenterOf(i) => usize::try_from(*i)
                .ok()
                .and_then(|i| bars.get(i))
                .map(|b| b.0.clone())
                .unwrap_or_default(),
            _ => String::new(),
        }
    };
    let at = |i: usize| i32::try_from(i).unwrap_or(i32::MAX);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        root.fill(&WHITE).map_err(pe)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(10)
            .x_label_area_size(38)
            .y_label_area_size(48)
            .right_y_label_area_size(48)
            .build_cartesian_2d((0..last).into_segmented(), 0.0..y_hi)
            .map_err(pe)?
            .set_secondary_coord((0..last).into_segmented(), 0.0..105.0);
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(bars.len().max(1))
            .x_label_formatter(&label)
            .y_label_formatter(&integer_label)
            .x_desc("check")
            .y_desc("records failing it")
            .bold_line_style(GRID_BOLD)
            .light_line_style(TRANSPARENT)
            .axis_style(INK)
            .label_style((FONT, 13).into_font().color(&INK))
            .axis_desc_style((FONT, 13).into_font().color(&INK))
            .draw()
            .map_err(pe)?;
        chart
            .configure_secondary_axes()
            .y_desc("cumulative %")
            .y_label_formatter(&|v| format!("{v:.0}"))
            .axis_style(INK)
            .label_style((FONT, 13).into_font().color(&INK))
            .axis_desc_style((FONT, 13).into_font().color(&INK))
            .draw()
            .map_err(pe)?;
        chart
            .draw_series(bars.iter().enumerate().map(|(i, b)| {
                let mut r = Rectangle::new(
                    [
                        (SegmentValue::Exact(at(i)), 0.0),
                        (SegmentValue::Exact(at(i + 1)), b.1 as f64),
                    ],
                    INDIGO.filled(),
                );
                r.set_margin(0, 0, 12, 12);
                r
            }))
            .map_err(pe)?;
        let line: Vec<(SegmentValue<i32>, f64)> = bars
            .iter()
            .enumerate()
            .map(|(i, b)| (SegmentValue::CenterOf(at(i)), b.2))
            .collect();
        chart
            .draw_secondary_series(std::iter::once(PathElement::new(
                line.clone(),
                OCHRE.stroke_width(2),
            )))
            .map_err(pe)?;
        chart
            .draw_secondary_series(line.into_iter().map(|p| Circle::new(p, 4, OCHRE.filled())))
            .map_err(pe)?;
        root.present().map_err(pe)?;
    }
    Ok(finish(svg, title))
}

/// Make plotters' standalone SVG fit for inlining in HTML: no namespace URL (an HTML
/// parser puts `<svg>` in the SVG namespace itself, and the page must name no address),
/// scalable, with an accessible title.
fn finish(svg: String, title: &str) -> String {
    let svg = svg.replacen(r#" xmlns="http://www.w3.org/2000/svg""#, "", 1);
    let head = format!(
        r#"<svg role="img" aria-label="{}" "#,
        super::html::escape(title)
    );
    let svg = svg.replacen("<svg ", &head, 1);
    match svg.find('>') {
        Some(i) => format!(
            "{}<title>{}</title>{}",
            &svg[..=i],
            super::html::escape(title),
            &svg[i + 1..]
        ),
        None => svg,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_one_two_five_per_decade() {
        let (bold, light) = freq_ticks(20.0, 20000.0);
        assert_eq!(
            bold,
            [20.0, 50.0, 100.0, 200.0, 500.0, 1e3, 2e3, 5e3, 1e4, 2e4]
        );
        assert!(light.contains(&30.0) && light.contains(&9000.0));
        assert_eq!(hz_label(2000.0), "2 kHz");
        assert_eq!(nice_freq_range(20.24, 19783.0), (20.0, 20000.0));
        assert_eq!(nice_freq_range(100.0, 4100.0), (100.0, 5000.0));
        assert_eq!(hz_label(50.0), "50 Hz");
    }

    #[test]
    fn charts_name_no_address_and_carry_a_title() {
        let chart = ResponseChart {
            title: "fr <left>".into(),
            y_label: "dB".into(),
            upper: Some(vec![(100.0, 5.0), (10000.0, 5.0)]),
            lower: Some(vec![(100.0, -5.0), (10000.0, -5.0)]),
            curves: vec![PlotCurve {
                points: vec![
                    (100.0, 0.0),
                    (1000.0, f64::NAN),
                    (2000.0, 1.0),
                    (9000.0, 2.0),
                ],
                pen: Pen::Series { i: 0, faded: false },
            }],
            markers: vec![(2000.0, 1.0)],
            size: (600, 300),
            ..Default::default()
        };
        let svg = chart.to_svg().unwrap();
        assert!(!svg.contains("http"), "{svg}");
        assert!(svg.starts_with("<svg role=\"img\""));
        assert!(svg.contains("<title>fr &lt;left&gt;</title>"));
        assert!(svg.contains("1 kHz"));
    }
}
