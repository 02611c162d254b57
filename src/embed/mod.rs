//! The embedding stage: every item becomes a short vector of real coordinates computed from
//! its true distances to a few reference items.
//!
//! Three methods ([`Method`]), chosen at build time and recorded in the index ([`Embedding`]):
//!
//! - **landmarks**: `x ↦ (d(x, l_1), …, d(x, l_d))` for `d` landmark items chosen
//!   farthest-first (max-min) from a random sample. By the triangle inequality
//!   `|d(q, l) − d(x, l)| ≤ d(q, x)`, so the L∞ distance of two coordinate vectors never exceeds
//!   the true distance (contractive): search uses it as a lower bound.
//! - **refsets**: Bourgain-style reference sets (Bourgain 1985; Linial, London, Rabinovich
//!   1995): coordinate `j` is the distance to a random set `S_j`, `min_{s∈S_j} d(x, s)`, with
//!   sets of sizes 1, 2, 4, … taken in turn. Distance to a set is 1-Lipschitz too, so the
//!   embedding is contractive in L∞. The sets are drawn from a bounded pool of reference items:
//!   embedding a query costs one distance per pool member ([`refsets`]).
//! - **fastmap**: FastMap (Faloutsos & Lin 1995), a projection into L2 onto lines through
//!   pairs of far-apart pivot items, each axis in the residual space of the previous ones. Not
//!   contractive in general, so search does not prune with it ([`fastmap`]).
//!
//! For every method the first `j` coordinates of a `d`-dimensional embedding are themselves a
//! valid `j`-dimensional embedding of the same method ([`Embedded::prefix`]), which is what lets
//! a sweep over dimensions compute the largest embedding once.
//!
//! ```
//! use waymark::embed::{choose_landmarks, LandmarkOptions};
//! use waymark::metric::Levenshtein;
//!
//! let items: Vec<&[u8]> = vec![b"quay", b"quays", b"strand", b"orvane", b"orvanes"];
//! let landmarks = choose_landmarks(&Levenshtein, &items, &LandmarkOptions { dim: 2, sample: 100, seed: 7 });
//! assert_eq!(landmarks.len(), 2);
//! assert_ne!(landmarks[0], landmarks[1]);
//! ```

use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use serde::{Deserialize, Serialize};

use crate::metric::{Metric, PreparedQuery};

pub mod fastmap;
pub mod refsets;

pub use fastmap::FastMapAxis;

/// The largest embedding dimension an index supports.
pub const MAX_DIM: usize = 64;

/// The largest number of reference items an index may ask a query to be measured against
/// (a larger list in a file is refused as crafted).
pub const MAX_REFS: usize = 4096;

/// Default size of the reference-set pool, chosen from `benches/sweep.rs` (see the README).
pub const DEFAULT_POOL: usize = 32;

/// How landmarks are chosen.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LandmarkOptions {
    /// Number of landmarks (coordinates), 1 to [`MAX_DIM`].
    pub dim: usize,
    /// Size of the random sample the landmarks are chosen from (capped at n).
    pub sample: usize,
    /// Seed of the random sample and of the first landmark.
    pub seed: u64,
}

/// Which sample items farthest-first may take as landmarks.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "cli", derive(clap::ValueEnum))]
#[serde(rename_all = "lowercase")]
pub enum LandmarkRule {
    /// Every sampled item: farthest-first takes the outliers of the sample first.
    #[default]
    Farthest,
    /// Sampled items whose mean distance to [`TRIM_PROBES`] other sampled items is not among
    /// the largest [`TRIM_SHARE`] (outliers dropped), then farthest-first among them.
    Trimmed,
}

/// Sampled items each item is compared with to find the outliers of a sample
/// ([`LandmarkRule::Trimmed`]).
pub const TRIM_PROBES: usize = 16;

/// Share of a sample dropped as outliers by [`LandmarkRule::Trimmed`].
pub const TRIM_SHARE: f64 = 0.2;

/// The sample without its outliers: the items whose mean distance to [`TRIM_PROBES`] random
/// members of the sample is among the smallest `1 − TRIM_SHARE`, in the sample's order.
fn trimmed<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    pool: &[usize],
    rng: &mut ChaCha8Rng,
) -> Vec<usize> {
    let probes: Vec<usize> = sample(rng, pool.len(), TRIM_PROBES.min(pool.len())).into_vec();
    let all: Vec<&[u8]> = pool.iter().map(|&i| items[i].as_ref()).collect();
    let mut mean = vec![0.0; pool.len()];
    for &p in &probes {
        let q = metric.prepare(all[p]);
        let mut d = vec![0.0; all.len()];
        q.distances(&all, &mut d);
        for (m, d) in mean.iter_mut().zip(d) {
            *m += d;
        }
    }
    let keep = ((pool.len() as f64) * (1.0 - TRIM_SHARE)).ceil().max(1.0) as usize;
    let mut order: Vec<usize> = (0..pool.len()).collect();
    order.sort_by(|&a, &b| mean[a].total_cmp(&mean[b]).then(a.cmp(&b)));
    order.truncate(keep);
    order.sort_unstable();
    order.into_iter().map(|j| pool[j]).collect()
}

/// Chooses `opts.dim` landmarks farthest-first from a seeded sample of `items`.
///
/// Returns item indices, in the order chosen. Fewer than `dim` are returned only when the
/// sample holds fewer distinct items than `dim` (a landmark at distance 0 from a chosen one
/// would add nothing). Deterministic for a given seed and input.
pub fn choose_landmarks<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    opts: &LandmarkOptions,
) -> Vec<usize> {
    choose_landmarks_by(metric, items, opts, LandmarkRule::Farthest)
}

/// [`choose_landmarks`] with the sample items it may take given by `rule`.
pub fn choose_landmarks_by<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    opts: &LandmarkOptions,
    rule: LandmarkRule,
) -> Vec<usize> {
    let n = items.len();
    if n == 0 || opts.dim == 0 {
        return Vec::new();
    }
    let mut rng = ChaCha8Rng::seed_from_u64(opts.seed);
    let size = opts.sample.clamp(1, n);
    let mut pool: Vec<usize> = sample(&mut rng, n, size).into_vec();
    // Sorted so that ties between equally far candidates go to the lowest item index,
    // independent of the sampler's internal order.
    pool.sort_unstable();
    if rule == LandmarkRule::Trimmed {
        pool = trimmed(metric, items, &pool, &mut rng);
    }
    let first = pool[(opts.seed as usize) % pool.len()];
    let mut chosen = vec![first];
    let mut nearest = vec![f64::INFINITY; pool.len()];
    while chosen.len() < opts.dim {
        let last = metric.prepare(items[*chosen.last().expect("non-empty")].as_ref());
        nearest
            .par_chunks_mut(1024)
            .zip(pool.par_chunks(1024))
            .for_each(|(best, ids)| {
                let chunk: Vec<&[u8]> = ids.iter().map(|&i| items[i].as_ref()).collect();
                let mut d = vec![0.0; chunk.len()];
                last.distances(&chunk, &mut d);
                for (b, d) in best.iter_mut().zip(d) {
                    if d < *b {
                        *b = d;
                    }
                }
            });
        let (pos, far) =
            nearest.iter().enumerate().fold(
                (0, -1.0),
                |acc, (p, &d)| if d > acc.1 { (p, d) } else { acc },
            );
        if far <= 0.0 {
            break; // every sample member coincides with a landmark
        }
        chosen.push(pool[pos]);
    }
    chosen
}

/// The embedding methods, as chosen on the command line (`--embedding`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "cli", derive(clap::ValueEnum))]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Distances to farthest-first landmark items.
    #[default]
    Landmarks,
    /// Distances to random reference sets of sizes 1, 2, 4, … drawn from a pool.
    #[cfg_attr(
        feature = "cli",
        value(
            name = "refsets",
            help = "Distances to random sets of sizes 1, 2, 4, … drawn from a pool (Bourgain)"
        )
    )]
    RefSets,
    /// FastMap projections onto pivot lines (L2, not contractive).
    #[cfg_attr(
        feature = "cli",
        value(name = "fastmap", help = "FastMap projections onto pivot lines")
    )]
    FastMap,
}

impl Method {
    /// Every method, in the order tables list them.
    pub const ALL: [Method; 3] = [Method::Landmarks, Method::RefSets, Method::FastMap];

    /// The method's name, as on the command line and in `inspect`.
    pub fn name(self) -> &'static str {
        match self {
            Method::Landmarks => "landmarks",
            Method::RefSets => "refsets",
            Method::FastMap => "fastmap",
        }
    }

    /// The method named `s` (as printed by [`Method::name`]).
    pub fn parse(s: &str) -> Option<Method> {
        Method::ALL.into_iter().find(|m| m.name() == s)
    }
}

impl std::fmt::Display for Method {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// How an index's coordinates were made, as recorded in its metadata.
///
/// Every method computes a query's coordinates from its true distances to a fixed list of
/// reference items ([`Embedding::refs`]), so that embedding a query costs `refs().len()`
/// distance computations.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "method", rename_all = "lowercase")]
pub enum Embedding {
    /// Coordinate `j` is the distance to landmark item `landmarks[j]` (farthest-first order).
    Landmarks {
        /// Item indices of the landmarks.
        landmarks: Vec<u64>,
    },
    /// Coordinate `j` is the distance to the set `sets[j]`: the smallest distance to any of its
    /// members, which are positions in `pool`.
    RefSets {
        /// Item indices of the reference pool (a query is measured against each).
        pool: Vec<u64>,
        /// The sets, as sorted positions in `pool`.
        sets: Vec<Vec<u32>>,
    },
    /// Coordinate `j` is the FastMap projection on axis `axes[j]`.
    FastMap {
        /// Item indices of the distinct pivots, in order of first use.
        refs: Vec<u64>,
        /// The axes, in order.
        axes: Vec<FastMapAxis>,
    },
}

impl Embedding {
    /// The method's name, as on the command line and in `inspect`.
    pub fn name(&self) -> &'static str {
        self.method().name()
    }

    /// The method.
    pub fn method(&self) -> Method {
        match self {
            Embedding::Landmarks { .. } => Method::Landmarks,
            Embedding::RefSets { .. } => Method::RefSets,
            Embedding::FastMap { .. } => Method::FastMap,
        }
    }

    /// Number of coordinates.
    pub fn dim(&self) -> usize {
        match self {
            Embedding::Landmarks { landmarks } => landmarks.len(),
            Embedding::RefSets { sets, .. } => sets.len(),
            Embedding::FastMap { axes, .. } => axes.len(),
        }
    }

    /// Item indices a query must be measured against, in the order [`Embedding::coords`]
    /// expects their distances.
    pub fn refs(&self) -> Vec<u64> {
        match self {
            Embedding::Landmarks { landmarks } => landmarks.clone(),
            Embedding::RefSets { pool, .. } => pool.clone(),
            Embedding::FastMap { refs, .. } => refs.clone(),
        }
    }

    /// Whether the L∞ distance of two coordinate vectors never exceeds the true distance.
    /// Search prunes candidates and answers exactly only when it does.
    pub fn contractive(&self) -> bool {
        match self {
            Embedding::Landmarks { .. } | Embedding::RefSets { .. } => true,
            Embedding::FastMap { .. } => false,
        }
    }

    /// Whether coordinates are distances themselves (whole numbers under an integer metric),
    /// so that they can be stored exactly with `scale = 1`.
    pub fn distance_valued(&self) -> bool {
        !matches!(self, Embedding::FastMap { .. })
    }

    /// The coordinates of a query from its distances to [`Embedding::refs`] (same order).
    /// Writes `dim()` values to the front of `out`. The build computes every item's
    /// coordinates with this same function, so an item's coordinates are reproduced exactly
    /// from its distances.
    pub fn coords(&self, ref_distances: &[f64], out: &mut [f64]) {
        match self {
            Embedding::Landmarks { .. } => {
                out[..ref_distances.len()].copy_from_slice(ref_distances);
            }
            Embedding::RefSets { sets, .. } => {
                for (o, set) in out.iter_mut().zip(sets) {
                    *o = set
                        .iter()
                        .map(|&m| ref_distances[m as usize])
                        .fold(f64::INFINITY, f64::min);
                }
            }
            Embedding::FastMap { axes, .. } => fastmap::coords(axes, ref_distances, out),
        }
    }

    /// The same embedding with its reference items numbered `0..refs().len()` in the order of
    /// [`Embedding::refs`]: the form stored with the reference items' own keys, for an index
    /// part that does not hold them (see [`crate::index::parts`]).
    pub fn renumbered(&self) -> Embedding {
        match self {
            Embedding::Landmarks { landmarks } => Embedding::Landmarks {
                landmarks: (0..landmarks.len() as u64).collect(),
            },
            Embedding::RefSets { pool, sets } => Embedding::RefSets {
                pool: (0..pool.len() as u64).collect(),
                sets: sets.clone(),
            },
            Embedding::FastMap { refs, axes } => Embedding::FastMap {
                refs: (0..refs.len() as u64).collect(),
                axes: axes.clone(),
            },
        }
    }

    /// Checks the recorded embedding against an index of `n` items; the message says what is
    /// wrong. Used when an index is opened: a crafted file must not make a query index out of
    /// bounds or loop on a huge reference list.
    pub fn check(&self, n: u64) -> Result<(), String> {
        let refs = self.refs();
        if refs.is_empty() || refs.len() > MAX_REFS {
            return Err(format!(
                "{} reference items (1 to {MAX_REFS} allowed)",
                refs.len()
            ));
        }
        if refs.iter().any(|&l| l >= n) {
            return Err("a reference item is not an item".into());
        }
        match self {
            Embedding::Landmarks { .. } => Ok(()),
            Embedding::RefSets { pool, sets } => {
                for (j, s) in sets.iter().enumerate() {
                    if s.is_empty() || s.iter().any(|&m| m as usize >= pool.len()) {
                        return Err(format!("reference set {j} is empty or names no pool item"));
                    }
                }
                Ok(())
            }
            Embedding::FastMap { refs, axes } => fastmap::check(axes, refs.len()),
        }
    }
}

/// Parameters of an embedding.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct EmbedOptions {
    /// The method.
    pub method: Method,
    /// Number of coordinates, 1 to [`MAX_DIM`].
    pub dim: usize,
    /// Size of the random sample landmarks and FastMap pivots are chosen from (capped at n).
    pub sample: usize,
    /// Size of the reference-set pool (capped at n; used by [`Method::RefSets`]).
    pub pool: usize,
    /// Seed of every random choice.
    pub seed: u64,
    /// Which sampled items may be landmarks ([`Method::Landmarks`]).
    pub rule: LandmarkRule,
}

impl Default for EmbedOptions {
    fn default() -> Self {
        EmbedOptions {
            method: Method::Landmarks,
            dim: 16,
            sample: 4096,
            pool: DEFAULT_POOL,
            seed: 0,
            rule: LandmarkRule::default(),
        }
    }
}

/// An embedding with the coordinates of every item, before they are quantised into an index.
#[derive(Clone, Debug, PartialEq)]
pub struct Embedded {
    /// How the coordinates were made.
    pub embedding: Embedding,
    /// Row-major coordinates, `n × embedding.dim()`.
    pub coords: Vec<f64>,
    /// Number of items.
    pub n: usize,
}

impl Embedded {
    /// Number of coordinates per item.
    pub fn dim(&self) -> usize {
        self.embedding.dim()
    }

    /// Coordinates of item `i`.
    pub fn row(&self, i: usize) -> &[f64] {
        let d = self.dim();
        &self.coords[i * d..i * d + d]
    }

    /// The embedding made of the first `d` coordinates (all of them if `d ≥ dim()`), with the
    /// reference list cut to what those coordinates use. Its coordinates are the first `d`
    /// columns of these, and equal what [`Embedding::coords`] of the shorter embedding gives.
    ///
    /// ```
    /// use waymark::embed::{embed_items, EmbedOptions, Method};
    /// use waymark::metric::Levenshtein;
    ///
    /// let items = ["quay", "quays", "strand", "orvane", "orvanes", "kaldrith"];
    /// let opts = EmbedOptions { method: Method::Landmarks, dim: 4, sample: 100, ..Default::default() };
    /// let full = embed_items(&Levenshtein, &items, &opts, &|_| {});
    /// let two = full.prefix(2);
    /// assert_eq!(two.dim(), 2);
    /// assert_eq!(two.row(3), &full.row(3)[..2]);
    /// ```
    pub fn prefix(&self, d: usize) -> Embedded {
        let full = self.dim();
        if d >= full {
            return self.clone();
        }
        let embedding = match &self.embedding {
            Embedding::Landmarks { landmarks } => Embedding::Landmarks {
                landmarks: landmarks[..d].to_vec(),
            },
            Embedding::RefSets { pool, sets } => refsets::prefix(pool, &sets[..d]),
            Embedding::FastMap { refs, axes } => fastmap::prefix(refs, &axes[..d]),
        };
        let coords = self
            .coords
            .chunks_exact(full)
            .flat_map(|r| r[..d].iter().copied())
            .collect();
        Embedded {
            embedding,
            coords,
            n: self.n,
        }
    }

    /// The quantum of the stored u8 coordinates (see [`quantize`]): 1 when coordinates are
    /// whole distances that fit a byte's range (exact storage), else the largest coordinate
    /// over 255, so that the range of the build's coordinates uses every byte value.
    pub fn scale(&self, integral_metric: bool) -> f64 {
        self.scale_with(integral_metric, f64::INFINITY)
    }

    /// As [`Embedded::scale`] for real-valued coordinates, but from the coordinates below
    /// `limit` only (larger ones saturate at 255).
    pub fn scale_below(&self, limit: f64) -> f64 {
        self.scale_with(false, limit)
    }

    fn scale_with(&self, integral_metric: bool, limit: f64) -> f64 {
        let max = self
            .coords
            .iter()
            .copied()
            .filter(|&x| x < limit)
            .fold(0.0, f64::max);
        if self.embedding.distance_valued() && integral_metric && max <= 255.0 {
            return 1.0;
        }
        if max > 0.0 && max.is_finite() {
            max / 255.0
        } else {
            1.0
        }
    }
}

/// Embeds every item with the chosen method; `progress` is called with counts of items done.
///
/// Deterministic for a given seed and input. The dimension can come out below `opts.dim` when
/// the items do not allow more coordinates (too few distinct items for landmarks, a residual
/// space of zero distances for FastMap).
///
/// ```
/// use waymark::embed::{embed_items, EmbedOptions, Method};
/// use waymark::metric::Levenshtein;
///
/// let items = ["quay", "quays", "strand", "orvane", "orvanes", "kaldrith"];
/// for method in Method::ALL {
///     let opts = EmbedOptions { method, dim: 3, sample: 100, pool: 4, seed: 1, ..Default::default() };
///     let e = embed_items(&Levenshtein, &items, &opts, &|_| {});
///     assert_eq!(e.coords.len(), items.len() * e.dim());
///     assert_eq!(e.embedding.contractive(), method != Method::FastMap);
/// }
/// ```
pub fn embed_items<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    opts: &EmbedOptions,
    progress: &(dyn Fn(usize) + Sync),
) -> Embedded {
    let dim = opts.dim.min(MAX_DIM);
    let embedding = match opts.method {
        Method::Landmarks => {
            let landmarks = choose_landmarks_by(
                metric,
                items,
                &LandmarkOptions {
                    dim,
                    sample: opts.sample,
                    seed: opts.seed,
                },
                opts.rule,
            );
            Embedding::Landmarks {
                landmarks: landmarks.iter().map(|&l| l as u64).collect(),
            }
        }
        Method::RefSets => refsets::choose(items.len(), dim, opts.pool, opts.seed),
        Method::FastMap => fastmap::choose(metric, items, dim, opts.sample, opts.seed),
    };
    let mut coords = embed_with(metric, items, &embedding, progress);
    let embedding = match embedding {
        Embedding::FastMap { refs, axes } => {
            let axes = fastmap::shift_to_zero(axes, &mut coords);
            Embedding::FastMap { refs, axes }
        }
        e => e,
    };
    Embedded {
        embedding,
        coords,
        n: items.len(),
    }
}

/// Coordinates of every item under `embedding`, row-major, in parallel: each item's distances
/// to the reference items, then [`Embedding::coords`].
///
/// Each reference item is prepared once and compared with every item, the cheap direction
/// for a bit-parallel kernel (masks built once per reference, not once per item).
pub fn embed_with<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    embedding: &Embedding,
    progress: &(dyn Fn(usize) + Sync),
) -> Vec<f64> {
    let refs: Vec<&[u8]> = embedding
        .refs()
        .iter()
        .map(|&l| items[l as usize].as_ref())
        .collect();
    embed_against(metric, &refs, items, embedding, progress)
}

/// Coordinates of every item of `items` under `embedding`, whose reference items are given
/// apart: `refs[j]` is the key of the item `embedding.refs()[j]` names. This is how items
/// that were not in the build (a part added to an index) get coordinates comparable with the
/// build's.
///
/// ```
/// use waymark::embed::{embed_against, embed_items, EmbedOptions, Method};
/// use waymark::metric::Levenshtein;
///
/// let items = ["quay", "quays", "strand", "orvane", "orvanes", "kaldrith"];
/// let opts = EmbedOptions { method: Method::Landmarks, dim: 3, sample: 100, ..Default::default() };
/// let e = embed_items(&Levenshtein, &items, &opts, &|_| {});
/// let refs: Vec<&[u8]> = e.embedding.refs().iter().map(|&r| items[r as usize].as_bytes()).collect();
/// let more = embed_against(&Levenshtein, &refs, &["quayside"], &e.embedding, &|_| {});
/// assert_eq!(more.len(), 3);
/// ```
pub fn embed_against<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    refs: &[&[u8]],
    items: &[T],
    embedding: &Embedding,
    progress: &(dyn Fn(usize) + Sync),
) -> Vec<f64> {
    let d = embedding.dim();
    let n = items.len();
    let mut out = vec![0.0; n * d];
    if d == 0 {
        return out;
    }
    let prepared: Vec<M::Prepared> = refs.iter().map(|r| metric.prepare(r)).collect();
    const CHUNK: usize = 1024;
    let refs = prepared.len();
    out.par_chunks_mut(CHUNK * d)
        .enumerate()
        .for_each(|(c, rows)| {
            let start = c * CHUNK;
            let len = rows.len() / d;
            let chunk: Vec<&[u8]> = items[start..start + len]
                .iter()
                .map(|t| t.as_ref())
                .collect();
            // One batch per reference item ([`PreparedQuery::distances`]: the SIMD lanes of
            // the Levenshtein kernel, one request to an external program), reference-major.
            let mut by_ref = vec![0.0; refs * len];
            for (p, col) in prepared.iter().zip(by_ref.chunks_exact_mut(len)) {
                p.distances(&chunk, col);
            }
            let mut dists = vec![0.0; refs];
            for (r, row) in rows.chunks_exact_mut(d).enumerate() {
                for (j, o) in dists.iter_mut().enumerate() {
                    *o = by_ref[j * len + r];
                }
                embedding.coords(&dists, row);
            }
            progress(len);
        });
    out
}

/// Coordinates of one item (or query) from scratch: its distances to the reference items,
/// then [`Embedding::coords`]. Costs `refs().len()` distance computations.
pub fn embed_one<M: Metric, T: AsRef<[u8]>>(
    metric: &M,
    items: &[T],
    embedding: &Embedding,
    query: &[u8],
) -> Vec<f64> {
    let q = metric.prepare(query);
    let dists: Vec<f64> = embedding
        .refs()
        .iter()
        .map(|&r| q.distance(items[r as usize].as_ref()))
        .collect();
    let mut out = vec![0.0; embedding.dim()];
    embedding.coords(&dists, &mut out);
    out
}

/// How a real coordinate is stored in the index's compact u8 rows: `floor(x / scale)`,
/// saturated to 0..=255. Both steps are 1-Lipschitz in units of `scale`, so differences of
/// stored values still bound true distances from below (see [`Bound`]).
#[inline]
pub fn quantize(x: f64, scale: f64) -> u8 {
    (x / scale).floor().clamp(0.0, 255.0) as u8
}

/// Turns the L∞ difference of two stored (u8) coordinate rows into a lower bound of the
/// true distance, for contractive embeddings.
///
/// With `scale = 1` and whole-number distances, stored values are the distances themselves
/// (saturated at 255), and the bound is the difference itself. Otherwise flooring loses up to
/// one unit per value, and the bound is `scale · (diff − 1)`.
///
/// ```
/// use waymark::embed::Bound;
///
/// let b = Bound { scale: 1.0, whole: true };
/// assert_eq!(b.lower(3), 3.0);
/// assert_eq!(b.max_diff_within(2.5), 2);
/// let r = Bound { scale: 0.5, whole: false };
/// assert_eq!(r.lower(3), 1.0);
/// assert_eq!(r.max_diff_within(1.0), 3);
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Bound {
    /// The coordinate quantum (see [`quantize`]).
    pub scale: f64,
    /// Whether distances are whole numbers and `scale == 1` (stored values are exact).
    pub whole: bool,
}

impl Bound {
    /// Lower bound of the true distance for a stored L∞ difference `diff`.
    #[inline]
    pub fn lower(&self, diff: u8) -> f64 {
        if self.whole {
            f64::from(diff)
        } else {
            self.scale * (f64::from(diff) - 1.0).max(0.0)
        }
    }

    /// The largest stored L∞ difference whose lower bound is at most `r`: items with a larger
    /// difference are certainly farther than `r`. Saturates at 255 (no item excluded).
    #[inline]
    pub fn max_diff_within(&self, r: f64) -> u8 {
        if r.is_nan() || r < 0.0 {
            return 0;
        }
        let d = if self.whole {
            r.floor()
        } else {
            (r / self.scale).floor() + 1.0
        };
        d.min(255.0) as u8
    }
}
