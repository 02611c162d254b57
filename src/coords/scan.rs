//! The candidate scan: every item's u8 coordinate row scored against the query's, with the
//! score histogram filled in the same pass.
//!
//! Scores are integers: L1 = Σ|a−b|, L2 = Σ(a−b)² (squared, so no square root and no float)
//! and L∞ = max|a−b|. Alongside each score the pass counts it in a histogram of
//! [`HIST_BINS`] bins (scores past the last bin share it), which is what the caller needs to
//! find the score of the C-th best without sorting.
//!
//! Hand-written rather than taken from a crate: no well-kept crate offers a fused
//! "score u8 rows of a fixed small stride and count the scores" kernel, and the generic
//! compiled loop does poorly here — per-row horizontal reductions compiled one row at a
//! time, plus a second pass for the histogram. The AVX2 path instead scores eight rows at
//! a time and reduces them together into one vector of eight scores:
//!
//! - the absolute difference of u8 lanes is `max(a, b) − min(a, b)`;
//! - L1 uses `vpsadbw`, which sums the absolute differences of each 8 bytes into a u64;
//! - L2 splits rows and query into even and odd bytes as u16 (a mask and a shift, no lane
//!   crossing), subtracts in i16, and squares and sums pairs with `vpmaddwd`, giving i32
//!   partial sums;
//! - L∞ folds rows onto each other until each row's maximum sits in one byte;
//! - the partial sums of eight rows are reduced together (`vphaddd`, unpacks, shifts) into
//!   one vector of eight scores, stored at once; the histogram is then counted from the
//!   stored scores, one block of rows at a time.
//!
//! The AVX-512 path (`avx512` below) scores sixteen rows a step with 64-byte loads; it
//! measured no faster than AVX2 (the scan is bound by memory), so [`score_rows`] takes it
//! only when `WAYMARK_SIMD=avx512` names it; [`score_rows_at`] runs any level.
//!
//! The AVX2 path is chosen at run time ([`crate::cpu::has_avx2`]); the portable path (plain loops,
//! correct on any CPU) is used otherwise, for the last rows that do not fill a group, and on
//! other architectures. Every level gives identical scores and histograms; the tests check
//! each against a direct scalar reference.

use super::{Space, STRIDES};
use crate::cpu::Level;

/// Number of histogram bins filled by [`score_rows`]; scores at or past the last bin are
/// counted in it.
pub const HIST_BINS: usize = 1 << 14;

/// Scores every row of `coords` against the query row `q` and counts the scores.
///
/// `coords` is row-major with `stride` bytes per row, `stride` one of [`STRIDES`]; only the
/// first `stride` bytes of `q` are used (unused trailing bytes in rows and in `q` are
/// expected to be zero, and are simply included in the score if they are not). One score
/// per row is written to `out`: L1 = Σ|a−b|, L2 = Σ(a−b)² (squared) and L∞ = max|a−b|.
/// In the same pass `hist[min(score, HIST_BINS − 1)]` is incremented for every row; the
/// caller clears `hist` beforehand (counts are added to what is there).
///
/// Uses AVX2 when the CPU has it, else [`score_rows_portable`]; the AVX-512 kernels only
/// when `WAYMARK_SIMD=avx512` names them ([`Level::active_avx512_if_forced`]: they measured
/// no faster, the scan being bound by memory). The results are identical at every level.
///
/// # Panics
///
/// If `stride` is not one of [`STRIDES`], if `coords.len() != out.len() * stride`, or if
/// `hist.len() != HIST_BINS`.
pub fn score_rows(
    coords: &[u8],
    stride: usize,
    q: &[u8; 64],
    space: Space,
    out: &mut [u32],
    hist: &mut [u32],
) {
    // The AVX-512 rows measured no faster than AVX2 (the scan is bound by memory; see
    // DEVELOPERS.md, "Dispatch levels"): taken only when `WAYMARK_SIMD=avx512` asks.
    let level = Level::active_avx512_if_forced();
    score_rows_at(level, coords, stride, q, space, out, hist);
}

/// [`score_rows`] with the kernels of `level` (lowered to what this CPU runs, whatever
/// `WAYMARK_SIMD` says), so that tests and benches can run every level in one process.
/// Every level gives identical scores and histograms.
///
/// # Panics
///
/// As [`score_rows`].
pub fn score_rows_at(
    level: Level,
    coords: &[u8],
    stride: usize,
    q: &[u8; 64],
    space: Space,
    out: &mut [u32],
    hist: &mut [u32],
) {
    let hist = check_args(coords, stride, out, hist);
    #[cfg(target_arch = "x86_64")]
    {
        let level = level.clamped();
        if level >= Level::Avx512 {
            // SAFETY: `clamped` lowered the level to what the CPU reports, so it has
            // AVX-512 F, BW, VL and AVX2, the `target_feature`s of the functions called here.
            unsafe {
                match stride {
                    8 => avx512::rows::<8>(coords, q, space, out, hist),
                    16 => avx512::rows::<16>(coords, q, space, out, hist),
                    32 => avx512::rows::<32>(coords, q, space, out, hist),
                    _ => avx512::rows::<64>(coords, q, space, out, hist),
                }
            }
            return;
        }
        if level >= Level::Avx2 {
            // SAFETY: `clamped` lowered the level to what the CPU reports, so it has AVX2,
            // the only `target_feature` of the functions called here.
            unsafe {
                match stride {
                    8 => avx2::rows::<8>(coords, q, space, out, hist),
                    16 => avx2::rows::<16>(coords, q, space, out, hist),
                    32 => avx2::rows::<32>(coords, q, space, out, hist),
                    _ => avx2::rows::<64>(coords, q, space, out, hist),
                }
            }
            return;
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = level;
    portable_dispatch(coords, stride, q, space, out, hist);
}

/// The portable form of [`score_rows`]: same arguments, same results, plain loops on any CPU.
///
/// Public so that benches and tests can compare it with the dispatched version.
///
/// # Panics
///
/// As [`score_rows`].
pub fn score_rows_portable(
    coords: &[u8],
    stride: usize,
    q: &[u8; 64],
    space: Space,
    out: &mut [u32],
    hist: &mut [u32],
) {
    let hist = check_args(coords, stride, out, hist);
    portable_dispatch(coords, stride, q, space, out, hist);
}

/// Checks the arguments shared by both entry points; returns the histogram as an array so
/// that indexing it with a masked score needs no bounds check.
fn check_args<'h>(
    coords: &[u8],
    stride: usize,
    out: &[u32],
    hist: &'h mut [u32],
) -> &'h mut [u32; HIST_BINS] {
    assert!(
        STRIDES.contains(&stride),
        "stride {stride} is not one of {STRIDES:?}"
    );
    assert_eq!(
        Some(coords.len()),
        out.len().checked_mul(stride),
        "coords must hold out.len() rows of {stride} bytes"
    );
    let len = hist.len();
    hist.try_into()
        .unwrap_or_else(|_| panic!("hist has {len} bins, expected {HIST_BINS}"))
}

fn portable_dispatch(
    coords: &[u8],
    stride: usize,
    q: &[u8; 64],
    space: Space,
    out: &mut [u32],
    hist: &mut [u32; HIST_BINS],
) {
    match stride {
        8 => portable::<8>(coords, q, space, out, hist),
        16 => portable::<16>(coords, q, space, out, hist),
        32 => portable::<32>(coords, q, space, out, hist),
        _ => portable::<64>(coords, q, space, out, hist),
    }
}

/// Histogram bin of a score.
#[inline(always)]
fn bin(score: u32) -> usize {
    (score as usize).min(HIST_BINS - 1)
}

/// Portable scoring of rows of `S` bytes (`coords.len() == out.len() * S`).
#[inline(always)]
fn portable<const S: usize>(
    coords: &[u8],
    q: &[u8; 64],
    space: Space,
    out: &mut [u32],
    hist: &mut [u32; HIST_BINS],
) {
    let q: &[u8; S] = q[..S].try_into().expect("S <= 64");
    match space {
        Space::L1 => portable_with::<S>(coords, out, hist, |r| super::l1(r, q)),
        Space::L2 => portable_with::<S>(coords, out, hist, |r| super::l2(r, q)),
        Space::Linf => portable_with::<S>(coords, out, hist, |r| super::linf(r, q)),
    }
}

#[inline(always)]
fn portable_with<const S: usize>(
    coords: &[u8],
    out: &mut [u32],
    hist: &mut [u32; HIST_BINS],
    score: impl Fn(&[u8; S]) -> u32,
) {
    for (row, o) in coords.chunks_exact(S).zip(out.iter_mut()) {
        let s = score(row.try_into().expect("row of S bytes"));
        *o = s;
        hist[bin(s)] += 1;
    }
}

/// Counts bins below [`HIST_BINS`] (L1 ≤ 64 × 255; L2 clamped by the caller) into `hist`.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
fn count(hist: &mut [u32; HIST_BINS], bins: &[u32]) {
    for &b in bins {
        // The mask never changes a bin; it only lets the compiler drop the bounds check.
        hist[b as usize & (HIST_BINS - 1)] += 1;
    }
}

/// Counts of L∞ scores (below 256). L∞ scores take few distinct values and neighbouring
/// rows often share one; four small tables, used in turn, keep increments of one bin from
/// waiting on each other.
#[cfg(target_arch = "x86_64")]
struct SmallCounts([[u32; 256]; 4]);

#[cfg(target_arch = "x86_64")]
impl SmallCounts {
    #[inline(always)]
    fn new() -> Self {
        SmallCounts([[0; 256]; 4])
    }

    /// Counts `bins` (a multiple of four of them, each below 256).
    #[inline(always)]
    fn add(&mut self, bins: &[u32]) {
        for four in bins.chunks_exact(4) {
            for (t, &b) in self.0.iter_mut().zip(four) {
                t[b as usize & 255] += 1;
            }
        }
    }

    /// Adds the counts to `hist`.
    #[inline(always)]
    fn into(self, hist: &mut [u32; HIST_BINS]) {
        for t in &self.0 {
            for (h, &l) in hist.iter_mut().zip(t) {
                *h += l;
            }
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod avx2 {
    use std::arch::x86_64::*;

    use super::{count, portable, SmallCounts, Space, HIST_BINS};

    /// Loads 32 bytes from the start of `b`.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn load(b: &[u8]) -> __m256i {
        assert!(b.len() >= 32);
        // SAFETY: `b` has at least 32 readable bytes (asserted above); `loadu` has no
        // alignment requirement.
        unsafe { _mm256_loadu_si256(b.as_ptr().cast()) }
    }

    /// Stores eight u32 lanes into `o`.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn store(o: &mut [u32; 8], v: __m256i) {
        // SAFETY: `o` is 32 writable bytes; `storeu` has no alignment requirement.
        unsafe { _mm256_storeu_si256(o.as_mut_ptr().cast(), v) }
    }

    /// |a − b| per u8 lane.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn absdiff(a: __m256i, b: __m256i) -> __m256i {
        _mm256_sub_epi8(_mm256_max_epu8(a, b), _mm256_min_epu8(a, b))
    }

    /// The query laid out to match one 32-byte load of rows: the row repeated 4 (S = 8) or
    /// 2 (S = 16) times; for S = 64, `hi` holds bytes 32..64.
    struct Query {
        lo: __m256i,
        hi: __m256i,
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    fn query<const S: usize>(q: &[u8; 64]) -> Query {
        let mut tiled = [0u8; 32];
        for (i, t) in tiled.iter_mut().enumerate() {
            *t = q[i % S.min(32)];
        }
        Query {
            lo: load(&tiled),
            hi: load(&q[32..]),
        }
    }

    /// Rows scored by the vector pass before their scores are counted. The scores of a
    /// block are still in L1 when the counting loop reads them back with plain loads;
    /// counting straight from the vector register instead takes one vector-to-integer
    /// extract per score, which measured slower (`benches/scan.rs`).
    const BLOCK: usize = 256;

    /// Scores rows of `S` bytes: eight at a time with AVX2, the rest with the portable loop.
    #[target_feature(enable = "avx2")]
    pub(super) fn rows<const S: usize>(
        coords: &[u8],
        q: &[u8; 64],
        space: Space,
        out: &mut [u32],
        hist: &mut [u32; HIST_BINS],
    ) {
        let full = out.len() / 8 * 8;
        let (head, tail) = coords.split_at(full * S);
        let (head_out, tail_out) = out.split_at_mut(full);
        let qv = query::<S>(q);
        match space {
            Space::L1 => {
                blocks::<S, false>(head, head_out, |c| l1::<S>(c, &qv), |b| count(hist, b))
            }
            Space::L2 => {
                let qs = SplitQuery::new(&qv);
                blocks::<S, true>(head, head_out, |c| l2::<S>(c, &qs), |b| count(hist, b))
            }
            Space::Linf => {
                let mut small = SmallCounts::new();
                blocks::<S, false>(head, head_out, |c| linf::<S>(c, &qv), |b| small.add(b));
                small.into(hist);
            }
        }
        portable::<S>(tail, q, space, tail_out, hist);
    }

    /// Runs `score` on each group of eight rows (`coords.len() == S * out.len()`,
    /// `out.len()` a multiple of 8), stores the scores, and calls `count` with each block's
    /// histogram bins once the block is scored. With `CLAMP` the bins are the scores clamped
    /// to the last bin, made in the vector pass; without, they are the scores themselves.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn blocks<const S: usize, const CLAMP: bool>(
        coords: &[u8],
        out: &mut [u32],
        score: impl Fn(&[u8]) -> __m256i,
        mut count: impl FnMut(&[u32]),
    ) {
        let last = _mm256_set1_epi32((HIST_BINS - 1) as i32);
        let mut clamped = [0u32; BLOCK];
        for (cb, ob) in coords.chunks(BLOCK * S).zip(out.chunks_mut(BLOCK)) {
            let groups = cb.chunks_exact(8 * S).zip(ob.chunks_exact_mut(8));
            for ((c, o), b) in groups.zip(clamped.chunks_exact_mut(8)) {
                let v = score(c);
                store(o.try_into().expect("8 scores"), v);
                if CLAMP {
                    store(b.try_into().expect("8 bins"), _mm256_min_epu32(v, last));
                }
            }
            count(if CLAMP { &clamped[..ob.len()] } else { ob });
        }
    }

    /// Lane order to undo the interleaving of the reductions, for `_mm256_permutevar8x32_epi32`.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn order(idx: [i32; 8]) -> __m256i {
        _mm256_setr_epi32(
            idx[0], idx[1], idx[2], idx[3], idx[4], idx[5], idx[6], idx[7],
        )
    }

    /// Packs the low u32 of each u64 lane of `a` and `b` as `[a0, b0, a1, b1, …]`.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn pair_low32(a: __m256i, b: __m256i) -> __m256i {
        _mm256_or_si256(a, _mm256_slli_epi64::<32>(b))
    }

    /// L1 of eight rows (`c` is `8 * S` bytes), as eight u32 in row order.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn l1<const S: usize>(c: &[u8], q: &Query) -> __m256i {
        let c = &c[..8 * S];
        match S {
            8 => {
                // One u64 sum per row: s0 = rows 0..4, s1 = rows 4..8.
                let s0 = _mm256_sad_epu8(load(&c[0..]), q.lo);
                let s1 = _mm256_sad_epu8(load(&c[32..]), q.lo);
                // [r0 r4 r1 r5 r2 r6 r3 r7]
                let t = pair_low32(s0, s1);
                _mm256_permutevar8x32_epi32(t, order([0, 2, 4, 6, 1, 3, 5, 7]))
            }
            16 => {
                // Each register: two rows (one per 128-bit lane), two u64 half-sums each.
                let s: [__m256i; 4] =
                    std::array::from_fn(|k| _mm256_sad_epu8(load(&c[32 * k..]), q.lo));
                // [r0a r2a r0b r2b | r1a r3a r1b r3b] and likewise rows 4..8.
                let t0 = pair_low32(s[0], s[1]);
                let t1 = pair_low32(s[2], s[3]);
                // [r0 r2 r4 r6 | r1 r3 r5 r7]
                let u =
                    _mm256_add_epi32(_mm256_unpacklo_epi64(t0, t1), _mm256_unpackhi_epi64(t0, t1));
                _mm256_permutevar8x32_epi32(u, order([0, 4, 1, 5, 2, 6, 3, 7]))
            }
            _ => {
                // One row per register, four u64 quarter-sums (two registers' worth for S = 64).
                let s: [__m256i; 8] = std::array::from_fn(|k| {
                    let row = &c[S * k..];
                    let a = _mm256_sad_epu8(load(row), q.lo);
                    if S == 64 {
                        _mm256_add_epi64(a, _mm256_sad_epu8(load(&row[32..]), q.hi))
                    } else {
                        a
                    }
                });
                four_quarters(&s)
            }
        }
    }

    /// Eight rows' u64 quarter-sums `[k0 k1 | k2 k3]` (row k in `s[k]`) to eight u32 totals.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn four_quarters(s: &[__m256i; 8]) -> __m256i {
        // [0_0 1_0 0_1 1_1 | 0_2 1_2 0_3 1_3] for each pair of rows.
        let t01 = pair_low32(s[0], s[1]);
        let t23 = pair_low32(s[2], s[3]);
        let t45 = pair_low32(s[4], s[5]);
        let t67 = pair_low32(s[6], s[7]);
        // [0 1 2 3 (quarters 0+1) | 0 1 2 3 (quarters 2+3)]
        let a = _mm256_add_epi32(
            _mm256_unpacklo_epi64(t01, t23),
            _mm256_unpackhi_epi64(t01, t23),
        );
        let b = _mm256_add_epi32(
            _mm256_unpacklo_epi64(t45, t67),
            _mm256_unpackhi_epi64(t45, t67),
        );
        _mm256_add_epi32(
            _mm256_permute2x128_si256::<0x20>(a, b),
            _mm256_permute2x128_si256::<0x31>(a, b),
        )
    }

    /// The query's bytes as u16: even and odd positions of each 32-byte load.
    struct SplitQuery {
        lo: [__m256i; 2],
        hi: [__m256i; 2],
    }

    impl SplitQuery {
        #[inline]
        #[target_feature(enable = "avx2")]
        fn new(q: &Query) -> SplitQuery {
            SplitQuery {
                lo: split(q.lo),
                hi: split(q.hi),
            }
        }
    }

    /// Even and odd bytes of `v` as u16 lanes (a mask and a shift, no lane crossing).
    #[inline]
    #[target_feature(enable = "avx2")]
    fn split(v: __m256i) -> [__m256i; 2] {
        [
            _mm256_and_si256(v, _mm256_set1_epi16(0xff)),
            _mm256_srli_epi16::<8>(v),
        ]
    }

    /// Squared differences of one 32-byte load against the split query, summed in i32 groups
    /// of four bytes. The differences are taken in i16 (|a − b| ≤ 255), so `vpmaddwd` squares
    /// and adds pairs exactly: at most 2 × 255² per i32.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn squares(r: __m256i, q: &[__m256i; 2]) -> __m256i {
        let [even, odd] = split(r);
        let de = _mm256_sub_epi16(even, q[0]);
        let d_o = _mm256_sub_epi16(odd, q[1]);
        _mm256_add_epi32(_mm256_madd_epi16(de, de), _mm256_madd_epi16(d_o, d_o))
    }

    /// Squared L2 of eight rows, as eight u32 in row order.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn l2<const S: usize>(c: &[u8], q: &SplitQuery) -> __m256i {
        let c = &c[..8 * S];
        match S {
            8 => {
                // Two i32 per row: e0 = rows 0..4, e1 = rows 4..8.
                let e0 = squares(load(&c[0..]), &q.lo);
                let e1 = squares(load(&c[32..]), &q.lo);
                // [r0 r1 r4 r5 | r2 r3 r6 r7]
                let h = _mm256_hadd_epi32(e0, e1);
                _mm256_permute4x64_epi64::<0b11_01_10_00>(h)
            }
            16 => {
                // Each register: two rows (one per 128-bit lane), four i32 each.
                let e: [__m256i; 4] = std::array::from_fn(|k| squares(load(&c[32 * k..]), &q.lo));
                let h01 = _mm256_hadd_epi32(e[0], e[1]);
                let h23 = _mm256_hadd_epi32(e[2], e[3]);
                // [r0 r2 r4 r6 | r1 r3 r5 r7]
                let h = _mm256_hadd_epi32(h01, h23);
                _mm256_permutevar8x32_epi32(h, order([0, 4, 1, 5, 2, 6, 3, 7]))
            }
            _ => {
                // One row per register, eight i32 each.
                let e: [__m256i; 8] = std::array::from_fn(|k| {
                    let row = &c[S * k..];
                    let a = squares(load(row), &q.lo);
                    if S == 64 {
                        _mm256_add_epi32(a, squares(load(&row[32..]), &q.hi))
                    } else {
                        a
                    }
                });
                let h01 = _mm256_hadd_epi32(e[0], e[1]);
                let h23 = _mm256_hadd_epi32(e[2], e[3]);
                let h45 = _mm256_hadd_epi32(e[4], e[5]);
                let h67 = _mm256_hadd_epi32(e[6], e[7]);
                // [r0 r1 r2 r3 (low halves) | r0 r1 r2 r3 (high halves)], and rows 4..8.
                let a = _mm256_hadd_epi32(h01, h23);
                let b = _mm256_hadd_epi32(h45, h67);
                _mm256_add_epi32(
                    _mm256_permute2x128_si256::<0x20>(a, b),
                    _mm256_permute2x128_si256::<0x31>(a, b),
                )
            }
        }
    }

    /// L∞ of eight rows, as eight u32 in row order.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn linf<const S: usize>(c: &[u8], q: &Query) -> __m256i {
        let c = &c[..8 * S];
        // Fold the rows' absolute differences down to 8 bytes per row, four rows per
        // register (one per u64 lane): `g0`, `g1` hold rows in the order given by `idx`.
        let (g0, g1, idx) = if S == 8 {
            let g0 = absdiff(load(&c[0..]), q.lo);
            let g1 = absdiff(load(&c[32..]), q.lo);
            // Rows [0 1 2 3] and [4 5 6 7].
            (g0, g1, [0, 2, 4, 6, 1, 3, 5, 7])
        } else {
            // Registers of two rows, 16 bytes each (one per 128-bit lane).
            let f: [__m256i; 4] = std::array::from_fn(|k| {
                if S == 16 {
                    absdiff(load(&c[32 * k..]), q.lo)
                } else {
                    let [a, b] = [2 * k, 2 * k + 1].map(|r| {
                        let row = &c[S * r..];
                        let d = absdiff(load(row), q.lo);
                        if S == 64 {
                            _mm256_max_epu8(d, absdiff(load(&row[32..]), q.hi))
                        } else {
                            d
                        }
                    });
                    _mm256_max_epu8(
                        _mm256_permute2x128_si256::<0x20>(a, b),
                        _mm256_permute2x128_si256::<0x31>(a, b),
                    )
                }
            });
            // [r0 r2 | r1 r3] and [r4 r6 | r5 r7], 8 bytes per row.
            let g0 = _mm256_max_epu8(
                _mm256_unpacklo_epi64(f[0], f[1]),
                _mm256_unpackhi_epi64(f[0], f[1]),
            );
            let g1 = _mm256_max_epu8(
                _mm256_unpacklo_epi64(f[2], f[3]),
                _mm256_unpackhi_epi64(f[2], f[3]),
            );
            (g0, g1, [0, 4, 2, 6, 1, 5, 3, 7])
        };
        // 8 → 4 bytes per row; then the two registers' rows interleaved in u32 lanes.
        let g0 = _mm256_max_epu8(g0, _mm256_srli_epi64::<32>(g0));
        let g1 = _mm256_max_epu8(g1, _mm256_slli_epi64::<32>(g1));
        let t = _mm256_blend_epi32::<0b1010_1010>(g0, g1);
        // 4 → 1 byte per row.
        let t = _mm256_max_epu8(t, _mm256_srli_epi32::<16>(t));
        let t = _mm256_max_epu8(t, _mm256_srli_epi32::<8>(t));
        let t = _mm256_and_si256(t, _mm256_set1_epi32(0xff));
        _mm256_permutevar8x32_epi32(t, order(idx))
    }
}

/// The AVX-512 (F, BW) row scan: sixteen rows per step, one 64-byte load covering 64 / S
/// rows, so that every stride uses whole registers.
///
/// Each load is compared with the query tiled to 64 bytes and gives per-row partial results
/// in consecutive lanes: `vpsadbw` sums of 8 bytes (L1), the byte maxima of absolute
/// differences (L∞), `vpmaddwd` sums of 4 squared differences (L2). Partial results of the
/// same row are then added (or maxed) pairwise across registers with two-source permutes
/// (`vpermt2q` / `vpermt2d`), which keep the rows in order, until one lane per row is left;
/// the scores of sixteen rows are stored with one store.
#[cfg(target_arch = "x86_64")]
mod avx512 {
    use std::arch::x86_64::*;

    use super::{count, portable, SmallCounts, Space, HIST_BINS};

    /// Rows scored by the vector pass before their scores are counted (as the AVX2 path).
    const BLOCK: usize = 256;

    /// Loads 64 bytes from the start of `b`.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn load(b: &[u8]) -> __m512i {
        assert!(b.len() >= 64);
        // SAFETY: `b` has at least 64 readable bytes (asserted above); `loadu` has no
        // alignment requirement.
        unsafe { _mm512_loadu_si512(b.as_ptr().cast()) }
    }

    /// Stores sixteen u32 lanes into `o`.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn store(o: &mut [u32; 16], v: __m512i) {
        // SAFETY: `o` is 64 writable bytes; `storeu` has no alignment requirement.
        unsafe { _mm512_storeu_si512(o.as_mut_ptr().cast(), v) }
    }

    /// Lane indices `first, first + 2, first + 4, …` for the two-source permutes.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn every_other_64(first: i64) -> __m512i {
        let i: [i64; 8] = std::array::from_fn(|k| first + 2 * k as i64);
        _mm512_setr_epi64(i[0], i[1], i[2], i[3], i[4], i[5], i[6], i[7])
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn every_other_32(first: i32) -> __m512i {
        let i: [i32; 16] = std::array::from_fn(|k| first + 2 * k as i32);
        _mm512_setr_epi32(
            i[0], i[1], i[2], i[3], i[4], i[5], i[6], i[7], i[8], i[9], i[10], i[11], i[12], i[13],
            i[14], i[15],
        )
    }

    /// Neighbouring u64 lanes of `a` then of `b` combined by `op`:
    /// `[op(a0, a1), op(a2, a3), …, op(b6, b7)]`.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn fold64(a: __m512i, b: __m512i, op: impl Fn(__m512i, __m512i) -> __m512i) -> __m512i {
        op(
            _mm512_permutex2var_epi64(a, every_other_64(0), b),
            _mm512_permutex2var_epi64(a, every_other_64(1), b),
        )
    }

    /// Neighbouring u32 lanes of `a` then of `b` added: `[a0 + a1, …, b14 + b15]`.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn fold32(a: __m512i, b: __m512i) -> __m512i {
        _mm512_add_epi32(
            _mm512_permutex2var_epi32(a, every_other_32(0), b),
            _mm512_permutex2var_epi32(a, every_other_32(1), b),
        )
    }

    /// Folds the first `k` registers of `r` pairwise (in order) with `fold` until `until`
    /// are left.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn fold_down(
        r: &mut [__m512i; 16],
        mut k: usize,
        until: usize,
        fold: impl Fn(__m512i, __m512i) -> __m512i,
    ) {
        while k > until {
            for i in 0..k / 2 {
                r[i] = fold(r[2 * i], r[2 * i + 1]);
            }
            k /= 2;
        }
    }

    /// The low u32 of every u64 lane of `a` then of `b`: sixteen rows' scores in order.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn low_halves(a: __m512i, b: __m512i) -> __m512i {
        _mm512_permutex2var_epi32(a, every_other_32(0), b)
    }

    /// |a − b| per u8 lane.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn absdiff(a: __m512i, b: __m512i) -> __m512i {
        _mm512_sub_epi8(_mm512_max_epu8(a, b), _mm512_min_epu8(a, b))
    }

    /// One load's partial results per space, `S / 4` loads for sixteen rows.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn loads<const S: usize>(c: &[u8], part: impl Fn(__m512i) -> __m512i) -> [__m512i; 16] {
        let c = &c[..16 * S];
        let mut r = [_mm512_setzero_si512(); 16];
        for (k, v) in r.iter_mut().enumerate().take(S / 4) {
            *v = part(load(&c[64 * k..]));
        }
        r
    }

    /// L1 of sixteen rows (`c` is `16 * S` bytes), as sixteen u32 in row order.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn l1<const S: usize>(c: &[u8], q: __m512i) -> __m512i {
        // u64 sums of 8 bytes: S / 8 per row.
        let mut r = loads::<S>(c, |v| _mm512_sad_epu8(v, q));
        fold_down(&mut r, S / 4, 2, |a, b| {
            fold64(a, b, |x, y| _mm512_add_epi64(x, y))
        });
        low_halves(r[0], r[1])
    }

    /// L∞ of sixteen rows, as sixteen u32 in row order.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn linf<const S: usize>(c: &[u8], q: __m512i) -> __m512i {
        // Byte maxima folded across u64 lanes until each lane holds one row's 8 candidates.
        let mut r = loads::<S>(c, |v| absdiff(v, q));
        fold_down(&mut r, S / 4, 2, |a, b| {
            fold64(a, b, |x, y| _mm512_max_epu8(x, y))
        });
        let [a, b] = [r[0], r[1]].map(|v| {
            let v = _mm512_max_epu8(v, _mm512_srli_epi64::<32>(v));
            let v = _mm512_max_epu8(v, _mm512_srli_epi64::<16>(v));
            let v = _mm512_max_epu8(v, _mm512_srli_epi64::<8>(v));
            _mm512_and_si512(v, _mm512_set1_epi64(0xff))
        });
        low_halves(a, b)
    }

    /// Even and odd bytes of `v` as u16 lanes.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn split(v: __m512i) -> [__m512i; 2] {
        [
            _mm512_and_si512(v, _mm512_set1_epi16(0xff)),
            _mm512_srli_epi16::<8>(v),
        ]
    }

    /// Squared L2 of sixteen rows, as sixteen u32 in row order. Differences are taken in
    /// i16 (|a − b| ≤ 255), so `vpmaddwd` squares and adds pairs exactly.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn l2<const S: usize>(c: &[u8], q: &[__m512i; 2]) -> __m512i {
        // i32 sums of 4 squared differences: S / 4 per row.
        let mut r = loads::<S>(c, |v| {
            let [even, odd] = split(v);
            let de = _mm512_sub_epi16(even, q[0]);
            let d_o = _mm512_sub_epi16(odd, q[1]);
            _mm512_add_epi32(_mm512_madd_epi16(de, de), _mm512_madd_epi16(d_o, d_o))
        });
        fold_down(&mut r, S / 4, 1, |a, b| fold32(a, b));
        r[0]
    }

    /// Scores rows of `S` bytes: sixteen at a time with AVX-512, the rest with the portable
    /// loop.
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    pub(super) fn rows<const S: usize>(
        coords: &[u8],
        q: &[u8; 64],
        space: Space,
        out: &mut [u32],
        hist: &mut [u32; HIST_BINS],
    ) {
        let full = out.len() / 16 * 16;
        let (head, tail) = coords.split_at(full * S);
        let (head_out, tail_out) = out.split_at_mut(full);
        // The query repeated to fill a 64-byte load of rows.
        let tiled: [u8; 64] = std::array::from_fn(|i| q[i % S]);
        let qv = load(&tiled);
        match space {
            Space::L1 => blocks::<S, false>(head, head_out, |c| l1::<S>(c, qv), |b| count(hist, b)),
            Space::L2 => {
                let qs = split(qv);
                blocks::<S, true>(head, head_out, |c| l2::<S>(c, &qs), |b| count(hist, b))
            }
            Space::Linf => {
                let mut small = SmallCounts::new();
                blocks::<S, false>(head, head_out, |c| linf::<S>(c, qv), |b| small.add(b));
                small.into(hist);
            }
        }
        portable::<S>(tail, q, space, tail_out, hist);
    }

    /// Runs `score` on each group of sixteen rows (`out.len()` a multiple of 16), stores the
    /// scores, and calls `count` with each block's bins (clamped to the last bin with
    /// `CLAMP`), as the AVX2 path's `blocks`.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw,avx512vl,avx2")]
    fn blocks<const S: usize, const CLAMP: bool>(
        coords: &[u8],
        out: &mut [u32],
        score: impl Fn(&[u8]) -> __m512i,
        mut count: impl FnMut(&[u32]),
    ) {
        let last = _mm512_set1_epi32((HIST_BINS - 1) as i32);
        let mut clamped = [0u32; BLOCK];
        for (cb, ob) in coords.chunks(BLOCK * S).zip(out.chunks_mut(BLOCK)) {
            let groups = cb.chunks_exact(16 * S).zip(ob.chunks_exact_mut(16));
            for ((c, o), b) in groups.zip(clamped.chunks_exact_mut(16)) {
                let v = score(c);
                store(o.try_into().expect("16 scores"), v);
                if CLAMP {
                    store(b.try_into().expect("16 bins"), _mm512_min_epu32(v, last));
                }
            }
            count(if CLAMP { &clamped[..ob.len()] } else { ob });
        }
    }
}

#[cfg(test)]
mod tests {
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    use super::*;

    const SPACES: [Space; 3] = [Space::L1, Space::L2, Space::Linf];

    /// The definitions, one row at a time.
    fn reference(coords: &[u8], stride: usize, q: &[u8; 64], space: Space) -> Vec<u32> {
        coords
            .chunks(stride)
            .map(|row| {
                let d = row
                    .iter()
                    .zip(q)
                    .map(|(&a, &b)| (i64::from(a) - i64::from(b)).abs());
                let s = match space {
                    Space::L1 => d.sum::<i64>(),
                    Space::L2 => d.map(|x| x * x).sum(),
                    Space::Linf => d.max().unwrap_or(0),
                };
                u32::try_from(s).expect("fits u32")
            })
            .collect()
    }

    fn reference_hist(scores: &[u32]) -> Vec<u32> {
        let mut h = vec![0u32; HIST_BINS];
        for &s in scores {
            h[(s as usize).min(HIST_BINS - 1)] += 1;
        }
        h
    }

    /// Random rows: values drawn from a mix of 0, 255, small and any byte; the `stride − dim`
    /// trailing bytes of every row and of the query are zero.
    fn data(rng: &mut ChaCha8Rng, n: usize, stride: usize, dim: usize) -> (Vec<u8>, [u8; 64]) {
        let byte = |rng: &mut ChaCha8Rng| match rng.gen_range(0..4) {
            0 => 0,
            1 => 255,
            2 => rng.gen_range(0..16),
            _ => rng.gen(),
        };
        let mut coords = vec![0u8; n * stride];
        for row in coords.chunks_mut(stride) {
            for v in &mut row[..dim] {
                *v = byte(rng);
            }
        }
        let mut q = [0u8; 64];
        for v in &mut q[..dim] {
            *v = byte(rng);
        }
        (coords, q)
    }

    type ScoreFn = fn(&[u8], usize, &[u8; 64], Space, &mut [u32], &mut [u32]);

    fn check(f: ScoreFn, coords: &[u8], stride: usize, q: &[u8; 64], space: Space, what: &str) {
        check_with(&f, coords, stride, q, space, what)
    }

    type DynScore<'a> = &'a dyn Fn(&[u8], usize, &[u8; 64], Space, &mut [u32], &mut [u32]);

    fn check_with(
        f: DynScore<'_>,
        coords: &[u8],
        stride: usize,
        q: &[u8; 64],
        space: Space,
        what: &str,
    ) {
        let n = coords.len() / stride;
        let want = reference(coords, stride, q, space);
        let mut out = vec![u32::MAX; n];
        let mut hist = vec![0u32; HIST_BINS];
        f(coords, stride, q, space, &mut out, &mut hist);
        assert_eq!(
            out, want,
            "{what}: scores, stride {stride}, {space:?}, n {n}"
        );
        assert!(
            hist == reference_hist(&want),
            "{what}: histogram, stride {stride}, {space:?}, n {n}"
        );
    }

    /// Every level this CPU runs, each checked against the definitions (and so against the
    /// portable form, which is checked the same way).
    fn check_levels(coords: &[u8], stride: usize, q: &[u8; 64], space: Space) {
        check(score_rows, coords, stride, q, space, "dispatched");
        check(score_rows_portable, coords, stride, q, space, "portable");
        for level in Level::ALL.into_iter().filter(|l| l.available()) {
            let at = |c: &[u8], s, q: &[u8; 64], sp, o: &mut [u32], h: &mut [u32]| {
                score_rows_at(level, c, s, q, sp, o, h)
            };
            check_with(&at, coords, stride, q, space, level.name());
        }
    }

    #[test]
    fn matches_the_definitions() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        for stride in STRIDES {
            for dim in [stride, stride / 2 + 1, 1] {
                // Row counts around the AVX2 group (8), the AVX-512 group (16) and the
                // counting block (256), so that every partial register and block is met.
                for n in [0, 1, 7, 8, 9, 15, 16, 17, 23, 31, 33, 255, 256, 257, 1001] {
                    let (coords, q) = data(&mut rng, n, stride, dim);
                    for space in SPACES {
                        check_levels(&coords, stride, &q, space);
                    }
                }
            }
        }
    }

    proptest::proptest! {
        /// Any bytes, any row count: every level equals the definitions.
        #[test]
        fn every_level_matches_the_definitions_on_any_bytes(
            stride_at in 0usize..4,
            space_at in 0usize..3,
            rows in proptest::collection::vec(proptest::num::u8::ANY, 0..40 * 64),
            q in proptest::collection::vec(proptest::num::u8::ANY, 64),
        ) {
            let stride = STRIDES[stride_at];
            let n = rows.len() / stride;
            let q: [u8; 64] = q.try_into().expect("64 bytes");
            check_levels(&rows[..n * stride], stride, &q, SPACES[space_at]);
        }
    }

    /// Extreme rows: every difference 255, so L1 and L2 reach their maxima and L2 lands past
    /// the last bin; and a single differing byte at each position, which catches a lane
    /// mixed up between rows.
    #[test]
    fn extremes_and_single_positions() {
        for stride in STRIDES {
            let mut coords = vec![255u8; 8 * stride];
            coords.extend(std::iter::repeat_n(0, 8 * stride));
            for pos in 0..stride {
                for r in 0..9 {
                    let mut row = vec![0u8; stride];
                    row[pos] = (pos * 8 + r) as u8 | 1;
                    coords.extend(row);
                }
            }
            for q in [[0u8; 64], [255u8; 64]] {
                for space in SPACES {
                    check_levels(&coords, stride, &q, space);
                }
            }
        }
    }

    #[test]
    fn adds_to_the_histogram_given() {
        let mut rng = ChaCha8Rng::seed_from_u64(8);
        let (coords, q) = data(&mut rng, 37, 16, 16);
        let mut out = vec![0u32; 37];
        let mut hist = vec![0u32; HIST_BINS];
        score_rows(&coords, 16, &q, Space::L1, &mut out, &mut hist);
        score_rows(&coords, 16, &q, Space::L1, &mut out, &mut hist);
        let once = reference_hist(&out);
        let twice: Vec<u32> = once.iter().map(|h| 2 * h).collect();
        assert!(hist == twice);
    }

    #[test]
    #[should_panic(expected = "stride 24")]
    fn refuses_other_strides() {
        score_rows(
            &[0; 48],
            24,
            &[0; 64],
            Space::L1,
            &mut [0; 2],
            &mut vec![0; HIST_BINS],
        );
    }

    #[test]
    #[should_panic(expected = "coords must hold")]
    fn refuses_mismatched_lengths() {
        score_rows(
            &[0; 48],
            16,
            &[0; 64],
            Space::L1,
            &mut [0; 2],
            &mut vec![0; HIST_BINS],
        );
    }

    #[test]
    #[should_panic(expected = "bins")]
    fn refuses_short_histograms() {
        score_rows(
            &[0; 32],
            16,
            &[0; 64],
            Space::L1,
            &mut [0; 2],
            &mut [0; 100],
        );
    }
}
