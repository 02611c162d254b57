//! The brute force of many Levenshtein queries at once, one query per vector lane
//! ([`LevenshteinLanes`]): each group of queries streams the items once. It answers `eval`'s
//! ground truth ([`scan`]) and, for large batches of exact k-NN queries whose char counts
//! rule out too few items for the char-count bound to pay ([`super::tally`]),
//! [`super::Searcher::answer_many`] through [`scan_by_length`], which reads only the items
//! whose length in chars can still bring an answer.

use std::num::NonZeroUsize;

use rayon::prelude::*;

use super::order::{keep_best, Neighbor};
use crate::index::Index;
use crate::metric::{LevenshteinLanes, LevenshteinQuery};

/// Fewest items per block of [`scan`]: enough to amortise a group's table.
const LANE_BLOCK: usize = 8192;

/// The `k` nearest items of every query of a Levenshtein index, in input order, by brute
/// force with the queries in vector lanes ([`LevenshteinLanes`], made by `lanes`): each group
/// of them streams each block of `block` items once, the (group, block) tasks on all cores.
///
/// `block: None` splits the items only when the groups are too few for the cores: tasks are
/// whole groups when there are enough of them; with few groups, each is split into item
/// blocks (at least [`LANE_BLOCK`] items), about four tasks per core in all. Each block keeps
/// up to `k` answers per query until the merge, so the answers held stay within a few times
/// `queries × k`.
///
/// Returns the answers and the queries no lane takes (the empty query, over 64 chars),
/// whose answers are left empty for the caller. Each lane keeps its best with [`keep_best`],
/// whose order is total, so the answers equal a scan of each query alone whatever the
/// split. `progress` is told of each group's queries as the group finishes.
pub(crate) fn scan(
    index: &Index,
    queries: &[String],
    k: NonZeroUsize,
    lanes: impl Fn(&[&[u8]]) -> LevenshteinLanes,
    block: Option<usize>,
    progress: &(dyn Fn(usize) + Sync),
) -> (Vec<Vec<Neighbor>>, Vec<usize>) {
    // No more answers than items: a k above n means every item, never an allocation of k.
    let k = k.get().min(index.len().max(1));
    let normalize = &index.meta().normalize;
    let keys: Vec<String> = queries
        .iter()
        .map(|q| normalize.apply(q).into_owned())
        .collect();
    let bytes: Vec<&[u8]> = keys.iter().map(|q| q.as_bytes()).collect();
    let lanes = lanes(&bytes);
    let items = index.keys();
    let n = index.len();
    let block_len = match block {
        Some(b) => b.max(1),
        None => {
            // About four tasks per core, whole groups when there are enough of them.
            let want = (4 * rayon::current_num_threads()).div_ceil(lanes.groups().max(1));
            n.div_ceil(want.min(n.div_ceil(LANE_BLOCK)).max(1)).max(1)
        }
    };
    let blocks = n.div_ceil(block_len).max(1);
    let tasks: Vec<(usize, usize)> = (0..lanes.groups())
        .flat_map(|g| (0..blocks).map(move |b| (g, b)))
        .collect();
    // Blocks finished per group: a group's queries are done with its last block.
    let done: Vec<std::sync::atomic::AtomicUsize> = (0..lanes.groups())
        .map(|_| std::sync::atomic::AtomicUsize::new(0))
        .collect();
    let found: Vec<(usize, Vec<Vec<Neighbor>>)> = tasks
        .into_par_iter()
        .map(|(g, b)| {
            let members = lanes.members(g);
            let mut best: Vec<Vec<Neighbor>> = vec![Vec::with_capacity(k + 1); members.len()];
            let mut bounds = vec![u32::MAX; members.len()];
            let block = (b * block_len).min(n)..((b + 1) * block_len).min(n);
            let stream = block.map(|i| (i as u32, items.get(i)));
            lanes.scan_group(g, stream, &mut bounds, |lane, i, d| {
                let best = &mut best[lane];
                keep_best(
                    index,
                    best,
                    k,
                    Neighbor {
                        index: i,
                        distance: f64::from(d),
                    },
                );
                if best.len() == k {
                    best[k - 1].distance as u32
                } else {
                    u32::MAX
                }
            });
            let finished = done[g].fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
            if finished == blocks {
                progress(members.len());
            }
            (g, best)
        })
        .collect();
    let mut answers: Vec<Vec<Neighbor>> = vec![Vec::new(); queries.len()];
    for (g, best) in found {
        for (&q, found) in lanes.members(g).iter().zip(best) {
            for cand in found {
                keep_best(index, &mut answers[q], k, cand);
            }
        }
    }
    (answers, lanes.rest().to_vec())
}

/// The items of an index grouped by their length in chars, for [`scan_by_length`]: the item
/// numbers of each length in increasing order, lengths one after the other.
struct ByLength {
    items: Vec<u32>,
    /// `starts[len]..starts[len + 1]` are the positions in `items` of the items of `len`
    /// chars.
    starts: Vec<usize>,
}

impl ByLength {
    fn new(index: &Index) -> Self {
        let keys = index.keys();
        let n = index.len();
        let lens: Vec<u32> = (0..n)
            .map(|i| u32::try_from(LevenshteinQuery::item_len(keys.get(i))).unwrap_or(u32::MAX))
            .collect();
        let longest = lens.iter().copied().max().unwrap_or(0) as usize;
        let mut starts = vec![0usize; longest + 2];
        for &l in &lens {
            starts[l as usize + 1] += 1;
        }
        for j in 1..starts.len() {
            starts[j] += starts[j - 1];
        }
        let mut next = starts.clone();
        let mut items = vec![0u32; n];
        for (i, &l) in lens.iter().enumerate() {
            items[next[l as usize]] = i as u32;
            next[l as usize] += 1;
        }
        ByLength { items, starts }
    }

    /// The longest length held.
    fn longest(&self) -> usize {
        self.starts.len() - 2
    }

    /// The item numbers of `len` chars, in increasing order.
    fn of(&self, len: usize) -> &[u32] {
        match (self.starts.get(len), self.starts.get(len + 1)) {
            (Some(&a), Some(&b)) => &self.items[a..b],
            _ => &[],
        }
    }
}

/// Exact k-NN of every query of a Levenshtein index, as [`scan`] gives it, measuring only
/// the items whose length can still bring an answer.
///
/// The queries go into groups by their length in chars (sorted first, so a group holds
/// queries of one or a few lengths, `lo ..= hi`), and each group reads the items by length:
/// `lo ..= hi` first, then the lengths `lo − g` and `hi + g` for g = 1, 2, … while some
/// lane's bound (its k-th distance, or none while it holds fewer than `k`) is at least `g`.
/// The distance is at least the difference of the lengths, so an item left out is farther
/// than every lane's k-th distance and could not enter an answer, tie or not: the answers
/// equal [`scan`]'s. Tasks are whole groups.
///
/// A filter ahead of the kernel (an item measured only if some lane's larger of the length
/// difference and the char-signature gap is within its bound) left 63% of the items instead
/// of 78% on 1,000 typo queries at 663,473 words and cost more CPU time than it saved.
///
/// Returns the answers in input order, the items measured for each query (those its group
/// read) and the queries no lane takes (the empty query, over 64 chars).
pub(crate) fn scan_by_length(
    index: &Index,
    queries: &[String],
    k: NonZeroUsize,
    lanes: impl Fn(&[&[u8]]) -> LevenshteinLanes,
) -> (Vec<Vec<Neighbor>>, Vec<usize>, Vec<usize>) {
    let k = k.get().min(index.len().max(1));
    let normalize = &index.meta().normalize;
    let keys: Vec<String> = queries
        .iter()
        .map(|q| normalize.apply(q).into_owned())
        .collect();
    let lens: Vec<usize> = keys
        .iter()
        .map(|q| LevenshteinQuery::item_len(q.as_bytes()))
        .collect();
    // Sorted position → input position.
    let mut order: Vec<usize> = (0..queries.len()).collect();
    order.sort_by_key(|&q| lens[q]);
    let bytes: Vec<&[u8]> = order.iter().map(|&q| keys[q].as_bytes()).collect();
    let lanes = lanes(&bytes);
    let by_len = ByLength::new(index);
    let items = index.keys();
    let found: Vec<(usize, Vec<Vec<Neighbor>>, usize)> = (0..lanes.groups())
        .into_par_iter()
        .map(|g| {
            let members = lanes.members(g);
            let mut best: Vec<Vec<Neighbor>> = vec![Vec::with_capacity(k + 1); members.len()];
            let mut bounds = vec![u32::MAX; members.len()];
            let mut measured = 0;
            let mut read = |len: usize, bounds: &mut [u32], best: &mut [Vec<Neighbor>]| {
                let these = by_len.of(len);
                measured += these.len();
                let stream = these.iter().map(|&i| (i, items.get(i as usize)));
                lanes.scan_group(g, stream, bounds, |lane, i, d| {
                    let best = &mut best[lane];
                    keep_best(
                        index,
                        best,
                        k,
                        Neighbor {
                            index: i,
                            distance: f64::from(d),
                        },
                    );
                    if best.len() == k {
                        best[k - 1].distance as u32
                    } else {
                        u32::MAX
                    }
                });
            };
            let lo = members.iter().map(|&q| lens[order[q]]).min().unwrap_or(0);
            let hi = members.iter().map(|&q| lens[order[q]]).max().unwrap_or(0);
            for len in lo..=hi {
                read(len, &mut bounds, &mut best);
            }
            let longest = by_len.longest();
            for gap in 1usize.. {
                let reach = bounds.iter().copied().max().unwrap_or(0);
                let below = lo.checked_sub(gap);
                let above = hi.saturating_add(gap);
                if u32::try_from(gap).map_or(true, |g| g > reach)
                    || (below.is_none() && above > longest)
                {
                    break;
                }
                if let Some(len) = below {
                    read(len, &mut bounds, &mut best);
                }
                if above <= longest {
                    read(above, &mut bounds, &mut best);
                }
            }
            (g, best, measured)
        })
        .collect();
    let mut answers: Vec<Vec<Neighbor>> = vec![Vec::new(); queries.len()];
    let mut measured = vec![0usize; queries.len()];
    for (g, best, m) in found {
        for (&q, found) in lanes.members(g).iter().zip(best) {
            answers[order[q]] = found;
            measured[order[q]] = m;
        }
    }
    let rest = lanes.rest().iter().map(|&q| order[q]).collect();
    (answers, measured, rest)
}
