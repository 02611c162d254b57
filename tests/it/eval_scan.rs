//! The brute forces: the full scan, the best scan (length filter and batched kernel) and a
//! naive scan written here (strsim's dynamic program against every item, then a sort) give
//! the same answers: the same items, distances and order.

use waymark::eval::{best_scan, full_scan, scan_many, typo_queries, Scan};
use waymark::index::{BuildOptions, IdRef, Index};
use waymark::search::Neighbor;

use crate::util::{build_in, corpus, word_list};

fn build(items: &[String], dir: &tempfile::TempDir) -> Index {
    let opts = BuildOptions {
        dim: 4,
        ..BuildOptions::default()
    };
    build_in(dir.path(), "scan.wmk", &corpus(items), &opts)
}

/// Naive k-NN: strsim (general-purpose crate, plain dynamic program) against every item,
/// sorted by (distance, id, item index) as the answers are defined.
fn naive(index: &Index, items: &[String], query: &str, k: usize) -> Vec<Neighbor> {
    let mut all: Vec<(usize, i64, usize)> = items
        .iter()
        .enumerate()
        .map(|(i, x)| {
            let id = match index.id(i) {
                IdRef::Int(v) => v,
                IdRef::Text(_) => unreachable!("integer ids"),
            };
            (strsim::levenshtein(query, x), id, i)
        })
        .collect();
    all.sort();
    all.into_iter()
        .take(k)
        .map(|(d, _, i)| Neighbor {
            index: i as u32,
            distance: d as f64,
        })
        .collect()
}

fn check(items: &[String], queries: &[String]) {
    let dir = tempfile::tempdir().unwrap();
    let index = build(items, &dir);
    for k in [1, 5, 10] {
        let full_many = scan_many(&index, queries, k, Scan::Full).unwrap();
        let best_many = scan_many(&index, queries, k, Scan::Best).unwrap();
        for (j, q) in queries.iter().enumerate() {
            let want = naive(&index, items, q, k);
            assert_eq!(
                full_scan(&index, q, k).unwrap(),
                want,
                "full scan, query {q:?}, k = {k}"
            );
            assert_eq!(
                best_scan(&index, q, k).unwrap(),
                want,
                "best scan, query {q:?}, k = {k}"
            );
            assert_eq!(full_many[j], want, "scan_many full, query {q:?}");
            assert_eq!(best_many[j], want, "scan_many best, query {q:?}");
        }
    }
}

#[test]
fn scans_agree_on_a_word_list_sample() {
    // Debian's wamerican list (package wamerican, 104,334 words): every 40th word, with
    // typo queries drawn from the sample.
    let text = word_list();
    let items: Vec<String> = text.lines().step_by(40).map(str::to_string).collect();
    let mut queries = typo_queries(&items, 30, 5);
    queries.extend(["".to_string(), "q".to_string(), "x".repeat(70)]);
    check(&items, &queries);
}

#[test]
fn scans_agree_with_non_ascii_and_long_items() {
    // Invented Vessmark register entries with multi-byte chars: byte lengths differ from
    // char lengths, so the length filter must not use bytes as chars.
    let base = [
        "Skärvik",
        "Skarvik",
        "Östra Holm",
        "Ostra Holm",
        "Fyrö",
        "Fyr",
        "Bøje 7",
        "Boje 7",
        "Ferjeleie",
        "Färjeläge",
        "ÅÅÅÅ",
        "AAAA",
        "中島",
        "Sund",
        "Sundö",
        "",
        "ö",
    ];
    let mut items: Vec<String> = base.iter().map(|s| s.to_string()).collect();
    items.push("ö".repeat(40));
    items.push("o".repeat(40));
    items.push("Vessmark ferry route ".repeat(5));
    let queries: Vec<String> = [
        "Skärvk",
        "Ostra Hölm",
        "Fyrö",
        "ÅÅÅ",
        "ö",
        "",
        "Sundo",
        &"ö".repeat(38),
        "Vessmark ferry",
        "中",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    check(&items, &queries);
}

#[test]
fn many_queries_in_lanes_agree_with_strsim() {
    // `scan_many`'s full scan puts the queries in vector lanes, grouped by length class:
    // queries at every lane boundary (8/9, 16/17, 32/33, 64/65 chars), accented ones, the
    // empty query, more short queries than one register holds (a partial second group), and
    // k above the number of items; checked against strsim's dynamic program (naive scan).
    let text = word_list();
    let mut items: Vec<String> = text.lines().step_by(500).map(str::to_string).collect();
    items.extend(["Skärvik", "Östra Holm", "Färjeläge", "Bøje 7", "中島"].map(String::from));
    let mut queries = typo_queries(&items, 80, 11);
    let long = "Vessmark ferry route by Skärvik and Östra Holm to the old Färjeläge pier";
    for m in [8usize, 9, 16, 17, 32, 33, 64, 65] {
        queries.push(long.chars().take(m).collect());
    }
    queries.extend(["", "Skarvik", "ÖstraHolm", "Bøje", "中"].map(String::from));
    let dir = tempfile::tempdir().unwrap();
    let index = build(&items, &dir);
    for k in [3, items.len() + 5] {
        let got = scan_many(&index, &queries, k, Scan::Full).unwrap();
        for (q, got) in queries.iter().zip(&got) {
            assert_eq!(got, &naive(&index, &items, q, k), "query {q:?}, k = {k}");
        }
    }
}
