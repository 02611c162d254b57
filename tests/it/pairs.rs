//! `waymark pairs` and `waymark groups`, and the library's `pairs` module: every pair within
//! a radius and every item's k nearest others, on every metric, checked against brute
//! force computed here over all pairs (the index's own metric called directly, and for
//! Levenshtein and Damerau also the `strsim` crate as an outside reference), on a generated
//! register with planted near-duplicates and on Debian's word list.

use std::collections::BTreeMap;
use std::path::Path;

use predicates::prelude::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::Deserialize;
use waymark::index::Index;
use waymark::metric::Metric;
use waymark::pairs::{group, join_across, Grouping, NearestJoin, Pair, Radius, SelfJoin};
use waymark::search::SearchParams;

use crate::util::{demo, demo_lines, json_lines, repo_file, word_list, Dir};

// ---------------------------------------------------------------------------------------
// Data.

const SYLLABLES: [&str; 24] = [
    "ka", "vel", "or", "mi", "tha", "run", "sel", "bo", "dra", "ny", "es", "lun", "quo", "ri",
    "gan", "te", "hol", "ves", "ma", "kri", "sto", "ae", "wen", "dal",
];

fn word(rng: &mut ChaCha8Rng) -> String {
    let n = rng.gen_range(2..=3);
    let w: String = (0..n)
        .map(|_| SYLLABLES[rng.gen_range(0..SYLLABLES.len())])
        .collect();
    let mut c = w.chars();
    let first = c.next().expect("a syllable").to_ascii_uppercase();
    std::iter::once(first).chain(c).collect()
}

/// A register of `n` invented names (two or three invented words), a fifth of them planted
/// near-duplicates of others: a typo (one char replaced, dropped or doubled), another case,
/// two words swapped, a word dropped, a suffix added. Seeded: the same list every run.
fn register(n: usize, seed: u64) -> Vec<String> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut names: Vec<String> = Vec::with_capacity(n);
    while names.len() < n {
        if names.len() < 10 || rng.gen_bool(0.8) {
            let words = if rng.gen_bool(0.3) { 3 } else { 2 };
            let name: Vec<String> = (0..words).map(|_| word(&mut rng)).collect();
            names.push(name.join(" "));
            continue;
        }
        let base = names[rng.gen_range(0..names.len())].clone();
        let chars: Vec<char> = base.chars().collect();
        let at = rng.gen_range(0..chars.len());
        let mut parts: Vec<&str> = base.split(' ').collect();
        let planted = match rng.gen_range(0..7) {
            0 => {
                let mut c = chars.clone();
                c[at] = (b'a' + rng.gen_range(0..26)) as char;
                c.into_iter().collect()
            }
            1 => {
                let mut c = chars.clone();
                c.remove(at);
                c.into_iter().collect()
            }
            2 => {
                let mut c = chars.clone();
                c.insert(at, chars[at]);
                c.into_iter().collect()
            }
            3 => base.to_lowercase(),
            4 if parts.len() > 1 => {
                parts.swap(0, 1);
                parts.join(" ")
            }
            5 if parts.len() > 2 => {
                parts.remove(rng.gen_range(0..parts.len()));
                parts.join(" ")
            }
            _ => format!(
                "{base}{}",
                ["s", " Holm", "by", " Quay"][rng.gen_range(0..4)]
            ),
        };
        names.push(planted);
    }
    names
}

/// Words 50,000 to 53,999 of Debian's word list (`/usr/share/dict/american-english`,
/// package wamerican): neighbours in alphabetical order, so many near pairs.
fn debian_words() -> Vec<String> {
    word_list()
        .lines()
        .skip(50_000)
        .take(4_000)
        .map(str::to_string)
        .collect()
}

fn write_lines(d: &Dir, name: &str, lines: &[String]) -> std::path::PathBuf {
    d.write(name, (lines.join("\n") + "\n").as_bytes())
}

// ---------------------------------------------------------------------------------------
// Brute force.

/// Pairs (a < b) and their distances.
type PairMap = BTreeMap<(u32, u32), f64>;
/// Each item's neighbours (item, distance), nearest first.
type Lists = Vec<Vec<(u32, f64)>>;

/// Every pair (a < b) within `radius`, by calling `dist` on all n(n−1)/2 pairs.
fn brute_pairs(
    index: &Index,
    radius: Radius,
    dist: &(dyn Fn(&[u8], &[u8]) -> f64 + Sync),
) -> BTreeMap<(u32, u32), f64> {
    let n = index.len();
    let lens: Vec<u32> = (0..n)
        .map(|i| String::from_utf8_lossy(index.key(i)).chars().count() as u32)
        .collect();
    (0..n)
        .into_par_iter()
        .flat_map_iter(|a| {
            let lens = &lens;
            (a + 1..n).filter_map(move |b| {
                let d = dist(index.key(a), index.key(b));
                (d <= radius.limit(lens[a], lens[b])).then_some(((a as u32, b as u32), d))
            })
        })
        .collect()
}

/// The join's pairs, each once, as a map; fails on a pair written twice or out of order.
fn joined(index: &Index, radius: Radius) -> BTreeMap<(u32, u32), f64> {
    let (pairs, stats) = SelfJoin::new(index, radius)
        .expect("join")
        .collect_all()
        .expect("pairs");
    assert_eq!(stats.pairs, pairs.len() as u64);
    as_map(&pairs)
}

fn as_map(pairs: &[Pair]) -> BTreeMap<(u32, u32), f64> {
    let mut m = BTreeMap::new();
    for p in pairs {
        assert!(p.a < p.b, "pair {p:?} not in item order");
        assert!(m.insert((p.a, p.b), p.distance).is_none(), "{p:?} twice");
    }
    m
}

fn assert_same(got: &BTreeMap<(u32, u32), f64>, want: &BTreeMap<(u32, u32), f64>, what: &str) {
    let missing: Vec<_> = want
        .keys()
        .filter(|k| !got.contains_key(k))
        .take(5)
        .collect();
    let extra: Vec<_> = got
        .keys()
        .filter(|k| !want.contains_key(k))
        .take(5)
        .collect();
    assert!(
        missing.is_empty() && extra.is_empty(),
        "{what}: {} pairs, brute force {}; missing {missing:?}, extra {extra:?}",
        got.len(),
        want.len()
    );
    for (k, d) in want {
        assert!(
            (got[k] - d).abs() <= 1e-9 * d.abs().max(1.0),
            "{what}: {k:?}"
        );
    }
}

/// The index's metric, called directly.
fn metric_of(index: &Index) -> impl Fn(&[u8], &[u8]) -> f64 + Sync + '_ {
    let m = index.metric().expect("metric");
    move |a, b| m.distance(a, b)
}

/// Each item's `k` nearest others by brute force, in answer order (distance, id, item).
fn brute_nearest(index: &Index, k: usize) -> Vec<Vec<(u32, f64)>> {
    let d = metric_of(index);
    let n = index.len();
    (0..n)
        .into_par_iter()
        .map(|i| {
            let mut all: Vec<(u32, f64)> = (0..n)
                .filter(|&j| j != i)
                .map(|j| (j as u32, d(index.key(i), index.key(j))))
                .collect();
            all.sort_by(|x, y| {
                x.1.total_cmp(&y.1)
                    .then((index.id(x.0 as usize), x.0).cmp(&(index.id(y.0 as usize), y.0)))
            });
            all.truncate(k);
            all
        })
        .collect()
}

/// The pairs of the k-NN lists, each unordered pair once.
fn list_pairs(lists: &[Vec<(u32, f64)>]) -> BTreeMap<(u32, u32), f64> {
    let mut m = BTreeMap::new();
    for (i, l) in lists.iter().enumerate() {
        for &(j, d) in l {
            m.insert((j.min(i as u32), j.max(i as u32)), d);
        }
    }
    m
}

/// Runs the k-NN join; returns its pairs and each item's list.
fn nearest(index: &Index, k: usize, params: Option<SearchParams>) -> (PairMap, Lists) {
    nearest_refined(index, k, params, 0)
}

/// [`nearest`] with `rounds` refinement rounds.
fn nearest_refined(
    index: &Index,
    k: usize,
    params: Option<SearchParams>,
    rounds: usize,
) -> (PairMap, Lists) {
    let mut join = NearestJoin::new(index, k, params)
        .expect("join")
        .refine(rounds);
    let mut pairs = Vec::new();
    while let Some(b) = join.next_batch() {
        pairs.extend(b.expect("batch"));
    }
    let lists = (0..index.len())
        .map(|i| join.neighbors(i).expect("every item done").to_vec())
        .collect();
    (as_map(&pairs), lists)
}

/// Recall@k of approximate lists against exact ones (distances compared, so ties count).
fn recall(got: &[Vec<(u32, f64)>], want: &[Vec<(u32, f64)>]) -> f64 {
    let (mut hit, mut all) = (0usize, 0usize);
    for (g, w) in got.iter().zip(want) {
        let kth = w.last().map_or(f64::INFINITY, |x| x.1);
        hit += g.iter().filter(|x| x.1 <= kth).count().min(w.len());
        all += w.len();
    }
    hit as f64 / all.max(1) as f64
}

/// Builds `input` with `args` in `d` and opens it.
fn open(d: &Dir, input: &Path, name: &str, args: &[&str]) -> Index {
    let path = d.build(input, name, &[&["-q"], args].concat());
    Index::open(&path).expect("open")
}

/// Checks exact pairs within each radius and the exact k-NN join against brute force with
/// `dist`; returns the number of pairs of the first radius.
fn check_metric(
    index: &Index,
    radii: &[Radius],
    k: usize,
    dist: &(dyn Fn(&[u8], &[u8]) -> f64 + Sync),
    what: &str,
) -> usize {
    let mut first = None;
    for &r in radii {
        let want = brute_pairs(index, r, dist);
        let got = joined(index, r);
        assert_same(&got, &want, &format!("{what} {r:?}"));
        first.get_or_insert(want.len());
    }
    let want = brute_nearest(index, k);
    let (pairs, lists) = nearest(index, k, None);
    for (i, (g, w)) in lists.iter().zip(&want).enumerate() {
        assert_eq!(g, w, "{what}: exact {k}-NN of item {i}");
    }
    assert_eq!(pairs, list_pairs(&want), "{what}: k-NN pairs");
    first.unwrap_or(0)
}

// ---------------------------------------------------------------------------------------
// Every metric.

#[test]
fn levenshtein_pairs_of_a_register_match_strsim_on_all_pairs() {
    // Reference: strsim::levenshtein (the strsim crate) on all n(n−1)/2 pairs.
    let d = Dir::new();
    let names = register(3000, 11);
    let index = open(&d, &write_lines(&d, "reg.txt", &names), "reg.wmk", &[]);
    let strsim = |a: &[u8], b: &[u8]| {
        strsim::levenshtein(&String::from_utf8_lossy(a), &String::from_utf8_lossy(b)) as f64
    };
    let radii = [
        Radius::Fixed(1.0),
        Radius::Fixed(2.0),
        Radius::Fixed(4.0),
        Radius::Fraction(0.15),
        Radius::Fraction(0.3),
    ];
    let pairs = check_metric(&index, &radii, 5, &strsim, "levenshtein register");
    assert!(pairs > 100, "the planted typos make pairs: {pairs}");
    // With --fold-case, case variants are at distance 0.
    let folded = open(&d, &d.path("reg.txt"), "fold.wmk", &["--fold-case"]);
    let lower = |a: &[u8], b: &[u8]| {
        strsim::levenshtein(
            &String::from_utf8_lossy(a).to_lowercase(),
            &String::from_utf8_lossy(b).to_lowercase(),
        ) as f64
    };
    let want = brute_pairs(&folded, Radius::Fixed(0.0), &lower);
    assert!(!want.is_empty(), "planted case variants");
    assert_same(&joined(&folded, Radius::Fixed(0.0)), &want, "fold-case R=0");
}

#[test]
fn levenshtein_pairs_of_debian_words_match_strsim_on_all_pairs() {
    // Outside data: Debian's word list (/usr/share/dict/american-english, package wamerican),
    // words 50,000..54,000; reference distances: strsim::levenshtein.
    let d = Dir::new();
    let words = debian_words();
    let index = open(&d, &write_lines(&d, "w.txt", &words), "w.wmk", &[]);
    let strsim = |a: &[u8], b: &[u8]| {
        strsim::levenshtein(&String::from_utf8_lossy(a), &String::from_utf8_lossy(b)) as f64
    };
    let radii = [
        Radius::Fixed(1.0),
        Radius::Fixed(2.0),
        Radius::Fraction(0.15),
    ];
    let pairs = check_metric(&index, &radii, 10, &strsim, "levenshtein words");
    assert!(pairs > 1000, "{pairs}");
}

#[test]
fn pairs_of_two_indexes_and_their_own_are_the_pairs_of_one_index_of_both() {
    // Reference: strsim::levenshtein (the strsim crate) on all n(n−1)/2 pairs of the
    // register taken whole. Its first 1,200 names are one index (with a deletion-variant
    // table of radius 2), the other 1,300 another (without one: radii up to 2 build a table
    // in memory, larger ones go by range queries).
    let d = Dir::new();
    let names = register(2500, 23);
    let first = open(
        &d,
        &write_lines(&d, "first.txt", &names[..1200]),
        "first.wmk",
        &["--small-radius", "2"],
    );
    let second = open(
        &d,
        &write_lines(&d, "second.txt", &names[1200..]),
        "second.wmk",
        &[],
    );
    let whole = open(&d, &write_lines(&d, "whole.txt", &names), "whole.wmk", &[]);
    let strsim = |a: &[u8], b: &[u8]| {
        strsim::levenshtein(&String::from_utf8_lossy(a), &String::from_utf8_lossy(b)) as f64
    };
    let radii = [
        Radius::Fixed(0.0),
        Radius::Fixed(1.0),
        Radius::Fixed(2.0),
        Radius::Fixed(3.0),
        Radius::Fraction(0.15),
    ];
    for r in radii {
        let want = brute_pairs(&whole, r, &strsim);
        let mut got = joined(&first, r);
        for ((a, b), dist) in joined(&second, r) {
            got.insert((a + 1200, b + 1200), dist);
        }
        let mut across = 0;
        for (x, y) in [(&first, &second), (&second, &first)] {
            let pairs = join_across(x, y, r).expect("pairs across");
            // In the order of the second index's items.
            assert!(
                pairs.windows(2).all(|w| w[0].b <= w[1].b),
                "{r:?}: out of order"
            );
            if std::ptr::eq(x, &first) {
                across = pairs.len();
                for p in &pairs {
                    assert!(
                        got.insert((p.a, p.b + 1200), p.distance).is_none(),
                        "{p:?} twice"
                    );
                }
            } else {
                // The other way round: the same pairs, each once.
                let mut back: Vec<(u32, u32, f64)> =
                    pairs.iter().map(|p| (p.b, p.a, p.distance)).collect();
                back.sort_by(|a, b| a.partial_cmp(b).expect("distances"));
                let mut ahead: Vec<(u32, u32, f64)> = join_across(&first, &second, r)
                    .expect("pairs across")
                    .iter()
                    .map(|p| (p.a, p.b, p.distance))
                    .collect();
                ahead.sort_by(|a, b| a.partial_cmp(b).expect("distances"));
                assert_eq!(back, ahead, "{r:?}: the two ways differ");
            }
        }
        assert_same(&got, &want, &format!("two indexes, {r:?}"));
        if r == Radius::Fixed(2.0) {
            assert!(across > 20, "planted typos across the two halves: {across}");
        }
    }
    // Another normalisation: keys that do not compare are refused.
    let folded = open(&d, &d.path("second.txt"), "folded.wmk", &["--fold-case"]);
    let err = join_across(&first, &folded, Radius::Fixed(1.0)).expect_err("refused");
    assert!(
        err.to_string().contains("same metric and normalisation"),
        "{err}"
    );
    assert!(join_across(&first, &second, Radius::Fixed(-1.0)).is_err());
}

#[test]
fn approximate_nearest_pairs_reach_their_measured_recall() {
    // Exact lists by brute force over Debian's word list (words 50,000..54,000) and over the
    // generated register. Measured when written: recall@10 0.9985 (words) and 0.9980
    // (register) with the defaults, 0.82 and 0.54 with 20 candidates, 0.983 and 0.918 with
    // 20 candidates and 2 refinement rounds; the floors leave margin.
    let d = Dir::new();
    for (name, items, floor, refined_floor) in [
        ("w", debian_words(), 0.97, 0.95),
        ("r", register(3000, 5), 0.97, 0.87),
    ] {
        let index = open(
            &d,
            &write_lines(&d, name, &items),
            &format!("{name}.wmk"),
            &[],
        );
        let exact = brute_nearest(&index, 10);
        let params = SearchParams::embedded(&index, 10);
        let (pairs, lists) = nearest(&index, 10, Some(params));
        let r = recall(&lists, &exact);
        eprintln!("{name}: approximate 10-NN recall {r:.4}");
        assert!(r >= floor, "{name}: recall {r}");
        assert!(pairs.len() <= list_pairs(&lists).len());
        // Fewer candidates lower it; it never exceeds 1.
        let few = nearest(&index, 10, Some(params.with_candidates(20))).1;
        let rf = recall(&few, &exact);
        eprintln!("{name}: with 20 candidates {rf:.4}");
        assert!(rf <= 1.0 && rf < r + 1e-9, "{rf} vs {r}");
        // Refinement by neighbours of neighbours raises the recall of a cheap search.
        let (rpairs, refined) = nearest_refined(&index, 10, Some(params.with_candidates(20)), 2);
        let rr = recall(&refined, &exact);
        eprintln!("{name}: with 20 candidates and 2 refinement rounds {rr:.4}");
        assert!(
            rr > rf + 0.05 && rr >= refined_floor,
            "{name}: {rr} vs {rf}"
        );
        assert_eq!(rpairs, list_pairs(&refined));
    }
}

#[test]
fn damerau_pairs_match_strsim_on_all_pairs() {
    // Reference: strsim::damerau_levenshtein (unrestricted, strsim's docs).
    let d = Dir::new();
    let names = register(1500, 3);
    let index = open(
        &d,
        &write_lines(&d, "n.txt", &names),
        "d.wmk",
        &["--metric", "damerau", "--dim", "16"],
    );
    let strsim = |a: &[u8], b: &[u8]| {
        strsim::damerau_levenshtein(&String::from_utf8_lossy(a), &String::from_utf8_lossy(b)) as f64
    };
    let radii = [
        Radius::Fixed(1.0),
        Radius::Fixed(3.0),
        Radius::Fraction(0.2),
    ];
    assert!(check_metric(&index, &radii, 5, &strsim, "damerau") > 50);
}

#[test]
fn hamming_and_weighted_pairs_match_brute_force() {
    // Hamming: positions that differ, counted here; weighted: the index's metric directly.
    let d = Dir::new();
    let codes: Vec<String> = demo_lines("barcodes.txt").into_iter().take(2000).collect();
    let input = write_lines(&d, "b.txt", &codes);
    let ham = open(&d, &input, "h.wmk", &["--metric", "hamming", "--dim", "16"]);
    let count = |a: &[u8], b: &[u8]| a.iter().zip(b).filter(|(x, y)| x != y).count() as f64;
    let radii = [
        Radius::Fixed(3.0),
        Radius::Fixed(5.0),
        Radius::Fraction(0.3),
    ];
    assert!(check_metric(&ham, &radii, 5, &count, "hamming") > 0);
    let costs = demo("nucleotide-costs.txt");
    let w = open(
        &d,
        &input,
        "w.wmk",
        &[
            "--metric",
            "weighted",
            "--costs",
            costs.to_str().unwrap(),
            "--dim",
            "16",
        ],
    );
    let radii = [Radius::Fixed(3.0), Radius::Fraction(0.3)];
    assert!(check_metric(&w, &radii, 5, &metric_of(&w), "weighted") > 0);
}

#[test]
fn jaccard_vector_and_graph_pairs_match_brute_force() {
    // The index's metric called directly on every pair.
    let d = Dir::new();
    let tags: Vec<String> = demo_lines("tags.txt").into_iter().take(1500).collect();
    let j = open(
        &d,
        &write_lines(&d, "t.txt", &tags),
        "j.wmk",
        &["--metric", "jaccard", "--dim", "16"],
    );
    let radii = [
        Radius::Fixed(0.3),
        Radius::Fixed(0.5),
        Radius::Fraction(0.01),
    ];
    assert!(check_metric(&j, &radii, 5, &metric_of(&j), "jaccard") > 0);
    let buoys: Vec<String> = demo_lines("buoys.csv").into_iter().take(1201).collect();
    let input = write_lines(&d, "b.csv", &buoys);
    for (norm, r) in [("l1", 4.0), ("l2", 1.5), ("linf", 1.0), ("angular", 0.02)] {
        let v = open(
            &d,
            &input,
            &format!("{norm}.wmk"),
            &["--metric", norm, "--header", "--dim", "8"],
        );
        let pairs = check_metric(&v, &[Radius::Fixed(r)], 5, &metric_of(&v), norm);
        assert!(pairs > 0, "{norm}");
        // A fraction of a length means nothing for vectors: refused.
        let e = SelfJoin::new(&v, Radius::Fraction(0.1))
            .err()
            .expect("refused");
        assert!(e.to_string().contains("text"), "{e}");
    }
    let g = open(
        &d,
        &demo("ferries.txt"),
        "g.wmk",
        &["--metric", "graph", "--dim", "16"],
    );
    let radii = [Radius::Fixed(20.0), Radius::Fixed(45.0)];
    assert!(check_metric(&g, &radii, 5, &metric_of(&g), "graph") > 0);
}

#[test]
fn external_metric_pairs_match_brute_force() {
    if std::process::Command::new("python3")
        .arg("-c")
        .arg("pass")
        .status()
        .is_err()
    {
        eprintln!("skipped: no python3");
        return;
    }
    // The program's own answers for every pair (a brute force over the same protocol),
    // and strsim::levenshtein, which the program computes.
    let d = Dir::new();
    let names = register(300, 21);
    let server = repo_file("examples/metric_server.py");
    let e = open(
        &d,
        &write_lines(&d, "n.txt", &names),
        "e.wmk",
        &[
            "--metric",
            "external",
            "--dim",
            "8",
            "--",
            "python3",
            server.to_str().unwrap(),
        ],
    );
    let strsim = |a: &[u8], b: &[u8]| {
        strsim::levenshtein(&String::from_utf8_lossy(a), &String::from_utf8_lossy(b)) as f64
    };
    let radii = [Radius::Fixed(2.0), Radius::Fraction(0.2)];
    assert!(check_metric(&e, &radii, 3, &strsim, "external") > 0);
}

#[test]
fn fastmap_refuses_exact_pairs_and_answers_approximate_ones() {
    let d = Dir::new();
    let names = register(800, 8);
    let index = open(
        &d,
        &write_lines(&d, "n.txt", &names),
        "f.wmk",
        &["--embedding", "fastmap", "--dim", "8"],
    );
    let e = SelfJoin::new(&index, Radius::Fixed(1.0))
        .err()
        .expect("refused");
    assert!(matches!(e, waymark::Error::NoLowerBound { .. }), "{e}");
    assert!(NearestJoin::new(&index, 3, None).is_err());
    let exact = brute_nearest(&index, 3);
    let (_, lists) = nearest(&index, 3, Some(SearchParams::from_index(&index, 3)));
    let r = recall(&lists, &exact);
    assert!(r > 0.5, "approximate k-NN without a bound still works: {r}");
}

// ---------------------------------------------------------------------------------------
// Groups.

#[test]
fn groups_keep_their_promises_on_the_register() {
    // Components equal the connected components of the brute-force pairs; a centre group
    // has every member within R of its centre; a clique group every two members within R.
    let d = Dir::new();
    let names = register(2000, 17);
    let index = open(&d, &write_lines(&d, "n.txt", &names), "n.wmk", &[]);
    let strsim = |a: &[u8], b: &[u8]| {
        strsim::levenshtein(&String::from_utf8_lossy(a), &String::from_utf8_lossy(b)) as f64
    };
    let r = 2.0;
    let want = brute_pairs(&index, Radius::Fixed(r), &strsim);
    let (pairs, _) = SelfJoin::new(&index, Radius::Fixed(r))
        .unwrap()
        .collect_all()
        .unwrap();
    let n = index.len();
    let d_of = |a: u32, b: u32| strsim(index.key(a as usize), index.key(b as usize));
    // Components by a plain flood fill over the brute-force pairs.
    let mut adj = vec![Vec::new(); n];
    for &(a, b) in want.keys() {
        adj[a as usize].push(b);
        adj[b as usize].push(a);
    }
    let mut seen = vec![false; n];
    let mut comps = Vec::new();
    for s in 0..n {
        if seen[s] || adj[s].is_empty() {
            continue;
        }
        let (mut stack, mut comp) = (vec![s as u32], Vec::new());
        seen[s] = true;
        while let Some(x) = stack.pop() {
            comp.push(x);
            for &y in &adj[x as usize] {
                if !seen[y as usize] {
                    seen[y as usize] = true;
                    stack.push(y);
                }
            }
        }
        comp.sort_unstable();
        comps.push(comp);
    }
    let got: Vec<Vec<u32>> = group(n, &pairs, Grouping::Components, false)
        .into_iter()
        .map(|g| g.members)
        .collect();
    assert_eq!(got, comps);
    let centre = group(n, &pairs, Grouping::Centre, false);
    let clique = group(n, &pairs, Grouping::Clique, false);
    for g in &centre {
        let c = g.centre.expect("a centre");
        assert!(g.members.contains(&c));
        for &m in &g.members {
            assert!(d_of(c, m) <= r, "{:?}", g);
        }
    }
    for g in &clique {
        for &a in &g.members {
            for &b in &g.members {
                assert!(d_of(a, b) <= r, "{:?}", g);
            }
        }
    }
    // Every item is in at most one group, and groups are ordered by their first member.
    for gs in [&centre, &clique] {
        let mut all: Vec<u32> = gs.iter().flat_map(|g| g.members.clone()).collect();
        let len = all.len();
        all.sort_unstable();
        all.dedup();
        assert_eq!(all.len(), len);
        assert!(gs.windows(2).all(|w| w[0].members[0] < w[1].members[0]));
    }
    // The chain: components hold items farther apart than R, the guarded groups never.
    let widest = got
        .iter()
        .flat_map(|c| c.iter().flat_map(move |&a| c.iter().map(move |&b| (a, b))))
        .map(|(a, b)| d_of(a, b))
        .fold(0.0, f64::max);
    assert!(widest > r, "the register's components chain: {widest}");
}

// ---------------------------------------------------------------------------------------
// The command line, as the README shows it.

#[derive(Deserialize)]
struct Side {
    id: serde_json::Value,
    item: String,
}

#[derive(Deserialize)]
struct PairLine {
    a: Side,
    b: Side,
    distance: f64,
}

#[derive(Deserialize)]
struct LookupLine {
    line: usize,
    query: String,
    item: String,
    distance: f64,
}

#[derive(Deserialize)]
struct GroupLine {
    group: usize,
    size: usize,
    ids: Vec<serde_json::Value>,
    items: Vec<String>,
    centre: Option<serde_json::Value>,
}

const HARBOURS: &str =
    "Keth\nKath\nKatt\nMatt\nOrvane Quay\nOrvane Qauy\nBrindle Holm\nBrindle Holme\nStothisen\n";

#[test]
fn pairs_within_r_writes_each_pair_once_as_json_and_tsv() {
    let d = Dir::new();
    let input = d.write("harbours.txt", HARBOURS.as_bytes());
    let index = d.build(&input, "h.wmk", &["-q"]);
    let out = d
        .cmd()
        .args(["pairs", "h.wmk", "--within", "1"])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let pairs: Vec<PairLine> = json_lines(&out);
    let got: Vec<(String, String, f64)> = pairs
        .iter()
        .map(|p| (p.a.item.clone(), p.b.item.clone(), p.distance))
        .collect();
    let want = [
        ("Keth", "Kath", 1.0),
        ("Kath", "Katt", 1.0),
        ("Katt", "Matt", 1.0),
        ("Brindle Holm", "Brindle Holme", 1.0),
    ];
    assert_eq!(got.len(), want.len(), "{got:?}");
    for w in want {
        assert!(
            got.contains(&(w.0.into(), w.1.into(), w.2)),
            "{w:?} in {got:?}"
        );
    }
    assert_eq!(pairs[0].a.id, serde_json::json!(0));
    let tsv = d
        .cmd()
        .args(["pairs", "h.wmk", "--within", "1", "--format", "tsv"])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let tsv = String::from_utf8(tsv).unwrap();
    assert!(
        tsv.lines()
            .any(|l| l == "6\tBrindle Holm\t7\tBrindle Holme\t1"),
        "{tsv}"
    );
    // k nearest: every item has its nearest other, each pair once.
    let out = d
        .cmd()
        .args(["pairs", "h.wmk", "-k", "1", "--exact"])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let k1: Vec<PairLine> = json_lines(&out);
    let mut seen = std::collections::BTreeSet::new();
    for p in &k1 {
        let key = (
            p.a.item.clone().min(p.b.item.clone()),
            p.a.item.clone().max(p.b.item.clone()),
        );
        assert!(seen.insert(key), "pair twice");
    }
    assert!(k1
        .iter()
        .any(|p| p.a.item == "Orvane Quay" && p.b.item == "Orvane Qauy"));
    drop(index);
}

#[test]
fn pairs_from_a_queries_file_carry_the_line_and_groups_are_written() {
    let d = Dir::new();
    let input = d.write("harbours.txt", HARBOURS.as_bytes());
    d.build(&input, "h.wmk", &["-q"]);
    d.write("q.txt", b"Kath\nnothing near\nBrindle Hlme\n");
    let out = d
        .cmd()
        .args(["pairs", "h.wmk", "--queries", "q.txt", "--within", "1"])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let got: Vec<LookupLine> = json_lines(&out);
    let lines: Vec<(usize, &str, &str, f64)> = got
        .iter()
        .map(|l| (l.line, l.query.as_str(), l.item.as_str(), l.distance))
        .collect();
    assert_eq!(
        lines,
        [
            (1, "Kath", "Kath", 0.0),
            (1, "Kath", "Keth", 1.0),
            (1, "Kath", "Katt", 1.0),
            (3, "Brindle Hlme", "Brindle Holme", 1.0)
        ]
    );
    // A fraction of the longer length: 0.15 × 4 chars allows no edit, 0.15 × 13 one.
    let out = d
        .cmd()
        .args([
            "pairs",
            "h.wmk",
            "--queries",
            "q.txt",
            "--within-fraction",
            "0.15",
        ])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let got: Vec<LookupLine> = json_lines(&out);
    let items: Vec<&str> = got.iter().map(|l| l.item.as_str()).collect();
    assert_eq!(items, ["Kath", "Brindle Holme"]);
    // query --within-fraction: the same rule.
    d.cmd()
        .args(["query", "h.wmk", "--within-fraction", "0.15"])
        .write_stdin("Brindle Hlme\n")
        .assert()
        .success()
        .stdout(
            predicate::str::contains("Brindle Holme")
                .and(predicate::str::contains("\"Brindle Holm\"").not()),
        );
    // Groups: the chain Keth–Kath–Katt–Matt is one component, but not one centre group.
    let run = |args: &[&str]| -> Vec<GroupLine> {
        let out = d
            .cmd()
            .args(args)
            .assert()
            .success()
            .get_output()
            .stdout
            .clone();
        json_lines(&out)
    };
    let comps = run(&[
        "groups",
        "h.wmk",
        "--within",
        "1",
        "--grouping",
        "components",
    ]);
    assert_eq!(comps.len(), 2);
    assert_eq!(comps[0].items, ["Keth", "Kath", "Katt", "Matt"]);
    assert_eq!((comps[0].group, comps[0].size), (1, 4));
    assert!(comps[0].centre.is_none());
    let centre = run(&["groups", "h.wmk", "--within", "1"]);
    assert_eq!(centre[0].items, ["Keth", "Kath", "Katt"]);
    assert_eq!(centre[0].centre, Some(serde_json::json!(1)));
    assert_eq!(centre[0].ids, [0, 1, 2].map(|i| serde_json::json!(i)));
    let all = run(&["groups", "h.wmk", "--within", "1", "--singletons"]);
    assert_eq!(all.iter().map(|g| g.size).sum::<usize>(), 9);
}

/// One output line of `pairs --queries --errors-inline`: a pair or a refused query.
#[derive(Debug, Deserialize)]
#[serde(untagged)]
enum LookupReply {
    Pair {
        line: usize,
        query: String,
        item: String,
        distance: f64,
    },
    Refused {
        line: usize,
        query: String,
        error: String,
    },
}

#[test]
fn pairs_from_a_queries_file_report_bad_lines_inline_with_errors_inline() {
    let d = Dir::new();
    let codes = "ACGTACGT\nACGTACGA\nTTGTACGT\nGGGGCCCC\n";
    let input = d.write("codes.txt", codes.as_bytes());
    d.build(
        &input,
        "c.wmk",
        &["--metric", "hamming", "--dim", "2", "-q"],
    );
    // Line 2 is too short for Hamming distance, line 3 is not UTF-8.
    d.write("q.txt", b"ACGTACGG\nACGT\n\xffCGTACGT\nGGGGCCCA\n");
    // Without the option the first bad line stops the command before any pair.
    d.cmd()
        .args(["pairs", "c.wmk", "--queries", "q.txt", "--within", "1"])
        .assert()
        .code(2)
        .stdout("")
        .stderr(predicate::str::contains(
            "q.txt:3: the query is not valid UTF-8",
        ));
    for mode in [
        &["--within", "1"][..],
        &["-k", "1"],
        &["-k", "1", "--exact"],
    ] {
        let out = d
            .cmd()
            .args(["pairs", "c.wmk", "--queries", "q.txt", "--errors-inline"])
            .args(mode)
            .assert()
            .success()
            .get_output()
            .stdout
            .clone();
        let replies: Vec<LookupReply> = json_lines(&out);
        let mut refused = Vec::new();
        let mut answered = BTreeMap::<usize, Vec<(String, f64)>>::new();
        for r in replies {
            match r {
                LookupReply::Pair {
                    line,
                    query,
                    item,
                    distance,
                } => {
                    // The distance is Hamming's, checked with strsim.
                    assert_eq!(distance, strsim::hamming(&query, &item).unwrap() as f64);
                    answered.entry(line).or_default().push((item, distance));
                }
                LookupReply::Refused { line, query, error } => refused.push((line, query, error)),
            }
        }
        assert_eq!(refused.len(), 2, "{mode:?}: {refused:?}");
        assert_eq!((refused[0].0, refused[0].1.as_str()), (2, "ACGT"));
        assert!(
            refused[0].2.contains("the query has 4 characters"),
            "{}",
            refused[0].2
        );
        assert_eq!(
            (refused[1].0, refused[1].1.as_str()),
            (3, "\u{fffd}CGTACGT")
        );
        assert!(
            refused[1].2.contains("not valid UTF-8 (byte 1)"),
            "{}",
            refused[1].2
        );
        // The good lines before and after the bad ones are answered: ACGTACGG is one
        // substitution from both ACGTACGT and ACGTACGA, GGGGCCCA one from GGGGCCCC.
        assert_eq!(
            answered.keys().copied().collect::<Vec<_>>(),
            [1, 4],
            "{mode:?}"
        );
        assert!(answered[&1].iter().all(|(_, dist)| *dist == 1.0));
        assert_eq!(answered[&4], [("GGGGCCCC".to_string(), 1.0)]);
    }
    // TSV: `line, query, error, message`, the word `error` where a pair has its id.
    let out = d
        .cmd()
        .args(["pairs", "c.wmk", "--queries", "q.txt", "--within", "1"])
        .args(["--errors-inline", "--format", "tsv", "--summary"])
        .assert()
        .success()
        .stderr(predicate::str::contains("2 refused"))
        .get_output()
        .stdout
        .clone();
    let text = String::from_utf8(out).unwrap();
    let rows: Vec<Vec<&str>> = text.lines().map(|l| l.split('\t').collect()).collect();
    assert_eq!(rows.len(), 5, "{text}");
    assert_eq!(rows[2][..3], ["2", "ACGT", "error"]);
    assert_eq!(rows[2].len(), 4);
    assert_eq!(rows[3][..3], ["3", "\u{fffd}CGTACGT", "error"]);
    assert_eq!(rows[4], ["4", "GGGGCCCA", "3", "GGGGCCCC", "1"]);
    // Only look-ups have lines to report.
    d.cmd()
        .args(["pairs", "c.wmk", "--within", "1", "--errors-inline"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("--queries"));
}

#[test]
fn bad_input_pairs_and_groups_refuse_bad_radii_and_missing_modes() {
    let d = Dir::new();
    let input = d.write("harbours.txt", HARBOURS.as_bytes());
    d.build(&input, "h.wmk", &["-q"]);
    let cases: [(&[&str], &str); 7] = [
        (
            &["pairs", "h.wmk", "--within", "-1"],
            "--within must be a finite distance",
        ),
        (
            &["pairs", "h.wmk", "--within", "two"],
            "invalid value 'two'",
        ),
        (&["pairs", "h.wmk"], "pairs needs -k K"),
        (
            &["pairs", "h.wmk", "--within-fraction", "-0.5"],
            "--within-fraction must be",
        ),
        (
            &["pairs", "h.wmk", "-k", "0", "--exact"],
            "-k must be at least 1",
        ),
        (&["groups", "h.wmk"], "groups needs --within R"),
        (
            &["query", "h.wmk", "--within-fraction", "NaN"],
            "--within-fraction must be",
        ),
    ];
    for (args, msg) in cases {
        d.cmd()
            .args(args)
            .write_stdin("Kath\n")
            .assert()
            .code(2)
            .stderr(predicate::str::contains(msg));
    }
    // No lower bound (FastMap): exact pairs and groups refused with exit 2.
    d.build(&input, "f.wmk", &["-q", "--embedding", "fastmap"]);
    for args in [
        &["pairs", "f.wmk", "--within", "1"][..],
        &["pairs", "f.wmk", "-k", "2", "--exact"],
        &["groups", "f.wmk", "--within", "1"],
    ] {
        d.cmd()
            .args(args)
            .assert()
            .code(2)
            .stderr(predicate::str::contains("lower bound"));
    }
    d.cmd()
        .args(["pairs", "f.wmk", "-k", "2"])
        .assert()
        .success();
    // A fraction on vectors.
    let v = d.write("v.csv", b"1,2\n1,3\n5,5\n");
    d.build(&v, "v.wmk", &["-q", "--metric", "l2"]);
    d.cmd()
        .args(["pairs", "v.wmk", "--within-fraction", "0.2"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains("needs items that are text"));
}

/// A metric of the library user's own: edit distance over words (each word one symbol),
/// computed by strsim's `generic_levenshtein`.
struct WordEdits;
struct WordEditsQuery(Vec<String>);

impl Metric for WordEdits {
    type Prepared = WordEditsQuery;
    fn name(&self) -> &str {
        "word-edits"
    }
    fn is_integral(&self) -> bool {
        true
    }
    fn prepare(&self, q: &[u8]) -> WordEditsQuery {
        WordEditsQuery(words_of(q))
    }
}

fn words_of(s: &[u8]) -> Vec<String> {
    String::from_utf8_lossy(s)
        .split(' ')
        .map(str::to_string)
        .collect()
}

impl waymark::metric::PreparedQuery for WordEditsQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        // strsim::generic_levenshtein: edit distance over any sequence, here of words.
        strsim::generic_levenshtein(&self.0, &words_of(item)) as f64
    }
}

#[test]
fn a_metric_of_your_own_pairs_match_brute_force() {
    // Reference: strsim::generic_levenshtein over the words of each pair.
    let names = register(1500, 29);
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("c.wmk");
    let metric = waymark::metric::CustomMetric::new(WordEdits);
    let corpus = crate::util::corpus(&names);
    let opts = waymark::index::BuildOptions {
        dim: 8,
        ..Default::default()
    };
    waymark::index::build_index_with_metric(&corpus, "test", &opts, &metric, &path, &()).unwrap();
    let index = Index::open_with_metric(&path, &metric).unwrap();
    let reference =
        |a: &[u8], b: &[u8]| strsim::generic_levenshtein(&words_of(a), &words_of(b)) as f64;
    let radii = [
        Radius::Fixed(1.0),
        Radius::Fixed(0.0),
        Radius::Fraction(0.05),
    ];
    assert!(check_metric(&index, &radii, 4, &reference, "custom") > 100);
}

// ---------------------------------------------------------------------------------------
// The README's deduplication example, scored against the planted truth.

/// The README's deduplication example: the trading register (`demo-data/traders.csv`)
/// grouped with `--within-fraction 0.15` after folding case and punctuation and sorting the
/// words. Its groups are scored here against `traders-truth.csv` (which codes are one firm),
/// over unordered pairs of codes, and `scripts/score-dedup.py` must print the same figures.
/// The floors sit under the figures the README shows (precision 0.978, recall 0.769,
/// measured by the same commands), so a change in the join or the normalisations that loses
/// duplicates or merges firms shows here.
#[test]
fn the_readme_deduplication_example_scores_as_shown() {
    let d = Dir::new();
    let idx = d.build(
        &demo("traders.csv"),
        "traders.wmk",
        &[
            "--field",
            "name",
            "--id-field",
            "code",
            "--fold-case",
            "--fold-punct",
            "--sort-tokens",
            "-q",
        ],
    );
    let out = d
        .cmd()
        .args([
            "groups",
            idx.to_str().unwrap(),
            "--within-fraction",
            "0.15",
            "-q",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let groups_file = d.write("groups.jsonl", &out.stdout);

    #[derive(Deserialize)]
    struct G {
        ids: Vec<String>,
    }
    let firm: BTreeMap<String, String> = {
        let mut r = csv::Reader::from_path(demo("traders-truth.csv")).unwrap();
        r.records()
            .map(|rec| {
                let rec = rec.unwrap();
                (rec[0].to_string(), rec[1].to_string())
            })
            .collect()
    };
    let mut per_firm: BTreeMap<&str, usize> = BTreeMap::new();
    for f in firm.values() {
        *per_firm.entry(f).or_default() += 1;
    }
    let true_pairs: usize = per_firm.values().map(|&m| m * (m - 1) / 2).sum();
    let (mut claimed, mut right) = (0usize, 0usize);
    for g in json_lines::<G>(&out.stdout) {
        for (i, a) in g.ids.iter().enumerate() {
            for b in &g.ids[i + 1..] {
                claimed += 1;
                right += usize::from(firm[a] == firm[b]);
            }
        }
    }
    let precision = right as f64 / claimed as f64;
    let recall = right as f64 / true_pairs as f64;
    assert!(precision >= 0.97, "precision {precision:.3}");
    assert!(recall >= 0.75, "recall {recall:.3}");

    // The scoring script the README uses agrees.
    let script = std::process::Command::new("python3")
        .arg(repo_file("scripts/score-dedup.py"))
        .arg(&groups_file)
        .arg(demo("traders-truth.csv"))
        .output()
        .expect("python3 runs the scoring script");
    assert!(
        script.status.success(),
        "{}",
        String::from_utf8_lossy(&script.stderr)
    );
    let printed = String::from_utf8(script.stdout).unwrap();
    let expected = format!(
        "claimed pairs {claimed}, right {right}, true pairs {true_pairs}: \
         precision {precision:.3}, recall {recall:.3}\n"
    );
    assert_eq!(printed, expected);
}

/// `--refine-rounds` at the top of its range ends: a round that changes no list stops the
/// refinement, so u64::MAX rounds give the lists that enough rounds give, and end.
#[test]
fn bad_input_refine_rounds_at_the_top_of_their_range_end_when_nothing_changes() {
    let d = Dir::new();
    let names: Vec<String> = demo_lines("names.txt").into_iter().take(400).collect();
    let input = d.write("names.txt", names.join("\n").as_bytes());
    let idx = d.build(&input, "n.wmk", &["--dim", "8", "-q"]);
    let run = |rounds: &str| {
        let out = d
            .cmd()
            .args([
                "pairs",
                idx.to_str().unwrap(),
                "-k",
                "3",
                "--candidates",
                "5",
            ])
            .args(["--refine-rounds", rounds, "-q"])
            .timeout(std::time::Duration::from_secs(60))
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        out.stdout
    };
    let endless = run("18446744073709551615");
    assert_eq!(endless, run("400"));
    assert!(!endless.is_empty());
}
