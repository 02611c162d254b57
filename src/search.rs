//! Approximate k-NN: candidates by embedded distance, re-ranked by the true distance; and
//! exact k-NN and range queries, visiting items in order of their lower bound.
//!
//! A query is embedded (one distance per landmark), then `C` candidates are taken by their
//! distance in landmark coordinates — L1, L2 or L∞ — and re-ranked by the true distance:
//! Levenshtein queries 64 candidates at a time in vector lanes; other metrics nearest first,
//! where once `k` answers are held a candidate whose L∞ lower bound exceeds the current
//! k-th distance is skipped without any distance computed, and the others are compared
//! with the k-th distance as the kernel's bound.
//!
//! Candidates come from one of three sources, measured by `benches/end_to_end.rs` and
//! `benches/big.rs`:
//!
//! - **cells** (default from [`CELLS_MIN_ITEMS`] items): the rows of the cells whose centres
//!   are nearest the query's coordinates ([`crate::index::cells`]), until
//!   [`SearchParams::visit`] rows are compared;
//! - **scan** (default below that): one pass over every item's compact u8 coordinates,
//!   scored with AVX2 ([`crate::scan`]);
//! - **tree**: kiddo's exact `nearest_n` on the stored kd-tree over the f32 coordinates.
//!
//! The scan and the cells pick the best `C` with a counting histogram filled in the same
//! pass instead of a heap (coordinates are small integers, so scores are too). Exact and
//! range queries find the items within a bound with [`crate::bounds`].
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

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::bounds;
use crate::embed::Bound;
use crate::error::{Error, Result};
use crate::index::{Index, StrTable};
use crate::metric::{
    vector_bytes, AnyMetric, AnyQuery, Levenshtein, LevenshteinQuery, Metric, MetricSpec,
    PreparedQuery,
};

/// Default embedding dimension, chosen from `benches/end_to_end.rs` (see the README).
pub const DEFAULT_DIM: usize = 64;
/// Default number of candidates re-ranked per query on small indexes, chosen from the same
/// bench; larger indexes get more ([`default_candidates`]).
pub const DEFAULT_CANDIDATES: usize = 1500;

/// The default number of candidates stored in an index of `n` items: `n / 160`, at least
/// [`DEFAULT_CANDIDATES`] and at most 4,000. With candidates from cells, `benches/big.rs`
/// measured 4,000 as what keeps threshold recall@10 above 0.95 on 663,473 words, and
/// `benches/end_to_end.rs` 1,500 on 104,334 and on 52,167 (README).
pub fn default_candidates(n: usize) -> usize {
    (n / 160).clamp(DEFAULT_CANDIDATES, 4000)
}

/// The smallest index whose default candidate source is its cells. `benches/end_to_end.rs`
/// measured cells with C = 1,500 at threshold recall@10 0.958 and 16× the full scan on
/// 104,334 words, against 0.959 and 6× for the scan of every row with C = 1,000, and 0.971
/// at 11× against 0.961 at 7× on 52,167 words (README). Below this size the scan of every
/// row is cheap, and cells of a few dozen items group little.
pub const CELLS_MIN_ITEMS: usize = 50_000;

/// Rows compared per candidate when candidates come from cells
/// ([`CandidateSource::Cells`]): cells are visited until `VISIT_PER_CANDIDATE · C` rows have
/// been compared. Chosen from `benches/big.rs` (README).
pub const VISIT_PER_CANDIDATE: usize = 12;

/// The space in which candidates are ranked by their landmark coordinates.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Space {
    /// Sum of coordinate differences (the default: fastest to scan at equal recall).
    #[default]
    L1,
    /// Euclidean distance of the coordinates.
    L2,
    /// Largest coordinate difference (also the lower bound of the true distance).
    Linf,
}

impl Space {
    /// The name used on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Space::L1 => "l1",
            Space::L2 => "l2",
            Space::Linf => "linf",
        }
    }
}

/// Where candidates come from.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum CandidateSource {
    /// A SIMD pass over the compact coordinates with histogram selection.
    #[default]
    Scan,
    /// The same pass over the rows of the cells nearest the query only (the index's cells,
    /// see [`crate::index::cells`]), until [`SearchParams::visit`] rows are compared; the
    /// default for indexes of [`CELLS_MIN_ITEMS`] items or more.
    Cells,
    /// kiddo's `nearest_n` on the kd-tree.
    Tree,
}

/// Parameters of a query.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SearchParams {
    /// Number of neighbours wanted.
    pub k: usize,
    /// Number of candidates re-ranked by the true distance.
    pub candidates: usize,
    /// The space candidates are ranked in.
    pub space: Space,
    /// Where candidates come from.
    pub source: CandidateSource,
    /// With [`CandidateSource::Cells`]: cells are visited nearest first until at least this
    /// many rows have been compared (at least `candidates`; 0: every row). Ignored by the
    /// other sources.
    pub visit: usize,
}

impl SearchParams {
    /// The index's stored defaults with `k` neighbours: its candidates and space, cells as
    /// the source when the index has them and at least [`CELLS_MIN_ITEMS`] items (else the
    /// scan), and
    /// [`VISIT_PER_CANDIDATE`] rows compared per candidate.
    pub fn from_index(index: &Index, k: usize) -> SearchParams {
        let candidates = index.meta().candidates as usize;
        SearchParams {
            k,
            candidates,
            space: index.meta().space,
            source: if index.has_cells() && index.len() >= CELLS_MIN_ITEMS {
                CandidateSource::Cells
            } else {
                CandidateSource::Scan
            },
            visit: candidates.saturating_mul(VISIT_PER_CANDIDATE),
        }
    }

    /// These parameters with `candidates` and the matching default `visit`.
    pub fn with_candidates(self, candidates: usize) -> SearchParams {
        SearchParams {
            candidates,
            visit: candidates.saturating_mul(VISIT_PER_CANDIDATE),
            ..self
        }
    }
}

/// One neighbour found.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Neighbor {
    /// Item index in the index (use [`Index::id`] and [`Index::item`]).
    pub index: u32,
    /// True distance to the query.
    pub distance: f64,
}

/// The answer to one query.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Found {
    /// Neighbours sorted by (distance, id).
    pub neighbors: Vec<Neighbor>,
    /// True-distance computations made (landmarks plus re-ranked candidates).
    pub distances: usize,
    /// Candidates skipped because their lower bound exceeded the k-th distance.
    pub pruned: usize,
    /// For exact answers ([`Searcher::search_exact`], [`Searcher::search_within`]): why no
    /// other item can belong to the answer.
    pub certificate: Option<Certificate>,
}

/// The evidence that an exact answer is complete.
///
/// Items are visited in increasing order of their lower bound: the stored L∞ bound, for
/// Levenshtein k-NN queries raised to the gap of lengths or of char signatures when that is
/// larger (see [`LevenshteinQuery::signature`]). Every item that was not examined has a
/// lower bound of at least [`Certificate::bound`], which is at least the k-th distance
/// returned (k-NN) or above the radius (range query); an item examined but not measured
/// either had a bound equal to the k-th distance and an (id, index) that sorts after the
/// k-th answer's, so it could at best tie and lose the tie, or (Levenshtein) a length or
/// signature gap above the k-th distance or the radius.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Certificate {
    /// Items visited in bound order (each compared with the stopping rule).
    pub examined: usize,
    /// True distances computed on items with the bounded kernel (landmarks not included).
    pub computed: usize,
    /// The smallest lower bound among items not examined; `None` when every item was.
    pub bound: Option<f64>,
}

/// Per-thread working memory, reused across queries.
#[derive(Default)]
pub struct Scratch {
    scores: Vec<u32>,
    hist: Vec<u32>,
    picked: Vec<(u32, u32)>,
    tree_out: Vec<(u32, f32)>,
    /// Cells in visiting order, and (first score, first position) of each cell visited.
    cell_order: Vec<(u32, u32)>,
    spans: Vec<(u32, u32)>,
    fine: Vec<u32>,
    fine_hist: Vec<u32>,
    fine_picked: Vec<(u32, u32)>,
}

/// Queries whose coordinates are scored together, tile by tile, in one pass over the stored
/// rows ([`Searcher::search_many`], [`Searcher::answer_many`]).
const QUERY_BLOCK: usize = 16;
/// Rows per tile of that pass: 2048 rows of up to 64 bytes (128 KiB) stay in the core's L2
/// cache while every query of a block is scored against them, so the coordinate table is
/// read from memory once per block instead of once per query.
const TILE_ROWS: usize = 2048;
/// Items per call of the vector-lane kernel in exact and range queries.
const LANE_GROUP: usize = 64;
/// The bound up to which the first round of an exact k-NN query collects items: on typo
/// queries the 10th neighbour is typically 2 to 3 edits away (`benches/big.rs`).
const FIRST_THRESHOLD: u8 = 2;

/// One exact request in progress ([`Searcher::start_exact`], [`Searcher::run_exact`]).
struct ExactRun<'q> {
    q: &'q AnyQuery,
    /// The query's value per column of [`bounds::Columns`].
    qv: Vec<u8>,
    /// The query's char signature when the columns hold the items' (else 0).
    sig: u64,
    bound: Bound,
    k: Option<usize>,
    r: f64,
    /// The largest stored bound an item within the radius can have.
    cap: u8,
    /// The next round collects bounds in `(lo, hi]`.
    lo: Option<u8>,
    hi: u8,
    /// The first bound not visited, when the visit stopped before `cap`.
    stopped: Option<u8>,
    done: bool,
    best: Vec<Neighbor>,
    cert: Certificate,
    /// The round's items, by stored bound.
    buckets: Vec<Vec<u32>>,
    lane_at: Vec<u32>,
    lane_out: Vec<u32>,
}

/// Runs queries against one index.
pub struct Searcher<'a> {
    index: &'a Index,
    /// Keys of the reference items a query is measured against.
    refs: Vec<&'a [u8]>,
    keys: StrTable<'a>,
    /// Lower bounds from stored coordinates; `None` disables pruning and exact answers.
    bound: Option<Bound>,
    /// The first [`COARSE_STRIDE`] coordinates of every item, made on first use.
    coarse: std::sync::OnceLock<Vec<u8>>,
    /// Coarse-stage candidates per final candidate; 0 turns the coarse stage off.
    coarse_factor: usize,
    /// Every key's char signature ([`LevenshteinQuery::signature`]), made on the first
    /// exact query of a Levenshtein index whose column blocks do not hold them.
    sigs: std::sync::OnceLock<Vec<u64>>,
    /// The coordinates in column blocks for exact queries, made on the first one, with the
    /// char bins of their count columns when they have them.
    columns: std::sync::OnceLock<(bounds::Columns, Option<bounds::CharBins>)>,
}

/// Coordinates per item in the coarse stage (the first landmarks, farthest-first order).
pub const COARSE_STRIDE: usize = 8;
/// Default coarse-stage candidates per candidate: 0 (off). `benches/big.rs` measured the
/// stage on 663,473 words: at equal recall it was slower than the plain scan, because the
/// first landmarks rank candidates poorly (see the README).
pub const DEFAULT_COARSE_FACTOR: usize = 0;

/// The first [`COARSE_STRIDE`] bytes of every `stride`-byte row, packed.
fn coarse_rows(coords: &[u8], stride: usize) -> Vec<u8> {
    let mut out = vec![0u8; coords.len() / stride * COARSE_STRIDE];
    out.par_chunks_mut(COARSE_STRIDE * 4096)
        .zip(coords.par_chunks(stride * 4096))
        .for_each(|(o, c)| {
            for (o, r) in o
                .chunks_exact_mut(COARSE_STRIDE)
                .zip(c.chunks_exact(stride))
            {
                o.copy_from_slice(&r[..COARSE_STRIDE]);
            }
        });
    out
}

/// The score of one stored row against the query's in `space` (as [`scan::score_rows`]).
#[inline]
fn row_score(row: &[u8], q: &[u8; 64], space: Space) -> u32 {
    #[inline(always)]
    fn fixed<const S: usize>(row: &[u8], q: &[u8; 64], space: Space) -> u32 {
        let (Ok(r), Ok(q)) = (<&[u8; S]>::try_from(row), <&[u8; S]>::try_from(&q[..S])) else {
            return u32::MAX;
        };
        let d = |i: usize| u32::from(r[i].abs_diff(q[i]));
        match space {
            Space::L1 => (0..S).map(d).sum(),
            Space::L2 => (0..S).map(|i| d(i) * d(i)).sum(),
            Space::Linf => (0..S).map(d).max().unwrap_or(0),
        }
    }
    match row.len() {
        8 => fixed::<8>(row, q, space),
        16 => fixed::<16>(row, q, space),
        32 => fixed::<32>(row, q, space),
        64 => fixed::<64>(row, q, space),
        _ => u32::MAX,
    }
}

use crate::scan::{self, HIST_BINS};

impl<'a> Searcher<'a> {
    /// Prepares a searcher (collects the reference items' keys).
    pub fn new(index: &'a Index) -> Searcher<'a> {
        let refs = index
            .meta()
            .embedding
            .refs()
            .iter()
            .map(|&l| index.key(l as usize))
            .collect();
        Searcher {
            index,
            refs,
            keys: index.keys(),
            bound: index.bound(),
            coarse: std::sync::OnceLock::new(),
            coarse_factor: DEFAULT_COARSE_FACTOR,
            sigs: std::sync::OnceLock::new(),
            columns: std::sync::OnceLock::new(),
        }
    }

    /// Sets how many coarse-stage candidates are kept per candidate (0: no coarse stage).
    ///
    /// With a factor `f` and `C` candidates, the approximate path first ranks every item by
    /// its first [`COARSE_STRIDE`] coordinates (a compact copy that stays in cache), keeps
    /// the best `f · C`, ranks those by all coordinates and keeps the best `C`. The stage is
    /// skipped when the index has no more coordinates than that or `f · C` exceeds a
    /// quarter of the items.
    pub fn set_coarse_factor(&mut self, factor: usize) {
        self.coarse_factor = factor;
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
        prepare_any(self.index, query)
    }

    /// Coordinates of a prepared query, as stored (u8, quantised) and exact.
    fn embed(&self, q: &AnyQuery, small: &mut [u8; 64], exact: &mut [f32; 64]) -> Result<()> {
        let meta = self.index.meta();
        let mut dists = vec![0.0; self.refs.len()];
        q.distances(&self.refs, &mut dists);
        self.index.metric()?.check()?;
        let mut coords = [0f64; 64];
        meta.embedding.coords(&dists, &mut coords);
        for j in 0..meta.dim as usize {
            exact[j] = coords[j] as f32;
            small[j] = crate::embed::quantize(coords[j], meta.scale);
        }
        Ok(())
    }

    /// Finds approximate k nearest neighbours of `query`.
    pub fn search(&self, query: &str, p: &SearchParams, scratch: &mut Scratch) -> Result<Found> {
        if p.k == 0 {
            return Err(Error::Usage("-k must be at least 1".into()));
        }
        if p.candidates == 0 {
            return Err(Error::Usage("--candidates must be at least 1".into()));
        }
        let q = self.prepare(query)?;
        let mut small = [0u8; 64];
        let mut exact = [0f32; 64];
        self.embed(&q, &mut small, &mut exact)?;
        let n = self.index.len();
        let c = p.candidates.max(p.k).min(n);
        match p.source {
            CandidateSource::Scan => {
                self.scan_candidates(&small, c, p.space, scratch);
            }
            CandidateSource::Cells => {
                self.cells_candidates(&small, c, p.visit, p.space, scratch)?;
            }
            CandidateSource::Tree => {
                let tree = self.index.tree()?;
                let dim = self.index.meta().dim as usize;
                tree.nearest(&exact[..dim], c, p.space, &mut scratch.tree_out);
                scratch.picked.clear();
                scratch
                    .picked
                    .extend(scratch.tree_out.iter().map(|&(i, _)| (0, i)));
            }
        }
        self.finish(&q, &small, p.k, &scratch.picked)
    }

    /// Re-ranks the candidates picked for a query: in one batch for metrics that prefer
    /// batches, else one by one with pruning; the landmark distances are counted in.
    fn finish(
        &self,
        q: &AnyQuery,
        small: &[u8; 64],
        k: usize,
        picked: &[(u32, u32)],
    ) -> Result<Found> {
        let metric = self.index.metric()?;
        let mut found = if metric.prefers_batches() {
            self.rerank_batch(q, k, picked)
        } else if let Some(lq) = levenshtein(q).filter(|l| (1..=64).contains(&l.len())) {
            self.rerank_lanes(lq, k, picked)
        } else {
            self.rerank(q, small, k, picked)
        };
        metric.check()?;
        found.distances += self.refs.len();
        Ok(found)
    }

    /// Scores every item's coordinates against the query's and keeps the best `c`,
    /// nearest first, in `scratch.picked` as (score, item).
    fn scan_candidates(&self, q: &[u8; 64], c: usize, space: Space, s: &mut Scratch) {
        let n = self.index.len();
        let coords = self.index.coords();
        let stride = self.index.stride();
        let c1 = c.saturating_mul(self.coarse_factor);
        if self.coarse_factor > 0 && stride > COARSE_STRIDE && c1 < n / 4 {
            let coarse = self.coarse.get_or_init(|| coarse_rows(coords, stride));
            s.scores.resize(n, 0);
            s.hist.clear();
            s.hist.resize(HIST_BINS, 0);
            scan::score_rows(coarse, COARSE_STRIDE, q, space, &mut s.scores, &mut s.hist);
            select_best(&s.scores, c1, &s.hist, &mut s.picked);
            // Rank the coarse candidates by all coordinates; each row is fetched ahead.
            s.fine.clear();
            s.fine_hist.clear();
            s.fine_hist.resize(HIST_BINS, 0);
            const AHEAD: usize = 16;
            for j in 0..s.picked.len() {
                if let Some(&(_, f)) = s.picked.get(j + AHEAD) {
                    if let Some(r) = coords.get(f as usize * stride..(f as usize + 1) * stride) {
                        crate::prefetch(r.as_ptr());
                        crate::prefetch(r[stride - 1..].as_ptr());
                    }
                }
                let i = s.picked[j].1 as usize;
                let row = coords.get(i * stride..(i + 1) * stride).unwrap_or(&[]);
                let sc = row_score(row, q, space);
                s.fine.push(sc);
                s.fine_hist[(sc as usize).min(HIST_BINS - 1)] += 1;
            }
            select_best(&s.fine, c, &s.fine_hist, &mut s.fine_picked);
            for p in s.fine_picked.iter_mut() {
                p.1 = s.picked[p.1 as usize].1;
            }
            std::mem::swap(&mut s.picked, &mut s.fine_picked);
            return;
        }
        s.scores.resize(n, 0);
        s.hist.clear();
        s.hist.resize(HIST_BINS, 0);
        scan::score_rows(
            coords,
            self.index.stride(),
            q,
            space,
            &mut s.scores,
            &mut s.hist,
        );
        select_best(&s.scores, c, &s.hist, &mut s.picked);
    }

    /// Scores the rows of the cells nearest the query (cells in increasing distance of their
    /// centre, until `visit` rows) and keeps the best `c`, nearest first, in
    /// `scratch.picked` as (score, item). An index without cells is scanned whole.
    fn cells_candidates(
        &self,
        q: &[u8; 64],
        c: usize,
        visit: usize,
        space: Space,
        s: &mut Scratch,
    ) -> Result<()> {
        let Some(cells) = self.index.cells()? else {
            self.scan_candidates(q, c, space, s);
            return Ok(());
        };
        let n = self.index.len();
        let visit = if visit == 0 { n } else { visit.max(c).min(n) };
        let stride = self.index.stride();
        // Order enough cells for four times the average cell's share of `visit`; the rest
        // are ordered only if the visit gets to them.
        let first = (visit.saturating_mul(4) / (n / cells.len()).max(1)).saturating_add(8);
        cells.visit_order(q, first, &mut s.cell_order);
        s.hist.clear();
        s.hist.resize(HIST_BINS, 0);
        s.scores.clear();
        s.spans.clear();
        for j in 0..s.cell_order.len() {
            if j == first {
                s.cell_order[first..].sort_unstable();
            }
            let r = cells.cell(s.cell_order[j].1 as usize);
            if r.is_empty() {
                continue;
            }
            let at = s.scores.len();
            s.scores.resize(at + r.len(), 0);
            s.spans.push((at as u32, r.start as u32));
            let rows = cells.rows(r);
            scan::score_rows(rows, stride, q, space, &mut s.scores[at..], &mut s.hist);
            if s.scores.len() >= visit {
                break;
            }
        }
        select_best(&s.scores, c, &s.hist, &mut s.picked);
        // Scores are numbered in visiting order: back to cell positions, then to items
        // (the member table is read at scattered places: positions are made first and
        // fetched ahead).
        for p in s.picked.iter_mut() {
            let span = s.spans.partition_point(|&(at, _)| at <= p.1) - 1;
            let (at, start) = s.spans[span];
            p.1 = start + (p.1 - at);
        }
        const AHEAD: usize = 16;
        for j in 0..s.picked.len() {
            if let Some(&(_, ahead)) = s.picked.get(j + AHEAD) {
                cells.prefetch_member(ahead as usize);
            }
            let pos = s.picked[j].1 as usize;
            s.picked[j].1 = cells.member(pos);
        }
        Ok(())
    }

    /// Re-ranks candidates by the true distance asked for in one batch (for metrics whose
    /// every call is a round trip to another program).
    fn rerank_batch(&self, q: &AnyQuery, k: usize, cands: &[(u32, u32)]) -> Found {
        let items: Vec<&[u8]> = cands
            .iter()
            .map(|&(_, i)| self.keys.get(i as usize))
            .collect();
        let mut d = vec![0.0; items.len()];
        q.distances(&items, &mut d);
        let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
        for (&(_, i), &distance) in cands.iter().zip(&d) {
            keep_best(self.index, &mut best, k, Neighbor { index: i, distance });
        }
        Found {
            neighbors: best,
            distances: items.len(),
            pruned: 0,
            certificate: None,
        }
    }

    /// Re-ranks candidates by Levenshtein distance, [`LANE_GROUP`] at a time with the
    /// vector-lane kernel (eight items per AVX2 register). No candidate is pruned: one
    /// distance in a lane costs less than the cache miss of fetching the candidate's
    /// coordinate row for its bound. The next group's keys are prefetched while a group is
    /// measured. Same answers as [`Searcher::rerank`].
    fn rerank_lanes(&self, q: &LevenshteinQuery, k: usize, cands: &[(u32, u32)]) -> Found {
        let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
        let mut out = [0u32; LANE_GROUP];
        // Two-stage prefetch: a group's offsets two groups ahead, its bytes one group
        // ahead (reading an offset to prefetch the bytes needs the offset in cache).
        let groups: Vec<&[(u32, u32)]> = cands.chunks(LANE_GROUP).collect();
        for g in groups.iter().take(2) {
            for &(_, i) in *g {
                self.keys.prefetch_offsets(i as usize);
            }
        }
        for (at, group) in groups.iter().enumerate() {
            if let Some(next) = groups.get(at + 1) {
                for &(_, i) in *next {
                    self.keys.prefetch_bytes(i as usize);
                }
            }
            if let Some(later) = groups.get(at + 2) {
                for &(_, i) in *later {
                    self.keys.prefetch_offsets(i as usize);
                }
            }
            self.lane_batch(q, group.iter().map(|&(_, i)| i), &mut out);
            for (&(_, i), &d) in group.iter().zip(&out) {
                keep_best(
                    self.index,
                    &mut best,
                    k,
                    Neighbor {
                        index: i,
                        distance: f64::from(d),
                    },
                );
            }
        }
        Found {
            neighbors: best,
            distances: cands.len(),
            pruned: 0,
            certificate: None,
        }
    }

    /// The distances from `q` to `items` (at most [`LANE_GROUP`]), into the first slots of
    /// `out`, with the vector-lane kernel.
    fn lane_batch(&self, q: &LevenshteinQuery, items: impl Iterator<Item = u32>, out: &mut [u32]) {
        let mut keys: [&[u8]; LANE_GROUP] = [&[]; LANE_GROUP];
        let mut count = 0;
        for (slot, i) in keys.iter_mut().zip(items) {
            *slot = self.keys.get(i as usize);
            count += 1;
        }
        q.dist_batch(&keys[..count], &mut out[..count]);
    }

    /// Re-ranks candidates (in the order given) by the true distance.
    fn rerank(&self, q: &AnyQuery, small: &[u8; 64], k: usize, cands: &[(u32, u32)]) -> Found {
        let stride = self.index.stride();
        let coords = self.index.coords();
        let bound = self.bound;
        let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
        let mut distances = 0;
        let mut pruned = 0;
        const AHEAD: usize = 8;
        for &(_, i) in cands.iter().take(2 * AHEAD) {
            self.keys.prefetch_offsets(i as usize);
        }
        for (j, &(_, i)) in cands.iter().enumerate() {
            // Two-stage prefetch: offsets (and coordinates) 2·AHEAD ahead, item bytes
            // AHEAD ahead, once their offsets are in cache.
            if let Some(&(_, f)) = cands.get(j + 2 * AHEAD) {
                self.keys.prefetch_offsets(f as usize);
                if let Some(r) = coords.get(f as usize * stride..) {
                    crate::prefetch(r.as_ptr());
                }
            }
            if let Some(&(_, f)) = cands.get(j + AHEAD) {
                self.keys.prefetch_bytes(f as usize);
            }
            let iu = i as usize;
            let full = best.len() == k;
            let kth = if full {
                best[k - 1].distance
            } else {
                f64::INFINITY
            };
            if let (true, Some(b)) = (full, bound) {
                let row = coords.get(iu * stride..iu * stride + stride).unwrap_or(&[]);
                if b.lower(linf_bound(row, small)) > kth {
                    pruned += 1;
                    continue;
                }
            }
            distances += 1;
            let item = self.keys.get(iu);
            let d = if full {
                match q.distance_within(item, kth) {
                    Some(d) => d,
                    None => continue,
                }
            } else {
                q.distance(item)
            };
            keep_best(
                self.index,
                &mut best,
                k,
                Neighbor {
                    index: i,
                    distance: d,
                },
            );
        }
        Found {
            neighbors: best,
            distances,
            pruned,
            certificate: None,
        }
    }

    /// Exact k nearest neighbours of `query`: the same answer as a brute force over every
    /// item (same distances, ties ordered by id, then item index), with its [`Certificate`].
    ///
    /// Every item's L∞ lower bound is computed in one SIMD pass over the stored coordinates
    /// and counted in a histogram; items are then visited bucket by bucket in increasing
    /// bound, measured with the bounded kernel (bound: the current k-th distance), until the
    /// smallest remaining bound exceeds the k-th distance. In the bucket whose bound equals
    /// the k-th distance an item can only tie, so only items whose (id, index) sorts before
    /// the current k-th answer's are measured.
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
    /// for exact requests), without running a query.
    pub fn check(&self, req: &Request) -> Result<()> {
        let k = match *req {
            Request::Approximate(p) => {
                if p.candidates == 0 {
                    return Err(Error::Usage("--candidates must be at least 1".into()));
                }
                Some(p.k)
            }
            Request::Exact { k } => Some(k),
            Request::Within { radius, k } => {
                if !(radius >= 0.0 && radius.is_finite()) {
                    return Err(Error::Usage(format!(
                        "--within must be a finite distance of at least 0, not {radius}"
                    )));
                }
                k
            }
        };
        if k == Some(0) {
            return Err(Error::Usage("-k must be at least 1".into()));
        }
        if !matches!(req, Request::Approximate(_)) {
            self.require_bound()?;
        }
        Ok(())
    }

    /// Answers one request.
    pub fn answer(&self, query: &str, req: &Request, scratch: &mut Scratch) -> Result<Found> {
        match *req {
            Request::Approximate(p) => self.search(query, &p, scratch),
            Request::Exact { k } => {
                self.check(req)?;
                self.exact(query, Some(k), None)
            }
            Request::Within { radius, k } => {
                self.check(req)?;
                self.exact(query, k, Some(radius))
            }
        }
    }

    /// Answers many queries in parallel; answers come back in input order.
    pub fn answer_many(&self, queries: &[String], req: &Request) -> Vec<Result<Found>> {
        let (k, radius) = match *req {
            Request::Approximate(p) => return self.search_many(queries, &p),
            Request::Exact { k } => (Some(k), None),
            Request::Within { radius, k } => (k, Some(radius)),
        };
        if self.check(req).is_err() {
            // Every query gets the same error, as from one call each.
            return queries
                .par_iter()
                .map_init(Scratch::default, |s, q| self.answer(q, req, s))
                .collect();
        }
        let blocks: Vec<Vec<Result<Found>>> = queries
            .par_chunks(QUERY_BLOCK)
            .map(|block| self.exact_block(block, k, radius))
            .collect();
        blocks.into_iter().flatten().collect()
    }

    /// Exact answers for a block of queries, whose rounds share passes over the columns
    /// ([`Searcher::run_exact`]); a query the metric cannot take gets its own error.
    fn exact_block(
        &self,
        block: &[String],
        k: Option<usize>,
        radius: Option<f64>,
    ) -> Vec<Result<Found>> {
        let Ok(bound) = self.require_bound() else {
            return block.iter().map(|q| self.exact(q, k, radius)).collect();
        };
        let prepared: Vec<Result<(AnyQuery, [u8; 64])>> =
            block.iter().map(|q| self.prepare_small(q)).collect();
        let mut runs: Vec<ExactRun<'_>> = prepared
            .iter()
            .filter_map(|p| p.as_ref().ok())
            .map(|(q, small)| self.start_exact(q, small, bound, k, radius))
            .collect();
        let mut answers = self.run_exact(&mut runs).into_iter();
        let check = || -> Result<()> {
            self.index.metric()?.check()?;
            Ok(())
        };
        prepared
            .into_iter()
            .map(|p| {
                p?;
                let found = answers.next().expect("one answer per prepared query");
                check().map(|()| found)
            })
            .collect()
    }

    fn require_bound(&self) -> Result<Bound> {
        self.bound.ok_or_else(|| {
            Error::Usage(format!(
                "{}: exact answers need a lower bound of the true distance, and this index's \
                 {} embedding gives none (its coordinates are not contractive); \
                 leave out --exact and --within for approximate answers",
                self.index.path().display(),
                self.index.meta().embedding.name()
            ))
        })
    }

    /// The exact search behind [`Searcher::search_exact`] and [`Searcher::search_within`]:
    /// the `k` nearest (all when `None`) among items within `radius` (any when `None`).
    fn exact(&self, query: &str, k: Option<usize>, radius: Option<f64>) -> Result<Found> {
        let bound = self.require_bound()?;
        let (q, small) = self.prepare_small(query)?;
        let mut runs = [self.start_exact(&q, &small, bound, k, radius)];
        let found = self
            .run_exact(&mut runs)
            .pop()
            .expect("one answer per request");
        self.index.metric()?.check()?;
        Ok(found)
    }

    /// A prepared query and its stored (quantised) coordinates.
    fn prepare_small(&self, query: &str) -> Result<(AnyQuery, [u8; 64])> {
        let q = self.prepare(query)?;
        let mut small = [0u8; 64];
        let mut exact = [0f32; 64];
        self.embed(&q, &mut small, &mut exact)?;
        Ok((q, small))
    }

    /// Every key's char signature (7 MB of reads at 663k words, 5 MB made).
    fn signatures(&self) -> Vec<u64> {
        (0..self.index.len())
            .into_par_iter()
            .map(|i| LevenshteinQuery::signature(self.keys.get(i)))
            .collect()
    }

    /// Scores every stored row against each query row of `qs` in `space`, into
    /// `s[j].scores` and `s[j].hist` (as [`scan::score_rows`] does for one query).
    ///
    /// With several queries the rows are taken [`TILE_ROWS`] at a time and each tile is
    /// scored against every query before the next is read: the scores are the same as one
    /// [`scan::score_rows`] call per query, the coordinate table is read once per block.
    fn score_block(&self, qs: &[[u8; 64]], space: Space, s: &mut [Scratch]) {
        let n = self.index.len();
        let coords = self.index.coords();
        let stride = self.index.stride();
        for sc in s.iter_mut().take(qs.len()) {
            sc.scores.resize(n, 0);
            sc.hist.clear();
            sc.hist.resize(HIST_BINS, 0);
        }
        if let ([q], [sc, ..]) = (qs, &mut *s) {
            scan::score_rows(coords, stride, q, space, &mut sc.scores, &mut sc.hist);
            return;
        }
        let mut at = 0;
        while at < n {
            let end = (at + TILE_ROWS).min(n);
            let tile = &coords[at * stride..end * stride];
            for (q, sc) in qs.iter().zip(s.iter_mut()) {
                scan::score_rows(
                    tile,
                    stride,
                    q,
                    space,
                    &mut sc.scores[at..end],
                    &mut sc.hist,
                );
            }
            at = end;
        }
    }

    /// Whether the column blocks start with each key's char counts, and the bound takes
    /// signatures (Levenshtein indexes whose stored coordinates are whole distances: the
    /// count and signature bounds are in the same unit, edits).
    fn char_filters(&self) -> bool {
        matches!(self.index.meta().metric_spec, MetricSpec::Levenshtein)
            && self.bound.is_some_and(|b| b.whole)
    }

    /// The stored coordinates in column blocks ([`bounds::Columns`]), made on the first
    /// exact query (a copy of the coordinate section, plus 16 bytes of char counts per
    /// item for Levenshtein), with the char bins of the counts.
    fn columns(&self) -> &(bounds::Columns, Option<bounds::CharBins>) {
        self.columns.get_or_init(|| {
            let n = self.index.len();
            let bins = self
                .char_filters()
                .then(|| bounds::CharBins::fit((0..n).map(|i| self.keys.get(i))));
            let counts: Option<Vec<[u8; bounds::BINS]>> = bins.as_ref().map(|b| {
                (0..n)
                    .into_par_iter()
                    .map(|i| b.counts(self.keys.get(i)))
                    .collect()
            });
            let cols = bounds::Columns::build(bounds::Parts {
                coords: self.index.coords(),
                stride: self.index.stride(),
                dim: self.index.meta().dim as usize,
                counts: counts.as_deref(),
                sigs: bins.as_ref().map(|_| self.signatures()),
            });
            (cols, bins)
        })
    }

    /// Starts an exact request for a prepared query: the `k` nearest (all when `None`)
    /// among items within `radius` (any when `None`). [`Searcher::run_exact`] answers it.
    fn start_exact<'q>(
        &self,
        q: &'q AnyQuery,
        small: &[u8; 64],
        bound: Bound,
        k: Option<usize>,
        radius: Option<f64>,
    ) -> ExactRun<'q> {
        let cap = bound_cap(bound, radius) as u8;
        let mut qv: Vec<u8> = Vec::with_capacity(bounds::BINS + 64);
        let (_, bins) = self.columns();
        let lev = levenshtein(q);
        if let (Some(b), Some(l)) = (bins, lev) {
            qv.extend_from_slice(&b.query_counts(l));
        }
        qv.extend_from_slice(&small[..self.index.meta().dim as usize]);
        let sig = match lev {
            Some(l) if bins.is_some() => l.signature_of_query(),
            _ => 0,
        };
        ExactRun {
            q,
            qv,
            sig,
            bound,
            k,
            r: radius.unwrap_or(f64::INFINITY),
            cap,
            lo: None,
            hi: if k.is_some() {
                cap.min(FIRST_THRESHOLD)
            } else {
                cap
            },
            stopped: None,
            done: false,
            best: Vec::new(),
            cert: Certificate::default(),
            buckets: Vec::new(),
            lane_at: Vec::new(),
            lane_out: Vec::new(),
        }
    }

    /// Answers exact requests started by [`Searcher::start_exact`], together.
    ///
    /// In rounds, [`bounds::Columns::within_many`] collects for every request not yet done
    /// the items whose stored bound lies in its range `(lo, hi]`, by bound, in one pass over
    /// the columns shared by all of them; each request then visits its items bound by bound,
    /// smallest first ([`Searcher::visit_round`]). A k-NN request starts with
    /// `hi` = [`FIRST_THRESHOLD`]; each later round reaches the bound that the k-th distance
    /// found so far allows (or two more when fewer than k are held).
    fn run_exact(&self, runs: &mut [ExactRun<'_>]) -> Vec<Found> {
        let (cols, _) = self.columns();
        // Signatures checked item by item: Levenshtein indexes whose columns lack them.
        let levenshtein_index = matches!(self.index.meta().metric_spec, MetricSpec::Levenshtein);
        let sigs: &[u64] = match levenshtein_index && !self.char_filters() {
            true => self.sigs.get_or_init(|| self.signatures()),
            false => &[],
        };
        loop {
            let active: Vec<usize> = (0..runs.len()).filter(|&j| !runs[j].done).collect();
            if active.is_empty() {
                break;
            }
            for &j in &active {
                let run = &mut runs[j];
                for b in run.buckets.iter_mut() {
                    b.clear();
                }
                run.buckets.resize_with(usize::from(run.hi) + 1, Vec::new);
            }
            let mut buckets: Vec<Vec<Vec<u32>>> = active
                .iter()
                .map(|&j| std::mem::take(&mut runs[j].buckets))
                .collect();
            {
                let ts: Vec<bounds::Threshold<'_>> = active
                    .iter()
                    .map(|&j| bounds::Threshold {
                        q: &runs[j].qv,
                        lo: runs[j].lo,
                        hi: runs[j].hi,
                        sig: runs[j].sig,
                    })
                    .collect();
                cols.within_many(&ts, |a, i, b| buckets[a][usize::from(b)].push(i));
            }
            for (&j, b) in active.iter().zip(buckets) {
                runs[j].buckets = b;
            }
            for &j in &active {
                self.visit_round(&mut runs[j], sigs);
            }
        }
        runs.iter_mut().map(|run| self.finish_exact(run)).collect()
    }

    /// Visits the items one round collected for `run`, bound by bound, and sets the next
    /// round's range or marks the request done.
    ///
    /// Each item is measured with the query's bounded distance (bound: the k-th distance
    /// or the radius), for any metric; a Levenshtein query of 1 ..= 64 chars first drops
    /// items whose char-signature gap exceeds it, and measures the rest [`LANE_GROUP`] at
    /// a time with the vector-lane kernel, flushed at the end of each bound so the stopping
    /// rule sees the true k-th distance.
    fn visit_round(&self, run: &mut ExactRun<'_>, sigs: &[u64]) {
        let keep = run.k.unwrap_or(usize::MAX);
        let k = run.k;
        let r = run.r;
        let q = run.q;
        let lev = levenshtein(q);
        let lanes = lev.filter(|l| (1..=64).contains(&l.len()));
        // The columns fold the signature gap into the bound when they hold signatures;
        // otherwise it is applied here, item by item.
        let qsig = lev
            .filter(|_| !self.char_filters())
            .map(|l| l.signature_of_query());
        let kth_of = |best: &Vec<Neighbor>| {
            if best.len() == keep {
                best[keep - 1].distance
            } else {
                f64::INFINITY
            }
        };
        let ExactRun {
            bound,
            best,
            cert,
            buckets,
            lane_at,
            lane_out,
            ..
        } = run;
        let bound = *bound;
        let from = run.lo.map_or(0, |l| usize::from(l) + 1);
        for (b, items) in buckets
            .iter()
            .enumerate()
            .take(usize::from(run.hi) + 1)
            .skip(from)
        {
            let lb = bound.lower(b as u8);
            if lb > r || lb > kth_of(best) {
                run.stopped = Some(b as u8);
                run.done = true;
                return;
            }
            for &i in items {
                cert.examined += 1;
                // With items waiting in lanes this k-th distance may be larger than the
                // true one: the tests below then keep more items, never fewer.
                let kth = kth_of(best);
                let limit = kth.min(r);
                let mut item_lb = lb;
                if let Some(qs) = qsig {
                    let sig = sigs.get(i as usize).copied().unwrap_or(u64::MAX);
                    item_lb = item_lb.max(f64::from(LevenshteinQuery::signature_gap(qs, sig)));
                    if item_lb > limit {
                        continue;
                    }
                }
                if item_lb >= kth {
                    // Equal bound and k-th distance: at best a tie, which only an
                    // (id, index) before the k-th answer's wins.
                    let tie = Neighbor {
                        index: i,
                        distance: kth,
                    };
                    if !before(self.index, &tie, &best[keep - 1]) {
                        continue;
                    }
                }
                if let Some(lq) = lanes {
                    lane_at.push(i);
                    if lane_at.len() == LANE_GROUP {
                        self.flush_lanes(lq, lane_at, lane_out, best, k, r, cert);
                    }
                    continue;
                }
                let item = self.keys.get(i as usize);
                cert.computed += 1;
                let d = if limit.is_finite() {
                    match q.distance_within(item, limit) {
                        Some(d) => d,
                        None => continue,
                    }
                } else {
                    q.distance(item)
                };
                let found = Neighbor {
                    index: i,
                    distance: d,
                };
                if k.is_some() {
                    keep_best(self.index, best, keep, found);
                } else {
                    best.push(found);
                }
            }
            // The next bound's test needs the true k-th distance.
            if let Some(lq) = lanes {
                self.flush_lanes(lq, lane_at, lane_out, best, k, r, cert);
            }
        }
        if run.hi >= run.cap {
            run.done = true;
            return;
        }
        let next = if best.len() == keep {
            bound.max_diff_within(kth_of(best)).min(run.cap)
        } else {
            run.hi.saturating_add(2).min(run.cap)
        };
        if next <= run.hi {
            run.stopped = Some(run.hi + 1);
            run.done = true;
            return;
        }
        run.lo = Some(run.hi);
        run.hi = next;
    }

    /// The answer of a finished exact request, with its certificate.
    fn finish_exact(&self, run: &mut ExactRun<'_>) -> Found {
        let n = self.index.len();
        let mut best = std::mem::take(&mut run.best);
        if run.k.is_none() {
            best.sort_unstable_by(|a, b| {
                if before(self.index, a, b) {
                    std::cmp::Ordering::Less
                } else if before(self.index, b, a) {
                    std::cmp::Ordering::Greater
                } else {
                    std::cmp::Ordering::Equal
                }
            });
        }
        let mut cert = run.cert;
        // Every item not examined has a bound of at least the first bound not visited (when
        // the visit covered every bound up to `cap`, the next one above it).
        let stopped = run.stopped.or(run.cap.checked_add(1));
        cert.bound = stopped
            .filter(|_| cert.examined < n)
            .map(|b| run.bound.lower(b));
        Found {
            neighbors: best,
            distances: self.refs.len() + cert.computed,
            pruned: n - cert.examined,
            certificate: Some(cert),
        }
    }

    /// Measures the items gathered in `at` with the vector-lane kernel and keeps those that
    /// belong to the answer (within `r`; the `k` best when `k` is given); empties `at`.
    #[allow(clippy::too_many_arguments)]
    fn flush_lanes(
        &self,
        q: &LevenshteinQuery,
        at: &mut Vec<u32>,
        out: &mut Vec<u32>,
        best: &mut Vec<Neighbor>,
        k: Option<usize>,
        r: f64,
        cert: &mut Certificate,
    ) {
        if at.is_empty() {
            return;
        }
        let count = at.len().min(LANE_GROUP);
        out.clear();
        out.resize(count, 0);
        self.lane_batch(q, at.iter().copied(), out);
        cert.computed += count;
        for (&i, &d) in at.iter().zip(out.iter()) {
            let d = f64::from(d);
            if d > r {
                continue;
            }
            let found = Neighbor {
                index: i,
                distance: d,
            };
            match k {
                Some(k) => keep_best(self.index, best, k, found),
                None => best.push(found),
            }
        }
        at.clear();
    }

    /// Runs many queries in parallel; answers come back in input order.
    ///
    /// With the scan source, queries are taken in blocks of 16 whose coordinates are scored
    /// together in one pass over the stored rows; answers are those of [`Searcher::search`].
    pub fn search_many(&self, queries: &[String], p: &SearchParams) -> Vec<Result<Found>> {
        // Cells touch a small part of the rows: each query goes on its own.
        let blocked = p.k > 0
            && p.candidates > 0
            && p.source == CandidateSource::Scan
            && !self.coarse_on(p.candidates.max(p.k).min(self.index.len()));
        if !blocked {
            return queries
                .par_iter()
                .map_init(Scratch::default, |s, q| self.search(q, p, s))
                .collect();
        }
        let blocks: Vec<Vec<Result<Found>>> = queries
            .par_chunks(QUERY_BLOCK)
            .map_init(Vec::new, |s, block| self.search_block(block, p, s))
            .collect();
        blocks.into_iter().flatten().collect()
    }

    /// Whether [`Searcher::scan_candidates`] takes its coarse stage for `c` candidates.
    fn coarse_on(&self, c: usize) -> bool {
        let c1 = c.saturating_mul(self.coarse_factor);
        self.coarse_factor > 0 && self.index.stride() > COARSE_STRIDE && c1 < self.index.len() / 4
    }

    /// Approximate answers for a block of queries (scan source, no coarse stage): candidates
    /// from one tiled pass ([`Searcher::score_block`]), then as [`Searcher::search`].
    fn search_block(
        &self,
        block: &[String],
        p: &SearchParams,
        s: &mut Vec<Scratch>,
    ) -> Vec<Result<Found>> {
        let Ok(prepared) = block
            .iter()
            .map(|q| self.prepare_small(q))
            .collect::<Result<Vec<(AnyQuery, [u8; 64])>>>()
        else {
            // A query the metric cannot take: one at a time, so each gets its own answer.
            return block
                .iter()
                .map(|q| self.search(q, p, &mut Scratch::default()))
                .collect();
        };
        let smalls: Vec<[u8; 64]> = prepared.iter().map(|p| p.1).collect();
        if s.len() < block.len() {
            s.resize_with(block.len(), Scratch::default);
        }
        self.score_block(&smalls, p.space, s);
        let c = p.candidates.max(p.k).min(self.index.len());
        prepared
            .iter()
            .zip(s.iter_mut())
            .map(|((q, small), sc)| {
                select_best(&sc.scores, c, &sc.hist, &mut sc.picked);
                self.finish(q, small, p.k, &sc.picked)
            })
            .collect()
    }
}

/// The largest stored L∞ difference an item within `radius` can have (255: any).
fn bound_cap(bound: Bound, radius: Option<f64>) -> usize {
    usize::from(match radius {
        Some(r) if r.is_finite() => bound.max_diff_within(r),
        _ => u8::MAX,
    })
}

/// What a query asks for.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Request {
    /// Approximate k-NN ([`Searcher::search`]).
    Approximate(SearchParams),
    /// Exact k-NN ([`Searcher::search_exact`]).
    Exact {
        /// Number of neighbours.
        k: usize,
    },
    /// Every item within a distance, or the k nearest of them ([`Searcher::search_within`]).
    Within {
        /// The largest distance returned.
        radius: f64,
        /// At most this many answers (the nearest), or all.
        k: Option<usize>,
    },
}

/// The Levenshtein query inside `q`, for the fast paths that need the kernel itself.
fn levenshtein(q: &AnyQuery) -> Option<&LevenshteinQuery> {
    match q {
        AnyQuery::Levenshtein(l) => Some(l),
        _ => None,
    }
}

/// Prepares `query` for `index`'s metric (see [`Searcher::prepare`]).
pub(crate) fn prepare_any(index: &Index, query: &str) -> Result<AnyQuery> {
    let metric = index.metric()?;
    let meta = index.meta();
    let key: Vec<u8> = match &meta.metric_spec {
        MetricSpec::Vector { dim, .. } => {
            let v = crate::ingest::parse_vector(query, *dim as usize).map_err(Error::Usage)?;
            vector_bytes(&v)
        }
        MetricSpec::Graph => {
            if let AnyMetric::Graph(g) = metric {
                if g.graph().node(query.as_bytes()).is_none() {
                    return Err(Error::Usage(format!(
                        "`{query}` is not a node of the graph"
                    )));
                }
            }
            query.as_bytes().to_vec()
        }
        MetricSpec::Hamming { length } => {
            let key = meta.normalize.apply(query);
            let n = key.chars().count() as u64;
            if n != *length {
                return Err(Error::Usage(format!(
                    "the query has {n} characters; Hamming distance needs the items' length, {length}"
                )));
            }
            key.into_owned().into_bytes()
        }
        _ => meta.normalize.apply(query).into_owned().into_bytes(),
    };
    Ok(metric.prepare(&key))
}

/// Prepares `query` for the Levenshtein fast paths: its normalisation, then the kernel's
/// masks (whatever the index's metric; callers check it is Levenshtein).
pub(crate) fn prepare_query(index: &Index, query: &str) -> LevenshteinQuery {
    let key = index.meta().normalize.apply(query);
    Levenshtein.prepare(key.as_bytes())
}

/// Whether `a` comes before `b` in answers: by distance, then id, then item index. The one
/// place that defines the order of answers.
#[inline]
pub(crate) fn before(index: &Index, a: &Neighbor, b: &Neighbor) -> bool {
    match a.distance.total_cmp(&b.distance) {
        std::cmp::Ordering::Equal => {
            (index.id(a.index as usize), a.index) < (index.id(b.index as usize), b.index)
        }
        o => o.is_lt(),
    }
}

/// Inserts `cand` into `best` (at most `k` answers, in the order of [`before`]) if it
/// belongs there.
pub(crate) fn keep_best(index: &Index, best: &mut Vec<Neighbor>, k: usize, cand: Neighbor) {
    if best.len() == k && !before(index, &cand, &best[k - 1]) {
        return;
    }
    let pos = best.partition_point(|b| before(index, b, &cand));
    best.insert(pos, cand);
    best.truncate(k);
}

/// Picks the `c` smallest scores, ordered by (score, item), into `picked` as (score, item).
///
/// `hist` is the counting histogram of the scores that [`scan::score_rows`] filled in the
/// same pass: it gives the score of the c-th best at once, and a counting sort over the bins
/// up to it collects the candidates already in order, in one more pass and without a heap.
/// Scores above the histogram's range share its last bin, which is sorted when it is used.
pub fn select_best(scores: &[u32], c: usize, hist: &[u32], picked: &mut Vec<(u32, u32)>) {
    picked.clear();
    if c == 0 || scores.is_empty() {
        return;
    }
    let mut seen = 0usize;
    let mut cut = HIST_BINS - 1;
    for (b, &h) in hist.iter().enumerate() {
        seen += h as usize;
        if seen >= c {
            cut = b;
            break;
        }
    }
    // Start of each bin up to the cut in the output.
    let mut start: Vec<u32> = Vec::with_capacity(cut + 1);
    let mut acc = 0u32;
    for &h in &hist[..=cut] {
        start.push(acc);
        acc += h;
    }
    picked.resize(acc as usize, (0, 0));
    let last_bin = (HIST_BINS - 1) as u32;
    let cut = cut as u32;
    for (i, &sc) in scores.iter().enumerate() {
        let b = sc.min(last_bin);
        if b <= cut {
            let slot = &mut start[b as usize];
            picked[*slot as usize] = (sc, i as u32);
            *slot += 1;
        }
    }
    if cut == last_bin {
        // The overflow bin holds different scores: order it.
        let from = acc as usize - hist[last_bin as usize] as usize;
        picked[from..].sort_unstable();
    }
    picked.truncate(c);
}

/// L∞ distance of a u8 coordinate row and the query's: the lower bound of the true distance.
#[inline]
fn linf_bound(row: &[u8], q: &[u8; 64]) -> u8 {
    #[inline(always)]
    fn fixed<const S: usize>(row: &[u8], q: &[u8; 64]) -> u8 {
        let (Ok(r), Ok(q)) = (<&[u8; S]>::try_from(row), <&[u8; S]>::try_from(&q[..S])) else {
            return 0;
        };
        let mut m = 0u8;
        for i in 0..S {
            m = m.max(r[i].abs_diff(q[i]));
        }
        m
    }
    match row.len() {
        8 => fixed::<8>(row, q),
        16 => fixed::<16>(row, q),
        32 => fixed::<32>(row, q),
        64 => fixed::<64>(row, q),
        _ => 0,
    }
}
