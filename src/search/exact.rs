//! Exact k-NN and range queries: items visited in increasing lower bound until no item left
//! can belong to the answer.
//!
//! Every item's stored L∞ bound is compared with a threshold in one SIMD pass over the
//! column blocks ([`crate::coords::columns::Columns`], made on the first exact query; runs
//! of 128 items whose box lies beyond the threshold are skipped whole), and
//! the items within it are collected by bound. Items are then visited bound by bound,
//! smallest first, and measured with the bounded kernel (bound: the current k-th distance
//! or the radius), until the smallest remaining bound exceeds the k-th distance. In the
//! bucket whose bound equals the k-th distance an item can only tie, so only items whose
//! (id, index) sorts before the current k-th answer's are measured. Rounds widen the
//! threshold as the k-th distance allows; several queries share each round's pass.
//!
//! For metrics bounded by char counts ([`crate::metric::Metric::bounded_by_char_counts`],
//! Levenshtein) the columns start with each key's char counts, and each item's bound is
//! raised to its char-signature gap.
//!
//! Metrics with a sketch ([`crate::metric::AnyMetric::sketch`]: set sizes and signatures
//! for Jaccard, word counts for token-edit, lengths, char counts and signatures times the
//! smallest costs for weighted edits, per-part norms for vectors) have every key's sketch
//! made with the columns; during the visit each item's bound is raised to the sketch bound
//! against the query's, and an item whose bound then exceeds the k-th distance or the
//! radius is not measured.

use rayon::prelude::*;

use super::order::{self, keep_best, Neighbor};
use super::{Certificate, Found, Prepared, Searcher};
use crate::coords::columns::{self, CharBins, Columns};
use crate::embed::Bound;
use crate::error::Result;
use crate::metric::{AnyQuery, LevenshteinQuery, Metric, PreparedQuery};

/// Items per call of a metric that measures groups (the vector-lane kernel) in exact and
/// range queries.
const LANE_GROUP: usize = 64;
/// The bound up to which the first round of an exact k-NN query collects items: on typo
/// queries the 10th neighbour is typically 2 to 3 edits away (`benches/big.rs`).
const FIRST_THRESHOLD: u8 = 2;

/// One exact request in progress ([`Searcher::start_exact`], [`Searcher::run_exact`]).
struct ExactRun<'q> {
    q: &'q AnyQuery,
    /// The query's value per column of [`Columns`].
    qv: Vec<u8>,
    /// The query's char signature when the columns hold the items' (else 0).
    sig: u64,
    bound: Bound,
    k: Option<usize>,
    r: f64,
    /// The largest stored bound an item within the radius can have.
    cap: u8,
    /// The next round collects bounds in `(lo, hi]`.
    lo: Option<u8>,
    hi: u8,
    /// The first bound not visited, when the visit stopped before `cap`.
    stopped: Option<u8>,
    done: bool,
    best: Vec<Neighbor>,
    cert: Certificate,
    /// The round's items, by stored bound.
    buckets: Vec<Vec<u32>>,
    /// Items waiting for a group measure, and the group's size (1: no groups).
    lane_at: Vec<u32>,
    lane_out: Vec<f64>,
    group: usize,
    /// The query's char signature, when items are checked against theirs one by one.
    qsig: Option<u64>,
    /// The query's sketch (empty: the metric has none).
    qsketch: Vec<f64>,
}

impl ExactRun<'_> {
    /// The k-th distance held, once `k` answers are held (never for a range query
    /// without `k`).
    fn kth(&self) -> Option<f64> {
        let k = self.k?;
        (self.best.len() == k).then(|| self.best[k - 1].distance)
    }

    /// Adds a measured item to the answer: among the `k` best, or to all within the
    /// radius.
    fn keep(&mut self, index: &crate::index::Index, found: Neighbor) {
        match self.k {
            Some(k) => keep_best(index, &mut self.best, k, found),
            None => self.best.push(found),
        }
    }
}

impl Searcher<'_> {
    /// Exact answers for a block of queries, whose rounds share passes over the columns
    /// ([`Searcher::run_exact`]); a query the metric cannot take gets its own error.
    pub(super) fn exact_block(
        &self,
        block: &[String],
        k: Option<usize>,
        radius: Option<f64>,
    ) -> Vec<Result<Found>> {
        let Ok(bound) = self.require_bound() else {
            return block.iter().map(|q| self.exact(q, k, radius)).collect();
        };
        let prepared: Vec<Result<Prepared>> = block
            .iter()
            .map(|q| self.prepare_embedded(q, None))
            .collect();
        let mut runs: Vec<ExactRun<'_>> = prepared
            .iter()
            .filter_map(|p| p.as_ref().ok())
            .map(|pq| self.start_exact(pq, bound, k, radius))
            .collect();
        let mut answers = self.run_exact(&mut runs).into_iter();
        let check = || -> Result<()> {
            self.index.metric()?.check()?;
            Ok(())
        };
        prepared
            .into_iter()
            .map(|p| {
                p?;
                let found = answers.next().expect("one answer per prepared query");
                check().map(|()| found)
            })
            .collect()
    }

    /// Exact answers for a block of stored items ([`Searcher::answer_stored`]): as
    /// [`Searcher::exact_block`], the items' stored coordinates reused.
    pub(super) fn exact_stored_block(
        &self,
        block: &[u32],
        k: Option<usize>,
        radius: Option<f64>,
    ) -> Vec<Result<Found>> {
        let bound = match self.require_bound() {
            Ok(b) => b,
            Err(e) => {
                let mut first = Some(e);
                return block
                    .iter()
                    .map(|_| Err(first.take().unwrap_or_else(|| self.no_bound())))
                    .collect();
            }
        };
        let prepared: Vec<Result<Prepared>> =
            block.iter().map(|&i| self.prepare_stored(i)).collect();
        let mut runs: Vec<ExactRun<'_>> = prepared
            .iter()
            .filter_map(|p| p.as_ref().ok())
            .map(|pq| self.start_exact(pq, bound, k, radius))
            .collect();
        let mut answers = self.run_exact(&mut runs).into_iter();
        let check = || -> Result<()> {
            self.index.metric()?.check()?;
            Ok(())
        };
        prepared
            .into_iter()
            .map(|p| {
                p?;
                let found = answers.next().expect("one answer per prepared item");
                check().map(|()| found)
            })
            .collect()
    }

    /// The exact search behind [`Searcher::search_exact`] and [`Searcher::search_within`]:
    /// the `k` nearest (all when `None`) among items within `radius` (any when `None`).
    pub(super) fn exact(
        &self,
        query: &str,
        k: Option<usize>,
        radius: Option<f64>,
    ) -> Result<Found> {
        let bound = self.require_bound()?;
        if let Some(found) = self
            .tally_answers(&[query.to_owned()], k, radius, false)
            .pop()
            .flatten()
        {
            return found;
        }
        let pq = self.prepare_embedded(query, None)?;
        let mut runs = [self.start_exact(&pq, bound, k, radius)];
        let found = self
            .run_exact(&mut runs)
            .pop()
            .expect("one answer per request");
        self.index.metric()?.check()?;
        Ok(found)
    }

    /// Every key's char signature (7 MB of reads at 663k words, 5 MB made).
    fn signatures(&self) -> Vec<u64> {
        (0..self.index.len())
            .into_par_iter()
            .map(|i| LevenshteinQuery::signature(self.keys.get(i)))
            .collect()
    }

    /// Every key's sketch, [`crate::metric::AnyMetric::sketch_width`] numbers each (empty when the metric
    /// has none), made on the first exact query.
    fn sketches(&self) -> &[f64] {
        self.sketches.get_or_init(|| {
            let Ok(m) = self.index.metric() else {
                return Vec::new();
            };
            let w = m.sketch_width();
            let mut all = vec![0.0; self.index.len() * w];
            if w > 0 {
                all.par_chunks_mut(w)
                    .enumerate()
                    .for_each(|(i, out)| m.sketch(self.keys.get(i), out));
            }
            all
        })
    }

    /// Whether the index's metric is bounded by char counts and signatures
    /// ([`Metric::bounded_by_char_counts`]).
    fn char_bounded(&self) -> bool {
        self.index
            .metric()
            .is_ok_and(|m| m.bounded_by_char_counts())
    }

    /// Whether the column blocks start with each key's char counts, and the bound takes
    /// signatures (a metric bounded by char counts, with stored coordinates that are whole
    /// distances: the count and signature bounds are in the same unit, edits).
    fn char_filters(&self) -> bool {
        self.char_bounded() && self.bound.is_some_and(|b| b.whole)
    }

    /// The stored coordinates in column blocks ([`Columns`]), made on the first
    /// exact query (as many bytes as the coordinate section, plus 16 bytes of char counts
    /// per item for Levenshtein), with the char bins of the counts.
    ///
    /// The blocks take the items in an order of their own (the third value: lane → item),
    /// chosen so that the items of a run of blocks are alike and the run's box
    /// ([`columns::BOX_BLOCKS`]) bounds them tightly: with char counts, by length and then
    /// counts; otherwise in the order the rows are stored ([`Rows::item_at`]: cell by cell
    /// in a version 2 file). The columns report lanes, which [`Searcher::run_exact`] maps
    /// back to items.
    ///
    /// [`Rows::item_at`]: crate::index::Rows::item_at
    fn columns(&self) -> &(Columns, Option<CharBins>, Vec<u32>) {
        self.columns.get_or_init(|| {
            let n = self.index.len();
            let rows = self.index.rows();
            let bins = self
                .char_filters()
                .then(|| CharBins::fit((0..n).map(|i| self.keys.get(i))));
            let (order, counts): (Vec<u32>, Option<Vec<[u8; columns::BINS]>>) = match &bins {
                // By length, then by the counts bin by bin: a run of blocks holds keys of
                // one length whose commonest chars are counted alike, so its box keeps
                // the count bound of its items (at 663,473 words, 1,000 typo queries, R =
                // 2: 21% of the runs of 128 items left to compare, against 69% with the
                // rows' cell order and 77% with item order).
                Some(b) => {
                    let mut keyed: Vec<(u32, [u8; columns::BINS], u32)> = (0..n)
                        .into_par_iter()
                        .map(|i| {
                            let key = self.keys.get(i);
                            (
                                LevenshteinQuery::item_len(key) as u32,
                                b.counts(key),
                                i as u32,
                            )
                        })
                        .collect();
                    keyed.par_sort_unstable();
                    (
                        keyed.iter().map(|&(_, _, i)| i).collect(),
                        Some(keyed.iter().map(|&(_, c, _)| c).collect()),
                    )
                }
                // The rows' stored order: cell by cell in a version 2 file, where close
                // rows have close coordinates.
                None => ((0..n as u32).map(|p| rows.item_at(p)).collect(), None),
            };
            let sigs = bins.as_ref().map(|_| {
                order
                    .par_iter()
                    .map(|&i| LevenshteinQuery::signature(self.keys.get(i as usize)))
                    .collect()
            });
            // Each lane's row, read in place: no copy of the coordinate section.
            let position = |p: usize| rows.position(order[p] as usize);
            let cols = Columns::build(columns::Parts {
                coords: rows.stored(),
                positions: Some(&position as &(dyn Fn(usize) -> usize + Sync)),
                stride: self.index.stride(),
                dim: self.index.meta().dim as usize,
                counts: counts.as_deref(),
                sigs,
            });
            (cols, bins, order)
        })
    }

    /// Starts an exact request for a prepared query: the `k` nearest (all when `None`)
    /// among items within `radius` (any when `None`). [`Searcher::run_exact`] answers it.
    fn start_exact<'q>(
        &self,
        pq: &'q Prepared,
        bound: Bound,
        k: Option<usize>,
        radius: Option<f64>,
    ) -> ExactRun<'q> {
        let cap = bound_cap(bound, radius) as u8;
        let mut qv: Vec<u8> = Vec::with_capacity(columns::BINS + 64);
        let (_, bins, _) = self.columns();
        if let Some(b) = bins {
            qv.extend_from_slice(&b.counts(&pq.key));
        }
        qv.extend_from_slice(&pq.small[..self.index.meta().dim as usize]);
        let sig = match bins {
            Some(_) => LevenshteinQuery::signature(&pq.key),
            None => 0,
        };
        // The columns fold the signature gap into the bound when they hold signatures;
        // otherwise it is applied item by item.
        let qsig =
            (self.char_bounded() && bins.is_none()).then(|| LevenshteinQuery::signature(&pq.key));
        let mut qsketch = Vec::new();
        if let Ok(m) = self.index.metric() {
            qsketch.resize(m.sketch_width(), 0.0);
            m.sketch(&pq.key, &mut qsketch);
        }
        ExactRun {
            q: &pq.q,
            qv,
            sig,
            bound,
            k,
            r: radius.unwrap_or(f64::INFINITY),
            cap,
            lo: None,
            hi: if k.is_some() {
                cap.min(FIRST_THRESHOLD)
            } else {
                cap
            },
            stopped: None,
            done: false,
            best: Vec::new(),
            cert: Certificate::default(),
            buckets: Vec::new(),
            lane_at: Vec::new(),
            lane_out: Vec::new(),
            group: pq.q.group_size().min(LANE_GROUP),
            qsig,
            qsketch,
        }
    }

    /// Answers exact requests started by [`Searcher::start_exact`], together.
    ///
    /// In rounds, [`Columns::within_many`] collects for every request not yet done
    /// the items whose stored bound lies in its range `(lo, hi]`, by bound, in one pass over
    /// the columns shared by all of them; each request then visits its items bound by bound,
    /// smallest first ([`Searcher::visit_round`]). A k-NN request starts with
    /// `hi` = [`FIRST_THRESHOLD`]; each later round reaches the bound that the k-th distance
    /// found so far allows (or two more when fewer than k are held).
    fn run_exact(&self, runs: &mut [ExactRun<'_>]) -> Vec<Found> {
        let (cols, _, order) = self.columns();
        let sketches = self.sketches();
        // Signatures checked item by item: metrics bounded by char counts whose columns
        // lack them.
        let sigs: &[u64] = match self.char_bounded() && !self.char_filters() {
            true => self.sigs.get_or_init(|| self.signatures()),
            false => &[],
        };
        loop {
            let active: Vec<usize> = (0..runs.len()).filter(|&j| !runs[j].done).collect();
            if active.is_empty() {
                break;
            }
            for &j in &active {
                let run = &mut runs[j];
                for b in run.buckets.iter_mut() {
                    b.clear();
                }
                run.buckets.resize_with(usize::from(run.hi) + 1, Vec::new);
            }
            let mut buckets: Vec<Vec<Vec<u32>>> = active
                .iter()
                .map(|&j| std::mem::take(&mut runs[j].buckets))
                .collect();
            {
                let ts: Vec<columns::Threshold<'_>> = active
                    .iter()
                    .map(|&j| columns::Threshold {
                        q: &runs[j].qv,
                        lo: runs[j].lo,
                        hi: runs[j].hi,
                        sig: runs[j].sig,
                    })
                    .collect();
                cols.within_many(&ts, |a, p, b| {
                    buckets[a][usize::from(b)].push(order[p as usize]);
                });
            }
            for (&j, b) in active.iter().zip(buckets) {
                runs[j].buckets = b;
            }
            for &j in &active {
                self.visit_round(&mut runs[j], sigs, sketches);
            }
        }
        runs.iter_mut().map(|run| self.finish_exact(run)).collect()
    }

    /// Visits the items one round collected for `run`, bound by bound, and sets the next
    /// round's range or marks the request done.
    ///
    /// Each item is measured with the query's bounded distance (bound: the k-th distance
    /// or the radius), for any metric. A metric bounded by char counts first drops items
    /// whose char-signature gap exceeds it (when the columns did not); a query that
    /// measures groups ([`PreparedQuery::group_size`]) gets the rest [`LANE_GROUP`] at a
    /// time, flushed at the end of each bound so the stopping rule sees the true k-th
    /// distance.
    fn visit_round(&self, run: &mut ExactRun<'_>, sigs: &[u64], sketches: &[f64]) {
        let buckets = std::mem::take(&mut run.buckets);
        self.visit_buckets(run, &buckets, sigs, sketches);
        run.buckets = buckets;
        if run.done {
            return;
        }
        if run.hi >= run.cap {
            run.done = true;
            return;
        }
        let next = match run.kth() {
            Some(kth) => run.bound.max_diff_within(kth).min(run.cap),
            None => run.hi.saturating_add(2).min(run.cap),
        };
        if next <= run.hi {
            run.stopped = Some(run.hi + 1);
            run.done = true;
            return;
        }
        run.lo = Some(run.hi);
        run.hi = next;
    }

    /// The bound-by-bound visit of [`Searcher::visit_round`]; sets `done` when a bound
    /// exceeds what the answer allows.
    fn visit_buckets(
        &self,
        run: &mut ExactRun<'_>,
        buckets: &[Vec<u32>],
        sigs: &[u64],
        sketches: &[f64],
    ) {
        let q = run.q;
        let w = run.qsketch.len();
        let metric = match self.index.metric() {
            Ok(m) if w > 0 && sketches.len() == w * self.index.len() => Some(m),
            _ => None,
        };
        let from = run.lo.map_or(0, |l| usize::from(l) + 1);
        for (b, items) in buckets
            .iter()
            .enumerate()
            .take(usize::from(run.hi) + 1)
            .skip(from)
        {
            let lb = run.bound.lower(b as u8);
            if lb > run.r || lb > run.kth().unwrap_or(f64::INFINITY) {
                run.stopped = Some(b as u8);
                run.done = true;
                return;
            }
            for &i in items {
                run.cert.examined += 1;
                // With items waiting in a group this k-th distance may be larger than the
                // true one: the tests below then keep more items, never fewer.
                let kth = run.kth().unwrap_or(f64::INFINITY);
                let limit = kth.min(run.r);
                let mut item_lb = lb;
                if let Some(qs) = run.qsig {
                    let sig = sigs.get(i as usize).copied().unwrap_or(u64::MAX);
                    item_lb = item_lb.max(f64::from(LevenshteinQuery::signature_gap(qs, sig)));
                }
                if let Some(m) = metric {
                    let at = i as usize * w;
                    item_lb = item_lb.max(m.sketch_bound(&run.qsketch, &sketches[at..at + w]));
                }
                if item_lb > limit {
                    continue;
                }
                if item_lb >= kth {
                    // Equal bound and k-th distance: at best a tie, which only an
                    // (id, index) before the k-th answer's wins.
                    let tie = Neighbor {
                        index: i,
                        distance: kth,
                    };
                    let last = run.best.last().expect("a k-th answer is held");
                    if !order::before(self.index, &tie, last) {
                        continue;
                    }
                }
                if run.group > 1 {
                    run.lane_at.push(i);
                    if run.lane_at.len() == run.group {
                        self.flush_group(run);
                    }
                    continue;
                }
                let item = self.keys.get(i as usize);
                run.cert.computed += 1;
                let d = if limit.is_finite() {
                    match q.distance_within(item, limit) {
                        Some(d) => d,
                        None => continue,
                    }
                } else {
                    q.distance(item)
                };
                run.keep(
                    self.index,
                    Neighbor {
                        index: i,
                        distance: d,
                    },
                );
            }
            // The next bound's test needs the true k-th distance.
            self.flush_group(run);
        }
    }

    /// The answer of a finished exact request, with its certificate.
    fn finish_exact(&self, run: &mut ExactRun<'_>) -> Found {
        let n = self.index.len();
        let mut best = std::mem::take(&mut run.best);
        if run.k.is_none() {
            order::sort(self.index, &mut best);
        }
        let mut cert = run.cert;
        // Every item not examined has a bound of at least the first bound not visited (when
        // the visit covered every bound up to `cap`, the next one above it).
        let stopped = run.stopped.or(run.cap.checked_add(1));
        cert.bound = stopped
            .filter(|_| cert.examined < n)
            .map(|b| run.bound.lower(b));
        Found {
            neighbors: best,
            distances: self.refs.len() + cert.computed,
            pruned: n - cert.examined,
            certificate: Some(cert),
        }
    }

    /// Measures the items waiting in `run`'s group with [`PreparedQuery::distances`] and
    /// keeps those that belong to the answer; empties the group.
    fn flush_group(&self, run: &mut ExactRun<'_>) {
        if run.lane_at.is_empty() {
            return;
        }
        let at = std::mem::take(&mut run.lane_at);
        let keys: Vec<&[u8]> = at.iter().map(|&i| self.keys.get(i as usize)).collect();
        run.lane_out.clear();
        run.lane_out.resize(at.len(), 0.0);
        run.q.distances(&keys, &mut run.lane_out);
        run.cert.computed += at.len();
        for (j, &i) in at.iter().enumerate() {
            let d = run.lane_out[j];
            if d <= run.r {
                run.keep(
                    self.index,
                    Neighbor {
                        index: i,
                        distance: d,
                    },
                );
            }
        }
        run.lane_at = at;
        run.lane_at.clear();
    }
}

/// The largest stored L∞ difference an item within `radius` can have (255: any).
fn bound_cap(bound: Bound, radius: Option<f64>) -> usize {
    usize::from(match radius {
        Some(r) if r.is_finite() => bound.max_diff_within(r),
        _ => u8::MAX,
    })
}
