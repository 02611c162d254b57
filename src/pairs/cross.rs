//! Pairs across two indexes: every pair of an item of one index and an item of another
//! (of the same metric and normalisation) within a [`Radius`], exactly. With the pairs of
//! each index's own [`SelfJoin`], the pairs across every two of several indexes are the
//! pairs of one index of all their items, each once.

use rayon::prelude::*;

use super::{Pair, Radius, SelfJoin, Table};
use crate::error::{Error, Result};
use crate::index::{variants, Index};
use crate::metric::{LevenshteinQuery, Metric, PreparedQuery};
use crate::search::order::{self, Neighbor};
use crate::search::Searcher;

/// Items of the second index looked up per parallel task through a deletion-variant table.
const CHUNK: usize = 256;
/// Items of the second index asked as range queries at once (without a table).
const QUERY_CHUNK: usize = 4096;

/// Every pair of an item of `first` and an item of `second` at true distance at most
/// `radius` (for a fraction, of the longer of the two items), exactly: [`Pair::a`] is the
/// item's number in `first`, [`Pair::b`] in `second`.
///
/// Order: by `second`'s item number, each item's pairs nearest first (by distance, then id
/// in `first`, then item number). The items of `second` are looked up in `first`'s
/// deletion-variant table when the radius is at most 2 and the metric has one (the table
/// stored in `first` when its radius covers the radius, else one built in memory when it
/// fits the memory budget), otherwise by exact range queries of their texts against `first`.
///
/// Refused ([`Error::Usage`]) when the two indexes differ in metric or normalisation, and
/// for a radius out of range.
pub fn join_across(first: &Index, second: &Index, radius: Radius) -> Result<Vec<Pair>> {
    radius.check(first)?;
    let (m1, m2) = (first.meta(), second.meta());
    if m1.metric_spec != m2.metric_spec || m1.normalize != m2.normalize {
        return Err(Error::Usage(format!(
            "{} and {}: pairs across two indexes need the same metric and normalisation \
             ({} and {})",
            first.path().display(),
            second.path().display(),
            m1.metric,
            m2.metric
        )));
    }
    let metric = first.metric()?;
    let by_length = metric.bounded_by_char_counts();
    let lens = |index: &Index| -> Vec<u32> {
        let keys = index.keys();
        (0..index.len())
            .into_par_iter()
            .map(|i| LevenshteinQuery::item_len(keys.get(i)).min(u32::MAX as usize) as u32)
            .collect()
    };
    let (lens1, lens2) = (lens(first), lens(second));
    let longest = lens1.iter().copied().max().unwrap_or(0);
    // The deletions a look-up needs: the widest reach of an item of `second`, in whole edits.
    let need = lens2
        .iter()
        .map(|&l| radius.widened(l, by_length, longest))
        .fold(0.0, f64::max);
    let pairs = match SelfJoin::table_for(first, &lens1, need)? {
        Some((table, _)) => through_table(first, second, radius, &table, &lens1, &lens2)?,
        None => through_queries(first, second, radius)?,
    };
    metric.check()?;
    Ok(pairs)
}

/// [`join_across`] through `first`'s deletion-variant table.
fn through_table(
    first: &Index,
    second: &Index,
    radius: Radius,
    table: &Table<'_>,
    lens1: &[u32],
    lens2: &[u32],
) -> Result<Vec<Pair>> {
    let Some(view) = table.view(first.len()) else {
        return Err(Error::corrupt(
            first.path(),
            "its deletion-variant table cannot be read",
        ));
    };
    let metric = first.metric()?;
    let by_length = metric.bounded_by_char_counts();
    let longest = lens1.iter().copied().max().unwrap_or(0);
    let (keys1, keys2) = (first.keys(), second.keys());
    let starts: Vec<usize> = (0..second.len()).step_by(CHUNK).collect();
    let found: Vec<Vec<Pair>> = starts
        .par_iter()
        .map(|&s0| {
            let mut scratch = variants::Scratch::default();
            let (mut cands, mut found, mut out) = (Vec::new(), Vec::new(), Vec::new());
            let s1 = (s0 + CHUNK).min(second.len());
            for (b, &lb) in (s0..s1).zip(&lens2[s0..s1]) {
                let key = keys2.get(b);
                let reach = radius.widened(lb, by_length, longest);
                // Whole edits: the metrics with a table have whole distances.
                let r = reach.floor().clamp(0.0, f64::from(view.radius())) as u32;
                view.candidates(key, r, &mut scratch, &mut cands);
                let q = metric.prepare(key);
                found.clear();
                for &a in &cands {
                    let la = lens1[a as usize];
                    let limit = radius.limit(la, lb);
                    if f64::from(la.abs_diff(lb)) > limit {
                        continue;
                    }
                    if let Some(d) = q.distance_within(keys1.get(a as usize), limit) {
                        if d <= limit {
                            found.push(Neighbor {
                                index: a,
                                distance: d,
                            });
                        }
                    }
                }
                order::sort(first, &mut found);
                out.extend(found.iter().map(|n| Pair {
                    a: n.index,
                    b: b as u32,
                    distance: n.distance,
                }));
            }
            out
        })
        .collect();
    Ok(found.into_iter().flatten().collect())
}

/// [`join_across`] by exact range queries of `second`'s items (their texts) against `first`.
fn through_queries(first: &Index, second: &Index, radius: Radius) -> Result<Vec<Pair>> {
    let searcher = Searcher::new(first);
    let mut out = Vec::new();
    for s0 in (0..second.len()).step_by(QUERY_CHUNK) {
        let s1 = (s0 + QUERY_CHUNK).min(second.len());
        let texts: Vec<String> = (s0..s1)
            .map(|b| String::from_utf8_lossy(second.item(b)).into_owned())
            .collect();
        for (b, found) in (s0..s1).zip(super::lookup_within(&searcher, &texts, radius, None)) {
            out.extend(found?.neighbors.iter().map(|n| Pair {
                a: n.index,
                b: b as u32,
                distance: n.distance,
            }));
        }
    }
    Ok(out)
}
