//! Approximate k-NN: candidates by embedded distance, re-ranked by the true distance.
//!
//! A query is embedded (one distance per landmark), then `C` candidates are taken by their
//! distance in landmark coordinates — L1, L2 or L∞ — and re-ranked with the bounded kernel.
//! Candidates are visited nearest first; once `k` answers are held, a candidate whose L∞
//! lower bound exceeds the current k-th distance is skipped without any distance computed,
//! and the others are compared with the k-th distance as the kernel's bound.
//!
//! Candidates come from one of two sources, both measured by `benches/end_to_end.rs`:
//!
//! - **scan** (default): one pass over the compact u8 coordinates, scored with AVX2
//!   ([`crate::scan`]), and the best `C` picked with a counting histogram filled in the same
//!   pass instead of a heap (coordinates are small integers, so scores are too);
//! - **tree**: kiddo's exact `nearest_n` on the stored kd-tree over the f32 coordinates.
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
//! # Ok::<(), waymark::Error>(())
//! ```

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::index::{Index, StrTable};
use crate::metric::{Levenshtein, LevenshteinQuery, Metric, PreparedQuery};

/// Default embedding dimension, chosen from `benches/end_to_end.rs` (see the README).
pub const DEFAULT_DIM: usize = 64;
/// Default number of candidates re-ranked per query, chosen from the same bench.
pub const DEFAULT_CANDIDATES: usize = 1000;

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
}

impl SearchParams {
    /// The index's stored defaults with `k` neighbours.
    pub fn from_index(index: &Index, k: usize) -> SearchParams {
        SearchParams {
            k,
            candidates: index.meta().candidates as usize,
            space: index.meta().space,
            source: CandidateSource::Scan,
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
}

/// Per-thread working memory, reused across queries.
#[derive(Default)]
pub struct Scratch {
    scores: Vec<u32>,
    hist: Vec<u32>,
    picked: Vec<(u32, u32)>,
    tree_out: Vec<(u32, f32)>,
}

/// Runs queries against one index.
pub struct Searcher<'a> {
    index: &'a Index,
    /// Keys of the reference items a query is measured against.
    refs: Vec<&'a [u8]>,
    keys: StrTable<'a>,
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
        }
    }

    /// The index searched.
    pub fn index(&self) -> &'a Index {
        self.index
    }

    /// Prepares a query: applies the index's normalisation and builds the kernel's masks.
    pub fn prepare(&self, query: &str) -> LevenshteinQuery {
        prepare_query(self.index, query)
    }

    /// Coordinates of a prepared query, as stored (u8, quantised) and exact.
    fn embed(&self, q: &LevenshteinQuery, small: &mut [u8; 64], exact: &mut [f32; 64]) {
        let meta = self.index.meta();
        let dists: Vec<f64> = self.refs.iter().map(|r| q.distance(r)).collect();
        let mut coords = [0f64; 64];
        meta.embedding.coords(&dists, &mut coords);
        for j in 0..meta.dim as usize {
            exact[j] = coords[j] as f32;
            small[j] = crate::embed::quantize(coords[j], meta.scale);
        }
    }

    /// Finds approximate k nearest neighbours of `query`.
    pub fn search(&self, query: &str, p: &SearchParams, scratch: &mut Scratch) -> Result<Found> {
        if p.k == 0 {
            return Err(Error::Usage("-k must be at least 1".into()));
        }
        if p.candidates == 0 {
            return Err(Error::Usage("--candidates must be at least 1".into()));
        }
        let q = self.prepare(query);
        let mut small = [0u8; 64];
        let mut exact = [0f32; 64];
        self.embed(&q, &mut small, &mut exact);
        let n = self.index.len();
        let c = p.candidates.max(p.k).min(n);
        match p.source {
            CandidateSource::Scan => {
                self.scan_candidates(&small, c, p.space, scratch);
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
        let mut found = self.rerank(&q, &small, p.k, &scratch.picked);
        found.distances += self.refs.len();
        Ok(found)
    }

    /// Scores every item's coordinates against the query's and keeps the best `c`,
    /// nearest first, in `scratch.picked` as (score, item).
    fn scan_candidates(&self, q: &[u8; 64], c: usize, space: Space, s: &mut Scratch) {
        let n = self.index.len();
        let coords = self.index.coords();
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

    /// Re-ranks candidates (in the order given) by the true distance.
    fn rerank(
        &self,
        q: &LevenshteinQuery,
        small: &[u8; 64],
        k: usize,
        cands: &[(u32, u32)],
    ) -> Found {
        let stride = self.index.stride();
        let coords = self.index.coords();
        let bound = self.index.bound();
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
        }
    }

    /// Runs many queries in parallel; answers come back in input order.
    pub fn search_many(&self, queries: &[String], p: &SearchParams) -> Vec<Result<Found>> {
        queries
            .par_iter()
            .map_init(Scratch::default, |s, q| self.search(q, p, s))
            .collect()
    }
}

/// Prepares `query` for `index`: its normalisation, then the kernel's masks.
pub(crate) fn prepare_query(index: &Index, query: &str) -> LevenshteinQuery {
    let key = index.meta().normalize.apply(query);
    Levenshtein.prepare(key.as_bytes())
}

/// Inserts `cand` into `best` (at most `k` answers, ordered by distance, then id, then item
/// index) if it belongs there. The one place that defines the order of answers.
pub(crate) fn keep_best(index: &Index, best: &mut Vec<Neighbor>, k: usize, cand: Neighbor) {
    let before = |a: &Neighbor, b: &Neighbor| match a.distance.total_cmp(&b.distance) {
        std::cmp::Ordering::Equal => {
            (index.id(a.index as usize), a.index) < (index.id(b.index as usize), b.index)
        }
        o => o.is_lt(),
    };
    if best.len() == k && !before(&cand, &best[k - 1]) {
        return;
    }
    let pos = best.partition_point(|b| before(b, &cand));
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
