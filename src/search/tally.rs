//! Exact k-NN and range queries under plain Levenshtein by the char-count bound, with the
//! items read by length ([`Tally`], [`Searcher::tally_answers`]).
//!
//! With `A` and `B` the numbers of chars of two strings in each of 32 bins
//! ([`CharBins`]), the distance is at least `max(Σ (A − B)⁺, Σ (B − A)⁺)` (one edit lowers
//! each sum by at most one). The two sums add up to `Σ |A − B|` and differ by the
//! difference of the lengths, so the bound is `(Σ |A − B| + |len a − len b|) / 2`: one
//! sum of absolute differences of 32 bytes, which x86-64 computes in two instructions
//! (`psadbw`, part of SSE2, which every x86-64 CPU has), or one with AVX2.
//!
//! The items are held by length in chars, each with its counts in 32 bins (32 bytes an
//! item: 21.2 MB at 663,473 words, made on the first query). Queries go in groups of one
//! length, in rounds: a round collects the items whose bound lies in its range, and each
//! group reads the items of its own length first, then of lengths one further
//! away, and so on, in chunks whose counts stay in cache while every query of the group is
//! compared with them (a block of 32 items whose box is beyond the range is skipped
//! whole). An item is measured (the lane kernel, [`LevenshteinQuery::dist_batch`], or the
//! bounded one) only when its bound is within the query's cap: the radius, or the `k`-th
//! distance held. Collected items are measured in increasing bound, so that the cap falls
//! early, and the rounds go on until every item whose bound is within the cap has been.
//!
//! Where ties may be left out (the approximate default), the rounds after the first take
//! one bound `b` at a time and fill: every item of a smaller bound has been measured, so
//! any `k` answers within `b` are a brute force's up to the order of ties, and the round
//! measures as it reads and stops at the first `k`.
//!
//! An item not measured had a bound above a cap that is at least the final `k`-th distance
//! (or the radius), so its distance is larger and it cannot enter an answer, tie or not:
//! the answers are those of a brute force ([`super::order`]). On 1,000 typo queries at
//! 663,473 English words, 1.6% of the items were within the 10th distance's bound on
//! average (0.7% at the median), against 63% within its length gap alone (sampled in
//! a script over Debian's wamerican-insane list).

use std::ops::Range;
use std::sync::atomic::Ordering::Relaxed;

use rayon::prelude::*;

use super::order::{self, keep_best, Neighbor};
use super::{Certificate, Found, Searcher};
use crate::coords::columns::CharBins;
use crate::error::Result;
use crate::index::StrTable;
use crate::metric::LevenshteinQuery;

/// Blocks of items compared with every query of a group at a time: 64 blocks of 32 items
/// are 32 KiB of counts, which stay in the core's L1 or L2 cache meanwhile.
const CHUNK_BLOCKS: usize = 64;
/// Items per block, whose box (per bin, the smallest and the largest count) bounds them all.
const BLOCK: usize = 32;
/// Most queries per group.
const GROUP: usize = 32;
/// Items measured at once by the one-query lane kernel.
const LANES: usize = 32;
/// Queries of a searcher that the tally answers before it judges whether it pays.
const TRIAL: u64 = 32;
/// The tally keeps answering while its queries measured at most `1 / PAYS_DIVISOR` of the
/// items on average: at 663,473 words typo queries measured 0.5%, where the many-query
/// lanes measure 78% (reads by length) about 40 times faster per item.
const PAYS_DIVISOR: u64 = 16;
/// Bins of the char counts: 32 bytes an item. At 663,473 words, 1,000 typo queries, 32
/// bins left half as many items to measure as 16.
const BINS: usize = 32;
/// Longest length in chars whose counts cannot saturate (each is at most 255): the
/// bound's closed form needs both strings' counts exact.
const UNSATURATED: usize = 255;
/// Largest text copied into the tally's own order (the keys of one length side by side, so
/// that the items measured are read from nearby memory); a larger one is read in place.
const COPY_LIMIT: usize = 64 << 20;

/// Every item's char counts, the items ordered by length in chars, then by counts.
pub(crate) struct Tally {
    bins: CharBins<BINS>,
    /// Item numbers by length, then by counts.
    items: Vec<u32>,
    /// The counts of `items[p]` at `counts[p]`.
    counts: Vec<[u8; BINS]>,
    /// `starts[len]..starts[len + 1]`: the positions of the items of `len` chars.
    starts: Vec<usize>,
    /// The boxes of the blocks of each length: block `b` of length `len` is
    /// `boxes[first_box[len] + b]`, over positions `starts[len] + BLOCK·b ..`, as (smallest,
    /// largest) count per bin.
    boxes: Vec<([u8; BINS], [u8; BINS])>,
    first_box: Vec<usize>,
    /// The keys in position order (`text[offsets[p]..offsets[p + 1]]`), when the text is
    /// at most [`COPY_LIMIT`] bytes.
    text: Option<(Vec<u8>, Vec<u32>)>,
}

impl Tally {
    /// The counts of every key of `keys` (`n` of them), bins fitted to their chars.
    pub(crate) fn new(keys: &StrTable<'_>, n: usize) -> Tally {
        let bins = CharBins::<BINS>::fitted((0..n).map(|i| keys.get(i)));
        // Each item's counts and length, then the item numbers by length, within a length by
        // counts (a block then holds alike items, whose box is tight), then by number; the
        // counts are put in that order in place, so that no second copy of them is held.
        let mut counts: Vec<[u8; BINS]> = (0..n)
            .into_par_iter()
            .map(|i| bins.counts(keys.get(i)))
            .collect();
        let lens: Vec<u32> = (0..n)
            .into_par_iter()
            .map(|i| u32::try_from(LevenshteinQuery::item_len(keys.get(i))).unwrap_or(u32::MAX))
            .collect();
        // Sorted with a 64-bit prefix of the key beside each number, so that most
        // comparisons read no row: the length (up to 2^16 − 1), then the first twelve
        // counts in four bits each, up to the first count of 15 or more (which stands as 15,
        // with zeros after it: two prefixes that differ then order their keys alike).
        const LONG: u64 = 0xFFFF;
        let full = |a: u32, b: u32| {
            let (a, b) = (a as usize, b as usize);
            (lens[a], &counts[a], a).cmp(&(lens[b], &counts[b], b))
        };
        let mut keyed: Vec<(u64, u32)> = (0..n)
            .into_par_iter()
            .map(|i| {
                let mut key = u64::from(lens[i]).min(LONG) << 48;
                for (j, &c) in counts[i][..12].iter().enumerate() {
                    key |= u64::from(c.min(15)) << (44 - 4 * j);
                    if c >= 15 {
                        break;
                    }
                }
                (key, i as u32)
            })
            .collect();
        keyed.par_sort_unstable_by(|&(ka, a), &(kb, b)| {
            if ka >> 48 == LONG && kb >> 48 == LONG {
                full(a, b)
            } else {
                ka.cmp(&kb).then_with(|| full(a, b))
            }
        });
        let items: Vec<u32> = keyed.iter().map(|&(_, i)| i).collect();
        drop(keyed);
        permute(&mut counts, &items);
        let longest = lens.iter().copied().max().unwrap_or(0) as usize;
        let mut starts = vec![0usize; longest + 2];
        for &len in &lens {
            starts[len as usize + 1] += 1;
        }
        drop(lens);
        for j in 1..starts.len() {
            starts[j] += starts[j - 1];
        }
        let mut boxes = Vec::new();
        let mut first_box = Vec::with_capacity(longest + 2);
        for len in 0..=longest {
            first_box.push(boxes.len());
            for block in counts[starts[len]..starts[len + 1]].chunks(BLOCK) {
                let (mut lo, mut hi) = ([u8::MAX; BINS], [0u8; BINS]);
                for c in block {
                    for j in 0..BINS {
                        lo[j] = lo[j].min(c[j]);
                        hi[j] = hi[j].max(c[j]);
                    }
                }
                boxes.push((lo, hi));
            }
        }
        first_box.push(boxes.len());
        let size: usize = (0..n).map(|i| keys.get(i).len()).sum();
        let text = (size <= COPY_LIMIT).then(|| {
            let mut text = Vec::with_capacity(size);
            let mut offsets = Vec::with_capacity(n + 1);
            // Offsets fit in 32 bits: the text is at most COPY_LIMIT bytes.
            for &i in &items {
                offsets.push(text.len() as u32);
                text.extend_from_slice(keys.get(i as usize));
            }
            offsets.push(text.len() as u32);
            (text, offsets)
        });
        Tally {
            bins,
            items,
            counts,
            starts,
            boxes,
            first_box,
            text,
        }
    }

    /// The positions of the items of `len` chars.
    fn of(&self, len: usize) -> Range<usize> {
        match (self.starts.get(len), self.starts.get(len + 1)) {
            (Some(&a), Some(&b)) => a..b,
            _ => 0..0,
        }
    }

    /// The longest length held.
    fn longest(&self) -> usize {
        self.starts.len() - 2
    }

    /// The key at position `p`, from the tally's copy or else `keys`.
    fn key<'k>(&'k self, p: usize, keys: &StrTable<'k>) -> &'k [u8] {
        match &self.text {
            Some((text, offsets)) => &text[offsets[p] as usize..offsets[p + 1] as usize],
            None => keys.get(self.items[p] as usize),
        }
    }

    /// The count bound of the item at position `p` against a query.
    fn bound(&self, p: usize, run: &Run) -> u32 {
        // The item's length: the last length whose items start at or before `p`.
        let len = self.starts.partition_point(|&s| s <= p) - 1;
        let gap = len.abs_diff(run.len) as u32;
        let exact = len <= UNSATURATED && run.len <= UNSATURATED;
        bound_of(sad(&self.counts[p], &run.counts), gap, exact)
    }
}

/// Puts `rows` in the order `order` (a permutation of their places): the row at place
/// `order[p]` moves to place `p`, one cycle of the permutation at a time, in place.
fn permute<T: Copy>(rows: &mut [T], order: &[u32]) {
    let mut placed = vec![false; rows.len()];
    for start in 0..rows.len() {
        if placed[start] {
            continue;
        }
        let first = rows[start];
        let mut at = start;
        loop {
            placed[at] = true;
            let from = order[at] as usize;
            if from == start {
                rows[at] = first;
                break;
            }
            rows[at] = rows[from];
            at = from;
        }
    }
}

/// The sum of absolute differences of two count rows.
#[inline]
fn sad(a: &[u8; BINS], b: &[u8; BINS]) -> u32 {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::{
            __m128i, _mm_add_epi64, _mm_cvtsi128_si32, _mm_loadu_si128, _mm_sad_epu8,
            _mm_unpackhi_epi64,
        };
        // SAFETY: SSE2 is part of x86-64; every load reads 16 bytes of a 32-byte array.
        unsafe {
            let (a, b) = (a.as_ptr().cast::<__m128i>(), b.as_ptr().cast::<__m128i>());
            let s0 = _mm_sad_epu8(_mm_loadu_si128(a), _mm_loadu_si128(b));
            let s1 = _mm_sad_epu8(_mm_loadu_si128(a.add(1)), _mm_loadu_si128(b.add(1)));
            let s = _mm_add_epi64(s0, s1);
            _mm_cvtsi128_si32(_mm_add_epi64(s, _mm_unpackhi_epi64(s, s))) as u32
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        a.iter()
            .zip(b)
            .map(|(&x, &y)| u32::from(x.abs_diff(y)))
            .sum()
    }
}

/// The sum over bins of how far the query's count `q` lies outside a box `(lo, hi)`: at
/// most the [`sad`] of `q` and any counts within the box.
#[inline]
fn box_sad(b: &([u8; BINS], [u8; BINS]), q: &[u8; BINS]) -> u32 {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::{
            __m128i, _mm_add_epi64, _mm_cvtsi128_si32, _mm_loadu_si128, _mm_or_si128, _mm_sad_epu8,
            _mm_setzero_si128, _mm_subs_epu8, _mm_unpackhi_epi64,
        };
        // SAFETY: SSE2 is part of x86-64; every load reads 16 bytes of a 32-byte array.
        unsafe {
            let (lo, hi) = (
                b.0.as_ptr().cast::<__m128i>(),
                b.1.as_ptr().cast::<__m128i>(),
            );
            let x = q.as_ptr().cast::<__m128i>();
            let mut s = _mm_setzero_si128();
            for h in 0..2 {
                let (l, u, v) = (
                    _mm_loadu_si128(lo.add(h)),
                    _mm_loadu_si128(hi.add(h)),
                    _mm_loadu_si128(x.add(h)),
                );
                // Per bin at most one of the two is above zero.
                let out = _mm_or_si128(_mm_subs_epu8(l, v), _mm_subs_epu8(v, u));
                s = _mm_add_epi64(s, _mm_sad_epu8(out, _mm_setzero_si128()));
            }
            _mm_cvtsi128_si32(_mm_add_epi64(s, _mm_unpackhi_epi64(s, s))) as u32
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        (0..BINS)
            .map(|j| u32::from(b.0[j].saturating_sub(q[j]) + q[j].saturating_sub(b.1[j])))
            .sum()
    }
}

/// The count bound from a sum of absolute differences `sad` and a length gap `gap`: the
/// closed form when neither string's counts saturate (`exact`), else the weaker half-sum
/// bound, never below `gap`.
#[inline]
fn bound_of(sad: u32, gap: u32, exact: bool) -> u32 {
    if exact {
        (sad + gap) / 2
    } else {
        sad.div_ceil(2).max(gap)
    }
}

/// Distinct bounds a query's collected items are sorted into; larger bounds share the last.
const BUCKETS: usize = 64;

/// The first round's threshold: on typo queries of English words the 10th distance is
/// most often 3 (then 4, then 2), so one round answers most of them.
const FIRST_ROUND: u32 = 3;

/// One query in progress: rounds collect the items whose bound lies in `(done, hi]` and
/// measure them in increasing bound, until the `k`-th distance (or the radius) is at most
/// the bound collected to.
struct Run {
    q: LevenshteinQuery,
    counts: [u8; BINS],
    len: usize,
    k: Option<usize>,
    /// The largest distance an answer may have: the radius (`u32::MAX`: none).
    radius: u32,
    best: Vec<Neighbor>,
    computed: usize,
    /// Bounds up to this have been collected and measured (`None`: none yet).
    done: Option<u32>,
    /// This round collects bounds in `(done, hi]`.
    hi: u32,
    finished: bool,
    /// This round measures its items as it collects them and stops reading once `k`
    /// answers are held within its bound ([`Run::fill`], [`Run::stopped`]).
    filling: bool,
    /// This round's items (positions in the tally) by bound: bucket `b` holds bound
    /// `from + b`, the last one every larger bound.
    buckets: Vec<Vec<u32>>,
    /// Whether an item that can only tie with the `k`-th answer held may be left out (the
    /// answers are then those of a brute force up to the order of ties): such items need
    /// not be collected at all.
    any_tie: bool,
}

impl Run {
    /// Whether `k` answers are held.
    fn full(&self) -> bool {
        self.k.is_some_and(|k| self.best.len() >= k)
    }

    /// The largest distance a new answer may have: the `k`-th held, or the radius.
    fn cap(&self) -> u32 {
        match self.k {
            Some(k) if self.best.len() >= k => (self.best[k - 1].distance as u32).min(self.radius),
            _ => self.radius,
        }
    }

    /// The largest bound an item must have been measured with for the answers to be
    /// settled: the cap, or one below it when ties may be left out and `k` are held.
    fn settled(&self) -> u32 {
        let cap = self.cap();
        if self.any_tie && self.full() {
            cap.saturating_sub(1)
        } else {
            cap
        }
    }

    /// The smallest bound this round collects.
    fn from(&self) -> u32 {
        self.done.map_or(0, |d| d.saturating_add(1))
    }

    /// Sets up the next round, or marks the query finished: every item whose bound is at
    /// most the cap has been measured, or every item at all (`most`: a bound no item
    /// exceeds).
    fn next_round(&mut self, most: u32) {
        let cap = self.settled();
        if let Some(done) = self.done {
            if done >= cap || done >= most {
                self.finished = true;
                self.buckets = Vec::new();
                return;
            }
        }
        // Leaving ties out, the rounds after the first take one bound at a time and fill:
        // once every item of a bound below `b` has been measured, any items at distance `b`
        // complete the answers, wherever they lie, so the round stops reading as soon as
        // it holds `k` within `b`.
        self.filling = self.any_tie && self.done.is_some() && self.k.is_some();
        self.hi = match self.done {
            None if self.any_tie => (FIRST_ROUND - 1).min(cap),
            None => FIRST_ROUND.min(cap),
            Some(done) if self.filling => done.saturating_add(1).min(cap),
            // The k-th distance held bounds the final one: collect up to it.
            Some(_) if self.full() => cap,
            Some(done) => done.saturating_mul(2).saturating_add(1).min(cap),
        };
        for b in &mut self.buckets {
            b.clear();
        }
    }

    /// In a filling round, measures the items collected so far (all of the round's bound)
    /// and stops the round once `k` answers are held within it.
    fn fill(&mut self, index: &crate::index::Index, tally: &Tally, keys: &StrTable<'_>) {
        let mut items = std::mem::take(&mut self.buckets[0]);
        if self.lanes() {
            for part in items.chunks(LANES) {
                self.measure_lanes(index, tally, keys, part);
            }
        } else {
            for &p in &items {
                let p = p as usize;
                self.measure(index, tally.items[p], tally.key(p, keys));
            }
        }
        items.clear();
        self.buckets[0] = items;
    }

    /// Whether this filling round holds `k` answers within its bound, and so stops reading
    /// (a round never starts so: the query would have finished).
    fn stopped(&self) -> bool {
        self.filling && self.full() && self.cap() <= self.hi
    }

    /// Whether the query fits the one-query lane kernel ([`LevenshteinQuery::dist_batch`]).
    fn lanes(&self) -> bool {
        (1..=64).contains(&self.len)
    }

    /// Measures the items at positions `part` (at most [`LANES`]) at once with the lane
    /// kernel, and keeps those that belong.
    fn measure_lanes(
        &mut self,
        index: &crate::index::Index,
        tally: &Tally,
        keys: &StrTable<'_>,
        part: &[u32],
    ) {
        let mut texts: [&[u8]; LANES] = [&[]; LANES];
        let mut out = [0u32; LANES];
        for (t, &p) in texts.iter_mut().zip(part) {
            *t = tally.key(p as usize, keys);
        }
        let n = part.len().min(LANES);
        self.q.dist_batch(&texts[..n], &mut out[..n]);
        self.computed += n;
        for (&p, &d) in part.iter().zip(&out[..n]) {
            if d <= self.cap() {
                self.keep(index, tally.items[p as usize], d);
            }
        }
    }

    /// Measures item `item` (key `key`) within the cap and keeps it if it belongs.
    fn measure(&mut self, index: &crate::index::Index, item: u32, key: &[u8]) {
        let cap = self.cap();
        self.computed += 1;
        let d = if cap == u32::MAX {
            Some(self.q.dist(key))
        } else {
            self.q.dist_within(key, cap)
        };
        if let Some(d) = d {
            self.keep(index, item, d);
        }
    }

    /// Keeps item `item` at distance `d` (within the cap): among the `k` best, or with all
    /// within the radius.
    fn keep(&mut self, index: &crate::index::Index, item: u32, d: u32) {
        let found = Neighbor {
            index: item,
            distance: f64::from(d),
        };
        match self.k {
            Some(k) => keep_best(index, &mut self.best, k, found),
            None => self.best.push(found),
        }
    }
}

/// Whether the tally can answer queries on `index`: its metric is plain Levenshtein.
pub(super) fn applies(index: &crate::index::Index) -> bool {
    let meta = index.meta();
    meta.metric == crate::metric::MetricKind::Levenshtein
        && matches!(meta.metric_spec, crate::metric::MetricSpec::Levenshtein)
}

impl Searcher<'_> {
    /// Exact answers of `queries` (the `k` nearest, all when `None`, among items within
    /// `radius`, any when `None`) by the char-count bound ([`Tally`]), in input order, for
    /// the queries it takes; `None` for the others, which the caller answers otherwise. It
    /// takes none when the index's metric is not plain Levenshtein. Otherwise the first
    /// [`TRIAL`] queries of this searcher are its trial, and after them it takes queries
    /// only while the mean number of items they measured is at most `n /`
    /// [`PAYS_DIVISOR`] (where the counts rule out few items, as for reads over four
    /// letters, the column blocks or the many-query lanes are faster). With `any_tie` the
    /// answers are exact up to the order of ties (items that could only tie with the `k`-th
    /// answer are left out) and carry no certificate. The request has been checked.
    pub(super) fn tally_answers(
        &self,
        queries: &[String],
        k: Option<usize>,
        radius: Option<f64>,
        any_tie: bool,
    ) -> Vec<Option<Result<Found>>> {
        let mut answers: Vec<Option<Result<Found>>> = queries.iter().map(|_| None).collect();
        if !applies(self.index) || queries.is_empty() {
            return answers;
        }
        let seen = self.tally_seen.0.load(Relaxed);
        let trial = usize::try_from(TRIAL.saturating_sub(seen)).unwrap_or(0);
        let mut at = 0;
        if trial > 0 {
            at = trial.min(queries.len());
            self.tally_run(&queries[..at], k, radius, any_tie, &mut answers[..at]);
        }
        if at < queries.len() && self.tally_pays() {
            self.tally_run(&queries[at..], k, radius, any_tie, &mut answers[at..]);
        }
        answers
    }

    /// Whether the queries answered so far measured few enough items for the tally to pay.
    fn tally_pays(&self) -> bool {
        let (seen, measured) = (
            self.tally_seen.0.load(Relaxed),
            self.tally_seen.1.load(Relaxed),
        );
        measured.saturating_mul(PAYS_DIVISOR) <= seen.saturating_mul(self.index.len() as u64)
    }

    /// Answers every query of `queries` by the tally into `answers` (one each), and counts
    /// them and the items they measured.
    fn tally_run(
        &self,
        queries: &[String],
        k: Option<usize>,
        radius: Option<f64>,
        any_tie: bool,
        answers: &mut [Option<Result<Found>>],
    ) {
        let n = self.index.len();
        let tally = self.tally.get_or_init(|| Tally::new(&self.keys, n));
        // No more answers than items.
        let k = k.map(|k| k.min(n.max(1)));
        let radius = match radius {
            // Distances are whole: within 2.5 is within 2.
            Some(r) => r.floor().min(f64::from(u32::MAX - 1)) as u32,
            None => u32::MAX,
        };
        let mut runs: Vec<(usize, Run)> = Vec::with_capacity(queries.len());
        for (i, q) in queries.iter().enumerate() {
            match self.index.query_key(q) {
                Err(e) => answers[i] = Some(Err(e)),
                Ok(key) => {
                    let q = LevenshteinQuery::new(&key);
                    runs.push((
                        i,
                        Run {
                            counts: tally.bins.query_counts(&q),
                            len: q.len(),
                            q,
                            k,
                            radius,
                            best: Vec::new(),
                            computed: 0,
                            done: None,
                            hi: 0,
                            finished: false,
                            filling: false,
                            buckets: vec![Vec::new(); BUCKETS],
                            any_tie,
                        },
                    ));
                }
            }
        }
        runs.sort_by_key(|(i, r)| (r.len, *i));
        // Groups small enough that every core has several, each of one length: a group
        // reads the lengths nearest its own first, so that a query meets the items in the
        // same order, and a filling round stops at the same answers, alone or in a batch.
        let threads = rayon::current_num_threads().max(1);
        let group = runs.len().div_ceil(4 * threads).clamp(1, GROUP);
        let groups: Vec<&mut [(usize, Run)]> = runs
            .chunk_by_mut(|a, b| a.1.len == b.1.len)
            .flat_map(|same| same.chunks_mut(group))
            .collect();
        groups
            .into_par_iter()
            .for_each(|g| self.tally_group(tally, g));
        let measured: usize = runs.iter().map(|(_, r)| r.computed).sum();
        self.tally_seen.0.fetch_add(runs.len() as u64, Relaxed);
        self.tally_seen.1.fetch_add(measured as u64, Relaxed);
        for (i, mut run) in runs {
            if run.k.is_none() {
                order::sort(self.index, &mut run.best);
            }
            answers[i] = Some(Ok(Found {
                neighbors: run.best,
                distances: run.computed,
                pruned: 0,
                // Left-out ties make the answers approximate: no certificate.
                certificate: (!any_tie).then_some(Certificate {
                    examined: n,
                    computed: run.computed,
                    bound: None,
                }),
            }));
        }
    }

    /// Answers a group of queries (sorted by length) in rounds: each round reads the items
    /// of the lengths its unfinished queries need once, a chunk of blocks at a time,
    /// collecting for each query the items whose bound lies in its round's range (a block
    /// whose box is beyond the range is skipped whole), then measures them.
    fn tally_group(&self, tally: &Tally, runs: &mut [(usize, Run)]) {
        let longest = tally.longest();
        loop {
            let mut lens: Option<(usize, usize)> = None;
            for (_, run) in runs.iter_mut() {
                // No item's bound exceeds the longer of the two lengths.
                let most = u32::try_from(longest.max(run.len)).unwrap_or(u32::MAX);
                if !run.finished {
                    run.next_round(most);
                }
                if !run.finished {
                    let hi = run.hi as usize;
                    let (a, b) = (run.len.saturating_sub(hi), run.len.saturating_add(hi));
                    lens = Some(lens.map_or((a, b), |(x, y)| (x.min(a), y.max(b))));
                }
            }
            let Some((first, last)) = lens else { return };
            // Lengths nearest the group's own first (its queries have one length): a
            // filling round finds its answers there soonest.
            let own = runs[0].1.len;
            let mut order: Vec<usize> = (first..=last.min(longest)).collect();
            order.sort_by_key(|&len| (len.abs_diff(own), len));
            for len in order {
                let span = tally.of(len);
                let blocks = tally.first_box[len]..tally.first_box[len + 1];
                let mut at = blocks.start;
                while at < blocks.end {
                    let chunk = at..(at + CHUNK_BLOCKS).min(blocks.end);
                    at = chunk.end;
                    for (_, run) in runs.iter_mut().filter(|(_, r)| !r.finished && !r.stopped()) {
                        collect(tally, run, len, span.start, blocks.start, chunk.clone());
                        if run.filling {
                            run.fill(self.index, tally, &self.keys);
                        }
                    }
                }
            }
            for (_, run) in runs.iter_mut().filter(|(_, r)| !r.finished) {
                if run.filling {
                    // A round that read every item has measured all of its bound; one that
                    // stopped holds k within it, which ends the query.
                    if !run.stopped() {
                        run.done = Some(run.hi);
                    }
                    continue;
                }
                let from = run.from();
                let buckets = std::mem::take(&mut run.buckets);
                'visit: for (slot, items) in buckets.iter().enumerate() {
                    let b = from + slot as u32;
                    // A bucket below the cap (or any while fewer than k are held) is
                    // measured whole, the items in the lanes of the one-query kernel.
                    if slot + 1 < BUCKETS && (b < run.cap() || !run.full()) && run.lanes() {
                        if b > run.cap() {
                            break 'visit;
                        }
                        for part in items.chunks(LANES) {
                            run.measure_lanes(self.index, tally, &self.keys, part);
                        }
                        continue;
                    }
                    for &p in items {
                        let p = p as usize;
                        // The last bucket mixes bounds: each is checked on its own.
                        let b = if slot + 1 < BUCKETS {
                            from + slot as u32
                        } else {
                            tally.bound(p, run)
                        };
                        let cap = run.cap();
                        if b > cap {
                            if slot + 1 < BUCKETS {
                                break 'visit;
                            }
                            continue;
                        }
                        let item = tally.items[p];
                        // At the k-th distance an item can only tie: left out when ties
                        // may be, else it enters only if it sorts before the k-th answer
                        // held.
                        if b == cap && run.full() && run.any_tie {
                            if slot + 1 < BUCKETS {
                                break 'visit;
                            }
                            continue;
                        }
                        if b == cap
                            && run.full()
                            && !run.k.is_some_and(|k| {
                                order::before(
                                    self.index,
                                    &Neighbor {
                                        index: item,
                                        distance: f64::from(b),
                                    },
                                    &run.best[k - 1],
                                )
                            })
                        {
                            continue;
                        }
                        run.measure(self.index, item, tally.key(p, &self.keys));
                    }
                }
                run.buckets = buckets;
                run.done = Some(run.hi);
            }
        }
    }
}

/// Collects into `run`'s buckets the items of the blocks `chunk` (numbers in `tally.boxes`)
/// of length `len`, whose blocks start at box `first` and position `start`, whose bound
/// lies in the run's round range `[from, hi]`.
fn collect(
    tally: &Tally,
    run: &mut Run,
    len: usize,
    start: usize,
    first: usize,
    chunk: Range<usize>,
) {
    let gap = len.abs_diff(run.len);
    let (from, hi) = (run.from(), run.hi);
    if gap > hi as usize {
        return;
    }
    let gap = gap as u32;
    let exact = len <= UNSATURATED && run.len <= UNSATURATED;
    let end = tally.of(len).end;
    // With exact counts, the bound is in [from, hi] when the sum of differences is in
    // [2·from − gap, 2·hi + 1 − gap]: one unsigned comparison.
    let lo_sad = (2 * u64::from(from)).saturating_sub(u64::from(gap));
    let hi_sad = 2 * u64::from(hi) + 1 - u64::from(gap);
    let lo_sad = lo_sad.min(u64::from(u32::MAX)) as u32;
    let width = hi_sad.min(u64::from(u32::MAX)) as u32 - lo_sad.min(hi_sad as u32);
    for b in chunk {
        let bx = &tally.boxes[b];
        if bound_of(box_sad(bx, &run.counts), gap, exact) > hi {
            continue;
        }
        let p0 = start + (b - first) * BLOCK;
        let p1 = (p0 + BLOCK).min(end);
        if exact {
            let mut sads = [0u32; BLOCK];
            let mut mask =
                within_block(&tally.counts[p0..p1], &run.counts, lo_sad, width, &mut sads);
            while mask != 0 {
                let j = mask.trailing_zeros() as usize;
                mask &= mask - 1;
                let slot = (((sads[j] + gap) / 2 - from) as usize).min(BUCKETS - 1);
                run.buckets[slot].push((p0 + j) as u32);
            }
        } else {
            for (p, c) in (p0..p1).zip(&tally.counts[p0..p1]) {
                let bound = bound_of(sad(c, &run.counts), gap, false);
                if bound >= from && bound <= hi {
                    let slot = ((bound - from) as usize).min(BUCKETS - 1);
                    run.buckets[slot].push(p as u32);
                }
            }
        }
    }
}

/// The [`sad`] of every row of a block (at most [`BLOCK`] rows) against `q` into `sads`,
/// and the mask of the rows whose sum lies in `[lo, lo + width]` (bit `j`: row `j`).
fn within_block(
    rows: &[[u8; BINS]],
    q: &[u8; BINS],
    lo: u32,
    width: u32,
    sads: &mut [u32; BLOCK],
) -> u32 {
    #[cfg(target_arch = "x86_64")]
    if crate::cpu::has_avx2() {
        // SAFETY: the CPU has AVX2; the rows are at most BLOCK.
        return unsafe { within_block_avx2(rows, q, lo, width, sads) };
    }
    within_block_portable(rows, q, lo, width, sads)
}

/// [`within_block`] one row at a time.
fn within_block_portable(
    rows: &[[u8; BINS]],
    q: &[u8; BINS],
    lo: u32,
    width: u32,
    sads: &mut [u32; BLOCK],
) -> u32 {
    let mut mask = 0u32;
    for (j, (r, s)) in rows.iter().zip(sads.iter_mut()).enumerate() {
        *s = sad(r, q);
        if s.wrapping_sub(lo) <= width {
            mask |= 1 << j;
        }
    }
    mask
}

/// [`within_block`] with AVX2: eight rows at a time, each row one register whose
/// `vpsadbw` against the query leaves four partial sums, which shuffles and horizontal
/// adds turn into the eight rows' sums side by side. Hand-written: no crate offers a
/// thresholded sum-of-differences over rows of 32 bytes.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn within_block_avx2(
    rows: &[[u8; BINS]],
    q: &[u8; BINS],
    lo: u32,
    width: u32,
    sads: &mut [u32; BLOCK],
) -> u32 {
    use std::arch::x86_64::{
        __m256i, _mm256_add_epi32, _mm256_castsi256_ps, _mm256_cmpeq_epi32, _mm256_hadd_epi32,
        _mm256_loadu_si256, _mm256_min_epu32, _mm256_movemask_ps, _mm256_or_si256,
        _mm256_permute2x128_si256, _mm256_sad_epu8, _mm256_set1_epi32, _mm256_shuffle_epi32,
        _mm256_slli_epi64, _mm256_storeu_si256, _mm256_sub_epi32,
    };
    let n = rows.len().min(BLOCK);
    let qv = _mm256_loadu_si256(q.as_ptr().cast::<__m256i>());
    let lo_v = _mm256_set1_epi32(lo as i32);
    let width_v = _mm256_set1_epi32(width as i32);
    let row =
        |i: usize| _mm256_sad_epu8(_mm256_loadu_si256(rows[i].as_ptr().cast::<__m256i>()), qv);
    // Four rows' partial sums (each below 2^16, in the low bits of a 64-bit lane) as
    // [a0+a1, b0+b1, c0+c1, d0+d1 | a2+a3, b2+b3, c2+c3, d2+d3].
    let four = |i: usize| {
        let ab = _mm256_or_si256(row(i), _mm256_slli_epi64(row(i + 1), 32));
        let cd = _mm256_or_si256(row(i + 2), _mm256_slli_epi64(row(i + 3), 32));
        _mm256_hadd_epi32(
            _mm256_shuffle_epi32(ab, 0xD8),
            _mm256_shuffle_epi32(cd, 0xD8),
        )
    };
    let mut mask = 0u32;
    let mut i = 0;
    while i + 8 <= n {
        let (x, y) = (four(i), four(i + 4));
        let s = _mm256_add_epi32(
            _mm256_permute2x128_si256(x, y, 0x20),
            _mm256_permute2x128_si256(x, y, 0x31),
        );
        _mm256_storeu_si256(sads[i..].as_mut_ptr().cast::<__m256i>(), s);
        let d = _mm256_sub_epi32(s, lo_v);
        let ok = _mm256_cmpeq_epi32(_mm256_min_epu32(d, width_v), d);
        mask |= (_mm256_movemask_ps(_mm256_castsi256_ps(ok)) as u32) << i;
        i += 8;
    }
    for j in i..n {
        let s = sad(&rows[j], q);
        sads[j] = s;
        if s.wrapping_sub(lo) <= width {
            mask |= 1 << j;
        }
    }
    mask
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    proptest! {
        /// The AVX2 block (where the CPU has it) equals the row-by-row form, for blocks of
        /// every length up to 32 and counts up to 255.
        #[test]
        fn the_avx2_block_equals_the_portable_one(
            rows in proptest::collection::vec(proptest::array::uniform32(any::<u8>()), 0..=BLOCK),
            q in proptest::array::uniform32(any::<u8>()),
            lo in 0u32..3000,
            width in 0u32..3000,
        ) {
            let (mut a, mut b) = ([0u32; BLOCK], [0u32; BLOCK]);
            let want = within_block_portable(&rows, &q, lo, width, &mut a);
            prop_assert_eq!(within_block(&rows, &q, lo, width, &mut b), want);
            prop_assert_eq!(&a[..rows.len()], &b[..rows.len()]);
            for (j, r) in rows.iter().enumerate() {
                let s: u32 = r.iter().zip(&q).map(|(&x, &y)| u32::from(x.abs_diff(y))).sum();
                prop_assert_eq!(a[j], s);
                prop_assert_eq!(want >> j & 1 == 1, s >= lo && s - lo <= width);
            }
        }

        /// Putting rows in an order in place gives what gathering them into a new vector
        /// gives, for any permutation.
        #[test]
        fn rows_put_in_order_in_place_are_the_gathered_ones(
            order in Just((0u32..200).collect::<Vec<u32>>()).prop_shuffle(),
            len in 0usize..200,
        ) {
            let order: Vec<u32> = order.into_iter().filter(|&i| (i as usize) < len).collect();
            let rows: Vec<u64> = (0..len as u64).map(|i| i * 7 + 3).collect();
            let want: Vec<u64> = order.iter().map(|&i| rows[i as usize]).collect();
            let mut got = rows.clone();
            permute(&mut got, &order);
            prop_assert_eq!(got, want);
        }

        /// The count bound never exceeds the Levenshtein distance of strsim (a reference
        /// crate), with bins fitted to other strings and chars outside ASCII; a box's sum
        /// never exceeds that of the counts inside it.
        #[test]
        fn the_count_bound_is_a_lower_bound(
            a in "[a-eé中]{0,12}",
            b in "[a-eé中]{0,12}",
            fit in proptest::collection::vec("[a-z]{1,6}", 1..5),
        ) {
            let bins = CharBins::<BINS>::fitted(fit.iter().map(|s| s.as_bytes()));
            let (ca, cb) = (bins.counts(a.as_bytes()), bins.counts(b.as_bytes()));
            let (la, lb) = (a.chars().count(), b.chars().count());
            let gap = la.abs_diff(lb) as u32;
            let bound = bound_of(sad(&ca, &cb), gap, true);
            prop_assert!(bound as usize <= strsim::levenshtein(&a, &b), "{a:?} {b:?}");
            prop_assert!(bound_of(sad(&ca, &cb), gap, false) <= bound);
            let mut lo = ca;
            let mut hi = ca;
            for j in 0..BINS {
                lo[j] = lo[j].min(cb[j]);
                hi[j] = hi[j].max(cb[j]);
            }
            let q = bins.counts(b"abc");
            prop_assert!(box_sad(&(lo, hi), &q) <= sad(&ca, &q).min(sad(&cb, &q)));
        }
    }
}
