//! The station's private key file: made once from the operating system's randomness,
//! written 0600 and never overwritten, read back refusing a file others may read.
//!
//! ```yaml
//! # tragus station key: keep this file secret, readable only by the station account.
//! key: tragus-station-key/1
//! station: larkspur-line3-st1
//! key_id: 0123456789abcdef
//! secret_hex: <64 lowercase hex digits: the 32-byte RFC 8032 secret>
//! ```

use super::fields::{lower_hex, pos, required, sync_dir, tag, yaml_scalar};
use super::{key_id_of, KeyError, StationKey};
use crate::config::{found_scalar, is_id, parse_tree, sort_problems, NodeReader, Pos, Problem};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Format tag of the key file (`key:`).
pub const KEY_FILE_FORMAT: &str = "tragus-station-key/1";

/// First line of every key file.
pub const KEY_FILE_HEADER: &str =
    "# tragus station key: keep this file secret, readable only by the station account.";

const KEY_FILE_KEYS: [&str; 4] = ["key", "station", "key_id", "secret_hex"];

impl StationKey {
    /// A new key for `station` from the operating system's random source.
    pub fn generate(station: &str) -> Result<StationKey, KeyError> {
        use rand::TryRngCore;
        let mut secret = [0u8; 32];
        rand::rngs::OsRng
            .try_fill_bytes(&mut secret)
            .map_err(|e| KeyError::Random(e.to_string()))?;
        let key = StationKey::from_secret(station, &secret);
        secret.fill(0);
        Ok(key)
    }

    /// The key file's text (it holds the secret: write it only with [`StationKey::write_new`]).
    pub fn to_file_text(&self) -> String {
        format!(
            "{KEY_FILE_HEADER}\nkey: {KEY_FILE_FORMAT}\nstation: {}\nkey_id: {}\nsecret_hex: {}\n",
            yaml_scalar(&self.station),
            self.key_id,
            hex::encode(self.signing.to_bytes())
        )
    }

    /// Write the key file at `path`: created new (never over an existing file, even one
    /// that appears in between), readable and writable by its owner only (unix mode 0600),
    /// synced to disk with its directory.
    pub fn write_new(&self, path: &Path) -> Result<(), KeyError> {
        let label = path.display().to_string();
        let mut options = std::fs::OpenOptions::new();
        options.write(true).create_new(true);
        #[cfg(unix)]
        {
            use std::os::unix::fs::OpenOptionsExt;
            options.mode(0o600);
        }
        let mut file = options.open(path).map_err(|source| {
            if source.kind() == std::io::ErrorKind::AlreadyExists {
                KeyError::Exists {
                    path: label.clone(),
                    what: "file",
                }
            } else {
                KeyError::Write {
                    path: label.clone(),
                    what: "station key",
                    source,
                }
            }
        })?;
        let written = file
            .write_all(self.to_file_text().as_bytes())
            .and_then(|()| file.sync_all())
            .and_then(|()| sync_dir(path.parent().unwrap_or(Path::new("."))));
        if let Err(source) = written {
            // Half a key is no key; the file is ours (created just now), so it goes.
            drop(file);
            let _ = std::fs::remove_file(path);
            return Err(KeyError::Write {
                path: label,
                what: "station key",
                source,
            });
        }
        Ok(())
    }

    /// Read a key file. On unix a file the group or others may read or write is refused
    /// ([`KeyError::Exposed`]); problems in the text are reported as `path:line:col`.
    pub fn load(path: &Path) -> Result<StationKey, KeyError> {
        check_private(path)?;
        crate::config::load_file(path, StationKey::load_str).map_err(|e| e.reading("station key"))
    }

    /// Read a key file's text (no permission check); `path` labels problems.
    pub fn load_str(text: &str, path: &Path) -> Result<StationKey, KeyError> {
        let label = path.display().to_string();
        let (root, mut problems) = parse_tree(text, &label, "station key");
        let mut v = NodeReader::new(label.clone(), PathBuf::from("."));
        let key = root.as_ref().and_then(|n| match n {
            Node::Mapping(m) => read_key(&mut v, m),
            _ => None,
        });
        problems.append(&mut v.problems);
        match key {
            Some(k) if problems.is_empty() => Ok(k),
            _ => {
                if problems.is_empty() {
                    problems.push(Problem {
                        location: Pos { line: 1, col: 1 }.at(&label),
                        message: "the station key could not be read".into(),
                    });
                }
                sort_problems(&mut problems, &label);
                Err(KeyError::Invalid(problems))
            }
        }
    }
}

/// Refuse a key file whose permissions let the group or others at it.
fn check_private(path: &Path) -> Result<(), KeyError> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        // An unreadable or missing file is reported by the loader with its own words.
        if let Ok(meta) = std::fs::metadata(path) {
            let mode = meta.permissions().mode() & 0o777;
            if mode & 0o077 != 0 {
                return Err(KeyError::Exposed {
                    path: path.display().to_string(),
                    mode,
                });
            }
        }
    }
    #[cfg(not(unix))]
    let _ = path;
    Ok(())
}

fn read_key(v: &mut NodeReader, top: &MarkedMappingNode) -> Option<StationKey> {
    let at = top
        .keys()
        .next()
        .map_or(Pos { line: 1, col: 1 }, |k| Pos::of(k.span()));
    v.unknown_keys(top, &KEY_FILE_KEYS, "");
    let format = required(v, top, "key", at).and_then(|n| tag(v, n, "key", KEY_FILE_FORMAT));
    let station = required(v, top, "station", at).and_then(|n| station_id(v, n, "station"));
    let key_id_node = required(v, top, "key_id", at);
    let key_id = key_id_node.and_then(|n| lower_hex(v, n, "key_id", 8, false));
    let secret = required(v, top, "secret_hex", at)
        .and_then(|n| lower_hex(v, n, "secret_hex", 32, true))
        .and_then(|b| <[u8; 32]>::try_from(b).ok());
    format?;
    let key = StationKey::from_secret(&station?, &secret?);
    let key_id = hex::encode(key_id?);
    if key_id != key.key_id {
        let n = key_id_node?;
        v.report(
            pos(n),
            format!(
                "key_id: expected {}, the id of this secret's public key (the first 16 hex \
                 digits of its SHA-256), found {}; the file was edited or pieced together",
                key.key_id,
                found_scalar(&key_id)
            ),
        );
        return None;
    }
    debug_assert_eq!(key.key_id, key_id_of(&key.public_key()));
    Some(key)
}

/// A station id (`[a-z0-9][a-z0-9._-]*`), as the station file writes it.
pub(super) fn station_id(v: &mut NodeReader, n: &Node, what: &str) -> Option<String> {
    let s = v.scalar(n, what, "a station id")?;
    if is_id(&s) {
        Some(s)
    } else {
        v.report(
            pos(n),
            format!(
                "{what}: expected a station id of lowercase letters, digits, `.`, `_` and `-`, \
                 starting with a letter or digit, found {}",
                found_scalar(&s)
            ),
        );
        None
    }
}
