//! Structured fuzzing of an index's metadata: valid indexes (several metrics) are built
//! once; the fuzz input picks one and a list of changes to its metadata JSON (numbers set to
//! extremes, strings, wrong types, fields removed), which is written back with every checksum
//! recomputed (a crafted file). The file is opened and asked approximate, exact and range
//! queries. Nothing may panic or crash.
#![no_main]

use std::sync::OnceLock;

use libfuzzer_sys::fuzz_target;
use serde_json::{json, Value};
use waymark::index::{build_index, BuildOptions, Index};
use waymark::ingest::{Corpus, Ids};
use waymark::metric::{MetricSpec, Tokens};
use waymark::search::{CandidateSource, SearchParams, Searcher};

const HEADER: usize = 64;
const ENTRY: usize = 32;
const ENTRIES: usize = 16;
const META: u32 = 1;

fn u64_at(b: &[u8], o: usize) -> u64 {
    u64::from_le_bytes(b[o..o + 8].try_into().unwrap())
}

/// Recomputes the sections' CRC-32s in the table, then the table's and the header's
/// (the container layout in src/index/file.rs), as someone crafting a file would.
fn fix_checksums(bytes: &mut [u8]) {
    let count = u32::from_le_bytes(bytes[12..16].try_into().unwrap()) as usize;
    for e in 0..count.min(ENTRIES) {
        let at = HEADER + e * ENTRY;
        let (off, len) = (
            u64_at(bytes, at + 8) as usize,
            u64_at(bytes, at + 16) as usize,
        );
        if let Some(s) = off.checked_add(len).and_then(|end| bytes.get(off..end)) {
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

/// The table entry of the metadata section.
fn meta_entry(bytes: &[u8]) -> usize {
    (0..ENTRIES)
        .map(|e| HEADER + e * ENTRY)
        .find(|&at| u32::from_le_bytes(bytes[at..at + 4].try_into().unwrap()) == META)
        .expect("a metadata section")
}

/// Valid indexes of a few metrics, built once.
fn seeds() -> &'static Vec<Vec<u8>> {
    static SEEDS: OnceLock<Vec<Vec<u8>>> = OnceLock::new();
    SEEDS.get_or_init(|| {
        let words = [
            "Skerry Light",
            "Salt Store",
            "North Mole",
            "Harbour Office",
            "Keth Landing",
            "Mirrow Steps",
            "Skerry Lamp",
            "Salt Stair",
        ];
        let fixed = ["abcd", "abce", "xbcd", "zzzz", "abzz", "qrst"];
        let corpus = |items: &[&str]| Corpus {
            items: items.iter().map(|s| s.to_string()).collect(),
            keys: None,
            ids: Ids::Int((0..items.len() as i64).collect()),
            blank_skipped: 0,
            records: items.len(),
        };
        let dir = tempfile::tempdir().expect("temp dir");
        let specs = [
            (MetricSpec::Levenshtein, &words[..]),
            (
                MetricSpec::Jaccard {
                    tokens: Tokens::QGrams(2),
                },
                &words[..],
            ),
            (MetricSpec::Hamming { length: 0 }, &fixed[..]),
        ];
        specs
            .into_iter()
            .enumerate()
            .map(|(i, (metric, items))| {
                let path = dir.path().join(format!("{i}.wmk"));
                let opts = BuildOptions {
                    metric,
                    dim: 3,
                    ..BuildOptions::default()
                };
                build_index(&corpus(items), "seed", &opts, &path, &|_| {}).expect("seed build");
                std::fs::read(&path).expect("seed read")
            })
            .collect()
    })
}

const NUMBERS: [f64; 16] = [
    0.0,
    -1.0,
    1.0,
    0.5,
    255.0,
    256.0,
    65536.0,
    4294967295.0,
    4294967296.0,
    1.8446744073709552e19,
    -9.223372036854776e18,
    1e308,
    -1e308,
    5e-324,
    1e-300,
    3.0,
];

const STRINGS: [&str; 16] = [
    "",
    "x",
    "levenshtein",
    "jaccard",
    "vector",
    "external",
    "hamming",
    "graph",
    "custom",
    "l2",
    "angular",
    "int",
    "text",
    "landmarks",
    "fastmap",
    "refsets",
];

/// JSON pointers of every value in `v`.
fn pointers(v: &Value, at: String, out: &mut Vec<String>) {
    match v {
        Value::Object(m) => {
            for (k, x) in m {
                pointers(x, format!("{at}/{k}"), out);
            }
        }
        Value::Array(a) => {
            for (i, x) in a.iter().enumerate().take(8) {
                pointers(x, format!("{at}/{i}"), out);
            }
        }
        _ => {}
    }
    out.push(at);
}

/// Applies the change `op` (3 bytes) to `meta`.
fn change(meta: &mut Value, op: &[u8]) {
    let mut paths = Vec::new();
    pointers(meta, String::new(), &mut paths);
    let path = &paths[op[0] as usize % paths.len()];
    let pick = op[2] as usize;
    let new = match op[1] % 8 {
        0 => {
            let x = NUMBERS[pick % NUMBERS.len()];
            if x.fract() == 0.0 && x.abs() < 9.0e15 {
                json!(x as i64)
            } else if x == 1.8446744073709552e19 {
                json!(u64::MAX)
            } else if x == -9.223372036854776e18 {
                json!(i64::MIN)
            } else {
                json!(x)
            }
        }
        1 => json!(STRINGS[pick % STRINGS.len()]),
        2 => Value::Null,
        3 => json!(pick % 2 == 1),
        4 => {
            // Remove the field (or array element).
            if let Some((parent, key)) = path.rsplit_once('/') {
                match meta.pointer_mut(parent) {
                    Some(Value::Object(m)) => {
                        m.remove(key);
                    }
                    Some(Value::Array(a)) => {
                        if let Ok(i) = key.parse::<usize>() {
                            if i < a.len() {
                                a.remove(i);
                            }
                        }
                    }
                    _ => {}
                }
            }
            return;
        }
        5 => {
            if pick % 2 == 0 {
                json!([])
            } else {
                json!({})
            }
        }
        6 => {
            let old = meta.pointer(path).cloned().unwrap_or(Value::Null);
            json!([old])
        }
        _ => json!(pick as i64 - 128),
    };
    if let Some(v) = meta.pointer_mut(path) {
        *v = new;
    }
}

/// `seed` with its metadata replaced by `json` (in place, padded with spaces, when it fits;
/// else appended on a 64-byte boundary) and every checksum recomputed.
fn with_meta(seed: &[u8], json: &[u8]) -> Vec<u8> {
    let mut bytes = seed.to_vec();
    let at = meta_entry(&bytes);
    let (off, len) = (
        u64_at(&bytes, at + 8) as usize,
        u64_at(&bytes, at + 16) as usize,
    );
    if json.len() <= len {
        bytes[off..off + len].fill(b' ');
        bytes[off..off + json.len()].copy_from_slice(json);
    } else {
        bytes.resize(bytes.len().div_ceil(64) * 64, 0);
        let start = bytes.len();
        bytes.extend_from_slice(json);
        let file_len = bytes.len() as u64;
        bytes[16..24].copy_from_slice(&file_len.to_le_bytes());
        bytes[at + 8..at + 16].copy_from_slice(&(start as u64).to_le_bytes());
        bytes[at + 16..at + 24].copy_from_slice(&(json.len() as u64).to_le_bytes());
    }
    fix_checksums(&mut bytes);
    bytes
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
        for q in ["abcd", "Skery Light", ""] {
            if let Ok(found) = searcher.search(q, &p, &mut scratch) {
                for n in &found.neighbors {
                    let _ = (index.item(n.index as usize), index.id(n.index as usize));
                }
            }
        }
    }
    for q in ["abcd", "Skery Light", ""] {
        let _ = searcher.search_exact(q, 3, &mut scratch);
        let _ = searcher.search_within(q, 2.0, None, &mut scratch);
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((&which, ops)) = data.split_first() else {
        return;
    };
    let seeds = seeds();
    let seed = &seeds[which as usize % seeds.len()];
    let at = meta_entry(seed);
    let (off, len) = (
        u64_at(seed, at + 8) as usize,
        u64_at(seed, at + 16) as usize,
    );
    let mut meta: Value = serde_json::from_slice(&seed[off..off + len]).expect("seed metadata");
    for op in ops.chunks_exact(3).take(16) {
        change(&mut meta, op);
    }
    let json = serde_json::to_vec(&meta).expect("serialises");
    open_and_query(&with_meta(seed, &json));
});
