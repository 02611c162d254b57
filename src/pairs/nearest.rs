//! Each item's k nearest other items, as pairs written once.

use super::Pair;
use crate::error::{Error, Param, Result};
use crate::index::Index;
use crate::search::{Request, SearchParams, Searcher};

/// Items asked per batch of [`NearestJoin::next_batch`].
const BATCH: usize = 8192;

/// Each item's k nearest other items (exact, or approximate with [`SearchParams`]), batch
/// by batch in item order ([`NearestJoin::next_batch`]).
///
/// Every item is asked as a query with its stored coordinates
/// ([`Searcher::answer_stored`]) for k + 1 neighbours; the item itself is dropped (or, when
/// more than k others sort before it at distance 0, the last answer), leaving k. The pair
/// of items `i` and `j` is written from the smaller item number unless only the larger
/// found it: from `i` when `i` < `j`, or when `j` < `i` and `i` is not among `j`'s
/// neighbours. Pairs come in item order of their first finder, each finder's nearest
/// first; `a` is the smaller item number.
pub struct NearestJoin<'a> {
    searcher: Searcher<'a>,
    request: Request,
    k: usize,
    /// Each item's neighbours found so far (item number, distance), by item number.
    lists: Vec<Vec<(u32, f64)>>,
    next: usize,
}

impl<'a> NearestJoin<'a> {
    /// Exact k nearest neighbours of every item (refused with [`Error::NoLowerBound`] when
    /// the embedding gives no lower bound), or approximate ones with `params` (whose `k` is
    /// ignored).
    pub fn new(index: &'a Index, k: usize, params: Option<SearchParams>) -> Result<Self> {
        if k == 0 {
            return Err(Error::parameter(Param::K, "must be at least 1"));
        }
        let searcher = Searcher::new(index);
        let ask = k.saturating_add(1);
        let request = match params {
            Some(p) => Request::Approximate(SearchParams { k: ask, ..p }),
            None => Request::Exact { k: ask },
        };
        searcher.check(&request)?;
        index.metric()?;
        Ok(NearestJoin {
            searcher,
            request,
            k,
            lists: Vec::with_capacity(index.len()),
            next: 0,
        })
    }

    /// Number of items.
    pub fn len(&self) -> usize {
        self.searcher.index().len()
    }

    /// Whether the index has no items.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Items whose pairs have been handed out so far.
    pub fn done(&self) -> usize {
        self.next
    }

    /// The neighbours found for item `i` (item number, distance), nearest first, once its
    /// batch has been handed out.
    pub fn neighbors(&self, i: usize) -> Option<&[(u32, f64)]> {
        self.lists.get(i).map(|l| &l[..])
    }

    /// The next batch of pairs, or `None` when every item is done.
    pub fn next_batch(&mut self) -> Option<Result<Vec<Pair>>> {
        let n = self.len();
        if self.next >= n {
            return None;
        }
        let start = self.next;
        let end = (start + BATCH).min(n);
        self.next = end;
        let items: Vec<u32> = (start as u32..end as u32).collect();
        let answers = self.searcher.answer_stored(&items, &self.request);
        for (i, found) in items.iter().zip(answers) {
            let found = match found {
                Ok(f) => f,
                Err(e) => return Some(Err(e)),
            };
            let mut list: Vec<(u32, f64)> = found
                .neighbors
                .iter()
                .filter(|nb| nb.index != *i)
                .map(|nb| (nb.index, nb.distance))
                .collect();
            list.truncate(self.k);
            self.lists.push(list);
        }
        let mut out = Vec::new();
        for i in start..end {
            for &(j, d) in &self.lists[i] {
                let i32 = i as u32;
                if (j as usize) < i && self.lists[j as usize].iter().any(|&(x, _)| x == i32) {
                    continue;
                }
                out.push(Pair {
                    a: i32.min(j),
                    b: i32.max(j),
                    distance: d,
                });
            }
        }
        Some(Ok(out))
    }
}
