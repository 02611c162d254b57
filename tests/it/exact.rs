//! Exact k-NN and range queries: the same answers as brute force, with a certificate.

use proptest::prelude::*;
use waymark::eval::full_scan;
use waymark::index::{BuildOptions, IdRef, Index};
use waymark::ingest::{read_corpus, Corpus, IngestOptions};
use waymark::search::{Found, Neighbor, Searcher};

use crate::util::{build_in, corpus, corpus_with_ids, word_list_path, Dir};

fn build(c: &Corpus, dim: usize, dir: &tempfile::TempDir) -> Index {
    build_in(
        dir.path(),
        "t.wmk",
        c,
        &BuildOptions {
            dim,
            seed: 5,
            ..BuildOptions::default()
        },
    )
}

/// Every item within `r` of `q`, by strsim's Levenshtein (a reference crate; counts chars),
/// ordered by distance, then id, then item index: the documented order of answers.
fn within_by_strsim(idx: &Index, q: &str, r: usize) -> Vec<Neighbor> {
    let mut v: Vec<(usize, IdRef<'_>, u32)> = (0..idx.len())
        .filter_map(|i| {
            let item = std::str::from_utf8(idx.key(i)).expect("utf-8");
            let d = strsim::levenshtein(q, item);
            (d <= r).then_some((d, idx.id(i), i as u32))
        })
        .collect();
    v.sort();
    v.into_iter()
        .map(|(d, _, i)| Neighbor {
            index: i,
            distance: d as f64,
        })
        .collect()
}

/// The certificate is consistent with the answer: every item is examined or pruned, no
/// item is measured without being examined, and the unexamined items' bound is at least
/// the k-th distance (k-NN) or above the radius.
fn check_certificate(idx: &Index, f: &Found, k: Option<usize>, r: Option<f64>) {
    let c = f.certificate.expect("exact answers carry a certificate");
    assert_eq!(c.examined + f.pruned, idx.len());
    assert!(c.computed <= c.examined);
    if let Some(b) = c.bound {
        if let Some(r) = r {
            if f.neighbors.len() < k.unwrap_or(usize::MAX) {
                assert!(b > r, "bound {b} with radius {r}");
            }
        }
        if let (Some(k), Some(last)) = (k, f.neighbors.last()) {
            if f.neighbors.len() == k {
                assert!(
                    b >= last.distance,
                    "bound {b} below the k-th {}",
                    last.distance
                );
            }
        }
    }
}

fn word() -> impl Strategy<Value = String> {
    // A small alphabet: many equal distances, so ties at the k-th distance are common.
    proptest::string::string_regex("[abé]{0,7}").unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]

    /// Exact k-NN equals the brute force (distances and which items win ties), for integer
    /// ids and for text ids in an order unrelated to the items'.
    #[test]
    fn exact_knn_equals_brute_force(
        items in proptest::collection::vec(word(), 1..80),
        queries in proptest::collection::vec(word(), 1..4),
        k in 1usize..12,
        dim in 1usize..9,
        text_ids in any::<bool>(),
    ) {
        let dir = tempfile::tempdir().unwrap();
        let ids = text_ids.then(|| {
            (0..items.len()).map(|i| format!("{:03}", (i * 37) % 101)).collect()
        });
        let c = match ids {
            Some(ids) => corpus_with_ids(&items, ids),
            None => corpus(&items),
        };
        let idx = build(&c, dim, &dir);
        let s = Searcher::new(&idx);
        for q in &queries {
            let got = s.search_exact(q, k, &mut Default::default()).unwrap();
            prop_assert_eq!(&got.neighbors, &full_scan(&idx, q, k).unwrap());
            check_certificate(&idx, &got, Some(k), None);
        }
    }

    /// A range query returns every item within R, as strsim's Levenshtein finds them, and
    /// with -k the first k of those.
    #[test]
    fn range_equals_brute_force(
        items in proptest::collection::vec(word(), 1..80),
        queries in proptest::collection::vec(word(), 1..4),
        r in 0usize..5,
        k in 1usize..6,
        dim in 1usize..9,
    ) {
        let dir = tempfile::tempdir().unwrap();
        let idx = build(&corpus(&items), dim, &dir);
        let s = Searcher::new(&idx);
        for q in &queries {
            let want = within_by_strsim(&idx, q, r);
            let got = s.search_within(q, r as f64, None, &mut Default::default()).unwrap();
            prop_assert_eq!(&got.neighbors, &want);
            check_certificate(&idx, &got, None, Some(r as f64));
            // A fractional radius reaches the same whole distances.
            let frac = s.search_within(q, r as f64 + 0.5, None, &mut Default::default()).unwrap();
            prop_assert_eq!(&frac.neighbors, &want);
            let top = s.search_within(q, r as f64, Some(k), &mut Default::default()).unwrap();
            prop_assert_eq!(&top.neighbors[..], &want[..want.len().min(k)]);
            check_certificate(&idx, &top, Some(k), Some(r as f64));
        }
    }
}

/// Open data: a sample of Debian's `wamerican` list (/usr/share/dict/american-english, every
/// 13th word) with typo queries; exact k = 10 must equal the full scan and R = 2 must equal
/// strsim's brute force.
#[test]
fn exact_and_range_on_a_word_list_sample() {
    let all = read_corpus(word_list_path(), &IngestOptions::default()).unwrap();
    let items: Vec<String> = all.items.iter().step_by(13).cloned().collect();
    let dir = tempfile::tempdir().unwrap();
    let idx = build(&corpus(&items), 32, &dir);
    let s = Searcher::new(&idx);
    let queries = waymark::eval::typo_queries(&items, 40, 3);
    let mut scratch = Default::default();
    for q in &queries {
        let got = s.search_exact(q, 10, &mut scratch).unwrap();
        assert_eq!(got.neighbors, full_scan(&idx, q, 10).unwrap(), "query {q}");
        check_certificate(&idx, &got, Some(10), None);
        let within = s.search_within(q, 2.0, None, &mut scratch).unwrap();
        assert_eq!(within.neighbors, within_by_strsim(&idx, q, 2), "query {q}");
    }
    // Many queries at once (blocks sharing passes over the coordinates): same answers.
    let many = s.answer_many(&queries, &waymark::search::Request::Exact { k: 10 });
    for (q, got) in queries.iter().zip(many) {
        assert_eq!(
            got.unwrap().neighbors,
            full_scan(&idx, q, 10).unwrap(),
            "query {q}"
        );
    }
    let req = waymark::search::Request::Within {
        radius: 2.0,
        k: None,
    };
    for (q, got) in queries.iter().zip(s.answer_many(&queries, &req)) {
        let got = got.unwrap();
        assert_eq!(got.neighbors, within_by_strsim(&idx, q, 2), "query {q}");
        check_certificate(&idx, &got, None, Some(2.0));
    }
}

/// A batch of 256 exact queries (answered by the char-count bound, items read by length):
/// the answers (ties included) must equal strsim's brute force
/// (a reference crate) and the one-query exact path, on every 13th word of Debian's
/// `wamerican` list; the empty query and one over 64 chars take the exact path.
#[test]
fn a_large_exact_batch_answers_as_the_brute_force() {
    let all = read_corpus(word_list_path(), &IngestOptions::default()).unwrap();
    let items: Vec<String> = all.items.iter().step_by(13).cloned().collect();
    let dir = tempfile::tempdir().unwrap();
    let idx = build(&corpus(&items), 32, &dir);
    let s = Searcher::new(&idx);
    let mut queries = waymark::eval::typo_queries(&items, 256, 9);
    queries.push(String::new());
    queries.push("pneumonoultramicroscopicsilicovolcanoconiosis-and-more-than-sixty-four".into());
    queries.push("café naïve".into());
    let k = 7;
    let many = s.answer_many(&queries, &waymark::search::Request::Exact { k });
    let mut scratch = Default::default();
    for (q, got) in queries.iter().zip(many) {
        let got = got.unwrap();
        let mut want = within_by_strsim(&idx, q, usize::MAX);
        want.truncate(k);
        assert_eq!(got.neighbors, want, "query {q:?}");
        assert_eq!(
            got.neighbors,
            s.search_exact(q, k, &mut scratch).unwrap().neighbors,
            "query {q:?}"
        );
        check_certificate(&idx, &got, Some(k), None);
    }
}

/// A large exact batch reads the items by length, nearest lengths first, and leaves out the
/// lengths no answer can come from, and the items whose char counts rule them out: the answers must still equal strsim's brute force (a
/// reference crate), ties included, with items and queries of two-byte and three-byte chars
/// whose byte lengths differ from their lengths in chars; and the batch must measure fewer
/// items than a full scan.
#[test]
fn a_large_exact_batch_skips_far_lengths_and_answers_as_the_brute_force() {
    let all = read_corpus(word_list_path(), &IngestOptions::default()).unwrap();
    // Every 11th word of Debian's wamerican list, every third one also with accents and a
    // CJK char (so byte lengths and char lengths differ), and a few very long items.
    let mut items: Vec<String> = Vec::new();
    for (j, w) in all.items.iter().step_by(11).enumerate() {
        items.push(w.clone());
        if j % 3 == 0 {
            items.push(w.replace('e', "é").replace('o', "中"));
        }
    }
    items.push("ab".repeat(150));
    items.push("x".into());
    let dir = tempfile::tempdir().unwrap();
    let idx = build(&corpus(&items), 32, &dir);
    let s = Searcher::new(&idx);
    let mut queries = waymark::eval::typo_queries(&items, 256, 21);
    queries.extend(["中", "a", "abababab", "résumé", "中中中中中中中中中"].map(String::from));
    let k = 5;
    let many = s.answer_many(&queries, &waymark::search::Request::Exact { k });
    let mut computed = 0;
    for (q, got) in queries.iter().zip(many) {
        let got = got.unwrap();
        let mut want = within_by_strsim(&idx, q, usize::MAX);
        want.truncate(k);
        assert_eq!(got.neighbors, want, "query {q:?}");
        check_certificate(&idx, &got, Some(k), None);
        computed += got.certificate.unwrap().computed;
    }
    // The char counts rule out most items: on average at most a sixteenth is measured.
    assert!(
        computed * 16 < queries.len() * idx.len(),
        "{computed} items measured for {} queries of {} items",
        queries.len(),
        idx.len()
    );
}

/// Over four letters the char counts rule out few items, so after its trial the char-count
/// path hands a batch on (exact k-NN to the many-query lanes, range queries to the column
/// blocks): every answer must still equal strsim's brute force (a reference crate), ties
/// included, for 3,000 invented barcodes of 12 letters and 300 of them with edits.
#[test]
fn over_four_letters_exact_batches_answer_as_the_brute_force() {
    let mut x = 0x9E37_79B9_7F4A_7C15u64;
    let mut next = move || {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        x
    };
    let letters = [b'A', b'C', b'G', b'T'];
    let items: Vec<String> = (0..3000)
        .map(|_| {
            (0..12)
                .map(|_| letters[(next() % 4) as usize] as char)
                .collect()
        })
        .collect();
    let queries: Vec<String> = (0..300)
        .map(|i| {
            let mut q: Vec<u8> = items[(i * 7) % items.len()].clone().into_bytes();
            let at = (next() % 12) as usize;
            match i % 3 {
                0 => q[at] = letters[(next() % 4) as usize],
                1 => q.insert(at, letters[(next() % 4) as usize]),
                _ => {
                    q.remove(at);
                }
            }
            String::from_utf8(q).unwrap()
        })
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let idx = build(&corpus(&items), 16, &dir);
    let s = Searcher::new(&idx);
    let k = 10;
    for (q, got) in queries
        .iter()
        .zip(s.answer_many(&queries, &waymark::search::Request::Exact { k }))
    {
        let got = got.unwrap();
        let mut want = within_by_strsim(&idx, q, usize::MAX);
        want.truncate(k);
        assert_eq!(got.neighbors, want, "query {q:?}");
        check_certificate(&idx, &got, Some(k), None);
    }
    let req = waymark::search::Request::Within {
        radius: 2.0,
        k: None,
    };
    for (q, got) in queries.iter().zip(s.answer_many(&queries, &req)) {
        let got = got.unwrap();
        assert_eq!(got.neighbors, within_by_strsim(&idx, q, 2), "query {q:?}");
        check_certificate(&idx, &got, None, Some(2.0));
    }
}

#[test]
fn without_a_lower_bound_exact_queries_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let items: Vec<String> = (0..50).map(|i| format!("buoy {i}")).collect();
    let idx = build(&corpus(&items), 4, &dir);
    let s = Searcher::without_bound(&idx);
    let err = s
        .search_exact("buoy 7", 3, &mut Default::default())
        .unwrap_err();
    assert!(err.to_string().contains("lower bound"), "{err}");
    let err = s
        .search_within("buoy 7", 1.0, None, &mut Default::default())
        .unwrap_err();
    assert!(err.to_string().contains("lower bound"), "{err}");
    // Approximate queries still work, and with every item as a candidate they are exact.
    let p = waymark::search::SearchParams {
        candidates: 50,
        ..waymark::search::SearchParams::from_index(&idx, 3)
    };
    let f = s.search("buoy 7", &p, &mut Default::default()).unwrap();
    assert_eq!(f.neighbors, full_scan(&idx, "buoy 7", 3).unwrap());
    assert_eq!(f.pruned, 0);
}

const FERRIES: &str = "Orvane Quay\nTessamir Row\nLower Kaldrith\nUpper Kaldrith\nOrvane Strand\nKeth Landing\nMirrow Steps\nTessamir Reach\nKeth Lantern\n";

#[test]
fn cli_exact_and_range_answers_carry_a_certificate() {
    let d = Dir::new();
    d.write("ferries.txt", FERRIES.as_bytes());
    d.cmd()
        .args(["build", "ferries.txt", "-o", "f.wmk", "--dim", "4", "-q"])
        .assert()
        .success();
    let out = d
        .cmd()
        .args(["query", "f.wmk", "-k", "2", "--exact"])
        .write_stdin("Keth Landin\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let v: serde_json::Value = serde_json::from_slice(&out).unwrap();
    assert_eq!(v["neighbors"][0]["item"], "Keth Landing");
    assert_eq!(v["neighbors"][0]["distance"], 1);
    assert_eq!(v["neighbors"].as_array().unwrap().len(), 2);
    let cert = &v["exact"];
    assert!(cert["examined"].as_u64().unwrap() >= 2);
    assert!(cert["computed"].as_u64().unwrap() <= cert["examined"].as_u64().unwrap());
    // Range: every item within 2 edits of the query, and nothing else (worked by hand:
    // "Keth Landing" is 1 edit away, "Keth Lantern" 3: d→t, i→e, insert r).
    let out = d
        .cmd()
        .args(["query", "f.wmk", "--within", "2", "--format", "tsv"])
        .write_stdin("Keth Landin\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let text = String::from_utf8(out).unwrap();
    let lines: Vec<Vec<&str>> = text.lines().map(|l| l.split('\t').collect()).collect();
    assert_eq!(lines.len(), 1, "{text}");
    assert_eq!(
        &lines[0][..5],
        ["Keth Landin", "1", "5", "Keth Landing", "1"]
    );
    assert_eq!(
        lines[0].len(),
        7,
        "TSV of exact answers adds examined and computed"
    );
}

#[test]
fn cli_bad_exact_usage_exits_2() {
    let d = Dir::new();
    d.write("ferries.txt", FERRIES.as_bytes());
    d.cmd()
        .args(["build", "ferries.txt", "-o", "f.wmk", "--dim", "4", "-q"])
        .assert()
        .success();
    for args in [
        &["--within", "-1"][..],
        &["--within", "nan"],
        &["--exact", "-k", "0"],
        &["--within", "2", "-k", "0"],
        &["--exact", "--candidates", "50"],
        &["--within", "2", "--space", "l2"],
    ] {
        d.cmd()
            .args(["query", "f.wmk"])
            .args(args)
            .write_stdin("Keth\n")
            .assert()
            .code(2);
    }
}

/// Open data: every other word of Debian's `wamerican` list (/usr/share/dict/american-english,
/// over 50,000 words, so the index has cells and the column blocks skip whole runs of
/// items by their boxes): exact k = 10 (ties included) and range R = 1, 2, 3 give what
/// strsim's brute force gives (a reference crate), one query at a time and in blocks,
/// with consistent certificates.
#[test]
fn box_skipping_keeps_exact_and_range_answers_on_a_large_sample() {
    let all = read_corpus(word_list_path(), &IngestOptions::default()).unwrap();
    let items: Vec<String> = all.items.iter().step_by(2).cloned().collect();
    assert!(items.len() >= 50_000);
    let dir = tempfile::tempdir().unwrap();
    let idx = build(&corpus(&items), 64, &dir);
    assert!(idx.cells().unwrap().is_some(), "the index has cells");
    let s = Searcher::new(&idx);
    let mut queries = waymark::eval::typo_queries(&items, 24, 17);
    // Queries far from every word and near many: the boxes skip all runs, or few.
    queries.push("zzzzzzzzzzzzzzzzzzzzzzzzzzzzzzzzzz".into());
    queries.push("e".into());
    queries.push("ses".into());
    let mut scratch = Default::default();
    for q in &queries {
        let mut want = within_by_strsim(&idx, q, usize::MAX);
        want.truncate(10);
        let got = s.search_exact(q, 10, &mut scratch).unwrap();
        assert_eq!(got.neighbors, want, "query {q}");
        check_certificate(&idx, &got, Some(10), None);
        for r in 1..=3 {
            let got = s.search_within(q, r as f64, None, &mut scratch).unwrap();
            assert_eq!(
                got.neighbors,
                within_by_strsim(&idx, q, r),
                "query {q} R {r}"
            );
            check_certificate(&idx, &got, None, Some(r as f64));
        }
    }
    let req = waymark::search::Request::Within {
        radius: 2.0,
        k: None,
    };
    for (q, got) in queries.iter().zip(s.answer_many(&queries, &req)) {
        assert_eq!(
            got.unwrap().neighbors,
            within_by_strsim(&idx, q, 2),
            "query {q}"
        );
    }
}

/// The distances of `got`, each checked against strsim's (a reference crate), sorted.
fn checked_distances(idx: &Index, q: &str, got: &Found) -> Vec<usize> {
    let mut seen = std::collections::HashSet::new();
    let mut d: Vec<usize> = got
        .neighbors
        .iter()
        .map(|n| {
            assert!(seen.insert(n.index), "query {q:?}: item {} twice", n.index);
            let item = String::from_utf8_lossy(idx.item(n.index as usize)).into_owned();
            let true_d = strsim::levenshtein(q, &item);
            assert_eq!(n.distance, true_d as f64, "query {q:?}, item {item:?}");
            true_d
        })
        .collect();
    d.sort_unstable();
    d
}

/// On a plain Levenshtein index the default approximate query takes its candidates from
/// the char counts and measures them until the answers settle: its answers must be those
/// of strsim's brute force (a reference crate) up to the order of ties (the same sorted
/// distances: threshold recall 1), one query at a time, in a batch and for stored items
/// asked as queries, on every 13th word of Debian's wamerican list with accented and CJK
/// variants.
#[test]
fn the_default_approximate_query_answers_as_the_brute_force_up_to_ties() {
    let all = read_corpus(word_list_path(), &IngestOptions::default()).unwrap();
    let mut items: Vec<String> = Vec::new();
    for (j, w) in all.items.iter().step_by(13).enumerate() {
        items.push(w.clone());
        if j % 4 == 0 {
            items.push(w.replace('a', "á").replace('i', "中"));
        }
    }
    let dir = tempfile::tempdir().unwrap();
    let idx = build(&corpus(&items), 32, &dir);
    let s = Searcher::new(&idx);
    let k = 10;
    let p = waymark::search::SearchParams::from_index(&idx, k);
    assert_eq!(p.source, waymark::search::CandidateSource::Counts);
    let mut queries = waymark::eval::typo_queries(&items, 200, 17);
    queries.extend(["", "x", "中中", "ábácus", "qqqqqqqqqqqqqqqqqqqq"].map(String::from));
    let req = waymark::search::Request::Approximate(p);
    let many = s.answer_many(&queries, &req);
    let mut scratch = Default::default();
    for (q, got) in queries.iter().zip(many) {
        let got = got.unwrap();
        let mut want: Vec<usize> = within_by_strsim(&idx, q, usize::MAX)
            .iter()
            .map(|n| n.distance as usize)
            .collect();
        want.truncate(k);
        assert_eq!(checked_distances(&idx, q, &got), want, "query {q:?}");
        assert!(
            got.certificate.is_none(),
            "an approximate answer has no certificate"
        );
        let one = s.search(q, &p, &mut scratch).unwrap();
        assert_eq!(checked_distances(&idx, q, &one), want, "query {q:?}");
        // Alone or in a batch, a query gets the same items, ties included.
        let ids =
            |f: &waymark::search::Found| f.neighbors.iter().map(|n| n.index).collect::<Vec<_>>();
        assert_eq!(ids(&one), ids(&got), "query {q:?}: alone and in a batch");
    }
    let stored: Vec<u32> = (0..idx.len() as u32).step_by(97).collect();
    for (&i, got) in stored.iter().zip(s.answer_stored(&stored, &req)) {
        let q = String::from_utf8_lossy(idx.item(i as usize)).into_owned();
        let mut want: Vec<usize> = within_by_strsim(&idx, &q, usize::MAX)
            .iter()
            .map(|n| n.distance as usize)
            .collect();
        want.truncate(k);
        assert_eq!(checked_distances(&idx, &q, &got.unwrap()), want, "item {i}");
    }
}

/// Over four letters the char counts rule out few items: after the searcher's first 32
/// queries (answered by the counts, as a brute force up to ties: strsim, a reference
/// crate) the default approximate query hands on to the embedding's own source, and its
/// answers are then exactly those of that source, on 2,000 invented barcodes.
#[test]
fn over_four_letters_the_default_approximate_query_hands_on_to_the_embedding() {
    let mut x = 0x2545_F491_4F6C_DD1Du64;
    let mut next = move || {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        x
    };
    let letters = [b'A', b'C', b'G', b'T'];
    let items: Vec<String> = (0..2000)
        .map(|_| {
            (0..12)
                .map(|_| letters[(next() % 4) as usize] as char)
                .collect()
        })
        .collect();
    let queries: Vec<String> = (0..120)
        .map(|i| {
            let mut q: Vec<u8> = items[(i * 11) % items.len()].clone().into_bytes();
            q[(next() % 12) as usize] = letters[(next() % 4) as usize];
            String::from_utf8(q).unwrap()
        })
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let idx = build(&corpus(&items), 16, &dir);
    let s = Searcher::new(&idx);
    let k = 10;
    let p = waymark::search::SearchParams::from_index(&idx, k);
    assert_eq!(p.source, waymark::search::CandidateSource::Counts);
    let embedded = waymark::search::SearchParams::embedded(&idx, k);
    assert_ne!(embedded.source, waymark::search::CandidateSource::Counts);
    let got = s.answer_many(&queries, &waymark::search::Request::Approximate(p));
    let mut scratch = Default::default();
    for (j, (q, got)) in queries.iter().zip(got).enumerate() {
        let got = got.unwrap();
        if j < 32 {
            let mut want: Vec<usize> = within_by_strsim(&idx, q, usize::MAX)
                .iter()
                .map(|n| n.distance as usize)
                .collect();
            want.truncate(k);
            assert_eq!(checked_distances(&idx, q, &got), want, "query {q:?}");
        } else {
            assert_eq!(
                got,
                s.search(q, &embedded, &mut scratch).unwrap(),
                "query {q:?}"
            );
        }
    }
}
