//! Landmark coordinates as stored: u8 rows, and the one set of L1 / L2 / L∞ kernels over them.
//!
//! Every item's coordinates are quantised to bytes ([`crate::embed::quantize`]) and stored
//! row by row, [`coord_stride`] bytes per row. Everything that compares rows lives here:
//!
//! - [`Space`] and the row kernels [`score`] (one row against another) and, for f64
//!   coordinates before quantisation, [`Space::distance`];
//! - [`scan`]: every row scored against a query's in one SIMD pass, with the score histogram;
//! - [`select`]: the `C` best scores read off that histogram ([`select::select_best`]);
//! - [`columns`]: the exact path's column blocks (the L∞ bound of every item against a
//!   threshold, with char counts for Levenshtein).
//!
//! Scores are integers: L1 = Σ|a−b|, L2 = Σ(a−b)² (squared: no root, no float) and
//! L∞ = max|a−b|.
//!
//! ```
//! use waymark::coords::{score, Space};
//!
//! let (a, b) = ([3u8, 0, 7, 1, 0, 0, 0, 0], [1u8, 0, 4, 1, 0, 0, 0, 0]);
//! assert_eq!(score(&a, &b, Space::L1), 5);
//! assert_eq!(score(&a, &b, Space::L2), 13);
//! assert_eq!(score(&a, &b, Space::Linf), 3);
//! ```

pub mod columns;
pub mod scan;
pub mod select;

use serde::{Deserialize, Serialize};

/// The space in which candidates are ranked by their landmark coordinates.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Space {
    /// Sum of coordinate differences (the default of indexes built before L2 was).
    L1,
    /// Euclidean distance of the coordinates (the default: more true neighbours among the
    /// same number of candidates than L1, `benches/families.rs`).
    #[default]
    L2,
    /// Largest coordinate difference (also the lower bound of the true distance).
    Linf,
}

impl Space {
    /// The name used on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Space::L1 => "l1",
            Space::L2 => "l2",
            Space::Linf => "linf",
        }
    }

    /// The distance of two f64 coordinate vectors in this space (L2 as a true Euclidean
    /// distance, not squared): the embedded distance before quantisation.
    ///
    /// ```
    /// use waymark::coords::Space;
    ///
    /// assert_eq!(Space::L2.distance(&[0.0, 3.0], &[4.0, 0.0]), 5.0);
    /// assert_eq!(Space::Linf.distance(&[0.0, 3.0], &[4.0, 0.0]), 4.0);
    /// ```
    pub fn distance(self, a: &[f64], b: &[f64]) -> f64 {
        let diffs = a.iter().zip(b).map(|(x, y)| (x - y).abs());
        match self {
            Space::L1 => diffs.sum(),
            Space::L2 => diffs.map(|d| d * d).sum::<f64>().sqrt(),
            Space::Linf => diffs.fold(0.0, f64::max),
        }
    }
}

/// The strides (bytes per coordinate row) an index stores: the dimension rounded up to one
/// of these, so that a row is one or two SIMD loads.
pub const STRIDES: [usize; 4] = [8, 16, 32, 64];

/// Bytes per item of the u8 coordinate rows for an embedding of dimension `dim` (1 to 64).
pub fn coord_stride(dim: usize) -> usize {
    STRIDES.into_iter().find(|&s| s >= dim).unwrap_or(64)
}

/// L1 score of two rows of `S` bytes (written so that the compiler uses `psadbw`).
#[inline(always)]
pub(crate) fn l1<const S: usize>(a: &[u8; S], b: &[u8; S]) -> u32 {
    let mut s = 0u32;
    for i in 0..S {
        s += u32::from(a[i].abs_diff(b[i]));
    }
    s
}

/// Squared L2 score of two rows of `S` bytes.
#[inline(always)]
pub(crate) fn l2<const S: usize>(a: &[u8; S], b: &[u8; S]) -> u32 {
    let mut s = 0u32;
    for i in 0..S {
        let d = u32::from(a[i].abs_diff(b[i]));
        s += d * d;
    }
    s
}

/// L∞ score of two rows of `S` bytes.
#[inline(always)]
pub(crate) fn linf<const S: usize>(a: &[u8; S], b: &[u8; S]) -> u32 {
    let mut m = 0u8;
    for i in 0..S {
        m = m.max(a[i].abs_diff(b[i]));
    }
    u32::from(m)
}

/// The score of two rows of `S` bytes in `space`.
#[inline(always)]
pub(crate) fn score_fixed<const S: usize>(a: &[u8; S], b: &[u8; S], space: Space) -> u32 {
    match space {
        Space::L1 => l1(a, b),
        Space::L2 => l2(a, b),
        Space::Linf => linf(a, b),
    }
}

/// The score of two coordinate rows in `space`: L1, squared L2 or L∞ of their bytes.
///
/// Rows of a stored length ([`STRIDES`]) take a fixed-size kernel; rows of another length
/// are compared over their common length. The scan ([`scan::score_rows`]) gives the same
/// scores for many rows at once.
#[inline]
pub fn score(a: &[u8], b: &[u8], space: Space) -> u32 {
    #[inline(always)]
    fn fixed<const S: usize>(a: &[u8], b: &[u8], space: Space) -> Option<u32> {
        let a = <&[u8; S]>::try_from(a.get(..S)?).ok()?;
        let b = <&[u8; S]>::try_from(b.get(..S)?).ok()?;
        Some(score_fixed(a, b, space))
    }
    let n = a.len().min(b.len());
    let fast = match n {
        8 => fixed::<8>(a, b, space),
        16 => fixed::<16>(a, b, space),
        32 => fixed::<32>(a, b, space),
        64 => fixed::<64>(a, b, space),
        _ => None,
    };
    fast.unwrap_or_else(|| {
        let d = a.iter().zip(b).map(|(&x, &y)| u32::from(x.abs_diff(y)));
        match space {
            Space::L1 => d.sum(),
            Space::L2 => d.map(|x| x * x).sum(),
            Space::Linf => d.max().unwrap_or(0),
        }
    })
}

/// The index of the row of `rows` (`S` bytes each) nearest `row` in L1, the first on ties.
#[inline]
pub(crate) fn nearest_l1(row: &[u8], rows: &[u8], stride: usize) -> u32 {
    #[inline(always)]
    fn go<const S: usize>(row: &[u8], rows: &[u8]) -> u32 {
        let Ok(row) = <&[u8; S]>::try_from(row) else {
            return 0;
        };
        let mut best = (u32::MAX, 0u32);
        for (c, other) in rows.chunks_exact(S).enumerate() {
            let d = l1::<S>(row, other.try_into().expect("S bytes"));
            if d < best.0 {
                best = (d, c as u32);
            }
        }
        best.1
    }
    match stride {
        8 => go::<8>(row, rows),
        16 => go::<16>(row, rows),
        32 => go::<32>(row, rows),
        _ => go::<64>(row, rows),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn score_matches_the_definitions_at_every_length() {
        for n in [1usize, 5, 8, 16, 20, 32, 64] {
            let a: Vec<u8> = (0..n).map(|i| (i * 37 % 251) as u8).collect();
            let b: Vec<u8> = (0..n).map(|i| (i * 91 % 253) as u8).collect();
            let d: Vec<i64> = a
                .iter()
                .zip(&b)
                .map(|(&x, &y)| (i64::from(x) - i64::from(y)).abs())
                .collect();
            assert_eq!(i64::from(score(&a, &b, Space::L1)), d.iter().sum::<i64>());
            let l2: i64 = d.iter().map(|x| x * x).sum();
            assert_eq!(i64::from(score(&a, &b, Space::L2)), l2);
            assert_eq!(
                i64::from(score(&a, &b, Space::Linf)),
                d.iter().copied().max().unwrap_or(0)
            );
        }
    }

    #[test]
    fn nearest_l1_takes_the_first_of_equals() {
        let rows = [[5u8; 8], [1; 8], [1; 8]].concat();
        assert_eq!(nearest_l1(&[0; 8], &rows, 8), 1);
        assert_eq!(nearest_l1(&[9; 8], &rows, 8), 0);
    }

    #[test]
    fn strides_round_the_dimension_up() {
        assert_eq!(coord_stride(1), 8);
        assert_eq!(coord_stride(9), 16);
        assert_eq!(coord_stride(64), 64);
    }
}
