//! Unit-cost Levenshtein distance over Unicode scalar values, computed bit-parallel.
//!
//! The distance counts the fewest single-character insertions, deletions and substitutions
//! that turn one string into the other. Characters are Unicode scalar values (`char`), not
//! bytes: `"é"` and `"e"` differ by one edit although `"é"` takes two bytes in UTF-8.
//!
//! # Method
//!
//! The query is the *pattern* of the bit-vector algorithm of Myers ("A fast bit-vector
//! algorithm for approximate string matching based on dynamic programming", JACM 46(3),
//! 1999), in the global edit-distance form described by Hyyrö (2001, 2003): the first row of
//! the dynamic-programming table is `0, 1, 2, …` instead of all zeros, which amounts to
//! shifting a 1 into the horizontal positive delta at every column. One column of the table
//! is held as two words of vertical deltas (+1 and −1 bits), so each character of the item
//! costs a dozen word operations however long the query is, up to 64 characters.
//!
//! * The per-character match masks are built once, in [`Metric::prepare`]: a 128-entry table
//!   indexed by byte for ASCII, and a small sorted list (binary search) for other characters.
//!   Item bytes below `0x80` index the table directly; only non-ASCII bytes are decoded.
//!   Characters of the item that do not occur in the query have the empty mask.
//! * Queries longer than 64 characters use one word per 64 rows (the blocked form from the
//!   same paper), passing the horizontal delta of each block's last row on to the next block.
//! * [`LevenshteinQuery::dist_within`] gives up as soon as the distance must exceed the bound.
//!   First by the length difference, at no cost. Then, for queries up to 64 chars, by the
//!   cell of the current column on the diagonal that ends in the answer (values never decrease
//!   along a diagonal). For longer queries, by computing only the blocks that meet the band of
//!   diagonals within the bound (Ukkonen's cut-off), so a small bound costs one or two
//!   blocks per column.
//!
//! # Speed
//!
//! One character costs a chain of 9 dependent word operations, so a single short item
//! keeps the processor's arithmetic units mostly idle. Scans therefore go through
//! [`LevenshteinQuery::dist_batch`] (or [`LevenshteinQuery::dist_each`]), which on x86-64
//! CPUs with AVX2 runs one item per vector lane, the lanes as wide as the query: 32 items in
//! 8-bit lanes for queries of up to 8 chars, 16 in 16-bit lanes up to 16, eight in 32-bit
//! lanes up to 32, four in 64-bit lanes up to 64. With AVX-512 the same widths hold twice
//! the items: 64 items in 8-bit lanes up to 8 chars, 32 in 16-bit lanes up to 16, 16 in
//! 32-bit lanes up to 32, 8 in 64-bit lanes up to 64. Elsewhere (no AVX2, or another
//! architecture) four items are interleaved as four independent dependency chains, with the
//! same results. `WAYMARK_SIMD` and [`LevenshteinQuery::with_level`] force a lower level
//! ([`crate::cpu::Level`]). [`LevenshteinQuery::dist_within`] stops early when the bound is small. On
//! x86-64 every kernel is also compiled for `popcnt` and `bmi1` and picked at run time, since
//! the baseline target has neither instruction. `benches/kernel.rs` measures all of these.
//!
//! # Why this is written here
//!
//! General-purpose string crates (such as `strsim`, used by the tests as a reference) run the
//! full quadratic dynamic program for every pair and keep no state between calls. Search
//! compares one query with thousands to millions of items, so it needs the masks prepared
//! once, a batched form that runs many items per vector register, the multi-block form for
//! long items and the bounded form for re-ranking; no well-kept crate offers a batched
//! bit-parallel Levenshtein with prepared masks (nor that combination over Unicode scalar
//! values with lossy decoding), so the kernel is written by hand.
//!
//! # Bytes that are not UTF-8
//!
//! Items come from memory-mapped files that may be damaged. Nothing here panics on any input:
//! each invalid sequence is read as one U+FFFD REPLACEMENT CHARACTER, using the same
//! "maximal subpart" rule as [`String::from_utf8_lossy`] (via [`bstr::decode_utf8`]).
//!
//! # Example
//!
//! ```
//! use waymark::metric::{Levenshtein, Metric, PreparedQuery};
//!
//! let q = Levenshtein.prepare("kitten".as_bytes());
//! assert_eq!(q.dist(b"sitting"), 3);
//! assert_eq!(q.dist_within(b"sitting", 3), Some(3));
//! assert_eq!(q.dist_within(b"sitting", 2), None);
//! assert_eq!(q.distance("kitteñ".as_bytes()), 1.0); // one char, two bytes
//! assert_eq!(q.len(), 6);
//! ```

use super::{Metric, MetricKind, PreparedQuery};

/// Rows of the dynamic-programming table held in one machine word.
const WORD: usize = 64;

/// Longest item, in bytes, that the vector-lane kernels take; longer items (rare in word
/// lists) go to the one-item kernel.
const LANE_BYTES: usize = 64;

/// Number of blocks kept on the stack by the multi-block kernel (queries up to 256 chars).
const STACK_WORDS: usize = 4;

/// Unit-cost Levenshtein distance over Unicode scalar values.
///
/// ```
/// use waymark::metric::{Levenshtein, Metric};
///
/// assert_eq!(Levenshtein.distance(b"flaw", b"lawn"), 2.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Levenshtein;

/// A query prepared for the bit-parallel Levenshtein kernel.
///
/// Holds the match masks of every character of the query. Build it with
/// [`Metric::prepare`] (or [`LevenshteinQuery::new`]) once, then compare it with many items
/// through [`LevenshteinQuery::dist`] and [`LevenshteinQuery::dist_within`] (integer results,
/// the fastest) or the [`PreparedQuery`] methods (`f64` results).
///
/// ```
/// use waymark::metric::LevenshteinQuery;
///
/// let q = LevenshteinQuery::new(b"Saturday");
/// assert_eq!(q.dist(b"Sunday"), 3);
/// assert_eq!(q.dist_within(b"Sunday", 1), None);
/// ```
#[derive(Clone, Debug)]
pub struct LevenshteinQuery {
    /// Length of the query in chars (`m`, the number of rows).
    len: usize,
    /// Number of 64-row blocks: `ceil(len / 64)`.
    words: usize,
    /// Bit of the last pattern row within the last block.
    last_bit: u64,
    /// Masks of the ASCII chars, `128 × words`, laid out `[byte][block]`.
    ascii: Box<[u64]>,
    /// Non-ASCII chars of the query, sorted and distinct.
    other_chars: Box<[char]>,
    /// Masks of `other_chars`, `(other_chars.len() + 1) × words`, laid out `[char][block]`.
    /// The extra last row is all zero: the mask of chars absent from the query.
    other_masks: Box<[u64]>,
    /// The query's bytes, kept for queries of more than one block only: against a long item
    /// that shares a long prefix or suffix with it, the shared ends are cut off first.
    text: Option<Box<[u8]>>,
    /// Whether this CPU has `popcnt` and `bmi1`, checked once when the query is prepared.
    #[cfg(target_arch = "x86_64")]
    x86_fast: bool,
    /// Whether this CPU also has AVX2, for the kernels that run one item per vector lane.
    #[cfg(target_arch = "x86_64")]
    x86_lanes: bool,
    /// Whether the lane kernels may use AVX-512 (lanes sized to the query), not AVX2.
    #[cfg(target_arch = "x86_64")]
    x86_wide: bool,
}

impl LevenshteinQuery {
    /// Prepares `query` (UTF-8, invalid sequences read as U+FFFD) for repeated comparison,
    /// for the kernels of [`crate::cpu::Level::active`].
    pub fn new(query: &[u8]) -> Self {
        let mut q = Self::with_level(query, crate::cpu::Level::active());
        #[cfg(target_arch = "x86_64")]
        {
            q.x86_fast = crate::cpu::has_popcnt_bmi1();
        }
        q
    }

    /// Prepares `query` for the kernels of `level` at most (lowered to what this CPU runs),
    /// whatever `WAYMARK_SIMD` says: for tests and benches that compare the levels in one
    /// process. Every level gives the same distances.
    ///
    /// ```
    /// use waymark::cpu::Level;
    /// use waymark::metric::LevenshteinQuery;
    ///
    /// for level in Level::ALL {
    ///     assert_eq!(LevenshteinQuery::with_level(b"kitten", level).dist(b"sitting"), 3);
    /// }
    /// ```
    pub fn with_level(query: &[u8], level: crate::cpu::Level) -> Self {
        #[cfg(target_arch = "x86_64")]
        use crate::cpu::Level;
        let level = level.clamped();
        #[cfg(not(target_arch = "x86_64"))]
        let _ = level;
        let chars: Vec<char> = Chars::new(query).collect();
        let len = chars.len();
        let words = len.div_ceil(WORD);
        let last_bit = if len == 0 {
            0
        } else {
            1u64 << ((len - 1) % WORD)
        };

        let mut other_chars: Vec<char> = chars.iter().copied().filter(|c| !c.is_ascii()).collect();
        other_chars.sort_unstable();
        other_chars.dedup();

        let mut ascii = vec![0u64; 128 * words];
        let mut other_masks = vec![0u64; (other_chars.len() + 1) * words];
        for (row, &c) in chars.iter().enumerate() {
            let (block, bit) = (row / WORD, 1u64 << (row % WORD));
            if c.is_ascii() {
                ascii[c as usize * words + block] |= bit;
            } else if let Ok(k) = other_chars.binary_search(&c) {
                other_masks[k * words + block] |= bit;
            }
        }

        LevenshteinQuery {
            len,
            words,
            last_bit,
            ascii: ascii.into_boxed_slice(),
            other_chars: other_chars.into_boxed_slice(),
            other_masks: other_masks.into_boxed_slice(),
            text: (words > 1).then(|| query.into()),
            #[cfg(target_arch = "x86_64")]
            x86_fast: level >= Level::Avx2,
            #[cfg(target_arch = "x86_64")]
            x86_lanes: level >= Level::Avx2,
            #[cfg(target_arch = "x86_64")]
            x86_wide: level >= Level::Avx512,
        }
    }

    /// Length of the query in Unicode scalar values (invalid sequences count one each).
    #[inline]
    pub fn len(&self) -> usize {
        self.len
    }

    /// Whether the query is the empty string.
    #[inline]
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Length of `item` in the chars this metric counts (Unicode scalar values, each invalid
    /// UTF-8 sequence one char): the distance from `item` to the empty string, so that
    /// `|len(a) − len(b)|` is a lower bound of the distance of `a` and `b`.
    ///
    /// ```
    /// use waymark::metric::LevenshteinQuery;
    ///
    /// assert_eq!(LevenshteinQuery::item_len("kitteñ".as_bytes()), 6);
    /// assert_eq!(LevenshteinQuery::new(b"").dist("kitteñ".as_bytes()), 6);
    /// ```
    #[inline]
    pub fn item_len(item: &[u8]) -> usize {
        char_len(item)
    }

    /// The set of chars of `item`, folded into 64 bits: an ASCII char `c` sets bit
    /// `c mod 63`, every other char (including each invalid UTF-8 sequence) bit 63.
    ///
    /// For two strings with signatures `a` and `b`, the distance is at least
    /// `max(popcount(a & !b), popcount(b & !a))`: each bit set in `a` but not in `b` stands
    /// for chars of the first string that the second lacks, which every alignment must
    /// substitute or delete, one edit per char at least and distinct chars for distinct
    /// bits. See [`LevenshteinQuery::signature_gap`].
    ///
    /// ```
    /// use waymark::metric::LevenshteinQuery;
    ///
    /// let (a, b) = (LevenshteinQuery::signature(b"ferry"), LevenshteinQuery::signature(b"buoy"));
    /// assert_eq!(LevenshteinQuery::signature_gap(a, b), 3); // f, e, r against b, u, o
    /// ```
    #[inline]
    pub fn signature(item: &[u8]) -> u64 {
        // A byte below 0x80 is always a char of its own in lossy decoding (it never continues
        // a sequence), and every byte from 0x80 up belongs to a non-ASCII char or to an
        // invalid sequence read as U+FFFD: so bytes give the same set as chars.
        item.iter().fold(0u64, |m, &b| {
            m | if b < 0x80 {
                1u64 << (b % 63)
            } else {
                1u64 << 63
            }
        })
    }

    /// The [`LevenshteinQuery::signature`] of the query itself.
    ///
    /// ```
    /// use waymark::metric::LevenshteinQuery;
    ///
    /// let q = LevenshteinQuery::new("kitteñ".as_bytes());
    /// assert_eq!(q.signature_of_query(), LevenshteinQuery::signature("kitteñ".as_bytes()));
    /// ```
    pub fn signature_of_query(&self) -> u64 {
        let mut m = if self.other_chars.is_empty() {
            0
        } else {
            1u64 << 63
        };
        for c in 0..128usize {
            let masks = &self.ascii[c * self.words..(c + 1) * self.words];
            if masks.iter().any(|&w| w != 0) {
                m |= 1u64 << (c % 63);
            }
        }
        m
    }

    /// How many times each ASCII char occurs in the query, and how many chars outside
    /// ASCII it has (each invalid UTF-8 sequence one).
    ///
    /// ```
    /// use waymark::metric::LevenshteinQuery;
    ///
    /// let (ascii, other) = LevenshteinQuery::new("añaa".as_bytes()).char_tally();
    /// assert_eq!((ascii[usize::from(b'a')], other), (3, 1));
    /// ```
    pub fn char_tally(&self) -> ([u32; 128], u32) {
        let mut ascii = [0u32; 128];
        for (c, n) in ascii.iter_mut().enumerate() {
            let masks = &self.ascii[c * self.words..(c + 1) * self.words];
            *n = masks.iter().map(|w| w.count_ones()).sum();
        }
        let other = self.other_masks.iter().map(|w| w.count_ones()).sum();
        (ascii, other)
    }

    /// The lower bound of the distance given by two [`LevenshteinQuery::signature`]s.
    #[inline]
    pub fn signature_gap(a: u64, b: u64) -> u32 {
        (a & !b).count_ones().max((b & !a).count_ones())
    }

    /// The Levenshtein distance from the query to `item`.
    ///
    /// Saturates at `u32::MAX` for items of more than four billion chars.
    #[inline]
    pub fn dist(&self, item: &[u8]) -> u32 {
        let d = match self.words {
            0 => char_len(item),
            1 => self.dist_one_word(item),
            _ => {
                if let Some((q, mid)) = self.trim_common(item) {
                    return q.dist(mid);
                }
                let d = self.dist_blocks(item, usize::MAX);
                debug_assert!(d.is_some(), "an unbounded scan always finishes");
                d.unwrap_or(usize::MAX)
            }
        };
        saturate(d)
    }

    /// Calls `f(position, distance)` for every item, in order; the fastest way to scan.
    ///
    /// Single-block queries go through [`LevenshteinQuery::dist_batch`] in groups of 64
    /// items (vector lanes with AVX2, else four independent dependency chains); longer
    /// queries take items one at a time through [`LevenshteinQuery::dist`].
    ///
    /// ```
    /// use waymark::metric::LevenshteinQuery;
    ///
    /// let q = LevenshteinQuery::new(b"flaw");
    /// let mut out = Vec::new();
    /// q.dist_each(["lawn", "flaw", "flown"], |i, d| out.push((i, d)));
    /// assert_eq!(out, [(0, 2), (1, 0), (2, 2)]);
    /// ```
    #[inline]
    pub fn dist_each<I>(&self, items: I, mut f: impl FnMut(usize, u32))
    where
        I: IntoIterator,
        I::Item: AsRef<[u8]>,
    {
        let mut items = items.into_iter();
        let mut position = 0;
        if self.words == 1 {
            #[cfg(target_arch = "x86_64")]
            if self.x86_lanes {
                // Up to eight items at a time, one per vector lane.
                // Items in groups of 64, one vector lane per item within the group.
                const GROUP: usize = 64;
                let mut held: Vec<I::Item> = Vec::with_capacity(GROUP);
                let mut out = [0u32; GROUP];
                loop {
                    held.clear();
                    held.extend(items.by_ref().take(GROUP));
                    let mut batch: [&[u8]; GROUP] = [&[]; GROUP];
                    for (slot, x) in batch.iter_mut().zip(&held) {
                        *slot = x.as_ref();
                    }
                    self.dist_batch(&batch[..held.len()], &mut out);
                    for (j, &d) in out[..held.len()].iter().enumerate() {
                        f(position + j, d);
                    }
                    position += held.len();
                    if held.len() < GROUP {
                        return;
                    }
                }
            }
            loop {
                let got = [items.next(), items.next(), items.next(), items.next()];
                if let [Some(a), Some(b), Some(c), Some(d)] = &got {
                    let ds =
                        self.dist_one_word_quad([a.as_ref(), b.as_ref(), c.as_ref(), d.as_ref()]);
                    for (j, d) in ds.into_iter().enumerate() {
                        f(position + j, saturate(d));
                    }
                    position += 4;
                    continue;
                }
                // Fewer than four were left; an iterator that ends stays ended for
                // these slices and ranges, and every item taken is answered.
                for x in got.into_iter().flatten() {
                    f(position, self.dist(x.as_ref()));
                    position += 1;
                }
                return;
            }
        }
        for a in items {
            f(position, self.dist(a.as_ref()));
            position += 1;
        }
    }

    /// The distances from the query to every item of `items`, written to the same positions
    /// of `out` (only the first `min(items.len(), out.len())` are computed).
    ///
    /// Same results as [`LevenshteinQuery::dist`] item by item. For queries of up to 64 chars
    /// on x86-64 CPUs with AVX2, items are computed four at a time, one per 64-bit lane of a
    /// vector register, or eight at a time in 32-bit lanes when the query has at most 32
    /// chars; with AVX-512, 8 to 64 at a time in lanes of 64 down to 8 bits, the narrowest
    /// that holds the query; elsewhere four interleaved items at a time.
    ///
    /// ```
    /// use waymark::metric::LevenshteinQuery;
    ///
    /// let q = LevenshteinQuery::new(b"ferry");
    /// let items: [&[u8]; 3] = [b"ferry", b"fairy", b"berry"];
    /// let mut out = [0; 3];
    /// q.dist_batch(&items, &mut out);
    /// assert_eq!(out, [0, 2, 1]);
    /// ```
    pub fn dist_batch(&self, items: &[&[u8]], out: &mut [u32]) {
        let count = items.len().min(out.len());
        let (items, out) = (&items[..count], &mut out[..count]);
        if self.words != 1 {
            for (item, d) in items.iter().zip(out.iter_mut()) {
                *d = self.dist(item);
            }
            return;
        }
        #[cfg(target_arch = "x86_64")]
        if self.x86_wide {
            // SAFETY: `x86_wide` is set only when the CPU reports AVX-512 F, BW and VL besides
            // AVX2, popcnt and bmi1; the query has 1 ..= 64 chars and `out` the length of
            // `items`.
            unsafe {
                match self.len {
                    ..=8 => wide::run_x64(self, items, out),
                    9..=16 => wide::run_x32(self, items, out),
                    17..=32 => wide::run_x16(self, items, out),
                    _ => wide::run_x8(self, items, out),
                }
            }
            return;
        }
        #[cfg(target_arch = "x86_64")]
        if self.x86_lanes {
            // SAFETY: `x86_lanes` is set only when the CPU reports AVX2, popcnt and bmi1; the
            // query has 1 ..= 64 chars, each kernel gets the lengths it takes, and `out` has
            // the length of `items`.
            unsafe {
                match self.len {
                    ..=8 => lanes::run_x32(self, items, out),
                    9..=16 => lanes::run_x16(self, items, out),
                    17..=32 => lanes::run_x8(self, items, out),
                    _ => lanes::run_x4(self, items, out),
                }
            }
            return;
        }
        let mut quads_in = items.chunks_exact(4);
        let mut quads_out = out.chunks_exact_mut(4);
        for (it, d) in (&mut quads_in).zip(&mut quads_out) {
            let got = self.dist_one_word_quad([it[0], it[1], it[2], it[3]]);
            for (d, got) in d.iter_mut().zip(got) {
                *d = saturate(got);
            }
        }
        for (item, d) in quads_in.remainder().iter().zip(quads_out.into_remainder()) {
            *d = self.dist(item);
        }
    }

    /// The Levenshtein distance from the query to `item` if it is at most `k`, else `None`.
    ///
    /// Returns as soon as the distance is known to exceed `k`: items whose length differs from
    /// the query's by more than `k` cost no kernel work at all.
    #[inline]
    pub fn dist_within(&self, item: &[u8], k: u32) -> Option<u32> {
        let k = k as usize;
        let m = self.len;
        let bytes = item.len();
        // An item has at most as many chars as bytes.
        if bytes.saturating_add(k) < m {
            return None;
        }
        if self.words == 1 {
            let n = char_len(item);
            if n.abs_diff(m) > k {
                return None;
            }
            return self.dist_one_word_within(item, k, n).map(saturate);
        }
        // Too many bytes may still be few enough chars; count them only then.
        if bytes > m.saturating_add(k) && (item.is_ascii() || char_len(item) > m + k) {
            return None;
        }
        if let Some((q, mid)) = self.trim_common(item) {
            return q.dist_within(mid, k as u32);
        }
        let d = match self.words {
            0 => Some(char_len(item)).filter(|&d| d <= k),
            _ => self.dist_blocks(item, k),
        };
        d.map(saturate)
    }

    /// For a multi-block query and an item sharing at least 64 bytes of prefix and suffix
    /// with it: the query's middle, prepared, and the item's middle. Cutting shared ends
    /// leaves the edit distance unchanged (an optimal alignment matches them; common
    /// practice), and turns the O(m·n/64) kernel into one over the differing middles, which
    /// is what makes near-equal long items (reads, 1 MB lines) cheap. Only for valid UTF-8,
    /// cut at char boundaries of both strings.
    fn trim_common<'i>(&self, item: &'i [u8]) -> Option<(LevenshteinQuery, &'i [u8])> {
        const WORTH: usize = 64;
        let text = self.text.as_deref()?;
        let mut pre = text.iter().zip(item).take_while(|(a, b)| a == b).count();
        let (qs, is) = (
            std::str::from_utf8(text).ok()?,
            std::str::from_utf8(item).ok()?,
        );
        while !(qs.is_char_boundary(pre) && is.is_char_boundary(pre)) {
            pre -= 1;
        }
        let (qr, ir) = (&text[pre..], &item[pre..]);
        let mut suf = qr
            .iter()
            .rev()
            .zip(ir.iter().rev())
            .take_while(|(a, b)| a == b)
            .count();
        while !(qs.is_char_boundary(text.len() - suf) && is.is_char_boundary(item.len() - suf)) {
            suf -= 1;
        }
        if pre + suf < WORTH {
            return None;
        }
        let q = LevenshteinQuery::new(&qr[..qr.len() - suf]);
        Some((q, &ir[..ir.len() - suf]))
    }

    /// Unbounded single-block distance, on the fastest kernel this CPU runs.
    #[inline]
    fn dist_one_word(&self, item: &[u8]) -> usize {
        #[cfg(target_arch = "x86_64")]
        if self.x86_fast {
            // SAFETY: `x86_fast` is set only when the CPU reports `popcnt` and `bmi1`.
            return unsafe { x86::dist_one_word(self, item) };
        }
        self.dist_one_word_impl(item)
    }

    /// Four single-block distances at once, on the fastest kernel this CPU runs.
    #[inline]
    fn dist_one_word_quad(&self, it: [&[u8]; 4]) -> [usize; 4] {
        #[cfg(target_arch = "x86_64")]
        if self.x86_fast {
            // SAFETY: `x86_fast` is set only when the CPU reports `popcnt` and `bmi1`.
            return unsafe { x86::dist_one_word_quad(self, it) };
        }
        self.dist_one_word_quad_impl(it)
    }

    /// Bounded single-block distance, on the fastest kernel this CPU runs.
    #[inline]
    fn dist_one_word_within(&self, item: &[u8], k: usize, n: usize) -> Option<usize> {
        #[cfg(target_arch = "x86_64")]
        if self.x86_fast {
            // SAFETY: `x86_fast` is set only when the CPU reports `popcnt` and `bmi1`.
            return unsafe { x86::dist_one_word_within(self, item, k, n) };
        }
        self.dist_one_word_within_impl(item, k, n)
    }

    /// Multi-block distance, on the fastest kernel this CPU runs.
    #[inline]
    fn dist_blocks(&self, item: &[u8], k: usize) -> Option<usize> {
        #[cfg(target_arch = "x86_64")]
        if self.x86_fast {
            // SAFETY: `x86_fast` is set only when the CPU reports `popcnt` and `bmi1`.
            return unsafe { x86::dist_blocks(self, item, k) };
        }
        self.dist_blocks_impl(item, k)
    }

    /// The ASCII mask table of a single-block query.
    #[inline(always)]
    fn ascii_one_word(&self) -> &[u64; 128] {
        // `words == 1` here, so the table has exactly 128 entries; the conversion cannot fail
        // and lets the compiler drop the bounds checks of byte-indexed look-ups.
        self.ascii[..128]
            .try_into()
            .expect("single-block table has 128 entries")
    }

    /// Row of `other_masks` for a non-ASCII char (the zero row if absent from the query).
    #[inline]
    fn other_row(&self, c: char) -> usize {
        self.other_chars
            .binary_search(&c)
            .unwrap_or(self.other_chars.len())
    }

    /// Decodes the non-ASCII char starting at `item[0]`; returns its row and byte length.
    #[inline(never)]
    #[cold]
    fn decode_other(&self, item: &[u8]) -> (usize, usize) {
        let (c, size) = bstr::decode_utf8(item);
        // `size` is at least 1 for a non-empty slice, so the scan always advances.
        (
            self.other_row(c.unwrap_or(char::REPLACEMENT_CHARACTER)),
            size.max(1),
        )
    }

    /// Match mask of the char starting at `item[*i]` (whose first byte is `b`) for a
    /// single-block query; advances `*i` past the char.
    #[inline(always)]
    fn eq_one_word(&self, ascii: &[u64; 128], item: &[u8], i: &mut usize, b: u8) -> u64 {
        if b < 0x80 {
            *i += 1;
            ascii[b as usize]
        } else {
            let (row, size) = self.decode_other(&item[*i..]);
            *i += size;
            self.other_masks[row]
        }
    }

    /// Runs the single-block kernel over `item[*i..]`, counting the columns.
    #[inline(always)]
    fn run_one_word(&self, ascii: &[u64; 128], item: &[u8], i: &mut usize, col: &mut Column) {
        while let Some(&b) = item.get(*i) {
            let eq = self.eq_one_word(ascii, item, i, b);
            step(&mut col.pv, &mut col.mv, eq);
            col.n += 1;
        }
    }

    /// Calls `put(column, mask)` with the match mask of every char of `item` for a
    /// single-block query; returns the number of chars.
    #[inline(always)]
    fn each_mask(&self, item: &[u8], mut put: impl FnMut(usize, u64)) -> usize {
        let ascii = self.ascii_one_word();
        let (mut i, mut j) = (0, 0);
        while let Some(&b) = item.get(i) {
            put(j, self.eq_one_word(ascii, item, &mut i, b));
            j += 1;
        }
        j
    }

    /// Rows of the query within its single block, as a bit mask.
    #[inline(always)]
    fn rows_one_word(&self) -> u64 {
        self.last_bit | (self.last_bit.wrapping_sub(1))
    }

    /// The distance held by a finished single-block column.
    #[inline(always)]
    fn finish_one_word(&self, col: &Column) -> usize {
        // D[m][n] = D[0][n] + Σ vertical deltas of the last column = n + #(+1) − #(−1).
        let rows = self.last_bit | (self.last_bit - 1);
        col.n + (col.pv & rows).count_ones() as usize - (col.mv & rows).count_ones() as usize
    }

    /// Unbounded single-block kernel (`1 ≤ m ≤ 64`).
    #[inline(always)]
    fn dist_one_word_impl(&self, item: &[u8]) -> usize {
        let ascii = self.ascii_one_word();
        let mut col = Column::new();
        self.run_one_word(ascii, item, &mut 0, &mut col);
        self.finish_one_word(&col)
    }

    /// Four single-block distances at once: four independent dependency chains keep more of
    /// the CPU's ALUs busy than two (measured by the `kernel` bench).
    #[inline(always)]
    fn dist_one_word_quad_impl(&self, it: [&[u8]; 4]) -> [usize; 4] {
        let ascii = self.ascii_one_word();
        let mut c = [Column::new(), Column::new(), Column::new(), Column::new()];
        let mut i = [0usize; 4];
        while let (Some(&x0), Some(&x1), Some(&x2), Some(&x3)) = (
            it[0].get(i[0]),
            it[1].get(i[1]),
            it[2].get(i[2]),
            it[3].get(i[3]),
        ) {
            let e0 = self.eq_one_word(ascii, it[0], &mut i[0], x0);
            let e1 = self.eq_one_word(ascii, it[1], &mut i[1], x1);
            let e2 = self.eq_one_word(ascii, it[2], &mut i[2], x2);
            let e3 = self.eq_one_word(ascii, it[3], &mut i[3], x3);
            step(&mut c[0].pv, &mut c[0].mv, e0);
            step(&mut c[1].pv, &mut c[1].mv, e1);
            step(&mut c[2].pv, &mut c[2].mv, e2);
            step(&mut c[3].pv, &mut c[3].mv, e3);
            for col in c.iter_mut() {
                col.n += 1;
            }
        }
        for j in 0..4 {
            self.run_one_word(ascii, it[j], &mut i[j], &mut c[j]);
        }
        [
            self.finish_one_word(&c[0]),
            self.finish_one_word(&c[1]),
            self.finish_one_word(&c[2]),
            self.finish_one_word(&c[3]),
        ]
    }

    /// Bounded single-block kernel for an item of `n` chars; the caller has applied the
    /// length filter `|m − n| ≤ k`.
    ///
    /// Values never decrease along a diagonal of the table (`D[i][j] ≤ D[i+1][j+1]`, a lemma
    /// of Ukkonen, 1985), so after column `j` the distance is at least `D[j + m − n][j]`, the
    /// cell on the diagonal that ends in `D[m][n]` (or at least `D[0][j] = j ≤ n − m` before
    /// that diagonal enters the table). That cell is the column prefix sum up to row
    /// `j + m − n`: two population counts, off the loop-carried chain, and far stronger than a
    /// last-row bound, so most items that are too far stop after a few chars.
    #[inline(always)]
    fn dist_one_word_within_impl(&self, item: &[u8], k: usize, n: usize) -> Option<usize> {
        let ascii = self.ascii_one_word();
        let m = self.len;
        let mut col = Column::new();
        let mut i = 0;
        while let Some(&b) = item.get(i) {
            let eq = self.eq_one_word(ascii, item, &mut i, b);
            step(&mut col.pv, &mut col.mv, eq);
            col.n += 1;
            // Row of the final diagonal in this column (0 while it is still above the table);
            // at most m ≤ 64.
            let r = (col.n + m).saturating_sub(n);
            let rows = if r >= WORD { !0 } else { (1u64 << r) - 1 };
            let diagonal = col.n + (col.pv & rows).count_ones() as usize
                - (col.mv & rows).count_ones() as usize;
            if diagonal > k {
                return None;
            }
        }
        let d = self.finish_one_word(&col);
        (d <= k).then_some(d)
    }

    /// Multi-block kernel (`m > 64`), bounded by `k` (`usize::MAX` for no bound).
    #[inline(always)]
    fn dist_blocks_impl(&self, item: &[u8], k: usize) -> Option<usize> {
        let w = self.words;
        // The band j − k ≤ i ≤ j + k covers every row of every column when k + 1 ≥ m and
        // k + 1 ≥ n (bytes bound chars); then the plain loop does the same work faster.
        if k.saturating_add(1) >= self.len.max(item.len()) {
            return match w {
                2 => self.dist_blocks_fixed::<2>(item, k),
                3 => self.dist_blocks_fixed::<3>(item, k),
                4 => self.dist_blocks_fixed::<4>(item, k),
                _ => {
                    let mut pv = vec![!0u64; w];
                    let mut mv = vec![0u64; w];
                    self.dist_blocks_full(item, k, &mut pv, &mut mv)
                }
            };
        }
        if w <= STACK_WORDS {
            let mut pv = [!0u64; STACK_WORDS];
            let mut mv = [0u64; STACK_WORDS];
            self.dist_blocks_band(item, k, &mut pv[..w], &mut mv[..w])
        } else {
            let mut pv = vec![!0u64; w];
            let mut mv = vec![0u64; w];
            self.dist_blocks_band(item, k, &mut pv, &mut mv)
        }
    }

    /// [`Self::dist_blocks_full`] on `W` blocks held in fixed-size arrays, which the compiler
    /// keeps in registers instead of memory.
    #[inline(always)]
    fn dist_blocks_fixed<const W: usize>(&self, item: &[u8], k: usize) -> Option<usize> {
        let mut pv = [!0u64; W];
        let mut mv = [0u64; W];
        self.dist_blocks_full(item, k, &mut pv, &mut mv)
    }

    /// Multi-block kernel computing every block of every column (`pv` all ones, `mv` all
    /// zeros on entry, one entry per block).
    #[inline(always)]
    fn dist_blocks_full(
        &self,
        item: &[u8],
        k: usize,
        pv: &mut [u64],
        mv: &mut [u64],
    ) -> Option<usize> {
        let w = self.words;
        let high = self.last_bit;
        let (last_pv, pv) = pv.split_last_mut()?;
        let (last_mv, mv) = mv.split_last_mut()?;
        let mut score = self.len;
        let limit = k.saturating_add(item.len());
        let mut i = 0;
        while let Some(&b) = item.get(i) {
            let masks = if b < 0x80 {
                i += 1;
                let at = b as usize * w;
                &self.ascii[at..at + w]
            } else {
                let (row, size) = self.decode_other(&item[i..]);
                i += size;
                &self.other_masks[row * w..row * w + w]
            };
            let (last_eq, masks) = masks.split_last()?;
            // Row 0 of the global table is 0, 1, 2, …: the horizontal delta entering the
            // first block is always +1.
            let (mut hp, mut hm) = (1u64, 0u64);
            for ((p, m), &eq) in pv.iter_mut().zip(mv.iter_mut()).zip(masks) {
                (hp, hm) = step_block(p, m, eq, hp, hm, 1 << 63);
            }
            let (hp, hm) = step_block(last_pv, last_mv, *last_eq, hp, hm, high);
            score = score + hp as usize - hm as usize;
            if score + i > limit {
                return None;
            }
        }
        (score <= k).then_some(score)
    }

    /// Multi-block kernel over caller-provided state (`pv` all ones, `mv` all zeros).
    ///
    /// Only the blocks that meet the diagonal band `j − k ≤ i ≤ j + k` of column `j` are
    /// computed (Ukkonen's cut-off, applied at both ends), so a small bound costs one or two
    /// blocks per column however long the query is. This is exact for every distance up to
    /// `k` and never reports a distance above `k` as within it:
    ///
    /// * every cell outside the band holds more than `k`, and an optimal path of cost `≤ k`
    ///   stays inside it, so the result depends only on band cells;
    /// * a block entering the band from below starts as "+1 per row" from the block above,
    ///   and a block leaving it at the top is replaced by "+1 per column" along its last row.
    ///   Both are upper bounds of the true values (a deletion or insertion away), so the
    ///   computed table is never below the true one and equals it along every path of cost
    ///   `≤ k`.
    #[inline(always)]
    fn dist_blocks_band(
        &self,
        item: &[u8],
        k: usize,
        pv: &mut [u64],
        mv: &mut [u64],
    ) -> Option<usize> {
        let w = self.words;
        let m = self.len;
        let rows_in = |b: usize| if b + 1 == w { m - WORD * b } else { WORD };
        // Active blocks are `first..=last`; `score` is D[bottom row of `last`][j].
        let (mut first, mut last) = (0usize, 0usize);
        let mut score = rows_in(0);
        let limit = k.saturating_add(item.len());
        let mut columns = 0usize;
        let mut i = 0;
        while let Some(&b) = item.get(i) {
            let (table, base) = if b < 0x80 {
                i += 1;
                (&self.ascii, b as usize * w)
            } else {
                let (row, size) = self.decode_other(&item[i..]);
                i += size;
                (&self.other_masks, row * w)
            };
            columns += 1;
            // Rows are numbered from 1 and block `x` holds rows 64x + 1 ..= 64x + 64. Column
            // `j` needs rows up to j + k (a block entering the band starts as all +1) ...
            while last + 1 < w && WORD * (last + 1) < columns.saturating_add(k) {
                last += 1;
                score += rows_in(last);
            }
            // ... and none above j − k. `first < last` never binds after the length filter
            // (n ≤ m + k); it keeps the band non-empty for any input all the same.
            while first < last && WORD * (first + 1) + k < columns {
                first += 1;
            }
            // The horizontal delta entering the top active block is +1: exact for row 0 of
            // the global table, an upper bound for a block that left the band.
            let (mut hp, mut hm) = (1u64, 0u64);
            for x in first..last {
                (hp, hm) = step_block(&mut pv[x], &mut mv[x], table[base + x], hp, hm, 1 << 63);
            }
            let high = if last + 1 == w {
                self.last_bit
            } else {
                1 << 63
            };
            let eq = table[base + last];
            let (hp, hm) = step_block(&mut pv[last], &mut mv[last], eq, hp, hm, high);
            score = score + hp as usize - hm as usize;
            // Once the last row is tracked, the final distance is at least
            // `score − remaining columns`, and at most `item.len() − i` columns remain.
            if last + 1 == w && score + i > limit {
                return None;
            }
        }
        // Rows below the band at the end are "+1 per row" (only reached when the distance
        // exceeds `k`, as then m > n + k).
        while last + 1 < w {
            last += 1;
            score += rows_in(last);
        }
        (score <= k).then_some(score)
    }
}

/// The same kernels compiled for x86-64 CPUs with `popcnt` and `bmi1` (nearly all since
/// 2013): the final population counts become one instruction each instead of a dozen, and
/// `a & !b` one `andn`, which shortens every column. Chosen at run time, so the binary still
/// runs on the x86-64 baseline.
#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::LevenshteinQuery;

    #[target_feature(enable = "popcnt,bmi1")]
    pub(super) fn dist_one_word(q: &LevenshteinQuery, item: &[u8]) -> usize {
        q.dist_one_word_impl(item)
    }

    #[target_feature(enable = "popcnt,bmi1")]
    pub(super) fn dist_one_word_quad(q: &LevenshteinQuery, it: [&[u8]; 4]) -> [usize; 4] {
        q.dist_one_word_quad_impl(it)
    }

    #[target_feature(enable = "popcnt,bmi1")]
    pub(super) fn dist_one_word_within(
        q: &LevenshteinQuery,
        item: &[u8],
        k: usize,
        n: usize,
    ) -> Option<usize> {
        q.dist_one_word_within_impl(item, k, n)
    }

    #[target_feature(enable = "popcnt,bmi1")]
    pub(super) fn dist_blocks(q: &LevenshteinQuery, item: &[u8], k: usize) -> Option<usize> {
        q.dist_blocks_impl(item, k)
    }
}

/// The single-block kernel with one item per vector lane (AVX2), for scans.
///
/// Myers' step uses only bitwise operations, shifts by one and one addition, all of which
/// AVX2 has per 64-bit and per 32-bit lane with no carry between lanes, so four (or eight)
/// items run the same instruction stream. The match masks of each item's chars are looked up
/// first, lane by lane, into a column-major table (`columns[j]` holds char `j` of every
/// item); the column loop then loads one row per column. Items of different lengths share
/// a batch: the loop runs to the longest, and a lane whose item has ended keeps its state
/// (a blend with the "still running" mask), so its final column is the one of its own length.
///
/// The table of one batch is filled while the previous batch runs its columns (two tables
/// in turn): a vector load of a row just written by eight scalar stores would wait for all
/// of them to reach the cache, and the scalar look-ups overlap the vector work this way.
/// Results equal the scalar kernels', which the tests check lane by lane.
#[cfg(target_arch = "x86_64")]
mod lanes {
    use std::arch::x86_64::*;
    use std::mem::MaybeUninit;

    use super::{saturate, LevenshteinQuery, LANE_BYTES};

    /// Column-major masks of one batch: `[column][lane]`.
    pub(super) type Columns<T, const L: usize> = [MaybeUninit<[T; L]>; LANE_BYTES];

    /// Fills `columns[j][lane]` with the mask of char `j` of each item (items of at most
    /// `LANE_BYTES` bytes), rows past an item's end with zeros or stale masks (never used:
    /// those lanes are frozen); returns the char counts. Every row below the largest count
    /// is initialised.
    #[inline(always)]
    fn fill<T: Copy + Default, const L: usize>(
        q: &LevenshteinQuery,
        items: &[&[u8]; L],
        columns: &mut Columns<T, L>,
        narrow: impl Fn(u64) -> T,
    ) -> [usize; L] {
        // An item has at most as many chars as bytes.
        let rows = items
            .iter()
            .map(|x| x.len())
            .max()
            .unwrap_or(0)
            .min(LANE_BYTES);
        for c in columns[..rows].iter_mut() {
            c.write([T::default(); L]);
        }
        // SAFETY: rows `..rows` were initialised just above; `MaybeUninit<X>` has the layout
        // of `X`.
        let init: &mut [[T; L]] =
            unsafe { std::slice::from_raw_parts_mut(columns.as_mut_ptr().cast(), rows) };
        let ascii = q.ascii_one_word();
        let mut n = [0usize; L];
        for lane in 0..L {
            let item = &items[lane][..items[lane].len().min(rows)];
            // The common case: one look-up and one store per byte, assuming ASCII ...
            let mut seen = 0u8;
            for (row, &b) in init.iter_mut().zip(item) {
                seen |= b;
                row[lane] = narrow(ascii[usize::from(b & 0x7f)]);
            }
            n[lane] = item.len();
            // ... and decoding again when it was not.
            if seen >= 0x80 {
                n[lane] = q.each_mask(item, |j, eq| {
                    if let Some(row) = init.get_mut(j) {
                        row[lane] = narrow(eq);
                    }
                });
            }
        }
        n
    }

    /// Runs `items` through `columns_of` in batches of `L`, filling the table of each batch
    /// while the previous one runs; writes the distances to `out` (same length as `items`).
    #[inline(always)]
    pub(super) fn run<T: Copy + Default, const L: usize>(
        q: &LevenshteinQuery,
        items: &[&[u8]],
        out: &mut [u32],
        narrow: impl Fn(u64) -> T + Copy,
        columns_of: impl Fn(&Columns<T, L>, &[usize; L]) -> [usize; L],
    ) {
        let mut tables = [[MaybeUninit::<[T; L]>::uninit(); LANE_BYTES]; 2];
        let [ref mut a, ref mut b] = tables;
        let (mut next, mut ready) = (a, b);
        // The batch whose table is `ready`: its first position and char counts.
        let mut pending: Option<(usize, [usize; L])> = None;
        let finish = |at: usize, got: [usize; L], out: &mut [u32]| {
            for (d, got) in out[at..].iter_mut().zip(got) {
                *d = saturate(got);
            }
        };
        for (c, chunk) in items.chunks(L).enumerate() {
            let mut batch: [&[u8]; L] = [&[]; L];
            for (slot, &item) in batch.iter_mut().zip(chunk) {
                // Longer items go to the one-item kernel below; the lane stays empty.
                if item.len() <= LANE_BYTES {
                    *slot = item;
                }
            }
            let n = fill(q, &batch, next, narrow);
            if let Some((at, n_ready)) = pending.take() {
                finish(at, columns_of(ready, &n_ready), out);
            }
            pending = Some((c * L, n));
            std::mem::swap(&mut next, &mut ready);
        }
        if let Some((at, n_ready)) = pending {
            finish(at, columns_of(ready, &n_ready), out);
        }
        for (d, item) in out.iter_mut().zip(items) {
            if item.len() > LANE_BYTES {
                *d = q.dist(item);
            }
        }
    }

    /// Distances of `items` to a query of 1 ..= 64 chars, four items at a time in 64-bit
    /// lanes; `out` has the length of `items`.
    #[target_feature(enable = "avx2,popcnt,bmi1")]
    pub(super) fn run_x4(q: &LevenshteinQuery, items: &[&[u8]], out: &mut [u32]) {
        run::<u64, 4>(q, items, out, |eq| eq, |c, n| columns_x4(q, c, n));
    }

    /// The column loop of four items; `n` are their char counts from [`fill`].
    #[target_feature(enable = "avx2,popcnt,bmi1")]
    fn columns_x4(q: &LevenshteinQuery, columns: &Columns<u64, 4>, n: &[usize; 4]) -> [usize; 4] {
        let longest = n.iter().copied().max().unwrap_or(0);
        let ends = _mm256_setr_epi64x(n[0] as i64, n[1] as i64, n[2] as i64, n[3] as i64);
        let one = _mm256_set1_epi64x(1);
        let mut column = _mm256_setzero_si256();
        let mut pv = _mm256_set1_epi64x(-1);
        let mut mv = _mm256_setzero_si256();
        for row in &columns[..longest] {
            // SAFETY: `fill` initialised every row below the largest char count; unaligned
            // load of 32 bytes from a `[u64; 4]`.
            let eq = unsafe { _mm256_loadu_si256(row.as_ptr().cast()) };
            let running = _mm256_cmpgt_epi64(ends, column);
            column = _mm256_add_epi64(column, one);
            // The scalar `step`, lane-wise (`andnot(a, b)` is `!a & b`).
            let d0 = _mm256_or_si256(
                _mm256_or_si256(
                    _mm256_xor_si256(_mm256_add_epi64(_mm256_and_si256(eq, pv), pv), pv),
                    eq,
                ),
                mv,
            );
            let hn = _mm256_and_si256(pv, d0);
            let not_hp = _mm256_andnot_si256(mv, _mm256_or_si256(d0, pv));
            let not_x = _mm256_slli_epi64::<1>(not_hp);
            let new_pv =
                _mm256_or_si256(_mm256_slli_epi64::<1>(hn), _mm256_andnot_si256(d0, not_x));
            let new_mv = _mm256_andnot_si256(not_x, d0);
            pv = _mm256_blendv_epi8(pv, new_pv, running);
            mv = _mm256_blendv_epi8(mv, new_mv, running);
        }
        let (mut p, mut m) = ([0u64; 4], [0u64; 4]);
        // SAFETY: unaligned 32-byte stores into `[u64; 4]`.
        unsafe {
            _mm256_storeu_si256(p.as_mut_ptr().cast(), pv);
            _mm256_storeu_si256(m.as_mut_ptr().cast(), mv);
        }
        let rows = q.rows_one_word();
        std::array::from_fn(|l| {
            n[l] + (p[l] & rows).count_ones() as usize - (m[l] & rows).count_ones() as usize
        })
    }

    /// One lane width narrower than 64 bits: the entry `$run` and its column loop `$columns`.
    /// Rows at and above the query's length never reach its rows (carries and shifts only
    /// move bits upwards), so a lane just as wide as the query computes what a 64-bit lane
    /// does; AVX2 has no 8-bit shift, so the shift by one is an addition of a register to
    /// itself. A narrower lane puts more items in a register: a query of 9 to 16 chars (most
    /// words) measures 16 items per instruction, not 8.
    macro_rules! narrow_kernel {
        (
            $(#[$doc:meta])*
            $run:ident, $columns:ident, $t:ty, $s:ty, $l:literal,
            $set1:ident, $add:ident, $cmpgt:ident
        ) => {
            $(#[$doc])*
            #[target_feature(enable = "avx2,popcnt,bmi1")]
            pub(super) fn $run(q: &LevenshteinQuery, items: &[&[u8]], out: &mut [u32]) {
                // The query fits in the low bits of its masks.
                run::<$t, $l>(q, items, out, |eq| eq as $t, |c, n| $columns(q, c, n));
            }

            /// The column loop of one batch; `n` are the items' char counts (at most 64).
            #[target_feature(enable = "avx2,popcnt,bmi1")]
            fn $columns(
                q: &LevenshteinQuery,
                columns: &Columns<$t, $l>,
                n: &[usize; $l],
            ) -> [usize; $l] {
                let longest = n.iter().copied().max().unwrap_or(0);
                // Char counts are at most 64 (`LANE_BYTES`), so they fit a signed lane.
                let ends: [$s; $l] = std::array::from_fn(|l| n[l] as $s);
                // SAFETY: unaligned 32-byte load from a `[$s; $l]` of 32 bytes.
                let ends = unsafe { _mm256_loadu_si256(ends.as_ptr().cast()) };
                let one = $set1(1);
                let mut column = _mm256_setzero_si256();
                let mut pv = $set1(-1);
                let mut mv = _mm256_setzero_si256();
                for row in &columns[..longest] {
                    // SAFETY: `fill` initialised every row below the largest char count;
                    // unaligned load of 32 bytes from a `[$t; $l]`.
                    let eq = unsafe { _mm256_loadu_si256(row.as_ptr().cast()) };
                    let running = $cmpgt(ends, column);
                    column = $add(column, one);
                    // The scalar `step`, lane-wise (`andnot(a, b)` is `!a & b`; `x << 1`
                    // is `x + x`).
                    let d0 = _mm256_or_si256(
                        _mm256_or_si256(
                            _mm256_xor_si256($add(_mm256_and_si256(eq, pv), pv), pv),
                            eq,
                        ),
                        mv,
                    );
                    let hn = _mm256_and_si256(pv, d0);
                    let not_hp = _mm256_andnot_si256(mv, _mm256_or_si256(d0, pv));
                    let not_x = $add(not_hp, not_hp);
                    let new_pv = _mm256_or_si256($add(hn, hn), _mm256_andnot_si256(d0, not_x));
                    let new_mv = _mm256_andnot_si256(not_x, d0);
                    // `running` is all ones or all zeros per lane: a byte blend is a lane blend.
                    pv = _mm256_blendv_epi8(pv, new_pv, running);
                    mv = _mm256_blendv_epi8(mv, new_mv, running);
                }
                let (mut p, mut m) = ([0 as $t; $l], [0 as $t; $l]);
                // SAFETY: unaligned 32-byte stores into `[$t; $l]` of 32 bytes.
                unsafe {
                    _mm256_storeu_si256(p.as_mut_ptr().cast(), pv);
                    _mm256_storeu_si256(m.as_mut_ptr().cast(), mv);
                }
                let rows = q.rows_one_word() as $t;
                std::array::from_fn(|l| {
                    n[l] + (p[l] & rows).count_ones() as usize
                        - (m[l] & rows).count_ones() as usize
                })
            }
        };
    }

    narrow_kernel!(
        /// Distances of `items` to a query of 1 ..= 8 chars, 32 items at a time in 8-bit
        /// lanes; `out` has the length of `items`.
        run_x32, columns_x32, u8, i8, 32,
        _mm256_set1_epi8, _mm256_add_epi8, _mm256_cmpgt_epi8
    );
    narrow_kernel!(
        /// Distances of `items` to a query of 1 ..= 16 chars, 16 items at a time in 16-bit
        /// lanes; `out` has the length of `items`.
        run_x16, columns_x16, u16, i16, 16,
        _mm256_set1_epi16, _mm256_add_epi16, _mm256_cmpgt_epi16
    );
    narrow_kernel!(
        /// Distances of `items` to a query of 1 ..= 32 chars, eight items at a time in
        /// 32-bit lanes; `out` has the length of `items`.
        run_x8, columns_x8, u32, i32, 8,
        _mm256_set1_epi32, _mm256_add_epi32, _mm256_cmpgt_epi32
    );
}

/// The single-block kernel with one item per AVX-512 lane, the lanes as wide as the query.
///
/// The same column loop as [`lanes`] on 512-bit registers, with the lane width chosen by the
/// query's length: 8-bit lanes for queries of up to 8 chars (64 items per register), 16-bit
/// up to 16 (32 items), 32-bit up to 32 (16 items), 64-bit up to 64 (8 items). Rows at and
/// above the query's length never reach its rows (carries and shifts only move bits
/// upwards), so a lane just as wide as the query computes what a 64-bit lane does. AVX-512 BW
/// has no 8-bit shift; the shift by one is an addition of a register to itself. The batch
/// table is filled by the same code as the AVX2 lanes (ASCII by byte look-up, other chars
/// through `other_row`), and lanes whose item has ended are frozen with a mask register.
#[cfg(target_arch = "x86_64")]
mod wide {
    use std::arch::x86_64::*;

    use super::lanes::{run, Columns};
    use super::LevenshteinQuery;

    /// One lane width: the public entry `$run` and its column loop `$columns`.
    macro_rules! wide_kernel {
        (
            $(#[$doc:meta])*
            $run:ident, $columns:ident, $t:ty, $s:ty, $l:literal,
            $set1:ident, $add:ident, $cmpgt:ident, $mov:ident
        ) => {
            $(#[$doc])*
            #[target_feature(enable = "avx2,popcnt,bmi1,avx512f,avx512bw,avx512vl")]
            pub(super) fn $run(q: &LevenshteinQuery, items: &[&[u8]], out: &mut [u32]) {
                // The query fits in the low bits of its masks.
                run::<$t, $l>(q, items, out, |eq| eq as $t, |c, n| $columns(q, c, n));
            }

            /// The column loop of one batch; `n` are the items' char counts (at most 64).
            #[target_feature(enable = "avx2,popcnt,bmi1,avx512f,avx512bw,avx512vl")]
            fn $columns(
                q: &LevenshteinQuery,
                columns: &Columns<$t, $l>,
                n: &[usize; $l],
            ) -> [usize; $l] {
                let longest = n.iter().copied().max().unwrap_or(0);
                // Char counts are at most 64 (`LANE_BYTES`), so they fit a signed lane.
                let ends: [$s; $l] = std::array::from_fn(|l| n[l] as $s);
                // SAFETY: unaligned 64-byte load from a `[$s; $l]` of 64 bytes.
                let ends = unsafe { _mm512_loadu_si512(ends.as_ptr().cast()) };
                let one = $set1(1);
                let mut column = _mm512_setzero_si512();
                let mut pv = $set1(-1);
                let mut mv = _mm512_setzero_si512();
                for row in &columns[..longest] {
                    // SAFETY: `fill` initialised every row below the largest char count;
                    // unaligned load of 64 bytes from a `[$t; $l]`.
                    let eq = unsafe { _mm512_loadu_si512(row.as_ptr().cast()) };
                    let running = $cmpgt(ends, column);
                    column = $add(column, one);
                    // The scalar `step`, lane-wise; `x << 1` is `x + x`.
                    let d0 = _mm512_or_si512(
                        _mm512_or_si512(
                            _mm512_xor_si512($add(_mm512_and_si512(eq, pv), pv), pv),
                            eq,
                        ),
                        mv,
                    );
                    let hn = _mm512_and_si512(pv, d0);
                    let not_hp = _mm512_andnot_si512(mv, _mm512_or_si512(d0, pv));
                    let not_x = $add(not_hp, not_hp);
                    let new_pv = _mm512_or_si512($add(hn, hn), _mm512_andnot_si512(d0, not_x));
                    let new_mv = _mm512_andnot_si512(not_x, d0);
                    pv = $mov(pv, running, new_pv);
                    mv = $mov(mv, running, new_mv);
                }
                let (mut p, mut m) = ([0 as $t; $l], [0 as $t; $l]);
                // SAFETY: unaligned 64-byte stores into `[$t; $l]` of 64 bytes.
                unsafe {
                    _mm512_storeu_si512(p.as_mut_ptr().cast(), pv);
                    _mm512_storeu_si512(m.as_mut_ptr().cast(), mv);
                }
                let rows = q.rows_one_word() as $t;
                std::array::from_fn(|l| {
                    n[l] + (p[l] & rows).count_ones() as usize
                        - (m[l] & rows).count_ones() as usize
                })
            }
        };
    }

    wide_kernel!(
        /// Distances of `items` to a query of 1 ..= 8 chars, 64 items at a time in 8-bit
        /// lanes; `out` has the length of `items`.
        run_x64, columns_x64, u8, i8, 64,
        _mm512_set1_epi8, _mm512_add_epi8, _mm512_cmpgt_epi8_mask, _mm512_mask_mov_epi8
    );
    wide_kernel!(
        /// Distances of `items` to a query of 1 ..= 16 chars, 32 items at a time in 16-bit
        /// lanes; `out` has the length of `items`.
        run_x32, columns_x32, u16, i16, 32,
        _mm512_set1_epi16, _mm512_add_epi16, _mm512_cmpgt_epi16_mask, _mm512_mask_mov_epi16
    );
    wide_kernel!(
        /// Distances of `items` to a query of 1 ..= 32 chars, 16 items at a time in 32-bit
        /// lanes; `out` has the length of `items`.
        run_x16, columns_x16, u32, i32, 16,
        _mm512_set1_epi32, _mm512_add_epi32, _mm512_cmpgt_epi32_mask, _mm512_mask_mov_epi32
    );
    wide_kernel!(
        /// Distances of `items` to a query of 1 ..= 64 chars, 8 items at a time in 64-bit
        /// lanes; `out` has the length of `items`.
        run_x8, columns_x8, u64, i64, 8,
        _mm512_set1_epi64, _mm512_add_epi64, _mm512_cmpgt_epi64_mask, _mm512_mask_mov_epi64
    );
}

/// State of the single-block kernel: the vertical deltas of the current column and the
/// number of columns (item chars) read so far.
struct Column {
    pv: u64,
    mv: u64,
    n: usize,
}

impl Column {
    /// Column 0 of the global table: `D[i][0] = i`, every vertical delta +1.
    #[inline(always)]
    fn new() -> Self {
        Column {
            pv: !0,
            mv: 0,
            n: 0,
        }
    }
}

/// One column of the single-block global kernel. Returns the horizontal +1 and −1 deltas
/// (before the shift) so callers can track the last row.
///
/// This is Hyyrö's formulation of Myers' step, with `D0` the diagonal-zero vector. It is
/// arranged so that the loop-carried chain from `pv` to the next `pv` is 9 operations: the
/// complement of the horizontal +1 vector is kept instead of the vector itself, which turns
/// `¬(X | D0)` into `¬X & ¬D0` with `¬D0` computed off the chain.
#[inline(always)]
fn step(pv: &mut u64, mv: &mut u64, eq: u64) -> (u64, u64) {
    let (p, m) = (*pv, *mv);
    let d0 = ((eq & p).wrapping_add(p) ^ p) | eq | m;
    let hn = p & d0;
    let not_hp = (d0 | p) & !m;
    // Global distance: the horizontal delta in row 0 is +1 at every column, so
    // X = (HP << 1) | 1 and ¬X = ¬HP << 1.
    let not_x = not_hp << 1;
    *pv = (hn << 1) | (not_x & !d0);
    *mv = !not_x & d0;
    (!not_hp, hn)
}

/// One column of one block of the multi-block kernel.
///
/// `hp_in`/`hm_in` (0 or 1) are the +1/−1 horizontal delta entering the block's top row from
/// the block above; returns the same for the row `high` (the block's last row).
#[inline(always)]
fn step_block(
    pv: &mut u64,
    mv: &mut u64,
    eq: u64,
    hp_in: u64,
    hm_in: u64,
    high: u64,
) -> (u64, u64) {
    let (p, m) = (*pv, *mv);
    let xv = eq | m;
    // A −1 entering from above acts as a match in the top row for the carry chain.
    let eq = eq | hm_in;
    let xh = ((eq & p).wrapping_add(p) ^ p) | eq;
    let ph = m | !(xh | p);
    let mh = p & xh;
    let hp_out = u64::from(ph & high != 0);
    let hm_out = u64::from(mh & high != 0);
    let phs = (ph << 1) | hp_in;
    let mhs = (mh << 1) | hm_in;
    *pv = mhs | !(xv | phs);
    *mv = phs & xv;
    (hp_out, hm_out)
}

/// Converts a distance to `u32`, saturating (only reachable for items over 4 GiB).
#[inline(always)]
fn saturate(d: usize) -> u32 {
    u32::try_from(d).unwrap_or(u32::MAX)
}

/// Number of chars in `bytes`, each invalid sequence counting as one U+FFFD.
#[inline]
fn char_len(bytes: &[u8]) -> usize {
    if bytes.is_ascii() {
        return bytes.len();
    }
    Chars::new(bytes).count()
}

/// The chars of `bytes`, each invalid sequence one U+FFFD (as [`String::from_utf8_lossy`]).
pub(super) fn lossy_chars(bytes: &[u8]) -> impl Iterator<Item = char> + '_ {
    Chars::new(bytes)
}

/// Lossy char iterator over bytes: one U+FFFD per invalid sequence.
struct Chars<'a> {
    rest: &'a [u8],
}

impl<'a> Chars<'a> {
    fn new(rest: &'a [u8]) -> Self {
        Chars { rest }
    }
}

impl Iterator for Chars<'_> {
    type Item = char;

    #[inline]
    fn next(&mut self) -> Option<char> {
        let (&b, tail) = self.rest.split_first()?;
        if b < 0x80 {
            self.rest = tail;
            return Some(b as char);
        }
        let (c, size) = bstr::decode_utf8(self.rest);
        self.rest = self.rest.get(size.max(1)..).unwrap_or_default();
        Some(c.unwrap_or(char::REPLACEMENT_CHARACTER))
    }
}

impl Metric for Levenshtein {
    type Prepared = LevenshteinQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::Levenshtein
    }

    /// Unit costs: one edit changes one char, so char counts and signatures bound the
    /// distance ([`LevenshteinQuery::signature`]).
    fn bounded_by_char_counts(&self) -> bool {
        true
    }

    fn prepare(&self, query: &[u8]) -> LevenshteinQuery {
        LevenshteinQuery::new(query)
    }

    /// The distance between two items, using the shorter one as the pattern (fewer blocks).
    fn distance(&self, a: &[u8], b: &[u8]) -> f64 {
        let (pattern, text) = if a.len() <= b.len() { (a, b) } else { (b, a) };
        f64::from(LevenshteinQuery::new(pattern).dist(text))
    }
}

impl PreparedQuery for LevenshteinQuery {
    #[inline]
    fn distance(&self, item: &[u8]) -> f64 {
        f64::from(self.dist(item))
    }

    /// The distance if it is at most `bound`, else `None`.
    ///
    /// Distances are whole numbers, so the bound is rounded down; a negative or NaN bound
    /// admits nothing, and a bound of `u32::MAX` or more (including infinity) admits all.
    #[inline]
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        if bound.is_nan() || bound < 0.0 {
            return None;
        }
        if bound >= f64::from(u32::MAX) {
            return Some(self.distance(item));
        }
        // 0 ≤ bound < u32::MAX, so the cast is exact after `floor`.
        self.dist_within(item, bound.floor() as u32).map(f64::from)
    }

    /// With [`LevenshteinQuery::dist_batch`], 64 items at a time.
    fn distances(&self, items: &[&[u8]], out: &mut [f64]) {
        assert_eq!(items.len(), out.len(), "one output slot per item");
        let mut d = [0u32; 64];
        for (items, out) in items.chunks(64).zip(out.chunks_mut(64)) {
            self.dist_batch(items, &mut d);
            for (o, &d) in out.iter_mut().zip(&d) {
                *o = f64::from(d);
            }
        }
    }

    /// 64 for queries of 1 to 64 chars, which the vector lanes measure
    /// ([`LevenshteinQuery::dist_batch`]); longer queries go one item at a time with the
    /// bounded kernel.
    fn group_size(&self) -> usize {
        if (1..=64).contains(&self.len()) {
            64
        } else {
            1
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Short byte strings, mostly letters, with some non-ASCII and invalid UTF-8 bytes.
    fn bytes() -> impl Strategy<Value = Vec<u8>> {
        prop::collection::vec(
            prop_oneof![
                8 => b'a'..=b'h',
                1 => Just(b'A'),
                1 => Just(b'B' + 63), // shares a signature bit with 'B'
                1 => Just(0xC3u8),
                1 => Just(0xA9u8),
                1 => Just(0xFFu8),
            ],
            0..14,
        )
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(2000))]

        /// Length and signature gaps never exceed the distance; reference: `strsim`
        /// (general-purpose crate) on the lossy-decoded strings.
        #[test]
        fn length_and_signature_gaps_are_lower_bounds(a in bytes(), b in bytes()) {
            let (sa, sb) = (String::from_utf8_lossy(&a), String::from_utf8_lossy(&b));
            let d = strsim::levenshtein(&sa, &sb);
            prop_assert_eq!(LevenshteinQuery::new(&a).dist(&b) as usize, d);
            let la = LevenshteinQuery::item_len(&a);
            prop_assert_eq!(la, sa.chars().count());
            prop_assert!(la.abs_diff(LevenshteinQuery::item_len(&b)) <= d);
            let gap = LevenshteinQuery::signature_gap(
                LevenshteinQuery::signature(&a),
                LevenshteinQuery::signature(&b),
            );
            prop_assert!(gap as usize <= d, "gap {} > distance {}", gap, d);
            prop_assert_eq!(
                LevenshteinQuery::new(&a).signature_of_query(),
                LevenshteinQuery::signature(&a)
            );
        }
    }

    /// Plain dynamic program over lossy-decoded chars: the textbook recurrence, kept small
    /// as an independent check of the bit-parallel kernel inside the crate.
    fn dp(a: &str, b: &str) -> usize {
        let a: Vec<char> = a.chars().collect();
        let b: Vec<char> = b.chars().collect();
        let mut prev: Vec<usize> = (0..=b.len()).collect();
        for (i, ca) in a.iter().enumerate() {
            let mut cur = vec![i + 1; b.len() + 1];
            for (j, cb) in b.iter().enumerate() {
                let sub = prev[j] + usize::from(ca != cb);
                cur[j + 1] = sub.min(prev[j + 1] + 1).min(cur[j] + 1);
            }
            prev = cur;
        }
        prev[b.len()]
    }

    #[test]
    fn block_boundaries_match_the_dynamic_program() {
        for m in [1usize, 63, 64, 65, 127, 128, 129, 200, 257, 300] {
            let q: String = (0..m).map(|i| (b'a' + (i * 7 % 5) as u8) as char).collect();
            let item: String = (0..m + 3)
                .map(|i| (b'a' + (i * 3 % 4) as u8) as char)
                .collect();
            let p = LevenshteinQuery::new(q.as_bytes());
            let d = dp(&q, &item);
            assert_eq!(p.dist(item.as_bytes()) as usize, d, "m = {m}");
            assert_eq!(p.dist_within(item.as_bytes(), d as u32), Some(d as u32));
            assert_eq!(p.dist_within(item.as_bytes(), d as u32 - 1), None);
        }
    }

    #[test]
    fn lossy_iterator_counts_each_bad_sequence_once() {
        let bytes = b"a\xffb\xe2\x82c\xf0\x9f\x98\x80";
        let lossy = String::from_utf8_lossy(bytes);
        assert_eq!(Chars::new(bytes).collect::<String>(), lossy);
        assert_eq!(char_len(bytes), lossy.chars().count());
    }

    /// The same query with the run-time CPU check forced off: the portable kernels.
    fn portable(q: &[u8]) -> LevenshteinQuery {
        #[allow(unused_mut)]
        let mut p = LevenshteinQuery::new(q);
        #[cfg(target_arch = "x86_64")]
        {
            p.x86_fast = false;
            p.x86_lanes = false;
            p.x86_wide = false;
        }
        p
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(500))]

        /// Portable and CPU-specific kernels give the same answers, equal to the plain
        /// dynamic program, for every entry point.
        #[test]
        fn portable_and_dispatched_kernels_agree(
            a in "[abcdé中😀]{0,140}",
            b in "[abcdé中😀]{0,140}",
            c in "[abcdé中😀]{0,140}",
            k in 0u32..30,
        ) {
            let want_b = dp(&a, &b) as u32;
            let want_c = dp(&a, &c) as u32;
            for q in [portable(a.as_bytes()), LevenshteinQuery::new(a.as_bytes())] {
                proptest::prop_assert_eq!(q.dist(b.as_bytes()), want_b);
                proptest::prop_assert_eq!(
                    q.dist_within(b.as_bytes(), k),
                    (want_b <= k).then_some(want_b)
                );
                // Batches of nine: the eight-lane (or four-lane) kernel and a remainder, or
                // the portable four-item kernel and a remainder.
                let items: Vec<&[u8]> = (0..9)
                    .map(|i| if i % 3 == 1 { c.as_bytes() } else { b.as_bytes() })
                    .collect();
                let mut out = [0u32; 9];
                q.dist_batch(&items, &mut out);
                let want: Vec<u32> = (0..9)
                    .map(|i| if i % 3 == 1 { want_c } else { want_b })
                    .collect();
                proptest::prop_assert_eq!(&out[..], &want[..]);
            }
        }
    }

    /// Query lengths at every lane boundary of the vector kernels: 8/9 (8-bit lanes),
    /// 16/17 (16-bit), 32/33 (32-bit), 64/65 (64-bit lanes, then the multi-block kernel).
    const LANE_EDGES: [usize; 12] = [1, 7, 8, 9, 15, 16, 17, 31, 32, 33, 64, 65];

    /// Chars of the lane tests: ASCII letters, an accented letter (two bytes), a CJK char
    /// (three bytes) and one outside the BMP (four bytes).
    const LANE_CHARS: [char; 8] = ['a', 'b', 'c', 'd', 'é', 'ø', '中', '😀'];

    /// A query of one of the [`LANE_EDGES`] lengths and a group of 0 ..= 70 items of
    /// 0 ..= length + 3 chars (groups of every size leave partial registers at each width).
    fn lane_case() -> impl Strategy<Value = (String, Vec<String>)> {
        prop::sample::select(LANE_EDGES.to_vec()).prop_flat_map(|m| {
            let word = move |lo: usize, hi: usize| {
                prop::collection::vec(prop::sample::select(LANE_CHARS.to_vec()), lo..=hi)
                    .prop_map(|cs| cs.into_iter().collect::<String>())
            };
            (word(m, m), prop::collection::vec(word(0, m + 3), 0..=70))
        })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(300))]

        /// Every dispatch level this CPU runs (portable, AVX2 and AVX-512 lanes of 8, 16,
        /// 32 and 64 bits) gives the distances of the reference crate `strsim`
        /// (`strsim::levenshtein`, a general-purpose crate counting chars), through
        /// `dist_batch`, `dist_each` and `dist`.
        #[test]
        fn every_level_and_lane_width_matches_strsim((query, items) in lane_case()) {
            let want: Vec<u32> = items
                .iter()
                .map(|x| strsim::levenshtein(&query, x) as u32)
                .collect();
            let slices: Vec<&[u8]> = items.iter().map(|x| x.as_bytes()).collect();
            for level in crate::cpu::Level::ALL.into_iter().filter(|l| l.available()) {
                let q = LevenshteinQuery::with_level(query.as_bytes(), level);
                let mut out = vec![u32::MAX; items.len()];
                q.dist_batch(&slices, &mut out);
                prop_assert_eq!(&out, &want, "dist_batch, level {:?}, m = {}", level, q.len());
                let mut each = Vec::new();
                q.dist_each(&slices, |_, d| each.push(d));
                prop_assert_eq!(&each, &want, "dist_each, level {:?}", level);
                for (x, &d) in slices.iter().zip(&want) {
                    prop_assert_eq!(q.dist(x), d, "dist, level {:?}", level);
                }
            }
        }
    }

    /// The level a query is prepared for is lowered to what this CPU runs, and every level
    /// gives the worked example `kitten` → `sitting` = 3 (the textbook example, from memory).
    #[test]
    fn levels_are_clamped_and_agree() {
        use crate::cpu::Level;
        for level in Level::ALL {
            let q = LevenshteinQuery::with_level(b"kitten", level);
            assert_eq!(q.dist(b"sitting"), 3, "{level:?}");
            #[cfg(target_arch = "x86_64")]
            {
                assert_eq!(q.x86_wide, level.clamped() >= Level::Avx512);
                assert_eq!(q.x86_lanes, level.clamped() >= Level::Avx2);
            }
        }
    }

    #[test]
    fn f64_bound_edges() {
        let q = LevenshteinQuery::new(b"abc");
        assert_eq!(q.distance_within(b"abd", 1.9), Some(1.0));
        assert_eq!(q.distance_within(b"abd", 0.9), None);
        assert_eq!(q.distance_within(b"abc", -0.5), None);
        assert_eq!(q.distance_within(b"abc", f64::NAN), None);
        assert_eq!(q.distance_within(b"xyzxyz", f64::INFINITY), Some(6.0));
    }
}
