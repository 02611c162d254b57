//! Any query text against a small fixed index: approximate and brute-force answers agree
//! on what they must (the exact k-th distance is never below the brute force's).
#![no_main]

use std::sync::OnceLock;

use libfuzzer_sys::fuzz_target;
use waymark::index::{build_index, BuildOptions, Index};
use waymark::ingest::{read_corpus_from, IngestOptions};
use waymark::search::{SearchParams, Searcher};

const ITEMS: &str = "Skerry Light\nSalt Store\nNorth Mole\nHarbour Office\nKeth Landing\nOrvane Quay\nTessamir Row\nMirrow Steps\nLower Kaldrith\nÅsvik Pier\n";

fn index() -> &'static Index {
    static INDEX: OnceLock<(tempfile::TempDir, Index)> = OnceLock::new();
    &INDEX
        .get_or_init(|| {
            let dir = tempfile::tempdir().expect("temp dir");
            let path = dir.path().join("fuzz.wmk");
            let corpus = read_corpus_from(ITEMS.as_bytes(), "items", &IngestOptions::default())
                .expect("items");
            let opts = BuildOptions {
                dim: 4,
                ..Default::default()
            };
            build_index(&corpus, "items", &opts, &path, &|_| {}).expect("build");
            let index = Index::open(&path).expect("open");
            (dir, index)
        })
        .1
}

fuzz_target!(|data: &[u8]| {
    let Ok(q) = std::str::from_utf8(data) else {
        return;
    };
    let index = index();
    let found = Searcher::new(index)
        .search(
            q,
            &SearchParams::from_index(index, 3),
            &mut Default::default(),
        )
        .expect("a valid query is answered");
    let truth = waymark::eval::full_scan(index, q, 3).expect("k = 3 on a Levenshtein index");
    assert_eq!(found.neighbors.len(), truth.len());
    for (f, t) in found.neighbors.iter().zip(&truth) {
        assert!(f.distance >= t.distance);
    }
});
