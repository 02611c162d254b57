//! Recall, cost and speed of an index's answers against exact ones.

use std::time::Instant;

use rayon::prelude::*;
use serde::Serialize;

use super::recall::{plain_recall, threshold_recall};
use super::truth::Truth;
use crate::coords::Space;
use crate::error::Result;
use crate::index::Index;
use crate::search::parts::PartsSearcher;
use crate::search::{CandidateSource, Found, Request, Scratch, SearchParams, Searcher};

/// What one setting of the search achieved on a list of queries.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RecallRow {
    /// Candidates re-ranked per query.
    pub candidates: usize,
    /// Space candidates were ranked in.
    pub space: Space,
    /// Where candidates came from.
    pub source: CandidateSource,
    /// With cells: rows compared per query (0: every row; see [`SearchParams::visit`]).
    pub visit: usize,
    /// Doublings of the candidates a query could take ([`SearchParams::widen`]).
    pub widen: u32,
    /// Neighbours per query.
    pub k: usize,
    /// Number of queries.
    pub queries: usize,
    /// Mean threshold recall@k (ties with the true k-th distance count as right).
    pub recall: f64,
    /// Mean plain recall@k (share of the true k items returned).
    pub plain_recall: f64,
    /// Mean true-distance computations per query (reference items included).
    pub distances_per_query: f64,
    /// `distances_per_query` as a share of the items.
    pub share_of_items: f64,
    /// Queries per second, all cores, wall time of the whole list.
    pub qps: f64,
    /// Median latency of one query, milliseconds.
    pub p50_ms: f64,
    /// 95th percentile latency, milliseconds.
    pub p95_ms: f64,
    /// 99th percentile latency, milliseconds.
    pub p99_ms: f64,
}

/// The `q` quantile (nearest rank) of sorted values.
fn quantile(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return 0.0;
    }
    let r = ((q * sorted.len() as f64).ceil() as usize).clamp(1, sorted.len());
    sorted[r - 1]
}

/// Runs every query with `params` (its `k`, candidates, space and source) and compares the
/// answers with `truth` (same queries, same order, computed for at least `params.k`).
pub fn measure_recall(
    index: &Index,
    queries: &[String],
    truth: &Truth,
    params: &SearchParams,
) -> Result<RecallRow> {
    let searcher = Searcher::new(index);
    let params = *params;
    measure_with(index.len(), queries, truth, &params, |q, s| {
        searcher.search(q, &params, s)
    })
}

/// [`measure_recall`] for an index in parts, searched as `waymark query` searches it
/// ([`PartsSearcher`]: every part answers, the answers merge); `truth` is over the live items
/// with item numbers across the parts, and the share of items is of the live ones.
pub fn measure_recall_parts(
    searcher: &PartsSearcher<'_>,
    queries: &[String],
    truth: &Truth,
    params: &SearchParams,
) -> Result<RecallRow> {
    let req = Request::Approximate(*params);
    measure_with(searcher.parts().live(), queries, truth, params, |q, _| {
        searcher
            .answer_many(std::slice::from_ref(q), &req)
            .pop()
            .expect("one answer per query")
    })
}

/// Runs `search` on every query (in parallel, each timed) and compares its answers with
/// `truth`; `items` is the number of items searched.
fn measure_with(
    items: usize,
    queries: &[String],
    truth: &Truth,
    params: &SearchParams,
    search: impl Fn(&String, &mut Scratch) -> Result<Found> + Sync,
) -> Result<RecallRow> {
    let params = *params;
    let k = params.k;
    let t = Instant::now();
    let timed: Vec<(Result<Found>, f64)> = queries
        .par_iter()
        .map_init(Scratch::default, |s, q| {
            let t = Instant::now();
            let r = search(q, s);
            (r, t.elapsed().as_secs_f64() * 1e3)
        })
        .collect();
    let wall = t.elapsed().as_secs_f64();
    let nq = queries.len().max(1) as f64;
    let (mut rec, mut plain, mut dists) = (0.0, 0.0, 0usize);
    let mut lat = Vec::with_capacity(timed.len());
    for ((found, ms), exact) in timed.into_iter().zip(&truth.answers) {
        let found = found?;
        let exact = &exact[..exact.len().min(k)];
        let dist: Vec<f64> = exact.iter().map(|n| n.distance).collect();
        let pairs: Vec<(u32, f64)> = found
            .neighbors
            .iter()
            .map(|n| (n.index, n.distance))
            .collect();
        rec += threshold_recall(&dist, &pairs, k);
        let ti: Vec<u32> = exact.iter().map(|n| n.index).collect();
        let fi: Vec<u32> = found.neighbors.iter().map(|n| n.index).collect();
        plain += plain_recall(&ti, &fi);
        dists += found.distances;
        lat.push(ms);
    }
    lat.sort_by(f64::total_cmp);
    let per = dists as f64 / nq;
    Ok(RecallRow {
        candidates: params.candidates,
        space: params.space,
        source: params.source,
        visit: params.visit,
        widen: params.widen,
        k,
        queries: queries.len(),
        recall: rec / nq,
        plain_recall: plain / nq,
        distances_per_query: per,
        share_of_items: per / items.max(1) as f64,
        qps: queries.len() as f64 / wall.max(1e-9),
        p50_ms: quantile(&lat, 0.5),
        p95_ms: quantile(&lat, 0.95),
        p99_ms: quantile(&lat, 0.99),
    })
}
