//! TODO(issue 12, keys helper): replace with `tragus::keys::Keyring::load` and
//! `tragus::keys::StationKey::load` (and the station file's `signing_key`) once they are
//! merged; this private reader only stands in for them so `verify --keys` and `checkpoint`
//! work meanwhile. Formats read here:
//!
//! ```text
//! keyring:     keys: [{key_id: 16 hex, station: ID, public_key: 64 hex,
//!                      valid_from: UTC time, valid_until: UTC time (optional)}, ...]
//! station key: {station: ID, secret_key: 64 hex}
//! station file: its top-level `signing_key: PATH` (relative to the station file)
//! ```

use std::path::{Path, PathBuf};

use marked_yaml::Node;

use super::Exit;
use crate::config::{parse_tree, NodeReader, Pos};
use crate::keys::{key_id_of, Keyring, KeyringEntry, StationKey};

/// Read a YAML file's tree; every problem as one bad-input error.
fn tree(path: &Path, what: &'static str) -> Result<(Node, NodeReader), Exit> {
    let text = crate::config::read_data_file(path, what)
        .map_err(|e| Exit::bad_input(anyhow::anyhow!(e)))?;
    let label = path.display().to_string();
    let (root, problems) = parse_tree(&text, &label, what);
    match root {
        Some(root) if problems.is_empty() => Ok((
            root,
            NodeReader::new(
                label,
                path.parent().map(Path::to_path_buf).unwrap_or_default(),
            ),
        )),
        _ => Err(Exit::problems(what, &problems)),
    }
}

fn hex_bytes<const N: usize>(r: &mut NodeReader, n: &Node, what: &str) -> Option<[u8; N]> {
    let text = r.scalar(n, what, &format!("{} lowercase hex digits", 2 * N))?;
    match hex::decode(&text)
        .ok()
        .and_then(|b| <[u8; N]>::try_from(b).ok())
    {
        Some(b) if text.bytes().all(|c| !c.is_ascii_uppercase()) => Some(b),
        _ => {
            r.report(
                Pos::of(n.span()),
                format!(
                    "{what}: expected {} lowercase hex digits, found {text:?}",
                    2 * N
                ),
            );
            None
        }
    }
}

fn utc(r: &mut NodeReader, n: &Node, what: &str) -> Option<time::OffsetDateTime> {
    let text = r.scalar(n, what, "a UTC time like 2025-01-01T00:00:00Z")?;
    let t = crate::store::parse_time_utc(&text);
    if t.is_none() {
        r.report(
            Pos::of(n.span()),
            format!("{what}: expected a UTC time like 2025-01-01T00:00:00Z, found {text:?}"),
        );
    }
    t
}

/// The auditor's keyring.
pub(crate) fn load_keyring(path: &Path) -> Result<Keyring, Exit> {
    let (root, mut r) = tree(path, "keyring")?;
    let mut entries = Vec::new();
    if let Some(f) = r.fields(&root, "keyring", &["keys"], &["keys"]) {
        match f[0] {
            Some(Node::Sequence(seq)) => {
                for (i, item) in seq.iter().enumerate() {
                    let what = format!("keys[{i}]");
                    let keys = [
                        "key_id",
                        "station",
                        "public_key",
                        "valid_from",
                        "valid_until",
                    ];
                    let required = ["key_id", "station", "public_key", "valid_from"];
                    let Some(f) = r.fields(item, &what, &keys, &required) else {
                        continue;
                    };
                    let (Some(k), Some(s), Some(p), Some(from)) = (f[0], f[1], f[2], f[3]) else {
                        continue;
                    };
                    let key_id = r.scalar(k, &format!("{what}.key_id"), "a key id");
                    let station = r.scalar(s, &format!("{what}.station"), "a station id");
                    let public_key = hex_bytes::<32>(&mut r, p, &format!("{what}.public_key"));
                    let valid_from = utc(&mut r, from, &format!("{what}.valid_from"));
                    let valid_until = match f[4] {
                        Some(u) => utc(&mut r, u, &format!("{what}.valid_until")).map(Some),
                        None => Some(None),
                    };
                    let (
                        Some(key_id),
                        Some(station),
                        Some(public_key),
                        Some(valid_from),
                        Some(valid_until),
                    ) = (key_id, station, public_key, valid_from, valid_until)
                    else {
                        continue;
                    };
                    if key_id_of(&public_key) != key_id {
                        r.report(
                            Pos::of(k.span()),
                            format!(
                                "{what}.key_id: expected {} (the id of its public key), found {key_id:?}",
                                key_id_of(&public_key)
                            ),
                        );
                        continue;
                    }
                    entries.push(KeyringEntry {
                        key_id,
                        station,
                        public_key,
                        valid_from,
                        valid_until,
                    });
                }
            }
            Some(other) => r.report(
                Pos::of(other.span()),
                format!(
                    "keys: expected a list of keys, found {}",
                    crate::config::found(other)
                ),
            ),
            None => {}
        }
    }
    if r.problems.is_empty() {
        Ok(Keyring { entries })
    } else {
        Err(Exit::problems("keyring", &r.problems))
    }
}

/// A station's private key file.
pub(crate) fn load_station_key(path: &Path) -> Result<StationKey, Exit> {
    let (root, mut r) = tree(path, "station key")?;
    let mut key = None;
    if let Some(f) = r.fields(
        &root,
        "station key",
        &["station", "secret_key"],
        &["station", "secret_key"],
    ) {
        if let (Some(s), Some(k)) = (f[0], f[1]) {
            let station = r.scalar(s, "station", "a station id");
            let secret = hex_bytes::<32>(&mut r, k, "secret_key");
            if let (Some(station), Some(secret)) = (station, secret) {
                key = Some(StationKey::from_secret(&station, &secret));
            }
        }
    }
    match key {
        Some(k) if r.problems.is_empty() => Ok(k),
        _ => Err(Exit::problems("station key", &r.problems)),
    }
}

/// The key file a station file names in its `signing_key`, resolved against its directory.
pub(crate) fn station_signing_key(station_file: &Path) -> Result<PathBuf, Exit> {
    let (root, mut r) = tree(station_file, "station file")?;
    if let Node::Mapping(m) = &root {
        if let Some(n) = m.get_node("signing_key") {
            if let Some(p) = r.scalar(n, "signing_key", "the path of the station's key file") {
                return Ok(r.dir.join(p));
            }
        }
    }
    let at = Pos::of(root.span()).at(&station_file.display().to_string());
    Err(Exit::bad_input(anyhow::anyhow!(
        "{}:{}:{}: signing_key: expected the path of the station's key file, found none",
        at.path,
        at.line,
        at.col
    )))
}
