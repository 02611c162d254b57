//! Brute-force k-NN: the ground truth and the baseline every index is measured against.

use rayon::prelude::*;

use crate::index::Index;
use crate::metric::{Levenshtein, LevenshteinQuery, Metric};
use crate::search::order::{keep_best, Neighbor};

/// Exact k-NN with the unbounded kernel against every item (several items per kernel call).
pub fn full_scan(index: &Index, query: &str, k: usize) -> Vec<Neighbor> {
    let q = prepare_query(index, query);
    let keys = index.keys();
    let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
    q.dist_each((0..index.len()).map(|i| keys.get(i)), |i, d| {
        let kth = if best.len() == k {
            best[k - 1].distance
        } else {
            f64::INFINITY
        };
        if f64::from(d) <= kth {
            keep_best(
                index,
                &mut best,
                k,
                Neighbor {
                    index: i as u32,
                    distance: f64::from(d),
                },
            );
        }
    });
    best
}

/// Exact k-NN with a running k-th distance: items whose length alone rules them out are
/// skipped without reading their bytes, the rest go to the batched kernel.
///
/// The Levenshtein distance is at least the difference of the lengths in chars. Lengths come
/// from the item offsets, in bytes: an item of `b` bytes has at most `b` chars, and at least
/// `⌈b / 4⌉` (UTF-8 takes at most four bytes per char, and each invalid sequence is one char
/// of at least one byte), or exactly `b` when every item is ASCII, which is checked once per
/// scan. Answers are those of [`full_scan`]: the same items, distances and order.
pub fn best_scan(index: &Index, query: &str, k: usize) -> Vec<Neighbor> {
    best_scan_with(index, query, k, all_ascii(index))
}

/// Whether every key of `index` is ASCII (then byte lengths are char lengths).
fn all_ascii(index: &Index) -> bool {
    let keys = index.keys();
    (0..index.len()).all(|i| keys.get(i).is_ascii())
}

/// [`best_scan`], told whether every key is ASCII.
fn best_scan_with(index: &Index, query: &str, k: usize, ascii: bool) -> Vec<Neighbor> {
    /// Items per call of the batched kernel.
    const GROUP: usize = 64;
    let q = prepare_query(index, query);
    let m = q.len();
    let keys = index.keys();
    let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
    if k == 0 {
        return best;
    }
    let mut at = [0u32; GROUP];
    let mut items: [&[u8]; GROUP] = [&[]; GROUP];
    let mut queued = 0;
    // The k-th distance so far (u32::MAX while fewer than k are known).
    let mut bound = u32::MAX;
    let mut out = [0u32; GROUP];
    let mut flush = |at: &[u32], items: &[&[u8]], best: &mut Vec<Neighbor>, bound: &mut u32| {
        let out = &mut out[..items.len()];
        q.dist_batch(items, out);
        for (&i, &d) in at.iter().zip(out.iter()) {
            if d <= *bound {
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
                    *bound = best[k - 1].distance as u32;
                }
            }
        }
    };
    for i in 0..index.len() {
        let item = keys.get(i);
        let bytes = item.len();
        let b = bound as usize;
        // Fewest and most chars the item can have.
        let (fewest, most) = if ascii {
            (bytes, bytes)
        } else {
            (bytes.div_ceil(4), bytes)
        };
        if most.saturating_add(b) < m || fewest > m.saturating_add(b) {
            continue;
        }
        at[queued] = i as u32;
        items[queued] = item;
        queued += 1;
        if queued == GROUP {
            flush(&at, &items, &mut best, &mut bound);
            queued = 0;
        }
    }
    flush(&at[..queued], &items[..queued], &mut best, &mut bound);
    best
}

/// Which brute force to run.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Scan {
    /// [`full_scan`].
    Full,
    /// [`best_scan`].
    Best,
}

/// Runs a brute force for many queries on all cores, answers in input order.
pub fn scan_many(index: &Index, queries: &[String], k: usize, scan: Scan) -> Vec<Vec<Neighbor>> {
    if index.meta().metric != crate::metric::MetricKind::Levenshtein {
        // No dedicated scans for the other metrics: both are the plain brute force.
        return queries
            .par_iter()
            .map(|q| super::brute_force(index, q, k))
            .collect();
    }
    let ascii = scan == Scan::Best && all_ascii(index);
    queries
        .par_iter()
        .map(|q| match scan {
            Scan::Full => full_scan(index, q, k),
            Scan::Best => best_scan_with(index, q, k, ascii),
        })
        .collect()
}

/// Prepares `query` for the Levenshtein kernel, normalised as the index's items were.
fn prepare_query(index: &Index, query: &str) -> LevenshteinQuery {
    let key = index.meta().normalize.apply(query);
    Levenshtein.prepare(key.as_bytes())
}
