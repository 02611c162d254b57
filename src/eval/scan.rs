//! Brute-force k-NN: the ground truth and the baseline every index is measured against.

use std::num::NonZeroUsize;

use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::index::Index;
use crate::metric::{Levenshtein, LevenshteinLanes, LevenshteinQuery, Metric, MetricKind};
use crate::search::order::{keep_best, Neighbor};

/// `k` as a count of at least one neighbour, or the error that refuses `k = 0`.
pub(super) fn at_least_one(k: usize) -> Result<NonZeroUsize> {
    NonZeroUsize::new(k)
        .ok_or_else(|| Error::parameter(crate::error::Param::K, "must be at least 1"))
}

/// Refuses what the Levenshtein scans cannot answer: `k = 0`, and an index of another metric
/// (they compute Levenshtein distances whatever the index's metric; [`super::brute_force`]
/// and [`scan_many`] measure with the index's own).
fn levenshtein_k(index: &Index, k: usize, scan: &str) -> Result<NonZeroUsize> {
    let metric = index.meta().metric;
    if metric != MetricKind::Levenshtein {
        return Err(Error::Usage(format!(
            "{}: {scan} computes Levenshtein distances, but the index's metric is {metric}; \
             use brute_force, which measures with the index's metric",
            index.path().display()
        )));
    }
    at_least_one(k)
}

/// Exact k-NN with the unbounded kernel against every item (several items per kernel call).
///
/// Refuses `k = 0` and an index whose metric is not Levenshtein (see
/// [`super::brute_force`] for the others), with [`Error::Usage`].
pub fn full_scan(index: &Index, query: &str, k: usize) -> Result<Vec<Neighbor>> {
    let k = levenshtein_k(index, k, "full_scan")?;
    Ok(full_scan_k(index, query, k))
}

/// [`full_scan`] of a Levenshtein index.
pub(super) fn full_scan_k(index: &Index, query: &str, k: NonZeroUsize) -> Vec<Neighbor> {
    // No more answers than items: a k above n means every item, never an allocation of k.
    let k = k.get().min(index.len().max(1));
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
/// scan. Answers are those of [`full_scan`]: the same items, distances and order, and the
/// same refusals (`k = 0`, another metric than Levenshtein).
pub fn best_scan(index: &Index, query: &str, k: usize) -> Result<Vec<Neighbor>> {
    let k = levenshtein_k(index, k, "best_scan")?;
    Ok(best_scan_with(index, query, k, all_ascii(index)))
}

/// Whether every key of `index` is ASCII (then byte lengths are char lengths).
fn all_ascii(index: &Index) -> bool {
    let keys = index.keys();
    (0..index.len()).all(|i| keys.get(i).is_ascii())
}

/// [`best_scan`], told whether every key is ASCII.
fn best_scan_with(index: &Index, query: &str, k: NonZeroUsize, ascii: bool) -> Vec<Neighbor> {
    /// Items per call of the batched kernel.
    const GROUP: usize = 64;
    // No more answers than items: a k above n means every item, never an allocation of k.
    let k = k.get().min(index.len().max(1));
    let q = prepare_query(index, query);
    let m = q.len();
    let keys = index.keys();
    let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
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

/// Runs a brute force for many queries on all cores, answers in input order. An index of
/// another metric than Levenshtein gets [`super::brute_force`] for either scan. For a
/// Levenshtein index, [`Scan::Full`] puts the queries in vector lanes
/// ([`crate::metric::LevenshteinLanes`]), with the answers of [`full_scan`] query by query;
/// [`Scan::Best`] runs [`best_scan`] for each query. Refuses `k = 0` with [`Error::Usage`].
pub fn scan_many(
    index: &Index,
    queries: &[String],
    k: usize,
    scan: Scan,
) -> Result<Vec<Vec<Neighbor>>> {
    let k = at_least_one(k)?;
    if index.meta().metric != MetricKind::Levenshtein {
        // No dedicated scans for the other metrics: both are the plain brute force.
        return Ok(queries
            .par_iter()
            .map(|q| super::brute::brute_force_k(index, q, k))
            .collect());
    }
    if scan == Scan::Full {
        return Ok(full_scan_lanes_all(index, queries, k, &|_| {}));
    }
    let ascii = all_ascii(index);
    Ok(queries
        .par_iter()
        .map(|q| best_scan_with(index, q, k, ascii))
        .collect())
}

/// [`full_scan_lanes`] with the kernels of the active level, for a Levenshtein index: the
/// ground truth of `eval`.
///
/// Tasks are whole groups when there are enough of them to keep every core busy, else
/// groups split into item blocks ([`crate::search::lanes::scan`]).
pub(super) fn full_scan_lanes_all(
    index: &Index,
    queries: &[String],
    k: NonZeroUsize,
    progress: &(dyn Fn(usize) + Sync),
) -> Vec<Vec<Neighbor>> {
    full_scan_lanes(index, queries, k, LevenshteinLanes::new, None, progress)
}

/// [`full_scan_k`] of every query of a Levenshtein index at once, answers in input order:
/// the queries in vector lanes ([`crate::search::lanes::scan`], made by `lanes`, item
/// blocks of `block` items or `None` for its default split); the empty query and queries
/// over 64 chars take [`full_scan_k`]. Answers equal those of [`full_scan_k`].
pub(super) fn full_scan_lanes(
    index: &Index,
    queries: &[String],
    k: NonZeroUsize,
    lanes: impl Fn(&[&[u8]]) -> LevenshteinLanes,
    block: Option<usize>,
    progress: &(dyn Fn(usize) + Sync),
) -> Vec<Vec<Neighbor>> {
    let (mut answers, rest) = crate::search::lanes::scan(index, queries, k, lanes, block, progress);
    let found: Vec<(usize, Vec<Neighbor>)> = rest
        .par_iter()
        .map(|&q| {
            let found = full_scan_k(index, &queries[q], k);
            progress(1);
            (q, found)
        })
        .collect();
    for (q, found) in found {
        answers[q] = found;
    }
    answers
}

/// Prepares `query` for the Levenshtein kernel, normalised as the index's items were.
fn prepare_query(index: &Index, query: &str) -> LevenshteinQuery {
    let key = index.meta().normalize.apply(query);
    Levenshtein.prepare(key.as_bytes())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::index::{build_index, BuildOptions};
    use crate::ingest::{read_corpus_from, IngestOptions};
    use crate::metric::MetricSpec;

    /// Five place names, two of them one swap of neighbours apart.
    const NAMES: &str = "Keth Landing\nKteh Landing\nHolbre Quay\nStothisen\nVessa Pier\n";

    fn index(dir: &std::path::Path, metric: MetricSpec) -> Index {
        let corpus =
            read_corpus_from(NAMES.as_bytes(), "test", &IngestOptions::default()).expect("corpus");
        let dest = dir.join("names.wmk");
        let opts = BuildOptions {
            metric,
            dim: 2,
            ..BuildOptions::default()
        };
        build_index(&corpus, "test", &opts, &dest, &|_| {}).expect("build");
        Index::open(&dest).expect("open")
    }

    fn is_usage<T: std::fmt::Debug>(r: Result<T>) -> String {
        match r {
            Err(e @ (Error::Usage(_) | Error::InvalidParameter { .. })) => e.to_string(),
            other => panic!("expected a usage error, got {other:?}"),
        }
    }

    #[test]
    fn scans_refuse_k_zero() {
        let dir = tempfile::tempdir().unwrap();
        let lev = index(dir.path(), MetricSpec::Levenshtein);
        let q = ["Keth Landing".to_string()];
        for m in [
            is_usage(full_scan(&lev, &q[0], 0)),
            is_usage(best_scan(&lev, &q[0], 0)),
            is_usage(scan_many(&lev, &q, 0, Scan::Full)),
            is_usage(scan_many(&lev, &q, 0, Scan::Best)),
        ] {
            assert!(m.contains("k must be at least 1"), "{m}");
        }
        // k = 1 still answers: the query itself at distance 0.
        let one = full_scan(&lev, &q[0], 1).unwrap();
        assert_eq!((one[0].index, one[0].distance), (0, 0.0));
        assert_eq!(best_scan(&lev, &q[0], 1).unwrap(), one);
    }

    /// Invented Vessmark harbour names with accents, lengths around every lane boundary of
    /// the many-query kernel, and duplicates (ties broken by id, then item number).
    const HARBOURS: &str = "Keth\nKeth\nKéth\nØstvik\nØstvík Ferry Landing\nHolbre Quay\n\
        Stothisen North Pier\nVessa\nVessa Pier and Old Customs House at Stothisen Harbour\n\
        Skerrøy\nSkerrøy Light\nLanding\nLandings\nØ\nHolbrekvåg Fish Market East Wharf Gate\n";

    /// The full scan with the queries in lanes, at every level this CPU runs, gives the
    /// answers of the one-query full scan (`full_scan_k`): the same items, distances and
    /// order, for queries at every lane boundary (8/9, 16/17, 32/33, 64/65 chars), accented
    /// and empty queries, group sizes that leave partial registers, and k above n.
    #[test]
    fn lanes_answer_as_the_one_query_scan() {
        use crate::cpu::Level;
        let dir = tempfile::tempdir().unwrap();
        let mut corpus =
            read_corpus_from(HARBOURS.as_bytes(), "test", &IngestOptions::default()).unwrap();
        // Ids against the item order, so that ties are broken by id, not by scan order.
        let n = corpus.items.len() as i64;
        corpus.ids = crate::ingest::Ids::Int((0..n).map(|i| (i * 7) % n).rev().collect());
        let dest = dir.path().join("harbours.wmk");
        let opts = BuildOptions {
            dim: 2,
            ..BuildOptions::default()
        };
        build_index(&corpus, "test", &opts, &dest, &|_| {}).unwrap();
        let idx = Index::open(&dest).unwrap();
        let mut queries: Vec<String> = vec![String::new(), "Kéth".into(), "Østvík".into()];
        for m in [1usize, 7, 8, 9, 15, 16, 17, 31, 32, 33, 63, 64, 65, 70] {
            let base = "Vessa Pier and Old Customs House at Stothisen Harbour, Skerrøy Light";
            queries.push(base.chars().take(m).collect());
            queries.push(base.chars().rev().take(m).collect());
        }
        // 70 short queries: a full 64-lane group and a partial one (or three 32-lane ones).
        queries.extend((0..70).map(|i| format!("Ke{}", char::from(b'a' + (i % 26) as u8))));
        for level in Level::ALL.into_iter().filter(|l| l.available()) {
            for k in [1, 3, 15, 40] {
                let k = NonZeroUsize::new(k).unwrap();
                // Blocks of one item, of four (a partial last one) and one block.
                for block in [Some(1), Some(4), None] {
                    let lanes = |q: &[&[u8]]| LevenshteinLanes::with_level(q, level);
                    let got = full_scan_lanes(&idx, &queries, k, lanes, block, &|_| {});
                    for (q, got) in queries.iter().zip(&got) {
                        let want = full_scan_k(&idx, q, k);
                        assert_eq!(got, &want, "{level:?}, k = {k}, block {block:?}, {q:?}");
                    }
                }
            }
        }
        assert_eq!(
            scan_many(&idx, &queries, 4, Scan::Full).unwrap(),
            scan_many(&idx, &queries, 4, Scan::Best).unwrap()
        );
    }

    #[test]
    fn levenshtein_scans_refuse_other_metrics() {
        let dir = tempfile::tempdir().unwrap();
        let dam = index(dir.path(), MetricSpec::Damerau);
        let q = "Keth Landing";
        for m in [
            is_usage(full_scan(&dam, q, 3)),
            is_usage(best_scan(&dam, q, 3)),
        ] {
            assert!(m.contains("Levenshtein") && m.contains("damerau"), "{m}");
        }
        // scan_many measures with the index's metric: the unrestricted Damerau–Levenshtein
        // distance of strsim (a general-purpose string library) for every answer.
        let items: Vec<&str> = NAMES.lines().collect();
        for scan in [Scan::Full, Scan::Best] {
            let got = scan_many(&dam, &[q.to_string()], 3, scan).unwrap();
            assert_eq!(got[0].len(), 3);
            for n in &got[0] {
                let want = strsim::damerau_levenshtein(q, items[n.index as usize]);
                assert_eq!(n.distance, want as f64, "{scan:?}, item {}", n.index);
            }
            // "Kteh Landing" is one swap away (Levenshtein would say 2).
            assert_eq!((got[0][1].index, got[0][1].distance), (1, 1.0));
        }
    }
}
