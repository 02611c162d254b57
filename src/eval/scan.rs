//! Brute-force k-NN: the ground truth and the baseline every index is measured against.

use rayon::prelude::*;

use crate::index::Index;
use crate::search::{keep_best, prepare_query, Neighbor};

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
