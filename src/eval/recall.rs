//! Recall of approximate answers against exact ones, and typo queries to measure it with.

/// Tolerance of threshold recall.
pub const RECALL_EPSILON: f64 = 1e-3;

/// Threshold recall@k of one answer: `truth` holds the true k smallest distances (sorted),
/// `found` the returned (item, distance) pairs. Duplicated items count once.
pub fn threshold_recall(truth: &[f64], found: &[(u32, f64)], k: usize) -> f64 {
    if k == 0 || truth.is_empty() {
        return 1.0;
    }
    let kth = truth[truth.len().min(k) - 1];
    let mut seen = std::collections::HashSet::new();
    let good = found
        .iter()
        .filter(|(i, d)| seen.insert(*i) && *d <= kth + RECALL_EPSILON)
        .count();
    good.min(k) as f64 / truth.len().min(k) as f64
}

/// Plain recall@k: the share of the true k items that were returned.
pub fn plain_recall(truth: &[u32], found: &[u32]) -> f64 {
    if truth.is_empty() {
        return 1.0;
    }
    let t: std::collections::HashSet<_> = truth.iter().collect();
    let f: std::collections::HashSet<_> = found.iter().collect();
    t.intersection(&f).count() as f64 / t.len() as f64
}

/// Typo queries: `count` items drawn at random, each with 1 to 3 random edits (insertion,
/// deletion, substitution or transposition of adjacent characters, with letters taken from
/// the item itself or a–z). Deterministic for a seed.
pub fn typo_queries<T: AsRef<str>>(items: &[T], count: usize, seed: u64) -> Vec<String> {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let alphabet: Vec<char> = ('a'..='z').collect();
    (0..count)
        .map(|_| {
            let mut w: Vec<char> = items[rng.gen_range(0..items.len())]
                .as_ref()
                .chars()
                .collect();
            let edits = rng.gen_range(1..=3);
            for _ in 0..edits {
                let pick = |rng: &mut rand_chacha::ChaCha8Rng, w: &[char]| {
                    if !w.is_empty() && rng.gen_bool(0.5) {
                        w[rng.gen_range(0..w.len())]
                    } else {
                        alphabet[rng.gen_range(0..alphabet.len())]
                    }
                };
                match rng.gen_range(0..4) {
                    0 => {
                        let c = pick(&mut rng, &w);
                        let at = rng.gen_range(0..=w.len());
                        w.insert(at, c);
                    }
                    1 if w.len() > 1 => {
                        let at = rng.gen_range(0..w.len());
                        w.remove(at);
                    }
                    2 if !w.is_empty() => {
                        let c = pick(&mut rng, &w);
                        let at = rng.gen_range(0..w.len());
                        w[at] = c;
                    }
                    _ if w.len() > 1 => {
                        let at = rng.gen_range(0..w.len() - 1);
                        w.swap(at, at + 1);
                    }
                    _ => {
                        let c = pick(&mut rng, &w);
                        w.push(c);
                    }
                }
            }
            w.into_iter().collect()
        })
        .collect()
}
