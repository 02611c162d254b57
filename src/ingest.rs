//! Reading items and their ids: text lines, a CSV/TSV column, or a JSON Lines field.
//!
//! - **Text**: one item per line, UTF-8 (invalid UTF-8 and NUL bytes are errors naming the
//!   line), a leading byte-order mark is dropped, CRLF is tolerated.
//! - **CSV/TSV** (the `csv` crate, RFC 4180 quoting): a header row is required; `field`
//!   names the item column by header name or 0-based number.
//! - **JSON Lines** (`serde_json`): one object per line; `field` names a string field.
//!
//! Records whose item is empty (blank lines, empty cells) are skipped and counted. The
//! default id of an item is its 0-based **record number** in the input — the line of a text
//! or JSON Lines file, the data row of a CSV file — counting skipped records, so that an id
//! always points back into the input. Duplicates are kept, each with its own id.
//!
//! ```
//! use waymark::ingest::{read_corpus_from, Ids, IngestOptions, InputFormat};
//!
//! let opts = IngestOptions { format: Some(InputFormat::Text), ..Default::default() };
//! let c = read_corpus_from("Orvane Quay\r\n\nKeth Landing\n".as_bytes(), "names.txt", &opts)?;
//! assert_eq!(c.items, ["Orvane Quay", "Keth Landing"]);
//! assert_eq!(c.blank_skipped, 1);
//! assert!(matches!(c.ids, Ids::Int(ref v) if v == &[0, 2]));
//! # Ok::<(), waymark::ingest::IngestError>(())
//! ```

use std::borrow::Cow;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;

use serde::{Deserialize, Serialize};

pub mod vectors;

pub use vectors::parse_vector;

/// The UTF-8 byte-order mark, dropped at the start of an input.
const BOM: &[u8] = b"\xEF\xBB\xBF";

/// The layout of an input file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum InputFormat {
    /// One item per line.
    Text,
    /// Delimited values with a header row (`,` for CSV, `\t` for TSV).
    Csv {
        /// The field delimiter.
        delimiter: u8,
    },
    /// One JSON object per line.
    JsonLines,
}

impl InputFormat {
    /// The format implied by a file name: `.csv`, `.tsv`/`.tab`, `.jsonl`/`.ndjson`, else text.
    pub fn from_path(path: &Path) -> InputFormat {
        let ext = path
            .extension()
            .map(|e| e.to_string_lossy().to_ascii_lowercase());
        match ext.as_deref() {
            Some("csv") => InputFormat::Csv { delimiter: b',' },
            Some("tsv") | Some("tab") => InputFormat::Csv { delimiter: b'\t' },
            Some("jsonl") | Some("ndjson") => InputFormat::JsonLines,
            _ => InputFormat::Text,
        }
    }
}

/// How to read an input.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct IngestOptions {
    /// The layout; `None` means from the file extension.
    pub format: Option<InputFormat>,
    /// CSV/TSV column (header name or 0-based number) or JSON field holding the items.
    pub field: Option<String>,
    /// Column or field holding the ids; default: the 0-based record number.
    pub id_field: Option<String>,
    /// Normalisation that makes the comparison keys.
    pub normalize: Normalize,
}

/// Changes applied to items before comparing them; stored in the index and applied to
/// every query, so that queries are compared exactly like the items were.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Normalize {
    /// Compare in lower case (`str::to_lowercase`, Unicode's default lower-casing: `Å` → `å`).
    /// This is lower-casing, not full case folding: `ß` stays `ß`.
    pub fold_case: bool,
    /// Ignore leading and trailing white space (Unicode `White_Space`); an item that is only
    /// white space then counts as blank and is skipped.
    pub trim: bool,
}

impl Normalize {
    /// The comparison form of `s`.
    pub fn apply<'a>(&self, s: &'a str) -> Cow<'a, str> {
        let s = if self.trim { s.trim() } else { s };
        // A character changes under lower-casing iff its lower case is not itself; this also
        // catches title-case letters such as U+01C5, which `char::is_uppercase` does not.
        if self.fold_case && s.chars().any(|c| !c.to_lowercase().eq([c])) {
            Cow::Owned(s.to_lowercase())
        } else {
            Cow::Borrowed(s)
        }
    }

    /// Whether this normalisation changes nothing.
    pub fn is_identity(&self) -> bool {
        !self.fold_case && !self.trim
    }
}

/// Ids, typed as in the input.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Ids {
    /// Record numbers, or integer ids of a JSON Lines input.
    Int(Vec<i64>),
    /// CSV/TSV ids, or string ids of a JSON Lines input.
    Text(Vec<String>),
}

impl Ids {
    /// Number of ids.
    pub fn len(&self) -> usize {
        match self {
            Ids::Int(v) => v.len(),
            Ids::Text(v) => v.len(),
        }
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// The items read from an input.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Corpus {
    /// Items as given (without line endings).
    pub items: Vec<String>,
    /// Comparison forms as the metric reads them: the items after normalisation (UTF-8),
    /// or encoded vectors; `None` when they are the items' own bytes.
    pub keys: Option<Vec<Vec<u8>>>,
    /// One id per item.
    pub ids: Ids,
    /// Records skipped because their item was empty.
    pub blank_skipped: usize,
    /// Records read, including skipped ones.
    pub records: usize,
}

impl Corpus {
    /// The bytes each item is compared by: its key, or the item itself.
    pub fn key_bytes(&self) -> Vec<&[u8]> {
        match &self.keys {
            Some(k) => k.iter().map(Vec::as_slice).collect(),
            None => self.items.iter().map(String::as_bytes).collect(),
        }
    }
}

/// What went wrong reading an input, and where.
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
}

/// Reads a corpus from a file.
pub fn read_corpus(path: &Path, opts: &IngestOptions) -> Result<Corpus, IngestError> {
    let name = path.display().to_string();
    let file = std::fs::File::open(path).map_err(|error| IngestError::Io {
        source_name: name.clone(),
        error,
    })?;
    let mut opts = opts.clone();
    if opts.format.is_none() {
        opts.format = Some(InputFormat::from_path(path));
    }
    read_corpus_from(file, &name, &opts)
}

/// Reads a corpus from any reader; `source_name` is used in errors.
pub fn read_corpus_from<R: Read>(
    reader: R,
    source_name: &str,
    opts: &IngestOptions,
) -> Result<Corpus, IngestError> {
    let mut b = Builder::new(source_name, opts);
    match opts.format.unwrap_or(InputFormat::Text) {
        InputFormat::Text => {
            if opts.field.is_some() || opts.id_field.is_some() {
                return Err(b.options_error(
                    "--field and --id-field need a CSV, TSV or JSON Lines input".into(),
                ));
            }
            read_text(reader, &mut b)?
        }
        InputFormat::Csv { delimiter } => read_csv(reader, delimiter, &mut b)?,
        InputFormat::JsonLines => read_jsonl(reader, &mut b)?,
    }
    b.finish()
}

/// Collects items, keys and ids while checking them.
struct Builder<'a> {
    name: &'a str,
    opts: &'a IngestOptions,
    items: Vec<String>,
    keys: Vec<Vec<u8>>,
    keys_differ: bool,
    int_ids: Vec<i64>,
    text_ids: Vec<String>,
    blank: usize,
    records: usize,
}

/// An id as read from one record.
enum IdValue {
    Int(i64),
    Text(String),
}

impl<'a> Builder<'a> {
    fn new(name: &'a str, opts: &'a IngestOptions) -> Builder<'a> {
        Builder {
            name,
            opts,
            items: Vec::new(),
            keys: Vec::new(),
            keys_differ: false,
            int_ids: Vec::new(),
            text_ids: Vec::new(),
            blank: 0,
            records: 0,
        }
    }

    fn record_error(&self, line: u64, message: String) -> IngestError {
        IngestError::Record {
            source_name: self.name.to_string(),
            line,
            message,
        }
    }

    fn options_error(&self, message: String) -> IngestError {
        IngestError::Options {
            source_name: self.name.to_string(),
            message,
        }
    }

    /// Adds one record's item; `id` is `None` for the default record-number id.
    fn push(&mut self, item: String, id: Option<IdValue>, line: u64) -> Result<(), IngestError> {
        let record = self.records as i64;
        self.records += 1;
        if item.contains('\0') {
            return Err(self.record_error(line, "the item contains a NUL byte".into()));
        }
        let key = self.opts.normalize.apply(&item);
        if key.is_empty() {
            self.blank += 1;
            return Ok(());
        }
        match id.unwrap_or(IdValue::Int(record)) {
            IdValue::Int(v) => {
                if !self.text_ids.is_empty() {
                    return Err(self.record_error(
                        line,
                        "this id is a number but earlier ids are strings; ids must all be of one type".into(),
                    ));
                }
                self.int_ids.push(v);
            }
            IdValue::Text(s) => {
                if !self.int_ids.is_empty() {
                    return Err(self.record_error(
                        line,
                        "this id is a string but earlier ids are numbers; ids must all be of one type".into(),
                    ));
                }
                self.text_ids.push(s);
            }
        }
        if !self.keys_differ && key.as_ref() != item.as_str() {
            // The first item whose key differs: earlier items are their own keys.
            self.keys_differ = true;
            self.keys = self.items.iter().map(|s| s.as_bytes().to_vec()).collect();
        }
        if self.keys_differ {
            self.keys.push(key.into_owned().into_bytes());
        }
        self.items.push(item);
        Ok(())
    }

    fn finish(self) -> Result<Corpus, IngestError> {
        if self.items.is_empty() {
            return Err(IngestError::Empty {
                source_name: self.name.to_string(),
                blank: self.blank,
            });
        }
        let keys = self.keys_differ.then_some(self.keys);
        let ids = if self.text_ids.is_empty() {
            Ids::Int(self.int_ids)
        } else {
            Ids::Text(self.text_ids)
        };
        Ok(Corpus {
            items: self.items,
            keys,
            ids,
            blank_skipped: self.blank,
            records: self.records,
        })
    }
}

fn read_text<R: Read>(reader: R, b: &mut Builder<'_>) -> Result<(), IngestError> {
    let mut r = BufReader::with_capacity(1 << 16, reader);
    let mut buf = Vec::with_capacity(256);
    let mut line = 0u64;
    loop {
        buf.clear();
        let got = r
            .read_until(b'\n', &mut buf)
            .map_err(|error| IngestError::Io {
                source_name: b.name.to_string(),
                error,
            })?;
        if got == 0 {
            break;
        }
        line += 1;
        if buf.last() == Some(&b'\n') {
            buf.pop();
        }
        if buf.last() == Some(&b'\r') {
            buf.pop();
        }
        let mut bytes = &buf[..];
        let mut bom = 0;
        if line == 1 && bytes.starts_with(BOM) {
            bytes = &bytes[BOM.len()..];
            bom = BOM.len();
        }
        let item = match std::str::from_utf8(bytes) {
            Ok(s) => s.to_string(),
            Err(e) => {
                // 1-based byte position in the line as stored in the file (BOM included).
                return Err(b.record_error(
                    line,
                    format!(
                        "invalid UTF-8 at byte {} of the line",
                        bom + e.valid_up_to() + 1
                    ),
                ));
            }
        };
        b.push(item, None, line)?;
    }
    Ok(())
}

/// A column chosen by header name or 0-based number.
fn find_column(
    headers: &csv::StringRecord,
    want: &str,
    b: &Builder<'_>,
) -> Result<usize, IngestError> {
    if let Some(i) = headers.iter().position(|h| h == want) {
        return Ok(i);
    }
    if let Ok(i) = want.parse::<usize>() {
        if i < headers.len() {
            return Ok(i);
        }
    }
    let names: Vec<&str> = headers.iter().collect();
    Err(b.options_error(format!(
        "no column \"{want}\" in the header (columns: {})",
        names.join(", ")
    )))
}

fn read_csv<R: Read>(reader: R, delimiter: u8, b: &mut Builder<'_>) -> Result<(), IngestError> {
    let mut rdr = csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .has_headers(true)
        .flexible(true)
        .from_reader(reader);
    let csv_error = |b: &Builder<'_>, headers: Option<&csv::StringRecord>, e: csv::Error| {
        let line = e.position().map_or(0, |p| p.line());
        let message = e.to_string();
        match e.into_kind() {
            csv::ErrorKind::Utf8 { err, .. } => {
                let col = err.field();
                let name = match headers.and_then(|h| h.get(col)) {
                    Some(h) => format!("column \"{h}\" (number {col}, counting from 0)"),
                    None => format!("the header, column number {col} (counting from 0)"),
                };
                b.record_error(line, format!("invalid UTF-8 in {name}"))
            }
            csv::ErrorKind::Io(error) => IngestError::Io {
                source_name: b.name.to_string(),
                error,
            },
            _ => b.record_error(line, message),
        }
    };
    let headers = rdr.headers().map_err(|e| csv_error(b, None, e))?.clone();
    // Strip a BOM from the first header name.
    let headers: csv::StringRecord = headers
        .iter()
        .enumerate()
        .map(|(i, h)| {
            if i == 0 {
                h.trim_start_matches('\u{feff}')
            } else {
                h
            }
        })
        .collect();
    if headers.is_empty() {
        // An empty input: no header and no rows, reported as "no items".
        return Ok(());
    }
    let col = match &b.opts.field {
        Some(f) => find_column(&headers, f, b)?,
        None if headers.len() == 1 => 0,
        None => {
            let names: Vec<&str> = headers.iter().collect();
            return Err(b.options_error(format!(
                "the input has {} columns ({}): say which holds the items with --field",
                headers.len(),
                names.join(", ")
            )));
        }
    };
    let id_col = match &b.opts.id_field {
        Some(f) => Some(find_column(&headers, f, b)?),
        None => None,
    };
    let mut rec = csv::StringRecord::new();
    loop {
        match rdr.read_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(csv_error(b, Some(&headers), e)),
        }
        let line = rec.position().map_or(0, |p| p.line());
        let field = |c: usize| -> Result<String, IngestError> {
            rec.get(c).map(str::to_string).ok_or_else(|| {
                b.record_error(
                    line,
                    format!(
                        "the row has {} fields, so column \"{}\" is missing",
                        rec.len(),
                        headers.get(c).unwrap_or("?")
                    ),
                )
            })
        };
        let item = field(col)?;
        let id = match id_col {
            Some(c) => Some(IdValue::Text(field(c)?)),
            None => None,
        };
        b.push(item, id, line)?;
    }
    Ok(())
}

fn json_type(v: &serde_json::Value) -> &'static str {
    match v {
        serde_json::Value::Null => "null",
        serde_json::Value::Bool(_) => "a boolean",
        serde_json::Value::Number(_) => "a number",
        serde_json::Value::String(_) => "a string",
        serde_json::Value::Array(_) => "an array",
        serde_json::Value::Object(_) => "an object",
    }
}

fn read_jsonl<R: Read>(reader: R, b: &mut Builder<'_>) -> Result<(), IngestError> {
    let Some(field) = b.opts.field.clone() else {
        return Err(b.options_error("say which JSON field holds the items with --field".into()));
    };
    let id_field = b.opts.id_field.clone();
    let mut r = BufReader::with_capacity(1 << 16, reader);
    let mut buf = Vec::new();
    let mut line = 0u64;
    loop {
        buf.clear();
        let got = r
            .read_until(b'\n', &mut buf)
            .map_err(|error| IngestError::Io {
                source_name: b.name.to_string(),
                error,
            })?;
        if got == 0 {
            break;
        }
        line += 1;
        let mut bytes = &buf[..];
        if line == 1 && bytes.starts_with(BOM) {
            bytes = &bytes[BOM.len()..];
        }
        if bytes.iter().all(|c| c.is_ascii_whitespace()) {
            b.records += 1;
            b.blank += 1;
            continue;
        }
        let v: serde_json::Value = serde_json::from_slice(bytes).map_err(|e| {
            // serde_json counts lines within the one line it was given; report the file's
            // line and serde_json's column instead.
            let full = e.to_string();
            let suffix = format!(" at line {} column {}", e.line(), e.column());
            let what = full.strip_suffix(&suffix).unwrap_or(&full);
            b.record_error(
                line,
                format!("invalid JSON at column {}: {what}", e.column()),
            )
        })?;
        let Some(obj) = v.as_object() else {
            return Err(b.record_error(
                line,
                format!("expected a JSON object, found {}", json_type(&v)),
            ));
        };
        let item = match obj.get(&field) {
            Some(serde_json::Value::String(s)) => s.clone(),
            Some(other) => {
                return Err(b.record_error(
                    line,
                    format!(
                        "field \"{field}\" must be a string, found {}",
                        json_type(other)
                    ),
                ))
            }
            None => return Err(b.record_error(line, format!("field \"{field}\" is missing"))),
        };
        let id = match &id_field {
            None => None,
            Some(f) => match obj.get(f) {
                Some(serde_json::Value::String(s)) => Some(IdValue::Text(s.clone())),
                Some(serde_json::Value::Number(n)) if n.is_i64() => {
                    Some(IdValue::Int(n.as_i64().expect("checked")))
                }
                Some(other) => {
                    let found = match other {
                        serde_json::Value::Number(n) if n.is_u64() => {
                            "an integer larger than 9223372036854775807 (2^63 - 1)"
                        }
                        serde_json::Value::Number(_) => "a non-integer number",
                        _ => json_type(other),
                    };
                    return Err(b.record_error(
                        line,
                        format!("id field \"{f}\" must be an integer or a string, found {found}"),
                    ));
                }
                None => return Err(b.record_error(line, format!("id field \"{f}\" is missing"))),
            },
        };
        b.push(item, id, line)?;
    }
    Ok(())
}
