//! Brute force under any metric: every item measured, for the ground truth of metrics that
//! have no dedicated scan.

use crate::index::Index;
use crate::metric::{MetricKind, PreparedQuery};
use crate::search::order::{keep_best, Neighbor};

/// Items per batch of [`PreparedQuery::distances`] (one request to an external program).
const BATCH: usize = 4096;

/// Exact k nearest neighbours of `query` by measuring every item: [`super::full_scan`] for
/// Levenshtein, batched distances of the index's metric otherwise. A query the metric cannot
/// take (see [`crate::search::Searcher::prepare`]) has no neighbours.
///
/// ```no_run
/// use waymark::eval::brute_force;
/// use waymark::index::Index;
///
/// let index = Index::open("buoys.wmk".as_ref())?;
/// let truth = brute_force(&index, "0.5,1.25,3,0.75", 5);
/// # Ok::<(), waymark::Error>(())
/// ```
pub fn brute_force(index: &Index, query: &str, k: usize) -> Vec<Neighbor> {
    if index.meta().metric == MetricKind::Levenshtein {
        return super::full_scan(index, query, k);
    }
    let Ok(q) = index.prepare_query(query) else {
        return Vec::new();
    };
    let keys = index.keys();
    let n = index.len();
    let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
    let mut items: Vec<&[u8]> = Vec::with_capacity(BATCH);
    let mut d = vec![0.0; BATCH];
    for start in (0..n).step_by(BATCH) {
        let end = (start + BATCH).min(n);
        items.clear();
        items.extend((start..end).map(|i| keys.get(i)));
        let out = &mut d[..items.len()];
        q.distances(&items, out);
        for (j, &distance) in out.iter().enumerate() {
            keep_best(
                index,
                &mut best,
                k,
                Neighbor {
                    index: (start + j) as u32,
                    distance,
                },
            );
        }
    }
    best
}
