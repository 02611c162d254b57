//! Jaccard distance between the token sets (or q-gram sets) of two items:
//! `1 − |A ∩ B| / |A ∪ B|`, and 0 between two empty sets.
//!
//! The Jaccard distance is a metric on finite sets (Levandowsky and Winter, "Distance
//! between sets", Nature 234, 1971; from memory). On items it is a *pseudometric*: items
//! with the same set (`"ferry north"` and `"north ferry ferry"` as words) are at distance 0.
//! The triangle inequality, which the search's lower bounds need, holds either way.
//!
//! * **Tokens**: split on white space (Unicode `White_Space`, the default) or on a chosen
//!   separator string; empty tokens are dropped.
//! * **q-grams**: every run of `q` consecutive characters (Unicode scalar values). An item
//!   shorter than `q` characters is its own single gram, so short items stay distinct; the
//!   empty item has the empty set.
//!
//! Tokens are compared as exact byte strings (no hashing, so no collisions): [`Metric::prepare`]
//! splits, sorts and de-duplicates the query once; each item is split and sorted, and the
//! intersection is a merge of two sorted lists. `distance_within` first checks the bound
//! the set sizes alone give (`|A ∩ B| ≤ min`, `|A ∪ B| ≥ max`), before sorting anything.
//!
//! ```
//! use waymark::metric::{Jaccard, Metric, PreparedQuery, Tokens};
//!
//! let words = Jaccard::new(Tokens::Whitespace)?;
//! assert_eq!(words.distance(b"north ferry quay", b"ferry quay south"), 0.5);
//! let grams = Jaccard::new(Tokens::QGrams(2))?;
//! // {Sk, ka, ar} vs {Sk, kä, är}: 1 shared of 5
//! assert_eq!(grams.distance("Skar".as_bytes(), "Skär".as_bytes()), 0.8);
//! let pipes = Jaccard::new(Tokens::Separator("|".into()))?;
//! assert_eq!(pipes.prepare(b"a|b").distance_within(b"b|c", 0.5), None);
//! # Ok::<(), waymark::metric::MetricError>(())
//! ```

use bstr::ByteSlice;
use serde::{Deserialize, Serialize};

use super::{Metric, MetricError, MetricKind, PreparedQuery};

/// How items are cut into the elements of their sets.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Tokens {
    /// Words separated by runs of Unicode white space.
    Whitespace,
    /// Pieces between occurrences of this (non-empty) separator.
    Separator(String),
    /// Runs of `q ≥ 1` consecutive characters.
    QGrams(usize),
}

/// Jaccard distance on token or q-gram sets.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Jaccard {
    tokens: Tokens,
}

/// A query prepared for [`Jaccard`]: its set, sorted.
#[derive(Clone, Debug)]
pub struct JaccardQuery {
    tokens: Tokens,
    set: Vec<Vec<u8>>,
}

impl Jaccard {
    /// The metric with the given tokenisation; refuses `q = 0` and an empty separator.
    pub fn new(tokens: Tokens) -> Result<Self, MetricError> {
        match &tokens {
            Tokens::QGrams(0) => Err(MetricError::Options("q-grams need q of at least 1".into())),
            Tokens::Separator(s) if s.is_empty() => Err(MetricError::Options(
                "the token separator must not be empty".into(),
            )),
            _ => Ok(Jaccard { tokens }),
        }
    }

    /// The tokenisation.
    pub fn tokens(&self) -> &Tokens {
        &self.tokens
    }
}

/// The sorted, de-duplicated set of `item`.
fn set_of<'a>(tokens: &Tokens, item: &'a [u8]) -> Vec<&'a [u8]> {
    let mut v: Vec<&[u8]> = match tokens {
        Tokens::Whitespace => item.fields().collect(),
        Tokens::Separator(sep) => item
            .split_str(sep.as_bytes())
            .filter(|t| !t.is_empty())
            .collect(),
        Tokens::QGrams(q) => {
            let q = (*q).max(1);
            if item.is_ascii() {
                if item.len() <= q {
                    vec![item]
                } else {
                    item.windows(q).collect()
                }
            } else {
                // Byte offsets of char starts (lossy decoding: an invalid sequence is one
                // char and keeps its bytes), then the end.
                let mut starts: Vec<usize> = item.char_indices().map(|(s, _, _)| s).collect();
                starts.push(item.len());
                let n = starts.len() - 1;
                if n <= q {
                    vec![item]
                } else {
                    (0..=n - q)
                        .map(|i| &item[starts[i]..starts[i + q]])
                        .collect()
                }
            }
        }
    };
    if v.first().is_some_and(|t| t.is_empty()) && v.len() == 1 {
        v.clear(); // the empty item has the empty set
    }
    v.sort_unstable();
    v.dedup();
    v
}

impl Metric for Jaccard {
    type Prepared = JaccardQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::Jaccard
    }

    fn prepare(&self, query: &[u8]) -> JaccardQuery {
        JaccardQuery {
            tokens: self.tokens.clone(),
            set: set_of(&self.tokens, query)
                .into_iter()
                .map(<[u8]>::to_vec)
                .collect(),
        }
    }
}

impl JaccardQuery {
    /// Number of distinct elements in the query's set.
    pub fn set_len(&self) -> usize {
        self.set.len()
    }
}

/// `1 − shared / (a + b − shared)`, 0 for two empty sets.
fn jaccard(a: usize, b: usize, shared: usize) -> f64 {
    let union = a + b - shared;
    if union == 0 {
        0.0
    } else {
        1.0 - shared as f64 / union as f64
    }
}

impl PreparedQuery for JaccardQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        self.distance_within(item, f64::INFINITY)
            .unwrap_or(f64::INFINITY)
    }

    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        if bound.is_nan() || bound < 0.0 {
            return None;
        }
        let set = set_of(&self.tokens, item);
        let (a, b) = (self.set.len(), set.len());
        if jaccard(a, b, a.min(b)) > bound {
            return None;
        }
        let (mut i, mut j, mut shared) = (0, 0, 0);
        while i < a && j < b {
            match self.set[i].as_slice().cmp(set[j]) {
                std::cmp::Ordering::Less => i += 1,
                std::cmp::Ordering::Greater => j += 1,
                std::cmp::Ordering::Equal => {
                    shared += 1;
                    i += 1;
                    j += 1;
                }
            }
        }
        let d = jaccard(a, b, shared);
        (d <= bound).then_some(d)
    }
}

/// Numbers per item of [`Jaccard::sketch`]: the set size and a 64-bit signature of its
/// elements, in two halves (each a whole number below 2³², exact in an `f64`).
pub const JACCARD_SKETCH: usize = 3;

impl Jaccard {
    /// The sketch of `item` for [`Jaccard::sketch_bound`]: `[|A|, low, high]`, where bit
    /// `h(t) mod 64` of the signature `high·2³² + low` is set for every element `t` of `A`
    /// (`h`: the standard library's `DefaultHasher` with its fixed keys).
    pub fn sketch(&self, item: &[u8], out: &mut [f64]) {
        let set = set_of(&self.tokens, item);
        let sig = set
            .iter()
            .fold(0u64, |m, t| m | 1u64 << (token_hash(t) % 64));
        out[0] = set.len() as f64;
        out[1] = f64::from(sig as u32);
        out[2] = f64::from((sig >> 32) as u32);
    }

    /// A lower bound of the distance of two items from their [`Jaccard::sketch`]es.
    ///
    /// Proof: a bit set in `A`'s signature and not in `B`'s comes from an element of `A`
    /// not in `B`, and distinct bits from distinct elements, so `|A ∖ B| ≥ popcount(a & !b)`
    /// and `|A ∩ B| ≤ s = min(|A| − popcount(a & !b), |B| − popcount(b & !a))`; the distance
    /// `1 − i / (|A| + |B| − i)` falls as `i` grows, so it is at least its value at `s`
    /// (with only the sizes, `s = min(|A|, |B|)`: `1 − min/max`). The same float formula
    /// as the distance, monotone in `i`, keeps the bound below the computed distance.
    pub fn sketch_bound(a: &[f64], b: &[f64]) -> f64 {
        let (na, nb) = (a[0] as usize, b[0] as usize);
        let sig = |s: &[f64]| (s[1] as u64) | ((s[2] as u64) << 32);
        let (sa, sb) = (sig(a), sig(b));
        let only_a = (sa & !sb).count_ones() as usize;
        let only_b = (sb & !sa).count_ones() as usize;
        let shared = na.saturating_sub(only_a).min(nb.saturating_sub(only_b));
        jaccard(na, nb, shared)
    }
}

/// The hash of one set element for [`Jaccard::sketch`] (the same in every process of one
/// build of waymark; sketches are never stored).
fn token_hash(t: &[u8]) -> u64 {
    use std::hash::{Hash, Hasher};
    let mut h = std::hash::DefaultHasher::new();
    t.hash(&mut h);
    h.finish()
}
