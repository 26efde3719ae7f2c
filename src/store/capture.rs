//! Raw captures on disk: content-addressed WAV files `captures/<sha256-hex>.wav`, written so
//! that a crash leaves either no file, a temporary file, or the complete file under its
//! hash name, never a partial file under a hash name.

use std::fs::{self, File};
use std::io::{ErrorKind, Read, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use sha2::{Digest, Sha256};

use super::error::StoreError;

/// Name of the capture directory inside the store directory.
pub(crate) const CAPTURE_DIR: &str = "captures";
/// Prefix of temporary capture files; verification reports leftovers of these as notices.
pub(crate) const TEMP_PREFIX: &str = ".incoming-";
/// Extension of capture files.
pub(crate) const CAPTURE_EXT: &str = "wav";

/// Distinguishes temporary files of several appends in one process (the pid distinguishes
/// processes).
static TEMP_COUNTER: AtomicU64 = AtomicU64::new(0);

/// Path of the capture with hash `sha256_hex` under `capture_dir`.
pub(crate) fn capture_file(capture_dir: &Path, sha256_hex: &str) -> PathBuf {
    capture_dir.join(format!("{sha256_hex}.{CAPTURE_EXT}"))
}

/// Largest capture file verification reads (512 MiB): a minute of 8 channels at 192 kHz in
/// 32-bit float is 370 MB; anything bigger is not a capture tragus wrote.
pub(crate) const MAX_CAPTURE_BYTES: u64 = 512 << 20;

/// What is found at a content-addressed path.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) enum FileCheck {
    /// Nothing there.
    Missing,
    /// Something that is not a regular file (a directory, a FIFO, a device, a symbolic
    /// link): never opened for reading, so a FIFO or a link to `/dev/zero` cannot hang us.
    NotRegular(&'static str),
    /// A regular file larger than the bound, not read.
    TooLarge(u64),
    /// A regular file and the SHA-256 of its content, lowercase hex.
    Hashed(String),
}

/// Look at `path` without following links and, if it is a regular file of at most
/// `max_bytes`, hash it. An error only when the file exists and cannot be read.
pub(crate) fn check_file(path: &Path, max_bytes: u64) -> Result<FileCheck, StoreError> {
    let meta = match fs::symlink_metadata(path) {
        Ok(m) => m,
        Err(e) if e.kind() == ErrorKind::NotFound => return Ok(FileCheck::Missing),
        Err(source) => {
            return Err(StoreError::Io {
                path: path.to_owned(),
                action: "look at the file",
                source,
            })
        }
    };
    if let Some(kind) = not_regular(&meta.file_type()) {
        return Ok(FileCheck::NotRegular(kind));
    }
    let mut file = open_no_follow(path).map_err(|source| StoreError::Io {
        path: path.to_owned(),
        action: "open the file",
        source,
    })?;
    // Checked again on the open file: the name may have been swapped since the lstat.
    let meta = file.metadata().map_err(|source| StoreError::Io {
        path: path.to_owned(),
        action: "look at the open file",
        source,
    })?;
    if let Some(kind) = not_regular(&meta.file_type()) {
        return Ok(FileCheck::NotRegular(kind));
    }
    if meta.len() > max_bytes {
        return Ok(FileCheck::TooLarge(meta.len()));
    }
    let mut hasher = Sha256::new();
    // 64 KiB: a few pages per read; captures are a few MB, so this is not a hot path.
    let mut buf = vec![0u8; 1 << 16];
    let mut total = 0u64;
    loop {
        let n = file.read(&mut buf).map_err(|source| StoreError::Io {
            path: path.to_owned(),
            action: "read the file",
            source,
        })?;
        if n == 0 {
            break;
        }
        total += n as u64;
        // A file growing while read is bounded too.
        if total > max_bytes {
            return Ok(FileCheck::TooLarge(total));
        }
        hasher.update(&buf[..n]);
    }
    Ok(FileCheck::Hashed(hex::encode(hasher.finalize())))
}

/// What a non-regular file is, in words; `None` for a regular file.
fn not_regular(t: &fs::FileType) -> Option<&'static str> {
    if t.is_file() {
        return None;
    }
    if t.is_symlink() {
        return Some("a symbolic link");
    }
    if t.is_dir() {
        return Some("a directory");
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if t.is_fifo() {
            return Some("a FIFO");
        }
        if t.is_char_device() || t.is_block_device() {
            return Some("a device");
        }
        if t.is_socket() {
            return Some("a socket");
        }
    }
    Some("not a regular file")
}

/// Open for reading without following a final symbolic link and without blocking on a
/// FIFO swapped in after the check.
fn open_no_follow(path: &Path) -> std::io::Result<File> {
    let mut o = fs::OpenOptions::new();
    o.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        o.custom_flags(libc::O_NOFOLLOW | libc::O_NONBLOCK);
    }
    o.open(path)
}

/// SHA-256 of a file's content, lowercase hex; `Ok(None)` when the file does not exist.
/// Anything that is not a regular file of at most [`MAX_CAPTURE_BYTES`] counts as a file
/// whose content does not match (its "hash" names what it is).
pub(crate) fn hash_file(path: &Path) -> Result<Option<String>, StoreError> {
    Ok(match check_file(path, MAX_CAPTURE_BYTES)? {
        FileCheck::Missing => None,
        FileCheck::Hashed(h) => Some(h),
        FileCheck::NotRegular(kind) => Some(format!("({kind})")),
        FileCheck::TooLarge(n) => Some(format!("(a file of {n} bytes)")),
    })
}

/// Make sure the capture `bytes` (hash `sha256_hex`) is on disk, durably, under its hash name.
///
/// An existing file of that name is reused after checking its content; one whose content
/// does not match is left alone (it is evidence) and reported as [`StoreError::CaptureAltered`].
pub(crate) fn ensure_capture(
    capture_dir: &Path,
    sha256_hex: &str,
    bytes: &[u8],
) -> Result<PathBuf, StoreError> {
    let final_path = capture_file(capture_dir, sha256_hex);
    ensure_file(capture_dir, &final_path, sha256_hex, bytes)?;
    Ok(final_path)
}

/// Make sure `bytes` (hash `sha256_hex`) is on disk in `dir`, durably, as `final_path`:
/// written to a temporary file, flushed, renamed, the directory flushed. An existing file
/// is reused after checking its content; one whose content does not match is left alone
/// (it is evidence) and reported as [`StoreError::CaptureAltered`].
pub(crate) fn ensure_file(
    dir: &Path,
    final_path: &Path,
    sha256_hex: &str,
    bytes: &[u8],
) -> Result<(), StoreError> {
    let capture_dir = dir;
    let final_path = final_path.to_owned();
    match hash_file(&final_path)? {
        Some(existing) if existing == sha256_hex => return Ok(()),
        Some(_) => return Err(StoreError::CaptureAltered { path: final_path }),
        None => {}
    }

    let n = TEMP_COUNTER.fetch_add(1, Ordering::Relaxed);
    let temp_path = capture_dir.join(format!(
        "{TEMP_PREFIX}{sha256_hex}-{}-{n}.part",
        std::process::id()
    ));
    let io_err = |path: &Path, action: &'static str| {
        let path = path.to_owned();
        move |source| StoreError::Io {
            path,
            action,
            source,
        }
    };
    {
        let mut file = fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&temp_path)
            .map_err(io_err(&temp_path, "create a temporary capture file"))?;
        file.write_all(bytes)
            .map_err(io_err(&temp_path, "write the capture file"))?;
        // The data must be on the disk before the name points at it, or a power cut could
        // leave a hash-named file with missing blocks.
        file.sync_all()
            .map_err(io_err(&temp_path, "flush the capture file to disk"))?;
    }
    super::crash_point("during_capture");
    // Rename is atomic: readers see no file or the whole file. A concurrent append of the
    // same capture renames an identical file over it, which is harmless.
    fs::rename(&temp_path, &final_path).map_err(io_err(&final_path, "rename the capture file"))?;
    sync_dir(capture_dir)?;
    Ok(())
}

/// Flush a directory's entries, so a rename in it survives a power cut (POSIX requires an
/// fsync of the directory for that; Windows cannot open directories this way and journals
/// renames itself).
pub(crate) fn sync_dir(dir: &Path) -> Result<(), StoreError> {
    #[cfg(unix)]
    {
        File::open(dir)
            .and_then(|d| d.sync_all())
            .map_err(|source| StoreError::Io {
                path: dir.to_owned(),
                action: "flush the directory to disk",
                source,
            })?;
    }
    #[cfg(not(unix))]
    let _ = dir;
    Ok(())
}

/// True when `bytes` starts like a RIFF/WAVE file; the store keeps only WAV captures.
pub(crate) fn looks_like_wav(bytes: &[u8]) -> bool {
    bytes.len() >= 12 && &bytes[0..4] == b"RIFF" && &bytes[8..12] == b"WAVE"
}
