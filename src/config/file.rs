//! Reading a project file from disk: the one loader every file kind goes through.
//!
//! [`load_file`] reads a plan, a coupler model, an earphone file, a station file or a
//! calibration file and hands its text to that kind's parser; [`read_data_file`] reads the
//! files they name (limit-line and impedance CSVs, models named by a plan). Both refuse,
//! with an error naming the path:
//!
//! - anything but a regular file (a directory, a FIFO, a device, a socket), seen in its
//!   metadata before it is opened: opening a FIFO with no writer would block the station
//!   forever, and reading a device need not end. A symbolic link to a regular file is
//!   followed. The path is looked at again through the opened file, so a swap to a
//!   directory or a device in between is caught too; a swap to a FIFO in that instant would
//!   still block the open, which only someone who may rewrite the station's files can do;
//! - a file larger than [`MAX_CONFIG_BYTES`], before reading it (and a file that grows past
//!   it while being read);
//! - text that is not UTF-8, as a problem at the first invalid byte's `path:line:col`.

use super::diag::{Location, Problem};
use std::fs::{File, Metadata};
use std::io::{self, ErrorKind, Read};
use std::path::Path;

/// Largest project file accepted, bytes (16 MiB). The largest real files (a plan with long
/// inline limit lines, an impedance table of thousands of points) are a few hundred kB;
/// the bound keeps a wrong path (a capture, a disk image) from filling memory and stalling
/// the parser, with ample room for generated tables.
pub const MAX_CONFIG_BYTES: u64 = 16 * 1024 * 1024;

/// Why a path is refused before its text is read. Carried inside the [`io::Error`] a
/// loader reports (`ErrorKind::IsADirectory`, `FileTooLarge` or `InvalidInput`), so that
/// its message reads `PATH: cannot read plan: expected a regular file, found a directory`.
#[derive(Debug, thiserror::Error)]
pub enum Refusal {
    /// The path names something other than a regular file.
    #[error("expected a regular file, found {found}")]
    NotRegularFile {
        /// What it is instead: `a directory`, `a FIFO (named pipe)`, `a device`, ….
        found: &'static str,
    },
    /// The file is larger than [`MAX_CONFIG_BYTES`].
    #[error("expected at most {MAX_CONFIG_BYTES} bytes (16 MiB), found {size_bytes} bytes")]
    TooLarge {
        /// Its size, bytes (at least what was read when it grew while being read).
        size_bytes: u64,
    },
}

impl Refusal {
    fn into_io(self) -> io::Error {
        let kind = match &self {
            Refusal::NotRegularFile { found } if *found == DIRECTORY => ErrorKind::IsADirectory,
            Refusal::NotRegularFile { .. } => ErrorKind::InvalidInput,
            Refusal::TooLarge { .. } => ErrorKind::FileTooLarge,
        };
        io::Error::new(kind, self)
    }
}

const DIRECTORY: &str = "a directory";

/// The error type of one file kind's loader, as [`load_file`] builds it.
///
/// Implementors keep their own wording for the two variants (`cannot read plan`, …); the
/// refusals inside the I/O error read the same for every kind.
pub trait FileError: Sized {
    /// The file could not be read: missing, unreadable, not a regular file, too large.
    fn unreadable(path: String, source: io::Error) -> Self;
    /// The file was read and has these problems (never empty).
    fn invalid(problems: Vec<Problem>) -> Self;
    /// The text is not UTF-8: `problem` is at the first invalid byte, whose value is given
    /// for a kind that names it.
    fn not_utf8(problem: Problem, _byte: u8) -> Self {
        Self::invalid(vec![problem])
    }
}

/// Read the project file at `path` (a regular file of at most [`MAX_CONFIG_BYTES`], UTF-8
/// text) and give its text to `parse` with the path; the loader of every file kind.
pub fn load_file<T, E: FileError>(
    path: &Path,
    parse: impl FnOnce(&str, &Path) -> Result<T, E>,
) -> Result<T, E> {
    let label = path.display().to_string();
    let bytes = read_bytes(path).map_err(|source| E::unreadable(label.clone(), source))?;
    match String::from_utf8(bytes) {
        Ok(text) => parse(&text, path),
        Err(e) => {
            let valid_up_to = e.utf8_error().valid_up_to();
            let (problem, byte) = utf8_problem(e.as_bytes(), valid_up_to, &label);
            Err(E::not_utf8(problem, byte))
        }
    }
}

/// Read a file a project file names (a limit-line CSV, a coupler model named by a plan)
/// as UTF-8 text, with the guards of [`load_file`]. `kind` names it in the error, which is
/// the message's tail: `cannot read limit file PATH: file not found`, or `limit file PATH
/// is not UTF-8 text`.
pub fn read_data_file(path: &Path, kind: &str) -> Result<String, String> {
    let label = path.display();
    match read_bytes(path) {
        Ok(bytes) => {
            String::from_utf8(bytes).map_err(|_| format!("{kind} file {label} is not UTF-8 text"))
        }
        Err(e) => {
            let why = if e.kind() == ErrorKind::NotFound {
                "file not found".to_string()
            } else {
                lower_first(&e.to_string())
            };
            Err(format!("cannot read {kind} file {label}: {why}"))
        }
    }
}

/// The bytes of the regular file at `path`, at most [`MAX_CONFIG_BYTES`] of them; a
/// refusal is an [`io::Error`] carrying a [`Refusal`].
pub fn read_bytes(path: &Path) -> io::Result<Vec<u8>> {
    check(&std::fs::metadata(path)?)?;
    let mut file = File::open(path)?;
    let meta = file.metadata()?;
    check(&meta)?;
    let capacity = usize::try_from(meta.len()).unwrap_or(0);
    let mut bytes = Vec::with_capacity(capacity);
    // One byte past the bound tells a file that grew while being read from one at it.
    (&mut file)
        .take(MAX_CONFIG_BYTES + 1)
        .read_to_end(&mut bytes)?;
    let n_bytes = bytes.len() as u64;
    if n_bytes > MAX_CONFIG_BYTES {
        return Err(Refusal::TooLarge {
            size_bytes: n_bytes.max(meta.len()),
        }
        .into_io());
    }
    READS.with(|r| {
        if let Some(log) = r.borrow_mut().as_mut() {
            log.push((path.to_path_buf(), bytes.clone()));
        }
    });
    Ok(bytes)
}

/// Files read, as `(path as given, exact bytes)`.
pub type ReadLog = Vec<(std::path::PathBuf, Vec<u8>)>;

thread_local! {
    /// The files read on this thread while [`recording_reads`] runs.
    static READS: std::cell::RefCell<Option<ReadLog>> = const { std::cell::RefCell::new(None) };
}

/// Run `f` and return, with its result, every file read through this module on this thread
/// meanwhile (path as given, exact bytes), in order: the exact inputs of a load, for the
/// store's archive. Nested calls each see their own reads.
pub fn recording_reads<T>(f: impl FnOnce() -> T) -> (T, ReadLog) {
    let outer = READS.with(|r| r.borrow_mut().replace(Vec::new()));
    let value = f();
    let mine = READS.with(|r| {
        let mine = r.borrow_mut().take().unwrap_or_default();
        if let Some(mut outer) = outer {
            outer.extend(mine.iter().cloned());
            *r.borrow_mut() = Some(outer);
        }
        mine
    });
    (value, mine)
}

/// Refuse what is not a regular file of at most [`MAX_CONFIG_BYTES`].
fn check(meta: &Metadata) -> io::Result<()> {
    let kind = meta.file_type();
    if !kind.is_file() {
        return Err(Refusal::NotRegularFile {
            found: not_regular(&kind),
        }
        .into_io());
    }
    if meta.len() > MAX_CONFIG_BYTES {
        return Err(Refusal::TooLarge {
            size_bytes: meta.len(),
        }
        .into_io());
    }
    Ok(())
}

/// How the refusal names a file type that is not a regular file.
fn not_regular(kind: &std::fs::FileType) -> &'static str {
    if kind.is_dir() {
        return DIRECTORY;
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if kind.is_fifo() {
            return "a FIFO (named pipe)";
        }
        if kind.is_char_device() || kind.is_block_device() {
            return "a device";
        }
        if kind.is_socket() {
            return "a socket";
        }
    }
    "something that is neither a file nor a directory"
}

/// The problem for text whose first `valid_up_to` bytes are UTF-8: at the line and column
/// (in characters) of the first invalid byte, which is returned with it.
fn utf8_problem(bytes: &[u8], valid_up_to: usize, label: &str) -> (Problem, u8) {
    let good = std::str::from_utf8(&bytes[..valid_up_to]).unwrap_or_default();
    let line = good.matches('\n').count() + 1;
    let col = good.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    let problem = Problem {
        location: Location {
            path: label.to_string(),
            line,
            col,
        },
        message: "expected UTF-8 text, found invalid bytes".into(),
    };
    (problem, bytes.get(valid_up_to).copied().unwrap_or(0))
}

fn lower_first(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_lowercase().chain(c).collect(),
        None => String::new(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_first_invalid_byte_is_located_in_characters() {
        // "é" is two bytes but one column; 0xFF never occurs in UTF-8 (RFC 3629).
        let bytes = "a: 1\nbé: ".as_bytes().iter().copied().chain([0xff, b'\n']);
        let bytes: Vec<u8> = bytes.collect();
        let valid_up_to = std::str::from_utf8(&bytes).unwrap_err().valid_up_to();
        let (p, byte) = utf8_problem(&bytes, valid_up_to, "f.yaml");
        assert_eq!(
            p.to_string(),
            "f.yaml:2:5: expected UTF-8 text, found invalid bytes"
        );
        assert_eq!(byte, 0xff);
    }

    #[test]
    fn a_data_file_that_is_a_directory_is_refused_in_the_message_tail() {
        let dir = std::env::temp_dir();
        let why = read_data_file(&dir, "limit").unwrap_err();
        assert_eq!(
            why,
            format!(
                "cannot read limit file {}: expected a regular file, found a directory",
                dir.display()
            )
        );
    }
}
