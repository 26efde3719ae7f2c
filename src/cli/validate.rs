//! `tragus validate PLAN... [--station FILE]...`: check plans and station files, one
//! `PATH:LINE:COL: message` line per problem. A valid plan may also get warnings,
//! `PATH:LINE:COL: warning: message` (limits far outside what its declared product could
//! produce, docs/engineer/validate.md); they do not change the exit code. Station files are named by `--station`
//! rather than guessed from their content, so a plan with a typo in its top key is never
//! checked against the wrong schema.
//!
//! With plans and stations both given, every plan is also checked on every station as a run
//! would set it up — calibration, level unit and mode, and the hearing-safety budget of its
//! sweep against the station's caps — so a plan that would be refused is refused here,
//! before any unit is seated.

use super::{Exit, JsonOut, EXIT_BAD_INPUT, EXIT_PASS};
use crate::plan::{load_plan_checked, CheckedPlan, PlanError, Problem};
use serde_json::{json, Value};
use std::path::{Path, PathBuf};

/// Arguments of `validate`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Plan files to check.
    #[arg(value_name = "PLAN", required_unless_present = "station")]
    pub plans: Vec<PathBuf>,
    /// Station files to check (repeatable).
    #[arg(long, value_name = "FILE")]
    pub station: Vec<PathBuf>,
    /// Write what was found as one JSON document here (`-` for stdout: the lines then go
    /// nowhere).
    #[arg(long, value_name = "OUT")]
    pub json: Option<JsonOut>,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let mut found = Found {
        human: !args.json.as_ref().is_some_and(JsonOut::is_stdout),
        ..Found::default()
    };
    let mut code = EXIT_PASS;
    for path in &args.plans {
        match load_plan_checked(path) {
            Ok(CheckedPlan { plan, warnings }) => {
                // Warnings first, like the problems of an invalid plan, each at its value;
                // they do not make the plan invalid (exit 0).
                for w in &warnings {
                    found.say(warning_line(w));
                }
                found.say(format_args!(
                    "{}: ok (plan {} revision {}, sha256 {})",
                    path.display(),
                    plan.id,
                    plan.revision,
                    plan.sha256
                ));
                let entry = found.file(path, "plan", &[], None);
                entry["plan"] =
                    json!({"id": plan.id, "revision": plan.revision, "sha256": plan.sha256});
                entry["warnings"] = Value::Array(warnings.iter().map(problem_json).collect());
            }
            Err(PlanError::Invalid(problems)) => {
                // Problems go to stdout: they are the command's output, one per line, for
                // editors and CI to parse.
                for p in &problems {
                    found.say(p);
                }
                found.file(path, "plan", &problems, None);
                code = EXIT_BAD_INPUT;
            }
            Err(e @ PlanError::Io { .. }) => {
                found.say(&e);
                found.file(path, "plan", &[], Some(e.to_string()));
                code = EXIT_BAD_INPUT;
            }
        }
    }
    for path in &args.station {
        match crate::station::load_station(path) {
            Ok(st) => {
                found.say(format_args!(
                    "{}: ok (station {}, {}, sha256 {})",
                    path.display(),
                    st.id,
                    st.mode.as_str(),
                    st.sha256
                ));
                found.file(path, "station", &[], None)["station"] =
                    json!({"id": st.id, "mode": st.mode.as_str(), "sha256": st.sha256});
            }
            Err(crate::station::StationError::Invalid(problems)) => {
                for p in &problems {
                    found.say(p);
                }
                found.file(path, "station", &problems, None);
                code = EXIT_BAD_INPUT;
            }
            Err(e) => {
                found.say(&e);
                found.file(path, "station", &[], Some(e.to_string()));
                code = EXIT_BAD_INPUT;
            }
        }
    }
    if code == EXIT_PASS && !args.plans.is_empty() {
        for station_path in &args.station {
            let Ok(station) = crate::station::load_station(station_path) else {
                continue;
            };
            for plan in &args.plans {
                code = code.max(on_station(plan, station_path, &station, &mut found));
            }
        }
    }
    if let Some(j) = &args.json {
        j.write(&json!({
            "valid": code == EXIT_PASS,
            "files": found.files,
            "on_station": found.on_station,
        }))
        .map_err(Exit::bad_input)?;
    }
    Ok(code)
}

/// What `validate` found: printed line by line for people (unless the JSON document takes
/// stdout) and kept for `--json`.
#[derive(Default)]
struct Found {
    human: bool,
    files: Vec<Value>,
    on_station: Vec<Value>,
}

impl Found {
    fn say(&self, line: impl std::fmt::Display) {
        if self.human {
            outln!("{line}");
        }
    }

    /// One checked file: valid when it has no problem and no `unreadable` message (which
    /// becomes a problem at line 0, column 0: no position). Returns its entry, for what a
    /// valid file adds.
    fn file(
        &mut self,
        path: &Path,
        kind: &str,
        problems: &[Problem],
        unreadable: Option<String>,
    ) -> &mut Value {
        let mut list: Vec<Value> = problems.iter().map(problem_json).collect();
        if let Some(message) = unreadable {
            // The entry names the file already; the message says only what is wrong.
            let prefix = format!("{}: ", path.display());
            let message = message.strip_prefix(&prefix).unwrap_or(&message);
            list.push(json!({"path": path, "line": 0, "col": 0, "message": message}));
        }
        self.files.push(json!({
            "path": path, "kind": kind, "valid": list.is_empty(), "problems": list,
        }));
        self.files.last_mut().expect("just pushed")
    }
}

/// A problem or warning as `--json` gives it.
fn problem_json(p: &Problem) -> Value {
    json!({
        "path": p.location.path, "line": p.location.line, "col": p.location.col,
        "message": p.message,
    })
}

/// A warning as printed: `PATH:LINE:COL: warning: message`.
fn warning_line(w: &Problem) -> String {
    format!(
        "{}:{}:{}: warning: {}",
        w.location.path, w.location.line, w.location.col, w.message
    )
}

/// Set the plan up on the station as `run` would (nothing is played) and say whether it may
/// run there, with the closest cap of its sweep.
fn on_station(
    plan: &Path,
    station_path: &Path,
    station: &crate::station::Station,
    found: &mut Found,
) -> i32 {
    let bench = crate::bench::Bench::new(crate::bench::BenchOptions {
        plan,
        station: Some(station),
        fixture: None,
        rig: None,
        store: None,
        station_id: None,
        operator: None,
        calibration: None,
        non_production: false,
        soundcard: station.soundcard.clone(),
        record_refusals: false,
    });
    match bench {
        Ok(b) => {
            let closest = b
                .safety
                .budget
                .items
                .iter()
                .max_by(|x, y| x.excess_db().total_cmp(&y.excess_db()))
                .map(|i| format!("{} ({:.1} dB under it)", i.describe(), -i.excess_db()));
            found.say(format_args!(
                "{} on {}: ok ({}){}",
                plan.display(),
                station_path.display(),
                b.station.mode.as_str(),
                closest
                    .as_ref()
                    .map(|c| format!("; closest cap: {c}"))
                    .unwrap_or_default()
            ));
            for u in &b.safety.budget.unchecked {
                found.say(format_args!("  not bounded before playing: {u}"));
            }
            found.on_station.push(json!({
                "plan": plan, "station": station_path, "allowed": true,
                "mode": b.station.mode.as_str(), "closest_cap": closest,
                "not_bounded": b.safety.budget.unchecked.iter().map(|u| u.to_string()).collect::<Vec<_>>(),
                "refused": null,
            }));
            EXIT_PASS
        }
        Err(e) => {
            let e = super::Exit::from(e);
            let why = format!("{:#}", e.error);
            found.say(format_args!(
                "{} on {}: refused: {why}",
                plan.display(),
                station_path.display(),
            ));
            found.on_station.push(json!({
                "plan": plan, "station": station_path, "allowed": false, "mode": null,
                "closest_cap": null, "not_bounded": [], "refused": why,
            }));
            e.code
        }
    }
}
