//! Exact k-NN and range queries under plain Levenshtein by the char-count bound, with the
//! items read by length ([`Tally`], [`Searcher::tally_answers`]).
//!
//! With `A` and `B` the numbers of chars of two strings in each of 32 bins
//! ([`CharBins`]), the distance is at least the longer length less the chars the two have
//! in common, `C = Σ min(A, B)` (one edit changes each string's chars not in common by at
//! most one). The query's chars less `C` are the query's chars the item lacks: with the
//! query's `a` chars of a bin as the pairs `(bin, 0) .. (bin, a − 1)`, an item misses pair
//! `(bin, t)` when it has at most `t` chars in that bin, and the bound is the longer length
//! less the query's, plus the pairs missed (never below the length gap).
//!
//! The items are held by length in chars, in blocks of 512, each bin's counts as [`LEVELS`]
//! bit masks, one for each "more than `t` chars" (8 KiB a block, 16 bytes an item: 10.8 MB
//! at 663,473 words, made on the first query). A query reads only its own pairs' masks
//! (about nine for an English word) and counts the pairs each item misses in unary, tier by
//! tier, up to the most its round can take: one three-input logic op per tier and pair for
//! 512 items (AVX-512 F; an and-not and an or on two registers with AVX2). A query's chars
//! past [`LEVELS`] in one bin count as met, which leaves the bound a lower bound.
//!
//! Queries go in groups of one length, in rounds: a round collects the items whose bound
//! lies in its range, and each group reads the items of its own length first, then of
//! lengths one further away, and so on, in chunks whose masks stay in cache while every
//! query of the group is compared with them. An item is measured (the lane kernel,
//! [`LevenshteinQuery::dist_batch`], or the bounded one) only when its bound is within the
//! query's cap: the radius, or the `k`-th distance held. Collected items are measured in
//! increasing bound, so that the cap falls early, and the rounds go on until every item
//! whose bound is within the cap has been.
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
use crate::cpu::Level;
use crate::error::Result;
use crate::index::StrTable;
use crate::metric::LevenshteinQuery;

/// Blocks of items compared with every query of a group at a time: 4 blocks of 512 items
/// are 32 KiB of marks, of which a query reads only its own chars' (about 9 of 128), and
/// which stay in the core's cache meanwhile.
const CHUNK_BLOCKS: usize = 4;
/// Items per block: one 512-bit register holds one mark of a block.
const LANE: usize = 512;
/// 64-bit words of a mark.
const WORDS: usize = LANE / 64;
/// One bit per item of a block: bit `l % 64` of word `l / 64` is item `l`'s.
type Mark = [u64; WORDS];
/// Counts held per bin: mark `t` of bin `j` holds the items with more than `t` chars in
/// bin `j`, for `t` below [`LEVELS`] (a query's chars beyond it in one bin count as met).
const LEVELS: usize = 4;
/// The marks of a block: `marks[j][t]` (8 KiB, 16 bytes an item).
type Marks = [[Mark; LEVELS]; BINS];
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
/// Bins of the char counts, each held as [`LEVELS`] marks. At 663,473 words, 1,000 typo
/// queries, 32 bins left half as many items to measure as 16.
const BINS: usize = 32;
/// Largest text copied into the tally's own order (the keys of one length side by side, so
/// that the items measured are read from nearby memory); a larger one is read in place.
const COPY_LIMIT: usize = 64 << 20;

/// Every item's char counts (up to [`LEVELS`] a bin), the items ordered by length in chars,
/// then by counts.
pub(crate) struct Tally {
    bins: CharBins<BINS>,
    /// Item numbers by length, then by counts.
    items: Vec<u32>,
    /// `starts[len]..starts[len + 1]`: the positions of the items of `len` chars.
    starts: Vec<usize>,
    /// The count marks of the items of each length in blocks of [`LANE`]: block `b` of
    /// length `len` is `blocks[first_block[len] + b]`, positions `starts[len] + LANE·b ..`
    /// (the last block of a length is padded with zeros).
    blocks: Vec<Marks>,
    first_block: Vec<usize>,
    /// The keys in position order (`text[offsets[p]..offsets[p + 1]]`), when the text is
    /// at most [`COPY_LIMIT`] bytes.
    text: Option<(Vec<u8>, Vec<u32>)>,
}

impl Tally {
    /// The counts of every key of `keys` (`n` of them), bins fitted to their chars.
    pub(crate) fn new(keys: &StrTable<'_>, n: usize) -> Tally {
        let bins = CharBins::<BINS>::fitted((0..n).map(|i| keys.get(i)));
        // Each item's counts and length, then the item numbers by length, within a length by
        // counts (alike items then lie side by side, their keys in nearby memory), then by
        // number.
        let counts: Vec<[u8; BINS]> = (0..n)
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
        let longest = lens.iter().copied().max().unwrap_or(0) as usize;
        let mut starts = vec![0usize; longest + 2];
        for &len in &lens {
            starts[len as usize + 1] += 1;
        }
        drop(lens);
        for j in 1..starts.len() {
            starts[j] += starts[j - 1];
        }
        // The counts are made again block by block from the keys, so that two copies of
        // them are never held at once.
        drop(counts);
        let mut spans = Vec::new();
        let mut first_block = Vec::with_capacity(longest + 2);
        for len in 0..=longest {
            first_block.push(spans.len());
            let mut p = starts[len];
            while p < starts[len + 1] {
                spans.push(p..(p + LANE).min(starts[len + 1]));
                p += LANE;
            }
        }
        first_block.push(spans.len());
        let blocks: Vec<Marks> = spans
            .into_par_iter()
            .map(|span| {
                let mut marks = [[[0u64; WORDS]; LEVELS]; BINS];
                for (l, p) in span.enumerate() {
                    let c = bins.counts(keys.get(items[p] as usize));
                    for (j, &c) in c.iter().enumerate() {
                        for mark in &mut marks[j][..usize::from(c).min(LEVELS)] {
                            mark[l / 64] |= 1 << (l % 64);
                        }
                    }
                }
                marks
            })
            .collect();
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
            starts,
            blocks,
            first_block,
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
        let at = p - self.starts[len];
        let marks = &self.blocks[self.first_block[len] + at / LANE];
        count_bound(len, run.len, missed(marks, at % LANE, &run.pairs))
    }
}

/// The pairs of `pairs` item `l` of a block (marks `marks`) misses.
fn missed(marks: &Marks, l: usize, pairs: &[(u8, u8)]) -> u32 {
    let (w, l) = (l / 64, l % 64);
    pairs
        .iter()
        .filter(|&&(j, t)| marks[usize::from(j) % BINS][usize::from(t) % LEVELS][w] >> l & 1 == 0)
        .count() as u32
}

/// The query's chars as (bin, level) pairs: a query with `a` chars in bin `j` has the
/// pairs `(j, t)` for `t` below `a` and [`LEVELS`]. An item meets pair `(j, t)` when it has
/// more than `t` chars in bin `j` (its mark `t` of bin `j`).
fn pairs_of(counts: &[u8; BINS]) -> Vec<(u8, u8)> {
    (0..BINS)
        .flat_map(|j| (0..usize::from(counts[j]).min(LEVELS)).map(move |t| (j as u8, t as u8)))
        .collect()
}

/// The count bound of an item of `len` chars that misses `missed` of the pairs of a query
/// of `qlen` chars ([`pairs_of`]): the longer length less the chars the two have in common,
/// and never below the length gap.
///
/// The chars in common, `C = Σ min(A, B)` over the bins, are at most the query's length
/// less the pairs missed (a pair missed is a query char the item lacks; the chars past
/// [`LEVELS`] in a bin are taken as met), and the distance is at least the longer length
/// less `C` (one edit changes each string's chars not in common by at most one).
#[inline]
fn count_bound(len: usize, qlen: usize, missed: u32) -> u32 {
    let gap = len.abs_diff(qlen) as u32;
    gap.max(len.saturating_sub(qlen) as u32 + missed)
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
    /// The query's chars as (bin, level) pairs ([`pairs_of`]).
    pairs: Vec<(u8, u8)>,
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
        // The keys lie apart: their first lines are asked for at once, not one by one.
        for t in &texts[..n] {
            crate::cpu::prefetch(t.as_ptr());
        }
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
                    let counts = tally.bins.query_counts(&q);
                    runs.push((
                        i,
                        Run {
                            pairs: pairs_of(&counts),
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
    /// collecting for each query the items whose bound lies in its round's range, then
    /// measures them.
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
                let blocks = tally.first_block[len]..tally.first_block[len + 1];
                let mut at = blocks.start;
                while at < blocks.end {
                    let chunk = at..(at + CHUNK_BLOCKS).min(blocks.end);
                    at = chunk.end;
                    for (_, run) in runs.iter_mut().filter(|(_, r)| !r.finished && !r.stopped()) {
                        collect(tally, run, len, span.start, blocks.start, chunk.clone());
                        // A filling round measures its items once they fill the lanes.
                        if run.filling && run.buckets[0].len() >= LANES {
                            run.fill(self.index, tally, &self.keys);
                        }
                    }
                }
                // ... and the rest at the end of each length, before it reads the next.
                for (_, run) in runs.iter_mut().filter(|(_, r)| r.filling && !r.finished) {
                    run.fill(self.index, tally, &self.keys);
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

/// Collects into `run`'s buckets the items of the blocks `chunk` (numbers in `tally.blocks`)
/// of length `len`, whose blocks start at block `first` and position `start`, whose bound
/// lies in the run's round range `[from, hi]`.
fn collect(
    tally: &Tally,
    run: &mut Run,
    len: usize,
    start: usize,
    first: usize,
    chunk: Range<usize>,
) {
    let gap = len.abs_diff(run.len) as u32;
    let (from, hi) = (run.from(), run.hi);
    if gap > hi || from > hi {
        return;
    }
    // The bound is `max(gap, base + missed)` ([`count_bound`]), with `base ≤ gap`: it lies
    // in `[from, hi]` when the pairs missed lie in `[lo, up]`.
    let base = len.saturating_sub(run.len) as u32;
    let up = (hi - base).min(run.pairs.len() as u32);
    let lo = if gap >= from { 0 } else { from - base };
    if lo > up {
        return;
    }
    let end = tally.of(len).end;
    // Only the last block of a length may be part full.
    let n = (end - start - (chunk.end - 1 - first) * LANE).min(LANE);
    let mut last = [0u64; WORDS];
    for (w, word) in last.iter_mut().enumerate() {
        let bits = n.saturating_sub(64 * w).min(64);
        *word = if bits == 64 {
            u64::MAX
        } else {
            (1u64 << bits) - 1
        };
    }
    let buckets = &mut run.buckets;
    in_reach_blocks(
        Level::active(),
        &tally.blocks[chunk.clone()],
        &run.pairs,
        (lo as usize, up as usize),
        &last,
        &mut |b, mask, tiers| {
            let p0 = start + (chunk.start + b - first) * LANE;
            for (w, &word) in mask.iter().enumerate() {
                let mut word = word;
                while word != 0 {
                    let l = word.trailing_zeros();
                    word &= word - 1;
                    // An item reported misses fewer pairs than there are tiers: the
                    // tiers it is in are the pairs it misses.
                    let missed: u32 = tiers.iter().map(|t| (t[w] >> l & 1) as u32).sum();
                    let bound = gap.max(base + missed);
                    let slot = ((bound - from) as usize).min(BUCKETS - 1);
                    buckets[slot].push((p0 + 64 * w + l as usize) as u32);
                }
            }
        },
    );
}

/// What a block's items share with a query: the block's number in the slice, the mask of
/// its items within the range, and the tiers `1..`: tier `i` (from 0) marks the items that
/// miss more than `i` pairs.
type Hit<'h> = &'h mut dyn FnMut(usize, &Mark, &[Mark]);

/// Most tiers the vector forms keep in registers; a wider range takes the portable form.
const MOST_TIERS: usize = 8;

/// For each block of `blocks`, the mask of the items that miss between `lo` and `up` of
/// the query's `pairs` (bin, level), `up` at most the number of pairs (none when `lo` is
/// above `up`); in the last block
/// only the items of `last`: `hit` gets every block with one at least, with the tiers
/// `1 ..= up + 1` of its items.
///
/// The pairs missed are counted in unary, an item's tier `i` set once it has missed `i`
/// pairs: each pair raises an item to tier `i` if it missed the pair and was in tier
/// `i − 1`, one three-input logic op per tier (AVX-512), for 512 items at once. At
/// dispatch level `level`, lowered to what the CPU runs.
fn in_reach_blocks(
    level: Level,
    blocks: &[Marks],
    pairs: &[(u8, u8)],
    (lo, up): (usize, usize),
    last: &Mark,
    hit: Hit<'_>,
) {
    if lo > up {
        return;
    }
    #[cfg(target_arch = "x86_64")]
    {
        let level = level.clamped();
        macro_rules! tiers {
            ($f:ident) => {
                match up + 1 {
                    1 => $f::<1>(blocks, pairs, lo, last, hit),
                    2 => $f::<2>(blocks, pairs, lo, last, hit),
                    3 => $f::<3>(blocks, pairs, lo, last, hit),
                    4 => $f::<4>(blocks, pairs, lo, last, hit),
                    5 => $f::<5>(blocks, pairs, lo, last, hit),
                    6 => $f::<6>(blocks, pairs, lo, last, hit),
                    7 => $f::<7>(blocks, pairs, lo, last, hit),
                    _ => $f::<MOST_TIERS>(blocks, pairs, lo, last, hit),
                }
            };
        }
        if up < MOST_TIERS && level >= Level::Avx512 {
            // SAFETY: the CPU has AVX-512 F (the level is clamped to the CPU's).
            return unsafe { tiers!(in_reach_avx512) };
        }
        if up < MOST_TIERS && level >= Level::Avx2 {
            // SAFETY: the CPU has AVX2.
            return unsafe { tiers!(in_reach_avx2) };
        }
    }
    let _ = level;
    in_reach_portable(blocks, pairs, (lo, up), last, hit)
}

/// The mask of valid items of block `b` of `n`: all but in the last, whose are `last`.
#[inline(always)]
fn valid(b: usize, n: usize, last: &Mark) -> Mark {
    if b + 1 == n {
        *last
    } else {
        [u64::MAX; WORDS]
    }
}

/// [`in_reach_blocks`] in plain Rust, for any range.
fn in_reach_portable(
    blocks: &[Marks],
    pairs: &[(u8, u8)],
    (lo, up): (usize, usize),
    last: &Mark,
    hit: Hit<'_>,
) {
    let mut tiers = vec![[0u64; WORDS]; up + 1];
    for (b, marks) in blocks.iter().enumerate() {
        tiers.fill([0; WORDS]);
        for &(j, t) in pairs {
            let met = &marks[usize::from(j) % BINS][usize::from(t) % LEVELS];
            for i in (1..=up).rev() {
                let (below, at) = tiers.split_at_mut(i);
                for w in 0..WORDS {
                    at[0][w] |= below[i - 1][w] & !met[w];
                }
            }
            for w in 0..WORDS {
                tiers[0][w] |= !met[w];
            }
        }
        let valid = valid(b, blocks.len(), last);
        let mut mask = [0u64; WORDS];
        for w in 0..WORDS {
            let from = if lo == 0 { u64::MAX } else { tiers[lo - 1][w] };
            mask[w] = from & !tiers[up][w] & valid[w];
        }
        if mask.iter().any(|&m| m != 0) {
            hit(b, &mask, &tiers);
        }
    }
}

/// [`in_reach_blocks`] with AVX2 and `K = up + 1` tiers in registers: two registers a
/// mark, an and-not and an or per tier and pair. Hand-written, as the crate's other
/// kernels: no crate offers it.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
#[allow(clippy::needless_range_loop)] // `h` picks the half of a mark in several arrays.
unsafe fn in_reach_avx2<const K: usize>(
    blocks: &[Marks],
    pairs: &[(u8, u8)],
    lo: usize,
    last: &Mark,
    hit: Hit<'_>,
) {
    use std::arch::x86_64::{
        __m256i, _mm256_and_si256, _mm256_andnot_si256, _mm256_loadu_si256, _mm256_or_si256,
        _mm256_set1_epi8, _mm256_setzero_si256, _mm256_storeu_si256, _mm256_testz_si256,
    };
    let ones = _mm256_set1_epi8(-1);
    let n = blocks.len();
    let mut store = [[0u64; WORDS]; K];
    for (b, marks) in blocks.iter().enumerate() {
        let mut tiers = [[_mm256_setzero_si256(); 2]; K];
        for &(j, t) in pairs {
            let met = marks[usize::from(j) % BINS][usize::from(t) % LEVELS]
                .as_ptr()
                .cast::<__m256i>();
            for h in 0..2 {
                let met = _mm256_loadu_si256(met.add(h));
                for i in (1..K).rev() {
                    tiers[i][h] =
                        _mm256_or_si256(tiers[i][h], _mm256_andnot_si256(met, tiers[i - 1][h]));
                }
                tiers[0][h] = _mm256_or_si256(tiers[0][h], _mm256_andnot_si256(met, ones));
            }
        }
        let valid = valid(b, n, last);
        let valid = valid.as_ptr().cast::<__m256i>();
        let mut any = false;
        let mut mask = [0u64; WORDS];
        for h in 0..2 {
            let from = if lo == 0 { ones } else { tiers[lo - 1][h] };
            let m = _mm256_and_si256(
                _mm256_andnot_si256(tiers[K - 1][h], from),
                _mm256_loadu_si256(valid.add(h)),
            );
            any |= _mm256_testz_si256(m, m) == 0;
            _mm256_storeu_si256(mask.as_mut_ptr().cast::<__m256i>().add(h), m);
        }
        if any {
            for (i, tier) in tiers.iter().enumerate() {
                let out = store[i].as_mut_ptr().cast::<__m256i>();
                _mm256_storeu_si256(out, tier[0]);
                _mm256_storeu_si256(out.add(1), tier[1]);
            }
            hit(b, &mask, &store);
        }
    }
}

/// [`in_reach_blocks`] with AVX-512 F and `K = up + 1` tiers in registers: one register a
/// mark, one `vpternlogq` per tier and pair.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
unsafe fn in_reach_avx512<const K: usize>(
    blocks: &[Marks],
    pairs: &[(u8, u8)],
    lo: usize,
    last: &Mark,
    hit: Hit<'_>,
) {
    use std::arch::x86_64::{
        __m512i, _mm512_and_si512, _mm512_andnot_si512, _mm512_loadu_si512, _mm512_set1_epi8,
        _mm512_setzero_si512, _mm512_storeu_si512, _mm512_ternarylogic_epi64,
        _mm512_test_epi64_mask,
    };
    let ones = _mm512_set1_epi8(-1);
    let n = blocks.len();
    let mut store = [[0u64; WORDS]; K];
    for (b, marks) in blocks.iter().enumerate() {
        let mut tiers = [_mm512_setzero_si512(); K];
        for &(j, t) in pairs {
            let met = _mm512_loadu_si512(
                marks[usize::from(j) % BINS][usize::from(t) % LEVELS]
                    .as_ptr()
                    .cast::<__m512i>(),
            );
            for i in (1..K).rev() {
                // tier | (below & !met): 0xF0 | (0xCC & !0xAA).
                tiers[i] = _mm512_ternarylogic_epi64::<0xF4>(tiers[i], tiers[i - 1], met);
            }
            // tier | !met: 0xF0 | !0xCC.
            tiers[0] = _mm512_ternarylogic_epi64::<0xF3>(tiers[0], met, met);
        }
        let valid = valid(b, n, last);
        let from = if lo == 0 { ones } else { tiers[lo - 1] };
        let m = _mm512_and_si512(
            _mm512_andnot_si512(tiers[K - 1], from),
            _mm512_loadu_si512(valid.as_ptr().cast::<__m512i>()),
        );
        if _mm512_test_epi64_mask(m, m) != 0 {
            for (out, &tier) in store.iter_mut().zip(&tiers) {
                _mm512_storeu_si512(out.as_mut_ptr().cast::<__m512i>(), tier);
            }
            let mut mask = [0u64; WORDS];
            _mm512_storeu_si512(mask.as_mut_ptr().cast::<__m512i>(), m);
            hit(b, &mask, &store);
        }
    }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    proptest! {
        /// Every dispatch level the CPU runs reports the items that miss between `lo` and
        /// `up` of a query's pairs, counted one item at a time, with their tiers, for up to
        /// three blocks of any small counts and a part-full last block, and ranges past the
        /// tiers the vector forms hold.
        #[test]
        fn every_level_finds_the_items_in_reach(
            rows in proptest::collection::vec(proptest::array::uniform32(0u8..=5), 1..=3 * LANE),
            q in proptest::array::uniform32(0u8..=3),
            lo in 0usize..=12,
            up in 0usize..=12,
        ) {
            let pairs = pairs_of(&q);
            let up = up.min(pairs.len());
            let mut blocks = vec![[[[0u64; WORDS]; LEVELS]; BINS]; rows.len().div_ceil(LANE)];
            for (i, row) in rows.iter().enumerate() {
                for j in 0..BINS {
                    for mark in &mut blocks[i / LANE][j][..usize::from(row[j]).min(LEVELS)] {
                        mark[i % LANE / 64] |= 1 << (i % 64);
                    }
                }
            }
            let n = rows.len() - (blocks.len() - 1) * LANE;
            let mut last = [0u64; WORDS];
            for i in 0..n {
                last[i / 64] |= 1 << (i % 64);
            }
            let run = |level: Level| {
                let mut seen = Vec::new();
                in_reach_blocks(level, &blocks, &pairs, (lo, up), &last, &mut |b, mask, tiers| {
                    for l in 0..LANE {
                        if mask[l / 64] >> (l % 64) & 1 == 1 {
                            let m: u32 =
                                tiers.iter().map(|t| (t[l / 64] >> (l % 64) & 1) as u32).sum();
                            seen.push((b * LANE + l, m));
                        }
                    }
                });
                seen
            };
            // One item at a time: the query's chars (up to LEVELS a bin) the item lacks.
            let want: Vec<(usize, u32)> = rows
                .iter()
                .enumerate()
                .map(|(i, row)| {
                    let m: u32 = (0..BINS)
                        .map(|j| u32::from(q[j].min(LEVELS as u8).saturating_sub(row[j])))
                        .sum();
                    (i, m)
                })
                .filter(|&(_, m)| m as usize >= lo && m as usize <= up)
                .collect();
            for &(i, m) in &want {
                prop_assert_eq!(missed(&blocks[i / LANE], i % LANE, &pairs), m);
            }
            for level in Level::ALL.into_iter().filter(|l| l.available()) {
                prop_assert_eq!(&run(level), &want, "{:?}", level);
            }
        }

        /// The count bound never exceeds the Levenshtein distance of strsim (a reference
        /// crate), with bins fitted to other strings, chars outside ASCII and more chars in
        /// a bin than the marks hold; with at most [`LEVELS`] a bin, it is the longer length
        /// less the chars in common.
        #[test]
        fn the_count_bound_is_a_lower_bound(
            a in "[a-eé中]{0,12}|[ab]{0,24}",
            b in "[a-eé中]{0,12}|[ab]{0,24}",
            fit in proptest::collection::vec("[a-z]{1,6}", 1..5),
        ) {
            let bins = CharBins::<BINS>::fitted(fit.iter().map(|s| s.as_bytes()));
            let (ca, cb) = (bins.counts(a.as_bytes()), bins.counts(b.as_bytes()));
            let (la, lb) = (a.chars().count(), b.chars().count());
            // The item `a` against the query `b`.
            let mut marks = [[[0u64; WORDS]; LEVELS]; BINS];
            for j in 0..BINS {
                for mark in &mut marks[j][..usize::from(ca[j]).min(LEVELS)] {
                    mark[0] |= 1 << 5;
                }
            }
            let bound = count_bound(la, lb, missed(&marks, 5, &pairs_of(&cb)));
            prop_assert!(bound as usize <= strsim::levenshtein(&a, &b), "{a:?} {b:?}");
            if cb.iter().all(|&c| usize::from(c) <= LEVELS) {
                let common: u32 = (0..BINS).map(|j| u32::from(ca[j].min(cb[j]))).sum();
                prop_assert_eq!(bound, la.max(lb) as u32 - common);
            }
        }
    }
}
