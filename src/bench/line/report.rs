//! The report of a virtual line: yields, the Pareto of failing checks, the confusion table
//! (defect × final verdict) and the escapes, built from the per-unit summaries.
//!
//! Everything in it is a function of the plan, the station, the seed, the mix and the unit
//! count: no time, no path, no duration, so that the same inputs give a byte-identical JSON
//! report.

use crate::Verdict;
use serde::Serialize;
use std::collections::BTreeMap;
use std::fmt::Write as _;

/// Row name of the good units in the confusion table.
pub const NO_DEFECT: &str = "none";

/// The check that came closest to failing on a unit's final test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Closest {
    /// Check id.
    pub check: String,
    /// Channel (or `a/b` for a balance check).
    pub channel: String,
    /// Its worst margin, dB (positive: inside the limits).
    pub margin_db: f64,
    /// Where, Hz (`null` when not frequency-dependent).
    pub at_hz: Option<f64>,
}

/// One unit of the line as tested.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UnitLine {
    /// Serial number.
    pub serial: String,
    /// The defect the unit was built with (`none` for a good unit).
    pub defect: String,
    /// The plan channel carrying it (`null` for a good unit).
    pub defect_channel: Option<String>,
    /// Verdict of its first test.
    pub first_verdict: Verdict,
    /// Verdict of its last test (a first-test retest is reseated and tested once more).
    pub final_verdict: Verdict,
    /// Tests it took (1, or 2 after a retest).
    pub tests: u32,
    /// Checks that failed on its last test (ids, sorted, each once).
    pub failed_checks: Vec<String>,
    /// Why its last test was a retest (empty otherwise).
    pub retest_reasons: Vec<String>,
    /// The check with the smallest margin on its last test.
    pub closest: Option<Closest>,
}

/// One check of the Pareto of failing checks.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ParetoEntry {
    /// Check id.
    pub check: String,
    /// Units whose last test failed it.
    pub units: usize,
    /// Of those, per defect (`none` for good units that failed it: false rejects).
    pub by_defect: BTreeMap<String, usize>,
}

/// One row of the confusion table: the units built with one defect, by final verdict.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ConfusionRow {
    /// Defect name, or `none`.
    pub defect: String,
    /// Units built with it.
    pub units: usize,
    /// Of those, final verdict pass.
    pub pass: usize,
    /// Final verdict fail.
    pub fail: usize,
    /// Final verdict retest (retested once and still not measurable).
    pub retest: usize,
}

/// A defect unit that passed.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Escape {
    /// Serial number.
    pub serial: String,
    /// Its defect.
    pub defect: String,
    /// The channel carrying it.
    pub channel: String,
    /// The check that came closest to catching it (`null` when no check has a margin).
    pub closest: Option<Closest>,
    /// In words.
    pub reason: String,
}

/// One defect of the mix.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MixEntry {
    /// Defect name.
    pub defect: String,
    /// Fraction asked for.
    pub fraction: f64,
    /// Units built with it.
    pub units: usize,
}

/// What a virtual line found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LineReport {
    /// Plan id.
    pub plan: String,
    /// Plan revision.
    pub plan_revision: u32,
    /// Plan hash.
    pub plan_sha256: String,
    /// Station id.
    pub station: String,
    /// Which earphone was simulated: the plan key that named it, or `demo earbud`.
    pub product: String,
    /// Population seed (spread, noise, defect placement).
    pub seed: u64,
    /// Units tested.
    pub units: usize,
    /// The defect mix.
    pub mix: Vec<MixEntry>,
    /// Units whose final verdict is pass.
    pub passed: usize,
    /// Units that passed their first test.
    pub first_pass_passed: usize,
    /// Units retested (their first test was a retest).
    pub retested: usize,
    /// passed / units: the yield this plan predicts for this population.
    pub predicted_yield: f64,
    /// first_pass_passed / units.
    pub first_pass_yield: f64,
    /// Failing checks, most units first.
    pub pareto: Vec<ParetoEntry>,
    /// Defect × final verdict; `none` first, then the mix's defects in the order given.
    pub confusion: Vec<ConfusionRow>,
    /// Defect units that passed, with the check that came closest.
    pub escapes: Vec<Escape>,
    /// Every unit, in test order.
    pub unit_results: Vec<UnitLine>,
}

/// The parts of a report that are not counted from the units.
pub struct ReportHeader {
    /// Plan id, revision and hash.
    pub plan: (String, u32, String),
    /// Station id.
    pub station: String,
    /// Which earphone was simulated.
    pub product: String,
    /// Population seed.
    pub seed: u64,
    /// The mix: (defect, fraction, units).
    pub mix: Vec<MixEntry>,
}

fn ratio(a: usize, n: usize) -> f64 {
    if n == 0 {
        0.0
    } else {
        a as f64 / n as f64
    }
}

/// Why an escape passed, in words.
fn escape_reason(c: Option<&Closest>) -> String {
    match c {
        Some(c) => {
            let at = c.at_hz.map_or(String::new(), |f| format!(" at {f:.0} Hz"));
            format!(
                "closest check `{}` on {}: margin {:+.2} dB{at}",
                c.check, c.channel, c.margin_db
            )
        }
        None => "no check with a margin judged this unit".into(),
    }
}

/// Count the units into a report.
pub fn build_report(h: ReportHeader, units: Vec<UnitLine>) -> LineReport {
    let n = units.len();
    let passed = units
        .iter()
        .filter(|u| u.final_verdict == Verdict::Pass)
        .count();
    let first = units
        .iter()
        .filter(|u| u.first_verdict == Verdict::Pass)
        .count();
    let retested = units.iter().filter(|u| u.tests > 1).count();
    let mut pareto: BTreeMap<&str, ParetoEntry> = BTreeMap::new();
    for u in &units {
        for c in &u.failed_checks {
            let e = pareto.entry(c).or_insert_with(|| ParetoEntry {
                check: c.clone(),
                units: 0,
                by_defect: BTreeMap::new(),
            });
            e.units += 1;
            *e.by_defect.entry(u.defect.clone()).or_default() += 1;
        }
    }
    let mut pareto: Vec<ParetoEntry> = pareto.into_values().collect();
    pareto.sort_by(|a, b| b.units.cmp(&a.units).then(a.check.cmp(&b.check)));
    let rows: Vec<String> = std::iter::once(NO_DEFECT.to_string())
        .chain(h.mix.iter().map(|m| m.defect.clone()))
        .collect();
    let confusion = rows
        .into_iter()
        .map(|d| {
            let of = || units.iter().filter(|u| u.defect == d);
            let count = |v: Verdict| of().filter(|u| u.final_verdict == v).count();
            ConfusionRow {
                units: of().count(),
                pass: count(Verdict::Pass),
                fail: count(Verdict::Fail),
                retest: count(Verdict::Retest),
                defect: d,
            }
        })
        .collect();
    let escapes = units
        .iter()
        .filter(|u| u.defect != NO_DEFECT && u.final_verdict == Verdict::Pass)
        .map(|u| Escape {
            serial: u.serial.clone(),
            defect: u.defect.clone(),
            channel: u.defect_channel.clone().unwrap_or_default(),
            closest: u.closest.clone(),
            reason: escape_reason(u.closest.as_ref()),
        })
        .collect();
    LineReport {
        plan: h.plan.0,
        plan_revision: h.plan.1,
        plan_sha256: h.plan.2,
        station: h.station,
        product: h.product,
        seed: h.seed,
        units: n,
        mix: h.mix,
        passed,
        first_pass_passed: first,
        retested,
        predicted_yield: ratio(passed, n),
        first_pass_yield: ratio(first, n),
        pareto,
        confusion,
        escapes,
        unit_results: units,
    }
}

impl LineReport {
    /// The report for a terminal: yields, Pareto, confusion table, escapes.
    pub fn render_text(&self) -> String {
        let mut o = String::new();
        let pct = |x: f64| format!("{:.1} %", 100.0 * x);
        let _ = writeln!(
            o,
            "virtual line: plan {} rev {} on {}, {} unit(s), seed {}, product: {}",
            self.plan, self.plan_revision, self.station, self.units, self.seed, self.product
        );
        let mix: Vec<String> = self
            .mix
            .iter()
            .map(|m| format!("{}={} ({} units)", m.defect, m.fraction, m.units))
            .collect();
        let mix = if mix.is_empty() {
            "none".to_string()
        } else {
            mix.join(", ")
        };
        let _ = writeln!(o, "defect mix: {mix}");
        let _ = writeln!(
            o,
            "predicted yield: {} ({}/{}); first-pass yield: {} ({}/{}); retested: {}",
            pct(self.predicted_yield),
            self.passed,
            self.units,
            pct(self.first_pass_yield),
            self.first_pass_passed,
            self.units,
            self.retested
        );
        let _ = writeln!(o, "\nfailing checks (Pareto, units; caught defects):");
        if self.pareto.is_empty() {
            let _ = writeln!(o, "  none");
        }
        for p in &self.pareto {
            let by: Vec<String> = p
                .by_defect
                .iter()
                .map(|(d, c)| format!("{d} {c}"))
                .collect();
            let _ = writeln!(o, "  {:<12} {:>5}   {}", p.check, p.units, by.join(", "));
        }
        let w = self
            .confusion
            .iter()
            .map(|r| r.defect.len())
            .max()
            .unwrap_or(4)
            .max(6);
        let _ = writeln!(o, "\nconfusion (defect x final verdict):");
        let _ = writeln!(
            o,
            "  {:<w$} {:>6} {:>6} {:>6} {:>6}",
            "defect", "units", "pass", "fail", "retest"
        );
        for r in &self.confusion {
            let _ = writeln!(
                o,
                "  {:<w$} {:>6} {:>6} {:>6} {:>6}",
                r.defect, r.units, r.pass, r.fail, r.retest
            );
        }
        let _ = writeln!(
            o,
            "\nescapes (defect units that passed): {}",
            self.escapes.len()
        );
        for e in &self.escapes {
            let _ = writeln!(
                o,
                "  {} {} on {}: {}",
                e.serial, e.defect, e.channel, e.reason
            );
        }
        o
    }
}
