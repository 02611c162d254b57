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
//! - **scan** (default): one pass over the compact u8 coordinates, scored with SIMD, and
//!   the best `C` picked with a counting histogram instead of a heap (coordinates are small
//!   integers, so scores are too);
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
use crate::index::Index;
use crate::metric::{Levenshtein, LevenshteinQuery, Metric, PreparedQuery};

/// Default embedding dimension, chosen from `benches/end_to_end.rs` (see the README).
pub const DEFAULT_DIM: usize = 32;
/// Default number of candidates re-ranked per query, chosen from the same bench.
pub const DEFAULT_CANDIDATES: usize = 2000;

/// The space in which candidates are ranked by their landmark coordinates.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Space {
    /// Sum of coordinate differences.
    L1,
    /// Euclidean distance of the coordinates.
    #[default]
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
    landmarks: Vec<&'a [u8]>,
}

const HIST_BINS: usize = 1 << 14;

impl<'a> Searcher<'a> {
    /// Prepares a searcher (collects the landmark keys).
    pub fn new(index: &'a Index) -> Searcher<'a> {
        let landmarks = index
            .meta()
            .landmarks
            .iter()
            .map(|&l| index.key(l as usize))
            .collect();
        Searcher { index, landmarks }
    }

    /// The index searched.
    pub fn index(&self) -> &'a Index {
        self.index
    }

    /// Prepares a query: applies the index's normalisation and builds the kernel's masks.
    pub fn prepare(&self, query: &str) -> LevenshteinQuery {
        let key = self.index.meta().normalize.apply(query);
        Levenshtein.prepare(key.as_bytes())
    }

    /// Landmark coordinates of a prepared query, as stored (u8, saturated) and exact.
    fn embed(&self, q: &LevenshteinQuery, small: &mut [u8; 64], exact: &mut [f32; 64]) {
        for (j, l) in self.landmarks.iter().enumerate() {
            let d = q.distance(l);
            exact[j] = d as f32;
            small[j] = d.clamp(0.0, 255.0) as u8;
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
                let dim = self.landmarks.len();
                tree.nearest(&exact[..dim], c, p.space, &mut scratch.tree_out);
                scratch.picked.clear();
                scratch
                    .picked
                    .extend(scratch.tree_out.iter().map(|&(i, _)| (0, i)));
            }
        }
        let mut found = self.rerank(&q, &small, p.k, &scratch.picked);
        found.distances += self.landmarks.len();
        Ok(found)
    }

    /// Scores every item's coordinates against the query's and keeps the best `c`,
    /// nearest first, in `scratch.picked` as (score, item).
    fn scan_candidates(&self, q: &[u8; 64], c: usize, space: Space, s: &mut Scratch) {
        let n = self.index.len();
        let coords = self.index.coords();
        s.scores.resize(n, 0);
        score_all(coords, self.index.stride(), q, space, &mut s.scores);
        select_best(&s.scores, c, &mut s.hist, &mut s.picked);
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
        let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
        let mut distances = 0;
        let mut pruned = 0;
        for &(_, i) in cands {
            let iu = i as usize;
            let full = best.len() == k;
            let kth = if full {
                best[k - 1].distance
            } else {
                f64::INFINITY
            };
            if full {
                let row = coords.get(iu * stride..iu * stride + stride).unwrap_or(&[]);
                let lb = row
                    .iter()
                    .zip(small.iter())
                    .fold(0u8, |m, (a, b)| m.max(a.abs_diff(*b)));
                if f64::from(lb) > kth {
                    pruned += 1;
                    continue;
                }
            }
            distances += 1;
            let item = self.index.key(iu);
            let d = if full {
                match q.distance_within(item, kth) {
                    Some(d) => d,
                    None => continue,
                }
            } else {
                q.distance(item)
            };
            let cand = Neighbor {
                index: i,
                distance: d,
            };
            if full && !self.before(&cand, &best[k - 1]) {
                continue;
            }
            let pos = best.partition_point(|b| self.before(b, &cand));
            best.insert(pos, cand);
            best.truncate(k);
        }
        Found {
            neighbors: best,
            distances,
            pruned,
        }
    }

    /// Order of answers: by distance, then by id.
    fn before(&self, a: &Neighbor, b: &Neighbor) -> bool {
        match a.distance.total_cmp(&b.distance) {
            std::cmp::Ordering::Less => true,
            std::cmp::Ordering::Greater => false,
            std::cmp::Ordering::Equal => {
                (self.index.id(a.index as usize), a.index)
                    < (self.index.id(b.index as usize), b.index)
            }
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

/// Scores every row of `coords` (row length `stride`) against `q` in `space`.
///
/// Hand-written dispatch because the gain comes from the CPU's wider vector units, which
/// the portable build cannot assume: the same plain loop is compiled once for the baseline
/// and once with AVX2 enabled, and the AVX2 one is chosen at run time when available.
pub fn score_all(coords: &[u8], stride: usize, q: &[u8; 64], space: Space, out: &mut [u32]) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU supports AVX2, checked on the line above.
            unsafe { score_all_avx2(coords, stride, q, space, out) };
            return;
        }
    }
    score_all_portable(coords, stride, q, space, out);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn score_all_avx2(
    coords: &[u8],
    stride: usize,
    q: &[u8; 64],
    space: Space,
    out: &mut [u32],
) {
    score_all_portable(coords, stride, q, space, out)
}

#[inline(always)]
fn score_all_portable(coords: &[u8], stride: usize, q: &[u8; 64], space: Space, out: &mut [u32]) {
    match stride {
        8 => score_rows::<8>(coords, q, space, out),
        16 => score_rows::<16>(coords, q, space, out),
        32 => score_rows::<32>(coords, q, space, out),
        _ => score_rows::<64>(coords, q, space, out),
    }
}

#[inline(always)]
fn score_rows<const S: usize>(coords: &[u8], q: &[u8; 64], space: Space, out: &mut [u32]) {
    let q: &[u8; S] = q[..S].try_into().expect("S <= 64");
    let rows = coords.chunks_exact(S).zip(out.iter_mut());
    match space {
        Space::L1 => rows.for_each(|(r, o)| {
            let r: &[u8; S] = r.try_into().expect("row of S bytes");
            let mut s = 0u16;
            for i in 0..S {
                s += u16::from(r[i].abs_diff(q[i]));
            }
            *o = u32::from(s);
        }),
        Space::L2 => rows.for_each(|(r, o)| {
            let r: &[u8; S] = r.try_into().expect("row of S bytes");
            let mut s = 0u32;
            for i in 0..S {
                let d = u32::from(r[i].abs_diff(q[i]));
                s += d * d;
            }
            *o = s;
        }),
        Space::Linf => rows.for_each(|(r, o)| {
            let r: &[u8; S] = r.try_into().expect("row of S bytes");
            let mut m = 0u8;
            for i in 0..S {
                m = m.max(r[i].abs_diff(q[i]));
            }
            *o = u32::from(m);
        }),
    }
}

/// Picks the `c` smallest scores, ordered by (score, item), into `picked` as (score, item).
///
/// A counting histogram finds the score of the c-th best in one pass; only items at or
/// below it are collected and sorted. Scores above the histogram's range share its last bin.
pub fn select_best(scores: &[u32], c: usize, hist: &mut Vec<u32>, picked: &mut Vec<(u32, u32)>) {
    picked.clear();
    if c == 0 {
        return;
    }
    hist.clear();
    hist.resize(HIST_BINS, 0);
    for &s in scores {
        hist[(s as usize).min(HIST_BINS - 1)] += 1;
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
    let cut = cut as u32;
    let last_bin = (HIST_BINS - 1) as u32;
    picked.extend(
        scores
            .iter()
            .enumerate()
            .filter(|(_, &s)| s.min(last_bin) <= cut)
            .map(|(i, &s)| (s, i as u32)),
    );
    if picked.len() > c {
        picked.select_nth_unstable(c - 1);
        picked.truncate(c);
    }
    picked.sort_unstable();
}
