//! Reading numeric vectors: CSV/TSV rows or NumPy `.npy` files.
//!
//! Every vector becomes one item of `4 · dim` bytes, its components as little-endian `f32`
//! (the item form of [`crate::metric::VectorMetric`]), kept with the row as text for display.
//!
//! - **Delimited text**: one vector per line, components separated by `,` or a tab
//!   (default: tab for `.tsv`/`.tab` files, comma for `.csv`, else a tab if the first row
//!   has one), spaces around a value ignored, blank lines skipped, a leading byte-order mark
//!   dropped, CRLF tolerated, an optional header row (`header: true`). No quoting: values are
//!   numbers.
//! - **NumPy `.npy`** (format versions 1, 2 and 3): a 2-D array of little-endian `f4` or `f8`
//!   in C order, one row per vector; `f8` values are rounded to `f32`.
//!
//! Refused, naming the file, the line (the row for `.npy`) and the 1-based column: a row with
//! another number of values than the first, a value that is not a number, NaN or ±∞, and a
//! value outside the `f32` range.
//!
//! ```
//! use waymark::ingest::vectors::{read_vectors_from, VectorFormat, VectorOptions};
//!
//! let opts = VectorOptions { format: Some(VectorFormat::Delimited { delimiter: b',' }), header: false };
//! let v = read_vectors_from("0.5,1\n2, -3\n".as_bytes(), "buoys.csv", &opts)?;
//! assert_eq!((v.dim, v.items.len()), (2, 2));
//! assert_eq!(v.items[1], [2.0f32.to_le_bytes(), (-3.0f32).to_le_bytes()].concat());
//! assert_eq!(v.rows[1], "2, -3");
//! let err = read_vectors_from("1,2\n3,x\n".as_bytes(), "buoys.csv", &opts).unwrap_err();
//! assert_eq!(err.to_string(), "buoys.csv:2: column 2: `x` is not a number");
//! # Ok::<(), waymark::ingest::IngestError>(())
//! ```

use std::io::Read;
use std::path::Path;

use super::IngestError;

/// The layout of a vector file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum VectorFormat {
    /// Values separated by `delimiter` (`b','` or `b'\t'`), one vector per line.
    Delimited {
        /// The separator.
        delimiter: u8,
    },
    /// A NumPy `.npy` file holding a 2-D array.
    Npy,
}

/// How to read a vector file.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct VectorOptions {
    /// The layout; `None`: `.npy` by extension, else delimited with the delimiter guessed.
    pub format: Option<VectorFormat>,
    /// Delimited text only: the first non-blank line names the columns and is skipped.
    pub header: bool,
}

/// Vectors read from a file.
#[derive(Clone, Debug, PartialEq)]
pub struct Vectors {
    /// Number of components of every vector.
    pub dim: usize,
    /// One item per vector: `dim` little-endian `f32`s.
    pub items: Vec<Vec<u8>>,
    /// The vector as text: the line as given, or the values joined by `,` for `.npy`.
    pub rows: Vec<String>,
    /// 1-based line (row for `.npy`) of each vector, for messages pointing into the file.
    pub lines: Vec<u64>,
}

/// Reads vectors from a file.
pub fn read_vectors(path: &Path, opts: &VectorOptions) -> Result<Vectors, IngestError> {
    let name = path.display().to_string();
    let mut opts = *opts;
    if opts.format.is_none() {
        let ext = path
            .extension()
            .map(|e| e.to_string_lossy().to_ascii_lowercase());
        opts.format = match ext.as_deref() {
            Some("npy") => Some(VectorFormat::Npy),
            Some("csv") => Some(VectorFormat::Delimited { delimiter: b',' }),
            Some("tsv") | Some("tab") => Some(VectorFormat::Delimited { delimiter: b'\t' }),
            _ => None,
        };
    }
    let file = std::fs::File::open(path).map_err(|error| IngestError::Io {
        source_name: name.clone(),
        error,
    })?;
    read_vectors_from(super::bounded(file, &name)?, &name, &opts)
}

/// Reads vectors from any reader; `source_name` is used in errors. With no format given,
/// input starting with the `.npy` magic is read as `.npy`, anything else as delimited text.
pub fn read_vectors_from<R: Read>(
    mut reader: R,
    source_name: &str,
    opts: &VectorOptions,
) -> Result<Vectors, IngestError> {
    let mut bytes = Vec::new();
    reader
        .read_to_end(&mut bytes)
        .map_err(|error| IngestError::Io {
            source_name: source_name.to_string(),
            error,
        })?;
    let format = opts.format.unwrap_or(if bytes.starts_with(NPY_MAGIC) {
        VectorFormat::Npy
    } else {
        VectorFormat::Delimited { delimiter: 0 }
    });
    let v = match format {
        VectorFormat::Npy => read_npy(&bytes, source_name)?,
        VectorFormat::Delimited { delimiter } => {
            read_delimited(&bytes, delimiter, opts.header, source_name)?
        }
    };
    if v.items.is_empty() {
        return Err(IngestError::Empty {
            source_name: source_name.to_string(),
            blank: 0,
        });
    }
    Ok(v)
}

/// Parses one query vector: `dim` numbers separated by commas or tabs, as in a vector
/// file. The error says what is wrong (the column, or the number of components).
///
/// ```
/// use waymark::ingest::parse_vector;
///
/// assert_eq!(parse_vector("1.5, -2,0", 3), Ok(vec![1.5, -2.0, 0.0]));
/// assert!(parse_vector("1,2", 3).unwrap_err().contains("2 components"));
/// assert!(parse_vector("1,x,3", 3).unwrap_err().contains("column 2"));
/// ```
pub fn parse_vector(row: &str, dim: usize) -> Result<Vec<f32>, String> {
    let v =
        read_vectors_from(row.as_bytes(), "query", &VectorOptions::default()).map_err(
            |e| match e {
                IngestError::Record { message, .. } => message,
                IngestError::Empty { .. } => "the query vector is empty".to_string(),
                other => other.to_string(),
            },
        )?;
    if v.items.len() != 1 {
        return Err(format!(
            "a query vector is one line, not {} lines",
            v.items.len()
        ));
    }
    if v.dim != dim {
        return Err(format!(
            "the query has {} components; the index's vectors have {dim}",
            v.dim
        ));
    }
    Ok(v.items[0]
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect())
}

fn record(source_name: &str, line: u64, message: String) -> IngestError {
    IngestError::Record {
        source_name: source_name.to_string(),
        line,
        message,
    }
}

/// Checks one value and converts it to `f32`.
fn value(x: f64, text: &dyn Fn() -> String) -> Result<f32, String> {
    if x.is_nan() {
        return Err(format!("column {}: NaN is not allowed", text()));
    }
    if x.is_infinite() {
        return Err(format!("column {}: infinity is not allowed", text()));
    }
    let f = x as f32;
    if f.is_infinite() {
        return Err(format!(
            "column {}: {x} is outside the range of 32-bit floats",
            text()
        ));
    }
    Ok(f)
}

fn read_delimited(
    bytes: &[u8],
    delimiter: u8,
    header: bool,
    name: &str,
) -> Result<Vectors, IngestError> {
    if let Some((line, byte)) = super::first_lone_cr(bytes) {
        return Err(super::lone_cr_error(name, line, byte));
    }
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let text = std::str::from_utf8(bytes).map_err(|e| {
        let line = bytes[..e.valid_up_to()]
            .iter()
            .filter(|&&b| b == b'\n')
            .count() as u64
            + 1;
        record(name, line, "invalid UTF-8".into())
    })?;
    let mut v = Vectors {
        dim: 0,
        items: Vec::new(),
        rows: Vec::new(),
        lines: Vec::new(),
    };
    let mut delimiter = delimiter as char;
    let mut header_left = header;
    let mut first_line = 0u64;
    for (i, raw) in text.split('\n').enumerate() {
        let line = i as u64 + 1;
        let row = raw.strip_suffix('\r').unwrap_or(raw);
        if row.trim().is_empty() {
            continue;
        }
        if delimiter == '\0' {
            delimiter = if row.contains('\t') { '\t' } else { ',' };
        }
        if header_left {
            header_left = false;
            continue;
        }
        let mut item = Vec::with_capacity(4 * v.dim.max(1));
        let mut n = 0usize;
        for (c, field) in row.split(delimiter).enumerate() {
            let f = field.trim();
            let col = || (c + 1).to_string();
            if f.is_empty() {
                return Err(record(name, line, format!("column {}: empty value", c + 1)));
            }
            let x: f64 = f.parse().map_err(|_| {
                let hint = if v.items.is_empty() && !header {
                    " (if the first line names the columns, read it as a header)"
                } else {
                    ""
                };
                record(
                    name,
                    line,
                    format!("column {}: `{f}` is not a number{hint}", c + 1),
                )
            })?;
            let x = value(x, &col).map_err(|m| record(name, line, m))?;
            item.extend_from_slice(&x.to_le_bytes());
            n += 1;
        }
        if v.items.is_empty() {
            v.dim = n;
            first_line = line;
        } else if n != v.dim {
            return Err(record(
                name,
                line,
                format!(
                    "{n} values, but line {first_line} has {} (every vector needs the same \
                     number of components)",
                    v.dim
                ),
            ));
        }
        v.items.push(item);
        v.rows.push(row.to_string());
        v.lines.push(line);
    }
    Ok(v)
}

/// The first bytes of every `.npy` file.
const NPY_MAGIC: &[u8] = b"\x93NUMPY";

/// Reads a `.npy` file.
///
/// Written here rather than taken from a crate: the format is a magic string, a length and
/// a Python dict literal with three keys (NumPy's `format.py` documentation, an open
/// specification), we accept only 2-D float arrays, and every refusal must name the header
/// field or the row and column; a general `.npy` crate would add a dependency for less
/// than the checks we need anyway.
fn read_npy(bytes: &[u8], name: &str) -> Result<Vectors, IngestError> {
    let bad = |m: String| IngestError::Options {
        source_name: name.to_string(),
        message: m,
    };
    if !bytes.starts_with(NPY_MAGIC) || bytes.len() < 10 {
        return Err(bad("not a NumPy .npy file (no \\x93NUMPY magic)".into()));
    }
    let major = bytes[6];
    let (len, start) = match major {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10usize),
        2 | 3 if bytes.len() >= 12 => (
            u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
            12,
        ),
        _ => {
            return Err(bad(format!(
                ".npy format version {major} is not supported (1, 2 or 3)"
            )))
        }
    };
    let header = bytes
        .get(start..start.saturating_add(len))
        .ok_or_else(|| bad("truncated .npy header".into()))?;
    let header = std::str::from_utf8(header).map_err(|_| bad(".npy header is not text".into()))?;
    let descr =
        dict_value(header, "descr").ok_or_else(|| bad("no 'descr' in the .npy header".into()))?;
    let size = match descr.trim_matches(|c| c == '\'' || c == '"') {
        "<f4" => 4,
        "<f8" => 8,
        other => {
            return Err(bad(format!(
                "element type {other} is not supported: vectors must be little-endian float32 \
                 ('<f4') or float64 ('<f8')"
            )))
        }
    };
    match dict_value(header, "fortran_order") {
        Some("False") => {}
        Some("True") => {
            return Err(bad(
                "the array is in Fortran order; save it in C order (numpy.ascontiguousarray)"
                    .into(),
            ))
        }
        _ => return Err(bad("no valid 'fortran_order' in the .npy header".into())),
    }
    let shape =
        dict_value(header, "shape").ok_or_else(|| bad("no 'shape' in the .npy header".into()))?;
    let dims: Vec<&str> = shape
        .trim_start_matches('(')
        .trim_end_matches(')')
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .collect();
    let dims: Vec<usize> = dims
        .iter()
        .map(|d| d.parse::<usize>())
        .collect::<Result<_, _>>()
        .map_err(|_| bad(format!("shape {shape} is not a tuple of sizes")))?;
    let [n, dim] = dims[..] else {
        return Err(bad(format!(
            "the array has shape {shape}; vectors need a 2-D array (rows × components)"
        )));
    };
    if dim == 0 {
        return Err(bad("the vectors have no components (shape (n, 0))".into()));
    }
    let data = &bytes[start + len..];
    let want = n
        .checked_mul(dim)
        .and_then(|x| x.checked_mul(size))
        .ok_or_else(|| bad(format!("shape {shape} is too large")))?;
    if data.len() != want {
        return Err(bad(format!(
            "the data is {} bytes, but shape {shape} of {descr} needs {want}",
            data.len()
        )));
    }
    vectors_from_values(n, dim, name, |r, c| {
        let x = &data[(r * dim + c) * size..][..size];
        if size == 4 {
            f64::from(f32::from_le_bytes([x[0], x[1], x[2], x[3]]))
        } else {
            f64::from_le_bytes([x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7]])
        }
    })
}

/// Vectors from values held in memory (a `.npy` file's data, an array of the caller's):
/// `n` rows of `dim` components, component `c` of row `r` being `value(r, c)`, read
/// without any other copy. Each vector's text is its values joined by `,` (each the
/// shortest decimal that reads back as the value, as an `f32` when it is one); NaN, infinities and values outside the
/// range of `f32` are refused with their 1-based row and column, named after `name`.
///
/// ```
/// use waymark::ingest::vectors::vectors_from_values;
///
/// let data = [0.29f32, 1.0, 2.0, -3.0];
/// let v = vectors_from_values(2, 2, "buoys", |r, c| f64::from(data[r * 2 + c]))?;
/// // 0.29 as an f32 is 0.28999999165534973 as an f64: written as the f32 it is.
/// assert_eq!(v.rows, ["0.29,1", "2,-3"]);
/// let bad = [0.5f32, f32::NAN];
/// let e = vectors_from_values(1, 2, "buoys", |r, c| f64::from(bad[r * 2 + c])).unwrap_err();
/// assert_eq!(e.to_string(), "buoys:1: row 1, column 2: NaN is not allowed");
/// # Ok::<(), waymark::ingest::IngestError>(())
/// ```
pub fn vectors_from_values(
    n: usize,
    dim: usize,
    name: &str,
    value_at: impl Fn(usize, usize) -> f64,
) -> Result<Vectors, IngestError> {
    if dim == 0 {
        return Err(IngestError::Options {
            source_name: name.to_string(),
            message: "the vectors have no components (shape (n, 0))".into(),
        });
    }
    let mut v = Vectors {
        dim,
        items: Vec::with_capacity(n),
        rows: Vec::with_capacity(n),
        lines: Vec::with_capacity(n),
    };
    for r in 0..n {
        let mut item = Vec::with_capacity(4 * dim);
        let mut text = String::new();
        for c in 0..dim {
            let x = value_at(r, c);
            let col = || (c + 1).to_string();
            let f = value(x, &col)
                .map_err(|m| record(name, r as u64 + 1, format!("row {}, {m}", r + 1)))?;
            item.extend_from_slice(&f.to_le_bytes());
            if c > 0 {
                text.push(',');
            }
            // A value that is an `f32` (all of a float32 array's) is written as the
            // shortest decimal of that `f32` (`0.29`, not the `f64` digits of its bits).
            if f64::from(f) == x {
                text.push_str(&f.to_string());
            } else {
                text.push_str(&x.to_string());
            }
        }
        v.items.push(item);
        v.rows.push(text);
        v.lines.push(r as u64 + 1);
    }
    Ok(v)
}

/// The value text of `'key': value` in a Python dict literal (values here hold no `:`; a
/// tuple value ends at its `)`, others at the next `,` or `}`).
fn dict_value<'a>(header: &'a str, key: &str) -> Option<&'a str> {
    let at = header
        .find(&format!("'{key}'"))
        .or_else(|| header.find(&format!("\"{key}\"")))?;
    let rest = header[at + key.len() + 2..]
        .trim_start()
        .strip_prefix(':')?
        .trim_start();
    let end = if rest.starts_with('(') {
        rest.find(')')? + 1
    } else {
        rest.find([',', '}'])?
    };
    Some(rest[..end].trim())
}
