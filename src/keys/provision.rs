//! Making a station's key (`tragus keys new`): the key file, its keyring entry and the
//! station file's `signing_key:` line, in an order that leaves nothing half done.
//!
//! Everything that can be refused is checked before the key is made: the station file
//! loads, it names no key yet (unless replacing), the key path is outside the store and
//! free, the keyring (when it exists) loads, and the edited station text still reads. Then
//! the key is written (new file, 0600), the station text is loaded once more (now that its
//! key exists), the keyring entry appended and the station file replaced. When a later step
//! fails, the key file just made is removed again.

use super::fields::{pos, write_replacing, yaml_scalar};
use super::{KeyError, Keyring, KeyringEntry, StationKey};
use crate::config::{parse_tree, Pos};
use crate::station::load_station_str;
use marked_yaml::Node;
use std::path::{Path, PathBuf};
use time::OffsetDateTime;

/// Longest validity `valid_days` may give (100 years): a longer one is a typo.
pub const MAX_VALID_DAYS: u32 = 36_525;

/// What to make: the inputs of `tragus keys new`.
#[derive(Debug, Clone)]
pub struct NewKeyRequest {
    /// The station file (its id, store and directory; it gets the `signing_key:` line).
    pub station_file: PathBuf,
    /// The store directory when the station file names none (the bench's default).
    pub default_store: PathBuf,
    /// Where the key goes; default `<station file dir>/<station id>.key`.
    pub key_out: Option<PathBuf>,
    /// The keyring to add the public key to; default `<station file dir>/keyring.yaml`.
    pub keyring: Option<PathBuf>,
    /// Days the key is valid from `now`; `None`: no end.
    pub valid_days: Option<u32>,
    /// Replace a `signing_key:` the station file already has.
    pub replace: bool,
    /// The key's `valid_from` (whole seconds are kept).
    pub now: OffsetDateTime,
}

/// What [`new_station_key`] did.
#[derive(Debug, Clone)]
pub struct NewKey {
    /// The station id the key signs for.
    pub station: String,
    /// The key file written (absolute).
    pub key_file: PathBuf,
    /// The keyring file written.
    pub keyring_file: PathBuf,
    /// Whether the keyring file was created (else the entry was appended).
    pub keyring_created: bool,
    /// The station file changed.
    pub station_file: PathBuf,
    /// The `signing_key:` value written into it.
    pub signing_key: String,
    /// The value it replaced, with `replace`.
    pub replaced: Option<String>,
    /// The keyring entry (key id, public key, validity).
    pub entry: KeyringEntry,
}

/// Make a new key for the station of `req.station_file`; see the module documentation.
pub fn new_station_key(req: &NewKeyRequest) -> Result<NewKey, KeyError> {
    let path = req.station_file.as_path();
    let label = path.display().to_string();
    let text = crate::config::load_file(path, |t: &str, _: &Path| Ok::<_, KeyError>(t.to_string()))
        .map_err(|e| e.reading("station file"))?;
    let station_dir = parent_dir(path);

    let existing = signing_key_line(&text);
    if let (Some(line), false) = (&existing, req.replace) {
        return Err(KeyError::Refused {
            location: format!("{label}:{}:{}", line.pos.line, line.pos.col),
            message: format!(
                "signing_key: expected none yet, found {} (the station already has a key; \
                 replacing it must be asked for: `tragus keys new --replace`)",
                show_value(&line.value)
            ),
        });
    }
    // The station without its old key line (kept blank, so that problems keep their line
    // numbers): a key being replaced may be gone already, lost or deleted on purpose.
    let base = match &existing {
        Some(line) => replace_line(&text, line.pos.line, ""),
        None => text.clone(),
    };
    let station = load_station_str(&base, path)?;

    let store = station.store.clone().unwrap_or(req.default_store.clone());
    let (key_path, key_real) = key_place(req, &station.id, &station_dir, &store)?;
    let key_label = key_path.display().to_string();

    let keyring_path = req
        .keyring
        .clone()
        .unwrap_or_else(|| station_dir.join("keyring.yaml"));
    if std::fs::symlink_metadata(&keyring_path).is_ok() {
        Keyring::load(&keyring_path)?;
    }

    let value = signing_key_value(&key_real, &station_dir, &key_label)?;
    let new_text = match &existing {
        Some(line) => replace_line(&text, line.pos.line, &format!("signing_key: {value}")),
        None => {
            let mut t = text.clone();
            if !t.is_empty() && !t.ends_with('\n') {
                t.push('\n');
            }
            t.push_str(&format!("signing_key: {value}\n"));
            t
        }
    };
    let cannot_edit = || {
        refused(
            &label,
            &format!(
                "cannot set `signing_key: {value}` in this station file automatically (its \
                 top level is not a block mapping, or its `signing_key:` value spans several \
                 lines); set it by hand, then run this again with --key-out and --replace \
                 as needed"
            ),
        )
    };
    if signing_key_line(&new_text).map(|l| l.value) != Some(value_text(&value)) {
        return Err(cannot_edit());
    }

    let valid_until = match req.valid_days {
        None => None,
        Some(d) if (1..=MAX_VALID_DAYS).contains(&d) => {
            Some(req.now + time::Duration::days(i64::from(d)))
        }
        Some(d) => {
            return Err(refused(
                &label,
                &format!("valid days: expected 1 to {MAX_VALID_DAYS}, found {d}"),
            ))
        }
    };
    let key = StationKey::generate(&station.id)?;
    let entry = KeyringEntry::for_key(&key, req.now, valid_until);

    key.write_new(&key_path)?;
    let undo = |e: KeyError| {
        let _ = std::fs::remove_file(&key_path);
        e
    };
    let reloaded = load_station_str(&new_text, path).map_err(|e| undo(e.into()))?;
    let names_key = reloaded
        .signing_key
        .as_deref()
        .and_then(|p| std::fs::canonicalize(p).ok())
        .is_some_and(|p| p == key_real);
    if !names_key {
        return Err(undo(cannot_edit()));
    }
    let keyring_created = Keyring::append_to_file(&keyring_path, &entry).map_err(undo)?;
    let station_real = std::fs::canonicalize(path).map_err(|source| {
        undo(KeyError::Write {
            path: label.clone(),
            what: "station file",
            source,
        })
    })?;
    write_replacing(&station_real, new_text.as_bytes(), "station file").map_err(undo)?;

    Ok(NewKey {
        station: station.id,
        key_file: key_path,
        keyring_file: keyring_path,
        keyring_created,
        station_file: path.to_path_buf(),
        signing_key: value_text(&value),
        replaced: existing.map(|l| l.value),
        entry,
    })
}

/// Where the key goes, as given (absolute) and with its directory's links resolved: a free
/// path in an existing directory outside the store.
fn key_place(
    req: &NewKeyRequest,
    station_id: &str,
    station_dir: &Path,
    store: &Path,
) -> Result<(PathBuf, PathBuf), KeyError> {
    let key_path = absolute(
        &req.key_out
            .clone()
            .unwrap_or_else(|| station_dir.join(format!("{station_id}.key"))),
    );
    let key_label = key_path.display().to_string();
    if std::fs::symlink_metadata(&key_path).is_ok() {
        return Err(KeyError::Exists {
            path: key_label,
            what: "file",
        });
    }
    let (Some(key_parent), Some(key_name)) = (key_path.parent(), key_path.file_name()) else {
        return Err(refused(&key_label, "expected a file path for the key"));
    };
    let key_dir = std::fs::canonicalize(key_parent).map_err(|e| {
        refused(
            &key_label,
            &format!(
                "expected the key's directory {} to exist ({e})",
                key_parent.display()
            ),
        )
    })?;
    let store_real = canonical_lenient(store);
    if key_dir.starts_with(&store_real) {
        return Err(KeyError::InsideStore {
            key: key_label,
            store: store_real.display().to_string(),
        });
    }
    let key_real = key_dir.join(key_name);
    Ok((key_path, key_real))
}

/// A top-level `signing_key:` of a station file's text.
struct SigningKeyLine {
    /// Where its key is.
    pos: Pos,
    /// Its value's text.
    value: String,
}

/// The station text's top-level `signing_key:`, when the text parses and has one.
fn signing_key_line(text: &str) -> Option<SigningKeyLine> {
    let (root, _) = parse_tree(text, "", "station file");
    let Some(Node::Mapping(top)) = root else {
        return None;
    };
    let (k, v) = top.iter().find(|(k, _)| k.as_str() == "signing_key")?;
    let key_pos = Pos::of(k.span());
    let same_line = pos(v).line == key_pos.line && key_pos.col == 1;
    let value = match v {
        Node::Scalar(s) if same_line => s.as_str().to_string(),
        // Not one line at the margin: reported as such by the check after editing.
        _ => String::from("\u{0}"),
    };
    Some(SigningKeyLine {
        pos: key_pos,
        value,
    })
}

/// `text` with its 1-based line `line` (without its line ending) replaced by `new`.
fn replace_line(text: &str, line: usize, new: &str) -> String {
    let mut out = String::with_capacity(text.len() + new.len());
    for (i, l) in text.split_inclusive('\n').enumerate() {
        if i + 1 == line {
            out.push_str(new);
            let body = l.trim_end_matches(['\n', '\r']);
            out.push_str(&l[body.len()..]);
        } else {
            out.push_str(l);
        }
    }
    out
}

/// The value to write: the key's path relative to the station file's directory when it
/// lies below it, else absolute; quoted when YAML would read it otherwise.
fn signing_key_value(key_real: &Path, station_dir: &Path, label: &str) -> Result<String, KeyError> {
    let dir_real = std::fs::canonicalize(station_dir).unwrap_or_else(|_| absolute(station_dir));
    let shown = key_real.strip_prefix(&dir_real).unwrap_or(key_real);
    let s = shown
        .to_str()
        .ok_or_else(|| refused(label, "expected a key path that is UTF-8 text"))?;
    Ok(yaml_scalar(s))
}

/// The text a YAML scalar written by [`yaml_scalar`] reads back as.
fn value_text(yaml: &str) -> String {
    serde_json::from_str::<String>(yaml).unwrap_or_else(|_| yaml.to_string())
}

fn show_value(v: &str) -> String {
    if v == "\u{0}" {
        "a value over several lines".into()
    } else {
        format!("`{}`", crate::config::show_text(v))
    }
}

fn refused(location: &str, message: &str) -> KeyError {
    KeyError::Refused {
        location: location.to_string(),
        message: message.to_string(),
    }
}

fn parent_dir(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

fn absolute(p: &Path) -> PathBuf {
    std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf())
}

/// `p` with symbolic links resolved as far as it exists; the rest appended as written
/// (a store that does not exist yet still has a place).
fn canonical_lenient(p: &Path) -> PathBuf {
    let abs = absolute(p);
    let mut tail = Vec::new();
    let mut cur = abs.as_path();
    loop {
        if let Ok(real) = std::fs::canonicalize(cur) {
            return tail.iter().rev().fold(real, |acc: PathBuf, t| acc.join(t));
        }
        match (cur.parent(), cur.file_name()) {
            (Some(parent), Some(name)) => {
                tail.push(name.to_os_string());
                cur = parent;
            }
            _ => return abs,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_line_is_replaced_keeping_its_ending_and_every_other_byte() {
        let text = "a: 1\r\nsigning_key: old\r\nb: 2";
        assert_eq!(
            replace_line(text, 2, "signing_key: new"),
            "a: 1\r\nsigning_key: new\r\nb: 2"
        );
    }

    #[test]
    fn a_missing_store_resolves_below_its_nearest_existing_ancestor() {
        let dir = tempfile::tempdir().unwrap();
        let real = std::fs::canonicalize(dir.path()).unwrap();
        assert_eq!(
            canonical_lenient(&dir.path().join("no/such")),
            real.join("no").join("such")
        );
    }
}
