//! Token edit distance: an edit distance over the white-space-separated words of two items,
//! where inserting or deleting a word costs 1 and putting one word in place of another
//! costs their normalised Levenshtein distance, a number in `[0, 1]`.
//!
//! Names of one firm often differ by a typo in one word, a word more or less, or words in
//! another order; a char-level edit distance charges a moved word its full length, this
//! one charges it at most 2 (a deletion and an insertion), and a misspelt word a fraction.
//!
//! # The word cost
//!
//! Between words `s` and `t` with `L` = unit-cost Levenshtein distance over chars,
//! `|s|`, `|t|` their lengths in chars, the cost is the normalised distance of Yujian and
//! Bo ("A Normalized Levenshtein Distance Metric", IEEE TPAMI 29(6), 2007; from memory):
//!
//! ```text
//! c(s, t) = 2·L / (|s| + |t| + L)      (0 when s = t)
//! ```
//!
//! which they prove to be a metric with values in `[0, 1]`. The plainer `L / max(|s|, |t|)`
//! is not a metric in general and is not used.
//!
//! # Why it is a metric
//!
//! Triangle inequality, in two lines: the costs are a metric on words ∪ {ε} (`c` is one,
//! `c(s, t) ≤ 1 < c(s, ε) + c(ε, t) = 2` and `c(s, ε) = 1 ≤ c(s, t) + c(t, ε)`); so an
//! alignment of x to y and one of y to z compose, position by position, into an alignment of
//! x to z that costs at most the sum, and the cheapest alignment (the distance) is no more.
//! It is 0 only for equal word sequences (every cost of different words is above 0) and the
//! dynamic program is symmetric (transposing the table repeats the same sums). On items as
//! given it is a pseudometric: `"Keth  Marine"` and `"Keth Marine"` have the same words.
//!
//! # Method
//!
//! Wagner–Fischer's dynamic program over words, one row at a time. [`Metric::prepare`]
//! splits the query into words (Unicode `White_Space`) and prepares each with Myers'
//! bit-parallel Levenshtein ([`LevenshteinQuery`]); equal words cost 0 without a kernel call.
//! [`PreparedQuery::distance_within`] returns early on the word-count gap (each missing
//! word costs 1) and at the first row whose minimum exceeds the bound. Chars are Unicode
//! scalar values; invalid UTF-8 counts as Levenshtein counts it.
//!
//! ```
//! use waymark::metric::{Metric, PreparedQuery, TokenEdit};
//!
//! // A moved word: one deletion and one insertion.
//! assert_eq!(TokenEdit.distance(b"Keth Marine Supply", b"Marine Supply Keth"), 2.0);
//! // One typo in a word of 6: L = 1, 2·1 / (6 + 6 + 1).
//! assert_eq!(TokenEdit.distance(b"Keth Marine", b"Keth Marime"), 2.0 / 13.0);
//! assert_eq!(TokenEdit.prepare(b"Keth").distance_within(b"Keth Marine", 0.5), None);
//! ```

use std::cell::RefCell;

use bstr::ByteSlice;

use super::{LevenshteinQuery, Metric, MetricKind, PreparedQuery};

/// Edit distance over words with normalised Levenshtein substitution costs (see the module
/// documentation).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct TokenEdit;

/// One word of a prepared query.
#[derive(Clone, Debug)]
struct Word {
    bytes: Vec<u8>,
    chars: usize,
    lev: LevenshteinQuery,
}

/// A query prepared for [`TokenEdit`]: its words, each prepared for Levenshtein.
#[derive(Clone, Debug)]
pub struct TokenEditQuery {
    words: Vec<Word>,
}

thread_local! {
    /// Two rows of the table, reused between calls on one thread.
    static ROWS: RefCell<(Vec<f64>, Vec<f64>)> = const { RefCell::new((Vec::new(), Vec::new())) };
}

/// The normalised Levenshtein distance of words of `a` and `b` chars at distance `lev`.
#[inline]
fn word_cost(a: usize, b: usize, lev: u32) -> f64 {
    if lev == 0 {
        0.0
    } else {
        let l = f64::from(lev);
        2.0 * l / (a as f64 + b as f64 + l)
    }
}

/// The normalised Levenshtein distance `2·L / (|a| + |b| + L)` of two words (Yujian and
/// Bo's metric, in `[0, 1]`; 0 for two empty words): the cost of putting one in place of the
/// other in [`TokenEdit`].
///
/// ```
/// use waymark::metric::normalized_levenshtein;
///
/// assert_eq!(normalized_levenshtein(b"kitten", b"sitting"), 6.0 / 16.0);
/// assert_eq!(normalized_levenshtein(b"abc", b"xyz"), 2.0 / 3.0);
/// ```
pub fn normalized_levenshtein(a: &[u8], b: &[u8]) -> f64 {
    let q = LevenshteinQuery::new(a);
    word_cost(q.len(), LevenshteinQuery::item_len(b), q.dist(b))
}

impl TokenEditQuery {
    /// Number of words in the query.
    pub fn len(&self) -> usize {
        self.words.len()
    }

    /// Whether the query has no words.
    pub fn is_empty(&self) -> bool {
        self.words.is_empty()
    }

    /// The cost of query word `i` against `item`'s word `t` of `chars` chars.
    #[inline]
    fn cost(&self, i: usize, t: &[u8], chars: usize) -> f64 {
        let w = &self.words[i];
        if w.bytes == t {
            0.0
        } else {
            word_cost(w.chars, chars, w.lev.dist(t))
        }
    }
}

impl Metric for TokenEdit {
    type Prepared = TokenEditQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::TokenEdit
    }

    fn prepare(&self, query: &[u8]) -> TokenEditQuery {
        TokenEditQuery {
            words: query
                .fields()
                .map(|w| Word {
                    bytes: w.to_vec(),
                    chars: LevenshteinQuery::item_len(w),
                    lev: LevenshteinQuery::new(w),
                })
                .collect(),
        }
    }
}

impl PreparedQuery for TokenEditQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        self.distance_within(item, f64::INFINITY)
            .unwrap_or(f64::INFINITY)
    }

    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        if bound.is_nan() || bound < 0.0 {
            return None;
        }
        let m = self.words.len();
        let words: Vec<&[u8]> = item.fields().collect();
        let n = words.len();
        if (m.abs_diff(n) as f64) > bound {
            return None;
        }
        ROWS.with(|rows| {
            let (prev, cur) = &mut *rows.borrow_mut();
            // Row j of the item's words against every prefix of the query's words.
            prev.clear();
            prev.extend((0..=m).map(|i| i as f64));
            cur.clear();
            cur.resize(m + 1, 0.0);
            for (j, t) in words.iter().enumerate() {
                let chars = LevenshteinQuery::item_len(t);
                cur[0] = (j + 1) as f64;
                let mut low = cur[0];
                for i in 1..=m {
                    let sub = prev[i - 1] + self.cost(i - 1, t, chars);
                    let v = sub.min(prev[i] + 1.0).min(cur[i - 1] + 1.0);
                    cur[i] = v;
                    low = low.min(v);
                }
                // Costs are not negative: every path to the last cell crosses this row.
                if low > bound {
                    return None;
                }
                std::mem::swap(prev, cur);
            }
            let d = prev[m];
            (d <= bound).then_some(d)
        })
    }
}

impl TokenEdit {
    /// The sketch of `item` for [`TokenEdit::sketch_bound`]: its number of words.
    pub fn sketch(item: &[u8], out: &mut [f64]) {
        out[0] = item.fields().count() as f64;
    }

    /// A lower bound of the distance of two items from their [`TokenEdit::sketch`]es: the
    /// difference of their word counts.
    ///
    /// Proof: only an insertion or a deletion changes the number of words, by one, at a
    /// cost of 1; substitutions cost at least 0. In floats too: every cell of the table is
    /// at least the difference of its word counts (sums of whole numbers are exact, and
    /// adding a cost ≥ 0 never rounds below the sum's other term).
    pub fn sketch_bound(a: &[f64], b: &[f64]) -> f64 {
        (a[0] - b[0]).abs()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hand_worked_values() {
        // Worked by hand from the definition.
        assert_eq!(TokenEdit.distance(b"", b""), 0.0);
        assert_eq!(TokenEdit.distance(b"", b"Keth Marine"), 2.0);
        assert_eq!(
            TokenEdit.distance(b"  Keth \t Marine ", b"Keth Marine"),
            0.0
        );
        // "Keth" for "Kath": L = 1, 2/(4+4+1).
        assert_eq!(TokenEdit.distance(b"Keth", b"Kath"), 2.0 / 9.0);
        // A swap of two words costs less than 2 when the words are alike: here two
        // substitutions "ab"→"ac" and back, 2·(2·1/(2+2+1)) = 0.8 < 2.
        assert_eq!(TokenEdit.distance(b"ab ac", b"ac ab"), 0.8);
        assert_eq!(TokenEdit.kind(), MetricKind::TokenEdit);
        assert!(!TokenEdit.is_integral());
    }

    #[test]
    fn bounds_agree_with_the_distance() {
        let q = TokenEdit.prepare(b"Keth Marine Supply");
        let d = q.distance(b"Marine Supply Keth Ltd");
        assert_eq!(d, 3.0);
        assert_eq!(q.distance_within(b"Marine Supply Keth Ltd", 3.0), Some(3.0));
        assert_eq!(q.distance_within(b"Marine Supply Keth Ltd", 2.99), None);
        assert_eq!(q.distance_within(b"x", -1.0), None);
        assert_eq!(q.distance_within(b"x", f64::NAN), None);
    }
}
