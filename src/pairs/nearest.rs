//! Each item's k nearest other items, as pairs written once.

use rayon::prelude::*;

use super::Pair;
use crate::error::{Error, Param, Result};
use crate::index::Index;
use crate::metric::{Metric, PreparedQuery};
use crate::search::order::{keep_best, Neighbor};
use crate::search::{Request, SearchParams, Searcher};

/// Reverse neighbours taken per item in a refinement round (the nearest, by item number
/// among ties): an item listed by very many others would otherwise cost that many
/// distances.
const REVERSE_CAP: usize = 32;

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
    /// Refinement rounds ([`NearestJoin::refine`]); when above 0 every list is found and
    /// refined before the first batch is handed out.
    rounds: usize,
    /// Items asked so far (lists found), for progress.
    asked: usize,
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
            rounds: 0,
            asked: 0,
        })
    }

    /// After the search, `rounds` rounds of refinement by neighbours of neighbours (the
    /// idea of NN-Descent): in each round every item measures the neighbours of its
    /// neighbours and its reverse neighbours (items that list it, up to 32, nearest
    /// first) that it does not list yet, and keeps the k best. Each round reads the lists
    /// of the round before, so the result does not depend on the number of threads. A few
    /// rounds after a cheap search (few candidates) reach a recall that the search alone
    /// reaches only with many more candidates; an exact join gains nothing from it.
    /// Pairs are then handed out only once every list is refined.
    pub fn refine(mut self, rounds: usize) -> Self {
        self.rounds = rounds;
        self
    }

    /// Number of items.
    pub fn len(&self) -> usize {
        self.searcher.index().len()
    }

    /// Whether the index has no items.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Items whose pairs have been handed out so far (while lists are still being found
    /// before a refinement: the items asked so far).
    pub fn done(&self) -> usize {
        if self.rounds > 0 && self.next == 0 {
            self.asked
        } else {
            self.next
        }
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
        if self.rounds > 0 && self.asked < n {
            // Every list first, a batch at a time, then the rounds.
            let to = (self.asked + BATCH).min(n);
            if let Err(e) = self.ask(self.asked..to) {
                return Some(Err(e));
            }
            self.asked = to;
            if to < n {
                return Some(Ok(Vec::new()));
            }
            // A round that changes no list leaves the next one nothing to do: stop there, so
            // that any number of rounds ends (each change makes some list strictly better
            // in the answer order, which can happen only finitely often).
            for _ in 0..self.rounds {
                match self.refine_round() {
                    Ok(true) => {}
                    Ok(false) => break,
                    Err(e) => return Some(Err(e)),
                }
            }
        } else if self.rounds == 0 {
            if let Err(e) = self.ask(start..end) {
                return Some(Err(e));
            }
        }
        self.next = end;
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

impl NearestJoin<'_> {
    /// Finds the lists of `items` with the search.
    fn ask(&mut self, items: std::ops::Range<usize>) -> Result<()> {
        let items: Vec<u32> = (items.start as u32..items.end as u32).collect();
        let answers = self.searcher.answer_stored(&items, &self.request);
        for (i, found) in items.iter().zip(answers) {
            let found = found?;
            let mut list: Vec<(u32, f64)> = found
                .neighbors
                .iter()
                .filter(|nb| nb.index != *i)
                .map(|nb| (nb.index, nb.distance))
                .collect();
            list.truncate(self.k);
            self.lists.push(list);
        }
        Ok(())
    }

    /// One round of [`NearestJoin::refine`]; whether any list changed.
    fn refine_round(&mut self) -> Result<bool> {
        let index = self.searcher.index();
        let metric = index.metric()?;
        let keys = index.keys();
        let n = self.lists.len();
        // Reverse neighbours, nearest first (ties by item number), at most REVERSE_CAP.
        let mut rev: Vec<Vec<(u32, f64)>> = vec![Vec::new(); n];
        for (i, l) in self.lists.iter().enumerate() {
            for &(j, d) in l {
                rev[j as usize].push((i as u32, d));
            }
        }
        rev.par_iter_mut().for_each(|r| {
            r.sort_unstable_by(|x, y| x.1.total_cmp(&y.1).then(x.0.cmp(&y.0)));
            r.truncate(REVERSE_CAP);
        });
        let (lists, k) = (&self.lists, self.k);
        let new: Vec<Vec<(u32, f64)>> = (0..n)
            .into_par_iter()
            .map_init(
                || (Vec::new(), Vec::new(), Vec::new()),
                |(cands, keyv, out): &mut (Vec<u32>, Vec<&[u8]>, Vec<f64>), i| {
                    let own = &lists[i];
                    cands.clear();
                    for &(j, _) in own.iter().chain(&rev[i]) {
                        cands.extend(lists[j as usize].iter().map(|&(c, _)| c));
                        cands.push(j);
                    }
                    cands.sort_unstable();
                    cands.dedup();
                    cands.retain(|&c| c as usize != i && !own.iter().any(|&(x, _)| x == c));
                    let mut best: Vec<Neighbor> = own
                        .iter()
                        .map(|&(j, d)| Neighbor {
                            index: j,
                            distance: d,
                        })
                        .collect();
                    if !cands.is_empty() {
                        let q = metric.prepare(keys.get(i));
                        keyv.clear();
                        keyv.extend(cands.iter().map(|&c| keys.get(c as usize)));
                        out.clear();
                        out.resize(cands.len(), 0.0);
                        q.distances(keyv, out);
                        for (&c, &d) in cands.iter().zip(out.iter()) {
                            keep_best(
                                index,
                                &mut best,
                                k,
                                Neighbor {
                                    index: c,
                                    distance: d,
                                },
                            );
                        }
                    }
                    best.iter().map(|nb| (nb.index, nb.distance)).collect()
                },
            )
            .collect();
        metric.check()?;
        let changed = new != self.lists;
        self.lists = new;
        Ok(changed)
    }
}
