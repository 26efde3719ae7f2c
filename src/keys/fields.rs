//! Values shared by the key file and the keyring: format tags, hex, UTC times, and writing
//! a file without ever leaving half of it under its name.

use crate::config::{found, found_scalar, NodeReader, Pos};
use marked_yaml::types::MarkedMappingNode;
use marked_yaml::Node;
use std::io::Write;
use std::path::Path;
use time::OffsetDateTime;

pub(super) fn pos(n: &Node) -> Pos {
    Pos::of(n.span())
}

/// The value of a required top-level key, or a problem at the file's first key.
pub(super) fn required<'n>(
    v: &mut NodeReader,
    m: &'n MarkedMappingNode,
    key: &str,
    at: Pos,
) -> Option<&'n Node> {
    let n = m.get_node(key);
    if n.is_none() {
        v.report(at, format!("missing required key `{key}`"));
    }
    n
}

/// The format tag (`key: tragus-station-key/1`): exactly `tag`.
pub(super) fn tag(v: &mut NodeReader, n: &Node, what: &str, tag: &str) -> Option<()> {
    let s = v.scalar(n, what, tag)?;
    if s == tag {
        Some(())
    } else {
        v.report(
            pos(n),
            format!(
                "{what}: expected `{tag}` (the only version of this file there is), found {}",
                found_scalar(&s)
            ),
        );
        None
    }
}

/// `n_bytes` bytes written as exactly `2 * n_bytes` lowercase hex digits. A `secret`
/// value is never shown in a message, only its length.
pub(super) fn lower_hex(
    v: &mut NodeReader,
    n: &Node,
    what: &str,
    n_bytes: usize,
    secret: bool,
) -> Option<Vec<u8>> {
    let expected = format!("{} lowercase hex digits", 2 * n_bytes);
    let s = match n {
        Node::Scalar(s) => s.as_str().to_string(),
        other => {
            v.report(
                pos(other),
                format!("{what}: expected {expected}, found {}", found(other)),
            );
            return None;
        }
    };
    let ok = s.len() == 2 * n_bytes && s.bytes().all(|b| matches!(b, b'0'..=b'9' | b'a'..=b'f'));
    if ok {
        return hex::decode(&s).ok();
    }
    let shown = if secret {
        let bad = s
            .chars()
            .filter(|c| !matches!(c, '0'..='9' | 'a'..='f'))
            .count();
        format!(
            "{} characters, {bad} of them not lowercase hex digits (the value is secret and \
             not shown)",
            s.chars().count()
        )
    } else {
        found_scalar(&s)
    };
    v.report(
        pos(n),
        format!("{what}: expected {expected}, found {shown}"),
    );
    None
}

/// A UTC time `YYYY-MM-DDTHH:MM:SSZ`.
pub(super) fn time_utc(v: &mut NodeReader, n: &Node, what: &str) -> Option<OffsetDateTime> {
    let s = v.scalar(n, what, "a UTC time YYYY-MM-DDTHH:MM:SSZ")?;
    match parse_time_utc(s.trim()) {
        Some(t) => Some(t),
        None => {
            v.report(
                pos(n),
                format!(
                    "{what}: expected a UTC time YYYY-MM-DDTHH:MM:SSZ, found {}",
                    found_scalar(&s)
                ),
            );
            None
        }
    }
}

/// Parse `YYYY-MM-DDTHH:MM:SSZ` (whole seconds, UTC), the one form the key files write.
pub(super) fn parse_time_utc(s: &str) -> Option<OffsetDateTime> {
    let b = s.as_bytes();
    let digits = [0..4, 5..7, 8..10, 11..13, 14..16, 17..19];
    let shape = b.len() == 20
        && b[4] == b'-'
        && b[7] == b'-'
        && b[10] == b'T'
        && b[13] == b':'
        && b[16] == b':'
        && b[19] == b'Z'
        && digits
            .iter()
            .all(|r| b[r.clone()].iter().all(u8::is_ascii_digit));
    if !shape {
        return None;
    }
    let n = |r: std::ops::Range<usize>| s[r].parse::<u16>().ok();
    let month = time::Month::try_from(n(5..7)? as u8).ok()?;
    let date = time::Date::from_calendar_date(i32::from(n(0..4)?), month, n(8..10)? as u8).ok()?;
    let t = time::Time::from_hms(n(11..13)? as u8, n(14..16)? as u8, n(17..19)? as u8).ok()?;
    Some(time::PrimitiveDateTime::new(date, t).assume_utc())
}

/// `YYYY-MM-DDTHH:MM:SSZ` (the fraction of a second dropped).
pub fn format_time_utc(t: OffsetDateTime) -> String {
    let t = t.to_offset(time::UtcOffset::UTC);
    format!(
        "{:04}-{:02}-{:02}T{:02}:{:02}:{:02}Z",
        t.year(),
        u8::from(t.month()),
        t.day(),
        t.hour(),
        t.minute(),
        t.second()
    )
}

/// A string as a YAML scalar: plain when that reads back as the same string, else
/// double-quoted (a JSON string is a valid YAML double-quoted scalar).
pub(super) fn yaml_scalar(s: &str) -> String {
    let plain = !s.is_empty()
        && s.bytes().all(|b| {
            b.is_ascii_alphanumeric() || matches!(b, b'.' | b'_' | b'-' | b'/' | b'+' | b'~')
        })
        && s.bytes().next().is_some_and(|b| b != b'-' && b != b'~')
        && !matches!(
            s,
            "null" | "Null" | "NULL" | "true" | "True" | "TRUE" | "false" | "False" | "FALSE"
        )
        && s.parse::<f64>().is_err();
    if plain {
        s.to_string()
    } else {
        serde_json::to_string(s).unwrap_or_else(|_| format!("{s:?}"))
    }
}

/// Replace (or create) `path` with `bytes` through a temporary sibling and a rename, so a
/// crash leaves the old file or the new one, never half of one. An existing file keeps
/// its permissions; `path` must not be a symbolic link (resolve it first).
pub(super) fn write_replacing(
    path: &Path,
    bytes: &[u8],
    what: &'static str,
) -> Result<(), super::KeyError> {
    let err = |source| super::KeyError::Write {
        path: path.display().to_string(),
        what,
        source,
    };
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "file".into());
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let result = (|| -> std::io::Result<()> {
        let mut f = std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&tmp)?;
        if let Ok(meta) = std::fs::metadata(path) {
            f.set_permissions(meta.permissions())?;
        }
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)?;
        sync_dir(dir)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result.map_err(err)
}

/// Make a rename or a new file in `dir` durable (a no-op where directories cannot be
/// opened).
pub(super) fn sync_dir(dir: &Path) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        std::fs::File::open(dir)?.sync_all()?;
    }
    #[cfg(not(unix))]
    let _ = dir;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::{format_time_utc, parse_time_utc, yaml_scalar};

    #[test]
    fn times_read_back_as_written_and_impossible_dates_are_refused() {
        let t = parse_time_utc("2028-02-29T23:59:59Z").unwrap();
        assert_eq!(format_time_utc(t), "2028-02-29T23:59:59Z");
        // 2027 is no leap year (Gregorian calendar); hours run to 23.
        assert!(parse_time_utc("2027-02-29T00:00:00Z").is_none());
        assert!(parse_time_utc("2027-01-01T24:00:00Z").is_none());
        assert!(parse_time_utc("2027-01-01T00:00:00+01:00").is_none());
        assert!(parse_time_utc("2027-01-01 00:00:00Z").is_none());
        assert!(parse_time_utc("+027-01-01T00:00:00Z").is_none());
    }

    #[test]
    fn scalars_that_yaml_would_read_otherwise_are_quoted() {
        assert_eq!(yaml_scalar("keys/st1.key"), "keys/st1.key");
        assert_eq!(yaml_scalar("/etc/tragus/st1.key"), "/etc/tragus/st1.key");
        assert_eq!(yaml_scalar("a b: c"), "\"a b: c\"");
        assert_eq!(yaml_scalar("true"), "\"true\"");
        assert_eq!(yaml_scalar("1e3"), "\"1e3\"");
        assert_eq!(yaml_scalar("-x"), "\"-x\"");
        assert_eq!(yaml_scalar("#x"), "\"#x\"");
    }
}
