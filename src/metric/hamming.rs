//! Hamming distance: the number of positions at which two equally long strings differ.
//!
//! Positions are Unicode scalar values (`char`), not bytes, like every string metric here:
//! `"é"` and `"e"` differ in one position. Invalid UTF-8 is read as one U+FFFD per invalid
//! sequence (the rule of [`String::from_utf8_lossy`]).
//!
//! Hamming distance is defined for strings of one length, so a corpus for it should be
//! checked with [`check_equal_lengths`], which names the first record of another length.
//! Items of different lengths that reach the metric anyway (a query typed with one character
//! too many, say) are not a panic: the shorter one is read as padded with a symbol that
//! occurs in no string, so the distance is the mismatches over the common length plus the
//! difference in length. That extension is still a metric (it is the Hamming distance of the
//! padded sequences), so lower bounds built on it stay valid.
//!
//! ```
//! use waymark::metric::{check_equal_lengths, Hamming, Metric, PreparedQuery};
//!
//! let q = Hamming.prepare(b"VS-0417");
//! assert_eq!(q.distance(b"VS-0471"), 2.0);
//! assert_eq!(q.distance_within(b"VS-0471", 1.0), None);
//! assert_eq!(Hamming.distance("Skär".as_bytes(), "Skar".as_bytes()), 1.0); // chars, not bytes
//!
//! let buoys = ["VS-0417", "VS-0471", "VS-417"];
//! let err = check_equal_lengths(buoys.iter().map(|s| s.as_bytes())).unwrap_err();
//! assert_eq!(
//!     err.to_string(),
//!     "record 3: 6 characters, but record 1 has 7 (Hamming distance needs items of equal length)"
//! );
//! ```

use bstr::ByteSlice;

use super::{Metric, MetricError, MetricKind, PreparedQuery};

/// Hamming distance over Unicode scalar values.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Hamming;

/// A query prepared for Hamming distance.
#[derive(Clone, Debug)]
pub struct HammingQuery {
    bytes: Vec<u8>,
    /// The decoded chars when the query is not ASCII (else the bytes are the chars).
    chars: Option<Vec<char>>,
}

/// Checks that all items have the same number of chars.
///
/// Returns that length (`None` for no items), or a [`MetricError::Length`] naming the first
/// item of another length by its 1-based position in `items`, with both lengths. A caller
/// that skipped blank records maps that position back to the input line.
pub fn check_equal_lengths<'a, I>(items: I) -> Result<Option<usize>, MetricError>
where
    I: IntoIterator<Item = &'a [u8]>,
{
    let mut expected = None;
    for (i, item) in items.into_iter().enumerate() {
        let len = char_len(item);
        match expected {
            None => expected = Some(len),
            Some(e) if e != len => {
                return Err(MetricError::Length {
                    record: i + 1,
                    first: 1,
                    expected: e,
                    actual: len,
                })
            }
            Some(_) => {}
        }
    }
    Ok(expected)
}

/// Number of chars in `bytes`, each invalid sequence counting as one.
fn char_len(bytes: &[u8]) -> usize {
    if bytes.is_ascii() {
        bytes.len()
    } else {
        bytes.chars().count()
    }
}

impl HammingQuery {
    /// Prepares `query`.
    pub fn new(query: &[u8]) -> Self {
        let chars = (!query.is_ascii()).then(|| query.chars().collect());
        HammingQuery {
            bytes: query.to_vec(),
            chars,
        }
    }

    /// Length of the query in chars.
    pub fn len(&self) -> usize {
        self.chars.as_ref().map_or(self.bytes.len(), Vec::len)
    }

    /// Whether the query is empty.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The distance, or `None` once it exceeds `k`.
    pub fn dist_within(&self, item: &[u8], k: usize) -> Option<usize> {
        if self.chars.is_none() && item.is_ascii() {
            let q = &self.bytes;
            let mut d = q.len().abs_diff(item.len());
            if d > k {
                return None;
            }
            // Whole chunks first (the compiler vectorises the inner count), checking the
            // bound between chunks.
            let n = q.len().min(item.len());
            for (a, b) in q[..n].chunks(64).zip(item[..n].chunks(64)) {
                d += a.iter().zip(b).filter(|(x, y)| x != y).count();
                if d > k {
                    return None;
                }
            }
            return Some(d);
        }
        let q_chars: Vec<char>;
        let q: &[char] = match &self.chars {
            Some(c) => c,
            None => {
                q_chars = self.bytes.iter().map(|&b| b as char).collect();
                &q_chars
            }
        };
        let mut d = 0usize;
        let mut n = 0usize;
        for c in item.chars() {
            if n < q.len() {
                d += usize::from(q[n] != c);
            } else {
                d += 1;
            }
            n += 1;
            if d > k {
                return None;
            }
        }
        d += q.len().saturating_sub(n);
        (d <= k).then_some(d)
    }

    /// The distance.
    pub fn dist(&self, item: &[u8]) -> usize {
        // `usize::MAX` is never exceeded.
        self.dist_within(item, usize::MAX).unwrap_or(usize::MAX)
    }
}

impl Metric for Hamming {
    type Prepared = HammingQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::Hamming
    }

    /// True: the distance is at least the Levenshtein distance (each differing position
    /// is one substitution, each position past the shorter string one deletion), which is
    /// at least the char-count and signature gaps.
    fn bounded_by_char_counts(&self) -> bool {
        true
    }

    fn prepare(&self, query: &[u8]) -> HammingQuery {
        HammingQuery::new(query)
    }
}

impl PreparedQuery for HammingQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        self.dist(item) as f64
    }

    /// Distances are whole numbers, so the bound is rounded down; a negative or NaN bound
    /// admits nothing.
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        if bound.is_nan() || bound < 0.0 {
            return None;
        }
        let k = if bound >= usize::MAX as f64 {
            usize::MAX
        } else {
            bound.floor() as usize
        };
        self.dist_within(item, k).map(|d| d as f64)
    }
}
