//! Exact k-NN and range queries under plain Levenshtein by the char-count bound, with the
//! items read by length ([`Tally`], [`Searcher::tally_answers`]).
//!
//! With `A` and `B` the numbers of chars of two strings in each of 32 bins
//! ([`CharBins`]), the distance is at least `max(Σ (A − B)⁺, Σ (B − A)⁺)` (one edit lowers
//! each sum by at most one). Each sum is a length less the chars the two have in common,
//! `C = Σ min(A, B)`, so the bound is the longer length less `C`; and `C` only adds over
//! the bins the query has chars in (seven or eight for an English word).
//!
//! The items are held by length in chars, their counts in blocks of 64 items bin by bin
//! (64 bytes a bin, 32 bytes an item: 21.2 MB at 663,473 words, made on the first query),
//! so that one vector register holds a bin's counts of a block: a query's `C` with 64 items
//! is a `min` and an add of bytes per bin of the query (AVX-512 BW; two of each with AVX2).
//! Queries go in groups of one length, in rounds: a round collects the items whose bound
//! lies in its range, and each group reads the items of its own length first, then of
//! lengths one further away, and so on, in chunks whose counts stay in cache while every
//! query of the group is compared with them. An item is measured (the lane kernel, [`LevenshteinQuery::dist_batch`], or the
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
use crate::cpu::Level;
use crate::error::Result;
use crate::index::StrTable;
use crate::metric::LevenshteinQuery;

/// Blocks of items compared with every query of a group at a time: 32 blocks of 64 items
/// are 64 KiB of counts, of which a query reads only its own chars' bins, and which stay in
/// the core's L2 cache meanwhile.
const CHUNK_BLOCKS: usize = 32;
/// Items per block: one 64-byte register holds one bin's counts of a block.
const LANE: usize = 64;
/// The counts of a block's items bin by bin: `cols[j][l]` is item `l`'s count in bin `j`.
type Columns = [[u8; LANE]; BINS];
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
    /// `starts[len]..starts[len + 1]`: the positions of the items of `len` chars.
    starts: Vec<usize>,
    /// The counts of the items of each length in blocks of [`LANE`]: block `b` of length
    /// `len` is `blocks[first_block[len] + b]`, positions `starts[len] + LANE·b ..` (the
    /// last block of a length is padded with zeros).
    blocks: Vec<Columns>,
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
        let blocks: Vec<Columns> = spans
            .into_par_iter()
            .map(|span| {
                let mut cols = [[0u8; LANE]; BINS];
                for (l, p) in span.enumerate() {
                    let c = bins.counts(keys.get(items[p] as usize));
                    for j in 0..BINS {
                        cols[j][l] = c[j];
                    }
                }
                cols
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
        let cols = &self.blocks[self.first_block[len] + at / LANE];
        let gap = len.abs_diff(run.len) as u32;
        let exact = len <= UNSATURATED && run.len <= UNSATURATED;
        bound_of(lane_sad(cols, at % LANE, &run.counts), gap, exact)
    }
}

/// The sum of absolute differences of the counts of lane `l` of a block and `q`.
fn lane_sad(cols: &Columns, l: usize, q: &[u8; BINS]) -> u32 {
    cols.iter()
        .zip(q)
        .map(|(c, &y)| u32::from(c[l].abs_diff(y)))
        .sum()
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
    /// The query's bins with a count above zero, and those counts.
    nz: Vec<(u8, u8)>,
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
                    let counts = tally.bins.query_counts(&q);
                    runs.push((
                        i,
                        Run {
                            nz: (0..BINS)
                                .filter(|&j| counts[j] > 0)
                                .map(|j| (j as u8, counts[j]))
                                .collect(),
                            counts,
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
    let gap = len.abs_diff(run.len);
    let (from, hi) = (run.from(), run.hi);
    if gap > hi as usize {
        return;
    }
    let end = tally.of(len).end;
    if len <= UNSATURATED && run.len <= UNSATURATED {
        // With exact counts the bound is the longer length less the chars the two have in
        // common, `Σ min(A, B)`, which only the query's own bins add to: it lies in
        // `[from, hi]` when the common chars lie in `[longer − hi, longer − from]`.
        let longer = len.max(run.len) as u32;
        if from > longer {
            return;
        }
        let (lo, up) = (longer.saturating_sub(hi) as u8, (longer - from) as u8);
        // Only the last block of a length may be part full.
        let n = (end - start - (chunk.end - 1 - first) * LANE).min(LANE);
        let last = if n == LANE { u64::MAX } else { (1u64 << n) - 1 };
        let buckets = &mut run.buckets;
        in_common_blocks(
            Level::active(),
            &tally.blocks[chunk.clone()],
            &run.nz,
            (lo, up),
            last,
            &mut |b, mut mask, common| {
                let p0 = start + (chunk.start + b - first) * LANE;
                while mask != 0 {
                    let j = mask.trailing_zeros() as usize;
                    mask &= mask - 1;
                    let slot = ((longer - u32::from(common[j]) - from) as usize).min(BUCKETS - 1);
                    buckets[slot].push((p0 + j) as u32);
                }
            },
        );
    } else {
        let gap = gap as u32;
        for b in chunk {
            let p0 = start + (b - first) * LANE;
            for l in 0..(end - p0).min(LANE) {
                let bound = bound_of(lane_sad(&tally.blocks[b], l, &run.counts), gap, false);
                if bound >= from && bound <= hi {
                    let slot = ((bound - from) as usize).min(BUCKETS - 1);
                    run.buckets[slot].push((p0 + l) as u32);
                }
            }
        }
    }
}

/// What a block's items share with a query: the block's number in the slice, the mask of
/// its items within the range, and every item's chars in common.
type Hit<'h> = &'h mut dyn FnMut(usize, u64, &[u8; LANE]);

/// For each block of `blocks`, the chars each item has in common with a query,
/// `Σ min(A, B)` over the query's bins `nz` (bin, count), and the mask of the items whose
/// sum lies in `range` (bit `l`: item `l`; in the last block only the items of `last`):
/// `hit` gets every block with one at least. Sums of unsaturated counts are at most 255.
/// At dispatch level `level`, lowered to what the CPU runs.
fn in_common_blocks(
    level: Level,
    blocks: &[Columns],
    nz: &[(u8, u8)],
    range: (u8, u8),
    last: u64,
    hit: Hit<'_>,
) {
    #[cfg(target_arch = "x86_64")]
    {
        let level = level.clamped();
        if level >= Level::Avx512 {
            // SAFETY: the CPU has AVX-512 F and BW (the level is clamped to the CPU's).
            return unsafe { in_common_avx512(blocks, nz, range, last, hit) };
        }
        if level >= Level::Avx2 {
            // SAFETY: the CPU has AVX2.
            return unsafe { in_common_avx2(blocks, nz, range, last, hit) };
        }
    }
    let _ = level;
    in_common_portable(blocks, nz, range, last, hit)
}

/// The mask of valid items of block `b` of `n`: all but in the last.
#[inline(always)]
fn valid(b: usize, n: usize, last: u64) -> u64 {
    if b + 1 == n {
        last
    } else {
        u64::MAX
    }
}

/// [`in_common_blocks`] in plain Rust.
fn in_common_portable(
    blocks: &[Columns],
    nz: &[(u8, u8)],
    (lo, up): (u8, u8),
    last: u64,
    hit: Hit<'_>,
) {
    for (b, cols) in blocks.iter().enumerate() {
        let mut common = [0u8; LANE];
        for &(j, a) in nz {
            for (s, &c) in common.iter_mut().zip(&cols[usize::from(j)]) {
                *s = s.wrapping_add(c.min(a));
            }
        }
        let mut mask = 0u64;
        for (l, &s) in common.iter().enumerate() {
            mask |= u64::from(s >= lo && s <= up) << l;
        }
        mask &= valid(b, blocks.len(), last);
        if mask != 0 {
            hit(b, mask, &common);
        }
    }
}

/// [`in_common_blocks`] with AVX2: two registers of 32 items, a `vpminub` and a `vpaddb`
/// per bin, four blocks a step. Hand-written, as the crate's other kernels: no crate offers it.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn in_common_avx2(
    blocks: &[Columns],
    nz: &[(u8, u8)],
    (lo, up): (u8, u8),
    last: u64,
    hit: Hit<'_>,
) {
    use std::arch::x86_64::{
        __m256i, _mm256_add_epi8, _mm256_and_si256, _mm256_cmpeq_epi8, _mm256_loadu_si256,
        _mm256_max_epu8, _mm256_min_epu8, _mm256_movemask_epi8, _mm256_set1_epi8,
        _mm256_setzero_si256, _mm256_storeu_si256,
    };
    let (lo, up) = (_mm256_set1_epi8(lo as i8), _mm256_set1_epi8(up as i8));
    // Within [lo, up] (unsigned): the larger with lo and the smaller with up leave it as is.
    let within = |v: __m256i| {
        let ok = _mm256_and_si256(
            _mm256_cmpeq_epi8(_mm256_max_epu8(v, lo), v),
            _mm256_cmpeq_epi8(_mm256_min_epu8(v, up), v),
        );
        u64::from(_mm256_movemask_epi8(ok) as u32)
    };
    let mut common = [0u8; LANE];
    let n = blocks.len();
    let mut report = |b: usize, x: __m256i, y: __m256i| {
        let mask = (within(x) | within(y) << 32) & valid(b, n, last);
        if mask != 0 {
            let out = common.as_mut_ptr().cast::<__m256i>();
            _mm256_storeu_si256(out, x);
            _mm256_storeu_si256(out.add(1), y);
            hit(b, mask, &common);
        }
    };
    // Four blocks a step (eight registers), each bin's count broadcast once for the four.
    const STEP: usize = 4;
    let mut at = 0;
    while at + STEP <= n {
        let mut x = [_mm256_setzero_si256(); 2 * STEP];
        for &(j, a) in nz {
            let a = _mm256_set1_epi8(a as i8);
            for (t, x) in x.chunks_exact_mut(2).enumerate() {
                let col = blocks[at + t][usize::from(j) % BINS]
                    .as_ptr()
                    .cast::<__m256i>();
                x[0] = _mm256_add_epi8(x[0], _mm256_min_epu8(_mm256_loadu_si256(col), a));
                x[1] = _mm256_add_epi8(x[1], _mm256_min_epu8(_mm256_loadu_si256(col.add(1)), a));
            }
        }
        for t in 0..STEP {
            report(at + t, x[2 * t], x[2 * t + 1]);
        }
        at += STEP;
    }
    for (b, cols) in blocks.iter().enumerate().skip(at) {
        let (mut x, mut y) = (_mm256_setzero_si256(), _mm256_setzero_si256());
        for &(j, a) in nz {
            let col = cols[usize::from(j) % BINS].as_ptr().cast::<__m256i>();
            let a = _mm256_set1_epi8(a as i8);
            x = _mm256_add_epi8(x, _mm256_min_epu8(_mm256_loadu_si256(col), a));
            y = _mm256_add_epi8(y, _mm256_min_epu8(_mm256_loadu_si256(col.add(1)), a));
        }
        report(b, x, y);
    }
}

/// [`in_common_blocks`] with AVX-512 BW: one register of 64 items, compared into a mask
/// directly, eight blocks a step.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx512bw")]
unsafe fn in_common_avx512(
    blocks: &[Columns],
    nz: &[(u8, u8)],
    (lo, up): (u8, u8),
    last: u64,
    hit: Hit<'_>,
) {
    use std::arch::x86_64::{
        __m512i, _mm512_add_epi8, _mm512_cmpge_epu8_mask, _mm512_cmple_epu8_mask,
        _mm512_loadu_si512, _mm512_min_epu8, _mm512_set1_epi8, _mm512_setzero_si512,
        _mm512_storeu_si512,
    };
    let (lo, up) = (_mm512_set1_epi8(lo as i8), _mm512_set1_epi8(up as i8));
    let mut common = [0u8; LANE];
    let n = blocks.len();
    let mut report = |b: usize, x: __m512i| {
        let mask =
            _mm512_cmpge_epu8_mask(x, lo) & _mm512_cmple_epu8_mask(x, up) & valid(b, n, last);
        if mask != 0 {
            _mm512_storeu_si512(common.as_mut_ptr().cast::<__m512i>(), x);
            hit(b, mask, &common);
        }
    };
    // Eight blocks a step, each bin's count broadcast once for the eight.
    const STEP: usize = 8;
    let mut at = 0;
    while at + STEP <= n {
        let mut x = [_mm512_setzero_si512(); STEP];
        for &(j, a) in nz {
            let a = _mm512_set1_epi8(a as i8);
            for (t, x) in x.iter_mut().enumerate() {
                let col = blocks[at + t][usize::from(j) % BINS]
                    .as_ptr()
                    .cast::<__m512i>();
                *x = _mm512_add_epi8(*x, _mm512_min_epu8(_mm512_loadu_si512(col), a));
            }
        }
        for (t, &x) in x.iter().enumerate() {
            report(at + t, x);
        }
        at += STEP;
    }
    for (b, cols) in blocks.iter().enumerate().skip(at) {
        let mut x = _mm512_setzero_si512();
        for &(j, a) in nz {
            let col = cols[usize::from(j) % BINS].as_ptr().cast::<__m512i>();
            x = _mm512_add_epi8(
                x,
                _mm512_min_epu8(_mm512_loadu_si512(col), _mm512_set1_epi8(a as i8)),
            );
        }
        report(b, x);
    }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    proptest! {
        /// Every dispatch level the CPU runs gives the portable form's common chars and
        /// masks, for up to twenty blocks (the vector forms take four or eight a step, then
        /// one at a time) of any small counts and a part-full last block, and the portable
        /// form sums `min` bin by bin.
        #[test]
        fn every_level_counts_the_same_common_chars(
            cols in proptest::collection::vec(proptest::array::uniform32(0u8..=8), 1..=20 * LANE),
            q in proptest::array::uniform32(0u8..=9),
            lo in 0u8..=255,
            up in 0u8..=255,
        ) {
            let mut blocks = vec![[[0u8; LANE]; BINS]; cols.len().div_ceil(LANE)];
            for (i, row) in cols.iter().enumerate() {
                for j in 0..BINS {
                    blocks[i / LANE][j][i % LANE] = row[j];
                }
            }
            let n = cols.len() - (blocks.len() - 1) * LANE;
            let last = if n == LANE { u64::MAX } else { (1u64 << n) - 1 };
            let nz: Vec<(u8, u8)> =
                (0..BINS).filter(|&j| q[j] > 0).map(|j| (j as u8, q[j])).collect();
            let run = |level: Level| {
                let mut seen = Vec::new();
                in_common_blocks(level, &blocks, &nz, (lo, up), last, &mut |b, mask, c| {
                    seen.push((b, mask, *c));
                });
                seen
            };
            let want = run(Level::Portable);
            let mut at = 0;
            for (i, row) in cols.iter().enumerate() {
                let s: u32 = (0..BINS).map(|j| u32::from(row[j].min(q[j]))).sum();
                if s >= u32::from(lo) && s <= u32::from(up) {
                    // Item i is reported, with its sum, in its block's hit.
                    while want[at].0 < i / LANE {
                        at += 1;
                    }
                    prop_assert_eq!(want[at].0, i / LANE);
                    prop_assert!(want[at].1 >> (i % LANE) & 1 == 1);
                    prop_assert_eq!(u32::from(want[at].2[i % LANE]), s);
                } else {
                    prop_assert!(want.iter().all(|h| h.0 != i / LANE || h.1 >> (i % LANE) & 1 == 0));
                }
            }
            for level in Level::ALL.into_iter().filter(|l| l.available()) {
                let got = run(level);
                prop_assert_eq!(got.len(), want.len(), "{:?}", level);
                for (g, w) in got.iter().zip(&want) {
                    prop_assert_eq!((g.0, g.1), (w.0, w.1), "{:?}", level);
                    // The sums of the items reported agree.
                    for l in 0..LANE {
                        if w.1 >> l & 1 == 1 {
                            prop_assert_eq!(g.2[l], w.2[l], "{:?}", level);
                        }
                    }
                }
            }
        }

        /// The count bound never exceeds the Levenshtein distance of strsim (a reference
        /// crate), with bins fitted to other strings and chars outside ASCII, and it is the
        /// longer length less the chars in common.
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
            let mut block = [[0u8; LANE]; BINS];
            for j in 0..BINS {
                block[j][5] = ca[j];
            }
            let sad = lane_sad(&block, 5, &cb);
            let bound = bound_of(sad, gap, true);
            prop_assert!(bound as usize <= strsim::levenshtein(&a, &b), "{a:?} {b:?}");
            prop_assert!(bound_of(sad, gap, false) <= bound);
            // The closed form is the longer length less the chars in common.
            let common: u32 = (0..BINS).map(|j| u32::from(ca[j].min(cb[j]))).sum();
            prop_assert_eq!(bound, la.max(lb) as u32 - common);
        }
    }
}
