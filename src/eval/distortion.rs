//! How far embedded distances stray from true ones, on a sample of pairs.
//!
//! For each pair `(x, y)` with `d(x, y) > 0` the ratio `‖f(x) − f(y)‖ / d(x, y)` is measured in
//! L1, L2 and L∞. The distortion is `max ratio / min ratio`: the `α` of
//! `β·d ≤ ‖f(x) − f(y)‖ ≤ α·β·d` with the best scaling `β = min ratio`, so it does not depend on
//! how the coordinates are scaled. The maximum is set by the worst pair alone, so quantiles
//! and a histogram of the ratio are reported beside it (common practice).

use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::Serialize;

use crate::coords::Space;
use crate::embed::{embed_one, Embedding};
use crate::metric::{Metric, PreparedQuery};

/// The quantiles reported, as fractions.
pub const QUANTILES: [f64; 7] = [0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99];

/// Number of histogram bins.
pub const BINS: usize = 16;

/// One histogram bin of the ratio.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Bin {
    /// Lower edge (inclusive).
    pub lo: f64,
    /// Upper edge (exclusive, inclusive for the last bin).
    pub hi: f64,
    /// Pairs whose ratio falls in the bin.
    pub count: usize,
}

/// Ratio statistics in one space.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SpaceDistortion {
    /// The space of the embedded distance.
    pub space: Space,
    /// Smallest ratio embedded / true.
    pub min: f64,
    /// Largest ratio.
    pub max: f64,
    /// Mean ratio.
    pub mean: f64,
    /// `(q, ratio)` for every q in [`QUANTILES`] (nearest rank).
    pub quantiles: Vec<(f64, f64)>,
    /// `max / min`: the distortion with the best scaling factor `1 / min`.
    pub distortion: f64,
    /// `q99 / q01`: the distortion of all but the 2% most extreme pairs.
    pub distortion_98: f64,
    /// Share of pairs with ratio below 1 (embedded distance shorter than the true one).
    pub contracted: f64,
    /// Share of pairs with ratio above 1.
    pub expanded: f64,
    /// Histogram of the ratio over `[min, max]` in [`BINS`] equal bins.
    pub histogram: Vec<Bin>,
}

/// Distortion statistics of an embedding.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct DistortionReport {
    /// The embedding method.
    pub method: &'static str,
    /// Number of coordinates.
    pub dim: usize,
    /// Items the pairs were drawn among.
    pub items: usize,
    /// Whether every pair of items was measured (else all pairs of a random item sample).
    pub all_pairs: bool,
    /// Pairs measured (at a positive true distance).
    pub pairs: usize,
    /// Pairs skipped because their true distance is 0 (duplicates).
    pub zero_pairs: usize,
    /// Per space: L1, L2, L∞; empty when no pair was measured (`pairs == 0`: a single
    /// item, or only pairs at distance 0), as there is then no distortion.
    pub spaces: Vec<SpaceDistortion>,
}

/// Measures the distortion of an index's embedding over its own items, as `waymark eval
/// --distortion --pairs MAX_PAIRS` does: the pairs are refused up front when they would not
/// fit in memory ([`crate::resources::check_distortion`]), the sample is drawn with the
/// index's seed, and a metric that fails while measuring stops it with its error.
///
/// ```no_run
/// use waymark::eval::index_distortion;
/// use waymark::index::Index;
///
/// let index = Index::open("names.wmk".as_ref())?;
/// let report = index_distortion(&index, 20_000)?;
/// println!("{} pairs, L∞ distortion {}", report.pairs, report.spaces[2].distortion);
/// # Ok::<(), waymark::Error>(())
/// ```
pub fn index_distortion(
    index: &crate::index::Index,
    max_pairs: usize,
) -> crate::Result<DistortionReport> {
    crate::resources::check_distortion(index.len(), max_pairs, index.meta().dim as usize)?;
    let keys = index.keys();
    let items: Vec<&[u8]> = (0..index.len()).map(|i| keys.get(i)).collect();
    let metric = index.metric()?;
    let report = measure_against(
        metric,
        &items,
        &index.reference_keys(),
        &index.meta().embedding,
        max_pairs,
        index.meta().seed,
    );
    metric.check()?;
    Ok(report)
}

/// Measures the distortion of `embedding` over `items`: every pair when there are at most
/// `max_pairs` of them, else every pair among a seeded random sample of `s` items with
/// `s(s−1)/2 ≥ max_pairs`. Coordinates are recomputed from distances to the reference items,
/// as a query's would be.
///
/// ```
/// use waymark::embed::{embed_items, EmbedOptions, Method};
/// use waymark::eval::measure_distortion;
/// use waymark::metric::Levenshtein;
///
/// let items = ["quay", "quays", "strand", "orvane", "orvanes", "kaldrith"];
/// let e = embed_items(&Levenshtein, &items, &EmbedOptions { dim: 3, sample: 10, ..Default::default() }, &|_| {});
/// let r = measure_distortion(&Levenshtein, &items, &e.embedding, 1000, 1);
/// assert!(r.all_pairs && r.pairs == 15);
/// // Landmark coordinates are contractive in L∞: no pair expands.
/// assert_eq!(r.spaces[2].expanded, 0.0);
/// ```
pub fn measure_distortion<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    embedding: &Embedding,
    max_pairs: usize,
    seed: u64,
) -> DistortionReport {
    let refs: Vec<&[u8]> = embedding
        .refs()
        .iter()
        .map(|&r| items[r as usize].as_ref())
        .collect();
    measure_against(metric, items, &refs, embedding, max_pairs, seed)
}

/// [`measure_distortion`] with the reference items' keys given apart (`refs[j]` for
/// `embedding.refs()[j]`), as an index part that does not hold them stores them.
fn measure_against<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    refs: &[&[u8]],
    embedding: &Embedding,
    max_pairs: usize,
    seed: u64,
) -> DistortionReport {
    let n = items.len();
    let all = n.saturating_sub(1).saturating_mul(n) / 2 <= max_pairs;
    let chosen: Vec<usize> = if all {
        (0..n).collect()
    } else {
        let mut s = 2usize;
        while s * (s - 1) / 2 < max_pairs {
            s += 1;
        }
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut v = sample(&mut rng, n, s.min(n)).into_vec();
        v.sort_unstable();
        v
    };
    let coords: Vec<Vec<f64>> = chosen
        .par_iter()
        .map(|&i| embed_one(metric, refs, &embedding.renumbered(), items[i].as_ref()))
        .collect();
    // (true, [l1, l2, linf]) per pair, row by row in parallel.
    let rows: Vec<Vec<(f64, [f64; 3])>> = (0..chosen.len())
        .into_par_iter()
        .map(|a| {
            let q = metric.prepare(items[chosen[a]].as_ref());
            (a + 1..chosen.len())
                .map(|b| {
                    let t = q.distance(items[chosen[b]].as_ref());
                    let e = [Space::L1, Space::L2, Space::Linf]
                        .map(|s| s.distance(&coords[a], &coords[b]));
                    (t, e)
                })
                .collect()
        })
        .collect();
    let pairs: Vec<(f64, [f64; 3])> = rows.into_iter().flatten().collect();
    let zero_pairs = pairs.iter().filter(|p| p.0 <= 0.0).count();
    // With no pair at a distance above 0 there is no ratio, and no distortion to report.
    let measured = pairs.len() > zero_pairs;
    let spaces = [Space::L1, Space::L2, Space::Linf]
        .into_iter()
        .enumerate()
        .map(|(j, space)| {
            let ratios: Vec<f64> = pairs
                .iter()
                .filter(|p| p.0 > 0.0)
                .map(|p| p.1[j] / p.0)
                .collect();
            ratio_stats(space, ratios)
        })
        .filter(|_| measured)
        .collect();
    DistortionReport {
        method: embedding.name(),
        dim: embedding.dim(),
        items: chosen.len(),
        all_pairs: all,
        pairs: pairs.len() - zero_pairs,
        zero_pairs,
        spaces,
    }
}

/// Statistics of a list of ratios (empty list: everything 0).
pub fn ratio_stats(space: Space, mut ratios: Vec<f64>) -> SpaceDistortion {
    ratios.sort_by(f64::total_cmp);
    let m = ratios.len();
    let at = |q: f64| {
        if m == 0 {
            0.0
        } else {
            ratios[((q * m as f64).ceil() as usize).clamp(1, m) - 1]
        }
    };
    let (min, max) = (at(0.0), ratios.last().copied().unwrap_or(0.0));
    let div = |a: f64, b: f64| if b > 0.0 { a / b } else { f64::INFINITY };
    let tol = 1e-9;
    let share = |f: &dyn Fn(f64) -> bool| {
        if m == 0 {
            0.0
        } else {
            ratios.iter().filter(|&&r| f(r)).count() as f64 / m as f64
        }
    };
    let width = (max - min) / BINS as f64;
    let mut histogram: Vec<Bin> = (0..BINS)
        .map(|b| Bin {
            lo: min + width * b as f64,
            hi: if b + 1 == BINS {
                max
            } else {
                min + width * (b + 1) as f64
            },
            count: 0,
        })
        .collect();
    for &r in &ratios {
        let b = if width > 0.0 {
            (((r - min) / width) as usize).min(BINS - 1)
        } else {
            0
        };
        histogram[b].count += 1;
    }
    SpaceDistortion {
        space,
        min,
        max,
        mean: if m == 0 {
            0.0
        } else {
            ratios.iter().sum::<f64>() / m as f64
        },
        quantiles: QUANTILES.iter().map(|&q| (q, at(q))).collect(),
        distortion: if m == 0 { 1.0 } else { div(max, min) },
        distortion_98: if m == 0 { 1.0 } else { div(at(0.99), at(0.01)) },
        contracted: share(&|r| r < 1.0 - tol),
        expanded: share(&|r| r > 1.0 + tol),
        histogram,
    }
}
