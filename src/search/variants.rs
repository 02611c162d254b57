//! Range queries of small radius through the index's deletion-variant table
//! ([`crate::index::variants`]): the items that share a deletion variant with the query
//! are the only ones that can be within the radius, and the true distance keeps those that
//! are. No landmark distance is computed and no column block is read.

use super::order::{self, Neighbor};
use super::{Certificate, Found, Scratch, Searcher};
use crate::error::Result;
use crate::metric::{Metric, PreparedQuery};

impl Searcher<'_> {
    /// The table's radius in deletions for a request of `k` answers (all when `None`)
    /// within `radius` (any when `None`), when the table can answer it: a range query
    /// whose radius is at most the table's, or an exact k-NN query (tried within the
    /// table's radius; [`Searcher::variant_answer`] gives up when fewer than k are there).
    /// `Ok(None)`: no table, or a radius beyond it.
    pub(super) fn variant_radius(&self, radius: Option<f64>) -> Result<Option<u32>> {
        let Some(table) = self.index.variants()? else {
            return Ok(None);
        };
        Ok(match radius {
            Some(r) if r >= 0.0 && r.floor() <= f64::from(table.radius()) => Some(r as u32),
            Some(_) => None,
            None => Some(table.radius()),
        })
    }

    /// The answer from the deletion-variant table, or `None` when the table cannot give it:
    /// no table, a radius beyond the table's, or an exact k-NN query with fewer than `k`
    /// items within the table's radius (the caller then takes the column blocks).
    ///
    /// The certificate: `examined` and `computed` count the items that share a variant with
    /// the query (each measured); every other item is farther than the radius in
    /// deletions `r`, so at least `r + 1` away, which is `bound`.
    pub(super) fn variant_answer(
        &self,
        query: &str,
        k: Option<usize>,
        radius: Option<f64>,
        scratch: &mut Scratch,
    ) -> Option<Result<Found>> {
        let r = match self.variant_radius(radius) {
            Ok(Some(r)) => r,
            Ok(None) => return None,
            Err(e) => return Some(Err(e)),
        };
        let found = self.variant_found(query, r, radius.unwrap_or(f64::from(r)), scratch);
        match (found, k) {
            // Fewer than k within the table's radius: the k-th is farther than it knows.
            (Ok(f), Some(k)) if radius.is_none() && f.neighbors.len() < k => None,
            (Ok(mut f), Some(k)) => {
                f.neighbors.truncate(k);
                Some(Ok(f))
            }
            (f, _) => Some(f),
        }
    }

    /// Every item within `limit` (at most `r` deletions' worth) of `query`, in answer order.
    fn variant_found(
        &self,
        query: &str,
        r: u32,
        limit: f64,
        scratch: &mut Scratch,
    ) -> Result<Found> {
        let table = self
            .index
            .variants()?
            .expect("variant_radius saw the table");
        let key = self.index.query_key(query)?;
        let metric = self.index.metric()?;
        let q = metric.prepare(&key);
        let cands = &mut scratch.shared;
        table.candidates(&key, r, &mut scratch.variants, cands);
        let mut best: Vec<Neighbor> = cands
            .iter()
            .filter_map(|&i| {
                q.distance_within(self.keys.get(i as usize), limit)
                    .filter(|&d| d <= limit)
                    .map(|d| Neighbor {
                        index: i,
                        distance: d,
                    })
            })
            .collect();
        metric.check()?;
        order::sort(self.index, &mut best);
        let n = self.index.len();
        let seen = cands.len();
        Ok(Found {
            neighbors: best,
            distances: seen,
            pruned: n - seen,
            certificate: Some(Certificate {
                examined: seen,
                computed: seen,
                bound: (seen < n).then(|| f64::from(r) + 1.0),
            }),
        })
    }
}
