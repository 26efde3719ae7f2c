//! The keyring file an auditor holds: the public keys of the stations, whose each is and
//! when it may sign.
//!
//! ```yaml
//! keyring: tragus-keyring/1
//! keys:
//!   - key_id: 0123456789abcdef       # first 16 hex digits of the public key's SHA-256
//!     station: larkspur-line3-st1
//!     public_key: <64 lowercase hex digits>
//!     valid_from: 2026-12-05T00:00:00Z  # inclusive
//!     valid_until: 2027-12-05T00:00:00Z # exclusive; optional
//! ```
//!
//! New keys are appended as text at the end of the file, so comments and the auditor's
//! own layout stay as they were.

use super::fields::{
    format_time_utc, lower_hex, pos, required, tag, time_utc, write_replacing, yaml_scalar,
};
use super::keyfile::station_id;
use super::{key_id_of, KeyError, Keyring, KeyringEntry, StationKey};
use crate::config::{found, found_scalar, parse_tree, sort_problems, NodeReader, Pos, Problem};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use std::io::Write;
use std::path::{Path, PathBuf};
use time::OffsetDateTime;

/// Format tag of the keyring file (`keyring:`).
pub const KEYRING_FORMAT: &str = "tragus-keyring/1";

/// Comment line at the top of a keyring that tragus creates.
pub const KEYRING_HEADER: &str =
    "# tragus keyring: the public keys of the stations whose signatures an auditor accepts.";

const TOP_KEYS: [&str; 2] = ["keyring", "keys"];
const ENTRY_KEYS: [&str; 5] = [
    "key_id",
    "station",
    "public_key",
    "valid_from",
    "valid_until",
];
/// Indentation of the `- ` of an entry in a keyring tragus writes.
const ENTRY_INDENT: usize = 2;

impl KeyringEntry {
    /// The entry of `key` valid from `valid_from` until `valid_until` (both to whole
    /// seconds, as the file writes them).
    pub fn for_key(
        key: &StationKey,
        valid_from: OffsetDateTime,
        valid_until: Option<OffsetDateTime>,
    ) -> KeyringEntry {
        let whole = |t: OffsetDateTime| {
            t.to_offset(time::UtcOffset::UTC)
                .replace_nanosecond(0)
                .unwrap_or(t)
        };
        KeyringEntry {
            key_id: key.key_id().to_string(),
            station: key.station().to_string(),
            public_key: key.public_key(),
            valid_from: whole(valid_from),
            valid_until: valid_until.map(whole),
        }
    }

    /// The entry as one item of the keyring's `keys:` list, its `- ` indented by
    /// `indent` spaces, newline-terminated.
    pub fn to_yaml_item(&self, indent: usize) -> String {
        let pad = " ".repeat(indent);
        let mut s = format!(
            "{pad}- key_id: {}\n{pad}  station: {}\n{pad}  public_key: {}\n{pad}  valid_from: {}\n",
            self.key_id,
            yaml_scalar(&self.station),
            hex::encode(self.public_key),
            format_time_utc(self.valid_from)
        );
        if let Some(u) = self.valid_until {
            s.push_str(&format!("{pad}  valid_until: {}\n", format_time_utc(u)));
        }
        s
    }
}

impl Keyring {
    /// The entry with this key id.
    pub fn get(&self, key_id: &str) -> Option<&KeyringEntry> {
        self.entries.iter().find(|e| e.key_id == key_id)
    }

    /// The keyring as a file (header comment, format tag, every entry).
    pub fn to_yaml(&self) -> String {
        let mut s = format!("{KEYRING_HEADER}\nkeyring: {KEYRING_FORMAT}\n");
        if self.entries.is_empty() {
            s.push_str("keys: []\n");
        } else {
            s.push_str("keys:\n");
            for e in &self.entries {
                s.push_str(&e.to_yaml_item(ENTRY_INDENT));
            }
        }
        s
    }

    /// Read and check a keyring file; every problem as `path:line:col: message`.
    pub fn load(path: &Path) -> Result<Keyring, KeyError> {
        crate::config::load_file(path, Keyring::load_str).map_err(|e| e.reading("keyring"))
    }

    /// Read and check a keyring's text; `path` labels problems.
    pub fn load_str(text: &str, path: &Path) -> Result<Keyring, KeyError> {
        load_with_indent(text, path).map(|(k, _)| k)
    }

    /// Add `entry` to the keyring file at `path`: a new file when there is none (created
    /// exclusively), else the entry's text appended at the end of the existing text, which
    /// must load first and must not hold the key id already. The result is loaded again
    /// before it replaces the file; when appending would not give exactly one more entry
    /// (the `keys:` list is not the file's last block), the file is left alone and the
    /// error shows the entry to add by hand. Returns whether the file was created.
    pub fn append_to_file(path: &Path, entry: &KeyringEntry) -> Result<bool, KeyError> {
        let label = path.display().to_string();
        if std::fs::symlink_metadata(path).is_err() {
            let text = Keyring {
                entries: vec![entry.clone()],
            }
            .to_yaml();
            let mut f = std::fs::OpenOptions::new()
                .write(true)
                .create_new(true)
                .open(path)
                .map_err(|source| KeyError::Write {
                    path: label.clone(),
                    what: "keyring",
                    source,
                })?;
            f.write_all(text.as_bytes())
                .and_then(|()| f.sync_all())
                .map_err(|source| KeyError::Write {
                    path: label,
                    what: "keyring",
                    source,
                })?;
            return Ok(true);
        }
        let (old, text, indent) = crate::config::load_file(path, |text: &str, p: &Path| {
            load_with_indent(text, p).map(|(k, i)| (k, text.to_string(), i))
        })
        .map_err(|e| e.reading("keyring"))?;
        if let Some(e) = old.get(&entry.key_id) {
            return Err(KeyError::Refused {
                location: label,
                message: format!(
                    "expected a key id not yet in the keyring, found {} already (station {})",
                    e.key_id, e.station
                ),
            });
        }
        let item = entry.to_yaml_item(indent);
        let mut new_text = text.clone();
        if !new_text.is_empty() && !new_text.ends_with('\n') {
            new_text.push('\n');
        }
        new_text.push_str(&item);
        let mut want = old.clone();
        want.entries.push(entry.clone());
        if Keyring::load_str(&new_text, path).ok().as_ref() != Some(&want) {
            return Err(KeyError::Refused {
                location: label,
                message: format!(
                    "cannot append the new key at the end of this keyring (its `keys:` list \
                     is not the file's last block, or is written in flow style); add this \
                     entry to `keys:` by hand:\n{}",
                    entry.to_yaml_item(ENTRY_INDENT)
                ),
            });
        }
        // Replace the file a symbolic link points to, not the link.
        let real = std::fs::canonicalize(path).map_err(|source| KeyError::Write {
            path: label,
            what: "keyring",
            source,
        })?;
        write_replacing(&real, new_text.as_bytes(), "keyring")?;
        Ok(false)
    }
}

/// The keyring and the indentation of its entries' `- ` (for appending in kind).
fn load_with_indent(text: &str, path: &Path) -> Result<(Keyring, usize), KeyError> {
    let label = path.display().to_string();
    let (root, mut problems) = parse_tree(text, &label, "keyring");
    let mut v = NodeReader::new(label.clone(), PathBuf::from("."));
    let ring = root.as_ref().and_then(|n| match n {
        Node::Mapping(m) => read_keyring(&mut v, m),
        _ => None,
    });
    problems.append(&mut v.problems);
    match ring {
        Some(r) if problems.is_empty() => Ok(r),
        _ => {
            if problems.is_empty() {
                problems.push(Problem {
                    location: Pos { line: 1, col: 1 }.at(&label),
                    message: "the keyring could not be read".into(),
                });
            }
            sort_problems(&mut problems, &label);
            Err(KeyError::Invalid(problems))
        }
    }
}

fn read_keyring(v: &mut NodeReader, top: &MarkedMappingNode) -> Option<(Keyring, usize)> {
    let at = top
        .keys()
        .next()
        .map_or(Pos { line: 1, col: 1 }, |k| Pos::of(k.span()));
    v.unknown_keys(top, &TOP_KEYS, "");
    let format = required(v, top, "keyring", at).and_then(|n| tag(v, n, "keyring", KEYRING_FORMAT));
    let keys = required(v, top, "keys", at)?;
    let Node::Sequence(seq) = keys else {
        v.report(
            pos(keys),
            format!(
                "keys: expected a list of {{key_id, station, public_key, valid_from, \
                 valid_until}}, found {}",
                found(keys)
            ),
        );
        return None;
    };
    let mut entries: Vec<KeyringEntry> = Vec::new();
    // Line of each entry's key id, for a duplicate's message.
    let mut lines: Vec<usize> = Vec::new();
    let mut ok = true;
    let mut indent = None;
    for (i, item) in seq.iter().enumerate() {
        if let Node::Mapping(m) = item {
            if let Some(k) = m.keys().next() {
                // The key's column is 1-based and sits 2 after the `- `.
                indent.get_or_insert(Pos::of(k.span()).col.saturating_sub(3));
            }
        }
        let what = format!("keys[{}]", i + 1);
        match read_entry(v, item, &what) {
            Some((e, id_node)) => {
                if let Some(j) = entries.iter().position(|x| x.key_id == e.key_id) {
                    v.report(
                        pos(id_node),
                        format!(
                            "{what}.key_id: expected a key id not already in the keyring, found \
                             {} (also keys[{}], line {})",
                            found_scalar(&e.key_id),
                            j + 1,
                            lines[j]
                        ),
                    );
                    ok = false;
                    continue;
                }
                lines.push(pos(id_node).line);
                entries.push(e);
            }
            None => ok = false,
        }
    }
    format?;
    ok.then_some((Keyring { entries }, indent.unwrap_or(ENTRY_INDENT)))
}

fn read_entry<'n>(v: &mut NodeReader, n: &'n Node, what: &str) -> Option<(KeyringEntry, &'n Node)> {
    let f = v.fields(n, what, &ENTRY_KEYS, &ENTRY_KEYS[..4])?;
    let id_node = f[0]?;
    let key_id = lower_hex(v, id_node, &format!("{what}.key_id"), 8, false).map(hex::encode);
    let station = f[1].and_then(|n| station_id(v, n, &format!("{what}.station")));
    let public_key = f[2].and_then(|n| {
        let what = format!("{what}.public_key");
        let bytes = <[u8; 32]>::try_from(lower_hex(v, n, &what, 32, false)?).ok()?;
        if ed25519_dalek::VerifyingKey::from_bytes(&bytes).is_err() {
            v.report(
                pos(n),
                format!(
                    "{what}: expected an Ed25519 public key (RFC 8032 section 5.1.3: a point \
                     of the curve), found {}, which is none",
                    hex::encode(bytes)
                ),
            );
            return None;
        }
        Some(bytes)
    });
    let valid_from = f[3].and_then(|n| time_utc(v, n, &format!("{what}.valid_from")));
    let valid_until = match f[4] {
        None => Some(None),
        Some(n) => time_utc(v, n, &format!("{what}.valid_until")).map(Some),
    };
    let (key_id, public_key) = (key_id?, public_key?);
    let own = key_id_of(&public_key);
    if key_id != own {
        v.report(
            pos(id_node),
            format!(
                "{what}.key_id: expected {own}, the id of its public key (the first 16 hex \
                 digits of its SHA-256), found {}",
                found_scalar(&key_id)
            ),
        );
        return None;
    }
    let (valid_from, valid_until) = (valid_from?, valid_until?);
    if let (Some(u), Some(n)) = (valid_until, f[4]) {
        if u <= valid_from {
            v.report(
                pos(n),
                format!(
                    "{what}.valid_until: expected a time after valid_from ({}), found {}",
                    format_time_utc(valid_from),
                    format_time_utc(u)
                ),
            );
            return None;
        }
    }
    Some((
        KeyringEntry {
            key_id,
            station: station?,
            public_key,
            valid_from,
            valid_until,
        },
        id_node,
    ))
}
