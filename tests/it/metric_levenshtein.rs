//! Checks of the bit-parallel Levenshtein kernel against outside references.
//!
//! The main reference is `strsim::levenshtein`, a general-purpose string-similarity crate that
//! computes the plain dynamic program over `char`s; it shares no code with waymark. Invalid
//! UTF-8 is compared through `String::from_utf8_lossy` from the standard library, which
//! defines the U+FFFD-per-bad-sequence reading the kernel must follow.

use proptest::prelude::*;
use waymark::metric::{Levenshtein, LevenshteinQuery, Metric, MetricKind, PreparedQuery};

use crate::util::word_list;

/// Reference distance: `strsim` (general-purpose crate, full dynamic program over chars).
fn reference(a: &str, b: &str) -> u32 {
    strsim::levenshtein(a, b) as u32
}

/// Mostly a small alphabet (so strings share characters and distances are not trivially the
/// longer length), with multi-byte chars of every UTF-8 width and U+FFFD itself.
const ALPHABET: &[char] = &[
    'a', 'b', 'c', 'd', 'e', 'a', 'b', 'é', 'ß', 'ж', '中', '語', '😀', '\u{FFFD}', '\u{7F}', '\0',
];

fn string_of_len(len: usize) -> impl Strategy<Value = String> {
    prop::collection::vec(prop::sample::select(ALPHABET), len).prop_map(|v| v.into_iter().collect())
}

/// Lengths up to 200, with extra weight on the block edges of the 64-bit kernel.
fn length() -> impl Strategy<Value = usize> {
    prop_oneof![
        2 => 0usize..=200,
        1 => prop::sample::select(vec![0usize, 1, 63, 64, 65, 127, 128, 129, 191, 192, 193]),
    ]
}

fn string() -> impl Strategy<Value = String> {
    length().prop_flat_map(string_of_len)
}

#[derive(Clone, Debug)]
enum Edit {
    Insert(usize, char),
    Delete(usize),
    Substitute(usize, char),
}

fn edit() -> impl Strategy<Value = Edit> {
    let c = prop::sample::select(ALPHABET);
    prop_oneof![
        (any::<usize>(), c.clone()).prop_map(|(i, c)| Edit::Insert(i, c)),
        any::<usize>().prop_map(Edit::Delete),
        (any::<usize>(), c).prop_map(|(i, c)| Edit::Substitute(i, c)),
    ]
}

fn apply(base: &str, edits: &[Edit]) -> String {
    let mut v: Vec<char> = base.chars().collect();
    for e in edits {
        match *e {
            Edit::Insert(i, c) => v.insert(i % (v.len() + 1), c),
            Edit::Delete(i) if !v.is_empty() => {
                let at = i % v.len();
                v.remove(at);
            }
            Edit::Substitute(i, c) if !v.is_empty() => {
                let at = i % v.len();
                v[at] = c;
            }
            _ => {}
        }
    }
    v.into_iter().collect()
}

/// Pairs that are either unrelated or a few random edits apart (small distances, which is
/// where the bounded form and the block carries matter most).
fn pair() -> impl Strategy<Value = (String, String)> {
    prop_oneof![
        (string(), string()),
        (string(), prop::collection::vec(edit(), 0..12)).prop_map(|(a, e)| {
            let b = apply(&a, &e);
            (a, b)
        }),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(1000))]

    #[test]
    fn dist_matches_strsim((a, b) in pair()) {
        let want = reference(&a, &b);
        let q = Levenshtein.prepare(a.as_bytes());
        prop_assert_eq!(q.len(), a.chars().count());
        prop_assert_eq!(q.dist(b.as_bytes()), want);
        prop_assert_eq!(q.distance(b.as_bytes()), f64::from(want));
        prop_assert_eq!(Levenshtein.distance(a.as_bytes(), b.as_bytes()), f64::from(want));
    }

    #[test]
    fn dist_within_is_some_exactly_when_within_bound((a, b) in pair(), k in 0u32..40) {
        let d = reference(&a, &b);
        let q = LevenshteinQuery::new(a.as_bytes());
        let want = (d <= k).then_some(d);
        prop_assert_eq!(q.dist_within(b.as_bytes(), k), want);
        // Also exactly at the distance and one below it.
        prop_assert_eq!(q.dist_within(b.as_bytes(), d), Some(d));
        if d > 0 {
            prop_assert_eq!(q.dist_within(b.as_bytes(), d - 1), None);
        }
        // The f64 form rounds the bound down.
        prop_assert_eq!(
            q.distance_within(b.as_bytes(), f64::from(k) + 0.75),
            want.map(f64::from)
        );
    }

    #[test]
    fn batch_forms_match_strsim(
        q in string(),
        items in prop::collection::vec(string(), 0..7),
    ) {
        let want: Vec<u32> = items.iter().map(|s| reference(&q, s)).collect();
        let p = LevenshteinQuery::new(q.as_bytes());
        let mut got = Vec::new();
        p.dist_each(items.iter().map(String::as_bytes), |i, d| got.push((i, d)));
        let want_each: Vec<(usize, u32)> = want.iter().copied().enumerate().collect();
        prop_assert_eq!(got, want_each);
    }

    #[test]
    fn symmetric((a, b) in pair()) {
        let ab = LevenshteinQuery::new(a.as_bytes()).dist(b.as_bytes());
        let ba = LevenshteinQuery::new(b.as_bytes()).dist(a.as_bytes());
        prop_assert_eq!(ab, ba);
    }

    #[test]
    fn arbitrary_bytes_read_as_lossy_utf8(
        a in prop::collection::vec(prop_oneof![any::<u8>(), 0x80u8..=0xff], 0..200),
        b in prop::collection::vec(prop_oneof![any::<u8>(), 0x80u8..=0xff], 0..200),
        k in 0u32..300,
    ) {
        // Reference reading of bad bytes: the standard library's lossy decoder.
        let (la, lb) = (String::from_utf8_lossy(&a), String::from_utf8_lossy(&b));
        let want = reference(&la, &lb);
        let q = LevenshteinQuery::new(&a);
        prop_assert_eq!(q.len(), la.chars().count());
        prop_assert_eq!(q.dist(&b), want);
        prop_assert_eq!(q.dist_within(&b, k), (want <= k).then_some(want));
    }
}

proptest! {
    // Queries beyond the four blocks kept on the stack (more than 256 chars).
    #![proptest_config(ProptestConfig::with_cases(200))]

    #[test]
    fn long_queries_match_strsim(
        a in (250usize..400).prop_flat_map(string_of_len),
        edits in prop::collection::vec(edit(), 0..30),
        k in 0u32..40,
    ) {
        let b = apply(&a, &edits);
        let d = reference(&a, &b);
        let q = LevenshteinQuery::new(a.as_bytes());
        prop_assert_eq!(q.dist(b.as_bytes()), d);
        prop_assert_eq!(q.dist_within(b.as_bytes(), k), (d <= k).then_some(d));
        prop_assert_eq!(LevenshteinQuery::new(b.as_bytes()).dist(a.as_bytes()), d);
    }
}

#[test]
fn textbook_examples() {
    // Common textbook examples of edit distance (values known from memory), each recomputed
    // here by strsim's dynamic program as well.
    for (a, b, d) in [
        ("kitten", "sitting", 3),
        ("Saturday", "Sunday", 3),
        ("book", "back", 2),
        ("flaw", "lawn", 2),
    ] {
        assert_eq!(reference(a, b), d, "strsim disagrees on {a}/{b}");
        let q = LevenshteinQuery::new(a.as_bytes());
        assert_eq!(q.dist(b.as_bytes()), d, "{a}/{b}");
        assert_eq!(q.dist_within(b.as_bytes(), d), Some(d), "{a}/{b}");
        assert_eq!(q.dist_within(b.as_bytes(), d - 1), None, "{a}/{b}");
        assert_eq!(LevenshteinQuery::new(b.as_bytes()).dist(a.as_bytes()), d);
    }
}

#[test]
fn empty_strings() {
    // By definition (common practice): the distance to the empty string is the other length.
    let empty = LevenshteinQuery::new(b"");
    assert!(empty.is_empty());
    assert_eq!(empty.len(), 0);
    assert_eq!(empty.dist(b""), 0);
    assert_eq!(empty.dist("abc".as_bytes()), 3);
    assert_eq!(empty.dist("é中😀".as_bytes()), 3);
    assert_eq!(empty.dist_within("é中😀".as_bytes(), 3), Some(3));
    assert_eq!(empty.dist_within("é中😀".as_bytes(), 2), None);
    let q = LevenshteinQuery::new("é中😀".as_bytes());
    assert_eq!(q.dist(b""), 3);
    assert_eq!(q.dist_within(b"", 3), Some(3));
    assert_eq!(q.dist_within(b"", 2), None);
    assert_eq!(Levenshtein.distance(b"", b""), 0.0);
}

#[test]
fn counts_chars_not_bytes() {
    // "ééé" is 3 chars in 6 bytes: a byte-length filter alone would reject it at k = 0.
    let q = LevenshteinQuery::new("ééé".as_bytes());
    assert_eq!(q.len(), 3);
    assert_eq!(q.dist_within("ééé".as_bytes(), 0), Some(0));
    assert_eq!(q.dist("eee".as_bytes()), reference("ééé", "eee"));
    assert_eq!(q.dist_within("ééééé".as_bytes(), 1), None);
    assert_eq!(q.dist_within("ééééé".as_bytes(), 2), Some(2));
}

#[test]
fn long_items_and_length_filter() {
    let q = LevenshteinQuery::new(b"a");
    let long = vec![b'a'; 10_000];
    let want = reference("a", std::str::from_utf8(&long).unwrap());
    assert_eq!(q.dist(&long), want);
    assert_eq!(q.dist_within(&long, want - 1), None);
    assert_eq!(q.dist_within(&long, want), Some(want));
    assert_eq!(q.dist_within(&long, u32::MAX), Some(want));
    assert_eq!(
        q.distance_within(&long, f64::INFINITY),
        Some(f64::from(want))
    );
    assert_eq!(q.distance_within(&long, -1.0), None);
}

#[test]
fn truncated_and_overlong_sequences() {
    // Truncated 4-byte sequence, overlong encoding, surrogate, lone continuation bytes:
    // compared with the standard library's lossy reading.
    let cases: [&[u8]; 6] = [
        b"\xf0\x9f\x98",
        b"\xc0\xaf",
        b"\xed\xa0\x80",
        b"\x80\x80\x80",
        b"ab\xffcd\xfe",
        b"\xf4\x90\x80\x80",
    ];
    for a in cases {
        for b in cases {
            let want = reference(&String::from_utf8_lossy(a), &String::from_utf8_lossy(b));
            assert_eq!(LevenshteinQuery::new(a).dist(b), want, "{a:?} / {b:?}");
        }
    }
}

#[test]
fn kind_is_levenshtein() {
    assert_eq!(Levenshtein.kind(), MetricKind::Levenshtein);
}

/// Plain dynamic program over chars (the textbook recurrence), a second reference beside
/// strsim for the batched kernels.
fn plain_dp(a: &str, b: &str) -> u32 {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<u32> = (0..=b.len() as u32).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i as u32 + 1; b.len() + 1];
        for (j, &cb) in b.iter().enumerate() {
            cur[j + 1] = (prev[j] + u32::from(ca != cb))
                .min(prev[j + 1] + 1)
                .min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

/// Query lengths at the edges of the vector-lane kernels (32-bit lanes up to 32 chars,
/// 64-bit lanes up to 64, blocks beyond), and some others.
fn lane_query() -> impl Strategy<Value = String> {
    prop_oneof![
        3 => prop::sample::select(vec![0usize, 1, 31, 32, 33, 63, 64, 65]),
        1 => 0usize..=80,
    ]
    .prop_flat_map(string_of_len)
}

/// Items of mixed lengths in one batch: empty, short, a few edits from the query, and
/// around the 64-byte limit above which items leave the vector lanes.
fn lane_item(q: String) -> impl Strategy<Value = String> {
    prop_oneof![
        2 => (0usize..=20).prop_flat_map(string_of_len),
        2 => prop::collection::vec(edit(), 0..6).prop_map(move |e| apply(&q, &e)),
        1 => prop::sample::select(vec![0usize, 1, 60, 63, 64, 65, 70, 130])
            .prop_flat_map(string_of_len),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(400))]

    /// Every path of `dist_batch` and `dist_each` (8-, 16-, 32- and 64-bit lanes,
    /// the scalar fallback for long items and long queries) equals strsim and the plain
    /// dynamic program, item by item, with items of different lengths sharing a batch.
    #[test]
    fn batched_kernels_match_strsim_and_the_dynamic_program(
        (q, items) in lane_query().prop_flat_map(|q| {
            let items = prop::collection::vec(lane_item(q.clone()), 0..40);
            (Just(q), items)
        }),
    ) {
        let p = LevenshteinQuery::new(q.as_bytes());
        let want: Vec<u32> = items.iter().map(|x| reference(&q, x)).collect();
        let plain: Vec<u32> = items.iter().map(|x| plain_dp(&q, x)).collect();
        prop_assert_eq!(&want, &plain, "strsim and the dynamic program disagree");
        let slices: Vec<&[u8]> = items.iter().map(String::as_bytes).collect();
        let mut out = vec![u32::MAX; items.len()];
        p.dist_batch(&slices, &mut out);
        prop_assert_eq!(&out, &want);
        let mut each = Vec::new();
        p.dist_each(&slices, |i, d| each.push((i, d)));
        let want_each: Vec<(usize, u32)> = want.iter().copied().enumerate().collect();
        prop_assert_eq!(each, want_each);
        // A shorter output computes only its own positions.
        if !items.is_empty() {
            let mut short = vec![u32::MAX; items.len() - 1];
            p.dist_batch(&slices, &mut short);
            prop_assert_eq!(&short[..], &want[..items.len() - 1]);
        }
    }

    /// Arbitrary bytes in a batch read as the standard library's lossy UTF-8 (one U+FFFD
    /// per bad sequence), as in the one-item kernel.
    #[test]
    fn batched_kernels_read_bad_bytes_like_the_standard_library(
        q in prop::collection::vec(any::<u8>(), 0..40),
        items in prop::collection::vec(prop::collection::vec(any::<u8>(), 0..70), 0..20),
    ) {
        let p = LevenshteinQuery::new(&q);
        let lq = String::from_utf8_lossy(&q);
        let want: Vec<u32> = items
            .iter()
            .map(|x| reference(&lq, &String::from_utf8_lossy(x)))
            .collect();
        let slices: Vec<&[u8]> = items.iter().map(Vec::as_slice).collect();
        let mut out = vec![0; items.len()];
        p.dist_batch(&slices, &mut out);
        prop_assert_eq!(out, want);
    }
}

#[test]
fn batch_of_empty_items_and_empty_query() {
    // By definition (common practice): the distance to the empty string is the other length.
    let items: [&[u8]; 9] = [b"", b"a", b"", "é".as_bytes(), b"", b"", b"", b"", b"abc"];
    let mut out = [9; 9];
    LevenshteinQuery::new(b"").dist_batch(&items, &mut out);
    assert_eq!(out, [0, 1, 0, 1, 0, 0, 0, 0, 3]);
    LevenshteinQuery::new(b"ab").dist_batch(&items, &mut out);
    assert_eq!(out, [2, 1, 2, 2, 2, 2, 2, 2, 1]);
    LevenshteinQuery::new(b"ab").dist_batch(&[], &mut out);
}

#[test]
fn batch_on_the_word_list_matches_strsim() {
    // Debian's wamerican list (package wamerican, 104,334 words): a sample of 2,000 words
    // against typo queries of several lengths, checked with strsim.
    let text = word_list();
    let words: Vec<&str> = text.lines().step_by(52).collect();
    let slices: Vec<&[u8]> = words.iter().map(|w| w.as_bytes()).collect();
    let mut out = vec![0; words.len()];
    for q in [
        "vessmark",
        "ferrys",
        "buoyancy",
        "a",
        "archipelagoes",
        "intercontinentally",
    ] {
        LevenshteinQuery::new(q.as_bytes()).dist_batch(&slices, &mut out);
        for (w, &d) in words.iter().zip(&out) {
            assert_eq!(d, reference(q, w), "{q} / {w}");
        }
    }
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(200))]
    /// Long queries sharing long prefixes and suffixes with the item (the kernel cuts the
    /// shared ends first) agree with the reference crate strsim's levenshtein.
    #[test]
    fn shared_ends_of_long_strings_do_not_change_the_distance(
        pre in "[ab]{0,150}",
        mid_q in "[abé]{0,20}",
        mid_i in "[abé]{0,20}",
        suf in "[abç]{0,150}",
        bound in 0u32..30,
    ) {
        let q = format!("{pre}{mid_q}{suf}");
        let i = format!("{pre}{mid_i}{suf}");
        let want = strsim::levenshtein(&q, &i) as u32;
        let lq = LevenshteinQuery::new(q.as_bytes());
        proptest::prop_assert_eq!(lq.dist(i.as_bytes()), want);
        proptest::prop_assert_eq!(
            lq.dist_within(i.as_bytes(), bound),
            (want <= bound).then_some(want)
        );
    }
}
