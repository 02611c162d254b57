//! Error types of the library.
//!
//! Every error says what went wrong and where (file, line, field, section), so that the binary
//! can print it as is and exit with a documented code.

use std::path::PathBuf;

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

/// What went wrong reading an input, and where (re-exported as `waymark::ingest::IngestError`).
#[derive(Debug, thiserror::Error)]
pub enum IngestError {
    /// The file could not be opened or read.
    #[error("{source_name}: {error}")]
    Io {
        /// The file.
        source_name: String,
        /// The OS error.
        error: std::io::Error,
    },
    /// A record is malformed.
    #[error("{source_name}:{line}: {message}")]
    Record {
        /// The file.
        source_name: String,
        /// 1-based line number.
        line: u64,
        /// What is wrong.
        message: String,
    },
    /// The options do not fit the input (e.g. a column that is not in the header).
    #[error("{source_name}: {message}")]
    Options {
        /// The file.
        source_name: String,
        /// What is wrong.
        message: String,
    },
    /// Nothing to index.
    #[error("no items in {source_name} ({blank} blank records skipped)")]
    Empty {
        /// The file.
        source_name: String,
        /// Records skipped.
        blank: usize,
    },
    /// A corpus was put together with ids or keys that are not one per item.
    #[error("a corpus of {items} items was given {len} {what}: it needs one per item")]
    Mismatch {
        /// What there is not one of per item: `"ids"` or `"keys"`.
        what: &'static str,
        /// How many were given.
        len: usize,
        /// The number of items.
        items: usize,
    },
}
