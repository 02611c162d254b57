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
use crate::cpu::Level;

/// Hamming distance over Unicode scalar values.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Hamming;

/// A query prepared for Hamming distance.
#[derive(Clone, Debug)]
pub struct HammingQuery {
    bytes: Vec<u8>,
    /// The decoded chars when the query is not ASCII (else the bytes are the chars).
    chars: Option<Vec<char>>,
    /// The kernels that count mismatched bytes of ASCII items.
    level: Level,
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
    /// Prepares `query` for the kernels of [`Level::active`].
    pub fn new(query: &[u8]) -> Self {
        Self::with_level(query, Level::active())
    }

    /// Prepares `query` for the kernels of `level` (lowered to what this CPU runs). Every
    /// level gives the same distances; tests and benches use this to run each in one process.
    ///
    /// ```
    /// use waymark::cpu::Level;
    /// use waymark::metric::HammingQuery;
    ///
    /// for level in Level::ALL {
    ///     let q = HammingQuery::with_level(b"ACGTTGCA", level);
    ///     assert_eq!(q.dist(b"ACGATGCT"), 2);
    /// }
    /// ```
    pub fn with_level(query: &[u8], level: Level) -> Self {
        let chars = (!query.is_ascii()).then(|| query.chars().collect());
        HammingQuery {
            bytes: query.to_vec(),
            chars,
            level: level.clamped(),
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
            let d = q.len().abs_diff(item.len());
            if d > k {
                return None;
            }
            let n = q.len().min(item.len());
            return mismatches_within(self.level, &q[..n], &item[..n], d, k);
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

/// `d` plus the number of positions at which the equally long `a` and `b` differ, or `None`
/// once that exceeds `k` (checked every 64 bytes), with the kernels of `level` (already
/// clamped to what the CPU runs).
#[inline]
fn mismatches_within(level: Level, a: &[u8], b: &[u8], d: usize, k: usize) -> Option<usize> {
    debug_assert_eq!(a.len(), b.len());
    #[cfg(target_arch = "x86_64")]
    {
        if level >= Level::Avx512 {
            // SAFETY: the level was clamped to what the CPU reports, so it has AVX-512 F and
            // BW and popcnt, the `target_feature`s of the kernel.
            return unsafe { simd::avx512(a, b, d, k) };
        }
        if level >= Level::Avx2 {
            // SAFETY: as above, the CPU has AVX2 and popcnt.
            return unsafe { simd::avx2(a, b, d, k) };
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = level;
    mismatches_portable(a, b, d, k)
}

/// The portable form: whole chunks of 64 (the compiler vectorises the inner count),
/// checking the bound between chunks.
#[inline]
fn mismatches_portable(a: &[u8], b: &[u8], mut d: usize, k: usize) -> Option<usize> {
    for (a, b) in a.chunks(64).zip(b.chunks(64)) {
        d += a.iter().zip(b).filter(|(x, y)| x != y).count();
        if d > k {
            return None;
        }
    }
    Some(d)
}

/// Byte compares giving bit masks, counted with `popcnt`: 64 bytes per compare with
/// AVX-512 BW (the last partial block through a masked load, which reads nothing past the
/// slice), 32 with AVX2 (`vpcmpeqb` + `vpmovmskb`; the last partial block one byte at a time).
#[cfg(target_arch = "x86_64")]
mod simd {
    use std::arch::x86_64::*;

    #[target_feature(enable = "avx512f,avx512bw,popcnt")]
    pub(super) fn avx512(a: &[u8], b: &[u8], mut d: usize, k: usize) -> Option<usize> {
        let n = a.len().min(b.len());
        let mut at = 0;
        while at < n {
            let len = (n - at).min(64);
            // All ones in the low `len` bits.
            let m: __mmask64 = u64::MAX >> (64 - len);
            // SAFETY: the mask selects the bytes `at..at + len`, inside both slices
            // (`at + len ≤ n`); masked-off bytes are not read and cannot fault.
            let (x, y) = unsafe {
                (
                    _mm512_maskz_loadu_epi8(m, a.as_ptr().add(at).cast()),
                    _mm512_maskz_loadu_epi8(m, b.as_ptr().add(at).cast()),
                )
            };
            // Masked-off lanes are zero in both, so they compare equal.
            d += _mm512_cmpneq_epi8_mask(x, y).count_ones() as usize;
            if d > k {
                return None;
            }
            at += len;
        }
        Some(d)
    }

    #[target_feature(enable = "avx2,popcnt")]
    pub(super) fn avx2(a: &[u8], b: &[u8], mut d: usize, k: usize) -> Option<usize> {
        let n = a.len().min(b.len());
        let (mut ca, mut cb) = (a[..n].chunks_exact(64), b[..n].chunks_exact(64));
        for (x, y) in (&mut ca).zip(&mut cb) {
            // SAFETY: `x` and `y` are 64 bytes each; unaligned 32-byte loads at 0 and 32.
            let eq = unsafe {
                let p = x.as_ptr().cast::<__m256i>();
                let r = y.as_ptr().cast::<__m256i>();
                let lo = _mm256_cmpeq_epi8(_mm256_loadu_si256(p), _mm256_loadu_si256(r));
                let hi =
                    _mm256_cmpeq_epi8(_mm256_loadu_si256(p.add(1)), _mm256_loadu_si256(r.add(1)));
                u64::from(_mm256_movemask_epi8(lo) as u32)
                    | u64::from(_mm256_movemask_epi8(hi) as u32) << 32
            };
            d += (!eq).count_ones() as usize;
            if d > k {
                return None;
            }
        }
        let (mut x, mut y) = (ca.remainder(), cb.remainder());
        if x.len() >= 32 {
            // SAFETY: `x` and `y` have at least 32 bytes each; unaligned loads.
            let eq = unsafe {
                _mm256_cmpeq_epi8(
                    _mm256_loadu_si256(x.as_ptr().cast()),
                    _mm256_loadu_si256(y.as_ptr().cast()),
                )
            };
            d += (!(_mm256_movemask_epi8(eq) as u32)).count_ones() as usize;
            (x, y) = (&x[32..], &y[32..]);
        }
        if x.len() >= 16 {
            // SAFETY: `x` and `y` have at least 16 bytes each; unaligned loads (SSE2).
            let eq = unsafe {
                _mm_cmpeq_epi8(
                    _mm_loadu_si128(x.as_ptr().cast()),
                    _mm_loadu_si128(y.as_ptr().cast()),
                )
            };
            d += 16 - (_mm_movemask_epi8(eq) as u32).count_ones() as usize;
            (x, y) = (&x[16..], &y[16..]);
        }
        d += x.iter().zip(y).filter(|(p, q)| p != q).count();
        (d <= k).then_some(d)
    }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    /// The plain loop over chars, with the padding rule for unequal lengths.
    fn plain(a: &str, b: &str) -> usize {
        let (x, y): (Vec<char>, Vec<char>) = (a.chars().collect(), b.chars().collect());
        let common = x.iter().zip(&y).filter(|(p, q)| p != q).count();
        common + x.len().abs_diff(y.len())
    }

    /// Every level this CPU runs against the plain loop, unbounded and at the bounds around
    /// the distance; for equal lengths also against `strsim::hamming` (a general-purpose
    /// string-metric crate).
    fn check(a: &str, b: &str) {
        let want = plain(a, b);
        if a.chars().count() == b.chars().count() {
            assert_eq!(strsim::hamming(a, b), Ok(want), "strsim on {a:?} {b:?}");
        }
        for level in Level::ALL.into_iter().filter(|l| l.available()) {
            let q = HammingQuery::with_level(a.as_bytes(), level);
            let what = format!("{} on {a:?} {b:?}", level.name());
            assert_eq!(q.dist(b.as_bytes()), want, "{what}");
            assert_eq!(q.dist_within(b.as_bytes(), want), Some(want), "{what}");
            if want > 0 {
                assert_eq!(q.dist_within(b.as_bytes(), want - 1), None, "{what}");
            }
            for k in [0, 1, 5, 63, 64, 65] {
                let got = q.dist_within(b.as_bytes(), k);
                assert_eq!(got, (want <= k).then_some(want), "{what}, k {k}");
            }
        }
    }

    /// A DNA-like string and a copy with substitutions at chosen positions.
    fn mutated(len: usize, seed: usize, every: usize) -> (String, String) {
        let a: String = (0..len)
            .map(|i| b"ACGT"[(i * 7 + seed) % 4] as char)
            .collect();
        let b: String = a
            .chars()
            .enumerate()
            .map(|(i, c)| {
                if (i + seed).is_multiple_of(every) {
                    'N'
                } else {
                    c
                }
            })
            .collect();
        (a, b)
    }

    #[test]
    fn every_length_around_the_register_widths() {
        for len in 0..=200 {
            for every in [1, 3, 17, 1000] {
                let (a, b) = mutated(len, len, every);
                check(&a, &b);
                check(&a, &b[..b.len() / 2]);
            }
        }
    }

    #[test]
    fn worked_example_and_unicode_fallback() {
        // "karolin" / "kathrin": 3 (the usual textbook pair; value from memory).
        check("karolin", "kathrin");
        check("Skär", "Skar");
        check("ACGT", "ACGTÅ");
    }

    proptest! {
        #[test]
        fn every_level_matches_the_plain_loop(
            a in "[ACGT]{0,150}",
            b in "[ACGN]{0,150}",
        ) {
            check(&a, &b);
        }

        #[test]
        fn every_level_matches_on_any_ascii(a in "[ -~]{0,90}", b in "[ -~]{0,90}") {
            check(&a, &b);
        }
    }
}
