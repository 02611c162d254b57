//! Many Levenshtein queries against the same items, one query per vector lane.
//!
//! [`LevenshteinQuery::dist_batch`] puts items in the lanes: every batch first looks up the
//! match mask of each item char, lane by lane, before the vector work can start. With many
//! queries (a brute-force ground truth, an all-pairs scan) the roles can be swapped: the
//! queries go in the lanes, grouped by length class, and each item is read once per group.
//! For every item char the group's table holds one row `eq[char][lane]` (the char's match
//! mask in each lane's query), so a char costs one row load and one Myers step (Hyyrö's
//! global form, as in [`LevenshteinQuery`]) for all lanes at once; no per-item table is
//! filled. Each lane tracks its own last row (`D[m][j]`, from the horizontal deltas at its
//! query's top bit), so every lane's distance is known when the item ends.
//!
//! Lane widths follow the query's length: 8-bit lanes for queries of 1 ..= 8 chars, 16-bit up
//! to 16, 32-bit up to 32, 64-bit up to 64 (rows at and above a query's length never reach
//! its rows, since carries and shifts only move bits upwards). A group holds 64 bytes of
//! lanes (64 queries of up to 8 chars, ..., 8 of up to 64) at [`Level::Avx512`], and 32 bytes
//! (half as many) at [`Level::Avx2`] and [`Level::Portable`]. The step is written once over
//! arrays of lanes and compiled per level with the CPU features enabled, so the compiler
//! emits one vector instruction per operation (two halves on AVX2, four on plain SSE2).
//!
//! Rows: one per ASCII char, one per distinct non-ASCII char of the group's queries, and a
//! zero row for every other char. ASCII item bytes index the table directly; other chars are
//! decoded (lossily, each invalid sequence one U+FFFD, as everywhere in this metric) and
//! found by binary search, so accented words stay on the vector path.
//!
//! Each lane has a bound (a running k-th best distance, say): after every item the lanes
//! are compared with their bounds at once, and only an item that some lane admits
//! (distance at most its bound) is looked at lane by lane, through a callback that returns
//! the lane's new bound. Items longer than [`LONG_ITEM`] bytes (rare in word lists) are
//! measured lane by lane with the one-query kernels, so 8-bit lanes never overflow.
//!
//! Queries outside 1 ..= 64 chars are not put in lanes ([`LevenshteinLanes::rest`]).
//!
//! ```
//! use waymark::metric::LevenshteinLanes;
//!
//! let queries: [&[u8]; 3] = [b"ferry", b"quay", b"harbour master"];
//! let lanes = LevenshteinLanes::new(&queries);
//! let items: [&[u8]; 3] = [b"fairy", b"key", b"harbourmaster"];
//! let mut got = vec![Vec::new(); 3];
//! for g in 0..lanes.groups() {
//!     let members = lanes.members(g);
//!     let mut bounds = vec![u32::MAX; members.len()];
//!     lanes.scan_group(g, items.iter().enumerate().map(|(i, x)| (i as u32, *x)), &mut bounds,
//!         |lane, item, d| {
//!             got[members[lane]].push((item, d));
//!             u32::MAX
//!         });
//! }
//! // The plain dynamic program by hand: ferry → fairy 2, ferry → key 3, quay → key 3, ...
//! assert_eq!(got[0], [(0, 2), (1, 3), (2, 11)]);
//! assert_eq!(got[1], [(0, 4), (1, 3), (2, 11)]);
//! assert_eq!(got[2], [(0, 12), (1, 13), (2, 1)]);
//! ```

use std::ops::{BitAnd, BitOr, BitXor, Not};

use super::LevenshteinQuery;
use crate::cpu::Level;

/// Longest item, in bytes, that the lanes measure; longer items go lane by lane through the
/// one-query kernels. Below 255, so a distance (at most the longer length) fits 8-bit lanes.
pub const LONG_ITEM: usize = 254;

/// Queries prepared to run many at once, one per vector lane, in groups of one lane width.
#[derive(Clone, Debug)]
pub struct LevenshteinLanes {
    groups: Vec<Group>,
    rest: Vec<usize>,
}

/// Lane width of a group, in bits.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Width {
    W8,
    W16,
    W32,
    W64,
}

impl Width {
    fn of(len: usize) -> Option<Width> {
        match len {
            1..=8 => Some(Width::W8),
            9..=16 => Some(Width::W16),
            17..=32 => Some(Width::W32),
            33..=64 => Some(Width::W64),
            _ => None,
        }
    }

    fn bytes(self) -> usize {
        match self {
            Width::W8 => 1,
            Width::W16 => 2,
            Width::W32 => 4,
            Width::W64 => 8,
        }
    }
}

/// One group: up to `lanes` queries of one width class.
#[derive(Clone, Debug)]
struct Group {
    width: Width,
    level: Level,
    /// Number of lanes of the group's register image (queries may fill fewer).
    lanes: usize,
    /// Positions of the group's queries in the caller's list, lane order.
    members: Vec<usize>,
    /// Lengths of the queries in chars, lane order.
    lens: Vec<usize>,
    /// Distinct non-ASCII chars of the group's queries, sorted.
    others: Vec<char>,
    /// Masks `[row][lane]`, `lanes` per row: 128 ASCII rows, one per `others`, one zero row.
    masks: Vec<u64>,
    /// The queries prepared one by one, for items longer than [`LONG_ITEM`].
    one: Vec<LevenshteinQuery>,
}

impl LevenshteinLanes {
    /// Groups `queries` (UTF-8, invalid sequences read as U+FFFD) for the kernels of
    /// [`Level::active`].
    pub fn new(queries: &[&[u8]]) -> Self {
        Self::with_level(queries, Level::active())
    }

    /// Groups `queries` for the kernels of `level` at most (lowered to what this CPU runs),
    /// whatever `WAYMARK_SIMD` says. Every level gives the same distances.
    pub fn with_level(queries: &[&[u8]], level: Level) -> Self {
        let level = level.clamped();
        let register = if level >= Level::Avx512 { 64 } else { 32 };
        let mut rest = Vec::new();
        let mut by_width: [Vec<usize>; 4] = Default::default();
        let mut chars: Vec<Vec<char>> = Vec::with_capacity(queries.len());
        for (i, q) in queries.iter().enumerate() {
            let cs: Vec<char> = super::levenshtein::lossy_chars(q).collect();
            match Width::of(cs.len()) {
                Some(w) => by_width[w as usize].push(i),
                None => rest.push(i),
            }
            chars.push(cs);
        }
        let mut groups = Vec::new();
        for (w, members) in [Width::W8, Width::W16, Width::W32, Width::W64]
            .into_iter()
            .zip(&by_width)
        {
            let lanes = register / w.bytes();
            for members in members.chunks(lanes) {
                let mut others: Vec<char> = members
                    .iter()
                    .flat_map(|&i| chars[i].iter().copied().filter(|c| !c.is_ascii()))
                    .collect();
                others.sort_unstable();
                others.dedup();
                let mut masks = vec![0u64; (128 + others.len() + 1) * lanes];
                for (lane, &i) in members.iter().enumerate() {
                    for (row, &c) in chars[i].iter().enumerate() {
                        let r = if c.is_ascii() {
                            c as usize
                        } else {
                            128 + others.binary_search(&c).unwrap_or(others.len())
                        };
                        masks[r * lanes + lane] |= 1u64 << row;
                    }
                }
                groups.push(Group {
                    width: w,
                    level,
                    lanes,
                    members: members.to_vec(),
                    lens: members.iter().map(|&i| chars[i].len()).collect(),
                    others,
                    masks,
                    one: members
                        .iter()
                        .map(|&i| LevenshteinQuery::with_level(queries[i], level))
                        .collect(),
                });
            }
        }
        LevenshteinLanes { groups, rest }
    }

    /// Number of groups.
    pub fn groups(&self) -> usize {
        self.groups.len()
    }

    /// Positions (in the list given to [`LevenshteinLanes::new`]) of group `g`'s queries, in
    /// lane order.
    ///
    /// # Panics
    ///
    /// If `g` is not below [`LevenshteinLanes::groups`].
    pub fn members(&self, g: usize) -> &[usize] {
        &self.groups[g].members
    }

    /// Positions of the queries not in any group: the empty query and queries of more than
    /// 64 chars, which the one-query kernels measure.
    pub fn rest(&self) -> &[usize] {
        &self.rest
    }

    /// Streams `items` (`(number, bytes)`) through group `g`'s lanes.
    ///
    /// `bounds` has one entry per member (`u32::MAX` admits every distance). For every item
    /// and lane whose distance is at most the lane's bound, calls `visit(lane, number,
    /// distance)`, which returns the lane's new bound; the callback sees the items in order.
    ///
    /// # Panics
    ///
    /// If `g` is not below [`LevenshteinLanes::groups`] or `bounds` is shorter than the
    /// group's member list.
    pub fn scan_group<'a, I>(
        &self,
        g: usize,
        items: I,
        bounds: &mut [u32],
        visit: impl FnMut(usize, u32, u32) -> u32,
    ) where
        I: IntoIterator<Item = (u32, &'a [u8])>,
    {
        let group = &self.groups[g];
        let bounds = &mut bounds[..group.members.len()];
        let items = items.into_iter();
        macro_rules! go {
            ($t:ty, $l:literal, $f:ident) => {
                $f::<$t, $l, _, _>(group, items, bounds, visit)
            };
        }
        #[cfg(target_arch = "x86_64")]
        {
            // SAFETY (both arms): the group was built for `level` clamped to what this CPU
            // reports (`Level::clamped`), so the features each function enables are present.
            match (group.level, group.width) {
                (Level::Avx512, Width::W8) => return unsafe { go!(u8, 64, run_avx512) },
                (Level::Avx512, Width::W16) => return unsafe { go!(u16, 32, run_avx512) },
                (Level::Avx512, Width::W32) => return unsafe { go!(u32, 16, run_avx512) },
                (Level::Avx512, Width::W64) => return unsafe { go!(u64, 8, run_avx512) },
                (Level::Avx2, Width::W8) => return unsafe { go!(u8, 32, run_avx2) },
                (Level::Avx2, Width::W16) => return unsafe { go!(u16, 16, run_avx2) },
                (Level::Avx2, Width::W32) => return unsafe { go!(u32, 8, run_avx2) },
                (Level::Avx2, Width::W64) => return unsafe { go!(u64, 4, run_avx2) },
                (Level::Portable, _) => {}
            }
        }
        match group.width {
            Width::W8 => go!(u8, 32, run),
            Width::W16 => go!(u16, 16, run),
            Width::W32 => go!(u32, 8, run),
            Width::W64 => go!(u64, 4, run),
        }
    }
}

/// An unsigned lane of 8 to 64 bits.
trait Lane:
    Copy
    + Eq
    + Ord
    + Default
    + BitAnd<Output = Self>
    + BitOr<Output = Self>
    + BitXor<Output = Self>
    + Not<Output = Self>
{
    const MAX: Self;
    fn wadd(self, o: Self) -> Self;
    fn wsub(self, o: Self) -> Self;
    /// The low bits of a mask (the query fits them).
    fn low(x: u64) -> Self;
    fn from_bool(b: bool) -> Self;
    fn to_u32(self) -> u32;
    /// `x`, or `MAX` when it does not fit below `MAX`.
    fn clamp_u32(x: u32) -> Self;
}

macro_rules! lane {
    ($($t:ty),*) => {$(
        impl Lane for $t {
            const MAX: Self = <$t>::MAX;
            #[inline(always)]
            fn wadd(self, o: Self) -> Self { self.wrapping_add(o) }
            #[inline(always)]
            fn wsub(self, o: Self) -> Self { self.wrapping_sub(o) }
            #[inline(always)]
            fn low(x: u64) -> Self { x as $t }
            #[inline(always)]
            fn from_bool(b: bool) -> Self { <$t>::from(b) }
            #[inline(always)]
            fn to_u32(self) -> u32 { u32::try_from(self).unwrap_or(u32::MAX) }
            #[inline(always)]
            fn clamp_u32(x: u32) -> Self {
                <$t>::try_from(x).ok().filter(|&v| v < <$t>::MAX).unwrap_or(<$t>::MAX)
            }
        }
    )*};
}
lane!(u8, u16, u32, u64);

/// [`run`] compiled for AVX-512 (F, BW, VL) with AVX2, popcnt and bmi1.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,popcnt,bmi1,avx512f,avx512bw,avx512vl")]
fn run_avx512<'a, T: Lane, const L: usize, I, F>(g: &Group, items: I, bounds: &mut [u32], visit: F)
where
    I: Iterator<Item = (u32, &'a [u8])>,
    F: FnMut(usize, u32, u32) -> u32,
{
    run::<T, L, I, F>(g, items, bounds, visit)
}

/// [`run`] compiled for AVX2 with popcnt and bmi1.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,popcnt,bmi1")]
fn run_avx2<'a, T: Lane, const L: usize, I, F>(g: &Group, items: I, bounds: &mut [u32], visit: F)
where
    I: Iterator<Item = (u32, &'a [u8])>,
    F: FnMut(usize, u32, u32) -> u32,
{
    run::<T, L, I, F>(g, items, bounds, visit)
}

/// The scan of one group in lanes of `T`, `L` of them (`L` is the group's lane count).
#[inline(always)]
fn run<'a, T: Lane, const L: usize, I, F>(g: &Group, items: I, bounds: &mut [u32], mut visit: F)
where
    I: Iterator<Item = (u32, &'a [u8])>,
    F: FnMut(usize, u32, u32) -> u32,
{
    debug_assert_eq!(g.lanes, L);
    let used = g.members.len();
    let table: Vec<[T; L]> = g
        .masks
        .chunks_exact(L)
        .map(|row| std::array::from_fn(|l| T::low(row[l])))
        .collect();
    let (ascii, other_rows) = table.split_at(128);
    let ascii: &[[T; L]; 128] = ascii.try_into().expect("128 ASCII rows");
    // Each lane's last row, and D[m][0] = m; unused lanes have no rows and a start above
    // every bound (their bound is 0), so they never admit an item.
    let last: [T; L] = std::array::from_fn(|l| match g.lens.get(l) {
        Some(&m) => T::low(1u64 << (m - 1)),
        None => T::default(),
    });
    let start: [T; L] = std::array::from_fn(|l| match g.lens.get(l) {
        Some(&m) => T::low(m as u64),
        None => T::MAX,
    });
    let mut bound: [T; L] = std::array::from_fn(|l| match bounds.get(l) {
        Some(&b) if l < used => T::clamp_u32(b),
        _ => T::default(),
    });
    let one = T::from_bool(true);
    for (number, item) in items {
        if item.len() > LONG_ITEM {
            for lane in 0..used {
                let d = g.one[lane].dist(item);
                if d <= bounds[lane] {
                    bounds[lane] = visit(lane, number, d);
                    bound[lane] = T::clamp_u32(bounds[lane]);
                }
            }
            continue;
        }
        let mut pv = [!T::default(); L];
        let mut mv = [T::default(); L];
        let mut score = start;
        let mut i = 0;
        while let Some(&b) = item.get(i) {
            let eq: &[T; L] = if b < 0x80 {
                i += 1;
                &ascii[usize::from(b)]
            } else {
                let (c, size) = bstr::decode_utf8(&item[i..]);
                i += size.max(1);
                let c = c.unwrap_or(char::REPLACEMENT_CHARACTER);
                let r = g.others.binary_search(&c).unwrap_or(g.others.len());
                &other_rows[r]
            };
            for l in 0..L {
                // The scalar `step` of the one-query kernel, lane-wise, and the last row.
                let (p, m, e) = (pv[l], mv[l], eq[l]);
                let d0 = ((e & p).wadd(p) ^ p) | e | m;
                let hn = p & d0;
                let not_hp = (d0 | p) & !m;
                let not_x = not_hp.wadd(not_hp);
                pv[l] = hn.wadd(hn) | (not_x & !d0);
                mv[l] = !not_x & d0;
                let up = T::from_bool((!not_hp & last[l]) != T::default());
                let down = T::from_bool((hn & last[l]) != T::default());
                score[l] = score[l].wadd(up).wsub(down);
            }
        }
        let mut any = T::default();
        for l in 0..L {
            any = any | T::from_bool(score[l] <= bound[l]);
        }
        if any == one {
            for lane in 0..used {
                if score[lane] <= bound[lane] {
                    bounds[lane] = visit(lane, number, score[lane].to_u32());
                    bound[lane] = T::clamp_u32(bounds[lane]);
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Query lengths at every lane boundary: 8/9 (8-bit lanes), 16/17, 32/33, 64/65 (past
    /// the lanes), and the empty query.
    const EDGES: [usize; 13] = [0, 1, 7, 8, 9, 15, 16, 17, 31, 32, 33, 64, 65];

    /// ASCII letters, accented letters (two bytes), a CJK char (three) and one outside the
    /// BMP (four).
    const CHARS: [char; 8] = ['a', 'b', 'c', 'd', 'é', 'ø', '中', '😀'];

    fn word(lo: usize, hi: usize) -> impl Strategy<Value = String> {
        prop::collection::vec(prop::sample::select(CHARS.to_vec()), lo..=hi)
            .prop_map(|cs| cs.into_iter().collect())
    }

    /// 1 ..= 80 queries of lengths at the lane boundaries (group sizes that leave partial
    /// registers at every width), and 0 ..= 40 items of 0 ..= 70 chars.
    fn case() -> impl Strategy<Value = (Vec<String>, Vec<String>)> {
        let query = prop::sample::select(EDGES.to_vec()).prop_flat_map(|m| word(m, m));
        (
            prop::collection::vec(query, 1..=80),
            prop::collection::vec(word(0, 70), 0..=40),
        )
    }

    /// Every distance of every lane, with no bound, at `level`.
    fn all(queries: &[String], items: &[Vec<u8>], level: Level) -> Vec<Vec<Option<u32>>> {
        let qs: Vec<&[u8]> = queries.iter().map(|q| q.as_bytes()).collect();
        let lanes = LevenshteinLanes::with_level(&qs, level);
        let mut got = vec![vec![None; items.len()]; queries.len()];
        for g in 0..lanes.groups() {
            let members = lanes.members(g);
            let mut bounds = vec![u32::MAX; members.len()];
            let stream = items
                .iter()
                .enumerate()
                .map(|(i, x)| (i as u32, x.as_slice()));
            lanes.scan_group(g, stream, &mut bounds, |lane, i, d| {
                let slot = &mut got[members[lane]][i as usize];
                assert!(slot.is_none(), "item {i} visited twice");
                *slot = Some(d);
                u32::MAX
            });
        }
        for &q in lanes.rest() {
            assert!(!(1..=64).contains(&queries[q].chars().count()));
        }
        got
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(200))]

        /// Every level this CPU runs and every lane width give the distances of `strsim`
        /// (`strsim::levenshtein`, a general-purpose string crate counting chars) for every
        /// query in lanes and every item.
        #[test]
        fn every_level_matches_strsim((queries, items) in case()) {
            let bytes: Vec<Vec<u8>> = items.iter().map(|x| x.clone().into_bytes()).collect();
            for level in Level::ALL.into_iter().filter(|l| l.available()) {
                let got = all(&queries, &bytes, level);
                for (q, got) in queries.iter().zip(&got) {
                    let m = q.chars().count();
                    for (x, &d) in items.iter().zip(got) {
                        let want = (1..=64).contains(&m).then(|| strsim::levenshtein(q, x) as u32);
                        prop_assert_eq!(d, want, "{:?}: {:?} / {:?}", level, q, x);
                    }
                }
            }
        }

        /// Only items within a lane's bound are visited, and the bound returned is the one
        /// used next: a running k-th best with k = 3 sees what a sorted list says it should.
        #[test]
        fn bounds_admit_exactly_what_they_should((queries, items) in case()) {
            let qs: Vec<&[u8]> = queries.iter().map(|q| q.as_bytes()).collect();
            for level in Level::ALL.into_iter().filter(|l| l.available()) {
                let lanes = LevenshteinLanes::with_level(&qs, level);
                for g in 0..lanes.groups() {
                    let members = lanes.members(g);
                    let mut kept: Vec<Vec<u32>> = vec![Vec::new(); members.len()];
                    let mut bounds = vec![u32::MAX; members.len()];
                    let stream = items.iter().enumerate().map(|(i, x)| (i as u32, x.as_bytes()));
                    let mut seen = vec![Vec::new(); members.len()];
                    lanes.scan_group(g, stream, &mut bounds, |lane, i, d| {
                        seen[lane].push(i);
                        let k = &mut kept[lane];
                        k.push(d);
                        k.sort_unstable();
                        k.truncate(3);
                        if k.len() == 3 { k[2] } else { u32::MAX }
                    });
                    for (lane, &q) in members.iter().enumerate() {
                        // The same running bound, by the plain dynamic program (strsim).
                        let mut k: Vec<u32> = Vec::new();
                        let mut want = Vec::new();
                        for (i, x) in items.iter().enumerate() {
                            let d = strsim::levenshtein(&queries[q], x) as u32;
                            if k.len() < 3 || d <= k[2] {
                                want.push(i as u32);
                                k.push(d);
                                k.sort_unstable();
                                k.truncate(3);
                            }
                        }
                        prop_assert_eq!(&seen[lane], &want, "{:?}, query {:?}", level, queries[q]);
                    }
                }
            }
        }
    }

    /// Items longer than [`LONG_ITEM`] bytes take the one-query kernels; invalid UTF-8 reads
    /// as U+FFFD in items and queries alike.
    #[test]
    fn long_and_invalid_items() {
        let long = "ab".repeat(200);
        let queries = ["abab".to_string(), "é".repeat(9), "b\u{FFFD}a".to_string()];
        let items: Vec<Vec<u8>> = vec![
            long.clone().into_bytes(),
            "é".repeat(300).into_bytes(),
            b"b\xffa".to_vec(),
            b"\xc3".to_vec(),
        ];
        for level in Level::ALL.into_iter().filter(|l| l.available()) {
            let got = all(&queries, &items, level);
            for (q, got) in queries.iter().zip(&got) {
                for (x, &d) in items.iter().zip(got) {
                    let x = String::from_utf8_lossy(x);
                    let want = strsim::levenshtein(q, &x) as u32;
                    assert_eq!(d, Some(want), "{level:?}: {q:?} / {x:?}");
                }
            }
        }
    }
}
