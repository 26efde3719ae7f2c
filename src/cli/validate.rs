//! `tragus validate PLAN... [--station FILE]...`: check plans and station files, one
//! `PATH:LINE:COL: message` line per problem. Station files are named by `--station`
//! rather than guessed from their content, so a plan with a typo in its top key is never
//! checked against the wrong schema.

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
                println!(
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
                    println!("{p}");
                }
                code = EXIT_BAD_INPUT;
            }
            Err(e @ PlanError::Io { .. }) => {
                println!("{e}");
                code = EXIT_BAD_INPUT;
            }
        }
    }
    for path in &args.station {
        match crate::station::load_station(path) {
            Ok(st) => println!(
                "{}: ok (station {}, {}, sha256 {})",
                path.display(),
                st.id,
                st.mode.as_str(),
                st.sha256
            ),
            Err(crate::station::StationError::Invalid(problems)) => {
                for p in problems {
                    println!("{p}");
                }
                code = EXIT_BAD_INPUT;
            }
            Err(e) => {
                println!("{e}");
                code = EXIT_BAD_INPUT;
            }
        }
    }
    Ok(code)
}
