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

/// SHA-256 of a file's content, lowercase hex; `Ok(None)` when the file does not exist.
pub(crate) fn hash_file(path: &Path) -> Result<Option<String>, StoreError> {
    let mut file = match File::open(path) {
        Ok(f) => f,
        Err(e) if e.kind() == ErrorKind::NotFound => return Ok(None),
        Err(source) => {
            return Err(StoreError::Io {
                path: path.to_owned(),
                action: "open the capture file",
                source,
            })
        }
    };
    let mut hasher = Sha256::new();
    // 64 KiB: a few pages per read; captures are a few MB, so this is not a hot path.
    let mut buf = vec![0u8; 1 << 16];
    loop {
        let n = file.read(&mut buf).map_err(|source| StoreError::Io {
            path: path.to_owned(),
            action: "read the capture file",
            source,
        })?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
    }
    Ok(Some(hex::encode(hasher.finalize())))
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
    match hash_file(&final_path)? {
        Some(existing) if existing == sha256_hex => return Ok(final_path),
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
    Ok(final_path)
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
