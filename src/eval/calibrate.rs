//! Recall calibration: the threshold recall@k an index's approximate search reaches at each
//! of a ladder of candidate counts ([`LADDER`]), measured on queries whose exact answers are
//! known, and stored in the index ([`crate::index::Calibration`]) so that a query can ask
//! for a recall instead of a candidate count
//! ([`crate::search::SearchParams::for_recall`], `waymark query --recall R`).
//!
//! Two sources of queries:
//!
//! - [`calibrate_from_items`]: a seeded sample of the index's own items (reference items
//!   left out). For text metrics each item gets 1 to 3 random edits in the items' own
//!   letters ([`super::edits_of`]; Hamming: substitutions only) and is asked as a query
//!   against its exact k nearest: typos are what such an index is asked, and an item asked
//!   as itself is nearer its neighbours than a query is, so a curve from plain items
//!   promised too much (README, "Asking for a recall"). For the other metrics (vectors,
//!   graph nodes, metric programs) each item is asked for its k + 1 nearest with itself
//!   then taken out, against its exact k + 1 nearest likewise (exact queries where the
//!   embedding gives a bound, else the brute force). Needs nothing but the index, works
//!   for every metric; `waymark build` runs it ([`calibrate_file`]). Queries unlike random
//!   edits (another spelling of a word, reads with other errors) can still get less than
//!   the curve promises.
//! - [`calibrate_from_queries`]: a user's queries with their exact answers (`waymark eval
//!   --queries FILE --calibrate`), for curves that hold on queries of that kind.
//!
//! Each level runs the queries with the index's default space and candidate source, the
//! candidates of the ladder and, with cells, [`crate::search::VISIT_PER_CANDIDATE`] rows per
//! candidate (every row once that reaches n); a query already complete at a smaller level
//! is not asked again (see `ladder`). The ladder stops once the mean recall reaches
//! [`STOP_RECALL`] or the candidates reach n: cheap points first, a few hundred queries.

use std::path::Path;

use rand::SeedableRng;
use rayon::prelude::*;

use super::recall::{edits_of, threshold_recall};
use super::truth::Truth;
use crate::error::{Error, Result};
use crate::index::{Calibration, CalibrationBand, CalibrationPoint, Index};
use crate::metric::MetricKind;
use crate::search::{
    CandidateSource, Found, Neighbor, Request, SearchParams, Searcher, VISIT_PER_CANDIDATE,
};

/// Candidate counts a calibration measures, cheapest first (capped at the number of items).
pub const LADDER: [usize; 20] = [
    25, 50, 100, 200, 400, 700, 1000, 1500, 2000, 3000, 4000, 6000, 8000, 12000, 16000, 24000,
    32000, 48000, 64000, 96000,
];

/// The mean recall at which the ladder stops.
pub const STOP_RECALL: f64 = 0.997;

/// Items sampled by a build's calibration.
pub const CALIBRATION_QUERIES: usize = 300;

/// Neighbours per query of a build's calibration.
pub const CALIBRATION_K: usize = 10;

/// Parameters of a calibration from items.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CalibrateOptions {
    /// Items sampled as queries (capped at the items that are not reference items).
    pub queries: usize,
    /// Neighbours per query.
    pub k: usize,
    /// Seed of the sample (and of the edits).
    pub seed: u64,
    /// For text metrics, ask the sampled items with random edits ([`edits_of`]) instead of
    /// the items themselves (see [`calibrate_from_items`]).
    pub edits: bool,
}

impl Default for CalibrateOptions {
    fn default() -> Self {
        CalibrateOptions {
            queries: CALIBRATION_QUERIES,
            k: CALIBRATION_K,
            seed: 0,
            edits: true,
        }
    }
}

/// The search parameters of one level of the ladder: the index's defaults with `c`
/// candidates and, with cells, `VISIT_PER_CANDIDATE · c` rows (0, every row, from n on).
fn level(base: &SearchParams, c: usize, n: usize) -> SearchParams {
    let visit = c.saturating_mul(VISIT_PER_CANDIDATE);
    SearchParams {
        candidates: c,
        visit: if base.source == CandidateSource::Cells && visit >= n {
            0
        } else {
            visit
        },
        ..*base
    }
}

/// Runs the ladder: `answer(params, js)` answers the calibration queries numbered `js`,
/// `score(j, found)` is the recall of query j's answer. Stops at [`STOP_RECALL`] or once the
/// candidates reach n.
///
/// A query whose answer is complete (recall 1) at one level is counted complete at the
/// larger ones without being asked again: a larger level compares a superset of the rows
/// (a longer prefix of the same cell order, or every row) and keeps more candidates, so it
/// loses a neighbour found before only when more than the extra candidates outrank it in
/// coordinates. This keeps the costly levels to the few queries still missing neighbours.
fn ladder(
    index: &Index,
    k: usize,
    queries: usize,
    answer: impl Fn(&SearchParams, &[usize]) -> Vec<Result<Found>>,
    score: impl Fn(usize, &Found) -> f64 + Sync,
) -> Result<Ladder> {
    let n = index.len();
    let base = SearchParams::embedded(index, k);
    let mut points = Vec::new();
    let mut each = Vec::new();
    let mut complete = vec![false; queries];
    for &c in LADDER.iter() {
        let c = c.min(n);
        if points
            .last()
            .is_some_and(|p: &CalibrationPoint| p.candidates as usize >= c)
        {
            break;
        }
        let p = level(&base, c, n);
        let open: Vec<usize> = (0..queries).filter(|&j| !complete[j]).collect();
        let found = answer(&p, &open);
        let mut recalls = vec![1.0; queries];
        for (&j, f) in open.iter().zip(found) {
            let r = score(j, &f?);
            complete[j] = r >= 1.0;
            recalls[j] = r;
        }
        let recall = recalls.iter().sum::<f64>() / queries.max(1) as f64;
        points.push(CalibrationPoint {
            candidates: c as u64,
            visit: p.visit as u64,
            recall,
        });
        each.push(recalls);
        if recall >= STOP_RECALL || c >= n {
            break;
        }
    }
    Ok(Ladder { points, each })
}

/// What [`ladder`] measured: the curve, and each query's recall at each of its points.
struct Ladder {
    points: Vec<CalibrationPoint>,
    /// `each[level][query]`.
    each: Vec<Vec<f64>>,
}

/// Length bands a curve is split into, at most.
pub const BANDS: usize = 4;

/// Calibration queries a length band holds at least.
pub const BAND_QUERIES: usize = 60;

/// The curve split by query length (`lengths[j]` chars for query j): up to [`BANDS`] bands
/// of about equal numbers of queries (at least [`BAND_QUERIES`] each), cut between distinct
/// lengths. No bands (the curve as it is) when there are too few queries to split.
fn length_bands(lengths: &[usize], ladder: &Ladder) -> Vec<CalibrationBand> {
    let count = BANDS.min(lengths.len() / BAND_QUERIES);
    if count < 2 {
        return Vec::new();
    }
    let mut sorted = lengths.to_vec();
    sorted.sort_unstable();
    // Cuts at the quantiles, kept only where both sides hold enough queries.
    let mut starts: Vec<usize> = vec![0];
    for b in 1..count {
        let cut = sorted[sorted.len() * b / count];
        let last = *starts.last().expect("starts with 0");
        let below = sorted.partition_point(|&l| l < cut) - sorted.partition_point(|&l| l < last);
        let above = sorted.len() - sorted.partition_point(|&l| l < cut);
        if cut > last && below >= BAND_QUERIES && above >= BAND_QUERIES {
            starts.push(cut);
        }
    }
    if starts.len() < 2 {
        return Vec::new();
    }
    let band_of = |len: usize| starts.iter().rposition(|&s| s <= len).unwrap_or(0);
    let mut members = vec![Vec::new(); starts.len()];
    for (j, &len) in lengths.iter().enumerate() {
        members[band_of(len)].push(j);
    }
    starts
        .iter()
        .zip(&members)
        .map(|(&from, js)| CalibrationBand {
            from_chars: from as u64,
            queries: js.len() as u64,
            recall: ladder
                .each
                .iter()
                .map(|level| js.iter().map(|&j| level[j]).sum::<f64>() / js.len() as f64)
                .collect(),
        })
        .collect()
}

/// `neighbors` without the query item `me` (the last one instead when `me` is not among
/// them: other items at distance 0 sorted before it), at most `k`.
fn without(mut neighbors: Vec<Neighbor>, me: u32, k: usize) -> Vec<Neighbor> {
    match neighbors.iter().position(|n| n.index == me) {
        Some(at) => {
            neighbors.remove(at);
        }
        None => {
            neighbors.pop();
        }
    }
    neighbors.truncate(k);
    neighbors
}

fn pairs(found: &[Neighbor]) -> Vec<(u32, f64)> {
    found.iter().map(|n| (n.index, n.distance)).collect()
}

/// A calibration curve from the index's own items (see the module documentation); `None`
/// for an index of fewer than two items.
///
/// ```no_run
/// use waymark::eval::{calibrate_from_items, CalibrateOptions};
/// use waymark::index::Index;
///
/// let index = Index::open("words.wmk".as_ref())?;
/// let curve = calibrate_from_items(&index, &CalibrateOptions::default())?.unwrap();
/// for p in &curve.points {
///     println!("{} candidates: recall {:.3}", p.candidates, p.recall);
/// }
/// # Ok::<(), waymark::Error>(())
/// ```
pub fn calibrate_from_items(index: &Index, opts: &CalibrateOptions) -> Result<Option<Calibration>> {
    let n = index.len();
    if n < 2 || opts.k == 0 || opts.queries == 0 {
        return Ok(None);
    }
    let k = opts.k.min(n - 1);
    let refs: std::collections::HashSet<u64> = index.meta().embedding.refs().into_iter().collect();
    let others = n - refs.len().min(n);
    let take = opts.queries.min(others);
    if take == 0 {
        return Ok(None);
    }
    // Drawn from the items that are not reference items (a reference item sits at 0 on its
    // own coordinate, which no query does), in increasing item number.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(opts.seed ^ 0xca11_b2a7);
    let mut picked: Vec<u32> = Vec::with_capacity(take);
    let mut seen = std::collections::HashSet::new();
    let mut tries = 0usize;
    while picked.len() < take && tries < take.saturating_mul(64) {
        tries += 1;
        let i = rand::Rng::gen_range(&mut rng, 0..n);
        if !refs.contains(&(i as u64)) && seen.insert(i) {
            picked.push(i as u32);
        }
    }
    picked.sort_unstable();
    if opts.edits && edits_make_queries(index.meta().metric).is_some() {
        return from_edited_items(index, &picked, opts).map(Some);
    }
    let searcher = Searcher::new(index);
    let exact: Vec<Vec<Neighbor>> = if index.bound().is_some() {
        searcher
            .answer_stored(&picked, &Request::Exact { k: k + 1 })
            .into_iter()
            .map(|f| f.map(|f| f.neighbors))
            .collect::<Result<_>>()?
    } else {
        picked
            .par_iter()
            .map(|&i| {
                let text = String::from_utf8_lossy(index.item(i as usize));
                super::brute::brute_force_k(
                    index,
                    &text,
                    std::num::NonZeroUsize::new(k + 1).expect("k + 1 > 0"),
                )
            })
            .collect()
    };
    let truth: Vec<Vec<f64>> = exact
        .into_iter()
        .zip(&picked)
        .map(|(t, &me)| without(t, me, k).iter().map(|n| n.distance).collect())
        .collect();
    let measured = ladder(
        index,
        k,
        picked.len(),
        |p, js| {
            let p = SearchParams { k: k + 1, ..*p };
            let items: Vec<u32> = js.iter().map(|&j| picked[j]).collect();
            searcher.answer_stored(&items, &Request::Approximate(p))
        },
        |j, f| {
            let found = without(f.neighbors.clone(), picked[j], k);
            threshold_recall(&truth[j], &pairs(&found), k)
        },
    )?;
    Ok(Some(Calibration {
        k: k as u64,
        from: "items".into(),
        file: None,
        queries: picked.len() as u64,
        seed: opts.seed,
        points: measured.points,
        bands: Vec::new(),
    }))
}

/// Whether random edits of an item make a query of `metric` (text metrics), and whether
/// they must be substitutions only (Hamming: the items' length).
fn edits_make_queries(metric: MetricKind) -> Option<bool> {
    match metric {
        MetricKind::Levenshtein
        | MetricKind::Damerau
        | MetricKind::WeightedEdit
        | MetricKind::Jaccard
        | MetricKind::TokenEdit => Some(false),
        MetricKind::Hamming => Some(true),
        _ => None,
    }
}

/// The curve of [`calibrate_from_items`] for a text metric: the `picked` items, each with
/// 1 to 3 random edits in the items' own letters, asked as queries against their exact
/// answers (exact queries where the embedding gives a bound, else the brute force). A
/// query the metric refuses is left out.
fn from_edited_items(
    index: &Index,
    picked: &[u32],
    opts: &CalibrateOptions,
) -> Result<Calibration> {
    let k = opts.k.min(index.len());
    let texts: Vec<String> = picked
        .iter()
        .map(|&i| String::from_utf8_lossy(index.item(i as usize)).into_owned())
        .collect();
    let substitute_only = edits_make_queries(index.meta().metric) == Some(true);
    let edited = edits_of(&texts, opts.seed ^ 0xed17_5eed, substitute_only);
    let exact: Vec<Result<Vec<Neighbor>>> = if index.bound().is_some() {
        Searcher::new(index)
            .answer_many(&edited, &Request::Exact { k })
            .into_iter()
            .map(|f| f.map(|f| f.neighbors))
            .collect()
    } else {
        edited
            .par_iter()
            .map(|q| {
                index.prepare_query(q)?;
                Ok(super::brute::brute_force_k(
                    index,
                    q,
                    std::num::NonZeroUsize::new(k).expect("k > 0"),
                ))
            })
            .collect()
    };
    let (mut queries, mut answers) = (Vec::new(), Vec::new());
    for (q, t) in edited.into_iter().zip(exact) {
        if let Ok(t) = t {
            queries.push(q);
            answers.push(t);
        }
    }
    if queries.is_empty() {
        return Err(Error::Usage(format!(
            "{}: no edited item could be asked as a query to calibrate the index",
            index.path().display()
        )));
    }
    let mut cal = calibrate_from_queries(index, &queries, &Truth { k, answers }, k, "")?;
    cal.from = "edits".into();
    cal.file = None;
    cal.seed = opts.seed;
    Ok(cal)
}

/// A calibration curve from `queries` whose exact answers are `truth` (same order, at least
/// `k` each; [`super::load_or_compute_truth`]). `file` names the queries in the curve.
pub fn calibrate_from_queries(
    index: &Index,
    queries: &[String],
    truth: &Truth,
    k: usize,
    file: &str,
) -> Result<Calibration> {
    if queries.is_empty() || k == 0 {
        return Err(Error::Usage(format!(
            "{file}: calibrating needs at least one query and k of at least 1"
        )));
    }
    let searcher = Searcher::new(index);
    let dists: Vec<Vec<f64>> = truth
        .answers
        .iter()
        .map(|t| t.iter().take(k).map(|n| n.distance).collect())
        .collect();
    let measured = ladder(
        index,
        k,
        queries.len(),
        |p, js| {
            let qs: Vec<String> = js.iter().map(|&j| queries[j].clone()).collect();
            searcher.search_many(&qs, p)
        },
        |j, f| threshold_recall(&dists[j], &pairs(&f.neighbors), k),
    )?;
    // Bands by length where a query is text whose length means something.
    let bands = if edits_make_queries(index.meta().metric).is_some() {
        let lengths: Vec<usize> = queries.iter().map(|q| q.chars().count()).collect();
        length_bands(&lengths, &measured)
    } else {
        Vec::new()
    };
    Ok(Calibration {
        k: k as u64,
        from: "queries".into(),
        file: Some(file.to_string()),
        queries: queries.len() as u64,
        seed: 0,
        points: measured.points,
        bands,
    })
}

/// Calibrates the index at `path` from its items and stores the curve in it
/// ([`crate::index::store_calibration`]: a new file renamed over the old one). Returns the
/// curve (`None`, and the file untouched, for an index of fewer than two items).
pub fn calibrate_file(path: &Path, opts: &CalibrateOptions) -> Result<Option<Calibration>> {
    let index = Index::open(path)?;
    let Some(cal) = calibrate_from_items(&index, opts)? else {
        return Ok(None);
    };
    let meta = index.meta().clone();
    drop(index);
    crate::index::store_calibration(path, &meta, Some(cal.clone()))?;
    Ok(Some(cal))
}
