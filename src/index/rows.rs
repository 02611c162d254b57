//! The stored coordinate rows of an index, in the order the file keeps them.
//!
//! A format version 2 file keeps each item's u8 row once, in the cells section, in cell
//! order (a cell's rows together, so that the cells' visit reads memory in runs), with two
//! tables: the members (position → item) and the positions (item → position). A version 1
//! file keeps them in item order in the coordinates section (and again in its cells).
//! [`Rows`] reads either: the whole table in storage order for a pass over every row, one
//! item's row, or the table in item order.

use std::borrow::Cow;

#[inline]
fn u32_at(b: &[u8], i: usize) -> Option<u32> {
    b.get(i * 4..i * 4 + 4)
        .map(|x| u32::from_le_bytes(x.try_into().expect("4 bytes")))
}

/// The coordinate rows of an index (see the module comment). Every access is
/// bounds-checked: a damaged table gives wrong rows, never a crash.
#[derive(Clone, Copy, Debug)]
pub struct Rows<'a> {
    data: &'a [u8],
    stride: usize,
    /// `(members, positions)` of rows kept in cell order; `None` for item order.
    order: Option<(&'a [u8], &'a [u8])>,
}

impl<'a> Rows<'a> {
    /// Rows in item order (format version 1).
    pub(crate) fn in_item_order(data: &'a [u8], stride: usize) -> Rows<'a> {
        Rows {
            data,
            stride,
            order: None,
        }
    }

    /// Rows kept in the order of `members` (position → item), with `positions` its inverse.
    pub(crate) fn permuted(
        data: &'a [u8],
        stride: usize,
        members: &'a [u8],
        positions: &'a [u8],
    ) -> Rows<'a> {
        Rows {
            data,
            stride,
            order: Some((members, positions)),
        }
    }

    /// Bytes per row.
    pub fn stride(&self) -> usize {
        self.stride
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.data.len() / self.stride.max(1)
    }

    /// Whether there are no rows.
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }

    /// Every row in storage order, `len() × stride` bytes: row `p` belongs to item
    /// [`Rows::item_at`]`(p)`.
    pub fn stored(&self) -> &'a [u8] {
        self.data
    }

    /// Whether storage order is item order (then [`Rows::item_at`] is the identity).
    pub fn in_order(&self) -> bool {
        self.order.is_none()
    }

    /// The item whose row is stored at position `pos`.
    #[inline]
    pub fn item_at(&self, pos: u32) -> u32 {
        match self.order {
            None => pos,
            Some((members, _)) => u32_at(members, pos as usize).unwrap_or(0),
        }
    }

    /// The position of item `i`'s row.
    #[inline]
    pub fn position(&self, i: usize) -> usize {
        match self.order {
            None => i,
            Some((_, positions)) => u32_at(positions, i).map_or(usize::MAX, |p| p as usize),
        }
    }

    /// Item `i`'s row (`stride` bytes; empty when the file is damaged).
    #[inline]
    pub fn row(&self, i: usize) -> &'a [u8] {
        let p = self.position(i);
        p.checked_mul(self.stride)
            .and_then(|at| self.data.get(at..at.checked_add(self.stride)?))
            .unwrap_or(&[])
    }

    /// Asks the CPU to fetch what [`Rows::row`] reads first for item `i`: its entry of the
    /// positions table (rows in item order: the row itself).
    #[inline]
    pub fn prefetch_position(&self, i: usize) {
        match self.order {
            None => self.prefetch_row(i),
            Some((_, positions)) => {
                if let Some(b) = positions.get(i * 4..) {
                    crate::cpu::prefetch(b.as_ptr());
                }
            }
        }
    }

    /// Asks the CPU to fetch item `i`'s row.
    #[inline]
    pub fn prefetch_row(&self, i: usize) {
        let at = self.position(i).saturating_mul(self.stride);
        if let Some(b) = self.data.get(at..) {
            crate::cpu::prefetch(b.as_ptr());
        }
    }

    /// Every row in item order: borrowed when stored so, else gathered into a new table
    /// (`len() × stride` bytes).
    pub fn in_item_order_table(&self) -> Cow<'a, [u8]> {
        if self.order.is_none() {
            return Cow::Borrowed(self.data);
        }
        let n = self.len();
        let mut out = vec![0u8; n * self.stride];
        for (i, dst) in out.chunks_exact_mut(self.stride.max(1)).enumerate() {
            let r = self.row(i);
            if r.len() == dst.len() {
                dst.copy_from_slice(r);
            }
        }
        Cow::Owned(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn permuted_rows_read_as_the_rows_in_item_order() {
        // Items 0, 1, 2 with rows [0;8], [1;8], [2;8], stored in the order 2, 0, 1.
        let stored: Vec<u8> = [2u8, 0, 1].iter().flat_map(|&v| [v; 8]).collect();
        let members: Vec<u8> = [2u32, 0, 1].iter().flat_map(|m| m.to_le_bytes()).collect();
        let positions: Vec<u8> = [1u32, 2, 0].iter().flat_map(|p| p.to_le_bytes()).collect();
        let rows = Rows::permuted(&stored, 8, &members, &positions);
        for i in 0..3 {
            assert_eq!(rows.row(i), &[i as u8; 8]);
            assert_eq!(rows.item_at(rows.position(i) as u32), i as u32);
        }
        let want: Vec<u8> = (0..3u8).flat_map(|v| [v; 8]).collect();
        assert_eq!(&*rows.in_item_order_table(), &want[..]);
        let plain = Rows::in_item_order(&want, 8);
        assert!(matches!(plain.in_item_order_table(), Cow::Borrowed(_)));
        assert_eq!(plain.row(2), &[2u8; 8]);
        assert_eq!(plain.row(3), &[] as &[u8], "past the last row");
    }
}
