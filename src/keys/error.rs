//! What can go wrong with key files, keyrings and making a station key.

use crate::config::{FileError, Problem};
use crate::station::StationError;

/// Why a key file or keyring could not be read or written, or a key not made.
#[derive(Debug, thiserror::Error)]
pub enum KeyError {
    /// The file could not be read (missing, unreadable, not a regular file, too large).
    #[error("{path}: cannot read {what}: {source}")]
    Io {
        /// The path.
        path: String,
        /// The file kind: `station key`, `keyring`.
        what: &'static str,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The file was read but is not valid; one `path:line:col: message` line per problem.
    #[error("{}", .0.iter().map(|p| p.to_string()).collect::<Vec<_>>().join("\n"))]
    Invalid(Vec<Problem>),
    /// A private key file that the group or others may read (unix permissions).
    #[error(
        "{path}: expected a station key readable only by its owner (mode 600 or 400), found \
         mode {mode:03o}; a key others can read is no longer secret: make a new key, or if \
         no one can have read it, `chmod 600 {path}`"
    )]
    Exposed {
        /// The key file.
        path: String,
        /// Its permission bits.
        mode: u32,
    },
    /// The file to be created already exists: a key is never overwritten.
    #[error("{path}: a {what} already exists there, and a key is never written over a file")]
    Exists {
        /// The path.
        path: String,
        /// The file kind.
        what: &'static str,
    },
    /// A file could not be written.
    #[error("{path}: cannot write {what}: {source}")]
    Write {
        /// The path.
        path: String,
        /// The file kind.
        what: &'static str,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The operating system gave no randomness for a new key.
    #[error("cannot make a key: the operating system's random source failed: {0}")]
    Random(String),
    /// The station file could not be loaded.
    #[error(transparent)]
    Station(#[from] StationError),
    /// The key would be written inside the station's store directory, which is what an
    /// attacker who wants to rewrite records edits.
    #[error(
        "{key}: expected a key path outside the station's store directory {store} (whoever can \
         rewrite the store could then also read the key and sign forged records)"
    )]
    InsideStore {
        /// The key path.
        key: String,
        /// The store directory.
        store: String,
    },
    /// A file cannot be changed as asked; `location` is `path` or `path:line:col`.
    #[error("{location}: {message}")]
    Refused {
        /// Where: the file, with line and column when known.
        location: String,
        /// What was expected and what was found.
        message: String,
    },
}

impl KeyError {
    /// The same error with the file kind named in an I/O error.
    pub(crate) fn reading(self, what: &'static str) -> KeyError {
        match self {
            KeyError::Io { path, source, .. } => KeyError::Io { path, what, source },
            other => other,
        }
    }
}

impl FileError for KeyError {
    fn unreadable(path: String, source: std::io::Error) -> Self {
        KeyError::Io {
            path,
            what: "file",
            source,
        }
    }

    fn invalid(problems: Vec<Problem>) -> Self {
        KeyError::Invalid(problems)
    }
}
