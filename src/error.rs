//! Errors a user can meet, each naming where it happened, with the exit status it
//! maps to: 2 for bad input, 3 for an internal failure (docs/errors.md lists them).
//! The exit statuses are a contract: 0 success, 1 an analysis finding a command was
//! asked to fail on, 2 bad input, 3 internal error.

use crate::chain::ChainError;
use crate::dc::DcError;

/// Exit status for an analysis finding the user asked to fail on (e.g. a spread
/// requirement missed by too many builds, or `plan --fail-on-clip` when the planned
/// input clips a stage).
pub const EXIT_FINDING: i32 = 1;
/// Exit status for bad input (file, values, graph, a stage out of its active region).
pub const EXIT_BAD_INPUT: i32 = 2;
/// Exit status for an internal failure (cannot write output, a broken invariant).
pub const EXIT_INTERNAL: i32 = 3;

#[derive(Debug, thiserror::Error)]
pub enum Error {
    #[error("{origin}: cannot read the chain file: {source}")]
    Read {
        origin: String,
        source: std::io::Error,
    },
    #[error("{origin}: {source}")]
    Chain { origin: String, source: ChainError },
    /// A chain file over [`crate::limits::MAX_FILE_BYTES`].
    #[error("{origin}: found a file of {bytes} bytes (or more), expected a chain file of at most {max} bytes (4 MiB)")]
    TooLarge {
        origin: String,
        bytes: u64,
        max: u64,
    },
    /// No operating point; `hint` names resistors that may be misread
    /// ([`crate::Chain::milliohm_hint`], may be empty).
    #[error("{origin}: {source}{hint}")]
    Dc {
        origin: String,
        source: DcError,
        hint: String,
    },
    #[error("{origin}: large signal: {source}")]
    LargeSignal {
        origin: String,
        source: crate::large_signal::LargeSignalError,
    },
    /// A command-line value that does not parse or does not fit.
    #[error("{0}")]
    Usage(String),
    #[error("cannot write the output: {0}")]
    Write(std::io::Error),
    /// An output file that must not or cannot be written.
    #[error("{path}: refusing the output file: {reason}")]
    Output { path: String, reason: String },
    /// An output file that was checked but could not be written (disk full, its
    /// reader gone).
    #[error("{path}: cannot write the output: {reason}")]
    WriteFile { path: String, reason: String },
    /// The noise network could not be solved (a broken invariant).
    #[error("{origin}: noise: {source}")]
    Noise {
        origin: String,
        source: crate::noise::NoiseError,
    },
    /// A chart that could not be drawn (a broken invariant).
    #[error(transparent)]
    Draw(#[from] crate::plot::DrawError),
}

impl Error {
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Write(_) | Error::WriteFile { .. } | Error::Draw(_) | Error::Noise { .. } => {
                EXIT_INTERNAL
            }
            Error::LargeSignal { source, .. } => source.exit_code(),
            _ => EXIT_BAD_INPUT,
        }
    }
}
