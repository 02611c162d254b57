//! Error types of the library.
//!
//! Every error says what went wrong and where (file, line, field, section), so that the binary
//! can print it as is and exit with a documented code.

use std::path::PathBuf;

pub use crate::ingest::IngestError;

/// Result alias used across the library.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Any error of the library.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// Reading the input items failed.
    #[error(transparent)]
    Ingest(#[from] IngestError),
    /// An index file could not be written or read.
    #[error("{path}: {message}")]
    Index {
        /// The index file.
        path: PathBuf,
        /// What is wrong with it.
        message: String,
    },
    /// A metric could not be set up or failed (bad cost file or edge list, an external
    /// program that exited or hung, an item the metric cannot take).
    #[error(transparent)]
    Metric(#[from] crate::metric::MetricError),
    /// The parameters given are impossible (e.g. `k = 0`).
    #[error("{0}")]
    Usage(String),
    /// An I/O error with the path it concerns.
    #[error("{path}: {source}")]
    Io {
        /// The file or folder.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },
}
