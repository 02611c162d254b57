//! Text input: one item per line.

use std::io::{BufRead, BufReader, Read};

use super::{Builder, IngestError, BOM};

pub(super) fn read_text<R: Read>(reader: R, b: &mut Builder<'_>) -> Result<(), IngestError> {
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
