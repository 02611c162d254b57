//! The kd-tree over the f32 landmark coordinates, stored as a zero-copy kiddo archive.
//!
//! kiddo's dimension is a compile-time constant, so the tree is built for the smallest size
//! in [`TREE_DIMS`] that holds the embedding and the extra coordinates are zero, which
//! changes no L1, L2 or L∞ distance.

use std::num::NonZeroUsize;

use kiddo::{Chebyshev, ImmutableKdTree, Manhattan, SquaredEuclidean};
use rkyv::rancor::Error as RkyvError;

use crate::search::Space;

/// The dimensions a tree can be compiled for.
pub const TREE_DIMS: [usize; 6] = [2, 4, 8, 16, 32, 64];

/// The tree dimension used for an embedding of dimension `dim`.
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

fn check_k<const K: usize>(bytes: &[u8]) -> Result<usize, String> {
    let t =
        rkyv::access::<Archived<K>, rkyv::rancor::BoxedError>(bytes).map_err(|e| e.to_string())?;
    Ok(t.size())
}

impl<'a> TreeView<'a> {
    /// Validates the archive's structure (rkyv's bytecheck) and returns a view.
    pub fn open(bytes: &'a [u8], dim: usize) -> Result<TreeView<'a>, String> {
        let tree_dim = tree_dim(dim);
        let size = match tree_dim {
            2 => check_k::<2>(bytes),
            4 => check_k::<4>(bytes),
            8 => check_k::<8>(bytes),
            16 => check_k::<16>(bytes),
            32 => check_k::<32>(bytes),
            _ => check_k::<64>(bytes),
        }?;
        Ok(TreeView {
            bytes,
            tree_dim,
            dim,
            size,
        })
    }

    /// A view of bytes that [`TreeView::open`] has already validated.
    pub(crate) fn validated(bytes: &'a [u8], dim: usize, size: usize) -> TreeView<'a> {
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
        out.clear();
        let Some(count) = NonZeroUsize::new(count) else {
            return;
        };
        match self.tree_dim {
            2 => self.nearest_k::<2>(query, count, space, out),
            4 => self.nearest_k::<4>(query, count, space, out),
            8 => self.nearest_k::<8>(query, count, space, out),
            16 => self.nearest_k::<16>(query, count, space, out),
            32 => self.nearest_k::<32>(query, count, space, out),
            _ => self.nearest_k::<64>(query, count, space, out),
        }
    }

    fn nearest_k<const K: usize>(
        &self,
        query: &[f32],
        count: NonZeroUsize,
        space: Space,
        out: &mut Vec<(u32, f32)>,
    ) {
        // SAFETY: every TreeView is made by `open`, or by `validated` after `open` succeeded,
        // which ran rkyv's validating `access` on these exact bytes with the same K; the
        // bytes are immutable for the lifetime 'a.
        let t = unsafe { rkyv::access_unchecked::<Archived<K>>(self.bytes) };
        let mut q = [0f32; K];
        let d = self.dim.min(K).min(query.len());
        q[..d].copy_from_slice(&query[..d]);
        let res = match space {
            Space::L1 => t.query(&q).nearest_n::<Manhattan<f32>>(count).execute(),
            Space::L2 => t
                .query(&q)
                .nearest_n::<SquaredEuclidean<f32>>(count)
                .execute(),
            Space::Linf => t.query(&q).nearest_n::<Chebyshev<f32>>(count).execute(),
        };
        out.extend(res.into_iter().map(|r| (r.item, r.distance)));
    }
}
