//! Reading items and their ids: text lines, a CSV/TSV column, or a JSON Lines field; and
//! [`load_input`], which reads an input as its metric wants it.
//!
//! One file per reader: `text.rs`, `csv.rs` (CSV and TSV), `jsonl.rs`, `fastx.rs` (FASTA and
//! FASTQ), [`vectors`] (CSV/TSV rows of numbers or `.npy`), and `load.rs` ([`load_input`]: text records, vectors, or an edge
//! list whose nodes are the items, with the metric's options checked against the input).
//!
//! - **Text**: one item per line, UTF-8 (invalid UTF-8 and NUL bytes are errors naming the
//!   line), a leading byte-order mark is dropped, CRLF is tolerated.
//! - **CSV/TSV** (the `csv` crate): a header row is required; `field` names the item column
//!   by header name or 0-based number. CSV is quoted as RFC 4180 says (a quote never closed
//!   is an error naming its line); TSV is not quoted at all, as the IANA
//!   `text/tab-separated-values` registration says.
//! - **FASTA/FASTQ** (`needletail`; plain or gzip): the sequences, with the record names as
//!   ids; a bad record is an error naming its number and line.
//! - **JSON Lines** (`serde_json`): one object per line; `field` names a string field.
//!
//! What looks wrong but does not stop the read (quoting that may have gone astray, rows
//! longer than the header, a text file of FASTA records) is an [`IngestWarning`], returned
//! by [`read_corpus_with_warnings`].
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
use std::io::Read;
use std::path::Path;

use serde::{Deserialize, Serialize};

mod csv;
mod fastx;
mod jsonl;
mod load;
mod queries;
mod text;
pub mod vectors;

pub use crate::error::{IngestError, IngestWarning};
pub use fastx::{read_sequences, SequenceFormat, SequenceRecord};
pub use load::{load_input, text_metric_spec, LoadedInput, MetricOptions, DEFAULT_TIMEOUT_SECS};
pub use queries::{read_queries, QueryLayout, QueryRecord};
pub use vectors::parse_vector;

pub(crate) use crate::metric::first_lone_cr;

/// The UTF-8 byte-order mark, dropped at the start of an input.
const BOM: &[u8] = b"\xEF\xBB\xBF";

/// The error for a carriage return with no line feed after it, at 1-based `byte` of the
/// file, on `line` (lines counted by line feeds, right up to the first lone CR; see
/// [`first_lone_cr`]). Lines that end with a lone CR (old Mac line ends) are refused rather
/// than read, so that every line number a reader reports is the line an editor shows. The
/// message is the one the metrics' side-file readers give ([`crate::metric::lone_cr_message`]).
pub(crate) fn lone_cr_error(source_name: &str, line: u64, byte: u64) -> IngestError {
    IngestError::Record {
        source_name: source_name.to_string(),
        line,
        message: crate::metric::lone_cr_message(byte),
    }
}

/// Takes the line ending (`\n` or `\r\n`) off `buf`, one line as `read_until(b'\n', …)`
/// read it, and refuses a carriage return left in it ([`lone_cr_error`]): `line` is the
/// line's 1-based number, `start` the 0-based byte of the file where it starts. Shared by
/// [`for_each_line`] and the command line's query reader, which reads line by line itself.
pub(crate) fn end_line(
    buf: &mut Vec<u8>,
    source_name: &str,
    line: u64,
    start: u64,
) -> Result<(), IngestError> {
    if buf.last() == Some(&b'\n') {
        buf.pop();
    }
    if buf.last() == Some(&b'\r') {
        buf.pop();
    }
    match buf.iter().position(|&c| c == b'\r') {
        Some(at) => Err(lone_cr_error(source_name, line, start + at as u64 + 1)),
        None => Ok(()),
    }
}

/// Calls `f(line number, bytes, BOM length)` for every line of `reader` (1-based), without
/// its line ending (`\n` or `\r\n`) and, on the first line, without a UTF-8 byte-order
/// mark (whose length is passed so that byte positions can be those of the file). A
/// carriage return with no line feed after it is refused ([`lone_cr_error`]).
fn for_each_line<R: Read>(
    reader: R,
    source_name: &str,
    mut f: impl FnMut(u64, &[u8], usize) -> Result<(), IngestError>,
) -> Result<(), IngestError> {
    use std::io::{BufRead, BufReader};
    let mut r = BufReader::with_capacity(1 << 16, reader);
    let mut buf = Vec::with_capacity(256);
    let mut line = 0u64;
    // The file's byte where the current line starts (0-based).
    let mut start = 0u64;
    loop {
        buf.clear();
        let got = r
            .read_until(b'\n', &mut buf)
            .map_err(|error| IngestError::Io {
                source_name: source_name.to_string(),
                error,
            })?;
        if got == 0 {
            return Ok(());
        }
        line += 1;
        end_line(&mut buf, source_name, line, start)?;
        start += got as u64;
        let bom = if line == 1 && buf.starts_with(BOM) {
            BOM.len()
        } else {
            0
        };
        f(line, &buf[bom..], bom)?;
    }
}

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
    /// FASTA or FASTQ records (plain or gzip-compressed): the sequences are the items, the
    /// record names their ids.
    Sequences(SequenceFormat),
}

impl InputFormat {
    /// The format implied by a file name: `.csv`, `.tsv`/`.tab`, `.jsonl`/`.ndjson`,
    /// `.fa`/`.fasta`/`.fna` (FASTA) and `.fq`/`.fastq` (FASTQ), these two also with `.gz`
    /// after them; else text.
    pub fn from_path(path: &Path) -> InputFormat {
        let name = path
            .file_name()
            .map(|e| e.to_string_lossy().to_ascii_lowercase())
            .unwrap_or_default();
        let ext = |name: &str| {
            Path::new(name)
                .extension()
                .map(|e| e.to_string_lossy().into_owned())
        };
        let sequences = |ext: Option<&str>| match ext {
            Some("fa") | Some("fasta") | Some("fna") => Some(SequenceFormat::Fasta),
            Some("fq") | Some("fastq") => Some(SequenceFormat::Fastq),
            _ => None,
        };
        if let Some(inner) = name.strip_suffix(".gz") {
            if let Some(f) = sequences(ext(inner).as_deref()) {
                return InputFormat::Sequences(f);
            }
        }
        let ext = ext(&name);
        if let Some(f) = sequences(ext.as_deref()) {
            return InputFormat::Sequences(f);
        }
        match ext.as_deref() {
            Some("csv") => InputFormat::Csv { delimiter: b',' },
            Some("tsv") | Some("tab") => InputFormat::Csv { delimiter: b'\t' },
            Some("jsonl") | Some("ndjson") => InputFormat::JsonLines,
            _ => InputFormat::Text,
        }
    }
}

/// The command line's `--input-format` values: `text`, `csv`, `tsv` and `jsonl` (a CSV input
/// with another delimiter has no name there). Written by hand because `Csv` carries its
/// delimiter.
#[cfg(feature = "cli")]
impl clap::ValueEnum for InputFormat {
    fn value_variants<'a>() -> &'a [Self] {
        &[
            InputFormat::Text,
            InputFormat::Csv { delimiter: b',' },
            InputFormat::Csv { delimiter: b'\t' },
            InputFormat::JsonLines,
            InputFormat::Sequences(SequenceFormat::Fasta),
            InputFormat::Sequences(SequenceFormat::Fastq),
        ]
    }

    fn to_possible_value(&self) -> Option<clap::builder::PossibleValue> {
        use clap::builder::PossibleValue;
        let (name, help) = match self {
            InputFormat::Text => ("text", "One item per line"),
            InputFormat::Csv { delimiter: b',' } => {
                ("csv", "Comma-separated values with a header row")
            }
            InputFormat::Csv { delimiter: b'\t' } => {
                ("tsv", "Tab-separated values with a header row")
            }
            InputFormat::Csv { .. } => return None,
            InputFormat::JsonLines => ("jsonl", "One JSON object per line"),
            InputFormat::Sequences(SequenceFormat::Fasta) => (
                "fasta",
                "FASTA records (plain or gzip): sequences, ids from the record names",
            ),
            InputFormat::Sequences(SequenceFormat::Fastq) => (
                "fastq",
                "FASTQ records (plain or gzip): sequences, ids from the record names",
            ),
        };
        Some(PossibleValue::new(name).help(help))
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
///
/// The steps run in this order: trim, fold punctuation, fold case, sort tokens. A metric d
/// applied after a normalisation f compares `d(f(a), f(b))`: a *pseudometric* on the items
/// as given (two different items with one comparison form are at distance 0, `"Keth Marine"`
/// and `"Marine Keth"` with [`Normalize::sort_tokens`]). Symmetry and the triangle
/// inequality still hold, so the lower bounds of exact and range queries stay valid; such
/// items tie at distance 0 and come out ordered by id.
///
/// ```
/// use waymark::ingest::Normalize;
///
/// let n = Normalize { fold_case: true, fold_punct: true, sort_tokens: true, ..Normalize::default() };
/// assert_eq!(n.apply("Marine-Supply (Keth),  Ltd."), "keth ltd marine supply");
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Normalize {
    /// Compare in lower case (`str::to_lowercase`, Unicode's default lower-casing: `Å` → `å`).
    /// This is lower-casing, not full case folding: `ß` stays `ß`.
    pub fold_case: bool,
    /// Ignore leading and trailing white space (Unicode `White_Space`); an item that is only
    /// white space then counts as blank and is skipped.
    pub trim: bool,
    /// Punctuation (Unicode general category P: `.,;:!?'"-_()[]{}/\&*#%@` and their
    /// kin, `’ – « »`) becomes a space, then runs of white space become one space and the
    /// ends are trimmed. Symbols (`+`, `$`, `©`) and letters, digits and marks are kept. An
    /// item of only punctuation and white space counts as blank and is skipped.
    #[serde(default, skip_serializing_if = "is_false")]
    pub fold_punct: bool,
    /// Split on white space, sort the tokens (byte order, after the steps above) and join
    /// them with one space, so that word order does not count; implies trimming.
    #[serde(default, skip_serializing_if = "is_false")]
    pub sort_tokens: bool,
}

/// For serde: fields that are off are left out, so that files and cache keys written
/// before they existed stay as they were.
fn is_false(b: &bool) -> bool {
    !*b
}

/// Whether `c` is punctuation (Unicode general category P*).
fn is_punctuation(c: char) -> bool {
    use unicode_general_category::{get_general_category, GeneralCategory as G};
    if c.is_ascii() {
        return c.is_ascii_punctuation()
            && !matches!(c, '$' | '+' | '<' | '=' | '>' | '^' | '`' | '|' | '~');
    }
    matches!(
        get_general_category(c),
        G::ConnectorPunctuation
            | G::DashPunctuation
            | G::OpenPunctuation
            | G::ClosePunctuation
            | G::InitialPunctuation
            | G::FinalPunctuation
            | G::OtherPunctuation
    )
}

impl Normalize {
    /// The comparison form of `s`.
    pub fn apply<'a>(&self, s: &'a str) -> Cow<'a, str> {
        let s = if self.trim { s.trim() } else { s };
        let mut s = Cow::Borrowed(s);
        if self.fold_punct {
            let spaced = s.chars().any(is_punctuation)
                || s.starts_with(char::is_whitespace)
                || s.ends_with(char::is_whitespace)
                || s.chars().any(|c| c.is_whitespace() && c != ' ')
                || s.contains("  ");
            if spaced {
                let cleaned: String = s
                    .chars()
                    .map(|c| if is_punctuation(c) { ' ' } else { c })
                    .collect();
                s = Cow::Owned(cleaned.split_whitespace().collect::<Vec<_>>().join(" "));
            }
        }
        // A character changes under lower-casing iff its lower case is not itself; this also
        // catches title-case letters such as U+01C5, which `char::is_uppercase` does not.
        if self.fold_case && s.chars().any(|c| !c.to_lowercase().eq([c])) {
            s = Cow::Owned(s.to_lowercase());
        }
        if self.sort_tokens {
            let mut tokens: Vec<&str> = s.split_whitespace().collect();
            tokens.sort_unstable();
            let joined = tokens.join(" ");
            if joined != *s {
                return Cow::Owned(joined);
            }
        }
        s
    }

    /// Whether this normalisation changes nothing.
    pub fn is_identity(&self) -> bool {
        !self.fold_case && !self.trim && !self.fold_punct && !self.sort_tokens
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
///
/// Make one with [`Corpus::new`] (or a reader such as [`read_corpus`]), which checks that
/// there is one id, and one key if any, per item; [`crate::index::build_index`] refuses a
/// corpus whose lengths disagree.
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
    /// A corpus of `items`, with their comparison `keys` (`None`: the items' own bytes) and
    /// one id per item; no record skipped. Refuses ids or keys that are not one per item.
    ///
    /// ```
    /// use waymark::ingest::{Corpus, Ids};
    ///
    /// let items = vec!["Keth Landing".to_string(), "Mirrow Steps".to_string()];
    /// let c = Corpus::new(items.clone(), None, Ids::Int(vec![7, 9]))?;
    /// assert_eq!((c.items.len(), c.records), (2, 2));
    /// assert!(Corpus::new(items, None, Ids::Int(vec![7])).is_err());
    /// # Ok::<(), waymark::ingest::IngestError>(())
    /// ```
    pub fn new(
        items: Vec<String>,
        keys: Option<Vec<Vec<u8>>>,
        ids: Ids,
    ) -> Result<Corpus, IngestError> {
        let corpus = Corpus {
            records: items.len(),
            items,
            keys,
            ids,
            blank_skipped: 0,
        };
        corpus.check()?;
        Ok(corpus)
    }

    /// This corpus, read from an input where `blank` more records were skipped.
    pub fn with_blank_skipped(mut self, blank: usize) -> Corpus {
        self.blank_skipped = blank;
        self.records = self.items.len() + blank;
        self
    }

    /// Checks that there is one id, and one key if there are keys, per item.
    pub fn check(&self) -> Result<(), IngestError> {
        let items = self.items.len();
        let mismatch = |what: &'static str, len: usize| IngestError::Mismatch { what, len, items };
        if self.ids.len() != items {
            return Err(mismatch("ids", self.ids.len()));
        }
        match &self.keys {
            Some(k) if k.len() != items => Err(mismatch("keys", k.len())),
            _ => Ok(()),
        }
    }

    /// The bytes each item is compared by: its key, or the item itself.
    pub fn key_bytes(&self) -> Vec<&[u8]> {
        match &self.keys {
            Some(k) => k.iter().map(Vec::as_slice).collect(),
            None => self.items.iter().map(String::as_bytes).collect(),
        }
    }
}

/// Reads a corpus from a file. What the readers warn of is dropped: see
/// [`read_corpus_with_warnings`].
pub fn read_corpus(path: &Path, opts: &IngestOptions) -> Result<Corpus, IngestError> {
    read_corpus_with_warnings(path, opts).map(|(c, _)| c)
}

/// Reads a corpus from a file, with the readers' warnings (quoting that looks wrong, rows
/// longer than the header, repeated column names, a text file that looks like FASTA).
pub fn read_corpus_with_warnings(
    path: &Path,
    opts: &IngestOptions,
) -> Result<(Corpus, Vec<IngestWarning>), IngestError> {
    let name = path.display().to_string();
    let file = std::fs::File::open(path).map_err(|error| IngestError::Io {
        source_name: name.clone(),
        error,
    })?;
    let mut opts = opts.clone();
    if opts.format.is_none() {
        opts.format = Some(InputFormat::from_path(path));
    }
    read_corpus_from_with_warnings(bounded(file, &name)?, &name, &opts)
}

/// `reader` read through [`crate::resources::BoundedRead`] with the input limit of the
/// memory budget, so that an endless input (a device, a pipe, a small gzip file that unpacks
/// to gigabytes) stops with an error.
pub(crate) fn bounded<R: Read>(
    reader: R,
    name: &str,
) -> Result<crate::resources::BoundedRead<R>, IngestError> {
    let limit = crate::resources::input_limit().map_err(|e| IngestError::Io {
        source_name: name.to_string(),
        error: std::io::Error::other(e.to_string()),
    })?;
    Ok(crate::resources::BoundedRead::new(
        reader,
        limit.unwrap_or(u64::MAX),
    ))
}

/// Reads a corpus from any reader; `source_name` is used in errors. What the readers warn
/// of is dropped: see [`read_corpus_from_with_warnings`].
pub fn read_corpus_from<R: Read>(
    reader: R,
    source_name: &str,
    opts: &IngestOptions,
) -> Result<Corpus, IngestError> {
    read_corpus_from_with_warnings(reader, source_name, opts).map(|(c, _)| c)
}

/// Reads a corpus from any reader, with the readers' warnings; `source_name` is used in
/// errors and warnings.
pub fn read_corpus_from_with_warnings<R: Read>(
    reader: R,
    source_name: &str,
    opts: &IngestOptions,
) -> Result<(Corpus, Vec<IngestWarning>), IngestError> {
    let mut b = Builder::new(source_name, opts);
    let format = opts.format.unwrap_or(InputFormat::Text);
    if matches!(format, InputFormat::Text | InputFormat::Sequences(_))
        && (opts.field.is_some() || opts.id_field.is_some())
    {
        return Err(
            b.options_error("--field and --id-field need a CSV, TSV or JSON Lines input".into())
        );
    }
    match format {
        InputFormat::Text => text::read_text(reader, &mut b)?,
        InputFormat::Csv { delimiter } => csv::read_csv(reader, delimiter, &mut b)?,
        InputFormat::JsonLines => jsonl::read_jsonl(reader, &mut b)?,
        InputFormat::Sequences(f) => fastx::read_fastx(reader, f, &mut b)?,
    }
    let warnings = std::mem::take(&mut b.warnings);
    Ok((b.finish()?, warnings))
}

/// A corpus of items held in memory, read as the records of a file are: the normalisation
/// of `opts` makes the comparison keys, items that are blank after it are skipped (and
/// counted), an item holding a NUL byte is refused, and so is a corpus with no item left.
/// `ids` are one per item given (blank ones included), or `None` for the 0-based positions.
/// Messages name `source_name` and the item's 1-based position as its line.
///
/// ```
/// use waymark::ingest::{corpus_from_items, Ids, IngestOptions, Normalize};
///
/// let opts = IngestOptions {
///     normalize: Normalize { trim: true, ..Normalize::default() },
///     ..IngestOptions::default()
/// };
/// let items = ["Keth Landing", "  ", "Mirrow Steps "].map(String::from);
/// let c = corpus_from_items(items, None, &opts, "items")?;
/// assert_eq!(c.ids, Ids::Int(vec![0, 2]));
/// assert_eq!((c.blank_skipped, c.records), (1, 3));
/// # Ok::<(), waymark::ingest::IngestError>(())
/// ```
pub fn corpus_from_items(
    items: impl IntoIterator<Item = String>,
    ids: Option<Ids>,
    opts: &IngestOptions,
    source_name: &str,
) -> Result<Corpus, IngestError> {
    let items: Vec<String> = items.into_iter().collect();
    if let Some(ids) = &ids {
        if ids.len() != items.len() {
            return Err(IngestError::Mismatch {
                what: "ids",
                len: ids.len(),
                items: items.len(),
            });
        }
    }
    let mut b = Builder::new(source_name, opts);
    for (i, item) in items.into_iter().enumerate() {
        let id = match &ids {
            None => None,
            Some(Ids::Int(v)) => Some(IdValue::Int(v[i])),
            Some(Ids::Text(v)) => Some(IdValue::Text(v[i].clone())),
        };
        b.push(item, id, i as u64 + 1)?;
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
    warnings: Vec<IngestWarning>,
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
            warnings: Vec::new(),
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
        debug_assert_eq!(self.records, self.items.len() + self.blank);
        Ok(Corpus::new(self.items, keys, ids)?.with_blank_skipped(self.blank))
    }
}
