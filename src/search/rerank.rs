//! Re-ranking: the candidates measured with the true distance, the best `k` kept.
//!
//! A query whose metric measures groups best ([`PreparedQuery::group_size`] above 1:
//! Levenshtein's vector lanes, 64 items per call; an external program, every candidate in
//! one round trip) gets its candidates in groups, and none is skipped: a distance in a lane
//! costs less than the cache miss of fetching a candidate's coordinate row for its bound.
//! Other metrics go one candidate at a time, nearest first: once `k` answers are held, a
//! candidate whose L∞ lower bound exceeds the current k-th distance is skipped without a
//! distance computed, and the others are measured with the k-th distance as the kernel's
//! bound.
//!
//! Keys sit at scattered places in the file, two dependent loads each (offset, then bytes):
//! both paths fetch offsets two steps ahead and bytes one step ahead.

use super::candidates::Scratch;
use super::order::{keep_best, Neighbor};
use super::{Found, Prepared, SearchParams, Searcher, WIDEN_TAIL};
use crate::coords::{score, Space};
use crate::error::Result;
use crate::metric::{AnyQuery, PreparedQuery};

/// How far ahead (in candidates) the one-by-one path fetches item bytes; offsets and
/// coordinate rows are fetched twice as far ahead.
const AHEAD: usize = 8;

impl Searcher<'_> {
    /// Re-ranks a query's candidates in rounds ([`SearchParams::widen`]):
    /// `pick(searcher, c, visit, scratch)` puts the `c` candidates of a round, nearest
    /// first, in `scratch.picked` (with `visit` rows compared, for cells). A round re-ranks
    /// the candidates not measured before; another round, with twice the candidates and
    /// rows, follows while an answer held came from the last [`WIDEN_TAIL`] of the list and
    /// doublings are left. The reference distances are counted in, and a metric program's
    /// failure is reported.
    pub(super) fn rerank_rounds(
        &self,
        pq: &Prepared,
        p: &SearchParams,
        s: &mut Scratch,
        mut pick: impl FnMut(&Self, usize, usize, &mut Scratch) -> Result<()>,
    ) -> Result<Found> {
        let metric = self.index.metric()?;
        let n = self.index.len();
        // No more answers than items: a k above n means every item, never an allocation of k.
        let k = p.k.min(n.max(1));
        let group = pq.q.group_size();
        let mut c = p.candidates.max(p.k).min(n);
        let mut visit = p.visit;
        let mut best: Vec<Neighbor> = Vec::with_capacity(k + 1);
        let (mut distances, mut pruned) = (0, 0);
        let mut measured: Vec<u32> = Vec::new();
        let tail = WIDEN_TAIL;
        for round in 0..=p.widen {
            pick(self, c, visit, s)?;
            let cands: &[(u32, u32)] = if round == 0 {
                &s.picked
            } else {
                s.fresh.clear();
                s.fresh.extend(
                    s.picked
                        .iter()
                        .filter(|(_, i)| measured.binary_search(i).is_err()),
                );
                &s.fresh
            };
            let (d, skipped) = if group > 1 {
                self.rerank_groups(&pq.q, k, cands, group, &mut best)
            } else {
                self.rerank_each(&pq.q, &pq.small, k, cands, &mut best)
            };
            distances += d;
            pruned += skipped;
            if round == p.widen || c >= n {
                break;
            }
            // Does an answer come from the end of the list?
            let from = ((c as f64) * (1.0 - tail)).ceil() as usize;
            let deep = s
                .picked
                .get(from..)
                .unwrap_or(&[])
                .iter()
                .any(|&(_, i)| best.iter().any(|b| b.index == i));
            if !deep {
                break;
            }
            measured.clear();
            measured.extend(s.picked.iter().map(|&(_, i)| i));
            measured.sort_unstable();
            c = c.saturating_mul(2).min(n);
            if visit != 0 {
                visit = visit.saturating_mul(2).min(n);
            }
        }
        metric.check()?;
        Ok(Found {
            neighbors: best,
            distances: distances + self.refs.len(),
            pruned,
            certificate: None,
        })
    }

    /// Measures the candidates `group` at a time with [`PreparedQuery::distances`]; the
    /// next group's keys are fetched while a group is measured.
    /// Continues `best`; returns the distances computed and the candidates skipped (none).
    fn rerank_groups(
        &self,
        q: &AnyQuery,
        k: usize,
        cands: &[(u32, u32)],
        group: usize,
        best: &mut Vec<Neighbor>,
    ) -> (usize, usize) {
        if cands.is_empty() {
            return (0, 0);
        }
        let size = group.min(cands.len()).max(1);
        let mut keys: Vec<&[u8]> = Vec::with_capacity(size);
        let mut out = vec![0f64; size];
        let groups: Vec<&[(u32, u32)]> = cands.chunks(size).collect();
        for g in groups.iter().take(2) {
            for &(_, i) in *g {
                self.keys.prefetch_offsets(i as usize);
            }
        }
        for (at, g) in groups.iter().enumerate() {
            if let Some(next) = groups.get(at + 1) {
                for &(_, i) in *next {
                    self.keys.prefetch_bytes(i as usize);
                }
            }
            if let Some(later) = groups.get(at + 2) {
                for &(_, i) in *later {
                    self.keys.prefetch_offsets(i as usize);
                }
            }
            keys.clear();
            keys.extend(g.iter().map(|&(_, i)| self.keys.get(i as usize)));
            let out = &mut out[..g.len()];
            q.distances(&keys, out);
            for (&(_, i), &distance) in g.iter().zip(out.iter()) {
                keep_best(self.index, best, k, Neighbor { index: i, distance });
            }
        }
        (cands.len(), 0)
    }

    /// Measures the candidates one at a time, in the order given, skipping those whose
    /// lower bound exceeds the k-th distance held. Continues `best`; returns the distances
    /// computed and the candidates skipped.
    fn rerank_each(
        &self,
        q: &AnyQuery,
        small: &[u8; 64],
        k: usize,
        cands: &[(u32, u32)],
        best: &mut Vec<Neighbor>,
    ) -> (usize, usize) {
        let rows = self.index.rows();
        let bound = self.bound;
        let mut distances = 0;
        let mut pruned = 0;
        for &(_, i) in cands.iter().take(2 * AHEAD) {
            self.keys.prefetch_offsets(i as usize);
        }
        for (j, &(_, i)) in cands.iter().enumerate() {
            if let Some(&(_, f)) = cands.get(j + 2 * AHEAD) {
                self.keys.prefetch_offsets(f as usize);
                rows.prefetch_position(f as usize);
            }
            if let Some(&(_, f)) = cands.get(j + AHEAD) {
                self.keys.prefetch_bytes(f as usize);
                if !rows.in_order() {
                    rows.prefetch_row(f as usize);
                }
            }
            let iu = i as usize;
            let full = best.len() == k;
            let kth = if full {
                best[k - 1].distance
            } else {
                f64::INFINITY
            };
            if let (true, Some(b)) = (full, bound) {
                let row = rows.row(iu);
                let diff = score(row, small, Space::Linf).min(255) as u8;
                if b.lower(diff) > kth {
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
                best,
                k,
                Neighbor {
                    index: i,
                    distance: d,
                },
            );
        }
        (distances, pruned)
    }
}
