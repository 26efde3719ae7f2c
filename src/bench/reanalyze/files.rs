//! The archived inputs written back as files the loaders read: a private temporary
//! directory, and a station file's tree with the files its loader only checks exist.

use super::super::prepare::load_station;
use super::super::BenchError;
use crate::store::InputBundle;
use std::path::{Component, Path, PathBuf};

/// Keys of a station file naming a file its loader requires to exist but does not read for
/// the plan (so the station's archived bundle does not hold it).
const STATION_FILE_KEYS: [&str; 2] = ["calibration", "signing_key"];

/// Write the station bundle under `base` and load it. The station file may name files its
/// loader only checks exist (the calibration file, the signing key): those are put back
/// where it looks for them (the archived calibration's text; an empty stand-in for
/// anything else), the tree written deep enough that a path with `..` stays inside `base`.
pub(crate) fn materialise_station(
    bundle: &InputBundle,
    calibration: Option<&InputBundle>,
    base: &Path,
) -> Result<crate::station::Station, BenchError> {
    let text = bundle.files.get(&bundle.main).cloned().unwrap_or_default();
    let main_dir: Vec<String> = bundle
        .main
        .split('/')
        .collect::<Vec<_>>()
        .split_last()
        .map(|(_, dirs)| dirs.iter().map(|s| s.to_string()).collect())
        .unwrap_or_default();
    let mut named = Vec::new();
    for key in STATION_FILE_KEYS {
        if let Some(p) = top_level_path(&text, key) {
            named.push((key, p));
        }
    }
    // How far above the bundle's root the named files go.
    let mut depth = 0usize;
    for (_, p) in &named {
        if let Some((_, up)) = lexical(&main_dir, Path::new(p)) {
            depth = depth.max(up);
        }
    }
    let mut root = base.to_path_buf();
    for _ in 0..depth {
        root.push("up");
    }
    let main = bundle.write_tree(&root).map_err(BenchError::bad_input)?;
    for (key, p) in &named {
        let target = match lexical(&main_dir, Path::new(p)) {
            Some((parts, up)) => {
                let mut t = root.clone();
                for _ in 0..up {
                    t.pop();
                }
                parts.iter().for_each(|c| t.push(c));
                t
            }
            // An absolute path: the loader looks on this machine, where it may or may not be.
            None => continue,
        };
        if target.exists() {
            continue;
        }
        let content = match (*key, calibration) {
            ("calibration", Some(c)) => c.files.get(&c.main).cloned().unwrap_or_default(),
            _ => String::new(),
        };
        if let Some(parent) = target.parent() {
            std::fs::create_dir_all(parent).map_err(|e| {
                BenchError::bad_input(format!("{}: cannot create: {e}", parent.display()))
            })?;
        }
        std::fs::write(&target, content).map_err(|e| {
            BenchError::bad_input(format!("{}: cannot write: {e}", target.display()))
        })?;
    }
    load_station(&main)
}

/// A top-level scalar `key` of a YAML document, as text.
fn top_level_path(text: &str, key: &str) -> Option<String> {
    let (Some(marked_yaml::Node::Mapping(top)), _) =
        crate::config::parse_tree(text, "station file", "station file")
    else {
        return None;
    };
    top.get_scalar(key).map(|s| s.as_str().to_string())
}

/// `rel` taken from the directory `dir` (parts below a root) resolved lexically: the parts
/// below the root and how many levels above the root it climbs. `None` for an absolute path.
fn lexical(dir: &[String], rel: &Path) -> Option<(Vec<String>, usize)> {
    let mut parts: Vec<String> = dir.to_vec();
    let mut up = 0usize;
    for c in rel.components() {
        match c {
            Component::Normal(s) => parts.push(s.to_string_lossy().into_owned()),
            Component::CurDir => {}
            Component::ParentDir => {
                if parts.pop().is_none() {
                    up += 1;
                }
            }
            Component::RootDir | Component::Prefix(_) => return None,
        }
    }
    Some((parts, up))
}

/// A directory of its own under the system's temporary directory, removed when dropped.
pub(crate) struct TempDir(PathBuf);

impl TempDir {
    pub(crate) fn new() -> Result<TempDir, BenchError> {
        use std::sync::atomic::{AtomicU64, Ordering};
        static COUNTER: AtomicU64 = AtomicU64::new(0);
        let base = std::env::temp_dir();
        let nanos = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.subsec_nanos())
            .unwrap_or(0);
        for _ in 0..100 {
            let n = COUNTER.fetch_add(1, Ordering::Relaxed);
            let dir = base.join(format!(
                "tragus-reanalyze-{}-{nanos}-{n}",
                std::process::id()
            ));
            match std::fs::create_dir(&dir) {
                Ok(()) => return Ok(TempDir(dir)),
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => continue,
                Err(e) => {
                    return Err(BenchError::retest(format!(
                        "{}: cannot create a temporary directory: {e}",
                        dir.display()
                    )))
                }
            }
        }
        Err(BenchError::retest(format!(
            "{}: cannot create a temporary directory",
            base.display()
        )))
    }

    pub(crate) fn path(&self) -> &Path {
        &self.0
    }
}

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}
