//! CSV and TSV input (the `csv` crate): a header row, the items in one column, the ids
//! optionally in another.
//!
//! CSV is read as RFC 4180 defines it: a field is quoted whole (`"…"`, a quote inside
//! doubled), quoted fields may hold delimiters and line breaks, no backslash escapes; LF
//! and CRLF end records (a CR with no LF after it outside a quoted field is refused, as
//! every reader refuses it: [`super::lone_cr_error`]). TSV is read as the IANA `text/tab-separated-values`
//! registration defines it: no quoting at all (a quote is a character), fields hold no tabs
//! or line breaks. A quote still open at the end of a CSV input is refused with the line it
//! opened on; quoted fields that hold line breaks, quotes inside unquoted fields, rows
//! longer than the header and repeated column names are warned of ([`IngestWarning`]).

use std::io::Read;

use super::{Builder, IdValue, IngestError, IngestWarning};

/// Where [`QuoteScan`] is within a field.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum At {
    /// At the start of a field.
    FieldStart,
    /// Inside a field that did not start with a quote.
    Unquoted,
    /// Inside a quoted field.
    Quoted,
    /// After a quote inside a quoted field: its end, or the first of a doubled quote.
    QuoteInQuoted,
}

/// Follows the quoting of the bytes the `csv` crate reads, as RFC 4180 and the crate's
/// defaults (`double_quote`, no escape character) define it, to tell what the crate does
/// not: a quote still open at the end of the input (the crate ends the field there, taking
/// every line after the quote into it), quoted fields that hold line breaks, and quotes that
/// the crate reads as characters.
struct QuoteScan<R> {
    inner: R,
    delimiter: u8,
    /// Whether quotes quote (CSV) or are characters (TSV).
    quoting: bool,
    /// Bytes of a leading UTF-8 byte-order mark passed so far (the crate drops it).
    bom: usize,
    at: At,
    /// The current 1-based line.
    line: u64,
    /// Bytes read so far.
    byte: u64,
    /// Whether the last byte was a carriage return outside a quoted field.
    after_cr: bool,
    /// The first carriage return outside a quoted field with no line feed after it: its
    /// line and 1-based byte (see [`super::lone_cr_error`]).
    lone_cr: Option<(u64, u64)>,
    /// The line the open quoted field started on.
    open_line: u64,
    /// Whether the input ended with a line break (so that its lines are counted right).
    ends_with_newline: bool,
    /// Quoted fields holding line breaks: how many, and the first one's line and span.
    multi_line: usize,
    first_multi_line: Option<(u64, u64)>,
    /// Quotes read as characters: how many fields, and the first one's line.
    stray: usize,
    first_stray: Option<u64>,
    /// Whether the field at hand already counted as stray.
    field_stray: bool,
}

impl<R: Read> QuoteScan<R> {
    fn new(inner: R, delimiter: u8, quoting: bool) -> QuoteScan<R> {
        QuoteScan {
            inner,
            delimiter,
            quoting,
            bom: 0,
            at: At::FieldStart,
            line: 1,
            byte: 0,
            after_cr: false,
            lone_cr: None,
            open_line: 0,
            ends_with_newline: true,
            multi_line: 0,
            first_multi_line: None,
            stray: 0,
            first_stray: None,
            field_stray: false,
        }
    }

    fn note_stray(&mut self) {
        if !self.field_stray {
            self.field_stray = true;
            self.stray += 1;
            self.first_stray.get_or_insert(self.line);
        }
    }

    fn close_quoted(&mut self) {
        if self.line > self.open_line {
            self.multi_line += 1;
            self.first_multi_line
                .get_or_insert((self.open_line, self.line - self.open_line + 1));
        }
    }

    fn step(&mut self, c: u8) {
        self.byte += 1;
        if self.after_cr && c != b'\n' {
            self.lone_cr.get_or_insert((self.line, self.byte - 1));
        }
        self.after_cr = c == b'\r' && self.at != At::Quoted;
        if self.bom < super::BOM.len() {
            if self.line == 1 && self.at == At::FieldStart && super::BOM[self.bom] == c {
                self.bom += 1;
                return;
            }
            self.bom = super::BOM.len();
        }
        if self.quoting {
            self.step_quoting(c);
        }
        if c == b'\n' {
            self.line += 1;
        }
    }

    fn step_quoting(&mut self, c: u8) {
        let end_of_field = c == self.delimiter || c == b'\n' || c == b'\r';
        self.at = match self.at {
            At::FieldStart | At::Unquoted if end_of_field => {
                self.field_stray = false;
                At::FieldStart
            }
            At::FieldStart if c == b'"' => {
                self.open_line = self.line;
                At::Quoted
            }
            At::FieldStart => At::Unquoted,
            At::Unquoted => {
                if c == b'"' {
                    self.note_stray();
                }
                At::Unquoted
            }
            At::Quoted if c == b'"' => At::QuoteInQuoted,
            At::Quoted => At::Quoted,
            At::QuoteInQuoted if c == b'"' => At::Quoted,
            At::QuoteInQuoted => {
                self.close_quoted();
                if end_of_field {
                    self.field_stray = false;
                    At::FieldStart
                } else {
                    // Text after the closing quote: the crate joins it to the field.
                    self.note_stray();
                    At::Unquoted
                }
            }
        };
    }

    /// The line of a quoted field still open at the end of the input.
    fn unterminated(&self) -> Option<u64> {
        (self.at == At::Quoted).then_some(self.open_line)
    }

    /// The lines of the input.
    fn lines(&self) -> u64 {
        self.line - u64::from(self.ends_with_newline)
    }
}

impl<R: Read> Read for QuoteScan<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        for &c in &buf[..n] {
            self.step(c);
        }
        if n > 0 {
            self.ends_with_newline = buf[n - 1] == b'\n';
        } else if self.at == At::QuoteInQuoted {
            // A quoted field closed by the input's last byte.
            self.close_quoted();
            self.at = At::FieldStart;
        }
        Ok(n)
    }
}

/// A column chosen by header name or 0-based number; a name that several columns have is
/// refused.
fn find_column(
    headers: &::csv::StringRecord,
    want: &str,
    b: &Builder<'_>,
) -> Result<usize, IngestError> {
    let named: Vec<usize> = headers
        .iter()
        .enumerate()
        .filter(|(_, h)| *h == want)
        .map(|(i, _)| i)
        .collect();
    match named.as_slice() {
        [i] => return Ok(*i),
        [] => {}
        several => {
            let cols: Vec<String> = several.iter().map(|i| i.to_string()).collect();
            return Err(b.options_error(format!(
                "column name \"{want}\" is ambiguous: the header has it {} times (columns {}, \
                 counting from 0); choose the column by its number",
                several.len(),
                cols.join(", ")
            )));
        }
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
    // TSV has no quoting (IANA text/tab-separated-values): quotes are characters.
    let quoting = delimiter != b'\t';
    let mut rdr = ::csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .has_headers(true)
        .flexible(true)
        .quoting(quoting)
        .double_quote(true)
        .escape(None)
        .comment(None)
        .from_reader(QuoteScan::new(reader, delimiter, quoting));
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
    // A lone CR the scan met before a header or record makes its line, and any error's,
    // wrong: it is refused first.
    let lone_cr = |scan: &QuoteScan<R>| match scan.lone_cr {
        Some((line, byte)) => Err(super::lone_cr_error(b.name, line, byte)),
        None => Ok(()),
    };
    let headers = rdr.headers().cloned();
    lone_cr(rdr.get_ref())?;
    let headers = headers.map_err(|e| csv_error(b, None, e))?;
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
    let mut seen: Vec<&str> = Vec::new();
    for h in headers.iter() {
        if seen.contains(&h) {
            continue;
        }
        seen.push(h);
        let columns: Vec<usize> = headers
            .iter()
            .enumerate()
            .filter(|(_, g)| *g == h)
            .map(|(i, _)| i)
            .collect();
        if columns.len() > 1 {
            b.warnings.push(IngestWarning::DuplicateColumn {
                source_name: b.name.to_string(),
                name: h.to_string(),
                columns,
            });
        }
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
    let mut records = 1usize;
    // Rows longer than the header: how many, and the first one's line and length.
    let mut extra = 0usize;
    let mut first_extra: Option<(u64, usize)> = None;
    loop {
        let got = rdr.read_record(&mut rec);
        lone_cr(rdr.get_ref())?;
        match got {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(csv_error(b, Some(&headers), e)),
        }
        records += 1;
        let line = rec.position().map_or(0, |p| p.line());
        if rec.len() > headers.len() {
            extra += 1;
            first_extra.get_or_insert((line, rec.len()));
        }
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
    let scan = rdr.get_ref();
    let source_name = b.name.to_string();
    if let Some(line) = scan.unterminated() {
        return Err(b.record_error(
            line,
            format!(
                "a quoted field opens on this line and is never closed: the input ends inside \
                 it ({} lines later); a field that starts with a quote must end with one (a \
                 quote inside it is doubled)",
                scan.lines().saturating_sub(line)
            ),
        ));
    }
    if let Some((line, lines)) = scan.first_multi_line {
        b.warnings.push(IngestWarning::MultiLineFields {
            source_name: source_name.clone(),
            line,
            lines,
            fields: scan.multi_line,
            records,
            file_lines: scan.lines(),
        });
    }
    if let Some(line) = scan.first_stray.filter(|_| quoting) {
        b.warnings.push(IngestWarning::StrayQuote {
            source_name: source_name.clone(),
            line,
            count: scan.stray,
        });
    }
    if let Some((line, fields)) = first_extra {
        b.warnings.push(IngestWarning::ExtraFields {
            source_name,
            line,
            fields,
            header: headers.len(),
            count: extra,
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Runs `QuoteScan` over `bytes` as the csv crate reads them.
    fn scan(bytes: &[u8], quoting: bool) -> QuoteScan<&[u8]> {
        let mut s = QuoteScan::new(bytes, b',', quoting);
        let mut sink = Vec::new();
        s.read_to_end(&mut sink).unwrap();
        assert_eq!(sink, bytes);
        s
    }

    proptest! {
        /// Records written by the csv crate's writer (RFC 4180 quoting, an outside reference
        /// for what well-formed CSV is) never look unclosed or stray, and the fields that
        /// hold a line feed are counted exactly.
        #[test]
        fn records_the_csv_writer_quotes_are_well_formed(
            rows in prop::collection::vec(
                prop::collection::vec("[a\",\n\r ]{0,6}", 1..4), 1..8)
        ) {
            let mut w = ::csv::WriterBuilder::new().flexible(true).from_writer(Vec::new());
            for r in &rows {
                w.write_record(r).unwrap();
            }
            let bytes = w.into_inner().unwrap();
            let s = scan(&bytes, true);
            prop_assert_eq!(s.unterminated(), None);
            prop_assert_eq!(s.stray, 0);
            let with_lf = rows.iter().flatten().filter(|f| f.contains('\n')).count();
            prop_assert_eq!(s.multi_line, with_lf);
            prop_assert_eq!(s.lines(), bytes.iter().filter(|&&c| c == b'\n').count() as u64);
        }

        /// A quote opened at the start of a field and never closed is found on its line.
        #[test]
        fn an_unclosed_quote_is_found_on_its_line(
            before in prop::collection::vec("[a-z ]{0,5}", 0..6),
            after in prop::collection::vec("[a-z ,]{0,5}", 0..6),
        ) {
            let mut text: String = before.iter().map(|b| format!("{b}\n")).collect();
            let line = before.len() as u64 + 1;
            text.push_str("\"open");
            for a in &after {
                text.push('\n');
                text.push_str(a);
            }
            prop_assert_eq!(scan(text.as_bytes(), true).unterminated(), Some(line));
            // TSV has no quoting: nothing is open.
            prop_assert_eq!(scan(text.as_bytes(), false).unterminated(), None);
        }
    }

    #[test]
    fn stray_quotes_and_a_bom_before_a_quoted_header() {
        let s = scan(
            b"\xEF\xBB\xBF\"name\",code\nThe \"Old\" Slip,1\n\"Keth\"x,2\n",
            true,
        );
        assert_eq!((s.stray, s.first_stray), (2, Some(2)));
        assert_eq!(s.unterminated(), None);
        // A quoted field closed by the last byte of the input.
        let s = scan(b"name\n\"a\nb\"", true);
        assert_eq!((s.multi_line, s.first_multi_line), (1, Some((2, 2))));
        assert_eq!(s.lines(), 3);
    }
}
