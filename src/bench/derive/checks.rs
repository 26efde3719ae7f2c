//! One check of the plan derived from the golden units: its new limits, its lines' CSV
//! files, its statistics and capability, and the edit of its plan item.
//!
//! Which checks: `response`, `sensitivity`, `thd`, `harmonic`, `rub_buzz` and `balance`
//! (with `--check`, only those named). `polarity` and `listening` have nothing to derive
//! and are kept as they are. A check applying to several channels gets one limit from the
//! values of all of them pooled (one unit gives one value per channel), unless split per
//! channel (`--per-channel`: one check `<id>-<channel>` per channel; a balance compares two
//! channels and is never split).
//!
//! The scales, so that every limit is a distance from the golden mean in dB:
//! sensitivity, harmonic, rub and buzz and balance as their checks read them; THD as
//! `20·lg(THD / 100 %)` (its `max_percent` is written back in %, rounded up to three
//! significant digits). Cp and Cpk are taken on these scales, against the limits as
//! written.

use super::gather::MeasuredUnit;
use super::plan_text::{yaml_string, CheckCopy};
use super::values::{balance_value, channel_value, judged_curve};
use crate::checks::{check_channels, format_band, FREQ_REL_TOL};
use crate::limits::curve::{curve_capability, curve_stats, envelope, CurveStats, Envelope};
use crate::limits::scalar::{derive_scalar, Clamp, Sides};
use crate::limits::stats::capability;
use crate::limits::thin::{level_at, thin, Side, ThinnedLine};
use crate::limits::Settings;
use crate::plan::{CheckKind, CheckSpec, LimitLine, Plan};
use serde_json::json;

/// Absolute floors of one-sided upper limits (`--floor KIND=VALUE`).
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize)]
pub struct Floors {
    /// THD, %.
    pub thd_percent: Option<f64>,
    /// A harmonic, dB re fundamental.
    pub harmonic_db: Option<f64>,
    /// Rub and buzz, dB re fundamental.
    pub rub_buzz_db: Option<f64>,
    /// Balance, dB.
    pub balance_db: Option<f64>,
}

/// Where the lines and checks of a derivation are named and bounded.
pub struct Context<'a> {
    /// The old plan.
    pub plan: &'a Plan,
    /// The golden units.
    pub units: &'a [MeasuredUnit],
    /// The derivation's choices.
    pub settings: &'a Settings,
    /// Floors of upper limits.
    pub floors: &'a Floors,
    /// Split multi-channel checks per channel.
    pub per_channel: bool,
    /// The new revision (names the CSV files).
    pub revision: u32,
}

/// A derived line, to be written.
#[derive(Debug, Clone)]
pub struct LineFile {
    /// The path written in the plan (relative to it).
    pub rel_path: String,
    /// The CSV text.
    pub csv: String,
    /// The thinned line.
    pub line: ThinnedLine,
}

/// The curves behind a derived response check (for the preview and for checking).
#[derive(Debug, Clone)]
pub struct CurveData {
    /// The golden curves as the check judges them, one per unit and channel.
    pub golden_db: Vec<Vec<f64>>,
    /// Their mean and spread per frequency.
    pub stats: CurveStats,
    /// The unthinned lines.
    pub envelope: Envelope,
    /// The old plan's lines, (Hz, dB).
    pub old_upper: Option<Vec<(f64, f64)>>,
    /// See `old_upper`.
    pub old_lower: Option<Vec<(f64, f64)>>,
}

/// One derived check of the new plan.
#[derive(Debug, Clone)]
pub struct DerivedCheck {
    /// What the report says about it (judging counts filled in later).
    pub report: super::report::CheckReport,
    /// Its item's edit.
    pub copy: CheckCopy,
    /// Its lines' files (response checks).
    pub files: Vec<LineFile>,
    /// Its curves (response checks).
    pub curve: Option<CurveData>,
}

/// Derive `spec` (module doc): `Ok(derived)` (one per split channel), or `Err(reason)` when
/// the check is kept as it is.
pub fn derive_check(ctx: &Context, spec: &CheckSpec) -> Result<Vec<DerivedCheck>, String> {
    let channels = check_channels(ctx.plan, spec);
    let split =
        ctx.per_channel && channels.len() > 1 && !matches!(spec.kind, CheckKind::Balance { .. });
    let targets: Vec<(String, Vec<String>)> = if split {
        channels
            .iter()
            .map(|c| (format!("{}-{c}", spec.id), vec![c.clone()]))
            .collect()
    } else {
        vec![(spec.id.clone(), channels.clone())]
    };
    let mut out = Vec::new();
    for (id, chans) in targets {
        let mut d = match &spec.kind {
            CheckKind::Response { .. } => derive_response(ctx, spec, &id, &chans)?,
            CheckKind::Polarity { .. } => {
                return Err("a polarity check has no limit to derive".into())
            }
            CheckKind::Listening { .. } => {
                return Err("a listening step is judged by the operator".into())
            }
            _ => derive_scalar_check(ctx, spec, &id, &chans)?,
        };
        if split {
            d.copy.id = Some(id.clone());
            d.copy.channel = chans.first().cloned();
        }
        out.push(d);
    }
    Ok(out)
}

/// What a report row of a check holds before the units are judged.
fn report_row(
    spec: &CheckSpec,
    id: &str,
    channels: &[String],
    quantity: String,
    n_values: usize,
    n_units: usize,
) -> super::report::CheckReport {
    super::report::CheckReport {
        id: id.to_string(),
        from_id: spec.id.clone(),
        kind: spec.kind.name().to_string(),
        channels: channels.to_vec(),
        quantity,
        n_units,
        n_values,
        ..Default::default()
    }
}

fn derive_response(
    ctx: &Context,
    spec: &CheckSpec,
    id: &str,
    channels: &[String],
) -> Result<DerivedCheck, String> {
    let CheckKind::Response {
        upper,
        lower,
        smoothing_fraction,
        normalize,
    } = &spec.kind
    else {
        unreachable!("called for response checks");
    };
    let mut golden = Vec::new();
    for u in ctx.units {
        for c in channels {
            let m = u
                .channel(c)
                .ok_or_else(|| format!("golden unit {} has no channel {c}", u.serial))?;
            golden.push(
                judged_curve(m, *smoothing_fraction, *normalize)
                    .map_err(|e| format!("golden unit {}: {e}", u.serial))?,
            );
        }
    }
    let freqs = ctx.units[0].channels[0].frequencies_hz.clone();
    let stats = curve_stats(&freqs, &golden).map_err(|e| e.to_string())?;
    let env = envelope(&stats, ctx.settings);
    let sweep = (ctx.plan.stimulus.start_hz, ctx.plan.stimulus.stop_hz);
    let mut files = Vec::new();
    let mut copy = CheckCopy::default();
    let mut lines_report = Vec::new();
    for (side, old, values) in [
        (Side::Upper, upper, &env.upper_db),
        (Side::Lower, lower, &env.lower_db),
    ] {
        let Some(old) = old else { continue };
        let (lo, hi) = old.span_hz().ok_or("a limit line without points")?;
        let idx: Vec<usize> = (0..freqs.len())
            .filter(|&i| {
                freqs[i] >= lo * (1.0 - FREQ_REL_TOL) && freqs[i] <= hi * (1.0 + FREQ_REL_TOL)
            })
            .collect();
        let f: Vec<f64> = idx.iter().map(|&i| freqs[i]).collect();
        let v: Vec<f64> = idx.iter().map(|&i| values[i]).collect();
        let line = thin(&f, &v, side, ctx.settings.max_error_db, sweep)
            .map_err(|e| format!("{} line: {e}", side.word()))?;
        let rel_path = format!(
            "limits/{}-r{}-{id}-{}.csv",
            ctx.plan.id,
            ctx.revision,
            side.word()
        );
        let csv = csv_text(ctx, spec, id, channels, side, &line, golden.len());
        lines_report.push(super::report::LineReport {
            side,
            file: rel_path.clone(),
            from_hz: f[0],
            to_hz: f[f.len() - 1],
            n_points: line.points.len(),
            n_unthinned: line.n_unthinned,
            max_error_db: line.max_error_db,
            worst_error_db: line.worst_error_db,
        });
        copy.values
            .push((side.word().to_string(), yaml_string(&rel_path)));
        files.push(LineFile {
            rel_path,
            csv,
            line,
        });
    }
    let find = |s: Side| {
        files
            .iter()
            .find(|l| l.line.side == s)
            .map(|l| &l.line.points)
    };
    let (up, lo) = (find(Side::Upper), find(Side::Lower));
    let cap = curve_capability(
        &stats,
        |f| up.and_then(|p| level_at(p, f)),
        |f| lo.and_then(|p| level_at(p, f)),
    );
    let mut report = report_row(
        spec,
        id,
        channels,
        format!(
            "response as the check judges it{}{}, dB",
            smoothing_fraction.map_or(String::new(), |k| format!(", 1/{k}-octave smoothed")),
            if normalize.is_some() {
                ", normalised"
            } else {
                ""
            }
        ),
        golden.len(),
        ctx.units.len(),
    );
    report.old_limits = json!({
        "upper": upper.as_ref().map(|l| l.origin.clone()),
        "lower": lower.as_ref().map(|l| l.origin.clone()),
    });
    report.new_limits = json!({
        "upper": files.iter().find(|l| l.line.side == Side::Upper).map(|l| l.rel_path.clone()),
        "lower": files.iter().find(|l| l.line.side == Side::Lower).map(|l| l.rel_path.clone()),
    });
    report.cp = cap.cp_min;
    report.cp_at_hz = cap.cp_min_at_hz;
    report.cpk = cap.cpk_min;
    report.cpk_at_hz = cap.cpk_min_at_hz;
    report.lines = lines_report;
    report.n_at_min_half_width = Some(env.n_at_min);
    report.n_at_max_half_width = Some(env.n_at_max);
    report.n_widened_to_golden = Some(env.n_widened_to_golden);
    report.curve = Some(super::report::CurveReport {
        freqs_hz: stats.freqs_hz.clone(),
        mean_db: stats.mean_db.clone(),
        sd_db: stats.sd_db.clone(),
        upper_half_width_db: env.upper_half_width_db.clone(),
        lower_half_width_db: env.lower_half_width_db.clone(),
    });
    let points = |l: &Option<LimitLine>| l.as_ref().map(|l| l.points.clone());
    Ok(DerivedCheck {
        report,
        copy,
        files,
        curve: Some(CurveData {
            golden_db: golden,
            stats,
            envelope: env,
            old_upper: points(upper),
            old_lower: points(lower),
        }),
    })
}

fn csv_text(
    ctx: &Context,
    spec: &CheckSpec,
    id: &str,
    channels: &[String],
    side: Side,
    line: &ThinnedLine,
    n_curves: usize,
) -> String {
    let s = ctx.settings;
    let sign = match side {
        Side::Upper => "+",
        Side::Lower => "-",
    };
    let smoothing = match &spec.kind {
        CheckKind::Response {
            smoothing_fraction: Some(k),
            ..
        } => format!(", 1/{k}-octave smoothed as the check smooths"),
        _ => String::new(),
    };
    let mut spread = s.smoothing_fraction.map_or(String::new(), |n| {
        format!(" (σ smoothed over 1/{n} octave)")
    });
    if s.cover_golden {
        spread.push_str(" or out to the farthest golden curve");
    }
    let mut t = format!(
        "# {} revision {}: check {id} ({}), {} limit, dB{smoothing}.\n\
         # Derived by tragus limits derive from {} golden units ({n_curves} curves): their \
         mean {sign} clamp({}·σ, {} dB, {} dB){spread},\n\
         # thinned from {} to {} points, within {} dB of the derived line and only ever wider \
         (at most {:.3} dB here).\n\
         # Columns: frequency in Hz, level in dB; interpolated linearly in log-frequency.\n\
         hz,db\n",
        ctx.plan.id,
        ctx.revision,
        channels.join(", "),
        side.word().to_uppercase(),
        ctx.units.len(),
        s.k,
        s.min_half_width_db,
        s.max_half_width_db,
        line.n_unthinned,
        line.points.len(),
        s.max_error_db,
        line.worst_error_db,
    );
    for (f, v) in &line.fields {
        t.push_str(f);
        t.push(',');
        t.push_str(v);
        t.push('\n');
    }
    t
}

fn derive_scalar_check(
    ctx: &Context,
    spec: &CheckSpec,
    id: &str,
    channels: &[String],
) -> Result<DerivedCheck, String> {
    let mut values = Vec::new();
    let quantity;
    let (sides, floor_db) = match &spec.kind {
        CheckKind::Sensitivity { .. } => (Sides::Both, None),
        CheckKind::Thd { .. } => (
            Sides::Upper,
            ctx.floors.thd_percent.map(|p| 20.0 * (p / 100.0).log10()),
        ),
        CheckKind::Harmonic { .. } => (Sides::Upper, ctx.floors.harmonic_db),
        CheckKind::RubBuzz { .. } => (Sides::Upper, ctx.floors.rub_buzz_db),
        CheckKind::Balance { .. } => (Sides::Upper, ctx.floors.balance_db),
        other => return Err(format!("nothing to derive for a {} check", other.name())),
    };
    if let CheckKind::Balance {
        band,
        smoothing_fraction,
        ..
    } = &spec.kind
    {
        let [a, b] = channels else {
            return Err(format!(
                "a balance needs two channels, the check has {}",
                channels.len()
            ));
        };
        quantity = format!(
            "largest |{a} − {b}| over {}{}, dB",
            format_band(*band),
            smoothing_fraction.map_or(String::new(), |k| format!(", 1/{k}-octave smoothed"))
        );
        for u in ctx.units {
            let (ma, mb) = (u.channel(a), u.channel(b));
            let (Some(ma), Some(mb)) = (ma, mb) else {
                return Err(format!("golden unit {} lacks a channel", u.serial));
            };
            values.push(
                balance_value(ma, mb, *band, *smoothing_fraction)
                    .map_err(|e| format!("golden unit {}: {e}", u.serial))?,
            );
        }
    } else {
        quantity = scalar_quantity(&spec.kind);
        for u in ctx.units {
            for c in channels {
                let m = u
                    .channel(c)
                    .ok_or_else(|| format!("golden unit {} has no channel {c}", u.serial))?;
                let v = channel_value(&spec.kind, m, ctx.plan.nominal_impedance_ohm)
                    .map_err(|e| format!("golden unit {}: {e}", u.serial))?
                    .ok_or("no value to derive")?;
                values.push(v);
            }
        }
    }
    let lim = derive_scalar(&values, sides, ctx.settings, floor_db).map_err(|e| e.to_string())?;
    let mut copy = CheckCopy::default();
    let (usl_db, old, new) = match &spec.kind {
        CheckKind::Sensitivity { min_db, max_db, .. } => {
            let lsl = lim.lsl_db.expect("two-sided");
            copy.values.push(("min_db".into(), number(lsl)));
            copy.values.push(("max_db".into(), number(lim.usl_db)));
            (
                lim.usl_db,
                json!({"min_db": min_db, "max_db": max_db}),
                json!({"min_db": lsl, "max_db": lim.usl_db}),
            )
        }
        CheckKind::Thd { max_percent, .. } => {
            let pct = thd_percent_up(lim.usl_db);
            copy.values.push(("max_percent".into(), number(pct)));
            (
                20.0 * (pct / 100.0).log10(),
                json!({"max_percent": max_percent}),
                json!({"max_percent": pct}),
            )
        }
        CheckKind::Harmonic { max_db, .. } | CheckKind::RubBuzz { max_db, .. } => {
            // Above the fundamental is no distortion limit at all (and a plan refuses it).
            let usl = lim.usl_db.min(0.0);
            copy.values.push(("max_db".into(), number(usl)));
            (usl, json!({"max_db": max_db}), json!({"max_db": usl}))
        }
        CheckKind::Balance { max_diff_db, .. } => {
            let usl = lim.usl_db.max(0.01);
            copy.values.push(("max_diff_db".into(), number(usl)));
            (
                usl,
                json!({"max_diff_db": max_diff_db}),
                json!({"max_diff_db": usl}),
            )
        }
        _ => unreachable!("kinds filtered above"),
    };
    let cap = capability(lim.golden.mean, lim.golden.sd, lim.lsl_db, Some(usl_db));
    let mut report = report_row(spec, id, channels, quantity, values.len(), ctx.units.len());
    report.old_limits = old;
    report.new_limits = new;
    report.golden = Some(lim.golden);
    report.values_db = values;
    report.lsl_db = lim.lsl_db;
    report.usl_db = Some(usl_db);
    report.clamp = Some(lim.clamp);
    report.cp = cap.cp;
    report.cpk = cap.cpk;
    Ok(DerivedCheck {
        report,
        copy,
        files: Vec::new(),
        curve: None,
    })
}

fn scalar_quantity(kind: &CheckKind) -> String {
    match kind {
        CheckKind::Sensitivity { band, unit, .. } => format!(
            "mean level over {} ({}), dB",
            format_band(*band),
            unit.name()
        ),
        CheckKind::Thd { band, .. } => format!(
            "largest THD over {}, as 20·lg(THD/100 %), dB",
            format_band(*band)
        ),
        CheckKind::Harmonic { order, band, .. } => {
            format!(
                "largest HD{order} over {}, dB re fundamental",
                format_band(*band)
            )
        }
        CheckKind::RubBuzz { band, .. } => format!(
            "largest rub-and-buzz indicator over {}, dB re fundamental",
            format_band(*band)
        ),
        other => other.name().to_string(),
    }
}

/// A THD limit on the dB scale as a percentage rounded up to three significant digits,
/// within (0, 100] %.
fn thd_percent_up(usl_db: f64) -> f64 {
    let p = 100.0 * 10f64.powf(usl_db / 20.0);
    let digits = 2 - p.log10().floor() as i32;
    let scale = 10f64.powi(digits);
    let r = (p * scale).ceil() / scale;
    let r: f64 = format!("{r:.prec$}", prec = digits.max(0) as usize)
        .parse()
        .unwrap_or(r);
    r.min(100.0)
}

/// A limit as YAML text: at most the decimals it has, no trailing zeros.
pub fn number(v: f64) -> String {
    let mut s = format!("{v:.6}");
    if s.contains('.') {
        s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    }
    if s == "-0" {
        "0".into()
    } else {
        s
    }
}

/// Whether the limit was cut, in words for the report (`None` when not clamped).
pub fn clamp_words(c: Clamp) -> Option<&'static str> {
    match c {
        Clamp::None => None,
        Clamp::MinHalfWidth => Some("raised to the minimum half-width"),
        Clamp::MaxHalfWidth => Some("cut to the maximum half-width"),
        Clamp::Floor => Some("raised to its floor"),
        Clamp::Golden => Some("widened to take in the farthest golden value"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn thd_rounds_up_to_three_digits() {
        // 20·lg(0.004523) → 0.4523 % → 0.453 %.
        let db = 20.0 * (0.004523f64).log10();
        assert_eq!(thd_percent_up(db), 0.453);
        assert_eq!(thd_percent_up(20.0 * (0.012341f64).log10()), 1.24);
        assert_eq!(thd_percent_up(10.0), 100.0);
    }

    #[test]
    fn numbers_are_short() {
        assert_eq!(number(-9.5), "-9.5");
        assert_eq!(number(-7.0), "-7");
        assert_eq!(number(0.453), "0.453");
    }
}
