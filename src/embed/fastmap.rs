//! FastMap (Faloutsos & Lin, SIGMOD 1995): coordinates by projection onto pivot lines.
//!
//! Axis `i` has two pivot items `a, b`. With the residual distance of the axes before it,
//! `r_i(x, y)² = d(x, y)² − Σ_{j<i} (x_j − y_j)²`, an item's coordinate on the axis is its
//! projection on the line through the pivots (cosine law):
//!
//! `x_i = (r_i(a, x)² + r_i(a, b)² − r_i(b, x)²) / (2 · r_i(a, b))`.
//!
//! Pivots are chosen with the paper's heuristic on a random sample: from a random member,
//! the farthest member in residual distance is `b`, and the farthest from `b` is `a`. A
//! query's coordinates need its true distance to each pivot and, for the residuals, the
//! pivots' own coordinates on the earlier axes, which are stored with each axis. Axis `i`
//! depends only on axes before it, so the first `j` axes are the `j`-axis FastMap.
//!
//! Edit distance is not Euclidean: residual "squared distances" can be negative, and the
//! coordinates are not contractive (Hjaltason & Samet, IEEE TPAMI 2003) — search ranks with
//! them but never prunes with them. Coordinates are shifted by the build's smallest value per
//! axis (`offset`), so that the build's coordinates are non-negative and fit the u8 rows.

use rand::seq::index::sample;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::Embedding;
use crate::metric::{Metric, PreparedQuery};

/// One FastMap axis, as recorded in an index.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FastMapAxis {
    /// Position of pivot `a` in the embedding's reference list.
    pub a: u32,
    /// Position of pivot `b` in the embedding's reference list.
    pub b: u32,
    /// Residual distance between the pivots on this axis (positive).
    pub ab: f64,
    /// Raw coordinates of pivot `a` on the axes before this one.
    pub a_before: Vec<f64>,
    /// Raw coordinates of pivot `b` on the axes before this one.
    pub b_before: Vec<f64>,
    /// Subtracted from the raw coordinate: the build's smallest raw value on this axis.
    pub offset: f64,
}

/// The raw (unshifted) coordinate on `axis` of an item at true distances `da`, `db` from the
/// pivots, whose raw coordinates on the earlier axes are `before`.
#[inline]
fn project(axis: &FastMapAxis, da: f64, db: f64, before: &[f64]) -> f64 {
    let mut ra = da * da;
    let mut rb = db * db;
    for ((x, pa), pb) in before.iter().zip(&axis.a_before).zip(&axis.b_before) {
        ra -= (x - pa) * (x - pa);
        rb -= (x - pb) * (x - pb);
    }
    (ra + axis.ab * axis.ab - rb) / (2.0 * axis.ab)
}

/// Raw coordinates on every axis from distances to the references, then shifted.
pub(super) fn coords(axes: &[FastMapAxis], ref_distances: &[f64], out: &mut [f64]) {
    let mut raw = [0f64; super::MAX_DIM];
    for (i, axis) in axes.iter().enumerate() {
        raw[i] = project(
            axis,
            ref_distances[axis.a as usize],
            ref_distances[axis.b as usize],
            &raw[..i],
        );
    }
    for ((o, r), axis) in out.iter_mut().zip(&raw).zip(axes) {
        *o = r - axis.offset;
    }
}

/// Checks a recorded list of axes against `refs` reference items.
pub(super) fn check(axes: &[FastMapAxis], refs: usize) -> Result<(), String> {
    for (i, x) in axes.iter().enumerate() {
        let finite = |v: &[f64]| v.iter().all(|f| f.is_finite());
        if x.a as usize >= refs
            || x.b as usize >= refs
            || !(x.ab.is_finite() && x.ab > 0.0)
            || !x.offset.is_finite()
            || x.a_before.len() != i
            || x.b_before.len() != i
            || !finite(&x.a_before)
            || !finite(&x.b_before)
        {
            return Err(format!("FastMap axis {i} is malformed"));
        }
    }
    Ok(())
}

/// Chooses up to `dim` axes on a seeded sample of `sample` items (offsets 0; see
/// [`shift_to_zero`]). Stops early when every residual distance in the sample is zero.
pub(super) fn choose<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    dim: usize,
    sample_size: usize,
    seed: u64,
) -> Embedding {
    let n = items.len();
    let mut refs: Vec<u64> = Vec::new();
    let mut axes: Vec<FastMapAxis> = Vec::new();
    if n == 0 || dim == 0 {
        return Embedding::FastMap { refs, axes };
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0xfa57_3a90);
    let mut pool: Vec<usize> = sample(&mut rng, n, sample_size.clamp(1, n)).into_vec();
    pool.sort_unstable();
    let s = pool.len();
    // Raw coordinates of the sample members on the axes chosen so far (row-major, MAX_DIM).
    let mut raw = vec![0f64; s * super::MAX_DIM];
    let dists_from = |p: usize| -> Vec<f64> {
        let q = metric.prepare(items[pool[p]].as_ref());
        pool.par_iter()
            .map(|&i| q.distance(items[i].as_ref()))
            .collect()
    };
    let residual2 = |raw: &[f64], d: &[f64], p: usize, i: usize, axes_done: usize| {
        let (rp, ri) = (
            &raw[p * super::MAX_DIM..p * super::MAX_DIM + axes_done],
            &raw[i * super::MAX_DIM..i * super::MAX_DIM + axes_done],
        );
        let mut r = d[i] * d[i];
        for (x, y) in rp.iter().zip(ri) {
            r -= (x - y) * (x - y);
        }
        r
    };
    // The sample member farthest from `p` in residual distance (lowest position on ties).
    let farthest = |raw: &[f64], d: &[f64], p: usize, k: usize| -> (usize, f64) {
        (0..s).fold((p, 0.0), |best, i| {
            let r = residual2(raw, d, p, i, k);
            if r > best.1 {
                (i, r)
            } else {
                best
            }
        })
    };
    for k in 0..dim.min(super::MAX_DIM) {
        let o = rng.gen_range(0..s);
        let d_o = dists_from(o);
        let (b, _) = farthest(&raw, &d_o, o, k);
        let d_b = dists_from(b);
        let (a, ab2) = farthest(&raw, &d_b, b, k);
        if ab2 <= 1e-9 {
            break;
        }
        let d_a = dists_from(a);
        let axis = FastMapAxis {
            a: ref_pos(pool[a], &mut refs),
            b: ref_pos(pool[b], &mut refs),
            ab: ab2.sqrt(),
            a_before: raw[a * super::MAX_DIM..a * super::MAX_DIM + k].to_vec(),
            b_before: raw[b * super::MAX_DIM..b * super::MAX_DIM + k].to_vec(),
            offset: 0.0,
        };
        for i in 0..s {
            let x = project(
                &axis,
                d_a[i],
                d_b[i],
                &raw[i * super::MAX_DIM..i * super::MAX_DIM + k],
            );
            raw[i * super::MAX_DIM + k] = x;
        }
        axes.push(axis);
    }
    Embedding::FastMap { refs, axes }
}

/// Position of `item` in `refs`, appended if new.
fn ref_pos(item: usize, refs: &mut Vec<u64>) -> u32 {
    match refs.iter().position(|&r| r == item as u64) {
        Some(p) => p as u32,
        None => {
            refs.push(item as u64);
            (refs.len() - 1) as u32
        }
    }
}

/// Sets each axis's offset to the smallest coordinate on it and shifts `coords` (row-major,
/// computed with offsets 0) by it, exactly as [`coords`] does with the new offsets.
pub(super) fn shift_to_zero(mut axes: Vec<FastMapAxis>, coords: &mut [f64]) -> Vec<FastMapAxis> {
    let d = axes.len();
    if d == 0 {
        return axes;
    }
    let mut lo = vec![f64::INFINITY; d];
    for row in coords.chunks_exact(d) {
        for (l, &x) in lo.iter_mut().zip(row) {
            *l = l.min(x);
        }
    }
    for (axis, &l) in axes.iter_mut().zip(&lo) {
        axis.offset = if l.is_finite() { l } else { 0.0 };
    }
    for row in coords.chunks_exact_mut(d) {
        for (x, axis) in row.iter_mut().zip(&axes) {
            *x -= axis.offset;
        }
    }
    axes
}

/// The embedding made of the first axes alone, the reference list cut to the pivots they use
/// (references are numbered in order of first use, so that is a prefix of the list).
pub(super) fn prefix(refs: &[u64], axes: &[FastMapAxis]) -> Embedding {
    let used = axes
        .iter()
        .map(|x| x.a.max(x.b) as usize + 1)
        .max()
        .unwrap_or(0);
    Embedding::FastMap {
        refs: refs[..used].to_vec(),
        axes: axes.to_vec(),
    }
}
