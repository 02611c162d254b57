//! Errors of the metrics: bad options, bad side files (cost tables, edge lists), items that
//! do not fit a metric, and external metric programs that fail.

/// What went wrong setting up or running a metric, and where.
#[derive(Debug, thiserror::Error)]
pub enum MetricError {
    /// A side file could not be opened or read.
    #[error("{source_name}: {error}")]
    Io {
        /// The file.
        source_name: String,
        /// The OS error.
        error: std::io::Error,
    },
    /// A line of a side file (cost table, edge list) is malformed or breaks a rule.
    #[error("{source_name}:{line}: {message}")]
    Line {
        /// The file.
        source_name: String,
        /// 1-based line number.
        line: u64,
        /// What is wrong.
        message: String,
    },
    /// The options of a metric are impossible (e.g. q-grams with `q = 0`).
    #[error("{0}")]
    Options(String),
    /// An item does not have the length the metric needs (Hamming: all items equally long).
    #[error(
        "record {record}: {actual} characters, but record {first} has {expected} \
         (Hamming distance needs items of equal length)"
    )]
    Length {
        /// 1-based record number of the first item whose length differs.
        record: usize,
        /// 1-based record number of the item that set the expected length.
        first: usize,
        /// The length of that first item, in Unicode scalar values.
        expected: usize,
        /// The length of the offending item.
        actual: usize,
    },
    /// A metric of the user's own failed ([`super::Metric::check`]): for instance a
    /// distance written in another language raised an error or returned something that is
    /// not a distance.
    #[error("metric `{name}`: {message}")]
    Custom {
        /// The metric's name.
        name: String,
        /// What happened.
        message: String,
    },
    /// An external metric program failed: it did not start, exited, hung, or answered
    /// something outside the protocol.
    #[error("metric program `{command}`: {message}")]
    Program {
        /// The command line as given.
        command: String,
        /// What happened.
        message: String,
    },
}
