//! `tragus keys new|show`: make a station's signing key, list an auditor's keyring.
//!
//! The work is `crate::keys`' ([`new_station_key`], [`Keyring::load`]); this file parses
//! the arguments and prints. Exit 0 done, 2 anything refused (bad input or a file that
//! could not be written: nothing is left half done).

use std::path::PathBuf;

use super::{Exit, EXIT_PASS};
use crate::keys::{format_time_utc, new_station_key, KeyError, Keyring, NewKeyRequest};

/// Arguments of `keys`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to do.
    #[command(subcommand)]
    pub command: KeysCommand,
}

/// The `keys` commands.
#[derive(Debug, clap::Subcommand)]
pub enum KeysCommand {
    /// Make a new signing key for a station: the key file (mode 0600, never overwritten,
    /// never inside the store), its public entry in the keyring and the station file's
    /// `signing_key:` line.
    New(NewArgs),
    /// List a keyring's keys: id, station, validity.
    Show(ShowArgs),
}

/// Arguments of `keys new`.
#[derive(Debug, clap::Args)]
pub struct NewArgs {
    /// The station file (its id and store; it gets `signing_key:`).
    #[arg(long, value_name = "STATION.yaml")]
    pub station: PathBuf,
    /// Where to write the key. Default: `<station file dir>/<station id>.key`.
    #[arg(long, value_name = "PATH")]
    pub key_out: Option<PathBuf>,
    /// The keyring to add the public key to (created when missing). Default:
    /// `<station file dir>/keyring.yaml`.
    #[arg(long, value_name = "PATH")]
    pub keyring: Option<PathBuf>,
    /// Days the key is valid from now. Default: no end.
    #[arg(long, value_name = "N",
          value_parser = clap::value_parser!(u32).range(1..=i64::from(crate::keys::MAX_VALID_DAYS)))]
    pub valid_days: Option<u32>,
    /// Replace the station file's existing `signing_key:` (the old key file stays).
    #[arg(long)]
    pub replace: bool,
}

/// Arguments of `keys show`.
#[derive(Debug, clap::Args)]
pub struct ShowArgs {
    /// The keyring file.
    #[arg(long, value_name = "PATH")]
    pub keyring: PathBuf,
}

pub(crate) fn run(args: Args) -> Result<i32, Exit> {
    match args.command {
        KeysCommand::New(a) => new(a),
        KeysCommand::Show(a) => show(a),
    }
}

fn new(a: NewArgs) -> Result<i32, Exit> {
    let req = NewKeyRequest {
        station_file: a.station,
        default_store: PathBuf::from(crate::bench::DEFAULT_STORE),
        key_out: a.key_out,
        keyring: a.keyring,
        valid_days: a.valid_days,
        replace: a.replace,
        now: time::OffsetDateTime::now_utc(),
    };
    let made = new_station_key(&req).map_err(exit)?;
    let e = &made.entry;
    outln!("key id        {}", e.key_id);
    outln!("station       {}", made.station);
    outln!(
        "key file      {} (mode 0600: keep it secret, on the station only)",
        made.key_file.display()
    );
    outln!(
        "keyring       {} ({})",
        made.keyring_file.display(),
        if made.keyring_created {
            "created"
        } else {
            "entry appended"
        }
    );
    let change = match &made.replaced {
        Some(old) => format!("replaced {old}"),
        None => "added".to_string(),
    };
    outln!(
        "station file  {}: signing_key: {} ({change})",
        made.station_file.display(),
        made.signing_key
    );
    outln!("keyring entry (give it to the auditor):");
    out!("{}", e.to_yaml_item(2));
    Ok(EXIT_PASS)
}

fn show(a: ShowArgs) -> Result<i32, Exit> {
    let ring = Keyring::load(&a.keyring).map_err(exit)?;
    outln!("{}: {} key(s)", a.keyring.display(), ring.entries.len());
    if ring.entries.is_empty() {
        return Ok(EXIT_PASS);
    }
    let width = ring
        .entries
        .iter()
        .map(|e| e.station.len())
        .max()
        .unwrap_or(0)
        .max("STATION".len());
    outln!(
        "{:<16}  {:<width$}  {:<20}  VALID UNTIL",
        "KEY ID",
        "STATION",
        "VALID FROM"
    );
    for e in &ring.entries {
        outln!(
            "{:<16}  {:<width$}  {:<20}  {}",
            e.key_id,
            e.station,
            format_time_utc(e.valid_from),
            e.valid_until
                .map_or_else(|| "(no end)".to_string(), format_time_utc)
        );
    }
    Ok(EXIT_PASS)
}

/// Problems in a file as one block (`path:line:col: message` lines), the rest as is.
fn exit(e: KeyError) -> Exit {
    match e {
        KeyError::Invalid(problems) => Exit::problems("keyring", &problems),
        KeyError::Station(crate::station::StationError::Invalid(problems)) => {
            Exit::problems("station file", &problems)
        }
        e @ KeyError::Exists { .. } => {
            Exit::bad_input(anyhow::anyhow!("{e}; name a new file with --key-out"))
        }
        other => Exit::bad_input(other),
    }
}
