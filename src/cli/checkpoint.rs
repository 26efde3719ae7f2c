//! `tragus checkpoint`: a signed statement of how far each chain of the store reaches now,
//! to keep away from the station (with the auditor).

use std::path::PathBuf;

use super::{Exit, EXIT_FAIL, EXIT_PASS};
use crate::store::{verify_dir, Store, VerifyOptions};

/// Arguments of `checkpoint`.
#[derive(Debug, clap::Args)]
#[command(group(clap::ArgGroup::new("signer").required(true).args(["key", "station"])))]
pub struct Args {
    /// Store directory.
    #[arg(long, value_name = "DIR", default_value = "tragus-data")]
    pub store: PathBuf,
    /// Where to write the checkpoint; the file must not exist.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// The station's private key file.
    #[arg(long, value_name = "KEYFILE")]
    pub key: Option<PathBuf>,
    /// The station file; its `signing_key` names the key file.
    #[arg(long, value_name = "STATION.yaml")]
    pub station: Option<PathBuf>,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    super::records::require_store(&args.store)?;
    let key_file = match (&args.key, &args.station) {
        (Some(k), _) => k.clone(),
        (None, Some(station)) => super::key_files::station_signing_key(station)?,
        (None, None) => unreachable!("clap requires --key or --station"),
    };
    let key = super::key_files::load_station_key(&key_file)?;
    // Never sign a statement about a store that does not verify: it would vouch for the
    // tampering.
    let report = verify_dir(&args.store, &VerifyOptions::default()).map_err(Exit::bad_input)?;
    if !report.is_intact() {
        for p in &report.problems {
            outln!("PROBLEM {p}");
        }
        outln!(
            "NOT INTACT: {} problem(s); no checkpoint written (run tragus verify)",
            report.problems.len()
        );
        return Ok(EXIT_FAIL);
    }
    let store = Store::open_read_only(&args.store).map_err(Exit::bad_input)?;
    let c = store.checkpoint(&key).map_err(Exit::bad_input)?;
    c.write(&args.out).map_err(Exit::bad_input)?;
    outln!(
        "checkpoint {} of store {} at {}, signed by key {} of {}",
        args.out.display(),
        c.store_id,
        c.time_utc,
        c.key_id,
        c.station
    );
    for (table, head) in c.chains.by_table() {
        outln!("  {table}: {} row(s), head {}", head.count, head.head_hash);
    }
    Ok(EXIT_PASS)
}
