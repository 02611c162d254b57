//! Bourgain-style reference sets (Bourgain 1985; Linial, London, Rabinovich 1995).
//!
//! Coordinate `j` of an item `x` is its distance to a random set `S_j`: `min_{s ∈ S_j} d(x, s)`.
//! The sets have sizes `1, 2, 4, …, 2^J`, taken in turn (size 1, size 2, …, size 2^J, size 1
//! again, …), so that every prefix of the coordinates holds every size about equally often.
//! Small sets tell apart items near one reference item, large sets tell apart items by how
//! far they are from a whole region — the mix Bourgain's `O(log n)` distortion bound rests on.
//!
//! Bourgain draws the sets from all `n` items, so a query would need a distance to every
//! member of every set. Here the sets are drawn from a **pool** of `P` items sampled once:
//! a query costs `P` distance computations whatever the dimension, and `2^J ≤ P/2` so that
//! the largest sets still leave half the pool out. Distance to a set is 1-Lipschitz
//! (`|d(x,S) − d(y,S)| ≤ d(x,y)`), so the L∞ distance of the coordinates is a lower bound of
//! the true distance, as with landmarks.

use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use super::Embedding;

/// The set sizes used with a pool of `pool` items: `1, 2, …, 2^J` with `2^J ≤ pool / 2`
/// (just `1` for a pool of one).
///
/// ```
/// assert_eq!(waymark::embed::refsets::sizes(64), vec![1, 2, 4, 8, 16, 32]);
/// assert_eq!(waymark::embed::refsets::sizes(1), vec![1]);
/// ```
pub fn sizes(pool: usize) -> Vec<usize> {
    let mut out = vec![1];
    while out.last().expect("non-empty") * 2 <= pool / 2 {
        let next = out.last().expect("non-empty") * 2;
        out.push(next);
    }
    out
}

/// Draws the pool (from `n` items) and `dim` sets from it. Deterministic for a seed.
pub fn choose(n: usize, dim: usize, pool: usize, seed: u64) -> Embedding {
    if n == 0 || dim == 0 {
        return Embedding::RefSets {
            pool: Vec::new(),
            sets: Vec::new(),
        };
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0x5eed_5e75);
    let p = pool.clamp(1, n);
    let mut members: Vec<u64> = sample(&mut rng, n, p)
        .into_iter()
        .map(|i| i as u64)
        .collect();
    members.sort_unstable();
    let sizes = sizes(p);
    let sets = (0..dim)
        .map(|j| {
            let mut s: Vec<u32> = sample(&mut rng, p, sizes[j % sizes.len()])
                .into_iter()
                .map(|i| i as u32)
                .collect();
            s.sort_unstable();
            s
        })
        .collect();
    Embedding::RefSets {
        pool: members,
        sets,
    }
}

/// The embedding made of `sets` alone, its pool cut to the members they use (renumbered,
/// in pool order), so that a query is measured against no item it does not need.
pub(super) fn prefix(pool: &[u64], sets: &[Vec<u32>]) -> Embedding {
    let mut used = vec![false; pool.len()];
    for s in sets {
        for &m in s {
            used[m as usize] = true;
        }
    }
    let mut renumber = vec![u32::MAX; pool.len()];
    let mut kept = Vec::new();
    for (i, &u) in used.iter().enumerate() {
        if u {
            renumber[i] = kept.len() as u32;
            kept.push(pool[i]);
        }
    }
    Embedding::RefSets {
        pool: kept,
        sets: sets
            .iter()
            .map(|s| s.iter().map(|&m| renumber[m as usize]).collect())
            .collect(),
    }
}
