//! The library path: build → open → search, checked against brute force and outside data.

use proptest::prelude::*;
use waymark::embed::{choose_landmarks, embed_with, Embedding, LandmarkOptions};
use waymark::eval::{best_scan, full_scan, plain_recall, threshold_recall, typo_queries};
use waymark::index::{build_index, BuildOptions, IdRef, Index};
use waymark::ingest::{
    read_corpus, read_corpus_from, Corpus, IngestOptions, InputFormat, Normalize,
};
use waymark::metric::{Levenshtein, Metric};
use waymark::search::{CandidateSource, Found, SearchParams, Searcher, Space};

use crate::util::{
    build_in, corpus, entry, fix_table_checksums, section, u32_at, word_list_path, ENTRY, HEADER,
};

fn build(c: &Corpus, dim: usize, dir: &tempfile::TempDir) -> Index {
    build_in(
        dir.path(),
        "t.wmk",
        c,
        &BuildOptions {
            dim,
            seed: 11,
            ..BuildOptions::default()
        },
    )
}

#[test]
fn round_trip_keeps_items_ids_and_parameters() {
    let dir = tempfile::tempdir().unwrap();
    let text = "Orvane Quay\nTessamir Row\n\nLower Kaldrith\nOrvane Quay\n";
    let opts = IngestOptions {
        format: Some(InputFormat::Text),
        normalize: Normalize {
            fold_case: true,
            ..Normalize::default()
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
        let embedding = Embedding::Landmarks { landmarks: lm.iter().map(|&l| l as u64).collect() };
        let coords = embed_with(&Levenshtein, &items, &embedding, &|_| {});
        let d = lm.len();
        for a in 0..items.len() {
            for b in 0..items.len() {
                let lb = Space::Linf.distance(&coords[a * d..a * d + d], &coords[b * d..b * d + d]);
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
            let p = SearchParams { k, candidates: items.len(), space, source, visit: 0, widen: 0 };
            for q in &queries {
                let got = s.search(q, &p, &mut Default::default()).unwrap();
                let want = full_scan(&idx, q, k).unwrap();
                prop_assert_eq!(&got.neighbors, &want);
                prop_assert_eq!(&best_scan(&idx, q, k).unwrap(), &want);
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
/// scripts/test-data.sh). With the default settings, threshold recall@10 on typo queries must stay above
/// a floor; the bench measured about 0.97 at these settings (README).
#[test]
fn recall_on_the_debian_word_list_stays_above_the_floor() {
    let c = read_corpus(word_list_path(), &IngestOptions::default()).unwrap();
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
    let p = SearchParams::embedded(&idx, 10);
    let found = s.search_many(&queries, &p);
    // Blocks of queries share passes over the coordinates: the same answers as one by one.
    let mut scratch = Default::default();
    for (q, f) in queries.iter().zip(&found).step_by(7) {
        let one = s.search(q, &p, &mut scratch).unwrap();
        assert_eq!(f.as_ref().unwrap(), &one, "query {q}");
    }
    let mut recall = 0.0;
    for (q, f) in queries.iter().zip(found) {
        let truth: Vec<f64> = full_scan(&idx, q, 10)
            .unwrap()
            .iter()
            .map(|n| n.distance)
            .collect();
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
        widen: 0,
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
            &SearchParams::embedded(&idx, 10),
            &mut Default::default(),
        )
        .unwrap();
    assert_eq!(f.neighbors.len(), 4);
    let ids: Vec<u32> = f.neighbors.iter().map(|n| n.index).collect();
    assert_eq!(ids, [0, 1, 3, 2]);
}

/// Invented harbour and street names from a fixed list of syllables, seeded: `n` strings of
/// 2 to 5 syllables, some with a second word.
fn place_names(n: usize, seed: u64) -> Vec<String> {
    use rand::{Rng, SeedableRng};
    const SYL: [&str; 16] = [
        "kal", "dri", "th", "or", "va", "ne", "tes", "sa", "mir", "ro", "ke", "lan", "mi", "rrow",
        "qu", "ay",
    ];
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let word = |rng: &mut rand_chacha::ChaCha8Rng| -> String {
        (0..rng.gen_range(2..=5))
            .map(|_| SYL[rng.gen_range(0..SYL.len())])
            .collect()
    };
    (0..n)
        .map(|_| {
            let first = word(&mut rng);
            if rng.gen_bool(0.3) {
                format!("{first} {}", word(&mut rng))
            } else {
                first
            }
        })
        .collect()
}

/// The k nearest items by strsim's Levenshtein (an outside implementation), ordered by
/// (distance, item index) as answers are: (index, distance).
fn strsim_nearest(items: &[String], q: &str, k: usize) -> Vec<(u32, f64)> {
    let mut all: Vec<(usize, u32)> = items
        .iter()
        .enumerate()
        .map(|(i, s)| (strsim::levenshtein(q, s), i as u32))
        .collect();
    all.sort_unstable();
    all.into_iter()
        .take(k)
        .map(|(d, i)| (i, d as f64))
        .collect()
}

fn pairs(f: &Found) -> Vec<(u32, f64)> {
    f.neighbors.iter().map(|n| (n.index, n.distance)).collect()
}

/// Cells visiting every row, with every item a candidate, give the exact answer, as the
/// scan does; with the default parameters, with a partial visit and with a visit smaller
/// than the candidates, answers hold k neighbours at their true distances, in answer order,
/// and every candidate is counted as measured or pruned.
#[test]
fn cells_answer_like_the_scan_and_count_their_work_on_3000_names() {
    let dir = tempfile::tempdir().unwrap();
    let items = place_names(3000, 21);
    let idx = build(&corpus(&items), 16, &dir);
    let n = idx.len();
    assert_eq!(n, 3000);
    assert!(idx.has_cells());
    let cells = idx.cells().unwrap().expect("a built index has cells");
    let largest = (0..cells.len()).map(|c| cells.cell(c).len()).max().unwrap();
    assert!(
        cells.len() > 1 && largest < n / 2,
        "{largest} rows in one cell"
    );
    let refs = idx.meta().embedding.refs().len();
    let s = Searcher::new(&idx);
    // Below CELLS_MIN_ITEMS the default source is the scan; the cells are asked for.
    assert_eq!(
        SearchParams::embedded(&idx, 10).source,
        CandidateSource::Scan
    );
    let defaults = SearchParams {
        source: CandidateSource::Cells,
        ..SearchParams::embedded(&idx, 10)
    };
    let mut queries = typo_queries(&items, 30, 5);
    queries.extend(["", "kalthor", "lanmi quay", "zzzz"].map(String::from));
    let mut scratch = Default::default();
    let k = 10;
    // The candidates stand out of any one cell, so a visit of 10 rows not raised to the
    // candidates would pick fewer of them (the count below would then fall short).
    let some = (largest + 1).max(120);
    for q in &queries {
        let want = strsim_nearest(&items, q, k);
        let all = |source| SearchParams {
            k,
            candidates: n,
            space: Space::L1,
            source,
            visit: 0,
            widen: 0,
        };
        let cells_all = s
            .search(q, &all(CandidateSource::Cells), &mut scratch)
            .unwrap();
        let scan_all = s
            .search(q, &all(CandidateSource::Scan), &mut scratch)
            .unwrap();
        assert_eq!(pairs(&cells_all), want, "{q:?}: cells, every row");
        assert_eq!(cells_all, scan_all, "{q:?}: cells and scan, every row");
        for (what, p) in [
            ("defaults", defaults),
            (
                "a partial visit",
                SearchParams {
                    candidates: some,
                    visit: 4 * some,
                    ..defaults
                },
            ),
            (
                "a visit below the candidates",
                SearchParams {
                    candidates: some,
                    visit: 10,
                    ..defaults
                },
            ),
        ] {
            let f = s.search(q, &p, &mut scratch).unwrap();
            let got = pairs(&f);
            assert_eq!(got.len(), k, "{q:?}, {what}");
            for &(i, d) in &got {
                let truth = strsim::levenshtein(q, &items[i as usize]) as f64;
                assert_eq!(d, truth, "{q:?}, {what}: item {i}");
            }
            assert!(
                got.windows(2).all(|w| (w[0].1, w[0].0) < (w[1].1, w[1].0)),
                "{q:?}, {what}: {got:?}"
            );
            // Never better than the exact answer, position by position.
            for (g, w) in got.iter().zip(&want) {
                assert!(g.1 >= w.1, "{q:?}, {what}: {got:?} beats {want:?}");
            }
            let c = p.candidates.min(n);
            assert_eq!(
                f.distances + f.pruned,
                refs + c,
                "{q:?}, {what}: reference distances plus each candidate measured or pruned"
            );
        }
        // A visit below the candidates is raised to them: the same answer as a visit of
        // exactly the candidates.
        let raised = SearchParams {
            candidates: some,
            visit: 10,
            ..defaults
        };
        let exact_visit = SearchParams {
            candidates: some,
            visit: some,
            ..defaults
        };
        assert_eq!(
            s.search(q, &raised, &mut scratch).unwrap(),
            s.search(q, &exact_visit, &mut scratch).unwrap(),
            "{q:?}"
        );
    }
}

/// A file as an older writer would have made it: the section of `kind` removed from the
/// table (later entries moved up, the count lowered), its bytes zeroed, the table's and the
/// header's checksums recomputed.
fn without_section(bytes: &[u8], kind: u32) -> Vec<u8> {
    let mut b = bytes.to_vec();
    let count = u32_at(&b, 12) as usize;
    let at = entry(&b, kind);
    let bytes_of_kind = section(&b, kind);
    b[bytes_of_kind].fill(0);
    let table_end = HEADER + count * ENTRY;
    b.copy_within(at + ENTRY..table_end, at);
    b[table_end - ENTRY..table_end].fill(0);
    b[12..16].copy_from_slice(&(count as u32 - 1).to_le_bytes());
    fix_table_checksums(&mut b);
    b
}

/// A format version 1 index without a cells section (kind 12), as writers before the cells
/// made them, opens, passes `verify`, defaults to the scan and answers as the full index's
/// scan does; asking it for cells scans. (The file is the version 1 fixture of
/// `tests/it/data`, made by the last writer of that version; in version 2 the cells hold
/// the rows and cannot be left out: `format::a_version_2_file_without_its_rows_or_their_positions_is_refused_at_open`.)
#[test]
fn a_version_1_index_without_cells_falls_back_to_the_scan() {
    let dir = tempfile::tempdir().unwrap();
    let fixture = crate::util::repo_file("tests/it/data/v1-names.wmk");
    let copy = dir.path().join("v1.wmk");
    std::fs::copy(&fixture, &copy).unwrap();
    let full = Index::open(&copy).unwrap();
    assert!(full.has_cells());
    let items: Vec<String> = (0..full.len())
        .map(|i| String::from_utf8(full.item(i).to_vec()).unwrap())
        .collect();
    let stripped = dir.path().join("no-cells.wmk");
    std::fs::write(
        &stripped,
        without_section(&std::fs::read(full.path()).unwrap(), 12),
    )
    .unwrap();
    let idx = Index::open(&stripped).unwrap();
    idx.verify().unwrap();
    assert!(!idx.has_cells());
    assert!(idx.cells().unwrap().is_none());
    let p = SearchParams::embedded(&idx, 5);
    assert_eq!(p.source, CandidateSource::Scan);
    let scan_of_full = SearchParams {
        source: CandidateSource::Scan,
        ..SearchParams::embedded(&full, 5)
    };
    let (a, b) = (Searcher::new(&idx), Searcher::new(&full));
    let mut scratch = Default::default();
    for q in typo_queries(&items, 20, 3) {
        let got = a.search(&q, &p, &mut scratch).unwrap();
        assert_eq!(got.neighbors.len(), 5);
        assert_eq!(
            got,
            b.search(&q, &scan_of_full, &mut scratch).unwrap(),
            "{q}"
        );
        let asked = SearchParams {
            source: CandidateSource::Cells,
            ..p
        };
        assert_eq!(got, a.search(&q, &asked, &mut scratch).unwrap(), "{q}");
    }
}

/// Widening keeps every candidate of a query's first round and measures more only when an
/// answer came from the end of its list: answers are never worse than without it, and only
/// the queries that reach deep pay for more distances. Data: every fifth word of Debian's
/// wamerican (20,867 words), typo queries in its own alphabet; ground truth by the full scan.
#[test]
fn widening_never_loses_an_answer_and_widens_only_queries_that_reach_deep() {
    let words: Vec<String> = crate::util::word_list()
        .lines()
        .step_by(5)
        .map(String::from)
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let idx = build_in(
        dir.path(),
        "w.wmk",
        &corpus(&words),
        &BuildOptions::default(),
    );
    assert_eq!(
        SearchParams::embedded(&idx, 10).widen,
        0,
        "a new index stores no widening unless asked"
    );
    let queries = waymark::eval::edit_queries(&words, 200, 5);
    let s = Searcher::new(&idx);
    let base = SearchParams {
        widen: 0,
        ..SearchParams::embedded(&idx, 10).with_candidates(60)
    };
    let wide = SearchParams { widen: 3, ..base };
    let (mut widened, mut r0, mut r1) = (0, 0.0, 0.0);
    let mut scratch = Default::default();
    for q in &queries {
        let f0 = s.search(q, &base, &mut scratch).unwrap();
        let f1 = s.search(q, &wide, &mut scratch).unwrap();
        assert_eq!(f0.neighbors.len(), f1.neighbors.len(), "{q}");
        for (a, b) in f0.neighbors.iter().zip(&f1.neighbors) {
            assert!(b.distance <= a.distance, "{q}: {b:?} after {a:?}");
        }
        assert!(f1.distances >= f0.distances, "{q}");
        widened += usize::from(f1.distances > f0.distances);
        let truth: Vec<f64> = full_scan(&idx, q, 10)
            .unwrap()
            .iter()
            .map(|n| n.distance)
            .collect();
        let pairs = |f: &Found| -> Vec<(u32, f64)> {
            f.neighbors.iter().map(|n| (n.index, n.distance)).collect()
        };
        r0 += threshold_recall(&truth, &pairs(&f0), 10);
        r1 += threshold_recall(&truth, &pairs(&f1), 10);
    }
    assert!(
        widened > 0 && widened < queries.len(),
        "{widened} of {} queries widened",
        queries.len()
    );
    assert!(r1 > r0, "recall {r1} widened against {r0}");
    // Many queries at once (blocks sharing the scan) widen as one by one.
    let many = s.search_many(&queries, &wide);
    for (q, f) in queries.iter().zip(many).step_by(9) {
        assert_eq!(f.unwrap(), s.search(q, &wide, &mut scratch).unwrap(), "{q}");
    }
}
