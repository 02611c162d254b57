//! Text input: one item per line.

use std::io::Read;

use super::{for_each_line, Builder, IngestError, IngestWarning};

pub(super) fn read_text<R: Read>(reader: R, b: &mut Builder<'_>) -> Result<(), IngestError> {
    let name = b.name;
    // The first non-blank line's line number and first byte, and how many lines start
    // with that byte when it is '>' or '@' (FASTA and FASTQ headers).
    let mut first: Option<(u64, u8)> = None;
    let mut marked = 0usize;
    for_each_line(reader, name, |line, bytes, bom| {
        if let Some(&c) = bytes.iter().find(|c| !c.is_ascii_whitespace()) {
            let (_, mark) = *first.get_or_insert((line, c));
            if (mark == b'>' || mark == b'@') && bytes.first() == Some(&mark) {
                marked += 1;
            }
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
        b.push(item, None, line)
    })?;
    if let Some((line, mark @ (b'>' | b'@'))) = first.filter(|_| marked > 0) {
        b.warnings.push(IngestWarning::LooksLikeSequences {
            source_name: name.to_string(),
            line,
            mark: mark as char,
            count: marked,
            format: if mark == b'>' { "fasta" } else { "fastq" },
        });
    }
    Ok(())
}
