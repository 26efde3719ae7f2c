//! The files the records name by hash: captures and archived inputs, looked at without
//! following links and read only when regular and of bounded size (a FIFO, a link to
//! `/dev/zero` or a directory in a file's place is reported, never read); and the scan of
//! both directories for files no record names.

use std::collections::{HashMap, HashSet};
use std::path::{Path, PathBuf};

use super::{Ctx, FileProblem, Notice, ProblemKind};
use crate::store::archive::{archive_file, ARCHIVE_EXT, MAX_ARCHIVE_BYTES};
use crate::store::capture::{
    capture_file, check_file, FileCheck, CAPTURE_EXT, MAX_CAPTURE_BYTES, TEMP_PREFIX,
};
use crate::store::hash::is_sha256_hex;

/// The hashes the records name, and what each file was found to be (checked once however
/// many records share it).
#[derive(Default)]
pub(super) struct Referenced {
    captures: HashMap<String, Option<FileProblem>>,
    archived: HashMap<String, Option<FileProblem>>,
}

impl Referenced {
    pub(super) fn n_captures(&self) -> u64 {
        self.captures.len() as u64
    }

    pub(super) fn n_archived(&self) -> u64 {
        self.archived.len() as u64
    }
}

/// What is wrong with the file `path` that should hash to `sha`; `None` when it does.
fn look(path: &Path, sha: &str, max: u64) -> Option<FileProblem> {
    match check_file(path, max) {
        Ok(FileCheck::Hashed(h)) if h == sha => None,
        Ok(FileCheck::Hashed(computed)) => Some(FileProblem::Altered { computed }),
        Ok(FileCheck::Missing) => Some(FileProblem::Missing),
        Ok(FileCheck::NotRegular(what)) => Some(FileProblem::NotRegular(what)),
        Ok(FileCheck::TooLarge(n)) => Some(FileProblem::TooLarge(n)),
        Err(e) => Some(FileProblem::Unreadable(
            std::error::Error::source(&e).map_or_else(|| e.to_string(), |s| s.to_string()),
        )),
    }
}

/// Check record `id`'s capture `sha` (64 lowercase hex digits).
pub(super) fn check_capture(ctx: &mut Ctx<'_>, refs: &mut Referenced, id: i64, sha: &str) {
    let path = capture_file(ctx.paths.capture_dir, sha);
    let problem = refs
        .captures
        .entry(sha.to_owned())
        .or_insert_with(|| look(&path, sha, MAX_CAPTURE_BYTES))
        .clone();
    let kind = match problem {
        None => return,
        Some(FileProblem::Missing) => ProblemKind::CaptureMissing { path },
        Some(FileProblem::Altered { computed }) => ProblemKind::CaptureAltered { path, computed },
        Some(problem) => ProblemKind::CaptureUnusable { path, problem },
    };
    ctx.problem(Some(id), kind);
}

/// Check record `id`'s archived input of `role`, `sha` (64 lowercase hex digits).
pub(super) fn check_archived(
    ctx: &mut Ctx<'_>,
    refs: &mut Referenced,
    id: i64,
    role: &str,
    sha: &str,
) {
    let path = archive_file(ctx.paths.archive_dir, sha);
    let problem = refs
        .archived
        .entry(sha.to_owned())
        .or_insert_with(|| look(&path, sha, MAX_ARCHIVE_BYTES))
        .clone();
    if let Some(problem) = problem {
        ctx.problem(
            Some(id),
            ProblemKind::ArchivedInput {
                role: role.to_owned(),
                path,
                problem,
            },
        );
    }
}

/// List what the capture and archive directories hold beyond the files the records name:
/// notices, never problems (a crash leaves such files).
pub(super) fn scan_dirs(ctx: &mut Ctx<'_>, refs: &Referenced) {
    let capture_dir = ctx.paths.capture_dir.to_owned();
    let archive_dir = ctx.paths.archive_dir.to_owned();
    let captures: HashSet<&str> = refs.captures.keys().map(String::as_str).collect();
    let archived: HashSet<&str> = refs.archived.keys().map(String::as_str).collect();
    scan(ctx, &capture_dir, CAPTURE_EXT, &captures, |path| {
        Notice::OrphanCapture { path }
    });
    scan(ctx, &archive_dir, ARCHIVE_EXT, &archived, |path| {
        Notice::OrphanArchived { path }
    });
}

fn scan(
    ctx: &mut Ctx<'_>,
    dir: &Path,
    ext: &str,
    referenced: &HashSet<&str>,
    orphan: fn(PathBuf) -> Notice,
) {
    let entries = match std::fs::read_dir(dir) {
        Ok(rd) => rd.collect::<Result<Vec<_>, _>>(),
        // A store of schema 3 or before has no archive; a store without captures has no
        // records naming one (those that do are reported missing).
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return,
        Err(e) => Err(e),
    };
    let mut entries = match entries {
        Ok(entries) => entries,
        Err(e) => {
            ctx.problem(
                None,
                ProblemKind::DirectoryUnreadable {
                    path: dir.to_owned(),
                    detail: e.to_string(),
                },
            );
            return;
        }
    };
    // Sorted so two runs of verify print the same report.
    entries.sort_by_key(|e| e.file_name());
    for entry in entries {
        let path = entry.path();
        let name = entry.file_name();
        let name = name.to_string_lossy();
        let is_file = entry.file_type().map(|t| t.is_file()).unwrap_or(false);
        let stem = name
            .strip_suffix(ext)
            .and_then(|s| s.strip_suffix('.'))
            .filter(|s| is_sha256_hex(s));
        if let Some(stem) = stem {
            if referenced.contains(stem) {
                // Named by a record: checked there, whatever it is.
                continue;
            }
        }
        if is_file && name.starts_with(TEMP_PREFIX) {
            ctx.notices.push(Notice::LeftoverTemp { path });
        } else if stem.is_some() && is_file {
            ctx.notices.push(orphan(path));
        } else {
            ctx.notices.push(Notice::UnexpectedFile { path });
        }
    }
}
