//! Distances between numeric vectors: L1, L2, L∞ and angular distance.
//!
//! Items are vectors stored as `dim` little-endian `f32` values (`4 · dim` bytes), the form
//! [`crate::ingest::vectors`] produces; [`vector_bytes`] makes it. Sums are taken in `f64`.
//!
//! **Summation order.** Every sum (L1, squared L2, and the three sums of the angular
//! distance) is taken in one fixed order, the same at every dispatch level
//! ([`crate::cpu::Level`]): component `i` goes to partial sum `i mod 16`; the sixteen
//! partial sums are added as a tree (`s[j] + s[j + 8]`, then `+ [j + 4]`, `+ [j + 2]`,
//! `+ [j + 1]`); for L1 and L2 this is done per block of 64 components, the blocks' totals
//! added in turn (the bound is checked between blocks). AVX-512 holds the sixteen sums in two
//! registers of eight `f64`, AVX2 in four of four, the portable form in an array; each
//! step is one IEEE operation (no fused multiply-add), so the distances are identical, bit
//! for bit, at every level, and equal to what a brute force computes on any machine. Query
//! and item are made unit vectors the same way (times the reciprocal of the length), so
//! every distance is symmetric bit for bit, which the self-join's checks against a brute
//! force rely on. They may
//! differ from a plain left-to-right sum in the last bits (the error bound of a sum of `n`
//! terms, `(n − 1)·ε·Σ|term|`, covers both); the exact path's lower bound keeps a whole
//! quantum of slack ([`crate::embed::Bound`]), far above that.
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
use crate::cpu::Level;

/// Components summed between checks of the bound in `distance_within`.
const BLOCK: usize = 64;

/// Partial sums of the fixed summation order (see the module documentation).
const LANES: usize = 16;

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
    /// The kernels used (clamped to what the CPU runs).
    level: Level,
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

    /// Uses the AVX2 kernels where the CPU has them; the AVX-512 ones only when
    /// `WAYMARK_SIMD=avx512` names them ([`Level::active_avx512_if_forced`]): they measured
    /// no faster than AVX2 across dimensions (DEVELOPERS.md, "Dispatch levels"). The
    /// distances are identical at every level.
    fn prepare(&self, query: &[u8]) -> VectorQuery {
        self.prepare_with_level(query, Level::active_avx512_if_forced())
    }
}

impl VectorMetric {
    /// [`Metric::prepare`] for the kernels of `level` (lowered to what this CPU runs). Every
    /// level gives identical distances; tests and benches use this to run each in one process.
    ///
    /// ```
    /// use waymark::cpu::Level;
    /// use waymark::metric::{vector_bytes, Norm, PreparedQuery, VectorMetric};
    ///
    /// let l1 = VectorMetric::new(Norm::L1, 3)?;
    /// let x = vector_bytes(&[1.0, -2.0, 0.5]);
    /// for level in Level::ALL {
    ///     let q = l1.prepare_with_level(&vector_bytes(&[0.0, 0.0, 0.0]), level);
    ///     assert_eq!(q.distance(&x), 3.5);
    /// }
    /// # Ok::<(), waymark::metric::MetricError>(())
    /// ```
    pub fn prepare_with_level(&self, query: &[u8], level: Level) -> VectorQuery {
        let mut v: Vec<f64> = components(query, self.dim).collect();
        let mut zero = false;
        if self.norm == Norm::Angular {
            let len = portable::sum_of_squares(&v).sqrt();
            zero = len == 0.0;
            if !zero {
                // As items are scaled (`angular_sums`), so that d(a, b) = d(b, a) exactly.
                let scale = 1.0 / len;
                v.iter_mut().for_each(|x| *x *= scale);
            }
        }
        VectorQuery {
            norm: self.norm,
            v,
            zero,
            level: level.clamped(),
        }
    }
}

impl VectorQuery {
    /// The distance if at most `bound`; L1, L2 and L∞ stop once a partial sum exceeds it.
    fn run(&self, item: &[u8], bound: f64) -> Option<f64> {
        let dim = self.v.len();
        if item.len() != 4 * dim {
            // Only a damaged index holds such an item: read it truncated or zero-padded.
            let padded: Vec<u8> = components(item, dim)
                .flat_map(|x| (x as f32).to_le_bytes())
                .collect();
            return self.run(&padded, bound);
        }
        if self.norm == Norm::Angular {
            let d = match (self.zero, self.angular_sums(item)) {
                (true, None) => 0.0,
                (true, Some(_)) | (false, None) => 0.5,
                (false, Some((minus, plus))) => {
                    2.0 * minus.sqrt().atan2(plus.sqrt()) / std::f64::consts::PI
                }
            };
            return (d <= bound).then_some(d);
        }
        // Squared bound for L2, widened by rounding so that `sqrt(acc)² < acc` cannot
        // refuse a distance equal to the bound; the final check is on the distance itself.
        let limit = match self.norm {
            Norm::L2 => bound * bound * (1.0 + 8.0 * f64::EPSILON),
            _ => bound,
        };
        let acc = self.norm_within(item, limit)?;
        let d = if self.norm == Norm::L2 {
            acc.sqrt()
        } else {
            acc
        };
        (d <= bound).then_some(d)
    }

    /// Σ|d|, Σd² or max|d| of the differences `d = q − x` (`item` is `4 · dim` bytes), or
    /// `None` once a block's running total exceeds `limit`.
    fn norm_within(&self, item: &[u8], limit: f64) -> Option<f64> {
        let (q, norm) = (&self.v[..], self.norm);
        #[cfg(target_arch = "x86_64")]
        {
            if self.level >= Level::Avx512 {
                // SAFETY: the level was clamped to what the CPU reports, so it has AVX-512 F
                // and AVX2, the `target_feature`s of these kernels.
                return unsafe {
                    match norm {
                        Norm::L1 => avx512::norm_within::<L1>(q, item, limit),
                        Norm::L2 => avx512::norm_within::<L2>(q, item, limit),
                        _ => avx512::norm_within::<LINF>(q, item, limit),
                    }
                };
            }
            if self.level >= Level::Avx2 {
                // SAFETY: as above, the CPU has AVX2.
                return unsafe {
                    match norm {
                        Norm::L1 => avx2::norm_within::<L1>(q, item, limit),
                        Norm::L2 => avx2::norm_within::<L2>(q, item, limit),
                        _ => avx2::norm_within::<LINF>(q, item, limit),
                    }
                };
            }
        }
        match norm {
            Norm::L1 => portable::norm_within::<L1>(q, item, limit),
            Norm::L2 => portable::norm_within::<L2>(q, item, limit),
            _ => portable::norm_within::<LINF>(q, item, limit),
        }
    }

    /// For angular distance: `(Σ(q − x̂)², Σ(q + x̂)²)` with `x̂` the unit vector of `item`,
    /// or `None` when `item` is the zero vector.
    fn angular_sums(&self, item: &[u8]) -> Option<(f64, f64)> {
        let q = &self.v[..];
        #[cfg(target_arch = "x86_64")]
        {
            if self.level >= Level::Avx512 {
                // SAFETY: the CPU has AVX-512 F and AVX2 (clamped level).
                return unsafe { avx512::angular_sums(q, item) };
            }
            if self.level >= Level::Avx2 {
                // SAFETY: the CPU has AVX2 (clamped level).
                return unsafe { avx2::angular_sums(q, item) };
            }
        }
        portable::angular_sums(q, item)
    }
}

/// The norms as const parameters of the kernels.
const L1: u8 = 0;
const L2: u8 = 1;
const LINF: u8 = 2;

/// The kernels, written once over each level's sixteen-lane type `V` and its operations
/// (`zero`, `splat`, `load`, `add`, `sub`, `mul`, `abs`, `max`, `sum`, `maximum`),
/// so that every level performs the same operations in the same order. `$tf` is the
/// level's `target_feature` attribute (none for the portable form).
macro_rules! kernels {
    ($(#[$tf:meta])*) => {
        /// Σ|d|, Σd² or max|d| (`N`: [`L1`], [`L2`], [`LINF`]) of `d = q − x` over the
        /// little-endian `f32` components of `x` (`4 · q.len()` bytes), block by block;
        /// `None` once the running total exceeds `limit`.
        $(#[$tf])*
        pub(super) fn norm_within<const N: u8>(q: &[f64], x: &[u8], limit: f64) -> Option<f64> {
            let mut acc = 0.0f64;
            for (qb, xb) in q.chunks(BLOCK).zip(x.chunks(4 * BLOCK)) {
                let mut lanes = zero();
                for (qs, xs) in qb.chunks(LANES).zip(xb.chunks(4 * LANES)) {
                    let (qv, xv) = load(qs, xs);
                    let d = sub(qv, xv);
                    lanes = match N {
                        L1 => add(lanes, abs(d)),
                        L2 => add(lanes, mul(d, d)),
                        _ => max(abs(d), lanes),
                    };
                }
                acc = if N == LINF {
                    acc.max(maximum(lanes))
                } else {
                    acc + sum(lanes)
                };
                if acc > limit {
                    return None;
                }
            }
            Some(acc)
        }

        /// `(Σ(q − x̂)², Σ(q + x̂)²)`, `x̂ = x · (1 / |x|)`, or `None` for `|x| = 0`.
        $(#[$tf])*
        pub(super) fn angular_sums(q: &[f64], x: &[u8]) -> Option<(f64, f64)> {
            let mut squares = zero();
            for (qs, xs) in q.chunks(LANES).zip(x.chunks(4 * LANES)) {
                let (_, xv) = load(qs, xs);
                squares = add(squares, mul(xv, xv));
            }
            let len = sum(squares).sqrt();
            if len == 0.0 {
                return None;
            }
            // One division, then products (a division per component costs several times
            // a product; the reciprocal adds at most one rounding to each component).
            let scale = splat(1.0 / len);
            let (mut minus, mut plus) = (zero(), zero());
            for (qs, xs) in q.chunks(LANES).zip(x.chunks(4 * LANES)) {
                let (qv, xv) = load(qs, xs);
                let unit = mul(xv, scale);
                let (m, p) = (sub(qv, unit), add(qv, unit));
                minus = add(minus, mul(m, m));
                plus = add(plus, mul(p, p));
            }
            Some((sum(minus), sum(plus)))
        }
    };
}

/// The portable form: sixteen `f64` in an array.
mod portable {
    use super::{BLOCK, L1, L2, LANES, LINF};

    type V = [f64; LANES];

    #[inline(always)]
    fn zero() -> V {
        [0.0; LANES]
    }

    #[inline(always)]
    fn splat(x: f64) -> V {
        [x; LANES]
    }

    /// Up to sixteen components of `q` and of `x` (f32 bytes), the rest zero.
    #[inline(always)]
    fn load(q: &[f64], x: &[u8]) -> (V, V) {
        let mut qv = zero();
        let mut xv = zero();
        if let (Ok(q), Ok(x)) = (
            <&[f64; LANES]>::try_from(q),
            <&[u8; 4 * LANES]>::try_from(x),
        ) {
            // A whole group: fixed bounds, so the loop is unrolled and vectorised.
            for i in 0..LANES {
                qv[i] = q[i];
                let c = [x[4 * i], x[4 * i + 1], x[4 * i + 2], x[4 * i + 3]];
                xv[i] = f64::from(f32::from_le_bytes(c));
            }
            return (qv, xv);
        }
        for ((a, b), (q, c)) in qv
            .iter_mut()
            .zip(&mut xv)
            .zip(q.iter().zip(x.chunks_exact(4)))
        {
            *a = *q;
            *b = f64::from(f32::from_le_bytes([c[0], c[1], c[2], c[3]]));
        }
        (qv, xv)
    }

    #[inline(always)]
    fn lanewise(mut a: V, b: V, f: impl Fn(f64, f64) -> f64) -> V {
        for i in 0..LANES {
            a[i] = f(a[i], b[i]);
        }
        a
    }

    #[inline(always)]
    fn add(a: V, b: V) -> V {
        lanewise(a, b, |x, y| x + y)
    }

    #[inline(always)]
    fn sub(a: V, b: V) -> V {
        lanewise(a, b, |x, y| x - y)
    }

    #[inline(always)]
    fn mul(a: V, b: V) -> V {
        lanewise(a, b, |x, y| x * y)
    }

    #[inline(always)]
    fn abs(mut a: V) -> V {
        for x in &mut a {
            *x = x.abs();
        }
        a
    }

    /// `a` where `a > b`, else `b` (the rule of the `maxpd` instruction).
    #[inline(always)]
    fn max(a: V, b: V) -> V {
        lanewise(a, b, |x, y| if x > y { x } else { y })
    }

    /// The tree of the fixed summation order.
    #[inline(always)]
    fn tree(v: V, f: impl Fn(f64, f64) -> f64) -> f64 {
        let s8: [f64; 8] = std::array::from_fn(|j| f(v[j], v[j + 8]));
        let s4: [f64; 4] = std::array::from_fn(|j| f(s8[j], s8[j + 4]));
        let s2: [f64; 2] = std::array::from_fn(|j| f(s4[j], s4[j + 2]));
        f(s2[0], s2[1])
    }

    #[inline(always)]
    fn sum(v: V) -> f64 {
        tree(v, |x, y| x + y)
    }

    #[inline(always)]
    fn maximum(v: V) -> f64 {
        tree(v, |x, y| if x > y { x } else { y })
    }

    /// Σx² of `v` in the fixed order (the angular query's length).
    pub(super) fn sum_of_squares(v: &[f64]) -> f64 {
        let mut squares = zero();
        for c in v.chunks(LANES) {
            let mut x = zero();
            x[..c.len()].copy_from_slice(c);
            squares = add(squares, mul(x, x));
        }
        sum(squares)
    }

    kernels!();
}

/// AVX-512 F: the sixteen sums in two registers of eight `f64` (lanes 0..8, 8..16); the
/// last partial group through masked loads, which read nothing past the slices.
#[cfg(target_arch = "x86_64")]
mod avx512 {
    use std::arch::x86_64::*;

    use super::{BLOCK, L1, L2, LANES, LINF};

    #[derive(Clone, Copy)]
    struct V(__m512d, __m512d);

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn zero() -> V {
        V(_mm512_setzero_pd(), _mm512_setzero_pd())
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn splat(x: f64) -> V {
        V(_mm512_set1_pd(x), _mm512_set1_pd(x))
    }

    /// Up to sixteen components of `q` and of `x` (f32 bytes, `4 · q.len()` of them), the
    /// rest zero.
    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn load(q: &[f64], x: &[u8]) -> (V, V) {
        let len = q.len().min(LANES).min(x.len() / 4);
        let m = (u32::MAX >> (32 - len)) as __mmask16;
        // SAFETY: the masks select the first `len` f64 of `q` and f32 of `x`, all inside
        // the slices; masked-off elements are not read and cannot fault, so the pointers
        // past the end (made with `wrapping_add`) are never dereferenced.
        unsafe {
            let xs = _mm512_maskz_loadu_ps(m, x.as_ptr().cast());
            let lo = _mm512_maskz_loadu_pd(m as __mmask8, q.as_ptr());
            let hi = _mm512_maskz_loadu_pd((m >> 8) as __mmask8, q.as_ptr().wrapping_add(8));
            let xlo = _mm512_cvtps_pd(_mm512_castps512_ps256(xs));
            let xhi = _mm512_cvtps_pd(_mm256_castpd_ps(_mm512_extractf64x4_pd::<1>(
                _mm512_castps_pd(xs),
            )));
            (V(lo, hi), V(xlo, xhi))
        }
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn add(a: V, b: V) -> V {
        V(_mm512_add_pd(a.0, b.0), _mm512_add_pd(a.1, b.1))
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn sub(a: V, b: V) -> V {
        V(_mm512_sub_pd(a.0, b.0), _mm512_sub_pd(a.1, b.1))
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn mul(a: V, b: V) -> V {
        V(_mm512_mul_pd(a.0, b.0), _mm512_mul_pd(a.1, b.1))
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn abs(a: V) -> V {
        V(_mm512_abs_pd(a.0), _mm512_abs_pd(a.1))
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn max(a: V, b: V) -> V {
        V(_mm512_max_pd(a.0, b.0), _mm512_max_pd(a.1, b.1))
    }

    /// The tree of the fixed order: lanes `j` and `j + 8` (the two registers), then the
    /// halves, quarters and the last pair, combined by `f` (`add` or `max` on `__m256d`).
    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn tree(v: V, f: impl Fn(__m256d, __m256d) -> __m256d) -> f64 {
        let lo = |x: __m512d| _mm512_castpd512_pd256(x);
        let hi = |x: __m512d| _mm512_extractf64x4_pd::<1>(x);
        // s8 = [v0 + v8, …, v7 + v15] as two halves [0..4], [4..8].
        let (s8lo, s8hi) = (f(lo(v.0), lo(v.1)), f(hi(v.0), hi(v.1)));
        let s4 = f(s8lo, s8hi);
        let s2 = f(s4, _mm256_permute2f128_pd::<0x01>(s4, s4));
        let s1 = f(s2, _mm256_permute_pd::<0b0101>(s2));
        _mm256_cvtsd_f64(s1)
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn sum(v: V) -> f64 {
        tree(v, |a, b| _mm256_add_pd(a, b))
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx2")]
    fn maximum(v: V) -> f64 {
        tree(v, |a, b| _mm256_max_pd(a, b))
    }

    kernels!(#[target_feature(enable = "avx512f,avx2")]);
}

/// AVX2: the sixteen sums in four registers of four `f64` (lanes 0..4, 4..8, 8..12,
/// 12..16); the last partial group copied into zeroed arrays first.
#[cfg(target_arch = "x86_64")]
mod avx2 {
    use std::arch::x86_64::*;

    use super::{BLOCK, L1, L2, LANES, LINF};

    #[derive(Clone, Copy)]
    struct V([__m256d; 4]);

    #[inline]
    #[target_feature(enable = "avx2")]
    fn zero() -> V {
        V([_mm256_setzero_pd(); 4])
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn splat(x: f64) -> V {
        V([_mm256_set1_pd(x); 4])
    }

    /// Sixteen components of `q` and of `x` (f32 bytes) from whole arrays.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn load_full(q: &[f64; LANES], x: &[u8; 4 * LANES]) -> (V, V) {
        // SAFETY: `q` is 16 f64 and `x` 64 bytes; unaligned loads of 4 f64 / 4 f32 at
        // offsets inside them.
        unsafe {
            let qv = std::array::from_fn(|k| _mm256_loadu_pd(q.as_ptr().add(4 * k)));
            let xv = std::array::from_fn(|k| {
                _mm256_cvtps_pd(_mm_loadu_ps(x.as_ptr().add(16 * k).cast()))
            });
            (V(qv), V(xv))
        }
    }

    /// Up to sixteen components of `q` and of `x` (f32 bytes, `4 · q.len()` of them), the
    /// rest zero.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn load(q: &[f64], x: &[u8]) -> (V, V) {
        if let (Ok(q), Ok(x)) = (
            <&[f64; LANES]>::try_from(q),
            <&[u8; 4 * LANES]>::try_from(x),
        ) {
            return load_full(q, x);
        }
        let len = q.len().min(LANES).min(x.len() / 4);
        let mut qa = [0.0f64; LANES];
        let mut xa = [0u8; 4 * LANES];
        qa[..len].copy_from_slice(&q[..len]);
        xa[..4 * len].copy_from_slice(&x[..4 * len]);
        load_full(&qa, &xa)
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn lanewise(a: V, b: V, f: impl Fn(__m256d, __m256d) -> __m256d) -> V {
        V(std::array::from_fn(|k| f(a.0[k], b.0[k])))
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn add(a: V, b: V) -> V {
        lanewise(a, b, |x, y| _mm256_add_pd(x, y))
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn sub(a: V, b: V) -> V {
        lanewise(a, b, |x, y| _mm256_sub_pd(x, y))
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn mul(a: V, b: V) -> V {
        lanewise(a, b, |x, y| _mm256_mul_pd(x, y))
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn abs(a: V) -> V {
        let sign = _mm256_set1_pd(-0.0);
        V(a.0.map(|x| _mm256_andnot_pd(sign, x)))
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn max(a: V, b: V) -> V {
        lanewise(a, b, |x, y| _mm256_max_pd(x, y))
    }

    /// The tree of the fixed order: lanes `j` and `j + 8` (registers 0 + 2, 1 + 3), then the
    /// halves, the pairs and the last pair, combined by `f`.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn tree(v: V, f: impl Fn(__m256d, __m256d) -> __m256d) -> f64 {
        let s4 = f(f(v.0[0], v.0[2]), f(v.0[1], v.0[3]));
        let s2 = f(s4, _mm256_permute2f128_pd::<0x01>(s4, s4));
        let s1 = f(s2, _mm256_permute_pd::<0b0101>(s2));
        _mm256_cvtsd_f64(s1)
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn sum(v: V) -> f64 {
        tree(v, |a, b| _mm256_add_pd(a, b))
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn maximum(v: V) -> f64 {
        tree(v, |a, b| _mm256_max_pd(a, b))
    }

    kernels!(#[target_feature(enable = "avx2")]);
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

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    const NORMS: [Norm; 4] = [Norm::L1, Norm::L2, Norm::Linf, Norm::Angular];

    /// The plain loop: one left-to-right sum in f64, with its error bound
    /// `(n − 1)·ε·Σ|term|` (the classical bound of recursive summation), doubled for the
    /// fixed order's own error, which has the same bound.
    fn plain(norm: Norm, a: &[f32], b: &[f32]) -> (f64, f64) {
        let n = a.len() as f64;
        let eps = f64::EPSILON;
        let d = a.iter().zip(b).map(|(&x, &y)| f64::from(x) - f64::from(y));
        match norm {
            Norm::L1 => {
                let s: f64 = d.map(f64::abs).sum();
                (s, 2.0 * n * eps * s)
            }
            Norm::L2 => {
                let s: f64 = d.map(|d| d * d).sum();
                // sqrt halves the relative error of the sum.
                (s.sqrt(), (n * eps + eps) * s.sqrt())
            }
            Norm::Linf => (d.fold(0.0, |m, d| m.max(d.abs())), 0.0),
            Norm::Angular => {
                let unit = |v: &[f32]| {
                    let len = v.iter().map(|&x| f64::from(x).powi(2)).sum::<f64>().sqrt();
                    v.iter().map(|&x| f64::from(x) / len).collect::<Vec<f64>>()
                };
                let (x, y) = (unit(a), unit(b));
                let minus: f64 = x.iter().zip(&y).map(|(p, q)| (p - q).powi(2)).sum();
                let plus: f64 = x.iter().zip(&y).map(|(p, q)| (p + q).powi(2)).sum();
                let d = 2.0 * minus.sqrt().atan2(plus.sqrt()) / std::f64::consts::PI;
                (d, 64.0 * n * eps)
            }
        }
    }

    /// Every level this CPU runs gives the portable form's distance bit for bit, within the
    /// plain loop's error bound, and `distance_within` agrees with it at the bounds.
    fn check(norm: Norm, a: &[f32], b: &[f32]) {
        let m = VectorMetric::new(norm, a.len()).expect("dim ≥ 1");
        let (qa, xb) = (vector_bytes(a), vector_bytes(b));
        let want = m.prepare_with_level(&qa, Level::Portable).distance(&xb);
        let (plain, tol) = plain(norm, a, b);
        assert!(
            (want - plain).abs() <= tol,
            "{norm:?}, dim {}: {want} vs plain {plain} (tolerance {tol})",
            a.len()
        );
        for level in Level::ALL.into_iter().filter(|l| l.available()) {
            let q = m.prepare_with_level(&qa, level);
            let got = q.distance(&xb);
            let what = format!("{norm:?}, dim {}, {}", a.len(), level.name());
            assert_eq!(got.to_bits(), want.to_bits(), "{what}: {got} vs {want}");
            assert_eq!(q.distance_within(&xb, got), Some(got), "{what}");
            if got > 0.0 {
                assert_eq!(q.distance_within(&xb, got * (1.0 - 1e-9)), None, "{what}");
            }
        }
    }

    #[test]
    fn every_dimension_around_the_lanes_and_blocks() {
        for dim in (1..=80).chain([127, 128, 129, 191, 192, 193, 300]) {
            let a: Vec<f32> = (0..dim)
                .map(|i| ((i * 37 % 101) as f32 - 50.0) / 7.0)
                .collect();
            let b: Vec<f32> = (0..dim)
                .map(|i| ((i * 53 % 97) as f32 - 40.0) / 3.0)
                .collect();
            for norm in NORMS {
                check(norm, &a, &b);
                check(norm, &a, &a);
            }
        }
    }

    /// Pairs and brute forces measure each pair from either end: the distance is symmetric
    /// bit for bit at every level.
    #[test]
    fn symmetric_bit_for_bit() {
        for dim in [1usize, 7, 16, 33, 100] {
            let a: Vec<f32> = (0..dim)
                .map(|i| ((i * 29 % 89) as f32 - 44.0) / 9.0)
                .collect();
            let b: Vec<f32> = (0..dim)
                .map(|i| ((i * 61 % 83) as f32 - 30.0) / 7.0)
                .collect();
            let (ab, bb) = (vector_bytes(&a), vector_bytes(&b));
            for norm in NORMS {
                let m = VectorMetric::new(norm, dim).unwrap();
                for level in Level::ALL.into_iter().filter(|l| l.available()) {
                    let x = m.prepare_with_level(&ab, level).distance(&bb);
                    let y = m.prepare_with_level(&bb, level).distance(&ab);
                    assert_eq!(x.to_bits(), y.to_bits(), "{norm:?}, dim {dim}, {level:?}");
                }
            }
        }
    }

    #[test]
    fn zero_vectors_and_a_worked_example() {
        // 3-4-5 triangle; 90° is half of π.
        for level in Level::ALL {
            let l2 = VectorMetric::new(Norm::L2, 2).unwrap();
            let q = l2.prepare_with_level(&vector_bytes(&[0.0, 0.0]), level);
            assert_eq!(q.distance(&vector_bytes(&[3.0, 4.0])), 5.0);
            let ang = VectorMetric::new(Norm::Angular, 2).unwrap();
            let zero = ang.prepare_with_level(&vector_bytes(&[0.0, 0.0]), level);
            assert_eq!(zero.distance(&vector_bytes(&[0.0, 0.0])), 0.0);
            assert_eq!(zero.distance(&vector_bytes(&[1.0, 0.0])), 0.5);
            let x = ang.prepare_with_level(&vector_bytes(&[1.0, 0.0]), level);
            assert_eq!(x.distance(&vector_bytes(&[0.0, 0.0])), 0.5);
            assert!((x.distance(&vector_bytes(&[0.0, 2.0])) - 0.5).abs() < 1e-15);
        }
    }

    proptest! {
        #[test]
        fn every_level_matches_the_portable_form_and_the_plain_loop(
            ab in (1usize..300).prop_flat_map(|n| (
                proptest::collection::vec(-1e3f32..1e3, n),
                proptest::collection::vec(-1e3f32..1e3, n),
            )),
            norm_at in 0usize..4,
        ) {
            let (a, b) = ab;
            check(NORMS[norm_at], &a, &b);
        }
    }
}
