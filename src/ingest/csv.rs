//! CSV and TSV input (the `csv` crate, RFC 4180 quoting): a header row, the items in one
//! column, the ids optionally in another.

use std::io::Read;

use super::{Builder, IdValue, IngestError};

/// A column chosen by header name or 0-based number.
fn find_column(
    headers: &::csv::StringRecord,
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

pub(super) fn read_csv<R: Read>(
    reader: R,
    delimiter: u8,
    b: &mut Builder<'_>,
) -> Result<(), IngestError> {
    let mut rdr = ::csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .has_headers(true)
        .flexible(true)
        .from_reader(reader);
    let csv_error = |b: &Builder<'_>, headers: Option<&::csv::StringRecord>, e: ::csv::Error| {
        let line = e.position().map_or(0, |p| p.line());
        let message = e.to_string();
        match e.into_kind() {
            ::csv::ErrorKind::Utf8 { err, .. } => {
                let col = err.field();
                let name = match headers.and_then(|h| h.get(col)) {
                    Some(h) => format!("column \"{h}\" (number {col}, counting from 0)"),
                    None => format!("the header, column number {col} (counting from 0)"),
                };
                b.record_error(line, format!("invalid UTF-8 in {name}"))
            }
            ::csv::ErrorKind::Io(error) => IngestError::Io {
                source_name: b.name.to_string(),
                error,
            },
            _ => b.record_error(line, message),
        }
    };
    let headers = rdr.headers().map_err(|e| csv_error(b, None, e))?.clone();
    // Strip a BOM from the first header name.
    let headers: ::csv::StringRecord = headers
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
    let mut rec = ::csv::StringRecord::new();
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
