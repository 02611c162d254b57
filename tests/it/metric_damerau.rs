//! Unrestricted Damerau–Levenshtein against `strsim::damerau_levenshtein` (a general-purpose
//! string-similarity crate; its unrestricted form over `char`s), plus the metric axioms.

use proptest::prelude::*;
use waymark::metric::{Damerau, Metric, MetricKind, PreparedQuery};

use crate::util::word_list;

/// A small alphabet so that transpositions and repeated symbols are common.
const ALPHABET: &[char] = &['a', 'b', 'c', 'd', 'a', 'b', 'é', 'ø', '中', '😀'];

fn string() -> impl Strategy<Value = String> {
    prop::collection::vec(prop::sample::select(ALPHABET), 0..40)
        .prop_map(|v| v.into_iter().collect())
}

proptest! {
    #[test]
    fn matches_strsim(a in string(), b in string()) {
        // Outside reference: strsim::damerau_levenshtein (unrestricted).
        let expected = strsim::damerau_levenshtein(&a, &b) as f64;
        let q = Damerau.prepare(a.as_bytes());
        prop_assert_eq!(q.distance(b.as_bytes()), expected);
        prop_assert_eq!(q.distance_within(b.as_bytes(), expected), Some(expected));
        if expected > 0.0 {
            prop_assert_eq!(q.distance_within(b.as_bytes(), expected - 1.0), None);
        }
        prop_assert_eq!(Damerau.distance(b.as_bytes(), a.as_bytes()), expected);
    }

    #[test]
    fn metric_axioms(a in string(), b in string(), c in string()) {
        let d = |x: &str, y: &str| Damerau.distance(x.as_bytes(), y.as_bytes());
        prop_assert_eq!(d(&a, &a), 0.0);
        prop_assert_eq!(d(&a, &b), d(&b, &a));
        if a != b { prop_assert!(d(&a, &b) > 0.0); }
        prop_assert!(d(&a, &c) <= d(&a, &b) + d(&b, &c));
        prop_assert!(d(&a, &b) <= d(&a, &c) + d(&c, &b));
    }
}

#[test]
fn restricted_form_is_not_a_metric_but_ours_is() {
    // Counter-example CA / AC / ABC; values from strsim's two functions.
    assert_eq!(strsim::osa_distance("CA", "ABC"), 3);
    assert_eq!(strsim::osa_distance("CA", "AC"), 1);
    assert_eq!(strsim::osa_distance("AC", "ABC"), 1);
    assert_eq!(strsim::damerau_levenshtein("CA", "ABC"), 2);
    assert_eq!(Damerau.distance(b"CA", b"ABC"), 2.0);
    assert_eq!(Damerau.distance(b"CA", b"AC"), 1.0);
    assert_eq!(Damerau.distance(b"AC", b"ABC"), 1.0);
}

#[test]
fn check_values() {
    // Textbook values (common practice): a swap is one edit, Levenshtein's kitten/sitting stays 3.
    assert_eq!(Damerau.distance(b"kitten", b"sitting"), 3.0);
    assert_eq!(Damerau.distance(b"Vessmark", b"Vsesmark"), 1.0);
    assert_eq!(Damerau.distance("Skär".as_bytes(), "Sräk".as_bytes()), 2.0);
    assert_eq!(Damerau.distance(b"", b"abc"), 3.0);
    assert_eq!(Damerau.kind(), MetricKind::Damerau);
    assert!(MetricKind::Damerau.is_integral());
}

#[test]
fn debian_words_against_strsim() {
    // Open data: Debian's wamerican list (scripts/test-data.sh installs it); a sample of pairs.
    let text = word_list();
    let words: Vec<&str> = text.lines().collect();
    assert_eq!(words.len(), 104_334, "wamerican's word count");
    for (i, w) in words.iter().step_by(997).enumerate() {
        let q = Damerau.prepare(w.as_bytes());
        for v in words.iter().skip(i * 13).step_by(7919).take(20) {
            let expected = strsim::damerau_levenshtein(w, v) as f64;
            assert_eq!(q.distance(v.as_bytes()), expected, "{w} / {v}");
        }
    }
}
