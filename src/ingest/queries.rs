//! Queries from a file, read whole: one per line, or the records of a FASTA or FASTQ file
//! (the reader of `build`'s sequence input, [`read_sequences`]), with the layouts and
//! errors of `waymark query --queries FILE --query-format …`. The command line streams its
//! queries through its own line reader; this is the whole-file form for the library and the
//! Python package.

use std::path::Path;

use super::fastx::{read_sequences, SequenceFormat};
use super::{bounded, for_each_line, IngestError, InputFormat};

/// How a queries file is laid out.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum QueryLayout {
    /// One query per line (`\n` or `\r\n`; a UTF-8 byte-order mark at the start dropped).
    Lines,
    /// One query per FASTA or FASTQ record: its sequence, named by the record's name.
    Sequences(SequenceFormat),
}

impl QueryLayout {
    /// The layout `waymark query --queries FILE` takes without `--query-format`: FASTA or
    /// FASTQ for `.fa`, `.fasta`, `.fna`, `.fq`, `.fastq` (also with `.gz`), else lines.
    pub fn from_path(path: &Path) -> QueryLayout {
        match InputFormat::from_path(path) {
            InputFormat::Sequences(f) => QueryLayout::Sequences(f),
            _ => QueryLayout::Lines,
        }
    }
}

/// One query as read.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct QueryRecord {
    /// Its 1-based line (a record's header line), as `waymark query` reports it.
    pub line: u64,
    /// A FASTA/FASTQ record's name (the first word of its header); `None` for a line.
    pub name: Option<String>,
    /// The query text.
    pub text: String,
}

/// Every query of the file at `path`, laid out as `layout` (default: by the file's name,
/// [`QueryLayout::from_path`]). Refused with the file and line: a line or record that is not
/// valid UTF-8, a malformed FASTA/FASTQ record; with the file: a folder, a file that
/// cannot be read, a file with no query.
pub fn read_queries(
    path: &Path,
    layout: Option<QueryLayout>,
) -> Result<Vec<QueryRecord>, IngestError> {
    let name = path.display().to_string();
    let io = |error| IngestError::Io {
        source_name: name.clone(),
        error,
    };
    let file = std::fs::File::open(path).map_err(io)?;
    if file.metadata().map_err(io)?.is_dir() {
        return Err(IngestError::Options {
            source_name: name,
            message: "is a folder; queries are read from a file".into(),
        });
    }
    let reader = bounded(file, &name)?;
    let out = match layout.unwrap_or_else(|| QueryLayout::from_path(path)) {
        QueryLayout::Sequences(format) => read_sequences(reader, &name, format)?
            .into_iter()
            .map(|r| QueryRecord {
                line: r.line,
                name: Some(r.name),
                text: r.sequence,
            })
            .collect(),
        QueryLayout::Lines => {
            let mut out = Vec::new();
            for_each_line(reader, &name, |line, bytes, _| {
                let text = std::str::from_utf8(bytes).map_err(|e| IngestError::Record {
                    source_name: name.clone(),
                    line,
                    // The byte within the line (after a byte-order mark), as `query` counts it.
                    message: format!(
                        "the query is not valid UTF-8 (byte {})",
                        e.valid_up_to() + 1
                    ),
                })?;
                out.push(QueryRecord {
                    line,
                    name: None,
                    text: text.to_string(),
                });
                Ok(())
            })?;
            out
        }
    };
    if out.is_empty() {
        return Err(IngestError::Options {
            source_name: name,
            message: "no queries in the file".into(),
        });
    }
    Ok(out)
}
