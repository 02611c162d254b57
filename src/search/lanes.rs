//! The brute force of many Levenshtein queries at once, one query per vector lane
//! ([`LevenshteinLanes`]): each group of queries streams the items once. It answers `eval`'s
//! ground truth ([`scan`]). Exact queries go through the char-count bound instead
//! ([`super::tally`]), which measures a few thousand items per query where the lanes
//! measure most of them.

use std::num::NonZeroUsize;

use rayon::prelude::*;

use super::order::{keep_best, Neighbor};
use crate::index::Index;
use crate::metric::LevenshteinLanes;

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
