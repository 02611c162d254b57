//! Any bytes as an index file, as given and with every checksum recomputed (a crafted
//! file): open, verify, query through every candidate source, and ask exact and range
//! queries. Nothing may panic or crash.
#![no_main]

use libfuzzer_sys::fuzz_target;
use waymark::index::Index;
use waymark::search::{CandidateSource, SearchParams, Searcher};

const HEADER: usize = 64;
const ENTRY: usize = 32;
const ENTRIES: usize = 16;

/// Recomputes the sections' CRC-32s in the table, then the table's and the header's
/// (the container layout in src/index/file.rs), as someone crafting a file would.
fn fix_checksums(bytes: &mut [u8]) {
    if bytes.len() < HEADER + ENTRIES * ENTRY {
        return;
    }
    let u64_at = |b: &[u8], o: usize| u64::from_le_bytes(b[o..o + 8].try_into().unwrap());
    let count = u32::from_le_bytes(bytes[12..16].try_into().unwrap()) as usize;
    for e in 0..count.min(ENTRIES) {
        let at = HEADER + e * ENTRY;
        let (off, len) = (u64_at(bytes, at + 8), u64_at(bytes, at + 16));
        let range = usize::try_from(off)
            .ok()
            .zip(usize::try_from(len).ok())
            .and_then(|(o, l)| Some(o..o.checked_add(l)?));
        if let Some(s) = range.and_then(|r| bytes.get(r)) {
            let crc = crc32fast::hash(s);
            bytes[at + 24..at + 28].copy_from_slice(&crc.to_le_bytes());
        }
    }
    let table = crc32fast::hash(&bytes[HEADER..HEADER + ENTRIES * ENTRY]);
    bytes[24..28].copy_from_slice(&table.to_le_bytes());
    bytes[28..32].copy_from_slice(&[0; 4]);
    let header = crc32fast::hash(&bytes[..HEADER]);
    bytes[28..32].copy_from_slice(&header.to_le_bytes());
}

fn open_and_query(data: &[u8]) {
    let dir = std::env::var_os("WAYMARK_FUZZ_TMP").unwrap_or_else(|| "/dev/shm".into());
    let Ok(file) = tempfile::NamedTempFile::new_in(dir) else {
        return;
    };
    if std::fs::write(file.path(), data).is_err() {
        return;
    }
    let Ok(index) = Index::open(file.path()) else {
        return;
    };
    // `verify` may refuse the file; the queries run anyway, the kd-tree path included: a
    // tree that fails its first-use checks is refused with an error, and one that passes
    // them must be safe to query.
    let _ = index.verify();
    let searcher = Searcher::new(&index);
    let mut scratch = Default::default();
    for source in [
        CandidateSource::Scan,
        CandidateSource::Cells,
        CandidateSource::Tree,
    ] {
        let mut p = SearchParams::from_index(&index, 3);
        p.source = source;
        p.candidates = p.candidates.clamp(1, 64);
        for q in ["harbour", ""] {
            if let Ok(found) = searcher.search(q, &p, &mut scratch) {
                for n in &found.neighbors {
                    let _ = (index.item(n.index as usize), index.id(n.index as usize));
                }
            }
        }
    }
    // Exact and range answers go through the column blocks and the key filters.
    for q in ["harbour", ""] {
        let _ = searcher.search_exact(q, 3, &mut scratch);
        let _ = searcher.search_within(q, 1.0, None, &mut scratch);
    }
}

fuzz_target!(|data: &[u8]| {
    open_and_query(data);
    let mut crafted = data.to_vec();
    fix_checksums(&mut crafted);
    if crafted != data {
        open_and_query(&crafted);
    }
});
