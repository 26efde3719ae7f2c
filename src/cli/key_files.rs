//! Reading the key files a command names: the auditor's keyring, a station key, and the key
//! a station file names (`signing_key:`), each refused as bad input with the loader's
//! `file:line:col` message.

use std::path::{Path, PathBuf};

use super::Exit;
use crate::keys::{Keyring, StationKey};

/// The keyring at `path`.
pub(crate) fn load_keyring(path: &Path) -> Result<Keyring, Exit> {
    Keyring::load(path).map_err(Exit::bad_input)
}

/// The station key at `path` (refused when others may read it).
pub(crate) fn load_station_key(path: &Path) -> Result<StationKey, Exit> {
    StationKey::load(path).map_err(Exit::bad_input)
}

/// The key file the station file names with `signing_key:`.
pub(crate) fn station_signing_key(station_file: &Path) -> Result<PathBuf, Exit> {
    let station = crate::station::load_station(station_file).map_err(Exit::bad_input)?;
    station.signing_key.ok_or_else(|| {
        Exit::bad_input(anyhow::anyhow!(
            "{}: expected a `signing_key:` naming the station's key file (tragus keys new \
             --station {} makes one), found none",
            station_file.display(),
            station_file.display()
        ))
    })
}
