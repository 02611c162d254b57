//! Landmark coordinates: the embedding stage.
//!
//! Every item `x` is mapped to `(d(x, l_1), …, d(x, l_d))` for `d` landmark items `l_i`. By the
//! triangle inequality `|d(q, l) − d(x, l)| ≤ d(q, x)`, so the L∞ distance of two coordinate
//! vectors never exceeds the true distance: search uses that lower bound to skip candidates
//! without computing their distance.
//!
//! Landmarks are chosen farthest-first (max-min) from a random sample: the first is a random
//! sample member, each next one is the sample member farthest from all chosen so far. The first
//! `j` landmarks of that order are themselves a valid `j`-dimensional embedding.
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

/// The largest embedding dimension an index supports.
pub const MAX_DIM: usize = 64;

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
    let first = pool[(opts.seed as usize) % pool.len()];
    let mut chosen = vec![first];
    let mut nearest = vec![f64::INFINITY; pool.len()];
    while chosen.len() < opts.dim {
        let last = metric.prepare(items[*chosen.last().expect("non-empty")].as_ref());
        nearest
            .par_iter_mut()
            .zip(pool.par_iter())
            .for_each(|(best, &i)| {
                let d = last.distance(items[i].as_ref());
                if d < *best {
                    *best = d;
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

/// Landmark coordinates of every item, row-major (`n × landmarks.len()`), in parallel.
///
/// Each landmark is prepared once and compared with every item, which is the cheap direction
/// for a bit-parallel kernel (masks built once per landmark, not once per item).
pub fn embed_all<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    landmarks: &[usize],
    progress: &(dyn Fn(usize) + Sync),
) -> Vec<f64> {
    let d = landmarks.len();
    let n = items.len();
    let mut out = vec![0.0; n * d];
    if d == 0 {
        return out;
    }
    let prepared: Vec<M::Prepared> = landmarks
        .iter()
        .map(|&l| metric.prepare(items[l].as_ref()))
        .collect();
    const CHUNK: usize = 4096;
    out.par_chunks_mut(CHUNK * d)
        .enumerate()
        .for_each(|(c, rows)| {
            let start = c * CHUNK;
            for (r, row) in rows.chunks_exact_mut(d).enumerate() {
                let item = items[start + r].as_ref();
                for (o, p) in row.iter_mut().zip(&prepared) {
                    *o = p.distance(item);
                }
            }
            progress(rows.len() / d);
        });
    out
}

/// The L∞ distance of two coordinate vectors: a lower bound of the true distance.
pub fn linf(a: &[f64], b: &[f64]) -> f64 {
    a.iter()
        .zip(b)
        .fold(0.0, |m, (x, y)| f64::max(m, (x - y).abs()))
}

/// How an index's coordinates were made, as recorded in its metadata.
///
/// Every method computes a query's coordinates from its true distances to a fixed list of
/// reference items ([`Embedding::refs`]), so that embedding a query costs `refs().len()`
/// distance computations.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "method", rename_all = "snake_case")]
pub enum Embedding {
    /// Coordinate `j` is the distance to landmark item `landmarks[j]` (farthest-first order).
    Landmarks {
        /// Item indices of the landmarks.
        landmarks: Vec<u64>,
    },
}

impl Embedding {
    /// The method's name, as on the command line and in `inspect`.
    pub fn name(&self) -> &'static str {
        match self {
            Embedding::Landmarks { .. } => "landmarks",
        }
    }

    /// Number of coordinates.
    pub fn dim(&self) -> usize {
        match self {
            Embedding::Landmarks { landmarks } => landmarks.len(),
        }
    }

    /// Item indices a query must be measured against, in the order [`Embedding::coords`]
    /// expects their distances.
    pub fn refs(&self) -> Vec<u64> {
        match self {
            Embedding::Landmarks { landmarks } => landmarks.clone(),
        }
    }

    /// Whether the L∞ distance of two coordinate vectors never exceeds the true distance.
    /// Search prunes candidates and answers exactly only when it does.
    pub fn contractive(&self) -> bool {
        match self {
            Embedding::Landmarks { .. } => true,
        }
    }

    /// The coordinates of a query from its distances to [`Embedding::refs`] (same order).
    /// Writes `dim()` values to the front of `out`.
    pub fn coords(&self, ref_distances: &[f64], out: &mut [f64]) {
        match self {
            Embedding::Landmarks { .. } => {
                out[..ref_distances.len()].copy_from_slice(ref_distances);
            }
        }
    }
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
