//! The library path: build → open → search, checked against brute force and outside data.

use proptest::prelude::*;
use waymark::embed::{choose_landmarks, embed_all, linf, LandmarkOptions};
use waymark::eval::{best_scan, full_scan, plain_recall, threshold_recall, typo_queries};
use waymark::index::{build_index, BuildOptions, IdRef, Index};
use waymark::ingest::{
    read_corpus, read_corpus_from, Corpus, Ids, IngestOptions, InputFormat, Normalize,
};
use waymark::metric::{Levenshtein, Metric};
use waymark::search::{CandidateSource, SearchParams, Searcher, Space};

fn corpus(items: &[String]) -> Corpus {
    Corpus {
        items: items.to_vec(),
        keys: None,
        ids: Ids::Int((0..items.len() as i64).collect()),
        blank_skipped: 0,
        records: items.len(),
    }
}

fn build(c: &Corpus, dim: usize, dir: &tempfile::TempDir) -> Index {
    let path = dir.path().join("t.wmk");
    build_index(
        c,
        "test",
        &BuildOptions {
            dim,
            seed: 11,
            ..BuildOptions::default()
        },
        &path,
        &|_| {},
    )
    .expect("build");
    Index::open(&path).expect("open")
}

#[test]
fn round_trip_keeps_items_ids_and_parameters() {
    let dir = tempfile::tempdir().unwrap();
    let text = "Orvane Quay\nTessamir Row\n\nLower Kaldrith\nOrvane Quay\n";
    let opts = IngestOptions {
        format: Some(InputFormat::Text),
        normalize: Normalize {
            fold_case: true,
            trim: false,
        },
        ..Default::default()
    };
    let c = read_corpus_from(text.as_bytes(), "names.txt", &opts).unwrap();
    let path = dir.path().join("r.wmk");
    build_index(
        &c,
        "names.txt",
        &BuildOptions {
            dim: 3,
            seed: 4,
            normalize: opts.normalize,
            ..BuildOptions::default()
        },
        &path,
        &|_| {},
    )
    .unwrap();
    let idx = Index::open(&path).unwrap();
    assert_eq!(idx.len(), 4);
    let m = idx.meta();
    assert_eq!((m.seed, m.blank_skipped, m.records), (4, 1, 5));
    assert!(m.normalize.fold_case);
    let items: Vec<&[u8]> = (0..4).map(|i| idx.item(i)).collect();
    assert_eq!(
        items,
        [
            &b"Orvane Quay"[..],
            b"Tessamir Row",
            b"Lower Kaldrith",
            b"Orvane Quay"
        ]
    );
    assert_eq!(idx.key(2), b"lower kaldrith");
    // Duplicates keep their own ids; ids are record numbers, the blank record counted.
    let ids: Vec<IdRef> = (0..4).map(|i| idx.id(i)).collect();
    assert_eq!(
        ids,
        [IdRef::Int(0), IdRef::Int(1), IdRef::Int(3), IdRef::Int(4)]
    );
    idx.verify().unwrap();
    assert_eq!(idx.tree().unwrap().size(), 4);
}

fn word() -> impl Strategy<Value = String> {
    proptest::string::string_regex("[a-dé]{0,12}").unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// Landmark coordinates are contractive in L∞: |d(a,l) − d(b,l)| ≤ d(a,b) by the
    /// triangle inequality (common practice; the LAESA pivot bound).
    #[test]
    fn linf_of_landmark_coordinates_never_exceeds_the_distance(
        items in proptest::collection::vec(word(), 2..40),
        dim in 1usize..8,
    ) {
        let lm = choose_landmarks(&Levenshtein, &items, &LandmarkOptions { dim, sample: 100, seed: 1 });
        let coords = embed_all(&Levenshtein, &items, &lm, &|_| {});
        let d = lm.len();
        for a in 0..items.len() {
            for b in 0..items.len() {
                let lb = linf(&coords[a * d..a * d + d], &coords[b * d..b * d + d]);
                let true_d = Levenshtein.distance(items[a].as_bytes(), items[b].as_bytes());
                prop_assert!(lb <= true_d, "{} vs {}: bound {} > {}", items[a], items[b], lb, true_d);
            }
        }
    }

    /// With as many candidates as items, re-ranking returns exactly the brute-force answer,
    /// and both brute forces agree.
    #[test]
    fn reranking_all_items_is_exact(
        items in proptest::collection::vec(word(), 1..60),
        queries in proptest::collection::vec(word(), 1..5),
        k in 1usize..8,
        space in prop_oneof![Just(Space::L1), Just(Space::L2), Just(Space::Linf)],
    ) {
        let dir = tempfile::tempdir().unwrap();
        let idx = build(&corpus(&items), 4, &dir);
        let s = Searcher::new(&idx);
        for source in [CandidateSource::Cells, CandidateSource::Scan, CandidateSource::Tree] {
            let p = SearchParams { k, candidates: items.len(), space, source, visit: 0 };
            for q in &queries {
                let got = s.search(q, &p, &mut Default::default()).unwrap();
                let want = full_scan(&idx, q, k);
                prop_assert_eq!(&got.neighbors, &want);
                prop_assert_eq!(&best_scan(&idx, q, k), &want);
            }
        }
    }
}

#[test]
fn threshold_recall_counts_ties_and_duplicates_once() {
    // Hand-worked: true distances [1, 2, 2]; the answer holds a tie at distance 2 with
    // another id (correct), and the same id twice (counted once).
    assert_eq!(
        threshold_recall(&[1.0, 2.0, 2.0], &[(5, 1.0), (8, 2.0), (9, 2.0)], 3),
        1.0
    );
    assert_eq!(
        threshold_recall(&[1.0, 2.0, 2.0], &[(5, 1.0), (5, 1.0), (9, 3.0)], 3),
        1.0 / 3.0
    );
    assert_eq!(plain_recall(&[1, 2, 3], &[3, 4, 1]), 2.0 / 3.0);
}

/// Open data: Debian's `wamerican` word list (/usr/share/dict/american-english, installed by
/// .ci/run). With the default settings, threshold recall@10 on typo queries must stay above
/// a floor; the bench measured about 0.97 at these settings (README).
#[test]
fn recall_on_the_debian_word_list_stays_above_the_floor() {
    let path = std::path::Path::new("/usr/share/dict/american-english");
    if !path.exists() {
        panic!("install Debian's wamerican (apt-get install -y wamerican) to run this test");
    }
    let c = read_corpus(path, &IngestOptions::default()).unwrap();
    assert!(
        c.items.len() > 100_000,
        "the wamerican list has 104,334 words"
    );
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("words.wmk");
    build_index(&c, "words", &BuildOptions::default(), &path, &|_| {}).unwrap();
    let idx = Index::open(&path).unwrap();
    let queries = typo_queries(&c.items, 300, 77);
    let s = Searcher::new(&idx);
    let p = SearchParams::from_index(&idx, 10);
    let found = s.search_many(&queries, &p);
    // Blocks of queries share passes over the coordinates: the same answers as one by one.
    let mut scratch = Default::default();
    for (q, f) in queries.iter().zip(&found).step_by(7) {
        let one = s.search(q, &p, &mut scratch).unwrap();
        assert_eq!(f.as_ref().unwrap(), &one, "query {q}");
    }
    let mut recall = 0.0;
    for (q, f) in queries.iter().zip(found) {
        let truth: Vec<f64> = full_scan(&idx, q, 10).iter().map(|n| n.distance).collect();
        let got: Vec<(u32, f64)> = f
            .unwrap()
            .neighbors
            .iter()
            .map(|n| (n.index, n.distance))
            .collect();
        recall += threshold_recall(&truth, &got, 10);
    }
    recall /= queries.len() as f64;
    assert!(recall >= 0.93, "threshold recall@10 = {recall}");
}

#[test]
fn a_damaged_tree_is_refused_on_first_use() {
    let dir = tempfile::tempdir().unwrap();
    let items: Vec<String> = (0..200).map(|i| format!("item{i}")).collect();
    let idx = build(&corpus(&items), 4, &dir);
    let path = idx.path().to_path_buf();
    drop(idx);
    let mut bytes = std::fs::read(&path).unwrap();
    let n = bytes.len();
    bytes[n - 10] ^= 0xff; // the kd-tree is the last section
    std::fs::write(&path, &bytes).unwrap();
    let idx = Index::open(&path).unwrap();
    let s = Searcher::new(&idx);
    let p = SearchParams {
        k: 3,
        candidates: 10,
        space: Space::L2,
        source: CandidateSource::Tree,
        visit: 0,
    };
    let err = s.search("item7", &p, &mut Default::default()).unwrap_err();
    assert!(
        err.to_string()
            .contains("checksum mismatch in section kd-tree"),
        "{err}"
    );
    // The default source does not need the tree.
    let p = SearchParams {
        source: CandidateSource::Scan,
        ..p
    };
    assert_eq!(
        s.search("item7", &p, &mut Default::default())
            .unwrap()
            .neighbors[0]
            .distance,
        0.0
    );
}

#[test]
fn fewer_distinct_items_than_landmarks_gives_a_smaller_embedding() {
    let dir = tempfile::tempdir().unwrap();
    let items: Vec<String> = ["a", "a", "b", "a"].iter().map(|s| s.to_string()).collect();
    let idx = build(&corpus(&items), 8, &dir);
    assert_eq!(idx.meta().dim, 2);
    let s = Searcher::new(&idx);
    let f = s
        .search(
            "a",
            &SearchParams::from_index(&idx, 10),
            &mut Default::default(),
        )
        .unwrap();
    assert_eq!(f.neighbors.len(), 4);
    let ids: Vec<u32> = f.neighbors.iter().map(|n| n.index).collect();
    assert_eq!(ids, [0, 1, 3, 2]);
}

/// The coarse stage (first landmarks, then all of them) still returns true distances, in
/// answer order, and with a factor too large to apply it gives the plain scan's answer.
#[test]
fn the_coarse_stage_returns_true_distances_in_order() {
    let dir = tempfile::tempdir().unwrap();
    let items: Vec<String> = (0..2000)
        .map(|i| format!("buoy {}", (i * 7919) % 10007))
        .collect();
    let idx = build(&corpus(&items), 16, &dir);
    let p = SearchParams {
        k: 5,
        candidates: 20,
        ..SearchParams::from_index(&idx, 5)
    };
    let plain = Searcher::new(&idx);
    let mut coarse = Searcher::new(&idx);
    coarse.set_coarse_factor(4);
    for q in ["buoy 12", "bouy 7001", "buoy 99999"] {
        let f = coarse.search(q, &p, &mut Default::default()).unwrap();
        assert_eq!(f.neighbors.len(), 5);
        for (a, b) in f.neighbors.iter().zip(f.neighbors.iter().skip(1)) {
            assert!(a.distance <= b.distance);
        }
        for n in &f.neighbors {
            let d = strsim::levenshtein(q, &items[n.index as usize]) as f64;
            assert_eq!(n.distance, d, "{q}");
        }
    }
    coarse.set_coarse_factor(1000);
    let a = coarse
        .search("buoy 12", &p, &mut Default::default())
        .unwrap();
    let b = plain
        .search("buoy 12", &p, &mut Default::default())
        .unwrap();
    assert_eq!(a, b);
}
