//! Picking the `C` best candidates from their scores, without a heap or a sort.
//!
//! [`super::scan::score_rows`] counts every score in a histogram of [`HIST_BINS`] bins in
//! the same pass that computes it; [`select_best`] reads the score of the C-th best off the
//! histogram and collects the C best, already in order, with a counting sort.

use super::scan::HIST_BINS;

/// Picks the `c` smallest scores, ordered by (score, item), into `picked` as (score, item).
///
/// `hist` is the counting histogram of the scores that [`super::scan::score_rows`] filled in the
/// same pass: it gives the score of the c-th best at once, and a counting sort over the bins
/// up to it collects the candidates already in order, in one more pass and without a heap.
/// Scores above the histogram's range share its last bin, which is sorted when it is used.
pub fn select_best(scores: &[u32], c: usize, hist: &[u32], picked: &mut Vec<(u32, u32)>) {
    let Some((from, overflow)) = up_to_cut(scores, c, hist, picked) else {
        return;
    };
    if overflow {
        // The overflow bin holds different scores: order it.
        picked[from..].sort_unstable();
    }
    picked.truncate(c);
}

/// [`select_best`] for scores of rows stored in another order than the items: `item` maps a
/// score's index to its item, and the `c` smallest scores are picked by (score, item), so
/// that the same candidates come out as from scores in item order. The result is ordered
/// by score (equal scores below the last one picked in index order).
pub fn select_best_mapped(
    scores: &[u32],
    c: usize,
    hist: &[u32],
    picked: &mut Vec<(u32, u32)>,
    item: impl Fn(u32) -> u32,
) {
    let Some((from, overflow)) = up_to_cut(scores, c, hist, picked) else {
        return;
    };
    for p in picked.iter_mut() {
        p.1 = item(p.1);
    }
    // The last bin is cut by item (and the overflow bin holds different scores): order it.
    if overflow || picked.len() > c {
        picked[from..].sort_unstable();
    }
    picked.truncate(c);
}

/// Every score in the bins up to the one holding the `c`-th smallest, into `picked` as
/// (score, index), ordered by bin, in index order within a bin; returns where the last bin
/// starts in `picked` and whether it is the overflow bin (`None` when nothing is picked).
/// The one pass over every score: kept out of line, so that both callers run the same code.
#[inline(never)]
fn up_to_cut(
    scores: &[u32],
    c: usize,
    hist: &[u32],
    picked: &mut Vec<(u32, u32)>,
) -> Option<(usize, bool)> {
    picked.clear();
    if c == 0 || scores.is_empty() {
        return None;
    }
    let mut seen = 0usize;
    let mut cut = HIST_BINS - 1;
    for (b, &h) in hist.iter().enumerate() {
        seen += h as usize;
        if seen >= c {
            cut = b;
            break;
        }
    }
    // Start of each bin up to the cut in the output.
    let mut start: Vec<u32> = Vec::with_capacity(cut + 1);
    let mut acc = 0u32;
    for &h in &hist[..=cut] {
        start.push(acc);
        acc += h;
    }
    picked.resize(acc as usize, (0, 0));
    let last_bin = (HIST_BINS - 1) as u32;
    let from = acc as usize - hist[cut] as usize;
    let cut = cut as u32;
    // Few scores are taken: runs of 16 with none are skipped on one vector comparison (the
    // test compiles to SIMD), so the branch per score runs only in runs that hold one.
    // Below the overflow bin, a score's bin is at most the cut exactly when the score is.
    const RUN: usize = 16;
    let overflow = cut == last_bin;
    for (r, run) in scores.chunks(RUN).enumerate() {
        if !overflow && !run.iter().fold(false, |any, &sc| any | (sc <= cut)) {
            continue;
        }
        for (j, &sc) in run.iter().enumerate() {
            let b = sc.min(last_bin);
            if b <= cut {
                let slot = &mut start[b as usize];
                picked[*slot as usize] = (sc, (r * RUN + j) as u32);
                *slot += 1;
            }
        }
    }
    Some((from, overflow))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::coords::scan::HIST_BINS;

    /// Scores stored in a permuted order, selected with the permutation, pick the same
    /// candidates as the scores in item order (ties at the cut by item), whatever the count.
    #[test]
    fn mapped_selection_picks_what_selection_in_item_order_picks() {
        let n = 3000u32;
        // Few distinct scores, so that the cut falls inside a bin of many ties; some past
        // the histogram's last bin.
        let by_item: Vec<u32> = (0..n)
            .map(|i| match i % 11 {
                10 => HIST_BINS as u32 + (i * 7) % 5,
                r => (i * 31 + r) % 9,
            })
            .collect();
        // Position p holds item members[p].
        let members: Vec<u32> = (0..n).map(|p| (p * 1237 + 11) % n).collect();
        let stored: Vec<u32> = members.iter().map(|&m| by_item[m as usize]).collect();
        let mut hist = vec![0u32; HIST_BINS];
        for &s in &by_item {
            hist[(s as usize).min(HIST_BINS - 1)] += 1;
        }
        for c in [1, 5, 333, 334, 2700, 2999, 3000, 5000] {
            let (mut want, mut got) = (Vec::new(), Vec::new());
            select_best(&by_item, c, &hist, &mut want);
            select_best_mapped(&stored, c, &hist, &mut got, |p: u32| members[p as usize]);
            want.sort_unstable();
            got.sort_unstable();
            assert_eq!(got, want, "c = {c}");
        }
    }
}
