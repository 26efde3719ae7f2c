//! Archived inputs: the exact files that judged a unit (the plan with its limit CSVs and
//! models, the station file, the calibration file), kept once, content-addressed, beside the
//! captures, so an auditor can read the limits that judged a unit and re-analyse its capture
//! without anyone having kept the files.
//!
//! # The bundle form (a contract: auditors read it)
//!
//! An archived input is one JSON document, `archive/<sha256>.json`, named by the SHA-256 of
//! its bytes. It is serde_json's compact form of
//!
//! ```text
//! {"canonical":"tragus-inputs/1","files":{REL:TEXT,...},"main":REL,"options":{NAME:REL,...},
//!  "role":ROLE}
//! ```
//!
//! with object keys sorted by their bytes: `role` is `plan`, `station` or `calibration`;
//! `files` holds every file the loader read for that input, by its path relative to the
//! deepest directory holding all of them (`/`-separated, no `.` or `..` parts), each as its
//! exact UTF-8 text; `main` is the file that was loaded (the plan, the station file, the
//! calibration file); `options` names files with a special part (`fixture`: a fixture model
//! that replaced the plan's, as `--fixture` or the station file gives it). Written back
//! into an empty directory with the same relative layout ([`InputBundle::write_tree`]),
//! the main file loads exactly as it did, and for a plan the SHA-256 of its canonical form
//! is the record's `plan_sha256` again.

use std::collections::BTreeMap;
use std::path::{Component, Path, PathBuf};

use super::error::StoreError;

/// Name of the archive directory inside the store directory.
pub(crate) const ARCHIVE_DIR: &str = "archive";

/// Extension of archived inputs.
pub(crate) const ARCHIVE_EXT: &str = "json";

/// Largest archived input verification reads (64 MiB: the loader reads at most 16 MiB per
/// file, and a plan names a handful).
pub(crate) const MAX_ARCHIVE_BYTES: u64 = 64 << 20;

/// Name of this version of the bundle form, written into it.
pub const BUNDLE_FORM: &str = "tragus-inputs/1";

/// One archived input: the files read to load it, with their relative layout.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct InputBundle {
    /// Always [`BUNDLE_FORM`].
    pub canonical: String,
    /// Relative path → exact text, for every file read.
    pub files: BTreeMap<String, String>,
    /// The relative path of the file that was loaded.
    pub main: String,
    /// Files with a special part, by name (`fixture`).
    pub options: BTreeMap<String, String>,
    /// `plan`, `station` or `calibration`.
    pub role: String,
}

impl InputBundle {
    /// A bundle of `role` from the files read while loading `main`: `(path, bytes)` as the
    /// loader read them (any path spelling; they are made absolute and deduplicated).
    /// `options` names some of those files. Fails when a file is not UTF-8 text or a named
    /// file was not read.
    pub fn from_files(
        role: &str,
        main: &Path,
        files: &[(PathBuf, Vec<u8>)],
        options: &[(&str, &Path)],
    ) -> Result<InputBundle, String> {
        let abs = |p: &Path| -> Result<PathBuf, String> {
            std::fs::canonicalize(p).map_err(|e| format!("{}: {e}", p.display()))
        };
        let mut by_path: BTreeMap<PathBuf, &[u8]> = BTreeMap::new();
        for (p, bytes) in files {
            by_path.insert(abs(p)?, bytes);
        }
        let main_abs = abs(main)?;
        if !by_path.contains_key(&main_abs) {
            return Err(format!("{} was not read", main.display()));
        }
        // The deepest directory holding every file.
        let mut root: PathBuf = main_abs.parent().map(Path::to_path_buf).unwrap_or_default();
        for p in by_path.keys() {
            while !p.starts_with(&root) {
                if !root.pop() {
                    break;
                }
            }
        }
        let rel = |p: &Path| -> String {
            p.strip_prefix(&root)
                .unwrap_or(p)
                .components()
                .map(|c| c.as_os_str().to_string_lossy().into_owned())
                .collect::<Vec<_>>()
                .join("/")
        };
        let mut out = BTreeMap::new();
        for (p, bytes) in &by_path {
            let text = String::from_utf8(bytes.to_vec())
                .map_err(|_| format!("{} is not UTF-8 text", p.display()))?;
            out.insert(rel(p), text);
        }
        let mut opts = BTreeMap::new();
        for (name, p) in options {
            let a = abs(p)?;
            if !by_path.contains_key(&a) {
                return Err(format!("{} ({name}) was not read", p.display()));
            }
            opts.insert((*name).to_string(), rel(&a));
        }
        Ok(InputBundle {
            canonical: BUNDLE_FORM.to_string(),
            files: out,
            main: rel(&main_abs),
            options: opts,
            role: role.to_string(),
        })
    }

    /// The bundle's bytes in the canonical form (module doc).
    pub fn to_bytes(&self) -> Vec<u8> {
        // Struct fields are declared in sorted order and maps are BTreeMaps, so serde_json's
        // compact output is the canonical form.
        serde_json::to_vec(self).unwrap_or_default()
    }

    /// SHA-256 of [`to_bytes`](Self::to_bytes), lowercase hex: its name in the archive.
    pub fn sha256(&self) -> String {
        crate::digest::sha256_hex(&self.to_bytes())
    }

    /// Read a bundle from its bytes; `sha256` (its name) must be their hash.
    pub fn parse(bytes: &[u8]) -> Result<InputBundle, String> {
        let b: InputBundle = serde_json::from_slice(bytes)
            .map_err(|e| format!("not an archived input ({BUNDLE_FORM}): {e}"))?;
        if b.canonical != BUNDLE_FORM {
            return Err(format!(
                "expected the form {BUNDLE_FORM}, found {:?}",
                b.canonical
            ));
        }
        for p in b.files.keys() {
            safe_rel(p)?;
        }
        if !b.files.contains_key(&b.main) {
            return Err(format!("its main file {:?} is not among its files", b.main));
        }
        for (name, p) in &b.options {
            if !b.files.contains_key(p) {
                return Err(format!("its {name} file {p:?} is not among its files"));
            }
        }
        Ok(b)
    }

    /// Write every file into `dir` (which should be empty) with its relative layout and
    /// return the path of the main file. Paths that would leave `dir` are refused (a
    /// bundle may come from a tampered archive).
    pub fn write_tree(&self, dir: &Path) -> Result<PathBuf, String> {
        for (rel, text) in &self.files {
            let path = dir.join(safe_rel(rel)?);
            if let Some(parent) = path.parent() {
                std::fs::create_dir_all(parent)
                    .map_err(|e| format!("{}: cannot create: {e}", parent.display()))?;
            }
            std::fs::write(&path, text)
                .map_err(|e| format!("{}: cannot write: {e}", path.display()))?;
        }
        Ok(dir.join(safe_rel(&self.main)?))
    }

    /// Where the named option's file is inside a tree written by
    /// [`write_tree`](Self::write_tree) to `dir`.
    pub fn option_path(&self, dir: &Path, name: &str) -> Option<PathBuf> {
        let rel = self.options.get(name)?;
        safe_rel(rel).ok().map(|r| dir.join(r))
    }
}

/// A relative path with only normal parts, or an error.
fn safe_rel(rel: &str) -> Result<PathBuf, String> {
    let p = Path::new(rel);
    let ok = !rel.is_empty()
        && p.components().all(|c| matches!(c, Component::Normal(_)))
        && !rel.contains('\\');
    if ok {
        Ok(p.to_path_buf())
    } else {
        Err(format!(
            "expected a relative path without `..`, found {rel:?}"
        ))
    }
}

/// Path of the archived input with hash `sha256_hex` under `archive_dir`.
pub(crate) fn archive_file(archive_dir: &Path, sha256_hex: &str) -> PathBuf {
    archive_dir.join(format!("{sha256_hex}.{ARCHIVE_EXT}"))
}

/// Make sure the archived input `bytes` is on disk, durably, under its hash name; returns
/// the hash.
pub(crate) fn ensure_archived(archive_dir: &Path, bytes: &[u8]) -> Result<String, StoreError> {
    let sha = crate::digest::sha256_hex(bytes);
    let path = archive_file(archive_dir, &sha);
    super::capture::ensure_file(archive_dir, &path, &sha, bytes)?;
    Ok(sha)
}
