//! `tragus limits derive`: limits from golden units, as a library function.
//!
//! [`derive`] chooses the golden units from a store ([`select`]), measures them again from
//! their captures ([`gather`]), derives each check's limits ([`checks`], the statistics of
//! [`crate::limits`]), writes the limit CSVs and the new plan revision ([`plan_text`]),
//! loads that plan back and judges every golden (and validation) unit with it through the
//! real checks, and writes the report ([`report`], JSON) and a preview page ([`preview`]).
//! Nothing here prints; the command line shows the result.
//!
//! Files written into the output directory:
//!
//! - `<plan file stem>-r<N>.yaml`: the new plan, revision N = old + 1;
//! - `limits/<plan id>-r<N>-<check id>-upper.csv` / `-lower.csv`: its limit lines;
//! - [`REPORT_FILE`] and [`PREVIEW_FILE`].
//!
//! An existing file is never overwritten without `force`.

pub mod checks;
pub mod gather;
mod note;
pub mod plan_text;
pub mod preview;
pub mod report;
pub mod select;
pub mod values;
mod yaml_pos;

use super::{prepare, BenchError};
use crate::limits::{Settings, MIN_GOLDEN_UNITS};
use crate::plan::Plan;
use crate::store::Store;
use crate::Verdict;
use checks::{derive_check, Context, DerivedCheck, Floors};
use gather::MeasuredUnit;
use plan_text::{CheckEdit, Rewrite};
use report::{Counts, DeriveReport, KeptCheck, LeftOut, PlanRef, SetReport, UnitReport};
use select::{choose, SetKind, UnitSelection};
use std::path::{Path, PathBuf};

/// Name of the report written beside the new plan.
pub const REPORT_FILE: &str = "derive-report.json";
/// Name of the preview page written beside the new plan.
pub const PREVIEW_FILE: &str = "derive-preview.html";

/// What to derive, from what, to where.
#[derive(Debug, Clone)]
pub struct DeriveOptions {
    /// The store holding the golden units' records.
    pub store: PathBuf,
    /// The plan whose limits are derived.
    pub plan: PathBuf,
    /// Where the new plan and its files go (created when missing).
    pub out: PathBuf,
    /// Which units are golden.
    pub golden: UnitSelection,
    /// Units to try the new limits on.
    pub validation: Option<UnitSelection>,
    /// The statistics' choices.
    pub settings: Settings,
    /// Floors of one-sided limits.
    pub floors: Floors,
    /// One check per channel.
    pub per_channel: bool,
    /// Only these check ids (all derivable checks when empty).
    pub only: Vec<String>,
    /// Overwrite existing output files.
    pub force: bool,
}

/// A finished derivation.
#[derive(Debug, Clone)]
pub struct Derivation {
    /// The report (also written as JSON).
    pub report: DeriveReport,
    /// The new plan file.
    pub plan_path: PathBuf,
    /// The report file.
    pub report_path: PathBuf,
    /// The preview page.
    pub preview_path: PathBuf,
    /// The derived checks with their curves and lines.
    pub checks: Vec<DerivedCheck>,
    /// The golden units as measured.
    pub golden: Vec<MeasuredUnit>,
    /// The validation units as measured.
    pub validation: Vec<MeasuredUnit>,
}

impl Derivation {
    /// True when the new plan passes every golden unit.
    pub fn golden_all_pass(&self) -> bool {
        self.report.golden.n_pass == self.report.golden.n_units
    }
}

/// Derive the limits (module doc).
pub fn derive(o: &DeriveOptions) -> Result<Derivation, BenchError> {
    check_options(o)?;
    let (plan, reads) = crate::config::recording_reads(|| prepare::load(&o.plan));
    let plan = plan?;
    for id in &o.only {
        if !plan.checks.iter().any(|c| &c.id == id) {
            return Err(BenchError::bad_input(format!(
                "--check {id}: expected a check id of {} ({}), found `{id}`",
                o.plan.display(),
                plan.checks
                    .iter()
                    .map(|c| c.id.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            )));
        }
    }
    let text = std::fs::read_to_string(&o.plan)
        .map_err(|e| BenchError::bad_input(format!("{}: {e}", o.plan.display())))?;
    let stimulus = crate::dsp::sweep::Stimulus::from_plan(&plan)
        .map_err(|e| BenchError::BadInput(e.into()))?;
    let analyzer = crate::analysis::Analyzer::new(&plan, &stimulus)
        .map_err(|e| BenchError::BadInput(e.into()))?;
    let grid = analyzer.grid_hz().to_vec();

    if !o.store.join(crate::store::DB_FILE).is_file() {
        return Err(BenchError::bad_input(format!(
            "{}: expected a tragus store (a directory holding {}), found none",
            o.store.display(),
            crate::store::DB_FILE
        )));
    }
    let store = Store::open(&o.store)
        .map_err(|e| BenchError::bad_input(format!("{}: {e}", o.store.display())))?;
    let golden_set = choose(&store, &plan.id, &o.golden, SetKind::Golden)?;
    if golden_set.records.len() < MIN_GOLDEN_UNITS {
        return Err(BenchError::bad_input(format!(
            "expected at least {MIN_GOLDEN_UNITS} golden units of plan {}, found {}{}: a \
             spread from fewer units says more about which units were picked than about the \
             line",
            plan.id,
            golden_set.records.len(),
            if golden_set.left_out.is_empty() {
                String::new()
            } else {
                format!(" ({} left out as failing)", golden_set.left_out.len())
            }
        )));
    }
    let validation_set = match &o.validation {
        Some(sel) => Some(choose(&store, &plan.id, sel, SetKind::Validation)?),
        None => None,
    };
    drop(store);
    let golden = gather::measure(&o.store, &golden_set.records, &plan, &grid)?;
    let validation = match &validation_set {
        Some(v) => gather::measure(&o.store, &v.records, &plan, &grid)?,
        None => Vec::new(),
    };

    let revision = plan.revision + 1;
    let ctx = Context {
        plan: &plan,
        units: &golden,
        settings: &o.settings,
        floors: &o.floors,
        per_channel: o.per_channel,
        revision,
    };
    let mut derived: Vec<DerivedCheck> = Vec::new();
    let mut edits: Vec<CheckEdit> = Vec::new();
    let mut kept = Vec::new();
    for spec in &plan.checks {
        let keep = |reason: String| KeptCheck {
            id: spec.id.clone(),
            kind: spec.kind.name().to_string(),
            reason,
        };
        if !o.only.is_empty() && !o.only.contains(&spec.id) {
            kept.push(keep("not named by --check".into()));
            continue;
        }
        match derive_check(&ctx, spec) {
            Ok(ds) => {
                edits.push(CheckEdit {
                    id: spec.id.clone(),
                    copies: ds.iter().map(|d| d.copy.clone()).collect(),
                });
                derived.extend(ds);
            }
            Err(reason) => kept.push(keep(reason)),
        }
    }
    if derived.is_empty() {
        return Err(BenchError::bad_input(format!(
            "{}: no check to derive ({})",
            o.plan.display(),
            kept.iter()
                .map(|k| format!("{}: {}", k.id, k.reason))
                .collect::<Vec<_>>()
                .join("; ")
        )));
    }

    // The output files, refused before anything is written when one exists.
    std::fs::create_dir_all(o.out.join("limits"))
        .map_err(|e| BenchError::bad_input(format!("{}: cannot create: {e}", o.out.display())))?;
    let out_dir = o
        .out
        .canonicalize()
        .map_err(|e| BenchError::bad_input(format!("{}: {e}", o.out.display())))?;
    let stem = o
        .plan
        .file_stem()
        .map_or("plan".into(), |s| s.to_string_lossy().into_owned());
    let plan_name = format!("{stem}-r{revision}.yaml");
    let mut names: Vec<String> = vec![plan_name.clone()];
    names.extend(
        derived
            .iter()
            .flat_map(|d| d.files.iter().map(|f| f.rel_path.clone())),
    );
    names.push(REPORT_FILE.into());
    names.push(PREVIEW_FILE.into());
    if !o.force {
        let existing: Vec<String> = names
            .iter()
            .filter(|n| out_dir.join(n).exists())
            .cloned()
            .collect();
        if !existing.is_empty() {
            return Err(BenchError::bad_input(format!(
                "{}: expected new files, found {} already there (give --force to overwrite)",
                o.out.display(),
                existing.join(", ")
            )));
        }
    }
    for d in &derived {
        for f in &d.files {
            write_file(&out_dir.join(&f.rel_path), f.csv.as_bytes())?;
        }
    }
    let read_files: Vec<PathBuf> = reads
        .iter()
        .filter_map(|(p, _)| p.canonicalize().ok())
        .collect();
    let plan_dir = o
        .plan
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."))
        .canonicalize()
        .map_err(|e| BenchError::bad_input(format!("{}: {e}", o.plan.display())))?;
    let created = crate::result::now_utc_rfc3339();
    let golden_report = set_report(&golden, &o.golden, &golden_set.left_out);
    let note = note::note_lines(
        o,
        &plan,
        revision,
        &created,
        &golden_report,
        &derived,
        &kept,
    );
    let label = o.plan.display().to_string();
    let new_text = plan_text::rewrite(&Rewrite {
        text: &text,
        label: &label,
        plan_dir: &plan_dir,
        out_dir: &out_dir,
        read_files: &read_files,
        revision,
        edits: &edits,
        note: &note,
    })
    .map_err(|e| BenchError::bad_input(format!("{label}: cannot write the new revision: {e}")))?;
    let plan_path = out_dir.join(&plan_name);
    write_file(&plan_path, new_text.as_bytes())?;
    let new_plan = prepare::load(&plan_path).map_err(|e| {
        BenchError::bad_input(format!(
            "{}: the new plan does not load (a fault of the derivation; the files are left \
             for inspection): {e}",
            plan_path.display()
        ))
    })?;

    let mut report = DeriveReport {
        tool: crate::result::ToolInfo::default(),
        created_utc: created,
        store: o.store.display().to_string(),
        plan: PlanRef {
            path: o.plan.display().to_string(),
            id: plan.id.clone(),
            revision: plan.revision,
            sha256: plan.sha256.clone(),
        },
        new_plan: PlanRef {
            path: plan_path.display().to_string(),
            id: new_plan.id.clone(),
            revision: new_plan.revision,
            sha256: new_plan.sha256.clone(),
        },
        settings: o.settings.clone(),
        floors: o.floors,
        per_channel: o.per_channel,
        golden: golden_report,
        validation: validation_set
            .as_ref()
            .zip(o.validation.as_ref())
            .map(|(v, sel)| set_report(&validation, sel, &v.left_out)),
        checks: derived.iter().map(|d| d.report.clone()).collect(),
        kept,
        files: names,
    };
    judge_set(
        &new_plan,
        &golden,
        &mut report.golden,
        &mut report.checks,
        false,
    );
    if let Some(v) = &mut report.validation {
        judge_set(&new_plan, &validation, v, &mut report.checks, true);
    }
    for (d, r) in derived.iter_mut().zip(&report.checks) {
        d.report = r.clone();
    }
    let report_path = out_dir.join(REPORT_FILE);
    let mut json = serde_json::to_string_pretty(&report)
        .map_err(|e| BenchError::retest(format!("cannot serialise the report: {e}")))?;
    json.push('\n');
    write_file(&report_path, json.as_bytes())?;
    let preview_path = out_dir.join(PREVIEW_FILE);
    let page = preview::page(&report, &derived).map_err(BenchError::retest)?;
    write_file(&preview_path, page.as_bytes())?;
    Ok(Derivation {
        report,
        plan_path,
        report_path,
        preview_path,
        checks: derived,
        golden,
        validation,
    })
}

fn check_options(o: &DeriveOptions) -> Result<(), BenchError> {
    let mut problems = o.settings.problems();
    let f = &o.floors;
    if f.thd_percent.is_some_and(|p| !(p > 0.0 && p <= 100.0)) {
        problems.push(format!(
            "--floor thd: expected a percentage in (0, 100], found {}",
            f.thd_percent.unwrap_or_default()
        ));
    }
    for (name, v) in [("harmonic", f.harmonic_db), ("rub_buzz", f.rub_buzz_db)] {
        if v.is_some_and(|v| !(v <= 0.0 && v.is_finite())) {
            problems.push(format!(
                "--floor {name}: expected a level at or below 0 dB re the fundamental, found {}",
                v.unwrap_or_default()
            ));
        }
    }
    if f.balance_db.is_some_and(|v| !(v > 0.0 && v.is_finite())) {
        problems.push(format!(
            "--floor balance: expected a positive difference in dB, found {}",
            f.balance_db.unwrap_or_default()
        ));
    }
    if o.golden.is_empty() {
        problems.push(
            "expected the golden units: --serials FILE, or --since TIME (and --until TIME)".into(),
        );
    }
    if problems.is_empty() {
        Ok(())
    } else {
        Err(BenchError::bad_input(problems.join("\n")))
    }
}

/// The set's units as chosen, before judging.
fn set_report(
    units: &[MeasuredUnit],
    sel: &UnitSelection,
    left_out: &[(String, String)],
) -> SetReport {
    let t = |t: &Option<time::OffsetDateTime>| t.map(crate::keys::format_time_utc);
    SetReport {
        n_units: units.len(),
        serials_file: sel.serials.as_ref().map(|s| s.path.display().to_string()),
        since: t(&sel.since),
        until: t(&sel.until),
        first_time_utc: units.iter().map(|u| u.time_utc.clone()).min(),
        last_time_utc: units.iter().map(|u| u.time_utc.clone()).max(),
        units: units
            .iter()
            .map(|u| UnitReport {
                serial: u.serial.clone(),
                record_id: u.record_id,
                time_utc: u.time_utc.clone(),
                stored_verdict: u.stored_verdict,
                new_verdict: Verdict::Retest,
                failed_checks: Vec::new(),
            })
            .collect(),
        left_out: left_out
            .iter()
            .map(|(serial, reason)| LeftOut {
                serial: serial.clone(),
                reason: reason.clone(),
            })
            .collect(),
        n_pass: 0,
        predicted_yield: None,
    }
}

/// Judge every unit of a set with the new plan through the checks, and count per unit and
/// per derived check.
fn judge_set(
    plan: &Plan,
    units: &[MeasuredUnit],
    set: &mut SetReport,
    checks: &mut [report::CheckReport],
    validation: bool,
) {
    let mut counts = vec![Counts::default(); checks.len()];
    for (u, row) in units.iter().zip(&mut set.units) {
        let (results, verdict) = crate::checks::judge(plan, &u.channels);
        row.new_verdict = verdict;
        row.failed_checks = results
            .iter()
            .filter(|r| r.verdict == Verdict::Fail)
            .map(|r| format!("{}/{}", r.id, r.channel))
            .collect();
        for (c, n) in checks.iter().zip(&mut counts) {
            let mine: Vec<Verdict> = results
                .iter()
                .filter(|r| r.id == c.id)
                .map(|r| r.verdict)
                .collect();
            if mine.contains(&Verdict::Fail) {
                n.n_fail += 1;
            } else if mine.is_empty() || mine.contains(&Verdict::Retest) {
                n.n_retest += 1;
            } else {
                n.n_pass += 1;
            }
        }
    }
    set.n_pass = set
        .units
        .iter()
        .filter(|u| u.new_verdict == Verdict::Pass)
        .count();
    set.predicted_yield =
        crate::limits::predicted_yield(set.units.iter().map(|u| u.new_verdict == Verdict::Pass));
    for (c, n) in checks.iter_mut().zip(counts) {
        if validation {
            c.validation_counts = Some(n);
        } else {
            c.golden_counts = n;
        }
    }
}

/// Write `bytes` to `path` through a temporary sibling and a rename.
fn write_file(path: &Path, bytes: &[u8]) -> Result<(), BenchError> {
    use std::io::Write;
    let fail =
        |e: std::io::Error| BenchError::bad_input(format!("{}: cannot write: {e}", path.display()));
    let name = path
        .file_name()
        .map_or("out".into(), |n| n.to_string_lossy().into_owned());
    let tmp = path.with_file_name(format!(".{name}.tmp-{}", std::process::id()));
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result.map_err(fail)
}
