//! Candidates: the items nearest the query in landmark coordinates.
//!
//! Three sources ([`super::CandidateSource`]), measured by `benches/end_to_end.rs` and
//! `benches/big.rs`:
//!
//! - **cells** (default from [`super::CELLS_MIN_ITEMS`] items): the rows of the cells whose
//!   centres are nearest the query's coordinates ([`crate::index::cells`]), until
//!   [`super::SearchParams::visit`] rows are compared;
//! - **scan**: one pass over every item's u8 coordinates ([`crate::coords::scan`]); many
//!   queries share the pass tile by tile ([`Searcher::score_block`]);
//! - **tree**: the same candidates as the scan, found through the stored kd-tree over the
//!   rows' first coordinates ([`crate::index::tree`]; an index of format version 1: kiddo's
//!   exact `nearest_n` over its f32 coordinates).
//!
//! The scan and the cells pick the best `C` off the counting histogram filled in the same
//! pass ([`crate::coords::select`]), not with a heap: coordinates are small integers, so
//! scores are too.

use super::Searcher;
use crate::coords::scan::{score_rows, HIST_BINS};
use crate::coords::select::{select_best, select_best_mapped};
use crate::coords::Space;
use crate::error::Result;
use crate::index::Rows;

/// Queries whose coordinates are scored together, tile by tile, in one pass over the stored
/// rows ([`Searcher::search_many`], [`Searcher::answer_many`]).
pub(super) const QUERY_BLOCK: usize = 16;
/// Rows per tile of that pass: 2048 rows of up to 64 bytes (128 KiB) stay in the core's L2
/// cache while every query of a block is scored against them, so the coordinate table is
/// read from memory once per block instead of once per query.
const TILE_ROWS: usize = 2048;
/// How far ahead the cells' member table is fetched.
const AHEAD: usize = 16;

/// Per-thread working memory, reused across queries.
#[derive(Default)]
pub struct Scratch {
    scores: Vec<u32>,
    hist: Vec<u32>,
    /// The candidates picked, nearest first, as (score, item).
    pub(super) picked: Vec<(u32, u32)>,
    /// The candidates of a widened round not measured in the rounds before.
    pub(super) fresh: Vec<(u32, u32)>,
    tree_out: Vec<(u32, f32)>,
    /// Cells in visiting order, and (first score, first position) of each cell visited.
    cell_order: Vec<(u32, u32)>,
    spans: Vec<(u32, u32)>,
    /// The deletion-variant look-up's working memory and candidates (`variants.rs`).
    pub(super) variants: crate::index::variants::Scratch,
    pub(super) shared: Vec<u32>,
    /// The next cell of `cell_order` to visit, and how many of them were ordered.
    next_cell: usize,
    first_ordered: usize,
}

impl Scratch {
    /// Makes room for the scores of `n` rows (a pass writes every one, so they are not
    /// cleared) and empties the histogram.
    fn reset(&mut self, n: usize) {
        self.scores.resize(n, 0);
        self.hist.clear();
        self.hist.resize(HIST_BINS, 0);
    }

    /// Picks the `c` best scored rows of a pass over `rows` (in their storage order) into
    /// `picked` as (score, item), by (score, item).
    pub(super) fn select(&mut self, c: usize, rows: &Rows<'_>) {
        if rows.in_order() {
            select_best(&self.scores, c, &self.hist, &mut self.picked);
        } else {
            let item = |p| rows.item_at(p);
            select_best_mapped(&self.scores, c, &self.hist, &mut self.picked, item);
        }
    }
}

impl Searcher<'_> {
    /// Scores every item's coordinates against the query's and keeps the best `c`,
    /// nearest first, in `scratch.picked` as (score, item).
    pub(super) fn scan_candidates(&self, q: &[u8; 64], c: usize, space: Space, s: &mut Scratch) {
        s.reset(self.index.len());
        let rows = self.index.rows();
        score_rows(
            rows.stored(),
            rows.stride(),
            q,
            space,
            &mut s.scores,
            &mut s.hist,
        );
        s.select(c, &rows);
    }

    /// Scores the rows of the cells nearest the query (cells in increasing distance of their
    /// centre, until `visit` rows) and keeps the best `c`, nearest first, in
    /// `scratch.picked` as (score, item). An index without cells is scanned whole.
    ///
    /// With `more`, the same query's visit goes on from the cells the call before visited
    /// (its scores are kept in the scratch): only the rows of the further cells are scored.
    pub(super) fn cells_candidates(
        &self,
        q: &[u8; 64],
        c: usize,
        visit: usize,
        space: Space,
        s: &mut Scratch,
        more: bool,
    ) -> Result<()> {
        let Some(cells) = self.index.cells()? else {
            if more {
                s.select(c, &self.index.rows());
            } else {
                self.scan_candidates(q, c, space, s);
            }
            return Ok(());
        };
        let n = self.index.len();
        let visit = if visit == 0 { n } else { visit.max(c).min(n) };
        let stride = self.index.stride();
        // Order enough cells for four times the average cell's share of `visit`; the rest
        // are ordered only if the visit gets to them.
        if !more {
            s.first_ordered =
                (visit.saturating_mul(4) / (n / cells.len()).max(1)).saturating_add(8);
            cells.visit_order(q, s.first_ordered, &mut s.cell_order);
            s.reset(0);
            s.spans.clear();
            s.next_cell = 0;
        }
        let first = s.first_ordered;
        while s.next_cell < s.cell_order.len() && s.scores.len() < visit {
            let j = s.next_cell;
            s.next_cell += 1;
            if j == first {
                s.cell_order[first..].sort_unstable();
            }
            let r = cells.cell(s.cell_order[j].1 as usize);
            if r.is_empty() {
                continue;
            }
            let at = s.scores.len();
            s.scores.resize(at + r.len(), 0);
            s.spans.push((at as u32, r.start as u32));
            let rows = cells.rows(r);
            score_rows(rows, stride, q, space, &mut s.scores[at..], &mut s.hist);
        }
        select_best(&s.scores, c, &s.hist, &mut s.picked);
        // Scores are numbered in visiting order: back to cell positions, then to items
        // (the member table is read at scattered places: positions are made first and
        // fetched ahead).
        for p in s.picked.iter_mut() {
            let span = s.spans.partition_point(|&(at, _)| at <= p.1) - 1;
            let (at, start) = s.spans[span];
            p.1 = start + (p.1 - at);
        }
        for j in 0..s.picked.len() {
            if let Some(&(_, ahead)) = s.picked.get(j + AHEAD) {
                cells.prefetch_member(ahead as usize);
            }
            let pos = s.picked[j].1 as usize;
            s.picked[j].1 = cells.member(pos);
        }
        Ok(())
    }

    /// The `c` candidates of the kd-tree, into `scratch.picked` in order.
    ///
    /// A format version 2 tree holds the first coordinates of the rows (`small`): a score over
    /// them is at most the score over the whole row in L1, squared L2 and L∞. The `m`
    /// nearest by the prefix (m = max(2c, 64)) are scored whole; unless the m-th prefix score
    /// already exceeds the c-th best whole score S, every point within S by the prefix is
    /// taken and scored whole (an item farther than S by the prefix is farther than S
    /// whole). The candidates are then the scan's: the `c` best rows by (score, item). A
    /// version 1 tree gives the `c` nearest by the query's unquantised coordinates `exact`.
    pub(super) fn tree_candidates(
        &self,
        small: &[u8; 64],
        exact: &[f32; 64],
        c: usize,
        space: Space,
        s: &mut Scratch,
    ) -> Result<()> {
        let tree = self.index.tree()?;
        let dim = self.index.tree_dims();
        s.picked.clear();
        if !self.index.tree_holds_rows() {
            tree.nearest(&exact[..dim], c, space, &mut s.tree_out);
            s.picked.extend(s.tree_out.iter().map(|&(i, _)| (0, i)));
            return Ok(());
        }
        let n = self.index.len();
        let c = c.min(n);
        if c == 0 {
            return Ok(());
        }
        let rows = self.index.rows();
        let q: Vec<f32> = small[..dim].iter().map(|&b| f32::from(b)).collect();
        let m = c.saturating_mul(2).max(64).min(n);
        let mut radius = None;
        loop {
            // Within a radius, every point inside it.
            let count = if radius.is_some() { n } else { m };
            tree.nearest_within(&q, count, radius, space, &mut s.tree_out);
            s.picked.clear();
            s.picked.extend(
                s.tree_out
                    .iter()
                    .map(|&(i, _)| (crate::coords::score(rows.row(i as usize), small, space), i)),
            );
            let kth = if s.picked.len() > c {
                s.picked.select_nth_unstable(c - 1);
                s.picked.truncate(c);
                s.picked[c - 1].0
            } else {
                s.picked.iter().map(|p| p.0).max().unwrap_or(0)
            };
            // Prefix scores are whole numbers below 2^24 (at most 8 · 255² in L2), exact in
            // f32; an item not returned has a prefix score at least the m-th's.
            let last = s.tree_out.last().map_or(f32::INFINITY, |&(_, d)| d);
            if m >= n || radius.is_some() || last > kth as f32 {
                break;
            }
            radius = Some(kth as f32);
        }
        s.picked.sort_unstable();
        Ok(())
    }

    /// Scores every stored row against each query row of `qs` in `space`, into
    /// `s[j].scores` and `s[j].hist` (as [`score_rows`] does for one query).
    ///
    /// With several queries the rows are taken [`TILE_ROWS`] at a time and each tile is
    /// scored against every query before the next is read: the scores are the same as one
    /// [`score_rows`] call per query, the coordinate table is read once per block.
    pub(super) fn score_block(&self, qs: &[[u8; 64]], space: Space, s: &mut [Scratch]) {
        let n = self.index.len();
        let rows = self.index.rows();
        let (coords, stride) = (rows.stored(), rows.stride());
        for sc in s.iter_mut().take(qs.len()) {
            sc.reset(n);
        }
        if let ([q], [sc, ..]) = (qs, &mut *s) {
            score_rows(coords, stride, q, space, &mut sc.scores, &mut sc.hist);
            return;
        }
        let mut at = 0;
        while at < n {
            let end = (at + TILE_ROWS).min(n);
            let tile = &coords[at * stride..end * stride];
            for (q, sc) in qs.iter().zip(s.iter_mut()) {
                score_rows(
                    tile,
                    stride,
                    q,
                    space,
                    &mut sc.scores[at..end],
                    &mut sc.hist,
                );
            }
            at = end;
        }
    }
}
