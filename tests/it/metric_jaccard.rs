//! Jaccard distance against a naive computation with the standard library's `HashSet`
//! (independent of the sorted-merge code), plus the metric axioms.

use std::collections::HashSet;

use proptest::prelude::*;
use waymark::metric::{Jaccard, Metric, PreparedQuery, Tokens};

fn naive(a: &HashSet<String>, b: &HashSet<String>) -> f64 {
    let union = a.union(b).count();
    if union == 0 {
        return 0.0;
    }
    1.0 - a.intersection(b).count() as f64 / union as f64
}

fn words(s: &str) -> HashSet<String> {
    s.split_whitespace().map(String::from).collect()
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

fn text() -> impl Strategy<Value = String> {
    prop::collection::vec(
        prop::sample::select(&["ferry", "quay", "north", "Skär", " ", "  ", "\t", "ö", "a"][..]),
        0..12,
    )
    .prop_map(|v| v.concat())
}

proptest! {
    #[test]
    fn words_match_naive(a in text(), b in text()) {
        let m = Jaccard::new(Tokens::Whitespace).unwrap();
        let d = m.distance(a.as_bytes(), b.as_bytes());
        prop_assert!((d - naive(&words(&a), &words(&b))).abs() < 1e-12);
    }

    #[test]
    fn qgrams_match_naive(a in text(), b in text(), q in 1usize..5) {
        let m = Jaccard::new(Tokens::QGrams(q)).unwrap();
        let p = m.prepare(a.as_bytes());
        let expected = naive(&grams(&a, q), &grams(&b, q));
        let d = p.distance(b.as_bytes());
        prop_assert!((d - expected).abs() < 1e-12);
        prop_assert_eq!(p.distance_within(b.as_bytes(), d), Some(d));
        if d > 0.0 { prop_assert_eq!(p.distance_within(b.as_bytes(), d - 1e-9), None); }
    }

    #[test]
    fn metric_axioms(a in text(), b in text(), c in text(), q in 1usize..4) {
        for m in [Jaccard::new(Tokens::Whitespace).unwrap(), Jaccard::new(Tokens::QGrams(q)).unwrap()] {
            let d = |x: &str, y: &str| m.distance(x.as_bytes(), y.as_bytes());
            prop_assert_eq!(d(&a, &a), 0.0);
            prop_assert_eq!(d(&a, &b), d(&b, &a));
            prop_assert!((0.0..=1.0).contains(&d(&a, &b)));
            prop_assert!(d(&a, &c) <= d(&a, &b) + d(&b, &c) + 1e-12);
        }
    }
}

#[test]
fn separators_and_options() {
    let m = Jaccard::new(Tokens::Separator("|".into())).unwrap();
    assert_eq!(m.distance(b"a|b||c", b"c|b|a"), 0.0);
    assert_eq!(m.distance(b"a|b", b"b|c"), 1.0 - 1.0 / 3.0);
    assert!(Jaccard::new(Tokens::QGrams(0)).is_err());
    assert!(Jaccard::new(Tokens::Separator(String::new())).is_err());
    // Short items stay distinct under q-grams.
    let g = Jaccard::new(Tokens::QGrams(3)).unwrap();
    assert_eq!(g.distance(b"ab", b"ba"), 1.0);
    assert_eq!(g.distance(b"", b""), 0.0);
}
