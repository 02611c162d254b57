//! Data shared by the criterion benches.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Debian's wamerican list (package `wamerican`).
pub const DICTIONARY: &str = "/usr/share/dict/american-english";

/// The word list, or `fallback` generated lowercase words of 3–15 letters if it is missing.
pub fn words(fallback: usize) -> Vec<Vec<u8>> {
    if let Ok(text) = std::fs::read(DICTIONARY) {
        let list: Vec<Vec<u8>> = text
            .split(|&b| b == b'\n')
            .filter(|w| !w.is_empty())
            .map(<[u8]>::to_vec)
            .collect();
        if !list.is_empty() {
            return list;
        }
    }
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    (0..fallback)
        .map(|_| {
            let len = rng.gen_range(3..=15);
            (0..len).map(|_| rng.gen_range(b'a'..=b'z')).collect()
        })
        .collect()
}
