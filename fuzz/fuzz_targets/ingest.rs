//! Any bytes as input items, in each input format: an error or a corpus, never a panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use waymark::ingest::{read_corpus_from_with_warnings, IngestOptions, InputFormat, SequenceFormat};

fuzz_target!(|data: &[u8]| {
    let Some((&sel, body)) = data.split_first() else {
        return;
    };
    let format = match sel % 6 {
        0 => InputFormat::Text,
        1 => InputFormat::Csv { delimiter: b',' },
        2 => InputFormat::Csv { delimiter: b'\t' },
        3 => InputFormat::Sequences(SequenceFormat::Fasta),
        4 => InputFormat::Sequences(SequenceFormat::Fastq),
        _ => InputFormat::JsonLines,
    };
    let field = match (sel / 6) % 3 {
        0 => None,
        1 => Some("name".to_string()),
        _ => Some("2".to_string()),
    };
    let id_field = match (sel / 18) % 3 {
        0 => None,
        1 => Some("code".to_string()),
        _ => Some("1".to_string()),
    };
    let text = matches!(format, InputFormat::Text | InputFormat::Sequences(_));
    let opts = IngestOptions {
        format: Some(format),
        field: if text { None } else { field },
        id_field: if text { None } else { id_field },
        normalize: Default::default(),
    };
    if let Ok((c, _warnings)) = read_corpus_from_with_warnings(body, "fuzz", &opts) {
        assert!(!c.items.is_empty() || c.records == c.blank_skipped);
    }
});
