//! The exact path's hot loop: every item's stored lower bound compared with a threshold, in
//! blocks of 32 items whose coordinates are laid out column by column.
//!
//! Exact and range queries need the items whose bound (the largest difference between
//! their stored coordinates and the query's) is at most some threshold `t`, and that bound
//! for each of them. With the coordinates of 32 items side by side per column, one AVX2
//! register holds one coordinate of 32 items: the bound of all 32 is a running
//! `max(|column − q_j|)` over the columns, three instructions per column and no reduction
//! across lanes. Most items exceed a small threshold after a few columns, so every eighth
//! column the block is dropped as soon as all 32 exceed `t`: at 663,473 words and `t = 2`
//! most blocks stop after the first eight of 65 columns (`benches/big.rs`).
//!
//! The first column of a Levenshtein index is each key's length in chars (saturated at
//! 255): the length is the distance to the empty string, so the difference of lengths is
//! one more lower bound, and the most selective one for words, which is why it comes
//! first. Clamping to 255 is 1-Lipschitz, so clamped differences stay lower bounds.
//!
//! Hand-written: no crate offers a thresholded column-blocked L∞ kernel over u8 columns.
//! The AVX2 form is chosen at run time; the portable form gives identical results, which
//! the tests check.

use rayon::prelude::*;

use crate::metric::LevenshteinQuery;

/// Items per block.
pub const BLOCK: usize = 32;

/// Columns per group.
const GROUP: usize = 8;
/// Blocks per tile of [`Columns::within_many`]: 256 blocks' first groups are 64 KiB, which
/// stay in the core's L2 cache while every query of a call is compared with them.
pub const TILE: usize = 256;

/// One query of [`Columns::within_many`]: its value per column and the range of bounds
/// `(lo, hi]` wanted (`lo = None`: every bound up to `hi`).
#[derive(Clone, Copy, Debug)]
pub struct Threshold<'a> {
    /// The query's value per column.
    pub q: &'a [u8],
    /// Bounds at most this are not reported (`None`: from 0).
    pub lo: Option<u8>,
    /// Bounds above this are not reported.
    pub hi: u8,
    /// The query's char signature, used when the columns have the items' (else ignored).
    pub sig: u64,
}
/// Bytes of one block's share of one group.
const CHUNK: usize = GROUP * BLOCK;

/// The coordinates (and, for Levenshtein indexes, key lengths) of every item, transposed
/// into blocks of [`BLOCK`] items: column `j` of block `b` is `BLOCK` bytes, the `j`-th
/// value of items `b·BLOCK ..` (255 in lanes past the last item).
///
/// Columns are stored in groups of eight, group by group: the first group of every block,
/// then the second group of every block, and so on (the last group padded with zero
/// columns). A pass reads the first group of every block in sequence, which the hardware
/// prefetcher follows, and the later groups only of blocks that still have an item within
/// the threshold.
pub struct Columns {
    cols: usize,
    groups: usize,
    blocks: usize,
    n: usize,
    data: Vec<u8>,
    /// Each item's char signature (Levenshtein indexes), in item order.
    sigs: Option<Vec<u64>>,
}

impl Columns {
    /// Transposes `n` rows of `stride` bytes, keeping the first `dim` values of each, after
    /// an optional first column `lens` (one value per item).
    pub fn new(coords: &[u8], stride: usize, dim: usize, lens: Option<&[u8]>) -> Columns {
        Columns::with_signatures(coords, stride, dim, lens, None)
    }

    /// As [`Columns::new`], with each item's char signature
    /// ([`crate::metric::LevenshteinQuery::signature`]): an item's bound is then also at
    /// least its signature gap to the query's ([`Threshold::sig`]), a lower bound of the
    /// Levenshtein distance in edits. Only for whole-distance Levenshtein coordinates.
    pub fn with_signatures(
        coords: &[u8],
        stride: usize,
        dim: usize,
        lens: Option<&[u8]>,
        sigs: Option<&[u64]>,
    ) -> Columns {
        let n = coords.len() / stride.max(1);
        let cols = dim + usize::from(lens.is_some());
        let groups = cols.div_ceil(GROUP);
        let blocks = n.div_ceil(BLOCK);
        let mut data = vec![0u8; groups * blocks * CHUNK];
        let column = |j: usize, i: usize| -> u8 {
            match (lens, j) {
                (Some(l), 0) => l.get(i).copied().unwrap_or(255),
                (Some(_), j) => coords[i * stride + j - 1],
                (None, j) => coords[i * stride + j],
            }
        };
        data.par_chunks_mut(CHUNK)
            .enumerate()
            .for_each(|(at, chunk)| {
                let (g, b) = (at / blocks, at % blocks);
                for c in 0..GROUP {
                    let j = g * GROUP + c;
                    if j >= cols {
                        break;
                    }
                    for lane in 0..BLOCK {
                        let i = b * BLOCK + lane;
                        chunk[c * BLOCK + lane] = if i < n { column(j, i) } else { 255 };
                    }
                }
            });
        Columns {
            cols,
            groups,
            blocks,
            n,
            data,
            sigs: sigs.map(|s| s.to_vec()),
        }
    }

    /// Block `b`'s share of group `g`: eight columns of [`BLOCK`] bytes.
    #[inline]
    fn chunk(&self, g: usize, b: usize) -> &[u8] {
        let at = (g * self.blocks + b) * CHUNK;
        &self.data[at..at + CHUNK]
    }

    /// Number of columns per block.
    pub fn cols(&self) -> usize {
        self.cols
    }

    /// Calls `found(item, bound)` for every item whose bound against `q` (one value per
    /// column) is above `lo` and at most `hi`, in item order. `lo = None` takes every
    /// bound up to `hi`.
    pub fn within(&self, q: &[u8], lo: Option<u8>, hi: u8, mut found: impl FnMut(u32, u8)) {
        let t = Threshold { q, lo, hi, sig: 0 };
        self.within_many(&[t], |_, i, b| found(i, b));
    }

    /// [`Columns::within`] for several queries at once: `found(query, item, bound)`, items
    /// in order for each query. Blocks are taken [`TILE`] at a time and each tile is
    /// compared with every query before the next is read, so the columns are read from
    /// memory about once per call rather than once per query.
    pub fn within_many(&self, qs: &[Threshold<'_>], mut found: impl FnMut(usize, u32, u8)) {
        for t in qs {
            assert_eq!(t.q.len(), self.cols, "one query value per column");
        }
        #[cfg(target_arch = "x86_64")]
        if crate::scan::has_avx2() && std::arch::is_x86_feature_detected!("popcnt") {
            // SAFETY: the CPU has AVX2 and popcnt, the features the function needs.
            unsafe { avx2::within_many(self, qs, &mut found) };
            return;
        }
        self.within_many_portable(qs, &mut found);
    }

    /// The portable form of [`Columns::within_many`] (same results on any CPU).
    pub fn within_many_portable(
        &self,
        qs: &[Threshold<'_>],
        found: &mut impl FnMut(usize, u32, u8),
    ) {
        for t in qs {
            assert_eq!(t.q.len(), self.cols, "one query value per column");
        }
        let mut at = 0;
        while at < self.blocks {
            let end = (at + TILE).min(self.blocks);
            for (j, t) in qs.iter().enumerate() {
                self.blocks_portable(t, at..end, &mut |i, b| found(j, i, b));
            }
            at = end;
        }
    }

    fn blocks_portable(
        &self,
        t: &Threshold<'_>,
        blocks: std::ops::Range<usize>,
        found: &mut impl FnMut(u32, u8),
    ) {
        let (q, hi) = (t.q, t.hi);
        for b in blocks {
            let mut acc = [0u8; BLOCK];
            for g in 0..self.groups {
                let chunk = self.chunk(g, b);
                for (c, &qj) in q[g * GROUP..].iter().take(GROUP).enumerate() {
                    let col = &chunk[c * BLOCK..(c + 1) * BLOCK];
                    for (a, &v) in acc.iter_mut().zip(col) {
                        *a = (*a).max(v.abs_diff(qj));
                    }
                }
                if acc.iter().all(|&a| a > hi) {
                    break;
                }
            }
            self.report(b, &acc, u32::MAX, t, found);
        }
    }

    /// Calls `found` for the lanes of block `b` whose bound is in `(lo, hi]`, the bound
    /// raised to the signature gap first when the columns have signatures.
    #[inline]
    fn report(
        &self,
        b: usize,
        acc: &[u8; BLOCK],
        lanes: u32,
        t: &Threshold<'_>,
        found: &mut impl FnMut(u32, u8),
    ) {
        let mut lanes = lanes;
        while lanes != 0 {
            let lane = lanes.trailing_zeros() as usize;
            lanes &= lanes - 1;
            let a = acc[lane];
            let i = b * BLOCK + lane;
            if a > t.hi || i >= self.n {
                continue;
            }
            let a = match &self.sigs {
                Some(s) => {
                    let gap = LevenshteinQuery::signature_gap(t.sig, s[i]);
                    a.max(gap.min(255) as u8)
                }
                None => a,
            };
            if a <= t.hi && t.lo.is_none_or(|lo| a > lo) {
                found(i as u32, a);
            }
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod avx2 {
    use super::{Columns, Threshold, BLOCK, GROUP, TILE};
    use std::arch::x86_64::*;

    #[target_feature(enable = "avx2,popcnt")]
    pub(super) fn within_many(
        c: &Columns,
        qs: &[Threshold<'_>],
        found: &mut impl FnMut(usize, u32, u8),
    ) {
        // Each query's values per group, padded with zeros like the stored columns.
        let prepared: Vec<Vec<[__m256i; GROUP]>> = qs
            .iter()
            .map(|t| {
                (0..c.groups)
                    .map(|g| {
                        std::array::from_fn(|j| {
                            _mm256_set1_epi8(t.q.get(g * GROUP + j).copied().unwrap_or(0) as i8)
                        })
                    })
                    .collect()
            })
            .collect();
        let mut at = 0;
        while at < c.blocks {
            let end = (at + TILE).min(c.blocks);
            for (j, (t, qv)) in qs.iter().zip(&prepared).enumerate() {
                blocks(c, qv, t, at..end, &mut |i, b| found(j, i, b));
            }
            at = end;
        }
    }

    #[inline]
    #[target_feature(enable = "avx2,popcnt")]
    fn blocks(
        c: &Columns,
        qs: &[[__m256i; GROUP]],
        t: &Threshold<'_>,
        range: std::ops::Range<usize>,
        found: &mut impl FnMut(u32, u8),
    ) {
        let hi = t.hi;
        let above = hi.checked_add(1).map(|h| _mm256_set1_epi8(h as i8));
        for b in range {
            let mut acc = _mm256_setzero_si256();
            for (g, qg) in qs.iter().enumerate() {
                let chunk = c.chunk(g, b);
                for (j, qv) in qg.iter().enumerate() {
                    let col = &chunk[j * BLOCK..(j + 1) * BLOCK];
                    // SAFETY: `col` is exactly 32 bytes; the load is unaligned.
                    let v = unsafe { _mm256_loadu_si256(col.as_ptr() as *const __m256i) };
                    let d = _mm256_or_si256(_mm256_subs_epu8(v, *qv), _mm256_subs_epu8(*qv, v));
                    acc = _mm256_max_epu8(acc, d);
                }
                if let Some(above) = above {
                    // All lanes above `hi`: max(acc, hi + 1) == acc everywhere.
                    let over = _mm256_cmpeq_epi8(_mm256_max_epu8(acc, above), acc);
                    if _mm256_movemask_epi8(over) == -1 {
                        break;
                    }
                }
            }
            let mut out = [0u8; BLOCK];
            // SAFETY: `out` is 32 bytes; the store is unaligned.
            unsafe { _mm256_storeu_si256(out.as_mut_ptr() as *mut __m256i, acc) };
            // Lanes at most `hi`: those where max(acc, hi + 1) != acc.
            let lanes = match above {
                Some(above) => {
                    let over = _mm256_cmpeq_epi8(_mm256_max_epu8(acc, above), acc);
                    !(_mm256_movemask_epi8(over) as u32)
                }
                None => u32::MAX,
            };
            if lanes != 0 {
                c.report(b, &out, lanes, t, found);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn direct(coords: &[u8], stride: usize, dim: usize, lens: Option<&[u8]>, q: &[u8]) -> Vec<u8> {
        let n = coords.len() / stride;
        (0..n)
            .map(|i| {
                let mut m = 0u8;
                let mut j = 0;
                if let Some(l) = lens {
                    m = l[i].abs_diff(q[0]);
                    j = 1;
                }
                for c in 0..dim {
                    m = m.max(coords[i * stride + c].abs_diff(q[j + c]));
                }
                m
            })
            .collect()
    }

    #[test]
    fn signatures_raise_bounds_to_their_gap() {
        let (n, stride, dim) = (300, 8, 5);
        let coords: Vec<u8> = (0..n * stride).map(|i| (i * 7 % 5) as u8).collect();
        let lens: Vec<u8> = (0..n).map(|i| (i % 6) as u8).collect();
        let sigs: Vec<u64> = (0..n as u64)
            .map(|i| i.wrapping_mul(0x9E37_79B9_7F4A_7C15))
            .collect();
        let plain = Columns::new(&coords, stride, dim, Some(&lens));
        let raised = Columns::with_signatures(&coords, stride, dim, Some(&lens), Some(&sigs));
        let q: Vec<u8> = vec![2, 1, 3, 0, 4, 2];
        let qsig = 0x0F0F_00FF_1234_5678u64;
        let mut want = Vec::new();
        plain.within(&q, None, 255, |i, b| {
            let gap = LevenshteinQuery::signature_gap(qsig, sigs[i as usize]) as u8;
            want.push((i, b.max(gap)));
        });
        for hi in [2u8, 9, 40] {
            let mut got = Vec::new();
            raised.within_many(
                &[Threshold {
                    q: &q,
                    lo: Some(1),
                    hi,
                    sig: qsig,
                }],
                |_, i, b| got.push((i, b)),
            );
            let expect: Vec<(u32, u8)> = want
                .iter()
                .copied()
                .filter(|&(_, b)| b > 1 && b <= hi)
                .collect();
            assert_eq!(got, expect, "hi {hi}");
        }
    }

    #[test]
    fn both_forms_find_exactly_the_items_within_the_threshold() {
        let mut seed = 12345u64;
        let mut next = || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (seed >> 33) as u8
        };
        for (n, stride, dim, with_lens) in [
            (1, 8, 3, false),
            (33, 8, 8, true),
            (700, 64, 64, true),
            (97, 16, 11, false),
        ] {
            let coords: Vec<u8> = (0..n * stride).map(|_| next() % 9).collect();
            let lens: Vec<u8> = (0..n).map(|_| next() % 12).collect();
            let lens = with_lens.then_some(&lens[..]);
            let cols = Columns::new(&coords, stride, dim, lens);
            let q: Vec<u8> = (0..cols.cols()).map(|_| next() % 9).collect();
            let want = direct(&coords, stride, dim, lens, &q);
            for (lo, hi) in [
                (None, 0u8),
                (None, 3),
                (Some(1), 4),
                (None, 255),
                (Some(2), 2),
            ] {
                let mut a = Vec::new();
                cols.within(&q, lo, hi, |i, b| a.push((i, b)));
                let mut p = Vec::new();
                cols.within_many_portable(
                    &[Threshold {
                        q: &q,
                        lo,
                        hi,
                        sig: 0,
                    }],
                    &mut |_, i, b| p.push((i, b)),
                );
                // Two queries at once give each one's answer.
                let mut two = [Vec::new(), Vec::new()];
                let other: Vec<u8> = q.iter().map(|&v| v.saturating_add(1)).collect();
                cols.within_many(
                    &[
                        Threshold {
                            q: &other,
                            lo: None,
                            hi: 3,
                            sig: 0,
                        },
                        Threshold {
                            q: &q,
                            lo,
                            hi,
                            sig: 0,
                        },
                    ],
                    |j, i, b| two[j].push((i, b)),
                );
                let expect: Vec<(u32, u8)> = want
                    .iter()
                    .enumerate()
                    .filter(|&(_, &b)| b <= hi && lo.is_none_or(|lo| b > lo))
                    .map(|(i, &b)| (i as u32, b))
                    .collect();
                assert_eq!(two[1], expect);
                assert_eq!(a, expect, "n {n} dim {dim} lo {lo:?} hi {hi}");
                assert_eq!(p, expect);
            }
        }
    }
}
