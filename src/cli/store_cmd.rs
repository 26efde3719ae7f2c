//! `tragus store migrate`: the explicit schema migration (readers never migrate).

use std::path::PathBuf;

use super::{Exit, EXIT_PASS};
use crate::store::Store;

/// Arguments of `store`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to do with the store.
    #[command(subcommand)]
    pub action: Action,
}

/// The `store` subcommands.
#[derive(Debug, clap::Subcommand)]
pub enum Action {
    /// Bring the store to this tragus's schema version, in place; prints from and to.
    Migrate {
        /// Store directory.
        #[arg(long, value_name = "DIR", default_value = "tragus-data")]
        store: PathBuf,
    },
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    match args.action {
        Action::Migrate { store } => {
            super::records::require_store(&store)?;
            let m = Store::migrate(&store).map_err(Exit::bad_input)?;
            if m.from == m.to {
                outln!(
                    "store {}: schema {} already, nothing to migrate",
                    store.display(),
                    m.to
                );
            } else {
                outln!(
                    "store {}: migrated from schema {} to schema {}",
                    store.display(),
                    m.from,
                    m.to
                );
            }
            Ok(EXIT_PASS)
        }
    }
}
