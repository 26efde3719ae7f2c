//! `tragus validate PLAN... [--station FILE]...`: check plans and station files, one
//! `PATH:LINE:COL: message` line per problem. Station files are named by `--station`
//! rather than guessed from their content, so a plan with a typo in its top key is never
//! checked against the wrong schema.
//!
//! With plans and stations both given, every plan is also checked on every station as a run
//! would set it up — calibration, level unit and mode, and the hearing-safety budget of its
//! sweep against the station's caps — so a plan that would be refused is refused here,
//! before any unit is seated.

use super::{Exit, EXIT_BAD_INPUT, EXIT_PASS};
use crate::plan::{load_plan, PlanError};
use std::path::PathBuf;

/// Arguments of `validate`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Plan files to check.
    #[arg(value_name = "PLAN", required_unless_present = "station")]
    pub plans: Vec<PathBuf>,
    /// Station files to check (repeatable).
    #[arg(long, value_name = "FILE")]
    pub station: Vec<PathBuf>,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    let mut code = EXIT_PASS;
    for path in &args.plans {
        match load_plan(path) {
            Ok(plan) => {
                outln!(
                    "{}: ok (plan {} revision {}, sha256 {})",
                    path.display(),
                    plan.id,
                    plan.revision,
                    plan.sha256
                );
            }
            Err(PlanError::Invalid(problems)) => {
                // Problems go to stdout: they are the command's output, one per line, for
                // editors and CI to parse.
                for p in problems {
                    outln!("{p}");
                }
                code = EXIT_BAD_INPUT;
            }
            Err(e @ PlanError::Io { .. }) => {
                outln!("{e}");
                code = EXIT_BAD_INPUT;
            }
        }
    }
    for path in &args.station {
        match crate::station::load_station(path) {
            Ok(st) => outln!(
                "{}: ok (station {}, {}, sha256 {})",
                path.display(),
                st.id,
                st.mode.as_str(),
                st.sha256
            ),
            Err(crate::station::StationError::Invalid(problems)) => {
                for p in problems {
                    outln!("{p}");
                }
                code = EXIT_BAD_INPUT;
            }
            Err(e) => {
                outln!("{e}");
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
                code = code.max(on_station(plan, station_path, &station));
            }
        }
    }
    Ok(code)
}

/// Set the plan up on the station as `run` would (nothing is played) and say whether it may
/// run there, with the closest cap of its sweep.
fn on_station(
    plan: &std::path::Path,
    station_path: &std::path::Path,
    station: &crate::station::Station,
) -> i32 {
    let bench = super::unit::Bench::new(super::unit::BenchOptions {
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
                .map(|i| {
                    format!(
                        "; closest cap: {} ({:.1} dB under it)",
                        i.describe(),
                        -i.excess_db()
                    )
                })
                .unwrap_or_default();
            outln!(
                "{} on {}: ok ({}){closest}",
                plan.display(),
                station_path.display(),
                b.station.mode.as_str()
            );
            for u in &b.safety.budget.unchecked {
                outln!("  not bounded before playing: {u}");
            }
            EXIT_PASS
        }
        Err(e) => {
            outln!(
                "{} on {}: refused: {:#}",
                plan.display(),
                station_path.display(),
                e.error
            );
            e.code
        }
    }
}
