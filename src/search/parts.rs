//! Searching an index in parts ([`crate::index::parts`]): every part answers, the answers
//! merge.
//!
//! Each part is asked for `k` plus its number of removed items, so that after its removed
//! items are dropped it still has its `k` best live ones; the answers merge in the order of
//! answers (distance, id, item number across the parts). Exact and range answers are then
//! those of one index over the live items, and their certificates combine: every part's
//! items not examined have a lower bound of at least that part's bound, so the smallest of
//! the bounds holds for the union.
//!
//! Approximate queries share the candidates out by the parts' sizes: a part of `n_p` of the
//! `N` items re-ranks `C · n_p / N` of them (at least twice the answers it is asked for, at
//! most all of its items), which is what taking the best `C` by coordinates across the
//! parts gives on average, the coordinates being comparable.
//!
//! ```no_run
//! use waymark::index::parts::Parts;
//! use waymark::search::{parts::PartsSearcher, Request};
//!
//! let parts = Parts::open("names.wmk".as_ref())?;
//! let searcher = PartsSearcher::new(&parts);
//! let found = searcher.answer_many(&["harbour".to_string()], &Request::Exact { k: 5 });
//! # Ok::<(), waymark::Error>(())
//! ```

use std::cmp::Ordering;

use super::request::{CandidateSource, Certificate, Found, Request, SearchParams};
use super::{Neighbor, Searcher, CELLS_MIN_ITEMS};
use crate::error::Result;
use crate::index::parts::Parts;

/// Runs queries against every part of an index.
pub struct PartsSearcher<'a> {
    parts: &'a Parts,
    searchers: Vec<Searcher<'a>>,
}

impl<'a> PartsSearcher<'a> {
    /// Prepares a searcher per part.
    pub fn new(parts: &'a Parts) -> PartsSearcher<'a> {
        PartsSearcher {
            parts,
            searchers: parts
                .parts()
                .iter()
                .map(|p| Searcher::new(&p.index))
                .collect(),
        }
    }

    /// The searcher of part `j`.
    pub fn searcher(&self, j: usize) -> &Searcher<'a> {
        &self.searchers[j]
    }

    /// The index searched.
    pub fn parts(&self) -> &'a Parts {
        self.parts
    }

    /// Checks that `req` can be answered on every part.
    pub fn check(&self, req: &Request) -> Result<()> {
        self.searchers.iter().try_for_each(|s| s.check(req))
    }

    /// The request part `j` is asked: `k` raised by its removed items; for approximate
    /// queries its share of the candidates and rows visited.
    pub fn part_request(&self, j: usize, req: &Request) -> Request {
        let part = &self.parts.parts()[j];
        let extra = part.removed.len();
        match *req {
            Request::Exact { k } => Request::Exact { k: k + extra },
            Request::Within { radius, k } => Request::Within {
                radius,
                k: k.map(|k| k + extra),
            },
            Request::Approximate(p) => {
                let (n, total) = (part.index.len(), self.parts.len().max(1));
                let k = p.k + extra;
                let share = |c: usize| (c as u128 * n as u128).div_ceil(total as u128) as usize;
                let candidates = share(p.candidates).max(2 * k).min(n.max(1)).max(1);
                let source = match p.source {
                    CandidateSource::Cells if !(part.index.has_cells() && n >= CELLS_MIN_ITEMS) => {
                        CandidateSource::Scan
                    }
                    s => s,
                };
                let visit = if p.visit == 0 {
                    0
                } else {
                    share(p.visit).max(candidates)
                };
                Request::Approximate(SearchParams {
                    k,
                    candidates,
                    source,
                    visit,
                    ..p
                })
            }
        }
    }

    /// Answers many requests; answers come back in input order, item numbers across the
    /// parts ([`Parts::item`], [`Parts::id`]).
    pub fn answer_many(&self, queries: &[String], req: &Request) -> Vec<Result<Found>> {
        let k = match *req {
            Request::Approximate(p) => Some(p.k),
            Request::Exact { k } => Some(k),
            Request::Within { k, .. } => k,
        };
        self.merge_each(queries.len(), k, |j, s| {
            s.answer_many(queries, &self.part_request(j, req))
        })
    }

    /// Runs `ask` on every part (with its index `j` and searcher), which answers every query
    /// in that part (item numbers of the part, at least `k` plus the part's removed items
    /// when a `k` is given), and merges the answers per query: removed items dropped, item
    /// numbers made global, at most `k` kept. A query refused by a part is refused.
    pub fn merge_each(
        &self,
        queries: usize,
        k: Option<usize>,
        ask: impl Fn(usize, &Searcher<'a>) -> Vec<Result<Found>>,
    ) -> Vec<Result<Found>> {
        let mut merged: Vec<Result<Found>> = (0..queries).map(|_| Ok(Found::default())).collect();
        for (j, s) in self.searchers.iter().enumerate() {
            let part = &self.parts.parts()[j];
            let answers = ask(j, s);
            for (m, a) in merged.iter_mut().zip(answers) {
                let Ok(acc) = m else { continue };
                match a {
                    Err(e) => *m = Err(e),
                    Ok(f) => {
                        acc.distances += f.distances;
                        acc.pruned += f.pruned;
                        acc.certificate = match (j, acc.certificate, f.certificate) {
                            (0, _, c) => c,
                            (_, Some(a), Some(b)) => Some(Certificate {
                                examined: a.examined + b.examined,
                                computed: a.computed + b.computed,
                                bound: match (a.bound, b.bound) {
                                    (Some(x), Some(y)) => Some(x.min(y)),
                                    (x, y) => x.or(y),
                                },
                            }),
                            _ => None,
                        };
                        acc.neighbors.extend(
                            f.neighbors
                                .into_iter()
                                .filter(|n| !part.is_removed(n.index))
                                .map(|n| Neighbor {
                                    index: n.index + part.offset,
                                    distance: n.distance,
                                }),
                        );
                    }
                }
            }
        }
        for f in merged.iter_mut().flatten() {
            f.neighbors.sort_by(|a, b| self.order(a, b));
            if let Some(k) = k {
                f.neighbors.truncate(k);
            }
        }
        merged
    }

    /// The order of answers across the parts: distance, then id, then item number.
    pub fn order(&self, a: &Neighbor, b: &Neighbor) -> Ordering {
        a.distance
            .total_cmp(&b.distance)
            .then_with(|| (self.parts.id(a.index), a.index).cmp(&(self.parts.id(b.index), b.index)))
    }
}
