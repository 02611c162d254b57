//! Damerau–Levenshtein distance, unrestricted: insertions, deletions, substitutions and
//! transpositions of two adjacent characters, where transposed characters may be edited
//! again afterwards.
//!
//! # Why the unrestricted form
//!
//! The restricted variant often sold under the same name, *optimal string alignment* (OSA),
//! forbids editing a substring twice. It is not a metric: it breaks the triangle inequality.
//! With `CA`, `AC` and `ABC`: OSA(`CA`, `AC`) = 1 (one transposition), OSA(`AC`, `ABC`) = 1
//! (one insertion), but OSA(`CA`, `ABC`) = 3, since `CA → AC → ABC` inserts between the
//! transposed characters. The unrestricted distance is 2, and it is a metric (it is the
//! shortest-path distance of the graph of strings whose edges are single edits), which the
//! lower bounds of the search need. (Check values: `strsim::osa_distance` gives 3 and
//! `strsim::damerau_levenshtein` gives 2; the tests compare with both.)
//!
//! # Method
//!
//! The dynamic program of Lowrance and Wagner ("An extension of the string-to-string
//! correction problem", JACM 22(2), 1975; from memory): the unit-cost Levenshtein table
//! plus one more candidate per cell, the transposition of the last match of the current
//! item character in the query and of the current query character in the item, found with
//! a "last row per symbol" table and a "last matching column in this row" counter. O(n·m)
//! time, O(n·m) memory for the table (kept per thread and reused).
//!
//! [`Metric::prepare`] maps the query's characters to small dense numbers once (a table for
//! ASCII, a sorted list for other characters), so the inner loop compares integers and the
//! last-row table is a plain array the size of the query's alphabet; characters of the item
//! that are not in the query can never match and need no entry.
//!
//! [`DamerauQuery::dist_within`] stops at the first row whose minimum exceeds the bound:
//! with non-negative costs every path to the last cell crosses every row, so the distance
//! is at least the minimum of any row. The length difference is checked first, at no cost.
//!
//! Characters are Unicode scalar values; invalid UTF-8 is one U+FFFD per invalid sequence.
//!
//! ```
//! use waymark::metric::{Damerau, Metric, PreparedQuery};
//!
//! let q = Damerau.prepare(b"CA");
//! assert_eq!(q.distance(b"ABC"), 2.0); // OSA would say 3
//! assert_eq!(Damerau.distance(b"Vessmark", b"Vsesmark"), 1.0);
//! assert_eq!(q.distance_within(b"ABC", 1.0), None);
//! ```

use std::cell::RefCell;

use bstr::ByteSlice;

use super::{Metric, MetricKind, PreparedQuery};

/// Unrestricted Damerau–Levenshtein distance over Unicode scalar values.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Damerau;

/// Symbol number of a character that is not in the query.
const NONE: u32 = u32::MAX;

/// A query prepared for Damerau–Levenshtein distance.
#[derive(Clone, Debug)]
pub struct DamerauQuery {
    /// Symbol number of each query character, in order.
    ids: Vec<u32>,
    /// Symbol numbers of ASCII characters (`NONE` when absent from the query).
    ascii: [u32; 128],
    /// Symbol numbers of other characters, sorted by char.
    other: Vec<(char, u32)>,
    /// Number of distinct characters in the query.
    alphabet: usize,
}

thread_local! {
    /// The table, the last-row-per-symbol array and the item's symbols, reused between calls on one thread.
    static SCRATCH: RefCell<(Vec<u32>, Vec<u32>, Vec<u32>)> =
        const { RefCell::new((Vec::new(), Vec::new(), Vec::new())) };
}

impl DamerauQuery {
    /// Prepares `query`.
    pub fn new(query: &[u8]) -> Self {
        let mut ascii = [NONE; 128];
        let mut other: Vec<(char, u32)> = Vec::new();
        let mut alphabet = 0u32;
        let mut ids = Vec::with_capacity(query.len());
        for c in query.chars() {
            let id = if c.is_ascii() {
                let slot = &mut ascii[c as usize];
                if *slot == NONE {
                    *slot = alphabet;
                    alphabet += 1;
                }
                *slot
            } else {
                match other.binary_search_by_key(&c, |&(k, _)| k) {
                    Ok(i) => other[i].1,
                    Err(i) => {
                        other.insert(i, (c, alphabet));
                        alphabet += 1;
                        alphabet - 1
                    }
                }
            };
            ids.push(id);
        }
        DamerauQuery {
            ids,
            ascii,
            other,
            alphabet: alphabet as usize,
        }
    }

    /// Length of the query in chars.
    pub fn len(&self) -> usize {
        self.ids.len()
    }

    /// Whether the query is empty.
    pub fn is_empty(&self) -> bool {
        self.ids.is_empty()
    }

    #[inline]
    fn symbol(&self, c: char) -> u32 {
        if c.is_ascii() {
            self.ascii[c as usize]
        } else {
            match self.other.binary_search_by_key(&c, |&(k, _)| k) {
                Ok(i) => self.other[i].1,
                Err(_) => NONE,
                // A char absent from the query never matches.
            }
        }
    }

    /// The distance.
    pub fn dist(&self, item: &[u8]) -> u32 {
        self.dist_within(item, u32::MAX).unwrap_or(u32::MAX)
    }

    /// The distance if it is at most `k`, else `None`.
    pub fn dist_within(&self, item: &[u8], k: u32) -> Option<u32> {
        SCRATCH.with(|s| {
            let (table, last_row, symbols) = &mut *s.borrow_mut();
            symbols.clear();
            if item.is_ascii() {
                symbols.extend(item.iter().map(|&b| self.ascii[b as usize]));
            } else {
                symbols.extend(item.chars().map(|c| self.symbol(c)));
            }
            let (n, m) = (symbols.len(), self.ids.len());
            if n.abs_diff(m) > k as usize {
                return None;
            }
            if n == 0 || m == 0 {
                return Some((n + m) as u32);
            }
            self.table(symbols, table, last_row, k)
        })
    }

    /// Runs the dynamic program over `item` (symbol numbers) as rows and the query as columns.
    ///
    /// Cell `(i + 1, j + 1)` of the `(n + 2) × (m + 2)` table holds the distance between the
    /// first `i` item chars and the first `j` query chars; row 0 and column 0 are a sentinel
    /// larger than any distance, so a transposition with no earlier match is never chosen.
    /// Every cell is written before it is read, so the reused table is not cleared.
    fn table(&self, item: &[u32], h: &mut Vec<u32>, da: &mut Vec<u32>, k: u32) -> Option<u32> {
        let (n, m) = (item.len(), self.ids.len());
        let w = m + 2;
        let big = (n + m) as u32;
        if h.len() < (n + 2) * w {
            h.resize((n + 2) * w, 0);
        }
        da.clear();
        da.resize(self.alphabet, 0);
        h[..w].fill(big);
        h[w] = big;
        for j in 0..=m {
            h[w + j + 1] = j as u32;
        }
        for i in 1..=n {
            let a = item[i - 1];
            let row = (i + 1) * w;
            let (done, rest) = h.split_at_mut(row);
            let prev = &done[i * w..];
            let cur = &mut rest[..w];
            cur[0] = big;
            cur[1] = i as u32;
            let mut db = 0usize;
            let mut row_min = i as u32;
            for j in 1..=m {
                let b = self.ids[j - 1];
                // b is a query symbol, so `da` has its slot.
                let k1 = da[b as usize] as usize;
                let l1 = db;
                let cost = if a == b {
                    db = j;
                    0
                } else {
                    1
                };
                let sub = prev[j] + cost;
                let ins = cur[j] + 1;
                let del = prev[j + 1] + 1;
                // k1 = 0 or l1 = 0 reads the sentinel row/column; row k1 < i + 1 is done.
                let trans = done[k1 * w + l1] + (i - k1 - 1) as u32 + 1 + (j - l1 - 1) as u32;
                let v = sub.min(ins).min(del).min(trans);
                cur[j + 1] = v;
                row_min = row_min.min(v);
            }
            if row_min > k {
                return None;
            }
            if a != NONE {
                da[a as usize] = i as u32;
            }
        }
        let d = h[(n + 1) * w + m + 1];
        (d <= k).then_some(d)
    }
}

impl Metric for Damerau {
    type Prepared = DamerauQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::Damerau
    }

    /// True: an insertion, deletion or substitution changes each one-sided char-count sum
    /// (and each side of the signature gap) by at most one, and a transposition changes no
    /// count; the distance is the fewest such edits (the module documentation).
    fn bounded_by_char_counts(&self) -> bool {
        true
    }

    fn prepare(&self, query: &[u8]) -> DamerauQuery {
        DamerauQuery::new(query)
    }
}

impl PreparedQuery for DamerauQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        f64::from(self.dist(item))
    }

    /// Distances are whole numbers, so the bound is rounded down; a negative or NaN bound
    /// admits nothing.
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        if bound.is_nan() || bound < 0.0 {
            return None;
        }
        let k = if bound >= f64::from(u32::MAX) {
            u32::MAX
        } else {
            bound.floor() as u32
        };
        self.dist_within(item, k).map(f64::from)
    }
}
