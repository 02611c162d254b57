//! The radius of a join or a look-up: a fixed distance, or a fraction of the items' length.

use rayon::prelude::*;

use crate::error::{Error, Param, Result};
use crate::index::Index;
use crate::metric::{LevenshteinQuery, Metric, MetricSpec};
use crate::search::{Found, Request, Searcher};

/// How far apart two items may be to make a pair.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Radius {
    /// True distance at most this (a finite number ≥ 0).
    Fixed(f64),
    /// True distance at most this fraction of the longer item's length in chars (of the
    /// comparison keys, after normalisation): `d ≤ F × max(len a, len b)`. With F = 0.15,
    /// a name of 6 letters pairs only with items at distance 0 (0.9 < 1), one of 7 letters
    /// takes one edit, one of 30 takes four. Only for metrics on text (not vectors or graph
    /// nodes).
    Fraction(f64),
}

impl Radius {
    /// Checks the value (finite, at least 0) and that the index's items have a length.
    pub fn check(&self, index: &Index) -> Result<()> {
        match *self {
            Radius::Fixed(r) => {
                if !(r >= 0.0 && r.is_finite()) {
                    return Err(Error::parameter(
                        Param::Radius,
                        format!("must be a finite distance of at least 0, not {r}"),
                    ));
                }
            }
            Radius::Fraction(f) => {
                if !(f >= 0.0 && f.is_finite()) {
                    return Err(Error::parameter(
                        Param::Fraction,
                        format!("must be a finite fraction of at least 0, not {f}"),
                    ));
                }
                if matches!(
                    index.meta().metric_spec,
                    MetricSpec::Vector { .. } | MetricSpec::Graph
                ) {
                    return Err(Error::parameter(
                        Param::Fraction,
                        format!(
                            "needs items that are text, and this index's metric is {}; \
                             give a fixed radius",
                            index.meta().metric
                        ),
                    ));
                }
            }
        }
        Ok(())
    }

    /// The largest distance allowed between items of `a` and `b` chars.
    #[inline]
    pub fn limit(&self, a: u32, b: u32) -> f64 {
        match *self {
            Radius::Fixed(r) => r,
            Radius::Fraction(f) => f * f64::from(a.max(b)),
        }
    }

    /// The radius of a range search from an item (or query) of `len` chars that finds
    /// every item within [`Radius::limit`] of it, among items of at most `longest` chars.
    ///
    /// For a fraction F: without more knowledge `F × max(len, longest)`. For metrics bounded
    /// by char counts (Levenshtein), where the distance is at least the difference of
    /// lengths, an item of `m > len` chars within `F × m` has `m − len ≤ F × m`, so
    /// `m ≤ len / (1 − F)` and the distance is at most `F × len / (1 − F)` (F < 1).
    pub fn widened(&self, len: u32, by_length: bool, longest: u32) -> f64 {
        match *self {
            Radius::Fixed(r) => r,
            Radius::Fraction(f) => {
                let plain = f * f64::from(len.max(longest));
                if by_length && f < 1.0 {
                    plain.min(f * f64::from(len) / (1.0 - f))
                } else {
                    plain
                }
            }
        }
    }
}

/// Exact look-ups of many queries against an index within a [`Radius`]: each query's items
/// within [`Radius::limit`] of it (by the lengths of the query and of the item, for a
/// fraction), nearest first. Queries are answered in parallel, in blocks that share passes;
/// a fraction's queries are searched with their [`Radius::widened`] radius and the answers
/// filtered. With `k`, at most the `k` nearest.
pub fn lookup_within(
    searcher: &Searcher<'_>,
    queries: &[String],
    radius: Radius,
    k: Option<usize>,
) -> Vec<Result<Found>> {
    let index = searcher.index();
    if let Err(e) = radius.check(index) {
        let msg = e.to_string();
        let mut first = Some(e);
        return queries
            .iter()
            .map(|_| Err(first.take().unwrap_or_else(|| Error::Usage(msg.clone()))))
            .collect();
    }
    let f = match radius {
        Radius::Fixed(r) => {
            return searcher.answer_many(queries, &Request::Within { radius: r, k })
        }
        Radius::Fraction(f) => f,
    };
    let by_length = index.metric().is_ok_and(|m| m.bounded_by_char_counts());
    let keys = index.keys();
    let lens: Vec<u32> = (0..index.len())
        .into_par_iter()
        .map(|i| LevenshteinQuery::item_len(keys.get(i)) as u32)
        .collect();
    let longest = lens.iter().copied().max().unwrap_or(0);
    queries
        .par_iter()
        .map_init(Default::default, |scratch, q| {
            let key = index.query_key(q)?;
            let lq = LevenshteinQuery::item_len(&key) as u32;
            let wide = radius.widened(lq, by_length, longest);
            let mut found = searcher.search_within(q, wide, None, scratch)?;
            found
                .neighbors
                .retain(|n| n.distance <= f * f64::from(lq.max(lens[n.index as usize])));
            if let Some(k) = k {
                found.neighbors.truncate(k);
            }
            Ok(found)
        })
        .collect()
}
