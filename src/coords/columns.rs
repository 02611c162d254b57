//! The exact path's hot loop: every item's stored lower bound compared with a threshold, in
//! blocks of 32 items whose coordinates are laid out column by column.
//!
//! Exact and range queries need the items whose bound (the largest difference between
//! their stored coordinates and the query's) is at most some threshold `t`, and that bound
//! for each of them. With the coordinates of 32 items side by side per column, one AVX2
//! register holds one coordinate of 32 items: the bound of all 32 is a running
//! `max(|column − q_j|)` over the columns, three instructions per column and no reduction
//! across lanes. Most items exceed a small threshold after a few columns, so every eighth
//! column the block is dropped as soon as all 32 exceed `t`.
//!
//! For a Levenshtein index whose coordinates are whole edits, the first 16 columns hold each
//! key's char counts in 16 bins ([`CharBins`]), whose bound (the larger of the two one-sided
//! count differences) is at least the difference of lengths. For words it is by far the
//! most selective bound, which is why it comes first: at 663,473 words it cut the items
//! measured per exact 10-NN query from 37,471 to 4,004 (`WAYMARK_BIG_PROFILE=exact cargo
//! bench --bench big`).
//!
//! Every run of [`BOX_BLOCKS`] blocks also has a box (per column, the smallest and the
//! largest value of its items), whose bound is at most that of each of its items: a run
//! whose box is beyond the threshold is skipped before its columns are read.
//!
//! Hand-written: no crate offers a thresholded column-blocked L∞ kernel over u8 columns.
//! The AVX2 form (one block per register) and the AVX-512 form (two blocks per register)
//! are chosen at run time through [`crate::cpu::Level`]; the portable form gives identical
//! results, which the tests check at every level the CPU has.

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
/// Blocks per box: every run of this many blocks has, per column, the smallest and the
/// largest value of its items (its box, made by [`Columns::build`]), which bound every item of the run
/// from below; a run whose box bound exceeds the threshold is skipped without reading
/// its columns.
pub const BOX_BLOCKS: usize = 4;

/// Number of char-count columns ([`CharBins`]): two groups.
pub const BINS: usize = 16;

/// The chars of a set of strings folded into `N` bins ([`BINS`] unless told), for the count bound of the
/// Levenshtein distance: with `A` and `B` the numbers of chars of two strings in each bin,
/// the distance is at least `max(Σ (A − B)⁺, Σ (B − A)⁺)`, because one edit (insertion,
/// deletion or substitution) lowers each of the two sums by at most one. Any folding of
/// chars into bins keeps the bound; the bins are chosen from the strings' own char
/// frequencies (the most frequent chars get a bin each, the others fill the lightest
/// bins), so that common chars are told apart. Every char outside ASCII shares one bin.
///
/// The count bound is never below the difference of lengths (the sums differ by exactly
/// that), and counts saturate at 255, which keeps it a lower bound.
///
/// ```
/// use waymark::coords::columns::CharBins;
///
/// let words: [&[u8]; 3] = [b"ferry", b"buoy", b"quay"];
/// let bins = CharBins::fit(words.iter().copied());
/// let (a, b) = (bins.counts(b"ferry"), bins.counts(b"buoy"));
/// assert!(CharBins::gap(&a, &b) <= 4); // the Levenshtein distance of the two is 4
/// assert_eq!(CharBins::gap(&a, &a), 0);
/// ```
#[derive(Clone, Debug)]
pub struct CharBins<const N: usize = BINS> {
    ascii: [u8; 128],
    other: u8,
}

impl CharBins {
    /// [`BINS`] bins fitted to the char frequencies of `strings`.
    pub fn fit<'s>(strings: impl Iterator<Item = &'s [u8]>) -> CharBins {
        CharBins::fitted(strings)
    }
}

impl<const N: usize> CharBins<N> {
    /// `N` bins fitted to the char frequencies of `strings`.
    pub fn fitted<'s>(strings: impl Iterator<Item = &'s [u8]>) -> CharBins<N> {
        // Symbols 0..128: ASCII bytes; 128: every other char.
        let mut freq = [0u64; 129];
        for s in strings {
            let mut ascii = 0;
            for &b in s.iter().filter(|b| b.is_ascii()) {
                freq[usize::from(b)] += 1;
                ascii += 1;
            }
            freq[128] += (LevenshteinQuery::item_len(s) - ascii) as u64;
        }
        let mut symbols: Vec<usize> = (0..129).collect();
        symbols.sort_by_key(|&c| (std::cmp::Reverse(freq[c]), c));
        let mut load = [0u64; N];
        let mut bin_of = [0u8; 129];
        for c in symbols {
            let lightest = (0..N).min_by_key(|&b| (load[b], b)).unwrap_or(0);
            load[lightest] += freq[c];
            bin_of[c] = lightest as u8;
        }
        let mut ascii = [0u8; 128];
        ascii.copy_from_slice(&bin_of[..128]);
        CharBins {
            ascii,
            other: bin_of[128],
        }
    }

    /// The number of chars of `s` (UTF-8, each invalid sequence one char) in each bin,
    /// saturated at 255.
    pub fn counts(&self, s: &[u8]) -> [u8; N] {
        let mut c = [0u8; N];
        let mut ascii = 0;
        for &b in s {
            if b.is_ascii() {
                let bin = &mut c[usize::from(self.ascii[usize::from(b)])];
                *bin = bin.saturating_add(1);
                ascii += 1;
            }
        }
        if ascii < s.len() {
            // A byte below 0x80 is always a char of its own in lossy decoding, so the
            // other chars are the length in chars less the ASCII bytes.
            let others = LevenshteinQuery::item_len(s) - ascii;
            let bin = &mut c[usize::from(self.other)];
            *bin = bin.saturating_add(others.min(255) as u8);
        }
        c
    }

    /// The [`CharBins::counts`] of a prepared query's text.
    pub fn query_counts(&self, q: &LevenshteinQuery) -> [u8; N] {
        let (ascii, other) = q.char_tally();
        let mut wide = [0u32; N];
        for (b, &n) in ascii.iter().enumerate() {
            wide[usize::from(self.ascii[b])] += n;
        }
        wide[usize::from(self.other)] += other;
        wide.map(|n| n.min(255) as u8)
    }

    /// The count bound of two strings' [`CharBins::counts`].
    pub fn gap(a: &[u8; N], b: &[u8; N]) -> u32 {
        let (mut up, mut down) = (0u32, 0u32);
        for (&x, &y) in a.iter().zip(b) {
            up += u32::from(x.saturating_sub(y));
            down += u32::from(y.saturating_sub(x));
        }
        up.max(down)
    }
}

/// What [`Columns::build`] lays out: the stored coordinates, and for strings under
/// Levenshtein whose coordinates are whole distances, char counts and signatures.
#[derive(Clone)]
pub struct Parts<'a> {
    /// The coordinate rows, `stride` bytes each: in item order, or in any order that
    /// [`Parts::positions`] maps items into (the rows are then read in place, not copied).
    pub coords: &'a [u8],
    /// Where item `i`'s row is in [`Parts::coords`] (its row number), when the rows are not
    /// in item order; `None`: row `i` is item `i`'s.
    pub positions: Option<&'a (dyn Fn(usize) -> usize + Sync)>,
    /// Bytes per row.
    pub stride: usize,
    /// Coordinates used per row (the first `dim`).
    pub dim: usize,
    /// Each item's [`CharBins::counts`], in item order: the bound is then also at least
    /// the count bound, in the coordinates' unit (edits).
    pub counts: Option<&'a [[u8; BINS]]>,
    /// Each item's char signature ([`LevenshteinQuery::signature`]), in item order: the
    /// bound of a lane within the threshold is then raised to its signature gap to the
    /// query's ([`Threshold::sig`]).
    pub sigs: Option<Vec<u64>>,
}

/// The coordinates of every item, transposed into blocks of [`BLOCK`] items: column `j` of
/// block `b` is `BLOCK` bytes, the `j`-th value of items `b·BLOCK ..` (255 in lanes past
/// the last item).
///
/// With char counts ([`Parts::counts`]) the first [`BINS`] columns hold them and the
/// coordinates follow: a block's bound is the largest of the count bound and the L∞
/// difference of the coordinates.
///
/// Columns are stored in groups of eight, group by group: the first group of every block,
/// then the second group of every block, and so on (the last group padded with zero
/// columns). A pass reads the first group of every block in sequence, which the hardware
/// prefetcher follows, and the later groups only of blocks that still have an item within
/// the threshold.
pub struct Columns {
    cols: usize,
    groups: usize,
    /// Leading groups that hold char counts.
    count_groups: usize,
    blocks: usize,
    n: usize,
    data: Vec<u8>,
    /// Each item's char signature, when given.
    sigs: Option<Vec<u64>>,
    /// Per run of [`BOX_BLOCKS`] blocks, `2 · cols` bytes: each column's smallest value
    /// over the run's items, then each column's largest.
    boxes: Vec<u8>,
}

impl Columns {
    /// Lays out `parts` (see [`Parts`] for what each adds to the bound).
    pub fn build(parts: Parts<'_>) -> Columns {
        let Parts {
            coords,
            positions,
            stride,
            dim,
            counts,
            sigs,
        } = parts;
        let n = coords.len() / stride.max(1);
        let count_cols = if counts.is_some() { BINS } else { 0 };
        let cols = count_cols + dim;
        let groups = cols.div_ceil(GROUP);
        let blocks = n.div_ceil(BLOCK);
        let mut data = vec![0u8; groups * blocks * CHUNK];
        // Item `i`'s row. A row number out of range (a damaged positions table, which
        // `Index::check_rows` refuses before any query) reads as an empty row, whose
        // values read as 0: never a panic.
        let row = |i: usize| -> &[u8] {
            let p = positions.map_or(i, |p| p(i));
            p.checked_mul(stride)
                .and_then(|at| coords.get(at..at.checked_add(stride)?))
                .unwrap_or(&[])
        };
        // Tiles of blocks, each with its share of every group: a tile's items are read
        // row by row, each row once (rows stored in another order than the items' are
        // scattered, so one pass per group would fetch each of them once per group).
        const TILE_BLOCKS: usize = 64;
        let tiles = blocks.div_ceil(TILE_BLOCKS);
        let mut per_tile: Vec<Vec<&mut [u8]>> =
            (0..tiles).map(|_| Vec::with_capacity(groups)).collect();
        if blocks > 0 {
            for group in data.chunks_mut(blocks * CHUNK) {
                for (t, share) in group.chunks_mut(TILE_BLOCKS * CHUNK).enumerate() {
                    per_tile[t].push(share);
                }
            }
        }
        per_tile
            .into_par_iter()
            .enumerate()
            .for_each(|(t, mut shares)| {
                let first = t * TILE_BLOCKS * BLOCK;
                let len = shares.first().map_or(0, |s| s.len() / CHUNK * BLOCK);
                for at in 0..len {
                    let (i, lb, lane) = (first + at, at / BLOCK, at % BLOCK);
                    let r = if i < n { row(i) } else { &[] };
                    for (g, share) in shares.iter_mut().enumerate() {
                        let width = GROUP.min(cols - g * GROUP);
                        for c in 0..width {
                            let j = g * GROUP + c;
                            share[lb * CHUNK + c * BLOCK + lane] = if i >= n {
                                255
                            } else {
                                match counts {
                                    Some(k) if j < BINS => k[i][j],
                                    _ => r.get(j - count_cols).copied().unwrap_or(0),
                                }
                            };
                        }
                    }
                }
            });
        let mut c = Columns {
            cols,
            groups,
            count_groups: count_cols / GROUP,
            blocks,
            n,
            data,
            sigs,
            boxes: Vec::new(),
        };
        c.boxes = c.make_boxes();
        c
    }

    /// The boxes of every run of [`BOX_BLOCKS`] blocks, from the laid-out columns (lanes
    /// past the last item left out).
    fn make_boxes(&self) -> Vec<u8> {
        let bb = BOX_BLOCKS;
        let runs = self.blocks.div_ceil(bb);
        let cols = self.cols;
        let mut boxes = vec![0u8; runs * 2 * cols];
        boxes
            .par_chunks_mut((2 * cols).max(1))
            .enumerate()
            .for_each(|(r, bx)| {
                let (lo, hi) = bx.split_at_mut(cols);
                lo.fill(u8::MAX);
                hi.fill(0);
                let first = r * bb;
                for b in first..(first + bb).min(self.blocks) {
                    let lanes = BLOCK.min(self.n - b * BLOCK);
                    for j in 0..cols {
                        let chunk = self.chunk(j / GROUP, b);
                        let col = &chunk[(j % GROUP) * BLOCK..][..lanes];
                        for &v in col {
                            lo[j] = lo[j].min(v);
                            hi[j] = hi[j].max(v);
                        }
                    }
                }
            });
        boxes
    }

    /// The lower bound that box `r` gives every item of its blocks against `q`: the count
    /// bound of the box (each bin's count of an item is within the box, so
    /// `Σ (min − q)⁺ ≤ Σ (A − q)⁺` and `Σ (q − max)⁺ ≤ Σ (q − A)⁺`) and the largest
    /// distance from a query value to a column's interval, saturated as the kernels are.
    #[inline]
    fn box_bound(&self, r: usize, q: &[u8]) -> u8 {
        let cols = self.cols;
        let bx = &self.boxes[r * 2 * cols..(r + 1) * 2 * cols];
        let (lo, hi) = bx.split_at(cols);
        let counted = self.count_groups * GROUP;
        // At most 16 · 255 each: no overflow in u16.
        let (mut up, mut down) = (0u16, 0u16);
        for ((&l, &h), &v) in lo[..counted].iter().zip(&hi[..counted]).zip(&q[..counted]) {
            up += u16::from(l.saturating_sub(v));
            down += u16::from(v.saturating_sub(h));
        }
        let mut m = up.max(down).min(255) as u8;
        for ((&l, &h), &v) in lo[counted..].iter().zip(&hi[counted..]).zip(&q[counted..]) {
            m = m.max(l.saturating_sub(v)).max(v.saturating_sub(h));
        }
        m
    }

    /// The runs of blocks in `blocks` whose box bound against `t` is at most `t.hi`, in
    /// order, consecutive runs joined: the kernels compare only these.
    fn alive(
        &self,
        t: &Threshold<'_>,
        blocks: std::ops::Range<usize>,
    ) -> Vec<std::ops::Range<usize>> {
        let mut out: Vec<std::ops::Range<usize>> = Vec::new();
        if t.hi == u8::MAX || self.boxes.is_empty() {
            if !blocks.is_empty() {
                out.push(blocks);
            }
            return out;
        }
        let mut b = blocks.start;
        while b < blocks.end {
            let r = b / BOX_BLOCKS;
            let end = ((r + 1) * BOX_BLOCKS).min(blocks.end);
            if self.box_bound(r, t.q) <= t.hi {
                match out.last_mut() {
                    Some(last) if last.end == b => last.end = end,
                    _ => out.push(b..end),
                }
            }
            b = end;
        }
        out
    }

    /// Block `b`'s share of group `g`: eight columns of [`BLOCK`] bytes.
    #[inline]
    fn chunk(&self, g: usize, b: usize) -> &[u8] {
        let at = (g * self.blocks + b) * CHUNK;
        &self.data[at..at + CHUNK]
    }

    /// Number of columns per block: a query gives one value for each (its char counts
    /// first, when the columns have them, then its coordinates).
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
    /// in item order for each query. Blocks are taken [`TILE`] at a time and each tile
    /// is compared with every query before the next is read, so the columns are read from
    /// memory about once per call rather than once per query.
    pub fn within_many(&self, qs: &[Threshold<'_>], found: impl FnMut(usize, u32, u8)) {
        self.within_many_in(qs, 0..self.blocks, found);
    }

    /// Number of blocks ([`BLOCK`] items each, the last one possibly part-filled).
    pub fn blocks(&self) -> usize {
        self.blocks
    }

    /// [`Columns::within_many`] over the blocks in `blocks` only (items
    /// `blocks.start · BLOCK .. blocks.end · BLOCK`): a self-join whose items are sorted
    /// compares a block of items only with the blocks after it.
    pub fn within_many_in(
        &self,
        qs: &[Threshold<'_>],
        blocks: std::ops::Range<usize>,
        found: impl FnMut(usize, u32, u8),
    ) {
        self.within_many_at(crate::cpu::Level::active(), qs, blocks, found);
    }

    /// [`Columns::within_many_in`] with the kernel of `level` (lowered to what the CPU
    /// runs), whatever `WAYMARK_SIMD` says: the levels give identical results, which tests
    /// compare in one process. AVX-512 compares two blocks per 64-byte register, AVX2 one
    /// block per 32-byte register.
    pub fn within_many_at(
        &self,
        level: crate::cpu::Level,
        qs: &[Threshold<'_>],
        blocks: std::ops::Range<usize>,
        mut found: impl FnMut(usize, u32, u8),
    ) {
        for t in qs {
            assert_eq!(t.q.len(), self.cols, "one query value per column");
        }
        let blocks = blocks.start.min(self.blocks)..blocks.end.min(self.blocks);
        #[cfg(target_arch = "x86_64")]
        match level.clamped() {
            crate::cpu::Level::Avx512 => {
                // SAFETY: the CPU has AVX-512 F, BW and VL (the level is clamped to what
                // it runs), and AVX2 and popcnt with them.
                unsafe { avx512::within_many(self, qs, blocks, &mut found) };
                return;
            }
            crate::cpu::Level::Avx2 => {
                // SAFETY: the CPU has AVX2 and popcnt, the features the function needs.
                unsafe { avx2::within_many(self, qs, blocks, &mut found) };
                return;
            }
            crate::cpu::Level::Portable => {}
        }
        #[cfg(not(target_arch = "x86_64"))]
        let _ = level;
        self.portable_in(qs, blocks, &mut found);
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
        self.portable_in(qs, 0..self.blocks, found);
    }

    fn portable_in(
        &self,
        qs: &[Threshold<'_>],
        blocks: std::ops::Range<usize>,
        found: &mut impl FnMut(usize, u32, u8),
    ) {
        let mut at = blocks.start;
        while at < blocks.end {
            let end = (at + TILE).min(blocks.end);
            for (j, t) in qs.iter().enumerate() {
                for run in self.alive(t, at..end) {
                    self.blocks_portable(t, run, &mut |i, b| found(j, i, b));
                }
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
            let (mut up, mut down) = ([0u8; BLOCK], [0u8; BLOCK]);
            for g in 0..self.groups {
                let chunk = self.chunk(g, b);
                for (c, &qj) in q[g * GROUP..].iter().take(GROUP).enumerate() {
                    let col = &chunk[c * BLOCK..(c + 1) * BLOCK];
                    if g < self.count_groups {
                        for ((u, d), &v) in up.iter_mut().zip(down.iter_mut()).zip(col) {
                            *u = u.saturating_add(v.saturating_sub(qj));
                            *d = d.saturating_add(qj.saturating_sub(v));
                        }
                    } else {
                        for (a, &v) in acc.iter_mut().zip(col) {
                            *a = (*a).max(v.abs_diff(qj));
                        }
                    }
                }
                if g < self.count_groups {
                    for ((a, &u), &d) in acc.iter_mut().zip(&up).zip(&down) {
                        *a = u.max(d);
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
        range: std::ops::Range<usize>,
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
        let mut at = range.start;
        while at < range.end {
            let end = (at + TILE).min(range.end);
            for (j, (t, qv)) in qs.iter().zip(&prepared).enumerate() {
                for run in c.alive(t, at..end) {
                    blocks(c, qv, t, run, &mut |i, b| found(j, i, b));
                }
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
            let (mut up, mut down) = (acc, acc);
            for (g, qg) in qs.iter().enumerate() {
                let chunk = c.chunk(g, b);
                if g < c.count_groups {
                    for (j, qv) in qg.iter().enumerate() {
                        let col = &chunk[j * BLOCK..(j + 1) * BLOCK];
                        // SAFETY: `col` is exactly 32 bytes; the load is unaligned.
                        let v = unsafe { _mm256_loadu_si256(col.as_ptr() as *const __m256i) };
                        up = _mm256_adds_epu8(up, _mm256_subs_epu8(v, *qv));
                        down = _mm256_adds_epu8(down, _mm256_subs_epu8(*qv, v));
                    }
                    acc = _mm256_max_epu8(up, down);
                } else {
                    for (j, qv) in qg.iter().enumerate() {
                        let col = &chunk[j * BLOCK..(j + 1) * BLOCK];
                        // SAFETY: `col` is exactly 32 bytes; the load is unaligned.
                        let v = unsafe { _mm256_loadu_si256(col.as_ptr() as *const __m256i) };
                        let d = _mm256_or_si256(_mm256_subs_epu8(v, *qv), _mm256_subs_epu8(*qv, v));
                        acc = _mm256_max_epu8(acc, d);
                    }
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

#[cfg(target_arch = "x86_64")]
mod avx512 {
    use super::{Columns, Threshold, BLOCK, GROUP, TILE};
    use std::arch::x86_64::*;

    #[target_feature(enable = "avx2,popcnt,avx512f,avx512bw,avx512vl")]
    pub(super) fn within_many(
        c: &Columns,
        qs: &[Threshold<'_>],
        range: std::ops::Range<usize>,
        found: &mut impl FnMut(usize, u32, u8),
    ) {
        // Each query's values per group, padded with zeros like the stored columns.
        let prepared: Vec<Vec<[__m512i; GROUP]>> = qs
            .iter()
            .map(|t| {
                (0..c.groups)
                    .map(|g| {
                        std::array::from_fn(|j| {
                            _mm512_set1_epi8(t.q.get(g * GROUP + j).copied().unwrap_or(0) as i8)
                        })
                    })
                    .collect()
            })
            .collect();
        let mut at = range.start;
        while at < range.end {
            let end = (at + TILE).min(range.end);
            for (j, (t, qv)) in qs.iter().zip(&prepared).enumerate() {
                for run in c.alive(t, at..end) {
                    blocks(c, qv, t, run, &mut |i, b| found(j, i, b));
                }
            }
            at = end;
        }
    }

    /// Column `j` of blocks `b` (low half) and `b + 1` (high half) of one group.
    #[inline]
    #[target_feature(enable = "avx2,avx512f")]
    fn load_pair(lo: &[u8], hi: &[u8], j: usize) -> __m512i {
        let (a, b) = (
            &lo[j * BLOCK..(j + 1) * BLOCK],
            &hi[j * BLOCK..(j + 1) * BLOCK],
        );
        // SAFETY: `a` and `b` are exactly 32 bytes each; the loads are unaligned.
        let (a, b) = unsafe {
            (
                _mm256_loadu_si256(a.as_ptr() as *const __m256i),
                _mm256_loadu_si256(b.as_ptr() as *const __m256i),
            )
        };
        _mm512_inserti64x4::<1>(_mm512_castsi256_si512(a), b)
    }

    /// The blocks of `range` two at a time: the same bounds as the AVX2 kernel, in 64
    /// lanes. A last block without a partner is loaded twice and its copy's lanes ignored.
    #[inline]
    #[target_feature(enable = "avx2,popcnt,avx512f,avx512bw,avx512vl")]
    fn blocks(
        c: &Columns,
        qs: &[[__m512i; GROUP]],
        t: &Threshold<'_>,
        range: std::ops::Range<usize>,
        found: &mut impl FnMut(u32, u8),
    ) {
        let hi = _mm512_set1_epi8(t.hi as i8);
        // With `hi` = 255 no lane is ever above it.
        let bounded = t.hi < u8::MAX;
        let mut b = range.start;
        while b < range.end {
            let pair = b + 1 < range.end;
            let ignore: u64 = if pair { 0 } else { u64::MAX << 32 };
            let mut acc = _mm512_setzero_si512();
            let (mut up, mut down) = (acc, acc);
            for (g, qg) in qs.iter().enumerate() {
                let lo_chunk = c.chunk(g, b);
                let hi_chunk = if pair { c.chunk(g, b + 1) } else { lo_chunk };
                if g < c.count_groups {
                    for (j, qv) in qg.iter().enumerate() {
                        let v = load_pair(lo_chunk, hi_chunk, j);
                        up = _mm512_adds_epu8(up, _mm512_subs_epu8(v, *qv));
                        down = _mm512_adds_epu8(down, _mm512_subs_epu8(*qv, v));
                    }
                    acc = _mm512_max_epu8(up, down);
                } else {
                    for (j, qv) in qg.iter().enumerate() {
                        let v = load_pair(lo_chunk, hi_chunk, j);
                        let d = _mm512_or_si512(_mm512_subs_epu8(v, *qv), _mm512_subs_epu8(*qv, v));
                        acc = _mm512_max_epu8(acc, d);
                    }
                }
                if bounded && _mm512_cmpgt_epu8_mask(acc, hi) | ignore == u64::MAX {
                    break;
                }
            }
            let mut out = [0u8; 2 * BLOCK];
            // SAFETY: `out` is 64 bytes; the store is unaligned.
            unsafe { _mm512_storeu_si512(out.as_mut_ptr() as *mut __m512i, acc) };
            // Lanes at most `hi`.
            let lanes = if bounded {
                !_mm512_cmpgt_epu8_mask(acc, hi)
            } else {
                u64::MAX
            };
            let (first, second) = out.split_at(BLOCK);
            if lanes as u32 != 0 {
                c.report(
                    b,
                    first.try_into().expect("32 bytes"),
                    lanes as u32,
                    t,
                    found,
                );
            }
            if pair && (lanes >> 32) as u32 != 0 {
                let lanes = (lanes >> 32) as u32;
                c.report(b + 1, second.try_into().expect("32 bytes"), lanes, t, found);
            }
            b += 2;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Each item's bound, computed directly from its definition.
    fn direct(
        coords: &[u8],
        stride: usize,
        dim: usize,
        counts: Option<&[[u8; BINS]]>,
        q: &[u8],
    ) -> Vec<u8> {
        let n = coords.len() / stride;
        (0..n)
            .map(|i| {
                let mut m = 0u8;
                let mut j = 0;
                if let Some(c) = counts {
                    let qc: [u8; BINS] = q[..BINS].try_into().unwrap();
                    m = CharBins::gap(&c[i], &qc).min(255) as u8;
                    j = BINS;
                }
                for c in 0..dim {
                    m = m.max(coords[i * stride + c].abs_diff(q[j + c]));
                }
                m
            })
            .collect()
    }

    fn lcg(seed: u64) -> impl FnMut() -> u8 {
        let mut seed = seed;
        move || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (seed >> 33) as u8
        }
    }

    #[test]
    fn rows_read_through_positions_lay_out_as_rows_in_item_order() {
        let mut next = lcg(777);
        // Three tiles of blocks, the last one partial.
        let (n, stride, dim) = (2 * 64 * BLOCK + 45, 8, 6);
        let in_order: Vec<u8> = (0..n * stride).map(|_| next() % 13).collect();
        // Row p of `stored` is item `members[p]`'s (a fixed permutation); `at[i]` is item
        // i's row number.
        let members: Vec<usize> = (0..n).map(|p| (p * 37 + 11) % n).collect();
        let mut at = vec![0; n];
        for (p, &i) in members.iter().enumerate() {
            at[i] = p;
        }
        let stored: Vec<u8> = members
            .iter()
            .flat_map(|&i| in_order[i * stride..(i + 1) * stride].to_vec())
            .collect();
        let position = |i: usize| at[i];
        let plain = Columns::build(Parts {
            coords: &in_order,
            positions: None,
            stride,
            dim,
            counts: None,
            sigs: None,
        });
        let mapped = Columns::build(Parts {
            coords: &stored,
            positions: Some(&position),
            stride,
            dim,
            counts: None,
            sigs: None,
        });
        assert_eq!(plain.data, mapped.data);
        let q = [3u8, 1, 4, 1, 5, 9];
        let (mut a, mut b) = (Vec::new(), Vec::new());
        plain.within(&q, None, 6, |i, d| a.push((i, d)));
        mapped.within(&q, None, 6, |i, d| b.push((i, d)));
        assert!(!a.is_empty());
        assert_eq!(a, b);
    }

    #[test]
    fn signatures_raise_bounds_to_their_gap() {
        let (n, stride, dim) = (300, 8, 5);
        let coords: Vec<u8> = (0..n * stride).map(|i| (i * 7 % 5) as u8).collect();
        let counts: Vec<[u8; BINS]> = (0..n)
            .map(|i| std::array::from_fn(|b| ((i + b) % 3) as u8))
            .collect();
        let sigs: Vec<u64> = (0..n as u64)
            .map(|i| i.wrapping_mul(0x9E37_79B9_7F4A_7C15))
            .collect();
        let parts = Parts {
            coords: &coords,
            positions: None,
            stride,
            dim,
            counts: Some(&counts),
            sigs: None,
        };
        let plain = Columns::build(parts.clone());
        let raised = Columns::build(Parts {
            sigs: Some(sigs.clone()),
            ..parts
        });
        let mut q: Vec<u8> = vec![1; BINS];
        q.extend([2, 1, 3, 0, 4]);
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
    fn boxes_skip_only_runs_with_no_item_within_the_threshold() {
        let mut next = lcg(4242);
        // Runs of BOX_BLOCKS blocks around centres far apart, so that most boxes are
        // skipped; the last run is part-filled.
        let run = BOX_BLOCKS * BLOCK;
        let (n, stride, dim) = (9 * run + 37, 24, 20);
        let centre = |i: usize| ((i / run) * 25 % 200) as u8;
        let coords: Vec<u8> = (0..n * stride)
            .map(|at| centre(at / stride) + next() % 6)
            .collect();
        let counts: Vec<[u8; BINS]> = (0..n)
            .map(|i| std::array::from_fn(|j| (i / run + j) as u8 % 5 + next() % 3))
            .collect();
        for counts in [None, Some(&counts[..])] {
            let cols = Columns::build(Parts {
                coords: &coords,
                positions: None,
                stride,
                dim,
                counts,
                sigs: None,
            });
            for near in [0, 3 * run + 5, n - 1] {
                let mut q: Vec<u8> = Vec::new();
                if let Some(c) = counts {
                    q.extend_from_slice(&c[near]);
                }
                q.extend((0..dim).map(|c| coords[near * stride + c].saturating_add(1)));
                let want = direct(&coords, stride, dim, counts, &q);
                for hi in [0u8, 2, 5, 9] {
                    let t = Threshold {
                        q: &q,
                        lo: None,
                        hi,
                        sig: 0,
                    };
                    // Every box bound is at most the bound of each item of its run.
                    for r in 0..cols.blocks.div_ceil(BOX_BLOCKS) {
                        let items = r * run..((r + 1) * run).min(n);
                        let least = want[items].iter().min().copied().unwrap_or(255);
                        assert!(cols.box_bound(r, &q) <= least, "run {r}");
                    }
                    let alive: usize = cols.alive(&t, 0..cols.blocks).iter().map(|r| r.len()).sum();
                    if hi <= 5 {
                        assert!(alive < cols.blocks / 2, "boxes skip most runs: {alive}");
                    }
                    let expect: Vec<(u32, u8)> = want
                        .iter()
                        .enumerate()
                        .filter(|&(_, &b)| b <= hi)
                        .map(|(i, &b)| (i as u32, b))
                        .collect();
                    assert!(expect.iter().any(|&(i, _)| i as usize == near) || hi < 1);
                    for level in crate::cpu::Level::ALL.into_iter().filter(|l| l.available()) {
                        let mut got = Vec::new();
                        cols.within_many_at(level, &[t], 0..cols.blocks, |_, i, b| {
                            got.push((i, b))
                        });
                        assert_eq!(got, expect, "{level:?} hi {hi} near {near}");
                    }
                }
            }
        }
    }

    #[test]
    fn both_forms_find_exactly_the_items_within_the_threshold() {
        let mut next = lcg(12345);
        for (n, stride, dim, with_counts) in [
            (1, 8, 3, false),
            (33, 8, 8, true),
            (700, 64, 64, true),
            (97, 16, 11, false),
            (300, 8, 2, true),
        ] {
            let coords: Vec<u8> = (0..n * stride).map(|_| next() % 9).collect();
            let counts: Vec<[u8; BINS]> = (0..n)
                .map(|_| std::array::from_fn(|_| next() % 4))
                .collect();
            let counts = with_counts.then_some(&counts[..]);
            let cols = Columns::build(Parts {
                coords: &coords,
                positions: None,
                stride,
                dim,
                counts,
                sigs: None,
            });
            let q: Vec<u8> = (0..cols.cols()).map(|_| next() % 9).collect();
            let want = direct(&coords, stride, dim, counts, &q);
            for (lo, hi) in [
                (None, 0u8),
                (None, 3),
                (Some(1), 4),
                (None, 255),
                (Some(2), 2),
                (Some(3), 12),
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

    #[test]
    fn every_level_finds_what_the_portable_form_finds() {
        use crate::cpu::Level;
        let mut next = lcg(4242);
        // Odd and even numbers of blocks (the AVX-512 kernel takes two at a time), with and
        // without counts and signatures, thresholds up to 255 (no early exit).
        for (n, stride, dim, with_counts) in [
            (1, 8, 3, false),
            (33, 8, 8, true),
            (95, 16, 13, true),
            (700, 64, 64, true),
            (1000, 8, 6, false),
            (64 * 9, 32, 20, true),
        ] {
            let coords: Vec<u8> = (0..n * stride).map(|_| next() % 9).collect();
            let counts: Vec<[u8; BINS]> = (0..n)
                .map(|_| std::array::from_fn(|_| next() % 4))
                .collect();
            let sigs: Vec<u64> = (0..n as u64)
                .map(|i| i.wrapping_mul(0x9E37_79B9_7F4A_7C15))
                .collect();
            let cols = Columns::build(Parts {
                coords: &coords,
                positions: None,
                stride,
                dim,
                counts: with_counts.then_some(&counts[..]),
                sigs: with_counts.then(|| sigs.clone()),
            });
            let q: Vec<u8> = (0..cols.cols()).map(|_| next() % 9).collect();
            let other: Vec<u8> = q.iter().map(|&v| v.saturating_add(2)).collect();
            for (lo, hi) in [
                (None, 0u8),
                (None, 3),
                (Some(1), 5),
                (None, 255),
                (Some(4), 254),
            ] {
                let ts = [
                    Threshold {
                        q: &q,
                        lo,
                        hi,
                        sig: 0x0F0F_00FF_1234_5678,
                    },
                    Threshold {
                        q: &other,
                        lo: None,
                        hi: 2,
                        sig: 0,
                    },
                ];
                let blocks = cols.blocks();
                for range in [0..blocks, 1..blocks, 0..blocks.saturating_sub(1), 3..7] {
                    let mut want = Vec::new();
                    cols.within_many_at(Level::Portable, &ts, range.clone(), |j, i, b| {
                        want.push((j, i, b))
                    });
                    for level in Level::ALL.into_iter().filter(|l| l.available()) {
                        let mut got = Vec::new();
                        cols.within_many_at(level, &ts, range.clone(), |j, i, b| {
                            got.push((j, i, b))
                        });
                        assert_eq!(got, want, "{level:?} n {n} lo {lo:?} hi {hi} {range:?}");
                    }
                }
            }
        }
    }

    #[test]
    fn a_range_of_blocks_gives_the_items_of_those_blocks_only() {
        let mut next = lcg(99);
        let (n, stride, dim) = (1000, 8, 6);
        let coords: Vec<u8> = (0..n * stride).map(|_| next() % 7).collect();
        let cols = Columns::build(Parts {
            coords: &coords,
            positions: None,
            stride,
            dim,
            counts: None,
            sigs: None,
        });
        let q: Vec<u8> = (0..cols.cols()).map(|_| next() % 7).collect();
        let want = direct(&coords, stride, dim, None, &q);
        let t = Threshold {
            q: &q,
            lo: None,
            hi: 3,
            sig: 0,
        };
        for range in [0..0, 0..1, 3..17, 30..cols.blocks(), 5..cols.blocks() + 9] {
            let mut got = Vec::new();
            cols.within_many_in(&[t, t], range.clone(), |j, i, b| {
                if j == 1 {
                    got.push((i, b))
                }
            });
            let items = range.start * BLOCK..(range.end * BLOCK).min(n);
            let expect: Vec<(u32, u8)> = items
                .filter(|&i| want[i] <= 3)
                .map(|i| (i as u32, want[i]))
                .collect();
            assert_eq!(got, expect, "{range:?}");
        }
    }

    #[test]
    fn count_bound_never_exceeds_the_distance_and_queries_count_alike() {
        // Reference distances: the `strsim` crate's Levenshtein (a dev-dependency).
        let words: Vec<String> = [
            "harbour",
            "harbor",
            "arbour",
            "quay",
            "quays",
            "kitteñ",
            "kitten",
            "ñañu",
            "",
            "aaaaaaaa",
            "a",
            "Anchorage",
            "anchorage",
            "ballast",
            "bollard",
            "ÿÿÿ",
        ]
        .iter()
        .map(|w| w.to_string())
        .collect();
        let mut next = lcg(7);
        let mut all = words.clone();
        for _ in 0..300 {
            let len = next() % 12;
            all.push(
                (0..len)
                    .map(|_| ['a', 'b', 'e', 'r', 'ñ', 'Q', ' '][usize::from(next() % 7)])
                    .collect(),
            );
        }
        // A long run saturates its bin at 255.
        all.push("e".repeat(300));
        let bins = CharBins::fit(all.iter().map(|w| w.as_bytes()));
        for a in &all {
            let ca = bins.counts(a.as_bytes());
            let q = LevenshteinQuery::new(a.as_bytes());
            assert_eq!(bins.query_counts(&q), ca, "{a:?}");
            for b in &all {
                let cb = bins.counts(b.as_bytes());
                let d = strsim::levenshtein(a, b) as u32;
                let gap = CharBins::gap(&ca, &cb);
                assert!(gap <= d, "{a:?} {b:?}: bound {gap} > distance {d}");
                let len_gap = a
                    .chars()
                    .count()
                    .min(255)
                    .abs_diff(b.chars().count().min(255));
                assert!(gap as usize >= len_gap, "{a:?} {b:?}");
            }
        }
        // Invalid UTF-8 counts one char per invalid sequence, as the metric does.
        let bad: &[u8] = b"ab\xffc\xe2\x82";
        let q = LevenshteinQuery::new(bad);
        assert_eq!(bins.query_counts(&q), bins.counts(bad));
    }
}
