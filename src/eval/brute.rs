//! Brute force under any metric: every item measured, for the ground truth of metrics that
//! have no dedicated scan.

use std::num::NonZeroUsize;

use crate::error::Result;
use crate::index::Index;
use crate::metric::{MetricKind, PreparedQuery};
use crate::search::order::{keep_best, Neighbor};

/// Items per batch of [`PreparedQuery::distances`] (one request to an external program).
const BATCH: usize = 4096;

/// Exact k nearest neighbours of `query` by measuring every item: [`super::full_scan`] for
/// Levenshtein, batched distances of the index's metric otherwise. A query the metric cannot
/// take (see [`crate::search::Searcher::prepare`]) has no neighbours. Refuses `k = 0` with
/// [`crate::Error::Usage`].
///
/// ```no_run
/// use waymark::eval::brute_force;
/// use waymark::index::Index;
///
/// let index = Index::open("buoys.wmk".as_ref())?;
/// let truth = brute_force(&index, "0.5,1.25,3,0.75", 5)?;
/// # Ok::<(), waymark::Error>(())
/// ```
pub fn brute_force(index: &Index, query: &str, k: usize) -> Result<Vec<Neighbor>> {
    Ok(brute_force_k(index, query, super::scan::at_least_one(k)?))
}

/// [`brute_force`] for a `k` known to be at least 1.
pub(super) fn brute_force_k(index: &Index, query: &str, k: NonZeroUsize) -> Vec<Neighbor> {
    if index.meta().metric == MetricKind::Levenshtein {
        return super::scan::full_scan_k(index, query, k);
    }
    // No more answers than items: a k above n means every item, never an allocation of k.
    let k = k.get().min(index.len().max(1));
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::index::{build_index, BuildOptions};
    use crate::ingest::{read_corpus_from, IngestOptions};
    use crate::metric::MetricSpec;

    #[test]
    fn brute_force_refuses_k_zero_under_every_metric() {
        let corpus = read_corpus_from(
            "Keth Landing\nKteh Landing\nHolbre Quay\n".as_bytes(),
            "test",
            &IngestOptions::default(),
        )
        .expect("corpus");
        let dir = tempfile::tempdir().unwrap();
        for (file, metric) in [
            ("lev.wmk", MetricSpec::Levenshtein),
            ("dam.wmk", MetricSpec::Damerau),
        ] {
            let dest = dir.path().join(file);
            let opts = BuildOptions {
                metric,
                dim: 2,
                ..BuildOptions::default()
            };
            build_index(&corpus, "test", &opts, &dest, &|_| {}).expect("build");
            let index = Index::open(&dest).expect("open");
            match brute_force(&index, "Keth Landing", 0) {
                Err(e @ crate::Error::InvalidParameter { .. }) => {
                    assert_eq!(e.to_string(), "k must be at least 1")
                }
                other => panic!("{file}: expected a usage error, got {other:?}"),
            }
            let two = brute_force(&index, "Keth Landing", 2).unwrap();
            assert_eq!(two.len(), 2);
            assert_eq!((two[0].index, two[0].distance), (0, 0.0));
        }
    }
}
