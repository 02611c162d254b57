//! Error types of the library.
//!
//! Every error says what went wrong and where (file, line, field, section), so that the binary
//! can print it as is and exit with a documented code.

use std::path::PathBuf;

/// Result alias used across the library.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Any error of the library.
///
/// The messages speak of the library's own names (`k`, `candidates`, `dim`); the command
/// line maps them to its flags.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// Reading the input items failed.
    #[error(transparent)]
    Ingest(#[from] IngestError),
    /// The index file is damaged: a checksum, a size or a field does not hold.
    #[error("{path}: corrupt index: {reason}")]
    CorruptIndex {
        /// The index file.
        path: PathBuf,
        /// What does not hold.
        reason: String,
    },
    /// The file is not an index this version reads, cannot be used as asked (another format
    /// version, a custom metric not supplied or not the one it was built with), or could
    /// not be written.
    #[error("{path}: {reason}")]
    IndexRefused {
        /// The index file.
        path: PathBuf,
        /// Why.
        reason: String,
    },
    /// A parameter is out of its range.
    #[error("{name} {reason}")]
    InvalidParameter {
        /// Which parameter.
        name: Param,
        /// What its value must be, and the value given.
        reason: String,
    },
    /// A query the index's metric cannot take (not a node of the graph, a vector of the
    /// wrong dimension, a string of the wrong length for Hamming distance).
    #[error("{0}")]
    InvalidQuery(String),
    /// Exact and range answers were asked of an index whose embedding gives no lower bound
    /// of the true distance.
    #[error(
        "{path}: exact answers need a lower bound of the true distance, and this index's \
         {embedding} embedding gives none (its coordinates are not contractive); ask for \
         approximate answers"
    )]
    NoLowerBound {
        /// The index file.
        path: PathBuf,
        /// The embedding's name.
        embedding: String,
    },
    /// The work would not fit in the memory available.
    #[error(
        "{what} needs about {:.1} GB of memory and {:.1} GB is available; build a smaller \
         input (split it), use a lower dimension, or free memory (the budget can be set with \
         WAYMARK_MEMORY_BUDGET=bytes)",
        *.need as f64 / 1e9,
        *.have as f64 / 1e9
    )]
    TooLarge {
        /// What was refused.
        what: String,
        /// Bytes it needs, estimated.
        need: u64,
        /// Bytes available.
        have: u64,
    },
    /// A metric could not be set up or failed (bad cost file or edge list, an external
    /// program that exited or hung, an item the metric cannot take).
    #[error(transparent)]
    Metric(#[from] crate::metric::MetricError),
    /// The input does not fit what was asked of it (no items, items the metric cannot
    /// take, options that do not fit the input).
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

impl Error {
    /// A [`Error::CorruptIndex`] of `path`.
    pub fn corrupt(path: &std::path::Path, reason: impl Into<String>) -> Error {
        Error::CorruptIndex {
            path: path.to_path_buf(),
            reason: reason.into(),
        }
    }

    /// An [`Error::IndexRefused`] of `path`.
    pub fn refused(path: &std::path::Path, reason: impl Into<String>) -> Error {
        Error::IndexRefused {
            path: path.to_path_buf(),
            reason: reason.into(),
        }
    }

    /// An [`Error::InvalidParameter`].
    pub fn parameter(name: Param, reason: impl Into<String>) -> Error {
        Error::InvalidParameter {
            name,
            reason: reason.into(),
        }
    }
}

/// The parameters the library checks, named as in its API.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Param {
    /// Neighbours per query (`k`).
    K,
    /// Candidates re-ranked per query ([`crate::search::SearchParams::candidates`]).
    Candidates,
    /// The radius of a range query.
    Radius,
    /// A radius as a fraction of the items' length ([`crate::pairs::Radius::Fraction`]).
    Fraction,
    /// The embedding dimension of a build ([`crate::index::BuildOptions::dim`]).
    Dim,
    /// The reference-set pool of a build ([`crate::index::BuildOptions::pool`]).
    Pool,
    /// The dimensions of a sweep.
    Dims,
    /// The methods, dimensions and spaces of a sweep (each needs one value at least).
    SweepAxes,
    /// The items landmarks and pivots are chosen from ([`crate::index::BuildOptions::sample`]).
    Sample,
    /// An asked recall ([`crate::search::SearchParams::for_recall`]).
    Recall,
    /// The radius of a build's deletion-variant table ([`crate::index::BuildOptions::small_radius`]).
    SmallRadius,
    /// Where candidates come from ([`crate::search::SearchParams::source`]).
    Source,
}

impl Param {
    /// The name used in messages.
    pub fn name(self) -> &'static str {
        match self {
            Param::K => "k",
            Param::Candidates => "candidates",
            Param::Radius => "radius",
            Param::Fraction => "fraction",
            Param::Dim => "dim",
            Param::Pool => "pool",
            Param::Dims => "dims",
            Param::SweepAxes => "the sweep's methods, dimensions and spaces",
            Param::Sample => "sample",
            Param::Recall => "recall",
            Param::SmallRadius => "small radius",
            Param::Source => "candidate source",
        }
    }
}

impl std::fmt::Display for Param {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
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

/// Something in an input that did not stop the reading but may mean that it was not read as
/// its writer meant (re-exported as `waymark::ingest::IngestWarning`). The readers collect
/// them ([`crate::ingest::read_corpus_with_warnings`]); the command line prints each on
/// stderr as `waymark: warning: …`.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum IngestWarning {
    /// CSV: quoted fields that hold line breaks, so that records and lines disagree; a
    /// closing quote may be missing.
    #[error(
        "{source_name}:{line}: a quoted field opened on this line runs over {lines} lines; \
         {fields} quoted field(s) hold line breaks, and {records} records were read from \
         {file_lines} lines: check for a missing closing quote"
    )]
    MultiLineFields {
        /// The file.
        source_name: String,
        /// The line where the first such field opens.
        line: u64,
        /// The lines that field runs over.
        lines: u64,
        /// How many quoted fields hold line breaks.
        fields: usize,
        /// Records read (the header included).
        records: usize,
        /// Lines in the file.
        file_lines: u64,
    },
    /// CSV: a quote inside a field that does not start with one (kept as a character), or
    /// text after a field's closing quote (joined to the field).
    #[error(
        "{source_name}:{line}: a quote inside an unquoted field, or text after a closing \
         quote ({count} such field(s)); RFC 4180 quotes whole fields only, so the quote was \
         read as a character: quote the whole field and double the quotes inside it"
    )]
    StrayQuote {
        /// The file.
        source_name: String,
        /// The first line with one.
        line: u64,
        /// How many fields.
        count: usize,
    },
    /// CSV/TSV: rows with more fields than the header (the extra fields are not read).
    #[error(
        "{source_name}:{line}: the row has {fields} fields and the header {header}; \
         {count} row(s) have more fields than the header (the extra fields are not read)"
    )]
    ExtraFields {
        /// The file.
        source_name: String,
        /// The first such row's line.
        line: u64,
        /// Its number of fields.
        fields: usize,
        /// The header's number of fields.
        header: usize,
        /// How many rows have more fields than the header.
        count: usize,
    },
    /// CSV/TSV: two or more columns of the header have the same name.
    #[error(
        "{source_name}:1: the header names column \"{name}\" {} times (columns {}, counting \
         from 0); choose such a column by its number",
        .columns.len(),
        .columns.iter().map(|c| c.to_string()).collect::<Vec<_>>().join(", ")
    )]
    DuplicateColumn {
        /// The file.
        source_name: String,
        /// The repeated name.
        name: String,
        /// The columns of that name.
        columns: Vec<usize>,
    },
    /// Text: the records start with `>` or `@`, as FASTA and FASTQ files do; read as text,
    /// their header lines become items.
    #[error(
        "{source_name}:{line}: the input starts with '{mark}' and {count} of its lines do, \
         like a {format} file; read as text, every line is an item (headers too): use \
         --input-format {format} to read its records"
    )]
    LooksLikeSequences {
        /// The file.
        source_name: String,
        /// The first such line.
        line: u64,
        /// `>` or `@`.
        mark: char,
        /// How many lines start with it.
        count: usize,
        /// `fasta` or `fastq`.
        format: &'static str,
    },
}
