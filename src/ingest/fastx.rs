//! FASTA and FASTQ input (the `needletail` crate): one item per record, the sequence (the
//! lines of a FASTA record joined); the id is the record's name, the first word of its header
//! line. gzip-compressed input (recognised by its magic bytes, whatever the file's name) is
//! undone with `flate2` first; a leading UTF-8 byte-order mark is dropped.

use std::io::Read;

use needletail::errors::{ParseError, ParseErrorKind};
use needletail::parser::{FastaReader, FastqReader, FastxReader};

use super::{Builder, IdValue, IngestError, BOM};

/// Which of the two layouts.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SequenceFormat {
    /// `>name description` then sequence lines.
    Fasta,
    /// `@name description`, sequence, `+`, quality: four lines per record.
    Fastq,
}

impl SequenceFormat {
    /// The character every record starts with.
    pub fn mark(self) -> char {
        match self {
            SequenceFormat::Fasta => '>',
            SequenceFormat::Fastq => '@',
        }
    }

    /// `fasta` or `fastq`.
    pub fn name(self) -> &'static str {
        match self {
            SequenceFormat::Fasta => "fasta",
            SequenceFormat::Fastq => "fastq",
        }
    }
}

/// The magic bytes of a gzip member.
const GZIP_MAGIC: &[u8] = &[0x1f, 0x8b];

/// One record as read: its name, sequence and header line.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SequenceRecord {
    /// The first word of the header line (after `>` or `@`).
    pub name: String,
    /// The sequence, its lines joined.
    pub sequence: String,
    /// The header's 1-based line in the (uncompressed) input.
    pub line: u64,
}

/// Reads every record of a FASTA or FASTQ input (gzip-compressed or not). A malformed record
/// is refused with its 1-based record number and the line where known; an input with no
/// record gives an empty list.
pub fn read_sequences<R: Read>(
    mut reader: R,
    source_name: &str,
    format: SequenceFormat,
) -> Result<Vec<SequenceRecord>, IngestError> {
    let io = |error| IngestError::Io {
        source_name: source_name.to_string(),
        error,
    };
    let mut bytes = Vec::new();
    reader.read_to_end(&mut bytes).map_err(io)?;
    if bytes.starts_with(GZIP_MAGIC) {
        // The compressed bytes were bounded by the caller; the text they unpack to is
        // bounded here, by the same share of the memory budget.
        let mut plain = Vec::new();
        super::bounded(
            flate2::read::MultiGzDecoder::new(bytes.as_slice()),
            source_name,
        )?
        .read_to_end(&mut plain)
        .map_err(|e| {
            io(std::io::Error::new(
                e.kind(),
                format!("reading the gzip-compressed input: {e}"),
            ))
        })?;
        bytes = plain;
    }
    let text = bytes.strip_prefix(BOM).unwrap_or(&bytes);
    let mut out = Vec::new();
    if text.iter().all(u8::is_ascii_whitespace) {
        return Ok(out);
    }
    let record_error = |number: usize, line: u64, message: String| IngestError::Record {
        source_name: source_name.to_string(),
        line,
        message: format!("record {number}: {message}"),
    };
    let mut parser: Box<dyn FastxReader + '_> = match format {
        SequenceFormat::Fasta => Box::new(FastaReader::new(text)),
        SequenceFormat::Fastq => Box::new(FastqReader::new(text)),
    };
    while let Some(next) = parser.next() {
        let number = out.len() + 1;
        let rec = match next {
            Ok(rec) => rec,
            Err(e) => {
                // needletail may name the line after the last when the input ends early.
                let lines =
                    text.split(|&c| c == b'\n').count() as u64 - u64::from(text.ends_with(b"\n"));
                let line = e.position.line.clamp(1, lines.max(1));
                return Err(record_error(number, line, describe(&e, format, text, line)));
            }
        };
        let line = rec.start_line_number();
        let header = std::str::from_utf8(rec.id()).map_err(|e| {
            record_error(
                number,
                line,
                format!(
                    "the header line is not valid UTF-8 (byte {})",
                    e.valid_up_to() + 2
                ),
            )
        })?;
        let Some(name) = header.split_whitespace().next() else {
            return Err(record_error(
                number,
                line,
                format!(
                    "the record has no name (nothing after '{}' on its header line)",
                    format.mark()
                ),
            ));
        };
        let seq = rec.seq();
        let sequence = match std::str::from_utf8(&seq) {
            Ok(s) => s.to_string(),
            Err(e) => {
                return Err(record_error(
                    number,
                    line,
                    format!(
                        "the sequence is not valid UTF-8 (byte {} of the sequence)",
                        e.valid_up_to() + 1
                    ),
                ))
            }
        };
        out.push(SequenceRecord {
            name: name.to_string(),
            sequence,
            line,
        });
    }
    Ok(out)
}

/// needletail's error in our words; `line` (1-based) is the line it concerns in `text`.
fn describe(e: &ParseError, format: SequenceFormat, text: &[u8], line: u64) -> String {
    let name = match &e.position.id {
        Some(id) if !id.is_empty() => format!(" (\"{id}\")"),
        _ => String::new(),
    };
    let what = match e.kind {
        ParseErrorKind::UnexpectedEnd => match format {
            SequenceFormat::Fasta => "the record is cut short: the input ends inside it".into(),
            SequenceFormat::Fastq => "the record is cut short: a FASTQ record is four lines \
                 (@name, sequence, +, quality) and the input ends before its last"
                .into(),
        },
        ParseErrorKind::InvalidSeparator => {
            "the line after the sequence must start with '+' (a FASTQ record is four lines: \
             @name, sequence, +, quality)"
                .into()
        }
        ParseErrorKind::UnequalLengths => {
            // needletail: "Sequence length is S but quality length is Q".
            let nums: Vec<&str> = e
                .msg
                .split(|c: char| !c.is_ascii_digit())
                .filter(|s| !s.is_empty())
                .collect();
            match nums.as_slice() {
                [s, q] => format!(
                    "the sequence has {s} letters and the quality string {q}; they must be \
                     as long"
                ),
                _ => format!(
                    "the sequence and the quality string differ in length ({})",
                    e.msg
                ),
            }
        }
        ParseErrorKind::InvalidStart | ParseErrorKind::UnknownFormat => {
            let found = text
                .split(|&c| c == b'\n')
                .nth(line as usize - 1)
                .map(|l| l.strip_suffix(b"\r").unwrap_or(l));
            let found = match found {
                Some([]) | None => "this line is blank".to_string(),
                Some(l) => format!(
                    "this line starts with \"{}\"",
                    String::from_utf8_lossy(&l[..l.len().min(20)]).escape_debug()
                ),
            };
            format!(
                "a {} record must start with '{}' and {found}",
                format.name().to_uppercase(),
                format.mark()
            )
        }
        ParseErrorKind::EmptyFile => "the record is cut short".into(),
        ParseErrorKind::Io => format!("reading failed: {}", e.msg),
    };
    format!("{what}{name}")
}

/// Adds every record of a FASTA/FASTQ input to `b`, its name as its id.
pub(super) fn read_fastx<R: Read>(
    reader: R,
    format: SequenceFormat,
    b: &mut Builder<'_>,
) -> Result<(), IngestError> {
    for rec in read_sequences(reader, b.name, format)? {
        b.push(rec.sequence, Some(IdValue::Text(rec.name)), rec.line)?;
    }
    Ok(())
}
