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
//! q-grams of `q ≤ 4` of an ASCII item at least `q` long are all exactly `q` bytes, so each
//! is packed into a `u32` (big-endian, which keeps equality and order; still no collisions):
//! when both the query and the item are such, the sets are sorted `u32` lists, and the
//! shared grams are counted from the sorted lists (with AVX-512, each item gram is compared
//! with sixteen query grams at once). Any other pair takes the byte-string path; both give
//! the same distance.
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
use crate::cpu::Level;

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
    /// The set as packed grams (sorted), when the query's grams can be packed.
    packed: Option<Vec<u32>>,
    /// The kernels that count shared packed grams.
    level: Level,
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
        self.prepare_with_level(query, Level::active())
    }
}

impl Jaccard {
    /// [`Metric::prepare`] for the kernels of `level` (lowered to what this CPU runs). Every
    /// level gives the same distances; tests and benches use this to run each in one process.
    pub fn prepare_with_level(&self, query: &[u8], level: Level) -> JaccardQuery {
        let mut packed = Vec::new();
        let packed = packed_grams(&self.tokens, query, &mut packed).then_some(packed);
        JaccardQuery {
            tokens: self.tokens.clone(),
            set: set_of(&self.tokens, query)
                .into_iter()
                .map(<[u8]>::to_vec)
                .collect(),
            packed,
            level: level.clamped(),
        }
    }
}

/// The longest q-gram packed into a `u32`.
const PACK_MAX: usize = 4;

/// The sorted, de-duplicated set of `item`'s q-grams, each packed big-endian into a `u32`,
/// into `out`; `false` (and `out` unspecified) when they cannot be packed: other tokens,
/// `q > 4`, an item that is not ASCII or is shorter than `q`.
fn packed_grams(tokens: &Tokens, item: &[u8], out: &mut Vec<u32>) -> bool {
    let Tokens::QGrams(q) = *tokens else {
        return false;
    };
    if !(1..=PACK_MAX).contains(&q) || item.len() < q || !item.is_ascii() {
        return false;
    }
    out.clear();
    // A rolling window: shift the next byte in, keep the low `8q` bits.
    let keep = if q == 4 {
        u32::MAX
    } else {
        (1u32 << (8 * q)) - 1
    };
    let mut w = item[..q - 1]
        .iter()
        .fold(0u32, |w, &b| (w << 8) | u32::from(b));
    out.extend(item[q - 1..].iter().map(|&b| {
        w = ((w << 8) | u32::from(b)) & keep;
        w
    }));
    out.sort_unstable();
    out.dedup();
    true
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
        if let Some(packed) = &self.packed {
            let mut grams = Vec::new();
            if packed_grams(&self.tokens, item, &mut grams) {
                let (a, b) = (packed.len(), grams.len());
                if jaccard(a, b, a.min(b)) > bound {
                    return None;
                }
                let d = jaccard(a, b, shared_at(self.level, packed, &grams));
                return (d <= bound).then_some(d);
            }
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

/// The number of values two sorted, de-duplicated lists share, with the kernels of `level`
/// (already clamped to what the CPU runs).
fn shared_at(level: Level, a: &[u32], b: &[u32]) -> usize {
    #[cfg(target_arch = "x86_64")]
    {
        if level >= Level::Avx512 && a.len() <= simd::QUERY_MAX {
            // SAFETY: the level was clamped to what the CPU reports, so it has AVX-512 F,
            // the kernel's `target_feature`.
            return unsafe { simd::shared_avx512(a, b) };
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = level;
    shared_merge(a, b)
}

/// The plain sorted merge.
fn shared_merge(a: &[u32], b: &[u32]) -> usize {
    let (mut i, mut j, mut shared) = (0, 0, 0);
    while i < a.len() && j < b.len() {
        match a[i].cmp(&b[j]) {
            std::cmp::Ordering::Less => i += 1,
            std::cmp::Ordering::Greater => j += 1,
            std::cmp::Ordering::Equal => {
                shared += 1;
                i += 1;
                j += 1;
            }
        }
    }
    shared
}

#[cfg(target_arch = "x86_64")]
mod simd {
    use std::arch::x86_64::*;

    /// The most query grams kept in registers (four of sixteen).
    pub(super) const QUERY_MAX: usize = 64;

    /// Shared values of `a` (at most [`QUERY_MAX`], distinct) and `b` (distinct): every
    /// value of `b` is compared with all of `a` at once; the query grams hit are the bits
    /// set in the union of the compare masks.
    #[target_feature(enable = "avx512f")]
    pub(super) fn shared_avx512(a: &[u32], b: &[u32]) -> usize {
        debug_assert!(a.len() <= QUERY_MAX);
        let mut regs = [_mm512_setzero_si512(); 4];
        let mut valid = [0 as __mmask16; 4];
        for (k, (r, v)) in regs.iter_mut().zip(&mut valid).enumerate() {
            let len = a.len().saturating_sub(16 * k).min(16);
            *v = ((1u32 << len) - 1) as __mmask16;
            // SAFETY: the mask selects elements `16k .. 16k + len` of `a`, inside the slice;
            // masked-off elements are not read and cannot fault (the pointer, made with
            // `wrapping_add`, is not dereferenced for them).
            *r = unsafe { _mm512_maskz_loadu_epi32(*v, a.as_ptr().wrapping_add(16 * k).cast()) };
        }
        let regs_used = a.len().div_ceil(16);
        let mut hit = [0 as __mmask16; 4];
        for &x in b {
            let x = _mm512_set1_epi32(x as i32);
            for k in 0..regs_used {
                hit[k] |= _mm512_mask_cmpeq_epi32_mask(valid[k], regs[k], x);
            }
        }
        hit.iter().map(|h| h.count_ones() as usize).sum()
    }
}

#[cfg(test)]
mod tests {
    use std::collections::HashSet;

    use proptest::prelude::*;

    use super::*;

    /// The definition with the standard library's `HashSet` (char q-grams, the short-item
    /// rule).
    fn naive(q: usize, a: &str, b: &str) -> f64 {
        let grams = |s: &str| -> HashSet<String> {
            let c: Vec<char> = s.chars().collect();
            if c.is_empty() {
                HashSet::new()
            } else if c.len() <= q {
                HashSet::from([s.to_string()])
            } else {
                c.windows(q).map(|w| w.iter().collect()).collect()
            }
        };
        let (x, y) = (grams(a), grams(b));
        let union = x.union(&y).count();
        if union == 0 {
            0.0
        } else {
            1.0 - x.intersection(&y).count() as f64 / union as f64
        }
    }

    /// Every level, and the byte-string path, give the definition's distance.
    fn check(q: usize, a: &str, b: &str) {
        let m = Jaccard::new(Tokens::QGrams(q)).unwrap();
        let want = naive(q, a, b);
        let mut bytes = m.prepare_with_level(a.as_bytes(), Level::Portable);
        bytes.packed = None;
        assert_eq!(
            bytes.distance(b.as_bytes()),
            want,
            "bytes, q {q}: {a:?} {b:?}"
        );
        for level in Level::ALL.into_iter().filter(|l| l.available()) {
            let p = m.prepare_with_level(a.as_bytes(), level);
            let what = format!("{}, q {q}: {a:?} {b:?}", level.name());
            assert_eq!(p.distance(b.as_bytes()), want, "{what}");
            assert_eq!(p.distance_within(b.as_bytes(), want), Some(want), "{what}");
            if want > 0.0 {
                assert_eq!(p.distance_within(b.as_bytes(), want - 1e-9), None, "{what}");
            }
        }
    }

    #[test]
    fn packs_grams_of_ascii_items_at_least_q_long() {
        let mut v = Vec::new();
        assert!(packed_grams(&Tokens::QGrams(2), b"abab", &mut v));
        assert_eq!(v, [0x6162, 0x6261]);
        assert!(packed_grams(&Tokens::QGrams(4), b"abcde", &mut v));
        assert_eq!(v, [0x61626364, 0x62636465]);
        assert!(!packed_grams(&Tokens::QGrams(3), b"ab", &mut v));
        assert!(!packed_grams(&Tokens::QGrams(5), b"abcdef", &mut v));
        assert!(!packed_grams(&Tokens::QGrams(2), "Skär".as_bytes(), &mut v));
        assert!(!packed_grams(&Tokens::Whitespace, b"a b", &mut v));
    }

    #[test]
    fn packed_and_byte_paths_agree_on_edge_cases() {
        for q in 1..=5 {
            for (a, b) in [
                ("", ""),
                ("", "ab"),
                ("ab", "ab"),
                ("abc", "abcd"),
                ("a\0\0", "a"),
                ("Skär", "Skar"),
                ("harbour", "harbor"),
                (
                    "ACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTACGTAC",
                    "ACGT",
                ),
            ] {
                check(q, a, b);
                check(q, b, a);
            }
        }
    }

    proptest! {
        #[test]
        fn every_level_matches_the_definition(
            q in 1usize..=5,
            a in "[ab\0c]{0,40}",
            b in "[abcé]{0,40}",
        ) {
            check(q, &a, &b);
            check(q, &b, &a);
        }

        #[test]
        fn long_queries_past_the_registers(q in 1usize..=4, a in "[a-z]{60,120}", b in "[a-z]{0,120}") {
            check(q, &a, &b);
        }
    }
}
