//! Distances between numeric vectors: L1, L2, L∞ and angular distance.
//!
//! Items are vectors stored as `dim` little-endian `f32` values (`4 · dim` bytes), the form
//! [`crate::ingest::vectors`] produces; [`vector_bytes`] makes it. Sums are taken in `f64`.
//!
//! **Angular distance** is `arccos(cos(x, y)) / π`, in `[0, 1]`: the angle between the
//! vectors, a metric on directions (the great-circle distance on the unit sphere). It is
//! computed as `2·atan2(|x̂ − ŷ|, |x̂ + ŷ|)/π` with `x̂, ŷ` the unit vectors, which is exact
//! to rounding also for nearly parallel vectors, where `arccos` of a rounded cosine is not.
//! The plain *cosine distance* `1 − cos` is **not** a metric: for unit vectors at angles 0°,
//! 45° and 90° it gives 1 − cos 90° = 1 > 2·(1 − cos 45°) ≈ 0.586, breaking the triangle
//! inequality (common practice). Vectors with the same direction (`x` and `2x`) are at
//! angular distance 0, so on vectors it is a pseudometric. The zero vector has no direction;
//! it is put at distance ½ from every other vector (and 0 from itself), which keeps the
//! triangle inequality, since no distance exceeds 1 = ½ + ½.
//!
//! An item whose byte length is not `4 · dim` (only a damaged index could hold one) is read
//! as truncated or padded with zeros: wrong, but never a panic.
//!
//! ```
//! use waymark::metric::{vector_bytes, Metric, Norm, PreparedQuery, VectorMetric};
//!
//! let l2 = VectorMetric::new(Norm::L2, 2)?;
//! let (a, b) = (vector_bytes(&[0.0, 0.0]), vector_bytes(&[3.0, 4.0]));
//! assert_eq!(l2.distance(&a, &b), 5.0);
//! assert_eq!(l2.prepare(&a).distance_within(&b, 4.0), None);
//! let angular = VectorMetric::new(Norm::Angular, 2)?;
//! let d = angular.distance(&vector_bytes(&[1.0, 0.0]), &vector_bytes(&[0.0, 2.0]));
//! assert!((d - 0.5).abs() < 1e-12); // 90°
//! # Ok::<(), waymark::metric::MetricError>(())
//! ```

use serde::{Deserialize, Serialize};

use super::{Metric, MetricError, MetricKind, PreparedQuery};

/// Components summed between checks of the bound in `distance_within`.
const BLOCK: usize = 64;

/// Which distance between vectors.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Norm {
    /// Sum of absolute differences (Manhattan).
    L1,
    /// Euclidean distance.
    L2,
    /// Largest absolute difference (Chebyshev).
    Linf,
    /// Angle between the vectors divided by π.
    Angular,
}

/// A distance between vectors of a fixed dimension.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct VectorMetric {
    norm: Norm,
    dim: usize,
}

/// A query prepared for [`VectorMetric`]: decoded once (and normalised for angular).
#[derive(Clone, Debug)]
pub struct VectorQuery {
    norm: Norm,
    /// The query's components; unit length for angular (all zero for the zero vector).
    v: Vec<f64>,
    zero: bool,
}

/// The little-endian `f32` bytes of a vector, the item form of [`VectorMetric`].
pub fn vector_bytes(v: &[f32]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

/// The first `dim` components of `item`, zero-padded.
fn components(item: &[u8], dim: usize) -> impl Iterator<Item = f64> + '_ {
    item.chunks_exact(4)
        .map(|c| f64::from(f32::from_le_bytes([c[0], c[1], c[2], c[3]])))
        .chain(std::iter::repeat(0.0))
        .take(dim)
}

impl VectorMetric {
    /// The metric for vectors of `dim ≥ 1` components.
    pub fn new(norm: Norm, dim: usize) -> Result<Self, MetricError> {
        if dim == 0 {
            return Err(MetricError::Options(
                "vectors need at least one component".into(),
            ));
        }
        Ok(VectorMetric { norm, dim })
    }

    /// The dimension.
    pub fn dim(&self) -> usize {
        self.dim
    }

    /// Which distance.
    pub fn norm(&self) -> Norm {
        self.norm
    }
}

impl Metric for VectorMetric {
    type Prepared = VectorQuery;

    fn kind(&self) -> MetricKind {
        match self.norm {
            Norm::L1 => MetricKind::L1,
            Norm::L2 => MetricKind::L2,
            Norm::Linf => MetricKind::Linf,
            Norm::Angular => MetricKind::Angular,
        }
    }

    fn prepare(&self, query: &[u8]) -> VectorQuery {
        let mut v: Vec<f64> = components(query, self.dim).collect();
        let mut zero = false;
        if self.norm == Norm::Angular {
            let len = v.iter().map(|x| x * x).sum::<f64>().sqrt();
            zero = len == 0.0;
            if !zero {
                v.iter_mut().for_each(|x| *x /= len);
            }
        }
        VectorQuery {
            norm: self.norm,
            v,
            zero,
        }
    }
}

impl VectorQuery {
    /// The distance if at most `bound`; L1, L2 and L∞ stop once a partial sum exceeds it.
    fn run(&self, item: &[u8], bound: f64) -> Option<f64> {
        let dim = self.v.len();
        if self.norm == Norm::Angular {
            let x: Vec<f64> = components(item, dim).collect();
            let len = x.iter().map(|x| x * x).sum::<f64>().sqrt();
            let d = match (self.zero, len == 0.0) {
                (true, true) => 0.0,
                (true, false) | (false, true) => 0.5,
                (false, false) => {
                    let (mut minus, mut plus) = (0.0, 0.0);
                    for (q, x) in self.v.iter().zip(&x) {
                        let x = x / len;
                        minus += (q - x) * (q - x);
                        plus += (q + x) * (q + x);
                    }
                    2.0 * minus.sqrt().atan2(plus.sqrt()) / std::f64::consts::PI
                }
            };
            return (d <= bound).then_some(d);
        }
        if item.len() == 4 * dim {
            // The common case: whole blocks, four partial sums each so the loop vectorises.
            // Squared bound for L2, widened by rounding so that `sqrt(acc)² < acc` cannot
            // refuse a distance equal to the bound; the final check is on the distance itself.
            let limit = match self.norm {
                Norm::L2 => bound * bound * (1.0 + 8.0 * f64::EPSILON),
                _ => bound,
            };
            let mut acc = 0.0f64;
            for (q, x) in self.v.chunks(BLOCK).zip(item.chunks(4 * BLOCK)) {
                let mut part = [0.0f64; 4];
                for (i, (q, c)) in q.iter().zip(x.chunks_exact(4)).enumerate() {
                    let d = q - f64::from(f32::from_le_bytes([c[0], c[1], c[2], c[3]]));
                    let lane = &mut part[i % 4];
                    match self.norm {
                        Norm::L1 => *lane += d.abs(),
                        Norm::L2 => *lane += d * d,
                        _ => *lane = lane.max(d.abs()),
                    }
                }
                acc = match self.norm {
                    Norm::Linf => acc.max(part.iter().fold(0.0, |a: f64, &b| a.max(b))),
                    _ => acc + part.iter().sum::<f64>(),
                };
                if acc > limit {
                    return None;
                }
            }
            let d = if self.norm == Norm::L2 {
                acc.sqrt()
            } else {
                acc
            };
            return (d <= bound).then_some(d);
        }
        let diffs = self.v.iter().zip(components(item, dim)).map(|(q, x)| q - x);
        let d = match self.norm {
            Norm::L1 => diffs.map(f64::abs).sum(),
            Norm::L2 => diffs.map(|d| d * d).sum::<f64>().sqrt(),
            _ => diffs.fold(0.0f64, |a, d| a.max(d.abs())),
        };
        (d <= bound).then_some(d)
    }
}

impl PreparedQuery for VectorQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        self.run(item, f64::INFINITY).unwrap_or(f64::INFINITY)
    }

    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        if bound.is_nan() || bound < 0.0 {
            return None;
        }
        self.run(item, bound)
    }
}

/// Most parts of a vector in [`VectorMetric::sketch`].
const PARTS: usize = 16;
/// Components per part of [`VectorMetric::sketch`]: the bound then costs about a quarter of
/// a distance (finer parts bound tighter, but cost as much as the distance they may save).
const PER_PART: usize = 4;

/// Relative slack of [`VectorMetric::sketch_bound`], far above the rounding of sums in
/// `f64` of vectors of up to millions of components (n·2⁻⁵³ < 10⁻⁹).
const SKETCH_SLACK: f64 = 1e-9;

impl VectorMetric {
    /// Parts of the dimensions in [`VectorMetric::sketch`]: one per four components, from
    /// 1 to 16.
    fn parts(&self) -> usize {
        (self.dim / PER_PART).clamp(1, PARTS)
    }

    /// Numbers per item of [`VectorMetric::sketch`]: one per part, and the sum of the
    /// parts' norms.
    pub fn sketch_width(&self) -> usize {
        self.parts() + 1
    }

    /// The sketch of `item` for [`VectorMetric::sketch_bound`]: the dimensions cut into
    /// runs of consecutive components (one per four, from 1 to 16 runs), the norm of each
    /// run (L1 norm for L1, L2 for L2, largest absolute value for L∞; for angular the L2
    /// norms of the unit vector, zeros for the zero vector), then the sum of those norms
    /// (which sets the slack for rounding).
    pub fn sketch(&self, item: &[u8], out: &mut [f64]) {
        let parts = self.parts();
        let x: Vec<f64> = components(item, self.dim).collect();
        let scale = match self.norm {
            Norm::Angular => {
                let len = x.iter().map(|v| v * v).sum::<f64>().sqrt();
                if len == 0.0 {
                    0.0
                } else {
                    1.0 / len
                }
            }
            _ => 1.0,
        };
        for (p, o) in out.iter_mut().enumerate().take(parts) {
            let run = &x[p * self.dim / parts..(p + 1) * self.dim / parts];
            *o = match self.norm {
                Norm::L1 => run.iter().map(|v| v.abs()).sum(),
                Norm::Linf => run.iter().fold(0.0, |m: f64, v| m.max(v.abs())),
                Norm::L2 => run.iter().map(|v| v * v).sum::<f64>().sqrt(),
                Norm::Angular => run
                    .iter()
                    .map(|v| (v * scale) * (v * scale))
                    .sum::<f64>()
                    .sqrt(),
            };
        }
        out[parts] = out[..parts].iter().sum();
    }

    /// A lower bound of the distance of two vectors from their [`VectorMetric::sketch`]es.
    ///
    /// Proof: for any norm, `‖x_p − y_p‖ ≥ |‖x_p‖ − ‖y_p‖|` on each run `p` (the triangle
    /// inequality); L1 sums the runs, L2 sums their squares, L∞ takes their largest. For
    /// angular, the chord `|x̂ − ŷ|` of the unit vectors is at least the L2 bound `c`, and
    /// the angle is `2·asin(chord/2)`, rising with the chord (a zero vector: `c = 1` gives
    /// 1/3 ≤ ½, its distance to any other). Less a slack for rounding, relative to the
    /// norms.
    #[inline]
    pub fn sketch_bound(&self, a: &[f64], b: &[f64]) -> f64 {
        let parts = a.len() - 1;
        let gaps = a[..parts]
            .iter()
            .zip(&b[..parts])
            .map(|(x, y)| (x - y).abs());
        let bound = match self.norm {
            Norm::L1 => gaps.sum(),
            Norm::Linf => gaps.fold(0.0, f64::max),
            Norm::L2 => gaps.map(|g| g * g).sum::<f64>().sqrt(),
            Norm::Angular => {
                let c = gaps.map(|g| g * g).sum::<f64>().sqrt();
                2.0 * (c / 2.0).min(1.0).asin() / std::f64::consts::PI
            }
        };
        let size = match self.norm {
            Norm::Angular => 1.0,
            _ => 1.0 + a[parts] + b[parts],
        };
        (bound - SKETCH_SLACK * size).max(0.0)
    }
}
