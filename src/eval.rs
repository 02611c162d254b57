//! Ground truth by brute force, and recall against it.
//!
//! Two scans compute exact answers: [`full_scan`] is what a user without an index would run
//! (the unbounded kernel against every item), [`best_scan`] keeps a running k-th distance and
//! gives it to the bounded kernel, which skips most items after a length check. Both run on
//! all cores when called through [`scan_many`].
//!
//! Recall follows the common convention for approximate k-NN: a returned item counts when
//! its true distance is at most the true k-th distance plus ε = 1e-3, so that ties do not
//! punish a correct answer (threshold recall); plain recall counts the returned ids that are
//! among the true k ids.
//!
//! ```
//! use waymark::eval::threshold_recall;
//!
//! // True 2-NN distances [1, 2]; an answer at distances [1, 2] via another item with
//! // distance 2 is still fully correct under threshold recall.
//! assert_eq!(threshold_recall(&[1.0, 2.0], &[(7, 1.0), (9, 2.0)], 2), 1.0);
//! ```

use rayon::prelude::*;

use crate::index::Index;
use crate::search::{keep_best, prepare_query, Neighbor};

/// Tolerance of threshold recall.
pub const RECALL_EPSILON: f64 = 1e-3;

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

/// Exact k-NN with the bounded kernel and a running k-th distance.
pub fn best_scan(index: &Index, query: &str, k: usize) -> Vec<Neighbor> {
    let q = prepare_query(index, query);
    let keys = index.keys();
    let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
    for i in 0..index.len() {
        let item = keys.get(i);
        let d = if best.len() == k {
            match q.dist_within(item, best[k - 1].distance as u32) {
                Some(d) => d,
                None => continue,
            }
        } else {
            q.dist(item)
        };
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
    queries
        .par_iter()
        .map(|q| match scan {
            Scan::Full => full_scan(index, q, k),
            Scan::Best => best_scan(index, q, k),
        })
        .collect()
}

/// Threshold recall@k of one answer: `truth` holds the true k smallest distances (sorted),
/// `found` the returned (item, distance) pairs. Duplicated items count once.
pub fn threshold_recall(truth: &[f64], found: &[(u32, f64)], k: usize) -> f64 {
    if k == 0 || truth.is_empty() {
        return 1.0;
    }
    let kth = truth[truth.len().min(k) - 1];
    let mut seen = std::collections::HashSet::new();
    let good = found
        .iter()
        .filter(|(i, d)| seen.insert(*i) && *d <= kth + RECALL_EPSILON)
        .count();
    good.min(k) as f64 / truth.len().min(k) as f64
}

/// Plain recall@k: the share of the true k items that were returned.
pub fn plain_recall(truth: &[u32], found: &[u32]) -> f64 {
    if truth.is_empty() {
        return 1.0;
    }
    let t: std::collections::HashSet<_> = truth.iter().collect();
    let f: std::collections::HashSet<_> = found.iter().collect();
    t.intersection(&f).count() as f64 / t.len() as f64
}

/// Typo queries: `count` items drawn at random, each with 1 to 3 random edits (insertion,
/// deletion, substitution or transposition of adjacent characters, with letters taken from
/// the item itself or a–z). Deterministic for a seed.
pub fn typo_queries<T: AsRef<str>>(items: &[T], count: usize, seed: u64) -> Vec<String> {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let alphabet: Vec<char> = ('a'..='z').collect();
    (0..count)
        .map(|_| {
            let mut w: Vec<char> = items[rng.gen_range(0..items.len())]
                .as_ref()
                .chars()
                .collect();
            let edits = rng.gen_range(1..=3);
            for _ in 0..edits {
                let pick = |rng: &mut rand_chacha::ChaCha8Rng, w: &[char]| {
                    if !w.is_empty() && rng.gen_bool(0.5) {
                        w[rng.gen_range(0..w.len())]
                    } else {
                        alphabet[rng.gen_range(0..alphabet.len())]
                    }
                };
                match rng.gen_range(0..4) {
                    0 => {
                        let c = pick(&mut rng, &w);
                        let at = rng.gen_range(0..=w.len());
                        w.insert(at, c);
                    }
                    1 if w.len() > 1 => {
                        let at = rng.gen_range(0..w.len());
                        w.remove(at);
                    }
                    2 if !w.is_empty() => {
                        let c = pick(&mut rng, &w);
                        let at = rng.gen_range(0..w.len());
                        w[at] = c;
                    }
                    _ if w.len() > 1 => {
                        let at = rng.gen_range(0..w.len() - 1);
                        w.swap(at, at + 1);
                    }
                    _ => {
                        let c = pick(&mut rng, &w);
                        w.push(c);
                    }
                }
            }
            w.into_iter().collect()
        })
        .collect()
}
