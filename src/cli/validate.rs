//! `tragus validate PLAN...`: check plans, one `PATH:LINE:COL: message` line per problem.

use super::{Exit, EXIT_BAD_INPUT, EXIT_PASS};
use crate::plan::{load_plan, PlanError};
use std::path::PathBuf;

/// Arguments of `validate`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Plan files to check.
    #[arg(required = true, value_name = "PLAN")]
    pub plans: Vec<PathBuf>,
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
    Ok(code)
}
