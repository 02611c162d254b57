//! Hamming distance against `strsim::hamming` (a general-purpose string-similarity crate
//! that counts differing `char`s and refuses unequal lengths), plus the metric axioms.

use proptest::prelude::*;
use waymark::metric::{check_equal_lengths, Hamming, Metric, MetricError, PreparedQuery};

const ALPHABET: &[char] = &['a', 'b', 'c', '0', '1', '-', 'é', 'ø', '中', '😀'];

fn word(len: usize) -> impl Strategy<Value = String> {
    prop::collection::vec(prop::sample::select(ALPHABET), len).prop_map(|v| v.into_iter().collect())
}

/// Three strings of one random length (up to 150, past the 64-byte chunks of the fast path).
fn triple() -> impl Strategy<Value = (String, String, String)> {
    (0usize..150).prop_flat_map(|n| (word(n), word(n), word(n)))
}

proptest! {
    #[test]
    fn matches_strsim_on_equal_lengths((a, b, _) in triple()) {
        // Outside reference: strsim::hamming.
        let expected = strsim::hamming(&a, &b).unwrap();
        let q = Hamming.prepare(a.as_bytes());
        prop_assert_eq!(q.distance(b.as_bytes()), expected as f64);
        prop_assert_eq!(q.distance_within(b.as_bytes(), expected as f64), Some(expected as f64));
        if expected > 0 {
            prop_assert_eq!(q.distance_within(b.as_bytes(), expected as f64 - 0.5), None);
        }
    }

    #[test]
    fn metric_axioms((a, b, c) in triple(), cut in 0usize..20) {
        // Unequal lengths too: the padded extension must stay a metric.
        let c: String = c.chars().skip(cut).collect();
        let d = |x: &str, y: &str| Hamming.distance(x.as_bytes(), y.as_bytes());
        prop_assert_eq!(d(&a, &a), 0.0);
        prop_assert_eq!(d(&a, &b), d(&b, &a));
        prop_assert_eq!(d(&a, &c), d(&c, &a));
        if a != b { prop_assert!(d(&a, &b) > 0.0); }
        prop_assert!(d(&a, &c) <= d(&a, &b) + d(&b, &c));
        prop_assert!(d(&b, &c) <= d(&b, &a) + d(&a, &c));
    }
}

#[test]
fn unequal_lengths_count_the_difference() {
    let q = Hamming.prepare("VS-04".as_bytes());
    assert_eq!(q.distance(b"VS-0417"), 2.0);
    assert_eq!(q.distance("VX-0ø".as_bytes()), 2.0);
    assert_eq!(q.distance_within(b"VS-0417", 1.0), None);
    assert_eq!(Hamming.distance(b"", b"abc"), 3.0);
}

#[test]
fn invalid_utf8_is_one_replacement_char_per_sequence() {
    // std's from_utf8_lossy defines the reading.
    let bad = b"ab\xF0\x9F\x98c";
    let lossy = String::from_utf8_lossy(bad);
    assert_eq!(lossy.chars().count(), 4);
    assert_eq!(Hamming.distance(bad, lossy.as_bytes()), 0.0);
}

#[test]
fn corpus_check_names_the_first_bad_record() {
    let items = ["VS-0417", "VS-0418", "VS-0419", "VS-04", "VS-0420000"];
    match check_equal_lengths(items.iter().map(|s| s.as_bytes())) {
        Err(MetricError::Length {
            record,
            first,
            expected,
            actual,
        }) => assert_eq!((record, first, expected, actual), (4, 1, 7, 5)),
        other => panic!("expected a length error, got {other:?}"),
    }
    let same = ["Skär-1", "Holm-2"];
    assert_eq!(
        check_equal_lengths(same.iter().map(|s| s.as_bytes())).unwrap(),
        Some(6)
    );
    assert_eq!(check_equal_lengths(std::iter::empty()).unwrap(), None);
}
