//! The engine's errors, each of a kind that says what to do next.

use std::path::PathBuf;

/// Boxed cause (a library error or a message), kept whole so that its chain of causes is
/// reported as it was.
pub type Cause = Box<dyn std::error::Error + Send + Sync + 'static>;

/// What to do about a [`BenchError`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ErrorKind {
    /// Fix the input (plan, station file, calibration, options): nothing was tested.
    BadInput,
    /// Test the unit again: the measurement, the rig or the record failed.
    Retest,
}

/// Why a bench could not be set up, or a unit not tested and recorded.
#[derive(Debug, thiserror::Error)]
pub enum BenchError {
    /// A file, option or plan is not usable.
    #[error(transparent)]
    BadInput(Cause),
    /// A file has problems, each `path:line:col: message`.
    #[error("invalid {what} ({} problem(s)):\n{}", problems.len(), problems.join("\n"))]
    Problems {
        /// Which kind of file (`plan`, `coupler model`, `station file`, `calibration`).
        what: &'static str,
        /// Every problem, one line each.
        problems: Vec<String>,
    },
    /// Hearing safety refused the plan on this bench; nothing played.
    #[error(transparent)]
    Refused(#[from] crate::safety::setup::SafetyRefusal),
    /// The rig could not play or record.
    #[error(transparent)]
    Rig(#[from] crate::rig::RigError),
    /// The measurement or the dose ledger could not be used.
    #[error(transparent)]
    Retest(Cause),
    /// The unit's record could not be written: it has no verdict and must be tested again.
    #[error("{}: the unit was NOT recorded; test it again", store.display())]
    NotRecorded {
        /// The store directory.
        store: PathBuf,
        /// What the store said.
        #[source]
        source: crate::store::StoreError,
    },
}

impl BenchError {
    /// A bad-input error with these words.
    pub fn bad_input(message: impl Into<String>) -> Self {
        BenchError::BadInput(message.into().into())
    }

    /// A retest error with these words.
    pub fn retest(message: impl Into<String>) -> Self {
        BenchError::Retest(message.into().into())
    }

    /// Every problem of a file as one error.
    pub fn problems<P: std::fmt::Display>(what: &'static str, problems: &[P]) -> Self {
        BenchError::Problems {
            what,
            problems: problems.iter().map(|p| p.to_string()).collect(),
        }
    }

    /// What to do about it.
    pub fn kind(&self) -> ErrorKind {
        match self {
            BenchError::BadInput(_) | BenchError::Problems { .. } | BenchError::Refused(_) => {
                ErrorKind::BadInput
            }
            // A file or device the user named is wrong → bad input; the rig failed → retest.
            BenchError::Rig(crate::rig::RigError::BadInput { .. }) => ErrorKind::BadInput,
            BenchError::Rig(_) | BenchError::Retest(_) | BenchError::NotRecorded { .. } => {
                ErrorKind::Retest
            }
        }
    }
}

impl From<crate::calibration::policy::PolicyError> for BenchError {
    fn from(e: crate::calibration::policy::PolicyError) -> Self {
        use crate::calibration::policy::PolicyError;
        match e {
            PolicyError::Invalid(problems) => BenchError::Problems {
                what: "calibration",
                problems,
            },
            other => BenchError::BadInput(Box::new(other)),
        }
    }
}

impl From<crate::safety::listening_steps::ListeningError> for BenchError {
    fn from(e: crate::safety::listening_steps::ListeningError) -> Self {
        use crate::safety::listening_steps::ListeningError;
        match e {
            ListeningError::Signal(m) => BenchError::bad_input(m),
            ListeningError::Dose(m) => BenchError::retest(m),
            ListeningError::Rig(r) => BenchError::Rig(r),
        }
    }
}
