//! Cells: the items partitioned by their coordinates, each cell's rows stored together, so
//! that a query compares its coordinates with the rows of a few nearby cells instead of
//! every row of the index.
//!
//! The partition is k-means on the u8 coordinate rows (Lloyd's iterations on a seeded
//! sample, each row assigned to the centre nearest in L1, centres the rounded means), with
//! about `1.25·√n` cells. A query ranks the cell centres by squared L2 distance to its own
//! coordinates and visits cells nearest first until a given number of rows has been
//! compared ([`CellsView::visit_order`]); the section holds the coordinate rows in cell
//! order, so each visited cell is one contiguous slice. In format version 2 these rows are
//! the only copy of the coordinates (the positions section maps each item to its row); in
//! version 1 they repeat the coordinates section.
//!
//! `benches/big.rs` measures the trade: on 663,473 words it reaches the recall of the full
//! scan while comparing about a tenth of the rows (README).
//!
//! Hand-written because the crates for k-means in Rust work on f32/f64 matrices through a
//! linear-algebra stack, while this partition needs u8 rows, L1 assignment and a layout of
//! its own in the file; the loop is a few dozen lines.
//!
//! Section layout (little-endian, every part starting on a 64-byte boundary of the section):
//!
//! ```text
//! 0..4     cell count K (u32)
//! 4..8     stride (u32), equal to the index's
//! 8..64    zero
//! 64       centres: K × stride u8
//!          starts: K + 1 u32 (cell c holds positions starts[c]..starts[c+1])
//!          members: n u32, the item at each position
//!          rows: n × stride u8, the coordinate row of each position's item
//! ```
//!
//! The members are the permutation from positions to items; [`positions`] makes its
//! inverse, which a version 2 file stores as the positions section.

use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

const HEAD: usize = 64;
/// Lloyd's iterations on the sample.
const ITERATIONS: usize = 8;
/// Sampled rows per cell for the iterations.
const SAMPLE_PER_CELL: usize = 64;
/// Largest number of cells.
pub const MAX_CELLS: usize = 4096;

/// The number of cells built for `n` items: about `1.25·√n`, at least 1, at most
/// [`MAX_CELLS`] and at most `n / 16` (cells of 16 items or more on average).
pub fn cell_count(n: usize) -> usize {
    let k = (1.25 * (n as f64).sqrt()).round() as usize;
    k.min(MAX_CELLS).min(n / 16).max(1)
}

fn pad64(x: usize) -> usize {
    x.div_ceil(64) * 64
}

/// Byte ranges of the parts of a section with `k` cells, `n` items and `stride`.
struct Parts {
    centres: std::ops::Range<usize>,
    starts: std::ops::Range<usize>,
    members: std::ops::Range<usize>,
    rows: std::ops::Range<usize>,
}

fn parts(k: usize, n: usize, stride: usize) -> Option<Parts> {
    let c0 = HEAD;
    let c1 = c0.checked_add(k.checked_mul(stride)?)?;
    let s0 = pad64(c1);
    let s1 = s0.checked_add(k.checked_add(1)?.checked_mul(4)?)?;
    let m0 = pad64(s1);
    let m1 = m0.checked_add(n.checked_mul(4)?)?;
    let r0 = pad64(m1);
    let r1 = r0.checked_add(n.checked_mul(stride)?)?;
    Some(Parts {
        centres: c0..c1,
        starts: s0..s1,
        members: m0..m1,
        rows: r0..r1,
    })
}

/// Builds the cells section for `n` rows of `stride` bytes (`coords.len() == n · stride`).
///
/// Deterministic for a given `seed` and input.
pub fn build(coords: &[u8], stride: usize, seed: u64) -> Vec<u8> {
    let n = coords.len() / stride;
    let k = cell_count(n);
    let row = |i: usize| &coords[i * stride..(i + 1) * stride];
    let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0x63_656c_6c73);
    let mut ids: Vec<usize> = (0..n).collect();
    let sample_len = (k * SAMPLE_PER_CELL).min(n);
    let (sample, _) = ids.partial_shuffle(&mut rng, sample_len);
    let sample: Vec<usize> = sample.to_vec();
    // Initial centres: k distinct sampled rows.
    let mut centres: Vec<u8> = sample[..k].iter().flat_map(|&i| row(i).to_vec()).collect();
    for _ in 0..ITERATIONS {
        let assign: Vec<u32> = sample
            .par_iter()
            .map(|&i| crate::coords::nearest_l1(row(i), &centres, stride))
            .collect();
        let mut sums = vec![0u64; k * stride];
        let mut counts = vec![0u64; k];
        for (&i, &c) in sample.iter().zip(&assign) {
            counts[c as usize] += 1;
            for (s, &v) in sums[c as usize * stride..][..stride].iter_mut().zip(row(i)) {
                *s += u64::from(v);
            }
        }
        for c in 0..k {
            if counts[c] == 0 {
                // An empty cell takes a random sampled row as its new centre.
                let i = sample[rng.gen_range(0..sample.len())];
                centres[c * stride..][..stride].copy_from_slice(row(i));
                continue;
            }
            for j in 0..stride {
                let mean = (sums[c * stride + j] as f64 / counts[c] as f64).round();
                centres[c * stride + j] = mean.clamp(0.0, 255.0) as u8;
            }
        }
    }
    let assign: Vec<u32> = (0..n)
        .into_par_iter()
        .map(|i| crate::coords::nearest_l1(row(i), &centres, stride))
        .collect();
    let mut starts = vec![0u32; k + 1];
    for &c in &assign {
        starts[c as usize + 1] += 1;
    }
    for c in 0..k {
        starts[c + 1] += starts[c];
    }
    let mut fill: Vec<u32> = starts[..k].to_vec();
    let mut members = vec![0u32; n];
    for (i, &c) in assign.iter().enumerate() {
        members[fill[c as usize] as usize] = i as u32;
        fill[c as usize] += 1;
    }
    let p = parts(k, n, stride).expect("sizes of a built index fit in memory");
    let mut out = vec![0u8; p.rows.end];
    out[0..4].copy_from_slice(&(k as u32).to_le_bytes());
    out[4..8].copy_from_slice(&(stride as u32).to_le_bytes());
    out[p.centres].copy_from_slice(&centres);
    for (b, s) in out[p.starts].chunks_exact_mut(4).zip(&starts) {
        b.copy_from_slice(&s.to_le_bytes());
    }
    for (b, m) in out[p.members].chunks_exact_mut(4).zip(&members) {
        b.copy_from_slice(&m.to_le_bytes());
    }
    for (dst, &m) in out[p.rows].chunks_exact_mut(stride).zip(&members) {
        dst.copy_from_slice(row(m as usize));
    }
    out
}

/// The positions section of a cells section's members: `n` u32, the position of each item
/// (the inverse permutation of the members).
pub fn positions(members: &[u8]) -> Vec<u8> {
    let n = members.len() / 4;
    let mut out = vec![0u8; n * 4];
    for pos in 0..n {
        let m = u32_at(members, pos) as usize;
        if let Some(b) = out.get_mut(m * 4..m * 4 + 4) {
            b.copy_from_slice(&(pos as u32).to_le_bytes());
        }
    }
    out
}

/// Checks that `positions` (`n` u32) is the inverse of the members of a checked view: the
/// position of the item at each position is that position. With the members a permutation
/// (checked by [`CellsView::open`]), this makes `positions` one too.
pub fn check_positions(view: &CellsView<'_>, positions: &[u8], n: usize) -> Result<(), String> {
    if positions.len() != n * 4 {
        return Err(format!("{} bytes for {n} items", positions.len()));
    }
    for pos in 0..n {
        let m = view.member(pos) as usize;
        let p = u32_at(positions, m) as usize;
        if p != pos {
            return Err(format!(
                "item {m} is recorded at position {p}, but its row is at position {pos}"
            ));
        }
    }
    Ok(())
}

/// Checks the header of a cells section for `n` items of `stride` bytes and that the
/// section has the size its cell count gives; returns the count and the parts. A pass that
/// does not grow with `n` (the file's open runs it on a version 2 file).
fn head(bytes: &[u8], n: usize, stride: usize) -> Result<(usize, Parts), String> {
    if bytes.len() < HEAD {
        return Err(format!("{} bytes, shorter than its header", bytes.len()));
    }
    let k = u32_at(bytes, 0) as usize;
    let s = u32_at(bytes, 1) as usize;
    if s != stride {
        return Err(format!("stride {s}, the index's is {stride}"));
    }
    if k == 0 || k > MAX_CELLS || k > n {
        return Err(format!("{k} cells for {n} items"));
    }
    if bytes[8..HEAD].iter().any(|&b| b != 0) {
        return Err("header bytes past the stride are not zero".into());
    }
    let p = parts(k, n, stride).ok_or("sizes overflow")?;
    if bytes.len() != p.rows.end {
        return Err(format!(
            "{} bytes; {k} cells of {n} items need {}",
            bytes.len(),
            p.rows.end
        ));
    }
    Ok((k, p))
}

/// Checks the header and size of a cells section for `n` items of `stride` bytes, in time
/// that does not grow with `n`.
pub fn check_len(bytes: &[u8], n: usize, stride: usize) -> Result<(), String> {
    head(bytes, n, stride).map(|_| ())
}

/// A checked view of a cells section inside a mapped index.
#[derive(Clone, Copy)]
pub struct CellsView<'a> {
    k: usize,
    stride: usize,
    centres: &'a [u8],
    starts: &'a [u8],
    members: &'a [u8],
    rows: &'a [u8],
}

#[inline]
fn u32_at(b: &[u8], i: usize) -> u32 {
    b.get(i * 4..i * 4 + 4)
        .map_or(0, |x| u32::from_le_bytes(x.try_into().expect("4 bytes")))
}

impl<'a> CellsView<'a> {
    /// Checks a cells section against the index it belongs to (`n` items, `stride`, and in
    /// a version 1 file the coordinate rows `coords` it repeats) and returns its view. Every
    /// field is checked: the sizes, that cell starts rise from 0 to n, that members are
    /// every item exactly once, and, given `coords`, that each stored row equals its item's
    /// coordinate row. The pass is linear in the section's size.
    pub fn open(
        bytes: &'a [u8],
        n: usize,
        stride: usize,
        coords: Option<&[u8]>,
    ) -> Result<Self, String> {
        let (k, p) = head(bytes, n, stride)?;
        let view = CellsView {
            k,
            stride,
            centres: &bytes[p.centres],
            starts: &bytes[p.starts],
            members: &bytes[p.members],
            rows: &bytes[p.rows],
        };
        if u32_at(view.starts, 0) != 0 || u32_at(view.starts, k) as usize != n {
            return Err("cell starts do not run from 0 to the number of items".into());
        }
        for c in 0..k {
            if u32_at(view.starts, c) > u32_at(view.starts, c + 1) {
                return Err(format!("cell {c} ends before it starts"));
            }
        }
        let mut seen = vec![false; n];
        for pos in 0..n {
            let m = u32_at(view.members, pos) as usize;
            match seen.get_mut(m) {
                Some(s) if !*s => *s = true,
                Some(_) => return Err(format!("item {m} is in more than one cell")),
                None => return Err(format!("position {pos} names item {m}, past the last")),
            }
            let Some(coords) = coords else {
                continue;
            };
            let want = coords.get(m * stride..(m + 1) * stride);
            if want != Some(&view.rows[pos * stride..(pos + 1) * stride]) {
                return Err(format!(
                    "the row stored at position {pos} is not item {m}'s coordinates"
                ));
            }
        }
        Ok(view)
    }

    /// The view of a section that [`CellsView::open`] accepted before (no checks repeated);
    /// `None` if it would not be accepted now.
    pub(crate) fn open_unchecked(bytes: &'a [u8], n: usize, stride: usize) -> Option<Self> {
        let k = u32_at(bytes, 0) as usize;
        let p = parts(k, n, stride)?;
        if bytes.len() != p.rows.end {
            return None;
        }
        Some(CellsView {
            k,
            stride,
            centres: &bytes[p.centres],
            starts: &bytes[p.starts],
            members: &bytes[p.members],
            rows: &bytes[p.rows],
        })
    }

    /// The member table: `n` u32, the item at each position.
    pub(crate) fn members(&self) -> &'a [u8] {
        self.members
    }

    /// Every coordinate row, in position order (`n × stride` bytes).
    pub(crate) fn all_rows(&self) -> &'a [u8] {
        self.rows
    }

    /// Number of cells.
    pub fn len(&self) -> usize {
        self.k
    }

    /// Whether there are no cells (never true for a checked section).
    pub fn is_empty(&self) -> bool {
        self.k == 0
    }

    /// Positions `start..end` of cell `c`.
    #[inline]
    pub fn cell(&self, c: usize) -> std::ops::Range<usize> {
        u32_at(self.starts, c) as usize..u32_at(self.starts, c + 1) as usize
    }

    /// The coordinate rows of positions `range`, contiguous.
    #[inline]
    pub fn rows(&self, range: std::ops::Range<usize>) -> &'a [u8] {
        &self.rows[range.start * self.stride..range.end * self.stride]
    }

    /// Asks the CPU to fetch the member entry of position `pos` into cache.
    #[inline]
    pub fn prefetch_member(&self, pos: usize) {
        if let Some(b) = self.members.get(pos * 4..) {
            crate::cpu::prefetch(b.as_ptr());
        }
    }

    /// The item stored at position `pos`.
    #[inline]
    pub fn member(&self, pos: usize) -> u32 {
        u32_at(self.members, pos)
    }

    /// Cells in increasing squared L2 distance of their centre to `q` (the query's stored
    /// coordinates), into `out` as (distance, cell), ties by cell number; only the first
    /// `first` entries are ordered (the rest follow in any order), as a visit that stops
    /// early needs no more.
    pub fn visit_order(&self, q: &[u8; 64], first: usize, out: &mut Vec<(u32, u32)>) {
        out.clear();
        for (c, centre) in self.centres.chunks_exact(self.stride).enumerate() {
            let d = crate::coords::score(centre, q, crate::coords::Space::L2);
            out.push((d, c as u32));
        }
        if first < out.len() {
            out.select_nth_unstable(first);
            out[..first].sort_unstable();
        } else {
            out.sort_unstable();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rows(n: usize, stride: usize) -> Vec<u8> {
        (0..n * stride)
            .map(|i| ((i * 37 + i / stride * 11) % 23) as u8)
            .collect()
    }

    #[test]
    fn built_sections_pass_their_checks_and_hold_every_item_once() {
        for (n, stride) in [(1, 8), (15, 8), (16, 16), (500, 32), (3000, 64)] {
            let coords = rows(n, stride);
            let bytes = build(&coords, stride, 7);
            let view = CellsView::open(&bytes, n, stride, Some(&coords)).expect("valid");
            assert_eq!(view.len(), cell_count(n));
            let mut all: Vec<u32> = (0..n).map(|p| view.member(p)).collect();
            all.sort_unstable();
            assert_eq!(all, (0..n as u32).collect::<Vec<_>>());
            assert_eq!(bytes, build(&coords, stride, 7), "deterministic");
        }
    }

    #[test]
    fn crafted_sections_are_refused() {
        let (n, stride) = (400, 16);
        let coords = rows(n, stride);
        let good = build(&coords, stride, 1);
        let k = cell_count(n);
        let p = parts(k, n, stride).unwrap();
        let mut cases: Vec<(Vec<u8>, &str)> = Vec::new();
        let mut b = good.clone();
        b[0..4].copy_from_slice(&0u32.to_le_bytes());
        cases.push((b, "cells for"));
        let mut b = good.clone();
        b[4] = 8;
        cases.push((b, "stride"));
        cases.push((good[..good.len() - 1].to_vec(), "bytes;"));
        let mut b = good.clone();
        b[p.starts.start + 4..p.starts.start + 8].copy_from_slice(&(n as u32 + 5).to_le_bytes());
        cases.push((b, "ends before"));
        let mut b = good.clone();
        let m1 = p.members.start;
        let first: [u8; 4] = b[m1..m1 + 4].try_into().unwrap();
        b[m1 + 4..m1 + 8].copy_from_slice(&first);
        cases.push((b, "more than one cell"));
        let mut b = good.clone();
        b[m1..m1 + 4].copy_from_slice(&(n as u32).to_le_bytes());
        cases.push((b, "past the last"));
        let mut b = good.clone();
        b[p.rows.start] ^= 1;
        cases.push((b, "is not item"));
        for (bytes, want) in cases {
            let e = CellsView::open(&bytes, n, stride, Some(&coords))
                .err()
                .expect("refused");
            assert!(e.contains(want), "{e:?} should mention {want:?}");
        }
    }

    #[test]
    fn positions_are_the_inverse_of_the_members_and_a_wrong_table_is_refused() {
        let (n, stride) = (500, 8);
        let coords = rows(n, stride);
        let bytes = build(&coords, stride, 2);
        let view = CellsView::open(&bytes, n, stride, None).expect("valid");
        let pos = positions(view.members());
        check_positions(&view, &pos, n).expect("the inverse");
        for i in 0..n {
            let p = u32_at(&pos, i) as usize;
            assert_eq!(view.member(p) as usize, i);
            assert_eq!(view.rows(p..p + 1), &coords[i * stride..(i + 1) * stride]);
        }
        // Two entries swapped: still a permutation, no longer the inverse.
        let mut bad = pos.clone();
        bad.copy_within(0..4, 8);
        bad[0..4].copy_from_slice(&pos[8..12]);
        let e = check_positions(&view, &bad, n).unwrap_err();
        assert!(e.contains("is recorded at position"), "{e}");
        let e = check_positions(&view, &pos[4..], n).unwrap_err();
        assert!(e.contains("bytes for 500 items"), "{e}");
        check_len(&bytes, n, stride).expect("its size");
        assert!(check_len(&bytes, n, 16).is_err(), "another stride");
    }

    #[test]
    fn visit_order_is_by_centre_distance() {
        let (n, stride) = (2000, 8);
        let coords = rows(n, stride);
        let bytes = build(&coords, stride, 3);
        let view = CellsView::open(&bytes, n, stride, Some(&coords)).unwrap();
        let mut q = [0u8; 64];
        q[..8].copy_from_slice(&coords[..8]);
        let mut order = Vec::new();
        view.visit_order(&q, usize::MAX, &mut order);
        assert_eq!(order.len(), view.len());
        assert!(order.windows(2).all(|w| w[0] <= w[1]));
        let mut part = Vec::new();
        view.visit_order(&q, 5, &mut part);
        assert_eq!(part[..5], order[..5]);
    }
}
