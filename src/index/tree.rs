//! The kd-tree, stored as a zero-copy kiddo archive.
//!
//! In format version 2 it holds the first [`prefix_dims`] coordinates of each item's u8
//! row (at most [`TREE_PREFIX`]), as f32: small (36 bytes an item) and, since a distance
//! over a prefix of the coordinates is at most the distance over all of them in L1, L2
//! and L∞, a filter from which the search finds the exact best rows
//! (`search/candidates.rs`). In version 1 it held every unquantised coordinate (260 bytes
//! an item at 64 coordinates), which files of that version still carry.
//!
//! kiddo's dimension is a compile-time constant, so the tree is built for the smallest size
//! in [`TREE_DIMS`] that holds its coordinates and the extra coordinates are zero, which
//! changes no L1, L2 or L∞ distance.

use std::num::NonZeroUsize;

use kiddo::{Chebyshev, ImmutableKdTree, Manhattan, SquaredEuclidean};
use rkyv::rancor::Error as RkyvError;

use crate::coords::Space;

/// The dimensions a tree can be compiled for.
pub const TREE_DIMS: [usize; 6] = [2, 4, 8, 16, 32, 64];

/// Most coordinates a format version 2 tree holds.
pub const TREE_PREFIX: usize = 8;

/// The coordinates a format version 2 tree holds for an embedding of dimension `dim`: the
/// first `min(dim, TREE_PREFIX)`.
pub fn prefix_dims(dim: usize) -> usize {
    dim.min(TREE_PREFIX)
}

/// The tree dimension used for `dim` coordinates.
pub fn tree_dim(dim: usize) -> usize {
    TREE_DIMS
        .into_iter()
        .find(|&t| t >= dim)
        .unwrap_or(*TREE_DIMS.last().expect("non-empty"))
}

fn build_k<const K: usize>(coords: &[f32], dim: usize) -> Result<Vec<u8>, String> {
    let points: Vec<[f32; K]> = coords
        .chunks_exact(dim)
        .map(|row| {
            let mut p = [0f32; K];
            p[..dim].copy_from_slice(row);
            p
        })
        .collect();
    let tree: ImmutableKdTree<f32, K> =
        ImmutableKdTree::new_from_slice(&points).map_err(|e| e.to_string())?;
    let bytes = rkyv::to_bytes::<RkyvError>(&tree).map_err(|e| e.to_string())?;
    Ok(bytes.to_vec())
}

/// Builds the tree over row-major coordinates (`n × dim`) and returns its archive bytes.
pub fn build(coords: &[f32], dim: usize) -> Result<Vec<u8>, String> {
    match tree_dim(dim) {
        2 => build_k::<2>(coords, dim),
        4 => build_k::<4>(coords, dim),
        8 => build_k::<8>(coords, dim),
        16 => build_k::<16>(coords, dim),
        32 => build_k::<32>(coords, dim),
        _ => build_k::<64>(coords, dim),
    }
}

type Archived<const K: usize> = <ImmutableKdTree<f32, K> as rkyv::Archive>::Archived;

/// A view of an archived tree inside a mapped index file.
pub struct TreeView<'a> {
    bytes: &'a [u8],
    tree_dim: usize,
    dim: usize,
    size: usize,
}

// Why the tree is checked field by field, and how.
//
// rkyv's validation (bytecheck) proves that every pointer and length of the archive stays
// inside the bytes, but kiddo's queries then read its fields with unchecked arithmetic:
// kiddo 6.3's `ImmutableKdTree` (Eytzinger stems, `VecOfArenas` leaves) answers
// `nearest_n` through `arithmetic_query_with_scratch_impl` (kd_tree/orchestrator), which
//
// - pushes one frame per stem level onto fixed stacks of 64 frames with
//   `push_unchecked_inline`, for levels `0..=max_stem_level`;
// - reads `stems.get_unchecked(i)` for Eytzinger indices `i < 2^(max_stem_level + 1)`,
//   and treats a pivot of `f32::INFINITY` (its `max_value`) as "no split" (always left);
// - takes leaf `i & !(1 << level)` at the bottom, indexes `leaf_extents[leaf]` (checked:
//   a panic), then reads `len` points and items at `leaf_bytes.as_ptr().add(offset)` in
//   tiles of 32, 8, 4, 2, 1 points (`LeafArena`), each tile `K` columns of f32 followed
//   by its u32 items: no bound is checked against the arena;
// - sorts distances with a comparison that NaN makes inconsistent;
// - uses only `uses_arithmetic()` of the stem/leaf resolution (a `Mapped` resolution
//   would switch to a path that panics on a miss).
//
// The archived fields are private to kiddo, so they are read through `Layout`, a copy of
// the archived struct's field types in the same order: rkyv's derived archives are
// `repr(C)`, so the copy lays out identically, which a compile-time check of size and
// alignment and a cross-check of every field kiddo does expose (size, levels, leaf count
// and every leaf's length, the stems' address) confirm on each file. Cargo.toml pins kiddo
// to the release the copy was made from, and a test reads trees kiddo builds through the
// copy and compares every field's address and value, and every leaf's items and points,
// with what kiddo's validated access reports. With those fields,
// every one of the conditions above is checked, and more: the shape is the one kiddo builds
// for n items (levels, leaf and stem counts, the resolution), leaves lie in order in the
// arena, every item 0..n appears exactly once, coordinates are finite and zero past the
// embedding's dimension, and every point lies on its side of every pivot above it, so a
// pruned search over the tree is exact. The pass is linear in the tree's size and runs
// once, on first use of the tree.

/// The archived form of kiddo's `ImmutableKdTree<f32, K>`, for any K: its fields' types
/// in kiddo's order (`stems`, `leaves`, `stem_leaf_resolution`, `size`, `max_stem_level`,
/// `max_leaf_len`; the phantom fields archive to nothing).
#[derive(rkyv::Archive)]
#[allow(dead_code)] // only the archived form is read
struct Layout {
    stems: Box<[f32]>,
    leaves: LeavesLayout,
    resolution: ResolutionLayout,
    size: usize,
    max_stem_level: i32,
    max_leaf_len: usize,
}

/// kiddo's `VecOfArenas`: `(byte offset, length)` per leaf, the arena, the item count.
#[derive(rkyv::Archive)]
#[allow(dead_code)]
struct LeavesLayout {
    leaf_extents: Vec<(usize, usize)>,
    leaf_bytes: Box<[u8]>,
    size: usize,
}

/// kiddo's `OwnedStemLeafResolution`.
#[derive(rkyv::Archive)]
#[allow(dead_code)]
enum ResolutionLayout {
    Arithmetic {
        stems_depth: usize,
        leaf_count: usize,
    },
    Pristine {
        stems_depth: usize,
        leaf_count: usize,
    },
    Mapped {
        min_stem_leaf_idx: usize,
        leaf_idx_map: Vec<usize>,
    },
}

const fn same_shape<A, B>() -> bool {
    std::mem::size_of::<A>() == std::mem::size_of::<B>()
        && std::mem::align_of::<A>() == std::mem::align_of::<B>()
}
type ArchivedLeaves<const K: usize> =
    <kiddo::leaf_strategies::VecOfArenas<f32, u32, K, BUCKET> as rkyv::Archive>::Archived;
type ArchivedResolution = <kiddo::kd_tree::OwnedStemLeafResolution as rkyv::Archive>::Archived;
const _: () = assert!(
    same_shape::<ArchivedLeavesLayout, ArchivedLeaves<2>>()
        && same_shape::<ArchivedLeavesLayout, ArchivedLeaves<64>>()
        && same_shape::<ArchivedResolutionLayout, ArchivedResolution>(),
    "kiddo's archived leaves or stem/leaf resolution no longer have the layout tree.rs checks"
);
const _: () = assert!(
    same_shape::<ArchivedLayout, Archived<2>>()
        && same_shape::<ArchivedLayout, Archived<4>>()
        && same_shape::<ArchivedLayout, Archived<8>>()
        && same_shape::<ArchivedLayout, Archived<16>>()
        && same_shape::<ArchivedLayout, Archived<32>>()
        && same_shape::<ArchivedLayout, Archived<64>>(),
    "kiddo's archived tree no longer has the layout that tree.rs checks"
);

/// Points per leaf in kiddo's immutable trees (the `B` of `ImmutableKdTree`).
const BUCKET: usize = 32;
/// Tile widths of a `VecOfArenas` leaf, largest first (kiddo's `LEAF_ARENA_TILE_WIDTHS`).
const TILES: [usize; 5] = [32, 8, 4, 2, 1];
/// Deepest stem level accepted: kiddo's traversal stacks hold 64 frames and its Eytzinger
/// stem indices are u32, so 2^(level + 1) must fit in one.
const MAX_STEM_LEVEL: i32 = 30;
/// Largest coordinate magnitude accepted: 64 squared differences of this size still sum
/// to a finite f32, so no distance kiddo computes becomes infinite or NaN.
const MAX_COORD: f32 = (1u64 << 60) as f32;

fn tile_len(remaining: usize) -> usize {
    TILES.into_iter().find(|&w| remaining >= w).unwrap_or(1)
}

/// Bytes of a leaf of `len` points in a tree of dimension `k`.
fn leaf_bytes_len(len: usize, k: usize) -> Option<usize> {
    len.checked_mul(k.checked_mul(4)?.checked_add(4)?)
}

/// Calls `f` with the item and the point of every point of a leaf of `len` points whose
/// bytes are `leaf` (exactly [`leaf_bytes_len`] of them), in kiddo's `LeafArena` order: tiles
/// of [`TILES`] points, each `K` columns of native-endian f32 followed by its u32 items.
fn for_each_point<const K: usize>(
    leaf: &[u8],
    len: usize,
    mut f: impl FnMut(usize, &[f32; K]) -> Result<(), String>,
) -> Result<(), String> {
    let word = |o: usize| -> [u8; 4] { leaf[o..o + 4].try_into().expect("4 bytes") };
    let mut point = [0f32; K];
    let mut at = 0;
    let mut remaining = len;
    while remaining > 0 {
        let w = tile_len(remaining);
        for j in 0..w {
            for (d, p) in point.iter_mut().enumerate() {
                *p = f32::from_ne_bytes(word(at + (d * w + j) * 4));
            }
            f(
                u32::from_ne_bytes(word(at + (K * w + j) * 4)) as usize,
                &point,
            )?;
        }
        at += w * (K * 4 + 4);
        remaining -= w;
    }
    Ok(())
}

fn usize_of(v: &rkyv::primitive::ArchivedUsize) -> usize {
    v.to_native() as usize
}

/// The row of each item, whose first coordinates a tree's points must equal.
pub type RowOf<'r> = &'r dyn Fn(usize) -> &'r [u8];

/// Checks an archived tree of dimension `K` for an index of `n` items whose tree holds
/// `dim` coordinates (the rest are zero); with `rows`, every point's coordinates must be
/// its item's row's first `dim` bytes. See the comment above `Layout`.
fn check_k<const K: usize>(
    bytes: &[u8],
    dim: usize,
    n: usize,
    rows: Option<RowOf<'_>>,
) -> Result<(), String> {
    use kiddo::kd_tree::KdTreeAccessor;

    let t =
        rkyv::access::<Archived<K>, rkyv::rancor::BoxedError>(bytes).map_err(|e| e.to_string())?;
    let l = rkyv::access::<ArchivedLayout, rkyv::rancor::BoxedError>(bytes)
        .map_err(|e| format!("not in the layout this waymark reads: {e}"))?;
    let stems: &[f32] = KdTreeAccessor::stems(t);
    let extents = l.leaves.leaf_extents.as_slice();
    let arena: &[u8] = l.leaves.leaf_bytes.get();

    // The copy of the layout reads what kiddo reads.
    let same_layout = stems.as_ptr() == l.stems.get().as_ptr().cast()
        && stems.len() == l.stems.len()
        && t.size() == usize_of(&l.size)
        && t.max_stem_level() == l.max_stem_level.to_native()
        && t.max_leaf_len() == usize_of(&l.max_leaf_len)
        && t.leaf_count() == extents.len()
        && extents
            .iter()
            .enumerate()
            .all(|(i, e)| t.leaves().leaf_len(i) == usize_of(&e.1));
    if !same_layout {
        return Err("not in the layout this waymark reads".into());
    }

    // Counts.
    let size = usize_of(&l.size);
    if size != n || usize_of(&l.leaves.size) != n {
        return Err(format!(
            "it holds {size} points ({} in its leaves) for {n} items",
            usize_of(&l.leaves.size)
        ));
    }

    // Shape: the one kiddo builds for n items.
    let level = l.max_stem_level.to_native();
    let depth = n
        .div_ceil(BUCKET)
        .max(1)
        .next_power_of_two()
        .trailing_zeros() as i32;
    if !(-1..=MAX_STEM_LEVEL).contains(&level) || level + 1 != depth {
        return Err(format!(
            "its deepest stem level is {level}; {n} items make {}",
            depth - 1
        ));
    }
    let leaves = 1usize << depth;
    if extents.len() != leaves {
        return Err(format!(
            "it has {} leaves; {depth} levels of stems make {leaves}",
            extents.len()
        ));
    }
    match &l.resolution {
        ArchivedResolutionLayout::Arithmetic {
            stems_depth,
            leaf_count,
        } if usize_of(stems_depth) == depth as usize && usize_of(leaf_count) == leaves => {}
        ArchivedResolutionLayout::Arithmetic {
            stems_depth,
            leaf_count,
        } => {
            return Err(format!(
                "its leaf resolution records {} levels and {} leaves, not {depth} and {leaves}",
                usize_of(stems_depth),
                usize_of(leaf_count)
            ))
        }
        _ => return Err("its leaf resolution is not the arithmetic one of a built tree".into()),
    }
    // kiddo sizes the stems to the Eytzinger index of the rightmost node one level below
    // the last stem level, rounded up to a multiple of 8; unused ones hold f32::INFINITY.
    // A tree of one leaf has none.
    let stem_count = if depth == 0 {
        0
    } else {
        (2 * leaves).div_ceil(8) * 8
    };
    if stems.len() != stem_count {
        return Err(format!(
            "it has {} stems; {depth} levels make {stem_count}",
            stems.len()
        ));
    }
    for (i, &s) in stems.iter().enumerate() {
        let used = i >= 1 && i < leaves;
        if !(s == f32::INFINITY || used && s.is_finite() && s.abs() <= MAX_COORD) {
            return Err(format!("stem {i} has the pivot {s}"));
        }
    }

    // Leaves: in order inside the arena, each item once, points finite and on their side of
    // every pivot above them.
    let mut seen = vec![0u64; n.div_ceil(64)];
    let mut end_of_last = 0usize;
    let mut longest = 0usize;
    for (leaf, e) in extents.iter().enumerate() {
        let (offset, len) = (usize_of(&e.0), usize_of(&e.1));
        let bytes = leaf_bytes_len(len, K)
            .and_then(|b| offset.checked_add(b))
            .filter(|&end| offset % 8 == 0 && offset >= end_of_last && end <= arena.len());
        let Some(end) = bytes else {
            return Err(format!(
                "leaf {leaf}: {len} points at byte {offset} do not fit in order in its {}-byte arena",
                arena.len()
            ));
        };
        end_of_last = end;
        longest = longest.max(len);
        for_each_point::<K>(&arena[offset..end], len, |item, point| {
            if item >= n || seen[item / 64] & (1 << (item % 64)) != 0 {
                return Err(format!(
                    "leaf {leaf}: item {item} is out of range or appears twice"
                ));
            }
            seen[item / 64] |= 1 << (item % 64);
            for (d, &x) in point.iter().enumerate() {
                let ok = if d < dim {
                    x.is_finite() && x.abs() <= MAX_COORD
                } else {
                    x == 0.0
                };
                if !ok {
                    return Err(format!("leaf {leaf}: item {item} has coordinate {d} = {x}"));
                }
            }

            // The path from the root: level v splits on coordinate v mod K at stem
            // (leaves + leaf) >> (depth - v); bit depth - 1 - v of `leaf` says right.
            for v in 0..depth {
                let stem = (leaves + leaf) >> (depth - v);
                let right = (leaf >> (depth - 1 - v)) & 1 == 1;
                let pivot = stems[stem];
                let x = point[v as usize % K];
                let ok = if pivot == f32::INFINITY {
                    !right
                } else if right {
                    x >= pivot
                } else {
                    x <= pivot
                };
                if !ok {
                    return Err(format!(
                        "leaf {leaf}: item {item} lies on the wrong side of stem {stem}"
                    ));
                }
            }
            Ok(())
        })?;
    }
    let points: usize = extents.iter().map(|e| usize_of(&e.1)).sum();
    if points != n {
        return Err(format!("its leaves hold {points} points for {n} items"));
    }
    if longest != usize_of(&l.max_leaf_len) {
        return Err(format!(
            "it records {} points in its longest leaf, which has {longest}",
            usize_of(&l.max_leaf_len)
        ));
    }
    // Last, on a tree whose shape holds: each point is its item's row's first coordinates.
    if let Some(row_of) = rows {
        for (leaf, e) in extents.iter().enumerate() {
            let (offset, len) = (usize_of(&e.0), usize_of(&e.1));
            let end = offset + leaf_bytes_len(len, K).expect("checked above");
            for_each_point::<K>(&arena[offset..end], len, |item, point| {
                let row = row_of(item);
                let same = row.len() >= dim
                    && row[..dim]
                        .iter()
                        .zip(point.iter())
                        .all(|(&r, &x)| f32::from(r) == x);
                if same {
                    Ok(())
                } else {
                    Err(format!(
                        "leaf {leaf}: item {item}'s point is not the first {dim} coordinates of its row"
                    ))
                }
            })?;
        }
    }
    Ok(())
}

impl<'a> TreeView<'a> {
    /// Validates the archive (rkyv's bytecheck, then every field kiddo's queries trust; see
    /// the comment above `Layout`) for an index of `n` items whose tree holds `dim`
    /// coordinates and returns a view; with `rows` (a format version 2 tree), every point
    /// must also be the first `dim` bytes of its item's row.
    pub fn open(
        bytes: &'a [u8],
        dim: usize,
        n: usize,
        rows: Option<RowOf<'_>>,
    ) -> Result<TreeView<'a>, String> {
        let tree_dim = tree_dim(dim);
        match tree_dim {
            2 => check_k::<2>(bytes, dim, n, rows),
            4 => check_k::<4>(bytes, dim, n, rows),
            8 => check_k::<8>(bytes, dim, n, rows),
            16 => check_k::<16>(bytes, dim, n, rows),
            32 => check_k::<32>(bytes, dim, n, rows),
            _ => check_k::<64>(bytes, dim, n, rows),
        }?;
        Ok(TreeView {
            bytes,
            tree_dim,
            dim,
            size: n,
        })
    }

    /// A view of bytes that [`TreeView::open`] has already validated, without checking
    /// them again.
    ///
    /// # Safety
    ///
    /// [`TreeView::open`] must have returned `Ok` for these exact bytes (same address and
    /// length, unchanged since) with the same `dim` and `size`: the view's queries read the
    /// archive with kiddo's unchecked accesses, which only that check makes sound.
    pub(crate) unsafe fn validated(bytes: &'a [u8], dim: usize, size: usize) -> TreeView<'a> {
        TreeView {
            bytes,
            tree_dim: tree_dim(dim),
            dim,
            size,
        }
    }

    /// Number of points in the tree.
    pub fn size(&self) -> usize {
        self.size
    }

    /// The compiled dimension of the tree.
    pub fn tree_dim(&self) -> usize {
        self.tree_dim
    }

    /// The `count` nearest points to `query` (length `dim`) in `space`, as item indices
    /// with the embedded distance (squared for L2), nearest first.
    pub fn nearest(&self, query: &[f32], count: usize, space: Space, out: &mut Vec<(u32, f32)>) {
        self.nearest_within(query, count, None, space, out)
    }

    /// [`TreeView::nearest`], keeping only points at distance at most `radius` (squared for
    /// L2) when one is given: kiddo's same nearest-n search, bounded.
    pub fn nearest_within(
        &self,
        query: &[f32],
        count: usize,
        radius: Option<f32>,
        space: Space,
        out: &mut Vec<(u32, f32)>,
    ) {
        out.clear();
        let Some(count) = NonZeroUsize::new(count) else {
            return;
        };
        match self.tree_dim {
            2 => self.nearest_k::<2>(query, count, radius, space, out),
            4 => self.nearest_k::<4>(query, count, radius, space, out),
            8 => self.nearest_k::<8>(query, count, radius, space, out),
            16 => self.nearest_k::<16>(query, count, radius, space, out),
            32 => self.nearest_k::<32>(query, count, radius, space, out),
            _ => self.nearest_k::<64>(query, count, radius, space, out),
        }
    }

    fn nearest_k<const K: usize>(
        &self,
        query: &[f32],
        count: NonZeroUsize,
        radius: Option<f32>,
        space: Space,
        out: &mut Vec<(u32, f32)>,
    ) {
        // SAFETY: every TreeView is made by `open`, or by `validated`, whose contract is that
        // `open` succeeded before; `open` ran rkyv's validating `access` and `check_k` (every
        // field kiddo's queries trust) on these exact bytes with the same K; the bytes are
        // immutable for 'a.
        let t = unsafe { rkyv::access_unchecked::<Archived<K>>(self.bytes) };
        let mut q = [0f32; K];
        let d = self.dim.min(K).min(query.len());
        q[..d].copy_from_slice(&query[..d]);
        // A bounded nearest-n runs the same search as an unbounded one (kiddo's nearest_n is
        // nearest_n_within with the largest radius).
        let res = match (space, radius) {
            (Space::L1, None) => t.query(&q).nearest_n::<Manhattan<f32>>(count).execute(),
            (Space::L1, Some(r)) => t
                .query(&q)
                .nearest_n::<Manhattan<f32>>(count)
                .within::<Manhattan<f32>>(r)
                .execute(),
            (Space::L2, None) => t
                .query(&q)
                .nearest_n::<SquaredEuclidean<f32>>(count)
                .execute(),
            (Space::L2, Some(r)) => t
                .query(&q)
                .nearest_n::<SquaredEuclidean<f32>>(count)
                .within::<SquaredEuclidean<f32>>(r)
                .execute(),
            (Space::Linf, None) => t.query(&q).nearest_n::<Chebyshev<f32>>(count).execute(),
            (Space::Linf, Some(r)) => t
                .query(&q)
                .nearest_n::<Chebyshev<f32>>(count)
                .within::<Chebyshev<f32>>(r)
                .execute(),
        };
        out.extend(res.into_iter().map(|r| (r.item, r.distance)));
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use kiddo::kd_tree::{KdTreeAccessor, StemLeafResolution};
    use rand::{Rng, SeedableRng};

    /// The kiddo release whose private archived layout `Layout` copies (see the comment
    /// above it); a new release must be checked against the copy before the pin moves.
    const KIDDO_VERSION: &str = "6.3.0";

    /// A minor kiddo release may change its private layout, so the manifest allows exactly
    /// the release the copy was made from, and the lock file holds it.
    #[test]
    fn kiddo_is_pinned_to_the_release_whose_layout_is_copied() {
        let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
        let manifest = std::fs::read_to_string(root.join("Cargo.toml")).unwrap();
        let line = manifest
            .lines()
            .find(|l| l.starts_with("kiddo ") || l.starts_with("kiddo="))
            .expect("kiddo is a dependency");
        assert!(
            line.contains(&format!("version = \"={KIDDO_VERSION}\"")),
            "Cargo.toml must pin kiddo to ={KIDDO_VERSION}: {line}"
        );
        let lock = std::fs::read_to_string(root.join("Cargo.lock")).unwrap();
        assert!(
            lock.contains(&format!(
                "name = \"kiddo\"\nversion = \"{KIDDO_VERSION}\"\n"
            )),
            "Cargo.lock does not hold kiddo {KIDDO_VERSION}"
        );
    }

    fn addr<T: ?Sized>(r: &T) -> usize {
        (r as *const T).cast::<u8>() as usize
    }

    /// Reads a tree kiddo built through the copied layout and compares every field with what
    /// kiddo reports through rkyv's validated access: the fields it exposes lie at the same
    /// addresses, counts and stems are equal, and every leaf holds, in order, the items and
    /// points kiddo's own iterator yields — which are the points the tree was built from.
    fn layout_reads_what_kiddo_reads<const K: usize>(coords: &[f32], dim: usize, n: usize) {
        let bytes = build(coords, dim).expect("build");
        let mut aligned = rkyv::util::AlignedVec::<128>::new();
        aligned.extend_from_slice(&bytes);
        let t = rkyv::access::<Archived<K>, rkyv::rancor::BoxedError>(&aligned).expect("kiddo");
        let l = rkyv::access::<ArchivedLayout, rkyv::rancor::BoxedError>(&aligned).expect("copy");
        let what = format!("K = {K}, dim = {dim}, n = {n}");

        // Same places.
        assert_eq!(addr(t), addr(l), "{what}: root");
        assert_eq!(addr(t.leaves()), addr(&l.leaves), "{what}: leaves");
        assert_eq!(
            addr(t.stem_leaf_resolution()),
            addr(&l.resolution),
            "{what}: stem/leaf resolution"
        );
        let stems: &[f32] = KdTreeAccessor::stems(t);
        let our_stems: Vec<f32> = l.stems.get().iter().map(|s| s.to_native()).collect();
        assert_eq!(addr(stems), addr(l.stems.get()), "{what}: stems");

        // Same values.
        let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(stems), bits(&our_stems), "{what}: stems");
        assert_eq!(KdTreeAccessor::size(t), n, "{what}");
        assert_eq!(usize_of(&l.size), n, "{what}: size");
        let leaves_size =
            <_ as kiddo::LeafStrategy<f32, u32, kiddo::Eytzinger, K, BUCKET>>::size(t.leaves());
        assert_eq!(
            usize_of(&l.leaves.size),
            leaves_size,
            "{what}: leaves' size"
        );
        assert_eq!(
            l.max_stem_level.to_native(),
            KdTreeAccessor::max_stem_level(t),
            "{what}: deepest stem level"
        );
        assert_eq!(
            usize_of(&l.max_leaf_len),
            KdTreeAccessor::max_leaf_len(t),
            "{what}: longest leaf"
        );
        let extents = l.leaves.leaf_extents.as_slice();
        assert_eq!(
            extents.len(),
            KdTreeAccessor::leaf_count(t),
            "{what}: leaves"
        );
        for (i, e) in extents.iter().enumerate() {
            assert_eq!(usize_of(&e.1), t.leaves().leaf_len(i), "{what}: leaf {i}");
        }
        assert!(t.stem_leaf_resolution().uses_arithmetic(), "{what}");
        assert!(
            matches!(l.resolution, ArchivedResolutionLayout::Arithmetic { .. }),
            "{what}: resolution"
        );

        // Same leaves, point by point.
        let arena: &[u8] = l.leaves.leaf_bytes.get();
        let mut ours: Vec<(u32, Vec<u32>)> = Vec::with_capacity(n);
        for e in extents {
            let (offset, len) = (usize_of(&e.0), usize_of(&e.1));
            let end = offset + leaf_bytes_len(len, K).unwrap();
            for_each_point::<K>(&arena[offset..end], len, |item, p: &[f32; K]| {
                ours.push((item as u32, bits(p)));
                Ok(())
            })
            .unwrap();
        }
        let kiddo: Vec<(u32, Vec<u32>)> = t.iter().map(|(item, p)| (item, bits(&p))).collect();
        assert_eq!(ours, kiddo, "{what}: leaf contents");
        assert_eq!(ours.len(), n, "{what}");
        for (item, p) in &ours {
            let i = *item as usize;
            let mut want = coords[i * dim..(i + 1) * dim].to_vec();
            want.resize(K, 0.0);
            assert_eq!(*p, bits(&want), "{what}: item {i}");
        }
    }

    #[test]
    fn copied_layout_reads_what_kiddo_reads() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        for n in [1, 2, 31, 32, 33, 100, 1000, 4097] {
            for dim in [1, 2, 3, 4, 7, 8, 13, 16, 17, 32, 40, 64] {
                let coords: Vec<f32> = (0..n * dim)
                    .map(|_| rng.gen_range(-1000..1000) as f32 * 0.25)
                    .collect();
                match tree_dim(dim) {
                    2 => layout_reads_what_kiddo_reads::<2>(&coords, dim, n),
                    4 => layout_reads_what_kiddo_reads::<4>(&coords, dim, n),
                    8 => layout_reads_what_kiddo_reads::<8>(&coords, dim, n),
                    16 => layout_reads_what_kiddo_reads::<16>(&coords, dim, n),
                    32 => layout_reads_what_kiddo_reads::<32>(&coords, dim, n),
                    _ => layout_reads_what_kiddo_reads::<64>(&coords, dim, n),
                }
            }
        }
    }

    /// A tree over the rows' first coordinates passes the check against those rows, and is
    /// refused against rows that differ in one byte of the prefix (not past it).
    #[test]
    fn a_tree_is_checked_against_the_rows_it_was_built_from() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let (n, stride) = (300, 16);
        let mut rows: Vec<u8> = (0..n * stride).map(|_| rng.gen_range(0..=255)).collect();
        let dim = prefix_dims(12);
        let pre: Vec<f32> = rows
            .chunks_exact(stride)
            .flat_map(|r| r[..dim].iter().map(|&b| f32::from(b)))
            .collect();
        let bytes = build(&pre, dim).expect("build");
        let mut aligned = rkyv::util::AlignedVec::<128>::new();
        aligned.extend_from_slice(&bytes);
        let check = |rows: &[u8]| {
            let row = |i: usize| &rows[i * stride..(i + 1) * stride];
            TreeView::open(&aligned, dim, n, Some(&row)).map(|_| ())
        };
        check(&rows).expect("the rows it was built from");
        rows[7 * stride + dim] ^= 1;
        check(&rows).expect("a byte past the prefix is not in the tree");
        rows[7 * stride + 3] ^= 1;
        let e = check(&rows).unwrap_err();
        assert!(
            e.contains("item 7's point is not the first 8 coordinates of its row"),
            "{e}"
        );
    }

    /// Trees kiddo builds pass the check, whatever n, dimension and duplicates.
    #[test]
    fn every_tree_kiddo_builds_passes_the_check() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let sizes = (1..=70).chain([95, 96, 97, 128, 129, 1000, 1023, 1025, 4097]);
        for n in sizes {
            for dim in [1, 2, 3, 5, 8, 13, 16, 31, 40, 64] {
                // Few distinct values, so that many points tie on their pivots.
                let distinct = rng.gen_range(1..=8);
                let coords: Vec<f32> = (0..n * dim)
                    .map(|_| rng.gen_range(0..distinct) as f32 * 1.5)
                    .collect();
                let bytes = build(&coords, dim).expect("build");
                let mut aligned = rkyv::util::AlignedVec::<128>::new();
                aligned.extend_from_slice(&bytes);
                let view = TreeView::open(&aligned, dim, n, None)
                    .unwrap_or_else(|e| panic!("n = {n}, dim = {dim}: {e}"));
                let mut out = Vec::new();
                view.nearest(&coords[..dim], n.min(5), Space::L2, &mut out);
                assert_eq!(out.len(), n.min(5));
                assert_eq!(out[0].1, 0.0, "the first point is its own nearest");
                assert!(TreeView::open(&aligned, dim, n + 1, None).is_err());
            }
        }
    }
}
