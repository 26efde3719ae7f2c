//! The note at the head of the new plan: how its limits were made, in words.

use super::checks::DerivedCheck;
use super::report::{KeptCheck, SetReport};
use super::{DeriveOptions, REPORT_FILE};
use crate::limits::Method;
use crate::plan::Plan;

/// The comment block of the new plan: how its limits were made.
pub(super) fn note_lines(
    o: &DeriveOptions,
    plan: &Plan,
    revision: u32,
    created: &str,
    golden: &SetReport,
    derived: &[DerivedCheck],
    kept: &[KeptCheck],
) -> Vec<String> {
    let s = &o.settings;
    let file = o
        .plan
        .file_name()
        .map_or(String::new(), |f| f.to_string_lossy().into_owned());
    let chosen = match (&golden.serials_file, &golden.since, &golden.until) {
        (Some(f), _, _) => format!("the serials listed in {f}"),
        (None, a, b) => format!(
            "every unit passing in its latest record{}{}",
            a.as_ref().map_or(String::new(), |a| format!(" from {a}")),
            b.as_ref().map_or(String::new(), |b| format!(" until {b}"))
        ),
    };
    let half = format!(
        "clamp({}·σ, {} dB, {} dB)",
        s.k, s.min_half_width_db, s.max_half_width_db
    );
    let scalar = match s.method {
        Method::Sigma => format!("golden mean ± {half}"),
        Method::Quantile(q) => format!(
            "the golden {q}-quantile (and {:.4}-quantile below), {} to {} dB from the mean",
            1.0 - q,
            s.min_half_width_db,
            s.max_half_width_db
        ),
    };
    let mut floors = Vec::new();
    let f = &o.floors;
    if let Some(v) = f.thd_percent {
        floors.push(format!("thd {v} %"));
    }
    for (n, v) in [
        ("harmonic", f.harmonic_db),
        ("rub_buzz", f.rub_buzz_db),
        ("balance", f.balance_db),
    ] {
        if let Some(v) = v {
            floors.push(format!("{n} {v} dB"));
        }
    }
    let ids: Vec<&str> = derived.iter().map(|d| d.report.id.as_str()).collect();
    let mut lines = vec![
        format!(
            "Revision {revision} of plan {}, made from revision {} ({file}, sha256 {}) on {} by \
             tragus {}.",
            plan.id,
            plan.revision,
            &plan.sha256[..16.min(plan.sha256.len())],
            &created[..10.min(created.len())],
            crate::BUILD
        ),
        format!(
            "Golden units: {} ({chosen}), measured {} to {}, from the store {}.",
            golden.n_units,
            golden.first_time_utc.as_deref().unwrap_or("?"),
            golden.last_time_utc.as_deref().unwrap_or("?"),
            o.store.display()
        ),
        format!(
            "Response lines: golden mean ± {half} per frequency of the curves as each check \
             judges them{};",
            s.smoothing_fraction
                .map_or(String::new(), |n| format!(", σ smoothed over 1/{n} octave"))
        ),
        format!(
            "  thinned to a few points within {} dB of that line, only ever wider.",
            s.max_error_db
        ),
        if s.cover_golden && s.method == Method::Sigma {
            "Every limit reaches at least the farthest golden value on its side (within the \
             maximum half-width)."
                .to_string()
        } else if s.cover_golden {
            "Response lines reach at least the farthest golden curve (within the maximum \
             half-width); scalar limits at the quantile may leave golden values out."
                .to_string()
        } else {
            "Limits are not widened to take in golden values beyond them (--no-cover).".to_string()
        },
        format!(
            "Scalar limits: {scalar}{}.",
            if floors.is_empty() {
                String::new()
            } else {
                format!("; floors {}", floors.join(", "))
            }
        ),
        format!(
            "Derived: {}{}.",
            ids.join(", "),
            if o.per_channel {
                " (split per channel)"
            } else {
                " (one limit for all channels of a check)"
            }
        ),
    ];
    if !kept.is_empty() {
        lines.push(format!(
            "Kept as they were: {}.",
            kept.iter()
                .map(|k| format!("{} ({})", k.id, k.reason))
                .collect::<Vec<_>>()
                .join(", ")
        ));
    }
    lines.push(format!(
        "Comments beside the checks below were written for earlier limits; {REPORT_FILE} has \
         the numbers."
    ));
    lines
}
