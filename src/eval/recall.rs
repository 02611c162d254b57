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
    let alphabet: Vec<char> = ('a'..='z').collect();
    edited(items, count, seed, |rng| {
        alphabet[rand::Rng::gen_range(rng, 0..alphabet.len())]
    })
}

/// Edit queries in the list's own alphabet: as [`typo_queries`] (1 to 3 random edits of a
/// random item), but a letter not taken from the item itself is a character of another
/// random item, so letters come as often as the list uses them: accented letters for a list
/// of French or German words, the four bases for DNA, and no a–z for a list that has none.
/// Deterministic for a seed; independent seeds give independent sets.
///
/// ```
/// use waymark::eval::edit_queries;
///
/// let items = ["ACGTACGT", "TTGACCAG", "GATTACAG"];
/// for q in edit_queries(&items, 20, 3) {
///     assert!(q.chars().all(|c| "ACGT".contains(c)), "{q}");
/// }
/// ```
pub fn edit_queries<T: AsRef<str>>(items: &[T], count: usize, seed: u64) -> Vec<String> {
    use rand::Rng;
    if items.is_empty() {
        return Vec::new();
    }
    // Letters for the edits come from their own stream, so that the words picked and the
    // edits made are those of the same seed whatever the letters drawn.
    let mut letters = rand_chacha::ChaCha8Rng::seed_from_u64(seed ^ 0x5eed_1e77);
    let mut other = move |_: &mut rand_chacha::ChaCha8Rng| loop {
        let w = items[letters.gen_range(0..items.len())].as_ref();
        let n = w.chars().count();
        if n > 0 {
            break w
                .chars()
                .nth(letters.gen_range(0..n))
                .expect("within the item");
        }
    };
    edited(items, count, seed, &mut other)
}

use rand::SeedableRng;

/// `count` random items with 1 to 3 random edits each; a letter inserted or substituted is
/// one of the item's own half of the time, else `other`'s.
fn edited<T: AsRef<str>>(
    items: &[T],
    count: usize,
    seed: u64,
    mut other: impl FnMut(&mut rand_chacha::ChaCha8Rng) -> char,
) -> Vec<String> {
    use rand::Rng;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    if items.is_empty() {
        return Vec::new();
    }
    (0..count)
        .map(|_| {
            let mut w: Vec<char> = items[rng.gen_range(0..items.len())]
                .as_ref()
                .chars()
                .collect();
            edit(&mut w, &mut rng, &mut other, false);
            w.into_iter().collect()
        })
        .collect()
}

/// Makes 1 to 3 random edits of `w` (insertion, deletion, substitution or transposition of
/// adjacent characters; only substitutions when `substitute_only`); a letter inserted or
/// substituted is one of `w`'s own half of the time, else `other`'s.
fn edit(
    w: &mut Vec<char>,
    rng: &mut rand_chacha::ChaCha8Rng,
    other: &mut impl FnMut(&mut rand_chacha::ChaCha8Rng) -> char,
    substitute_only: bool,
) {
    use rand::Rng;
    let edits = rng.gen_range(1..=3);
    for _ in 0..edits {
        let mut pick = |rng: &mut rand_chacha::ChaCha8Rng, w: &[char]| {
            if !w.is_empty() && rng.gen_bool(0.5) {
                w[rng.gen_range(0..w.len())]
            } else {
                other(rng)
            }
        };
        let op = rng.gen_range(0..4);
        match if substitute_only { 2 } else { op } {
            0 => {
                let c = pick(rng, w);
                let at = rng.gen_range(0..=w.len());
                w.insert(at, c);
            }
            1 if w.len() > 1 => {
                let at = rng.gen_range(0..w.len());
                w.remove(at);
            }
            2 if !w.is_empty() => {
                let c = pick(rng, w);
                let at = rng.gen_range(0..w.len());
                // A substitution keeps the length in bytes too (Hamming compares bytes).
                if !substitute_only || c.len_utf8() == w[at].len_utf8() {
                    w[at] = c;
                }
            }
            _ if substitute_only => {}
            _ if w.len() > 1 => {
                let at = rng.gen_range(0..w.len() - 1);
                w.swap(at, at + 1);
            }
            _ => {
                let c = pick(rng, w);
                w.push(c);
            }
        }
    }
}

/// Each of `items`, in order, with 1 to 3 random edits as [`edit_queries`] makes them
/// (only substitutions, which keep the length, with `substitute_only`), letters taken from
/// the item itself or from another of `items`. Deterministic for a seed.
///
/// ```
/// use waymark::eval::edits_of;
///
/// let items = ["ACGTACGT", "TTGACCAG", "GATTACAG"];
/// let edited = edits_of(&items, 5, true);
/// assert_eq!(edited.len(), 3);
/// for (e, i) in edited.iter().zip(items) {
///     assert_eq!(e.len(), i.len());
///     assert!(e.chars().all(|c| "ACGT".contains(c)), "{e}");
/// }
/// ```
pub fn edits_of<T: AsRef<str>>(items: &[T], seed: u64, substitute_only: bool) -> Vec<String> {
    use rand::Rng;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut letters = rand_chacha::ChaCha8Rng::seed_from_u64(seed ^ 0x5eed_1e77);
    let mut other = |_: &mut rand_chacha::ChaCha8Rng| {
        for _ in 0..64 {
            let w = items[letters.gen_range(0..items.len())].as_ref();
            let n = w.chars().count();
            if n > 0 {
                return w
                    .chars()
                    .nth(letters.gen_range(0..n))
                    .expect("within the item");
            }
        }
        'e'
    };
    items
        .iter()
        .map(|item| {
            let mut w: Vec<char> = item.as_ref().chars().collect();
            edit(&mut w, &mut rng, &mut other, substitute_only);
            w.into_iter().collect()
        })
        .collect()
}

/// Natural variants: up to `count` items of `other` that `list` does not hold (compared as
/// given), drawn at random without repeats, in the order of `other`. Two lists of one
/// language (a British and an American spelling list) give spellings of the same words
/// that the index does not hold. Deterministic for a seed.
///
/// ```
/// use waymark::eval::variants_missing_from;
///
/// let us = ["color", "center", "harbor"];
/// let gb = ["colour", "centre", "harbour", "color"];
/// assert_eq!(variants_missing_from(&us, &gb, 10, 0), ["colour", "centre", "harbour"]);
/// ```
pub fn variants_missing_from<T: AsRef<str>, U: AsRef<str>>(
    list: &[T],
    other: &[U],
    count: usize,
    seed: u64,
) -> Vec<String> {
    let have: std::collections::HashSet<&str> = list.iter().map(|s| s.as_ref()).collect();
    let missing: Vec<&str> = other
        .iter()
        .map(|s| s.as_ref())
        .filter(|s| !s.is_empty() && !have.contains(s))
        .collect();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let take = count.min(missing.len());
    let mut picked = rand::seq::index::sample(&mut rng, missing.len(), take).into_vec();
    picked.sort_unstable();
    picked.into_iter().map(|i| missing[i].to_string()).collect()
}
