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
    picked.clear();
    if c == 0 || scores.is_empty() {
        return;
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
    let cut = cut as u32;
    for (i, &sc) in scores.iter().enumerate() {
        let b = sc.min(last_bin);
        if b <= cut {
            let slot = &mut start[b as usize];
            picked[*slot as usize] = (sc, i as u32);
            *slot += 1;
        }
    }
    if cut == last_bin {
        // The overflow bin holds different scores: order it.
        let from = acc as usize - hist[last_bin as usize] as usize;
        picked[from..].sort_unstable();
    }
    picked.truncate(c);
}
