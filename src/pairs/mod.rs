//! Pairs and groups of near items within one corpus (a self-join), and look-ups of many
//! queries against an index in bulk.
//!
//! - [`SelfJoin`]: every pair of distinct items at true distance at most a [`Radius`],
//!   exactly. The items are sorted by keys whose differences bound the distance from below
//!   (length in chars, then the first stored coordinate, for metrics bounded by char
//!   counts; else the first stored coordinate), laid out in column blocks in that order,
//!   and each block of [`QUERY_BLOCK`] consecutive items is compared in shared passes with
//!   the ranges of blocks after it that the keys allow: every unordered pair is compared
//!   once (the later item of the two in the sorted order is never a query for the earlier
//!   one). Items whose
//!   stored lower bound is within the radius are measured with the metric's bounded
//!   distance, or in groups through the vector-lane kernel.
//! - [`NearestJoin`]: each item's k nearest other items, approximate or exact, through
//!   [`crate::search::Searcher::answer_stored`] (stored coordinates reused); a pair found from both sides
//!   is written once.
//! - [`join_across`]: every pair of an item of one index and an item of another within a
//!   [`Radius`], exactly (with each index's [`SelfJoin`], the pairs of several indexes
//!   taken as one).
//! - [`group`]: groups of near-duplicates from the pairs ([`Grouping`]).
//! - [`Radius::Fraction`]: a radius relative to the length of the items.
//!
//! ```no_run
//! use waymark::index::Index;
//! use waymark::pairs::{Radius, SelfJoin};
//!
//! let index = Index::open("names.wmk".as_ref())?;
//! let mut join = SelfJoin::new(&index, Radius::Fixed(1.0))?;
//! while let Some(batch) = join.next_batch() {
//!     for p in batch? {
//!         println!("{:?} {:?} {}", index.id(p.a as usize), index.id(p.b as usize), p.distance);
//!     }
//! }
//! # Ok::<(), waymark::Error>(())
//! ```

mod cross;
mod groups;
mod nearest;
mod radius;

use rayon::prelude::*;

pub use self::cross::join_across;
pub use self::groups::{group, Group, Grouping};
pub use self::nearest::NearestJoin;
pub use self::radius::{lookup_within, Radius};

use crate::coords::columns::{self, CharBins, Columns, Threshold};
use crate::embed::Bound;
use crate::error::{Error, Result};
use crate::index::variants::{self, VariantTable, Variants};
use crate::index::{Index, StrTable};
use crate::metric::{AnyMetric, LevenshteinQuery, Metric, PreparedQuery};
use crate::search::order::{self, Neighbor};

/// Consecutive items (in the join's sorted order) whose comparisons share one pass over the
/// column blocks.
pub const QUERY_BLOCK: usize = 32;
/// Query blocks answered in parallel before their pairs are handed out, in order.
const BATCH_BLOCKS: usize = 64;
/// Items per call of a metric that measures groups (the vector-lane kernel).
const LANE_GROUP: usize = 64;

/// One pair of distinct items of an index and their true distance.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pair {
    /// The item with the smaller item number (self-join), or the query's number (look-ups).
    pub a: u32,
    /// The other item.
    pub b: u32,
    /// The true distance.
    pub distance: f64,
}

/// What a self-join cost.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct JoinStats {
    /// Pairs whose stored lower bound was within the radius (each measured or dropped by
    /// its length or signature).
    pub examined: u64,
    /// True distances computed.
    pub computed: u64,
    /// Pairs found.
    pub pairs: u64,
}

/// How a [`SelfJoin`] finds the items near each item.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum JoinBy {
    /// Through a deletion-variant table ([`crate::index::variants`]) when the radius is at
    /// most 2 and the metric is one it is exact for: the index's own table when its radius
    /// covers the join's, else one built in memory when its estimate
    /// ([`variants::build_estimate`]) fits the memory budget; otherwise the column blocks.
    #[default]
    Auto,
    /// Through the column blocks of the stored coordinates (and char counts) only.
    Columns,
}

/// Which way a [`SelfJoin`] took.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum JoinPath {
    /// The column blocks.
    Columns,
    /// The index's deletion-variant table.
    StoredVariants,
    /// A deletion-variant table of this radius built in memory, in this many seconds.
    BuiltVariants {
        /// The table's radius.
        radius: u32,
        /// Its size in bytes.
        bytes: usize,
        /// Seconds spent building it.
        seconds: f64,
    },
}

/// The deletion-variant table a join reads.
enum Table<'a> {
    Stored(Variants<'a>),
    Built(VariantTable),
}

impl Table<'_> {
    fn view(&self, n: usize) -> Option<Variants<'_>> {
        match self {
            Table::Stored(v) => Some(*v),
            Table::Built(t) => Variants::open(t.bytes(), n).ok(),
        }
    }
}

/// The column blocks of a join through them.
struct ColumnsJoin {
    cols: Columns,
    bins: Option<CharBins>,
    /// The column values of each position (counts, then coordinates), `cols` bytes each.
    values: Vec<u8>,
    sigs: Vec<u64>,
}

/// What a join reads to find each item's near items.
enum Finder<'a> {
    Columns(Box<ColumnsJoin>),
    Variants {
        table: Table<'a>,
        /// Each item's position in the join's order.
        pos: Vec<u32>,
    },
}

/// Every pair of distinct items within a [`Radius`], exactly, batch by batch
/// ([`SelfJoin::next_batch`]).
///
/// Order: batches follow the join's sorted order of items (by length in chars and then
/// the first stored coordinate for Levenshtein, else by the first stored coordinate; ties
/// by item number), each item's
/// pairs with the items after it in that order, nearest first (by distance, then id, then
/// item number). The order depends only on the index, never on the number of threads.
pub struct SelfJoin<'a> {
    index: &'a Index,
    metric: &'a AnyMetric,
    keys: StrTable<'a>,
    bound: Bound,
    radius: Radius,
    /// Item numbers in the join's order.
    order: Vec<u32>,
    /// Each item's length in chars (by item number).
    lens: Vec<u32>,
    /// The sort key at each position.
    sort_key: Vec<u32>,
    /// The first stored coordinate at each position (the order's second key when the
    /// first is the length).
    first_coord: Vec<u8>,
    /// Whether the sort key is the length (a metric bounded by char counts).
    by_length: bool,
    /// The longest item, in chars.
    longest: u32,
    finder: Finder<'a>,
    path: JoinPath,
    /// The next position to answer.
    next: usize,
    stats: JoinStats,
}

impl<'a> SelfJoin<'a> {
    /// Sets up the join: sorts the items, lays out their coordinates (and for Levenshtein
    /// their char counts) in column blocks. Refused with [`Error::NoLowerBound`] when the
    /// index's embedding gives no lower bound, and for a radius out of range.
    pub fn new(index: &'a Index, radius: Radius) -> Result<SelfJoin<'a>> {
        Self::with(index, radius, JoinBy::Auto)
    }

    /// [`SelfJoin::new`], choosing how near items are found ([`JoinBy`]); the pairs and
    /// their order are the same either way.
    pub fn with(index: &'a Index, radius: Radius, by: JoinBy) -> Result<SelfJoin<'a>> {
        radius.check(index)?;
        let bound = index.bound().ok_or_else(|| Error::NoLowerBound {
            path: index.path().to_path_buf(),
            embedding: index.meta().embedding.name().to_string(),
        })?;
        let metric = index.metric()?;
        let keys = index.keys();
        let n = index.len();
        index.check_rows()?;
        let rows = index.rows();
        let by_length = metric.bounded_by_char_counts();
        let lens: Vec<u32> = (0..n)
            .into_par_iter()
            .map(|i| LevenshteinQuery::item_len(keys.get(i)).min(u32::MAX as usize) as u32)
            .collect();
        let longest = lens.iter().copied().max().unwrap_or(0);
        let first = |i: usize| rows.row(i).first().copied().unwrap_or(0);
        let key_of = |i: usize| -> u32 {
            if by_length {
                lens[i]
            } else {
                u32::from(first(i))
            }
        };
        let mut order: Vec<u32> = (0..n as u32).collect();
        order.par_sort_unstable_by_key(|&i| (key_of(i as usize), first(i as usize), i));
        let sort_key: Vec<u32> = order.iter().map(|&i| key_of(i as usize)).collect();
        let first_coord: Vec<u8> = order.iter().map(|&i| first(i as usize)).collect();
        // The deletions a lookup needs: the widest reach, in whole edits.
        let need = radius.widened(longest, by_length, longest);
        let table = match by {
            JoinBy::Columns => None,
            JoinBy::Auto => Self::table_for(index, &lens, need)?,
        };
        let (finder, path) = match table {
            Some((table, path)) => {
                let mut pos = vec![0u32; n];
                for (p, &i) in order.iter().enumerate() {
                    pos[i as usize] = p as u32;
                }
                (Finder::Variants { table, pos }, path)
            }
            None => (
                Finder::Columns(Box::new(Self::columns_for(index, &order, bound, by_length))),
                JoinPath::Columns,
            ),
        };
        Ok(SelfJoin {
            index,
            metric,
            keys,
            bound,
            radius,
            order,
            lens,
            sort_key,
            first_coord,
            by_length,
            longest,
            finder,
            path,
            next: 0,
            stats: JoinStats::default(),
        })
    }

    /// The deletion-variant table a join within `need` can use: the index's, when its
    /// radius covers `need`; else one built in memory, when the metric allows one, `need`
    /// is at most 2 and the table's estimate fits the memory budget. `None`: the column
    /// blocks.
    fn table_for(
        index: &'a Index,
        lens: &[u32],
        need: f64,
    ) -> Result<Option<(Table<'a>, JoinPath)>> {
        let small = need >= 0.0 && need.floor() <= f64::from(variants::MAX_RADIUS);
        if !(small && variants::supports(&index.meta().metric_spec)) {
            return Ok(None);
        }
        let r = need as u32;
        if let Some(v) = index.variants()? {
            if r <= v.radius() {
                return Ok(Some((Table::Stored(v), JoinPath::StoredVariants)));
            }
        }
        let r = r.max(1);
        let estimate = variants::build_estimate(lens.iter().map(|&l| l as usize), r);
        if !crate::resources::fits(estimate)? {
            return Ok(None);
        }
        let t0 = std::time::Instant::now();
        let keys = index.keys();
        let all: Vec<&[u8]> = (0..index.len()).map(|i| keys.get(i)).collect();
        let Ok(table) = VariantTable::try_build(&all, r) else {
            return Ok(None);
        };
        let path = JoinPath::BuiltVariants {
            radius: r,
            bytes: table.len(),
            seconds: t0.elapsed().as_secs_f64(),
        };
        Ok(Some((Table::Built(table), path)))
    }

    /// The column blocks of a join through them: the items' coordinates (and for
    /// Levenshtein with whole coordinates their char counts and signatures) in the join's
    /// order.
    fn columns_for(index: &Index, order: &[u32], bound: Bound, by_length: bool) -> ColumnsJoin {
        let keys = index.keys();
        let n = index.len();
        let (stride, dim) = (index.stride(), index.meta().dim as usize);
        let coords = index.rows().in_item_order_table();
        let with_counts = by_length && bound.whole;
        let mut sorted = vec![0u8; n * stride];
        sorted
            .par_chunks_mut(stride.max(1))
            .zip(order.par_iter())
            .for_each(|(row, &i)| {
                let i = i as usize;
                if let Some(r) = coords.get(i * stride..(i + 1) * stride) {
                    row.copy_from_slice(r);
                }
            });
        drop(coords);
        let bins = with_counts.then(|| CharBins::fit((0..n).map(|i| keys.get(i))));
        let counts: Option<Vec<[u8; columns::BINS]>> = bins.as_ref().map(|b| {
            order
                .par_iter()
                .map(|&i| b.counts(keys.get(i as usize)))
                .collect()
        });
        let sigs: Vec<u64> = if by_length {
            order
                .par_iter()
                .map(|&i| LevenshteinQuery::signature(keys.get(i as usize)))
                .collect()
        } else {
            Vec::new()
        };
        let cols = Columns::build(columns::Parts {
            coords: &sorted,
            positions: None,
            stride,
            dim,
            counts: counts.as_deref(),
            sigs: with_counts.then(|| sigs.clone()),
        });
        let width = cols.cols();
        let mut values = vec![0u8; n * width];
        values
            .par_chunks_mut(width.max(1))
            .enumerate()
            .for_each(|(p, v)| {
                let mut at = 0;
                if let Some(c) = &counts {
                    v[..columns::BINS].copy_from_slice(&c[p]);
                    at = columns::BINS;
                }
                v[at..at + dim].copy_from_slice(&sorted[p * stride..p * stride + dim]);
            });
        ColumnsJoin {
            cols,
            bins,
            values,
            sigs,
        }
    }

    /// Which way the join finds near items.
    pub fn path(&self) -> JoinPath {
        self.path
    }

    /// Number of items of the join.
    pub fn len(&self) -> usize {
        self.order.len()
    }

    /// Whether the index has no items.
    pub fn is_empty(&self) -> bool {
        self.order.is_empty()
    }

    /// Items whose pairs have been handed out so far.
    pub fn done(&self) -> usize {
        self.next
    }

    /// What the join has cost so far.
    pub fn stats(&self) -> JoinStats {
        self.stats
    }

    /// The next batch of pairs (possibly empty), or `None` when every item is done.
    pub fn next_batch(&mut self) -> Option<Result<Vec<Pair>>> {
        let n = self.len();
        if self.next >= n {
            return None;
        }
        let start = self.next;
        let end = (start + QUERY_BLOCK * BATCH_BLOCKS).min(n);
        self.next = end;
        let starts: Vec<usize> = (start..end).step_by(QUERY_BLOCK).collect();
        let this = &*self;
        let found: Vec<(Vec<Pair>, JoinStats)> = starts
            .par_iter()
            .map(|&p0| {
                let ps = p0..(p0 + QUERY_BLOCK).min(end);
                match &this.finder {
                    Finder::Columns(c) => this.query_block(c, ps),
                    Finder::Variants { table, pos } => this.variant_block(table, pos, ps),
                }
            })
            .collect();
        if let Err(e) = self.metric.check() {
            return Some(Err(e.into()));
        }
        let mut out = Vec::new();
        for (pairs, s) in found {
            self.stats.examined += s.examined;
            self.stats.computed += s.computed;
            self.stats.pairs += pairs.len() as u64;
            out.extend(pairs);
        }
        Some(Ok(out))
    }

    /// Every remaining pair, in the join's order.
    pub fn collect_all(mut self) -> Result<(Vec<Pair>, JoinStats)> {
        let mut all = Vec::new();
        while let Some(b) = self.next_batch() {
            all.extend(b?);
        }
        Ok((all, self.stats))
    }

    /// The radius of the range search from position `p`: what its pairs with later items
    /// can reach ([`Radius::widened`]).
    fn reach(&self, p: usize) -> f64 {
        let i = self.order[p] as usize;
        self.radius
            .widened(self.lens[i], self.by_length, self.longest)
    }

    /// The positions after `p` that can be within its reach, as ranges: items whose sort
    /// key exceeds `p`'s by more than the reach allows are farther than the radius. When
    /// the key is the length, each length from `p`'s up to its reach is one range, of the
    /// items whose first coordinate is within the reach of `p`'s (the order's second key).
    fn ranges(&self, p: usize, reach: f64, out: &mut Vec<std::ops::Range<usize>>) {
        out.clear();
        let n = self.len();
        let w_coord = self.bound.max_diff_within(reach);
        if !self.by_length {
            let top = self.sort_key[p].saturating_add(u32::from(w_coord));
            out.push(p + 1..p + self.sort_key[p..].partition_point(|&v| v <= top));
            return;
        }
        let w_len = if reach.is_finite() {
            reach.floor().min(f64::from(u32::MAX)) as u32
        } else {
            u32::MAX
        };
        let len = self.sort_key[p];
        let top = len.saturating_add(w_len);
        let v = self.first_coord[p];
        let (lo_c, hi_c) = (v.saturating_sub(w_coord), v.saturating_add(w_coord));
        let mut at = p + 1;
        // The rest of p's own length: first coordinates from p's up.
        let own_end = at + self.sort_key[at..].partition_point(|&m| m == len);
        let cut = at + self.first_coord[at..own_end].partition_point(|&c| c <= hi_c);
        if cut > at {
            out.push(at..cut);
        }
        at = own_end;
        while at < n && self.sort_key[at] <= top {
            let m = self.sort_key[at];
            let end = at + self.sort_key[at..].partition_point(|&x| x == m);
            let group = &self.first_coord[at..end];
            let from = at + group.partition_point(|&c| c < lo_c);
            let to = at + group.partition_point(|&c| c <= hi_c);
            if to > from {
                out.push(from..to);
            }
            at = end;
        }
    }

    /// The pairs of positions `ps` with the positions after each, in shared passes over
    /// the union of their ranges ([`SelfJoin::ranges`]).
    fn query_block(&self, c: &ColumnsJoin, ps: std::ops::Range<usize>) -> (Vec<Pair>, JoinStats) {
        let width = c.cols.cols();
        let mut ranges: Vec<Vec<std::ops::Range<usize>>> = vec![Vec::new(); ps.len()];
        let mut his: Vec<u8> = Vec::with_capacity(ps.len());
        for (j, p) in ps.clone().enumerate() {
            let reach = self.reach(p);
            self.ranges(p, reach, &mut ranges[j]);
            his.push(self.bound.max_diff_within(reach));
        }
        let ts: Vec<Threshold<'_>> = ps
            .clone()
            .zip(&his)
            .map(|(p, &hi)| Threshold {
                q: &c.values[p * width..(p + 1) * width],
                lo: None,
                hi,
                sig: c.sigs.get(p).copied().unwrap_or(0),
            })
            .collect();
        // The block ranges of every query, merged.
        let mut blocks: Vec<std::ops::Range<usize>> = ranges
            .iter()
            .flatten()
            .map(|r| r.start / columns::BLOCK..r.end.div_ceil(columns::BLOCK))
            .collect();
        blocks.sort_unstable_by_key(|r| (r.start, r.end));
        let mut merged: Vec<std::ops::Range<usize>> = Vec::new();
        for r in blocks {
            match merged.last_mut() {
                Some(last) if r.start <= last.end => last.end = last.end.max(r.end),
                _ => merged.push(r),
            }
        }
        let mut cands: Vec<Vec<(u32, u8)>> = vec![Vec::new(); ps.len()];
        for r in merged {
            c.cols.within_many_in(&ts, r, |j, pos, b| {
                let p = pos as usize;
                if ranges[j].iter().any(|r| r.contains(&p)) {
                    cands[j].push((pos, b));
                }
            });
        }
        let mut stats = JoinStats::default();
        let mut out = Vec::new();
        let mut found: Vec<Neighbor> = Vec::new();
        let (mut at, mut lane_out): (Vec<(u32, f64)>, Vec<f64>) = (Vec::new(), Vec::new());
        for (j, p) in ps.clone().enumerate() {
            let i = self.order[p];
            let key = self.keys.get(i as usize);
            let q = self.metric.prepare(key);
            let li = self.lens[i as usize];
            let group = q.group_size().min(LANE_GROUP);
            found.clear();
            // Without counts in the columns, the signature gap is applied here.
            let sig_here = self.by_length && c.bins.is_none();
            for &(pos, b) in &cands[j] {
                stats.examined += 1;
                let other = self.order[pos as usize];
                let lj = self.lens[other as usize];
                let limit = self.radius.limit(li, lj);
                let mut lb = self.bound.lower(b);
                if self.by_length {
                    lb = lb.max(f64::from(li.abs_diff(lj)));
                    if sig_here {
                        let gap = LevenshteinQuery::signature_gap(c.sigs[p], c.sigs[pos as usize]);
                        lb = lb.max(f64::from(gap));
                    }
                }
                if lb > limit {
                    continue;
                }
                let item = self.keys.get(other as usize);
                if group > 1 {
                    at.push((other, limit));
                    if at.len() == group {
                        stats.computed += self.flush(&q, &mut at, &mut lane_out, &mut found);
                    }
                    continue;
                }
                stats.computed += 1;
                if let Some(d) = q.distance_within(item, limit) {
                    if d <= limit {
                        found.push(Neighbor {
                            index: other,
                            distance: d,
                        });
                    }
                }
            }
            stats.computed += self.flush(&q, &mut at, &mut lane_out, &mut found);
            order::sort(self.index, &mut found);
            out.extend(found.iter().map(|n| Pair {
                a: i.min(n.index),
                b: i.max(n.index),
                distance: n.distance,
            }));
        }
        (out, stats)
    }

    /// The pairs of positions `ps` with the positions after each, from the items that
    /// share a deletion variant with each (within the deletions its reach allows).
    fn variant_block(
        &self,
        table: &Table<'_>,
        pos: &[u32],
        ps: std::ops::Range<usize>,
    ) -> (Vec<Pair>, JoinStats) {
        let mut stats = JoinStats::default();
        let mut out = Vec::new();
        let Some(view) = table.view(self.len()) else {
            return (out, stats);
        };
        let mut scratch = variants::Scratch::default();
        let mut cands: Vec<u32> = Vec::new();
        let mut found: Vec<Neighbor> = Vec::new();
        for p in ps {
            let i = self.order[p];
            let key = self.keys.get(i as usize);
            let reach = self.reach(p);
            // Whole edits: the metrics with a table have whole distances.
            let r = reach.floor().clamp(0.0, f64::from(view.radius())) as u32;
            view.candidates(key, r, &mut scratch, &mut cands);
            let q = self.metric.prepare(key);
            let li = self.lens[i as usize];
            found.clear();
            for &other in &cands {
                if pos.get(other as usize).is_none_or(|&at| at as usize <= p) {
                    continue;
                }
                stats.examined += 1;
                let lj = self.lens[other as usize];
                let limit = self.radius.limit(li, lj);
                if f64::from(li.abs_diff(lj)) > limit {
                    continue;
                }
                stats.computed += 1;
                if let Some(d) = q.distance_within(self.keys.get(other as usize), limit) {
                    if d <= limit {
                        found.push(Neighbor {
                            index: other,
                            distance: d,
                        });
                    }
                }
            }
            order::sort(self.index, &mut found);
            out.extend(found.iter().map(|n| Pair {
                a: i.min(n.index),
                b: i.max(n.index),
                distance: n.distance,
            }));
        }
        (out, stats)
    }

    /// Measures the items waiting in `at` (item, limit) in one group; keeps those within
    /// their limit. Returns the distances computed.
    fn flush(
        &self,
        q: &crate::metric::AnyQuery,
        at: &mut Vec<(u32, f64)>,
        out: &mut Vec<f64>,
        found: &mut Vec<Neighbor>,
    ) -> u64 {
        if at.is_empty() {
            return 0;
        }
        let items: Vec<&[u8]> = at.iter().map(|&(i, _)| self.keys.get(i as usize)).collect();
        out.clear();
        out.resize(items.len(), 0.0);
        q.distances(&items, out);
        for (&(i, limit), &d) in at.iter().zip(out.iter()) {
            if d <= limit {
                found.push(Neighbor {
                    index: i,
                    distance: d,
                });
            }
        }
        let n = at.len() as u64;
        at.clear();
        n
    }
}
