//! The cheap lower bounds of exact and range queries, metric by metric: each never exceeds
//! the true distance on random items, with the distance taken from outside the project
//! where a reference exists (strsim's Damerau–Levenshtein, a position-by-position Hamming
//! count, the standard library's `HashSet` for Jaccard, plain `f64` sums for vectors), and
//! exact and range answers that use them equal `eval`'s brute force. Then the note printed
//! when a request measures most of the items anyway.

use std::collections::HashSet;

use proptest::prelude::*;
use waymark::coords::columns::CharBins;
use waymark::eval::brute_force;
use waymark::index::{BuildOptions, Index};
use waymark::ingest::Corpus;
use waymark::metric::{
    vector_bytes, AnyMetric, CostTable, LevenshteinQuery, Metric, MetricSpec, Norm, Tokens,
};
use waymark::search::{Neighbor, Searcher};

use crate::util::{build_in, corpus, first_words, word_list_path, Dir};

/// A metric's sketch of one item.
fn sketch(m: &AnyMetric, item: &[u8]) -> Vec<f64> {
    let mut s = vec![0.0; m.sketch_width()];
    m.sketch(item, &mut s);
    s
}

/// The sketch bound of two items under `m`.
fn sketch_bound(m: &AnyMetric, a: &[u8], b: &[u8]) -> f64 {
    m.sketch_bound(&sketch(m, a), &sketch(m, b))
}

/// Strings over a small alphabet with a non-ASCII char, so that counts collide often.
fn text() -> impl Strategy<Value = String> {
    proptest::string::string_regex("[abcdeé ]{0,12}").unwrap()
}

/// Barcode-like strings over the bases and N, with a rare other char.
fn bases() -> impl Strategy<Value = String> {
    proptest::string::string_regex("[ACGTNx]{0,14}").unwrap()
}

/// Words of a small vocabulary joined by spaces (many shared words).
fn words() -> impl Strategy<Value = String> {
    prop::collection::vec(
        prop::sample::select(
            &[
                "ferry", "quay", "north", "north", "Skär", "ö", "a", "keth", "kath", "pier",
            ][..],
        ),
        0..7,
    )
    .prop_map(|w| w.join(" "))
}

/// Jaccard distance of two sets by the standard library (independent of the metric's
/// sorted merge).
fn naive_jaccard(a: &HashSet<String>, b: &HashSet<String>) -> f64 {
    let union = a.union(b).count();
    if union == 0 {
        return 0.0;
    }
    1.0 - a.intersection(b).count() as f64 / union as f64
}

fn grams(s: &str, q: usize) -> HashSet<String> {
    let c: Vec<char> = s.chars().collect();
    if c.is_empty() {
        return HashSet::new();
    }
    if c.len() <= q {
        return [s.to_string()].into();
    }
    c.windows(q).map(|w| w.iter().collect()).collect()
}

/// A vector of `dim` components, some runs zero, some large (so per-part norms differ).
fn vector(dim: usize) -> impl Strategy<Value = Vec<f32>> {
    prop::collection::vec(
        prop_oneof![Just(0.0f32), -50.0f32..50.0, -1e4f32..1e4],
        dim..=dim,
    )
}

/// L1, L2 and L∞ distances in plain `f64` sums.
fn plain(norm: Norm, a: &[f32], b: &[f32]) -> f64 {
    let d = a.iter().zip(b).map(|(x, y)| f64::from(*x) - f64::from(*y));
    match norm {
        Norm::L1 => d.map(f64::abs).sum(),
        Norm::L2 => d.map(|v| v * v).sum::<f64>().sqrt(),
        Norm::Linf => d.fold(0.0, |m, v| m.max(v.abs())),
        Norm::Angular => unreachable!("compared with the metric itself"),
    }
}

const COST_FILES: &[&str] = &[
    // The demo's nucleotide costs (transitions cheaper than transversions).
    "indel * 1.5\nsub * * 1\nsub A G 0.5\nsub C T 0.5\n",
    // Cheap indels, dear substitutions.
    "indel * 0.3\nsub * * 0.5\nindel N 0.2\n",
    // A free substitution: then only the length bound is left.
    "indel * 1\nsub * * 1\nsub A a 0\n",
    // Costs that do not add up exactly in binary.
    "indel * 0.1\nsub * * 0.2\n",
];

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    /// Damerau: the char-count gap (one insertion, deletion or substitution changes each
    /// one-sided count sum by at most one; a transposition none) and the signature gap,
    /// against strsim's unrestricted Damerau–Levenshtein.
    #[test]
    fn damerau_is_bounded_by_char_counts_and_signatures(
        items in prop::collection::vec(text(), 2..12),
    ) {
        let bins = CharBins::fit(items.iter().map(|s| s.as_bytes()));
        prop_assert!(MetricSpec::Damerau.open(None).unwrap().bounded_by_char_counts());
        for a in &items {
            for b in &items {
                let d = strsim::damerau_levenshtein(a, b) as u32;
                let gap = CharBins::gap(&bins.counts(a.as_bytes()), &bins.counts(b.as_bytes()));
                prop_assert!(gap <= d, "{a:?} {b:?}: count gap {gap} > {d}");
                let sig = LevenshteinQuery::signature_gap(
                    LevenshteinQuery::signature(a.as_bytes()),
                    LevenshteinQuery::signature(b.as_bytes()),
                );
                prop_assert!(sig <= d, "{a:?} {b:?}: signature gap {sig} > {d}");
            }
        }
    }

    /// Hamming: at least the Levenshtein distance, so at least the count and signature
    /// gaps; the distance here is a position-by-position count of differing chars.
    #[test]
    fn hamming_is_bounded_by_char_counts_and_signatures(
        items in prop::collection::vec(proptest::string::string_regex("[ACGTé]{9}").unwrap(), 2..12),
    ) {
        let bins = CharBins::fit(items.iter().map(|s| s.as_bytes()));
        for a in &items {
            for b in &items {
                let d = a.chars().zip(b.chars()).filter(|(x, y)| x != y).count() as u32;
                let gap = CharBins::gap(&bins.counts(a.as_bytes()), &bins.counts(b.as_bytes()));
                prop_assert!(gap <= d, "{a:?} {b:?}: count gap {gap} > {d}");
                let sig = LevenshteinQuery::signature_gap(
                    LevenshteinQuery::signature(a.as_bytes()),
                    LevenshteinQuery::signature(b.as_bytes()),
                );
                prop_assert!(sig <= d);
            }
        }
    }

    /// Weighted edits: length, counts and signature times the smallest costs, against the
    /// metric's own distance (itself checked against strsim in `metric_weighted`).
    #[test]
    fn weighted_bound_never_exceeds_the_distance(
        a in bases(), b in bases(), file in 0usize..4,
    ) {
        let costs = CostTable::parse(COST_FILES[file], "t.costs").unwrap();
        let m = MetricSpec::WeightedEdit { costs: costs.rules().clone() }.open(None).unwrap();
        let d = m.distance(a.as_bytes(), b.as_bytes());
        let lb = sketch_bound(&m, a.as_bytes(), b.as_bytes());
        prop_assert!(lb <= d, "{a:?} {b:?}: bound {lb} > distance {d}");
    }

    /// Token edit: the difference of word counts.
    #[test]
    fn token_edit_bound_never_exceeds_the_distance(a in words(), b in words()) {
        let m = MetricSpec::TokenEdit.open(None).unwrap();
        let d = m.distance(a.as_bytes(), b.as_bytes());
        let lb = sketch_bound(&m, a.as_bytes(), b.as_bytes());
        prop_assert!(lb <= d, "{a:?} {b:?}: bound {lb} > distance {d}");
        let counts = a.split_whitespace().count().abs_diff(b.split_whitespace().count());
        prop_assert_eq!(lb, counts as f64);
    }

    /// Jaccard on words and on q-grams: set sizes and element signatures, against the
    /// standard library's `HashSet`.
    #[test]
    fn jaccard_bound_never_exceeds_the_distance(a in words(), b in words(), q in 1usize..4) {
        let m = MetricSpec::Jaccard { tokens: Tokens::Whitespace }.open(None).unwrap();
        let set = |s: &str| s.split_whitespace().map(String::from).collect::<HashSet<_>>();
        let d = naive_jaccard(&set(&a), &set(&b));
        let lb = sketch_bound(&m, a.as_bytes(), b.as_bytes());
        prop_assert!(lb <= m.distance(a.as_bytes(), b.as_bytes()));
        prop_assert!(lb <= d + 1e-12, "{a:?} {b:?}: bound {lb} > distance {d}");
        let m = MetricSpec::Jaccard { tokens: Tokens::QGrams(q) }.open(None).unwrap();
        let d = naive_jaccard(&grams(&a, q), &grams(&b, q));
        let lb = sketch_bound(&m, a.as_bytes(), b.as_bytes());
        prop_assert!(lb <= m.distance(a.as_bytes(), b.as_bytes()));
        prop_assert!(lb <= d + 1e-12, "{a:?} {b:?} q {q}: bound {lb} > distance {d}");
    }

    /// Vectors: per-part norms, for L1, L2, L∞ (against plain sums) and angular (against
    /// the metric itself), the zero vector included.
    #[test]
    fn vector_bounds_never_exceed_the_distance(
        (a, b) in (1usize..40).prop_flat_map(|dim| (vector(dim), vector(dim))),
        scale in prop_oneof![Just(1.0f32), Just(-2.0f32), Just(0.0f32)],
    ) {
        let dim = a.len() as u32;
        // Also the same direction: angular distance 0.
        let c: Vec<f32> = a.iter().map(|x| x * scale).collect();
        for norm in [Norm::L1, Norm::L2, Norm::Linf, Norm::Angular] {
            let m = MetricSpec::Vector { norm, dim }.open(None).unwrap();
            for (x, y) in [(&a, &b), (&a, &c), (&b, &c)] {
                let (bx, by) = (vector_bytes(x), vector_bytes(y));
                let d = m.distance(&bx, &by);
                let lb = sketch_bound(&m, &bx, &by);
                prop_assert!(lb <= d, "{norm:?}: bound {lb} > distance {d}");
                if norm != Norm::Angular {
                    prop_assert!(lb <= plain(norm, x, y));
                }
            }
        }
    }
}

/// Builds `c` under `metric` (landmarks, `dim` coordinates) in `dir`.
fn build(c: &Corpus, metric: MetricSpec, dim: usize, dir: &tempfile::TempDir) -> Index {
    build_in(
        dir.path(),
        "t.wmk",
        c,
        &BuildOptions {
            metric,
            dim,
            seed: 3,
            ..BuildOptions::default()
        },
    )
}

/// A vector corpus: rows as text items, the f32 bytes as keys.
fn vector_corpus(rows: &[Vec<f32>]) -> Corpus {
    let items: Vec<String> = rows
        .iter()
        .map(|r| {
            r.iter()
                .map(|v| v.to_string())
                .collect::<Vec<_>>()
                .join(",")
        })
        .collect();
    let keys = rows.iter().map(|r| vector_bytes(r)).collect();
    Corpus {
        keys: Some(keys),
        ..corpus(&items)
    }
}

/// Exact k-NN and range answers (alone and with -k) equal `eval`'s brute force, which
/// measures every item, ties included.
fn check_against_brute_force(idx: &Index, queries: &[String], k: usize, r: f64) {
    let s = Searcher::new(idx);
    let n = idx.len();
    for q in queries {
        let got = s.search_exact(q, k, &mut Default::default()).unwrap();
        assert_eq!(
            got.neighbors,
            brute_force(idx, q, k).unwrap(),
            "{q:?} k {k}"
        );
        let all = brute_force(idx, q, n).unwrap();
        let want: Vec<Neighbor> = all.into_iter().filter(|x| x.distance <= r).collect();
        let got = s
            .search_within(q, r, None, &mut Default::default())
            .unwrap();
        assert_eq!(got.neighbors, want, "{q:?} within {r}");
        let top = s
            .search_within(q, r, Some(k), &mut Default::default())
            .unwrap();
        assert_eq!(
            top.neighbors[..],
            want[..want.len().min(k)],
            "{q:?} within {r} -k {k}"
        );
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]

    #[test]
    fn damerau_answers_equal_the_brute_force(
        items in prop::collection::vec(text(), 1..60),
        queries in prop::collection::vec(text(), 1..4),
        k in 1usize..8, r in 0usize..5, dim in 1usize..6,
    ) {
        let dir = tempfile::tempdir().unwrap();
        let idx = build(&corpus(&items), MetricSpec::Damerau, dim, &dir);
        check_against_brute_force(&idx, &queries, k, r as f64);
    }

    #[test]
    fn hamming_answers_equal_the_brute_force(
        items in prop::collection::vec(proptest::string::string_regex("[ACGTé]{8}").unwrap(), 1..60),
        queries in prop::collection::vec(proptest::string::string_regex("[ACGTé]{8}").unwrap(), 1..4),
        k in 1usize..8, r in 0usize..5, dim in 1usize..6,
    ) {
        let dir = tempfile::tempdir().unwrap();
        let idx = build(&corpus(&items), MetricSpec::Hamming { length: 8 }, dim, &dir);
        check_against_brute_force(&idx, &queries, k, r as f64);
    }

    #[test]
    fn weighted_answers_equal_the_brute_force(
        items in prop::collection::vec(bases(), 1..60),
        queries in prop::collection::vec(bases(), 1..4),
        k in 1usize..8, r in 0.0f64..4.0, dim in 1usize..6, file in 0usize..4,
    ) {
        let dir = tempfile::tempdir().unwrap();
        let costs = CostTable::parse(COST_FILES[file], "t.costs").unwrap();
        let spec = MetricSpec::WeightedEdit { costs: costs.rules().clone() };
        let idx = build(&corpus(&items), spec, dim, &dir);
        check_against_brute_force(&idx, &queries, k, r);
    }

    #[test]
    fn token_edit_answers_equal_the_brute_force(
        items in prop::collection::vec(words(), 1..60),
        queries in prop::collection::vec(words(), 1..4),
        k in 1usize..8, r in 0.0f64..3.0, dim in 1usize..6,
    ) {
        let dir = tempfile::tempdir().unwrap();
        let idx = build(&corpus(&items), MetricSpec::TokenEdit, dim, &dir);
        check_against_brute_force(&idx, &queries, k, r);
    }

    #[test]
    fn jaccard_answers_equal_the_brute_force(
        items in prop::collection::vec(words(), 1..60),
        queries in prop::collection::vec(words(), 1..4),
        k in 1usize..8, r in 0.0f64..1.0, dim in 1usize..6, q in 0usize..4,
    ) {
        let dir = tempfile::tempdir().unwrap();
        let tokens = match q {
            0 => Tokens::Whitespace,
            q => Tokens::QGrams(q),
        };
        let idx = build(&corpus(&items), MetricSpec::Jaccard { tokens }, dim, &dir);
        check_against_brute_force(&idx, &queries, k, r);
    }

    #[test]
    fn vector_answers_equal_the_brute_force(
        (rows, queries) in (1usize..20).prop_flat_map(|dim| (
            prop::collection::vec(vector(dim), 1..50),
            prop::collection::vec(vector(dim), 1..3),
        )),
        k in 1usize..8, r in 0.0f64..2e4, dim in 1usize..6, norm in 0usize..4,
    ) {
        let norm = [Norm::L1, Norm::L2, Norm::Linf, Norm::Angular][norm];
        // Angular distances lie in [0, 1].
        let r = if norm == Norm::Angular { r / 2e4 } else { r };
        let spec = MetricSpec::Vector { norm, dim: rows[0].len() as u32 };
        let dir = tempfile::tempdir().unwrap();
        let idx = build(&vector_corpus(&rows), spec, dim, &dir);
        let queries: Vec<String> = queries
            .iter()
            .chain(rows.iter().take(2))
            .map(|q| q.iter().map(|v| v.to_string()).collect::<Vec<_>>().join(","))
            .collect();
        check_against_brute_force(&idx, &queries, k, r);
    }
}

/// Invented names of the Vessmark archipelago: a stem of invented syllables and a street
/// kind, as in `demo-data/generate.py` (fixed seed).
fn invented_names(n: usize) -> Vec<String> {
    const ONSETS: [&str; 10] = ["", "b", "d", "k", "th", "sk", "br", "hv", "st", "m"];
    const VOWELS: [&str; 7] = ["a", "e", "i", "o", "ø", "å", "ei"];
    const CODAS: [&str; 6] = ["", "n", "r", "ll", "sk", "nd"];
    const KINDS: [&str; 8] = [
        "Quay", "Row", "Steps", "Strand", "Reach", "Landing", "Wynd", "Brae",
    ];
    let mut seed = 1729u64;
    let mut next = |m: usize| {
        seed = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (seed >> 33) as usize % m
    };
    (0..n)
        .map(|_| {
            let mut stem = String::new();
            for _ in 0..2 + next(2) {
                stem += ONSETS[next(10)];
                stem += VOWELS[next(7)];
                stem += CODAS[next(6)];
            }
            match next(3) {
                0 => stem,
                1 => format!("{stem} {}", KINDS[next(8)]),
                _ => format!("Old {stem} {}", KINDS[next(8)]),
            }
        })
        .collect()
}

/// On word sets of names the landmark bound alone keeps nearly every item for
/// `--within 0.35` (every name is at distance 1 from most landmarks); the sizes and
/// signatures leave few to measure, and the answers still equal the brute force.
#[test]
fn jaccard_sketches_leave_few_names_to_measure() {
    let names = invented_names(3000);
    let dir = tempfile::tempdir().unwrap();
    let spec = MetricSpec::Jaccard {
        tokens: Tokens::Whitespace,
    };
    let idx = build(&corpus(&names), spec, 16, &dir);
    let queries: Vec<String> = names.iter().step_by(150).cloned().collect();
    check_against_brute_force(&idx, &queries, 5, 0.35);
    let s = Searcher::new(&idx);
    let mut computed = 0;
    for q in &queries {
        let f = s
            .search_within(q, 0.35, None, &mut Default::default())
            .unwrap();
        computed += f.certificate.unwrap().computed;
    }
    let per = computed as f64 / queries.len() as f64;
    assert!(
        per < 0.1 * names.len() as f64,
        "{per} of {} items measured per query",
        names.len()
    );
}

/// `query --within R` prints one note on stderr when most items are measured (here all
/// are within R), and none when the bounds narrow the request.
#[test]
fn a_request_that_measures_most_items_is_noted_once() {
    // Debian's word list (/usr/share/dict/american-english), its first 1,200 words.
    let _ = word_list_path();
    let d = Dir::new();
    let words = first_words(1200);
    let input = d.write("w.txt", (words.join("\n") + "\n").as_bytes());
    let idx = d.build(&input, "w.wmk", &["--dim", "8", "-q"]);
    let queries = "apple\nzebra\nharbour\n";
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["--within", "60"])
        .write_stdin(queries)
        .assert()
        .success()
        .get_output()
        .clone();
    let err = String::from_utf8_lossy(&out.stderr);
    let notes: Vec<&str> = err.lines().filter(|l| l.contains("note:")).collect();
    assert_eq!(notes.len(), 1, "{err}");
    assert_eq!(
        notes[0],
        "waymark: note: --within 60 measures 100% of the items per query under levenshtein: \
         the bounds cannot narrow it; a full scan costs the same"
    );
    // Every answer is still given.
    assert_eq!(String::from_utf8_lossy(&out.stdout).lines().count(), 3);
    for args in [&["--within", "1"][..], &["--exact", "-k", "3"]] {
        let out = d
            .cmd()
            .arg("query")
            .arg(&idx)
            .args(args)
            .write_stdin(queries)
            .assert()
            .success()
            .get_output()
            .clone();
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(!err.contains("note:"), "{args:?}: {err}");
    }
}
