//! Queries against an index: approximate k-NN, exact k-NN and range queries.
//!
//! A query reads top to bottom through four files:
//!
//! 1. **prepare and embed** (this file): the query is normalised as the items were and
//!    prepared for the index's metric ([`crate::index::Index::query_key`]), then measured
//!    against the reference items to get its landmark coordinates, exact and quantised;
//! 2. **candidates** (`candidates.rs`): the `C` items nearest in landmark coordinates — L2
//!    (the default), L1 or L∞ — from the nearest cells' rows (the default from [`CELLS_MIN_ITEMS`] items),
//!    a SIMD scan of every row, or the kd-tree; picked off a score histogram;
//! 3. **re-rank** (`rerank.rs`): the candidates measured with the true distance (in rounds of
//!    twice the candidates while the answers reach the end of the list, when
//!    [`SearchParams::widen`] allows), in groups for
//!    metrics that measure groups best (Levenshtein's vector lanes, an external program),
//!    else one by one nearest first, skipping a candidate whose L∞ lower bound exceeds the
//!    current k-th distance and bounding the kernel by it;
//! 4. **exact and range** (`exact.rs`): items visited in increasing lower bound, round by
//!    round over the column blocks, until no item left can belong to the answer, with a
//!    [`Certificate`] of completeness.
//!
//! Answers are ordered by (distance, id, item) ([`order`]).
//!
//! ```no_run
//! use waymark::index::Index;
//! use waymark::search::{SearchParams, Searcher};
//!
//! let index = Index::open("names.wmk".as_ref())?;
//! let searcher = Searcher::new(&index);
//! let params = SearchParams::from_index(&index, 5);
//! let found = searcher.search("Orvane Qauy", &params, &mut Default::default())?;
//! for n in &found.neighbors {
//!     println!("{:?} {}", index.id(n.index as usize), n.distance);
//! }
//! // Exact answers, with the certificate of their completeness:
//! let exact = searcher.search_exact("Orvane Qauy", 5, &mut Default::default())?;
//! let all_within_2 = searcher.search_within("Orvane Qauy", 2.0, None, &mut Default::default())?;
//! println!("{:?} {}", exact.certificate, all_within_2.neighbors.len());
//! # Ok::<(), waymark::Error>(())
//! ```

mod candidates;
mod exact;
pub(crate) mod lanes;
pub mod order;
pub mod parts;
mod request;
mod rerank;
mod tally;
mod variants;

use std::sync::atomic::AtomicU64;
use std::sync::OnceLock;

use rayon::prelude::*;

pub use self::candidates::Scratch;
pub use self::order::Neighbor;
pub use self::request::{
    check_recall, CandidateSource, Certificate, Found, Request, SearchParams, CELLS_MIN_ITEMS,
    VISIT_PER_CANDIDATE, WIDEN_TAIL,
};
pub use crate::coords::Space;
pub use crate::index::{default_candidates, DEFAULT_CANDIDATES, DEFAULT_DIM};

/// Fewest queries in one [`Searcher::answer_many`] call for which exact k-NN on a
/// Levenshtein index is answered by the brute force with the queries in vector lanes
/// instead of the index's exact path. Measured at 663,473 words, 1,000 typo queries, the
/// lanes answered 1,393 queries/s and the exact path 609 (`cargo bench --bench big`).
pub const LANES_MIN_QUERIES: usize = 256;

use crate::coords::columns::{CharBins, Columns};
use crate::embed::Bound;
use crate::error::{Error, Param, Result};
use crate::index::{Index, StrTable};
use crate::metric::{AnyQuery, Metric, PreparedQuery};

/// Runs queries against one index.
pub struct Searcher<'a> {
    index: &'a Index,
    /// Keys of the reference items a query is measured against.
    refs: Vec<&'a [u8]>,
    keys: StrTable<'a>,
    /// Lower bounds from stored coordinates; `None` disables pruning and exact answers.
    bound: Option<Bound>,
    /// Every key's char signature, made on the first exact query of an index whose metric
    /// is bounded by char counts but whose column blocks do not hold them.
    sigs: OnceLock<Vec<u64>>,
    /// Every key's sketch ([`crate::metric::AnyMetric::sketch`], its width per item), made
    /// on the first exact query of an index whose metric has them.
    sketches: OnceLock<Vec<f64>>,
    /// The coordinates in column blocks for exact queries, made on the first one, with the
    /// char bins of their count columns when they have them.
    columns: OnceLock<(Columns, Option<CharBins>, Vec<u32>)>,
    /// Every key's char counts by length, for exact queries under plain Levenshtein, made
    /// on the first one.
    tally: OnceLock<tally::Tally>,
    /// Queries the tally has answered and the items they measured, by which
    /// [`Searcher::tally_answers`] judges whether it pays.
    tally_seen: (AtomicU64, AtomicU64),
}

/// A query prepared for the index: its key (normalised bytes), its prepared form and its
/// stored (quantised) coordinates.
struct Prepared {
    key: Vec<u8>,
    q: AnyQuery,
    small: [u8; 64],
}

impl<'a> Searcher<'a> {
    /// Prepares a searcher (collects the reference items' keys).
    pub fn new(index: &'a Index) -> Searcher<'a> {
        let refs = index.reference_keys();
        Searcher {
            index,
            refs,
            keys: index.keys(),
            bound: index.bound(),
            sigs: OnceLock::new(),
            sketches: OnceLock::new(),
            columns: OnceLock::new(),
            tally: OnceLock::new(),
            tally_seen: (AtomicU64::new(0), AtomicU64::new(0)),
        }
    }

    /// A searcher that uses no lower bound, whatever the index's embedding: no candidate is
    /// pruned and exact queries are refused, as for an index whose embedding is not
    /// contractive. Answers of [`Searcher::search`] are the same or better, only slower.
    pub fn without_bound(index: &'a Index) -> Searcher<'a> {
        Searcher {
            bound: None,
            ..Searcher::new(index)
        }
    }

    /// The index searched.
    pub fn index(&self) -> &'a Index {
        self.index
    }

    /// Prepares a query for the index's metric: text is normalised as the items were (and
    /// for Levenshtein gets the kernel's masks), a vector row is parsed, a graph query must
    /// name a node. A query the metric cannot take is refused with the reason.
    pub fn prepare(&self, query: &str) -> Result<AnyQuery> {
        self.index.prepare_query(query)
    }

    /// A query prepared and embedded: one distance per reference item.
    fn prepare_embedded(&self, query: &str, exact: Option<&mut [f32; 64]>) -> Result<Prepared> {
        let key = self.index.query_key(query)?;
        let metric = self.index.metric()?;
        let q = metric.prepare(&key);
        let meta = self.index.meta();
        let mut dists = vec![0.0; self.refs.len()];
        q.distances(&self.refs, &mut dists);
        metric.check()?;
        let mut coords = [0f64; 64];
        meta.embedding.coords(&dists, &mut coords);
        let mut small = [0u8; 64];
        let dim = meta.dim as usize;
        for (s, &c) in small.iter_mut().zip(&coords[..dim]) {
            *s = crate::embed::quantize(c, meta.scale);
        }
        if let Some(exact) = exact {
            for (e, &c) in exact.iter_mut().zip(&coords[..dim]) {
                *e = c as f32;
            }
        }
        Ok(Prepared { key, q, small })
    }

    /// Finds approximate k nearest neighbours of `query`.
    pub fn search(&self, query: &str, p: &SearchParams, scratch: &mut Scratch) -> Result<Found> {
        self.check(&Request::Approximate(*p))?;
        if p.source == CandidateSource::Counts {
            let mut found = self.tally_answers(&[query.to_owned()], Some(p.k), None, true);
            if let Some(found) = found.pop().flatten() {
                return found;
            }
            return self.search(query, &self.fallback(p), scratch);
        }
        let mut exact = [0f32; 64];
        let want_exact = p.source == CandidateSource::Tree;
        let pq = self.prepare_embedded(query, want_exact.then_some(&mut exact))?;
        let mut scored = false;
        self.rerank_rounds(&pq, p, scratch, |me, c, visit, s| {
            match p.source {
                // The scores of every row stay in the scratch: a wider round only selects.
                CandidateSource::Scan if scored => s.select(c, &me.index.rows()),
                CandidateSource::Scan => me.scan_candidates(&pq.small, c, p.space, s),
                // The counts answered above, or handed over to the embedding's source.
                CandidateSource::Cells | CandidateSource::Counts => {
                    me.cells_candidates(&pq.small, c, visit, p.space, s, scored)?
                }
                CandidateSource::Tree => me.tree_candidates(&pq.small, &exact, c, p.space, s)?,
            }
            scored = true;
            Ok(())
        })
    }

    /// Exact k nearest neighbours of `query`: the same answer as a brute force over every
    /// item (same distances, ties ordered by id, then item number), with its [`Certificate`].
    ///
    /// Refused (a usage error) when the index's embedding gives no lower bound.
    pub fn search_exact(&self, query: &str, k: usize, scratch: &mut Scratch) -> Result<Found> {
        self.answer(query, &Request::Exact { k }, scratch)
    }

    /// Every item at true distance at most `radius` from `query`, exactly, in answer order;
    /// with `k`, only the `k` nearest of them (as [`Searcher::search_exact`], within the
    /// radius). Refused when the index's embedding gives no lower bound.
    pub fn search_within(
        &self,
        query: &str,
        radius: f64,
        k: Option<usize>,
        scratch: &mut Scratch,
    ) -> Result<Found> {
        self.answer(query, &Request::Within { radius, k }, scratch)
    }

    /// Checks that `req` can be answered on this index (parameters in range, a lower bound
    /// for exact requests, and, once per index, the tables that map items to their
    /// coordinate rows: [`Index::check_rows`]), without running a query.
    pub fn check(&self, req: &Request) -> Result<()> {
        let k = match *req {
            Request::Approximate(p) => {
                if p.k == 0 {
                    return Err(Error::parameter(Param::K, "must be at least 1"));
                }
                if p.candidates == 0 {
                    return Err(Error::parameter(Param::Candidates, "must be at least 1"));
                }
                if p.source == CandidateSource::Counts && !tally::applies(self.index) {
                    return Err(Error::parameter(
                        Param::Source,
                        format!(
                            "counts (the char counts) applies to plain Levenshtein indexes \
                             only, and this one's metric is {}: use cells, scan or tree",
                            self.index.meta().metric.name()
                        ),
                    ));
                }
                Some(p.k)
            }
            Request::Exact { k } => Some(k),
            Request::Within { radius, k } => {
                if !(radius >= 0.0 && radius.is_finite()) {
                    return Err(Error::parameter(
                        Param::Radius,
                        format!("must be a finite distance of at least 0, not {radius}"),
                    ));
                }
                k
            }
        };
        if k == Some(0) {
            return Err(Error::parameter(Param::K, "must be at least 1"));
        }
        if !matches!(req, Request::Approximate(_)) {
            self.require_bound()?;
        }
        // The tables that map items to their coordinate rows, checked once.
        self.index.check_rows()
    }

    /// Answers one request.
    pub fn answer(&self, query: &str, req: &Request, scratch: &mut Scratch) -> Result<Found> {
        match *req {
            Request::Approximate(p) => self.search(query, &p, scratch),
            Request::Exact { k } => {
                self.check(req)?;
                if let Some(found) = self.variant_answer(query, Some(k), None, scratch) {
                    return found;
                }
                self.exact(query, Some(k), None)
            }
            Request::Within { radius, k } => {
                self.check(req)?;
                if let Some(found) = self.variant_answer(query, k, Some(radius), scratch) {
                    return found;
                }
                self.exact(query, k, Some(radius))
            }
        }
    }

    /// Runs many approximate queries in parallel; answers come back in input order.
    ///
    /// With the scan source, queries are taken in blocks whose coordinates are scored
    /// together in one pass over the stored rows; answers are those of [`Searcher::search`].
    pub fn search_many(&self, queries: &[String], p: &SearchParams) -> Vec<Result<Found>> {
        if p.source == CandidateSource::Counts && self.check(&Request::Approximate(*p)).is_ok() {
            let answers = self.tally_answers(queries, Some(p.k), None, true);
            return Self::fill_in(answers, |left| {
                let texts: Vec<String> = left.iter().map(|&j| queries[j].clone()).collect();
                self.search_many(&texts, &self.fallback(p))
            });
        }
        // Cells touch a small part of the rows: each query goes on its own.
        if p.source != CandidateSource::Scan || self.check(&Request::Approximate(*p)).is_err() {
            return queries
                .par_iter()
                .map_init(Scratch::default, |s, q| self.search(q, p, s))
                .collect();
        }
        let blocks: Vec<Vec<Result<Found>>> = queries
            .par_chunks(candidates::QUERY_BLOCK)
            .map_init(Vec::new, |s, block| self.search_block(block, p, s))
            .collect();
        blocks.into_iter().flatten().collect()
    }

    /// Answers many requests in parallel; answers come back in input order.
    pub fn answer_many(&self, queries: &[String], req: &Request) -> Vec<Result<Found>> {
        let (k, radius) = match *req {
            Request::Approximate(p) => return self.search_many(queries, &p),
            Request::Exact { k } => (Some(k), None),
            Request::Within { radius, k } => (k, Some(radius)),
        };
        // A request that fails its check goes query by query: every query then gets the
        // same error, as from one call each.
        if self.check(req).is_err() || self.variant_radius(radius).is_err() {
            return queries
                .par_iter()
                .map_init(Scratch::default, |s, q| self.answer(q, req, s))
                .collect();
        }
        // The deletion-variant table first, where it can answer; the queries it cannot
        // (an exact k-NN query with fewer than k items within its radius) go on to the
        // column blocks, in blocks that share passes.
        let mut answers: Vec<Option<Result<Found>>> = match self.variant_radius(radius) {
            Ok(Some(_)) => queries
                .par_iter()
                .map_init(Scratch::default, |s, q| {
                    self.variant_answer(q, k, radius, s)
                })
                .collect(),
            _ => queries.iter().map(|_| None).collect(),
        };
        let rest: Vec<usize> = (0..queries.len())
            .filter(|&i| answers[i].is_none())
            .collect();
        let texts: Vec<String>;
        let todo: &[String] = if rest.len() == queries.len() {
            queries
        } else {
            texts = rest.iter().map(|&i| queries[i].clone()).collect();
            &texts
        };
        // Under plain Levenshtein, the char-count bound with the items read by length,
        // while it pays; else a large batch of exact k-NN queries goes to the brute force
        // with the queries in vector lanes, and the others in blocks of queries sharing
        // passes over the column blocks.
        let mut tallied = self.tally_answers(todo, k, radius, false);
        let left: Vec<usize> = (0..todo.len()).filter(|&j| tallied[j].is_none()).collect();
        if !left.is_empty() {
            let texts: Vec<String> = left.iter().map(|&j| todo[j].clone()).collect();
            let lanes = match (k, radius) {
                (Some(k), None) => self.exact_by_lanes(&texts, k),
                _ => None,
            };
            let found: Vec<Result<Found>> = lanes.unwrap_or_else(|| {
                let blocks: Vec<Vec<Result<Found>>> = texts
                    .par_chunks(candidates::QUERY_BLOCK)
                    .map(|block| self.exact_block(block, k, radius))
                    .collect();
                blocks.into_iter().flatten().collect()
            });
            for (j, found) in left.into_iter().zip(found) {
                tallied[j] = Some(found);
            }
        }
        for (i, found) in rest.into_iter().zip(tallied) {
            answers[i] = found;
        }
        answers
            .into_iter()
            .map(|a| a.expect("every query answered"))
            .collect()
    }

    /// Exact k-NN of a large batch of queries on a Levenshtein index by brute force with
    /// the queries in vector lanes, items read by length ([`lanes::scan_by_length`]), or
    /// `None` when the batch is too small for the lanes to pay ([`LANES_MIN_QUERIES`]) or the
    /// metric is not Levenshtein. The answers are the exact path's (same order, ties
    /// included); each query's certificate says that every item was examined, and how many
    /// its lane group measured. Queries no lane takes (the empty query, over 64
    /// chars) go through the exact path.
    fn exact_by_lanes(&self, queries: &[String], k: usize) -> Option<Vec<Result<Found>>> {
        let meta = self.index.meta();
        if queries.len() < LANES_MIN_QUERIES
            || meta.metric != crate::metric::MetricKind::Levenshtein
            || !matches!(meta.metric_spec, crate::metric::MetricSpec::Levenshtein)
        {
            return None;
        }
        let kk = std::num::NonZeroUsize::new(k)?;
        let (answers, measured, rest) = lanes::scan_by_length(
            self.index,
            queries,
            kk,
            crate::metric::LevenshteinLanes::new,
        );
        let n = self.index.len();
        let mut found: Vec<Result<Found>> = answers
            .into_iter()
            .zip(measured)
            .map(|(neighbors, computed)| {
                Ok(Found {
                    neighbors,
                    distances: computed,
                    pruned: 0,
                    certificate: Some(Certificate {
                        examined: n,
                        computed,
                        bound: None,
                    }),
                })
            })
            .collect();
        let others: Vec<String> = rest.iter().map(|&q| queries[q].clone()).collect();
        for (q, f) in rest.iter().zip(self.exact_block(&others, Some(k), None)) {
            found[*q] = f;
        }
        Some(found)
    }

    /// Approximate answers for a block of queries (scan source): candidates from one tiled
    /// pass ([`Searcher::score_block`]), then as [`Searcher::search`].
    fn search_block(
        &self,
        block: &[String],
        p: &SearchParams,
        s: &mut Vec<Scratch>,
    ) -> Vec<Result<Found>> {
        let Ok(prepared) = block
            .iter()
            .map(|q| self.prepare_embedded(q, None))
            .collect::<Result<Vec<Prepared>>>()
        else {
            // A query the metric cannot take: one at a time, so each gets its own answer.
            return block
                .iter()
                .map(|q| self.search(q, p, &mut Scratch::default()))
                .collect();
        };
        let smalls: Vec<[u8; 64]> = prepared.iter().map(|p| p.small).collect();
        if s.len() < block.len() {
            s.resize_with(block.len(), Scratch::default);
        }
        self.score_block(&smalls, p.space, s);
        prepared
            .iter()
            .zip(s.iter_mut())
            .map(|(pq, sc)| {
                self.rerank_rounds(pq, p, sc, |me, c, _, sc| {
                    sc.select(c, &me.index.rows());
                    Ok(())
                })
            })
            .collect()
    }

    /// Stored item `i` as a query: its key, prepared, and its stored coordinates (no
    /// distance to the reference items is computed: the build already did).
    fn prepare_stored(&self, i: u32) -> Result<Prepared> {
        let i = i as usize;
        if i >= self.index.len() {
            return Err(Error::Usage(format!(
                "item {i} is not in the index ({} items)",
                self.index.len()
            )));
        }
        let key = self.keys.get(i).to_vec();
        let q = self.index.metric()?.prepare(&key);
        let dim = self.index.meta().dim as usize;
        let mut small = [0u8; 64];
        let row = self.index.rows().row(i).get(..dim);
        small[..dim].copy_from_slice(row.unwrap_or(&[0; 64][..dim]));
        Ok(Prepared { key, q, small })
    }

    /// Answers `req` for stored items of the index, each asked as a query, in parallel;
    /// answers come back in the order of `items`. The items' stored coordinates are reused
    /// (nothing is re-embedded) and, as for [`Searcher::answer_many`], blocks of items share
    /// passes over the coordinates. Each item finds itself too (at distance 0, unless
    /// others at distance 0 sort before it and fill the answer).
    ///
    /// With the kd-tree as the candidate source, items are embedded again (the tree needs
    /// unquantised coordinates).
    pub fn answer_stored(&self, items: &[u32], req: &Request) -> Vec<Result<Found>> {
        if self.check(req).is_err() {
            // Every item gets the same error, as from one call each.
            return items
                .iter()
                .map(|_| self.check(req).and(Err(Error::Usage(String::new()))))
                .collect();
        }
        let (k, radius) = match *req {
            Request::Approximate(p) if p.source == CandidateSource::Counts => {
                let texts: Vec<String> = items
                    .iter()
                    .map(|&i| String::from_utf8_lossy(self.index.item(i as usize)).into_owned())
                    .collect();
                let answers = self.tally_answers(&texts, Some(p.k), None, true);
                return Self::fill_in(answers, |left| {
                    let rest: Vec<u32> = left.iter().map(|&j| items[j]).collect();
                    self.answer_stored(&rest, &Request::Approximate(self.fallback(&p)))
                });
            }
            Request::Approximate(p) if p.source == CandidateSource::Tree => {
                return items
                    .par_iter()
                    .map_init(Scratch::default, |s, &i| {
                        let text = String::from_utf8_lossy(self.index.item(i as usize));
                        self.search(&text, &p, s)
                    })
                    .collect();
            }
            Request::Approximate(p) => {
                let blocks: Vec<Vec<Result<Found>>> = items
                    .par_chunks(candidates::QUERY_BLOCK)
                    .map_init(Vec::new, |s, block| self.stored_block(block, &p, s))
                    .collect();
                return blocks.into_iter().flatten().collect();
            }
            Request::Exact { k } => (Some(k), None),
            Request::Within { radius, k } => (k, Some(radius)),
        };
        let blocks: Vec<Vec<Result<Found>>> = items
            .par_chunks(candidates::QUERY_BLOCK)
            .map(|block| self.exact_stored_block(block, k, radius))
            .collect();
        blocks.into_iter().flatten().collect()
    }

    /// Approximate answers for a block of stored items ([`Searcher::answer_stored`]).
    fn stored_block(
        &self,
        block: &[u32],
        p: &SearchParams,
        s: &mut Vec<Scratch>,
    ) -> Vec<Result<Found>> {
        let prepared: Vec<Result<Prepared>> =
            block.iter().map(|&i| self.prepare_stored(i)).collect();
        if s.len() < block.len() {
            s.resize_with(block.len(), Scratch::default);
        }
        if p.source == CandidateSource::Scan {
            let smalls: Vec<[u8; 64]> = prepared
                .iter()
                .map(|r| r.as_ref().map_or([0; 64], |pq| pq.small))
                .collect();
            self.score_block(&smalls, p.space, s);
        }
        prepared
            .into_iter()
            .zip(s.iter_mut())
            .map(|(pq, sc)| {
                let pq = pq?;
                let mut scored = false;
                self.rerank_rounds(&pq, p, sc, |me, c, visit, sc| {
                    match p.source {
                        CandidateSource::Scan => sc.select(c, &me.index.rows()),
                        _ => me.cells_candidates(&pq.small, c, visit, p.space, sc, scored)?,
                    }
                    scored = true;
                    Ok(())
                })
            })
            .collect()
    }

    /// `p` with the embedding's own source: where a query's char counts do not pay
    /// ([`CandidateSource::Counts`]).
    fn fallback(&self, p: &SearchParams) -> SearchParams {
        p.on_embedding(self.index)
    }

    /// The answers of `answers`, those missing (`None`) answered by `rest` (given their
    /// places, it returns their answers in that order).
    fn fill_in(
        mut answers: Vec<Option<Result<Found>>>,
        rest: impl FnOnce(&[usize]) -> Vec<Result<Found>>,
    ) -> Vec<Result<Found>> {
        let left: Vec<usize> = (0..answers.len())
            .filter(|&j| answers[j].is_none())
            .collect();
        if !left.is_empty() {
            for (j, found) in left.iter().zip(rest(&left)) {
                answers[*j] = Some(found);
            }
        }
        answers
            .into_iter()
            .map(|a| a.expect("every query answered"))
            .collect()
    }

    fn require_bound(&self) -> Result<Bound> {
        self.bound.ok_or_else(|| self.no_bound())
    }

    /// The refusal of exact requests on this index.
    fn no_bound(&self) -> Error {
        Error::NoLowerBound {
            path: self.index.path().to_path_buf(),
            embedding: self.index.meta().embedding.name().to_string(),
        }
    }
}
