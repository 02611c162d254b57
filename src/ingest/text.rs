//! Text input: one item per line.

use std::io::Read;

use super::{for_each_line, Builder, IngestError};

pub(super) fn read_text<R: Read>(reader: R, b: &mut Builder<'_>) -> Result<(), IngestError> {
    let name = b.name;
    for_each_line(reader, name, |line, bytes, bom| {
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
        b.push(item, None, line)
    })
}
