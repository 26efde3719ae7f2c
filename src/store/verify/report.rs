//! What verification found, as data: the [`VerifyReport`] with its counts, head hashes and
//! problems, and the [`Notice`]s that are not tampering.

use std::fmt;
use std::path::PathBuf;

use super::problem::Problem;

/// What verification found.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct VerifyReport {
    /// Number of records read.
    pub n_records: u64,
    /// `record_hash` of the last record ([`GENESIS_PREV_HASH`](crate::store::GENESIS_PREV_HASH)
    /// for an empty store). Records cut off the end of the chain are detected only against
    /// a head kept elsewhere: a signed checkpoint ([`Checkpoint`](crate::store::Checkpoint)).
    /// Empty if the last record's own hash is unreadable (then reported as a problem).
    pub head_hash: String,
    /// Number of distinct capture files rehashed.
    pub n_captures_checked: u64,
    /// Signs of tampering or damage; empty when the store is intact.
    pub problems: Vec<Problem>,
    /// Things worth knowing that are not tampering, e.g. orphan captures left by a crash.
    pub notices: Vec<Notice>,
    /// Number of safety events read (schema 3).
    pub n_safety_events: u64,
    /// `row_hash` of the last safety event (the genesis value when there is none).
    pub safety_events_head_hash: String,
    /// Number of exposures read (schema 3).
    pub n_exposures: u64,
    /// `row_hash` of the last exposure (the genesis value when there is none).
    pub exposures_head_hash: String,
    /// The store's schema version as found (verification never migrates).
    pub schema_version: i64,
    /// The store's identity (`store_meta`, schema 4); `None` before schema 4 or when missing.
    pub store_id: Option<String>,
    /// Number of distinct archived inputs rehashed.
    pub n_archived_checked: u64,
    /// Signed and unsigned rows of each chain.
    pub signatures: SignatureCounts,
    /// True when signatures were checked against a keyring.
    pub signatures_checked: bool,
    /// Every checkpoint given, in order, and whether the store matched it.
    pub checkpoints: Vec<CheckpointOutcome>,
}

impl VerifyReport {
    /// True when no problem was found (notices do not count).
    pub fn is_intact(&self) -> bool {
        self.problems.is_empty()
    }
}

/// Rows with and without a signature.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SignatureCount {
    /// Rows with a key id and a signature (whether or not they verify).
    pub signed: u64,
    /// Rows without.
    pub unsigned: u64,
}

/// [`SignatureCount`] of each chain.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SignatureCounts {
    /// `records`.
    pub records: SignatureCount,
    /// `safety_events`.
    pub safety_events: SignatureCount,
    /// `exposures`.
    pub exposures: SignatureCount,
}

/// One checkpoint as verification saw it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CheckpointOutcome {
    /// Where it came from (its file), as given.
    pub source: String,
    /// When it was made.
    pub time_utc: String,
    /// Row counts it states: records, safety events, exposures.
    pub counts: [u64; 3],
    /// True when its signature verified and the store holds every row it states, unchanged.
    pub matched: bool,
}

/// Something verification noticed that is not tampering.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Notice {
    /// A capture file that no record refers to: an append was interrupted after writing the
    /// capture and before committing the record. Safe to delete.
    OrphanCapture {
        /// The file.
        path: PathBuf,
    },
    /// A temporary file left by an append interrupted while writing a capture or an
    /// archived input. Safe to delete when no append is running.
    LeftoverTemp {
        /// The file.
        path: PathBuf,
    },
    /// A file in the capture or archive directory that the store did not write.
    UnexpectedFile {
        /// The file.
        path: PathBuf,
    },
    /// An archived input that no record links to (an interrupted append).
    OrphanArchived {
        /// The file.
        path: PathBuf,
    },
    /// The store has an older schema; it was verified as it is.
    OlderSchema {
        /// Its version.
        found: i64,
        /// The version this build writes.
        current: i64,
    },
    /// Rows are signed but no keyring was given, so no signature was checked.
    SignaturesNotChecked {
        /// Signed rows, all chains.
        signed: u64,
    },
}

impl fmt::Display for Notice {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Notice::OrphanCapture { path } => write!(
                f,
                "orphan capture {} (no record refers to it; an append was interrupted), safe to delete",
                path.display()
            ),
            Notice::LeftoverTemp { path } => write!(
                f,
                "temporary file {} left by an interrupted append, safe to delete when no append runs",
                path.display()
            ),
            Notice::UnexpectedFile { path } => {
                write!(f, "unexpected file {} (not written by the store)", path.display())
            }
            Notice::OrphanArchived { path } => write!(
                f,
                "orphan archived input {} (no record links to it; an append was interrupted)",
                path.display()
            ),
            Notice::OlderSchema { found, current } => write!(
                f,
                "schema {found}: verified as it is; run `tragus store migrate` to bring it to schema {current}"
            ),
            Notice::SignaturesNotChecked { signed } => write!(
                f,
                "{signed} signed row(s): signatures not checked (give the keyring with --keys)"
            ),
        }
    }
}

impl Notice {
    /// A stable word for tools (`tragus verify --json`'s `kind`).
    pub fn word(&self) -> &'static str {
        match self {
            Notice::OrphanCapture { .. } => "orphan_capture",
            Notice::LeftoverTemp { .. } => "leftover_temp",
            Notice::UnexpectedFile { .. } => "unexpected_file",
            Notice::OrphanArchived { .. } => "orphan_archived",
            Notice::OlderSchema { .. } => "older_schema",
            Notice::SignaturesNotChecked { .. } => "signatures_not_checked",
        }
    }

    /// The file concerned, when there is one.
    pub fn path(&self) -> Option<&std::path::Path> {
        match self {
            Notice::OrphanCapture { path }
            | Notice::LeftoverTemp { path }
            | Notice::UnexpectedFile { path }
            | Notice::OrphanArchived { path } => Some(path),
            Notice::OlderSchema { .. } | Notice::SignaturesNotChecked { .. } => None,
        }
    }
}
