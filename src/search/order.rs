//! The order of answers: by distance, then id, then item number.
//!
//! Every path that returns neighbours (approximate, exact, range, brute force) orders them
//! with [`before`] and keeps the best with [`keep_best`], so that answers from different
//! paths compare equal, ties included.

use crate::index::Index;

/// One neighbour found.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Neighbor {
    /// Item number in the index (use [`Index::id`] and [`Index::item`]).
    pub index: u32,
    /// True distance to the query.
    pub distance: f64,
}

/// Whether `a` comes before `b` in answers: by distance, then id, then item number. The one
/// place that defines the order of answers.
#[inline]
pub fn before(index: &Index, a: &Neighbor, b: &Neighbor) -> bool {
    match a.distance.total_cmp(&b.distance) {
        std::cmp::Ordering::Equal => {
            (index.id(a.index as usize), a.index) < (index.id(b.index as usize), b.index)
        }
        o => o.is_lt(),
    }
}

/// Inserts `cand` into `best` (at most `k` answers, in the order of [`before`]) if it
/// belongs there. With `k = 0` nothing is kept.
#[inline]
pub fn keep_best(index: &Index, best: &mut Vec<Neighbor>, k: usize, cand: Neighbor) {
    if k == 0 || (best.len() >= k && !before(index, &cand, &best[k - 1])) {
        return;
    }
    let pos = best.partition_point(|b| before(index, b, &cand));
    best.insert(pos, cand);
    best.truncate(k);
}

/// Sorts `found` into the order of [`before`].
pub fn sort(index: &Index, found: &mut [Neighbor]) {
    found.sort_unstable_by(|a, b| {
        if before(index, a, b) {
            std::cmp::Ordering::Less
        } else if before(index, b, a) {
            std::cmp::Ordering::Greater
        } else {
            std::cmp::Ordering::Equal
        }
    });
}
