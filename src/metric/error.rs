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

/// The first carriage return in `text` with no line feed after it (a CR ending the text
/// counts as a line end): its 1-based line, counted by line feeds, and 1-based byte. Every
/// reader of text refuses such a line ([`lone_cr_message`]), so that every line number it
/// reports is the line an editor shows.
pub(crate) fn first_lone_cr(text: &[u8]) -> Option<(u64, u64)> {
    let at = (0..text.len())
        .find(|&i| text[i] == b'\r' && i + 1 < text.len() && text[i + 1] != b'\n')?;
    let line = text[..at].iter().filter(|&&c| c == b'\n').count() as u64 + 1;
    Some((line, at as u64 + 1))
}

/// What is wrong with a line that ends with a carriage return and no line feed, at 1-based
/// `byte` of the file (the message after `FILE:LINE: `).
pub(crate) fn lone_cr_message(byte: u64) -> String {
    format!(
        "a carriage return (\\r) with no line feed after it, at byte {byte} of the file: \
         lines that end with a lone CR (old Mac line ends) are not read; end the lines \
         with \\n or \\r\\n (for instance `tr '\\r' '\\n' < OLD > NEW`)"
    )
}

/// The text of a side file (an edge list, a cost file) whose bytes were read from
/// `source_name`: a line that ends with a lone carriage return ([`first_lone_cr`]:
/// `str::lines` splits only at `\n`, so the lines it ended would be read as one) and invalid
/// UTF-8 are refused with their line. CRLF line ends are kept for the parser to take off.
pub(crate) fn side_file_text(bytes: Vec<u8>, source_name: &str) -> Result<String, MetricError> {
    let line_error = |line: u64, message: String| MetricError::Line {
        source_name: source_name.to_string(),
        line,
        message,
    };
    if let Some((line, byte)) = first_lone_cr(&bytes) {
        return Err(line_error(line, lone_cr_message(byte)));
    }
    String::from_utf8(bytes).map_err(|e| {
        let at = e.utf8_error().valid_up_to();
        let line = e.as_bytes()[..at].iter().filter(|&&b| b == b'\n').count() as u64 + 1;
        line_error(line, "invalid UTF-8".into())
    })
}
