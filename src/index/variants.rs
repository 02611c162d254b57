//! The deletion-variant table: exact candidates for range queries of small radius.
//!
//! For every item, every string made from its key by deleting at most `R` chars (its
//! *variants*, `R` = 1 or 2) is hashed; the table maps each variant's hash to the items that
//! have it. A query within radius `r ≤ R` looks up its own variants with at most `r` chars
//! deleted and gets every item that shares one, deleted at most `r` chars from the item too
//! (each entry records the fewest deletions that make its variant); the true distance then
//! keeps those within `r`. (The method is the deletion neighbourhood of Bocek, Hunt and
//! Stiller, 2007.)
//!
//! # Why the candidates hold every answer
//!
//! Let `f(a, b) = max(|a|, |b|) − LCS(a, b)` (lengths in chars, LCS the longest common
//! subsequence). A common subsequence of that length is a variant of `a` with at most
//! `f(a, b)` chars deleted and of `b` with at most `f(a, b)` deleted. For `c` one edit from
//! `b`, `f(a, b) ≤ f(a, c) + 1`: an insertion raises the LCS by at most 1 and lowers no
//! length; a deletion lowers the longer length by at most 1 and raises no LCS; a
//! substitution, or a transposition of two adjacent chars `xy → yx`, leaves the lengths and
//! raises the LCS by at most 1 (`c` without the new char, or without `x`, is `b` without
//! one char). Every edit is undone by one edit of the same kind, so along a shortest path
//! of single edits from `a` to `b`, `f(a, b) ≤` its number of edits. That number is the
//! Levenshtein distance (insertions, deletions, substitutions), the unrestricted
//! Damerau–Levenshtein distance (plus adjacent transpositions: the shortest-path distance
//! of its edit graph, see `metric/damerau.rs`) and, for strings of one length, at most
//! the Hamming distance (substitutions only). So an item within `r` of the query, under
//! any of the three, shares a variant with it that each reaches by at most `r` deletions:
//! the table finds it. Those are the metrics [`supports`] names, on the index's keys
//! (after its normalisation) as sequences of Unicode scalar values, as their kernels read
//! them (invalid UTF-8 as one U+FFFD per invalid sequence). A hash that two variants share
//! only adds a candidate, which the true distance rejects: answers stay exact.
//!
//! # Layout (the section `deletion-variants`, also built in memory by `pairs`)
//!
//! ```text
//! 0..4    radius R (u32, 1 or 2)
//! 4..8    bucket bits B (u32, 1 to 30)
//! 8..16   items n (u64)
//! 16..24  entries E (u64, at most u32::MAX)
//! 24..64  zero
//! 64..    bucket starts: 2^B + 1 u32, rising from 0 to E
//! then, on the next 64-byte boundary, E entries of u64, each bucket's in rising order:
//!         bits 34..64  bits 2..32 of the variant's hash (its fingerprint)
//!         bits 32..34  the fewest chars deleted from the item to make the variant (0 to R)
//!         bits 0..32   the item number
//! ```
//!
//! A variant's bucket is the top `B` bits of its 64-bit hash ([`hash_chars`]); `B` is
//! chosen so that buckets hold about eight entries. Each (variant, item) is stored once:
//! 8 bytes an entry and 4 bytes a bucket, about 8.5 bytes an entry in all.
//!
//! ```
//! use waymark::index::variants::{VariantTable, Variants};
//!
//! let keys: Vec<&[u8]> = ["quay", "key", "quays", "strand"].map(str::as_bytes).to_vec();
//! let table = VariantTable::build(&keys, 1);
//! let view = Variants::open(table.bytes(), keys.len()).unwrap();
//! let mut found = Vec::new();
//! view.candidates(b"qay", 1, &mut Default::default(), &mut found);
//! assert!(found.contains(&0)); // quay: one deletion from each side meets at "qay"
//! assert!(!found.contains(&3));
//! ```

use rayon::prelude::*;
use std::sync::atomic::{AtomicU32, Ordering};

use crate::metric::MetricSpec;

/// The largest radius a table can be built for.
pub const MAX_RADIUS: u32 = 2;
/// Bytes of the table's header.
const HEADER: usize = 64;
/// Bytes per entry.
pub const ENTRY_BYTES: usize = 8;
/// Entries a bucket holds on average (the bucket count is chosen for it).
const PER_BUCKET: u64 = 8;
const MAX_BITS: u32 = 30;

/// Whether a table is exact for indexes of this metric: Levenshtein, unrestricted
/// Damerau–Levenshtein and Hamming (module documentation). Other metrics get no table.
pub fn supports(spec: &MetricSpec) -> bool {
    matches!(
        spec,
        MetricSpec::Levenshtein | MetricSpec::Damerau | MetricSpec::Hamming { .. }
    )
}

/// A 64-bit hash of a sequence of chars: for each char a rotate, xor and multiply, then the
/// length mixed in and splitmix64's finaliser. Fixed by the file format (changing it changes
/// every table).
#[inline]
fn hash_step(h: u64, c: char) -> u64 {
    (h.rotate_left(5) ^ u64::from(c as u32)).wrapping_mul(0x517c_c1b7_2722_0a95)
}

const HASH_SEED: u64 = 0x9e37_79b9_7f4a_7c15;

#[inline]
fn hash_finish(mut h: u64, len: usize) -> u64 {
    h ^= len as u64;
    h ^= h >> 30;
    h = h.wrapping_mul(0xbf58_476d_1ce4_e5b9);
    h ^= h >> 27;
    h = h.wrapping_mul(0x94d0_49bb_1331_11eb);
    h ^ (h >> 31)
}

/// The hash of `chars` as the table stores it.
pub fn hash_chars(chars: &[char]) -> u64 {
    hash_finish(
        chars.iter().fold(HASH_SEED, |h, &c| hash_step(h, c)),
        chars.len(),
    )
}

/// Working memory of look-ups and builds (reused across calls).
#[derive(Default)]
pub struct Scratch {
    chars: Vec<char>,
    prefix: Vec<u64>,
    variants: Vec<(u64, u8)>,
}

impl Scratch {
    /// The variants of `key` with at most `r` chars deleted: (hash, fewest deletions), one
    /// per distinct hash, sorted by hash.
    fn variants(&mut self, key: &[u8], r: u32) -> &[(u64, u8)] {
        self.chars.clear();
        self.chars.extend(String::from_utf8_lossy(key).chars());
        let c = &self.chars;
        let len = c.len();
        // prefix[i]: the hash state after c[..i].
        self.prefix.clear();
        self.prefix.push(HASH_SEED);
        for &ch in c {
            let h = *self.prefix.last().expect("seeded");
            self.prefix.push(hash_step(h, ch));
        }
        let out = &mut self.variants;
        out.clear();
        out.push((hash_finish(self.prefix[len], len), 0));
        if r >= 1 {
            for i in 0..len {
                let h = c[i + 1..]
                    .iter()
                    .fold(self.prefix[i], |h, &x| hash_step(h, x));
                out.push((hash_finish(h, len - 1), 1));
            }
        }
        if r >= 2 && len >= 2 {
            for i in 0..len {
                // The state after c[..i] and c[i+1..j], for j from i+1 up.
                let mut s = self.prefix[i];
                for j in i + 1..len {
                    let h = c[j + 1..].iter().fold(s, |h, &x| hash_step(h, x));
                    out.push((hash_finish(h, len - 2), 2));
                    s = hash_step(s, c[j]);
                }
            }
        }
        out.sort_unstable();
        out.dedup_by_key(|v| v.0);
        out
    }
}

/// Variants of an item of `len` chars with at most `r` deleted, counted with repeats (an
/// upper bound of its distinct variants).
pub fn variant_count(len: usize, r: u32) -> u64 {
    let l = len as u64;
    let mut n = 1;
    if r >= 1 {
        n += l;
    }
    if r >= 2 {
        n += l * l.saturating_sub(1) / 2;
    }
    n
}

/// The bucket bits for about `entries` entries.
fn bucket_bits(entries: u64) -> u32 {
    let want = (entries / PER_BUCKET).max(2);
    (64 - (want - 1).leading_zeros()).clamp(1, MAX_BITS)
}

/// Bytes of a table of `entries` entries with `bits` bucket bits.
fn table_len(bits: u32, entries: u64) -> Option<usize> {
    let starts = 4usize.checked_mul((1usize << bits) + 1)?;
    let at = (HEADER + starts).next_multiple_of(64);
    at.checked_add(usize::try_from(entries).ok()?.checked_mul(ENTRY_BYTES)?)
}

/// Where the entries start in a table with `bits` bucket bits.
fn entries_at(bits: u32) -> usize {
    (HEADER + 4 * ((1usize << bits) + 1)).next_multiple_of(64)
}

/// The most bytes building a table of radius `r` over keys of these lengths in chars
/// takes: the table (8 bytes an entry, counted with repeats, and its bucket starts) and
/// the bucket counters. The memory estimates of builds and of `pairs` add it.
pub fn build_estimate(lens: impl Iterator<Item = usize>, r: u32) -> u64 {
    let upper: u64 = lens.map(|l| variant_count(l, r)).sum();
    let bits = bucket_bits(upper);
    let buckets = 1u64 << bits;
    upper
        .saturating_mul(ENTRY_BYTES as u64)
        .saturating_add(8 * buckets + HEADER as u64 + 64)
}

/// Why a table cannot be built.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum BuildRefusal {
    /// More entries than a table holds (u32 bucket starts).
    TooManyEntries(u64),
    /// A radius other than 1 or 2.
    Radius(u32),
}

impl std::fmt::Display for BuildRefusal {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            BuildRefusal::TooManyEntries(e) => write!(
                f,
                "the deletion variants number up to {e}, more than a table holds ({})",
                u32::MAX
            ),
            BuildRefusal::Radius(r) => write!(
                f,
                "a deletion-variant table is built for a radius of 1 or 2, not {r}"
            ),
        }
    }
}

/// A table built in memory; its bytes are the section's.
pub struct VariantTable {
    bytes: Vec<u8>,
}

impl VariantTable {
    /// Builds the table of radius `r` (1 or 2) over `keys`; panics on a radius out of range
    /// or too many entries (see [`VariantTable::try_build`]).
    pub fn build(keys: &[&[u8]], r: u32) -> VariantTable {
        Self::try_build(keys, r).expect("a table within its limits")
    }

    /// Builds the table of radius `r` over `keys` (item `i` is `keys[i]`), in parallel.
    /// The same keys and radius give the same bytes.
    pub fn try_build(keys: &[&[u8]], r: u32) -> Result<VariantTable, BuildRefusal> {
        if !(1..=MAX_RADIUS).contains(&r) {
            return Err(BuildRefusal::Radius(r));
        }
        let upper: u64 = keys
            .par_iter()
            .map(|k| variant_count(String::from_utf8_lossy(k).chars().count(), r))
            .sum();
        if upper > u64::from(u32::MAX) || keys.len() > u32::MAX as usize {
            return Err(BuildRefusal::TooManyEntries(upper));
        }
        let bits = bucket_bits(upper);
        let nb = 1usize << bits;
        let shift = 64 - bits;
        // Pass 1: entries per bucket.
        let counts: Vec<AtomicU32> = (0..nb).map(|_| AtomicU32::new(0)).collect();
        keys.par_iter().for_each_init(Scratch::default, |s, k| {
            for &(h, _) in s.variants(k, r) {
                counts[(h >> shift) as usize].fetch_add(1, Ordering::Relaxed);
            }
        });
        let mut starts = Vec::with_capacity(nb + 1);
        let mut total = 0u64;
        starts.push(0u32);
        for c in &counts {
            total += u64::from(c.load(Ordering::Relaxed));
            starts.push(total as u32);
        }
        drop(counts);
        let at = entries_at(bits);
        let len = table_len(bits, total).ok_or(BuildRefusal::TooManyEntries(total))?;
        let mut bytes = vec![0u8; len];
        bytes[0..4].copy_from_slice(&r.to_le_bytes());
        bytes[4..8].copy_from_slice(&bits.to_le_bytes());
        bytes[8..16].copy_from_slice(&(keys.len() as u64).to_le_bytes());
        bytes[16..24].copy_from_slice(&total.to_le_bytes());
        for (b, s) in bytes[HEADER..].chunks_exact_mut(4).zip(&starts) {
            b.copy_from_slice(&s.to_le_bytes());
        }
        // Pass 2: each worker owns a run of buckets (a run of the entries), goes through
        // every item and writes the entries of its buckets. Variants are made again
        // rather than held: they are cheap, and the table is the memory that counts.
        let parts = rayon::current_num_threads().clamp(1, nb);
        let mut slices: Vec<(usize, &mut [u8])> = Vec::with_capacity(parts);
        let mut rest = &mut bytes[at..];
        for p in 0..parts {
            let (b0, b1) = (nb * p / parts, nb * (p + 1) / parts);
            let n = (starts[b1] - starts[b0]) as usize * ENTRY_BYTES;
            let (mine, tail) = std::mem::take(&mut rest).split_at_mut(n);
            slices.push((b0, mine));
            rest = tail;
        }
        slices
            .into_par_iter()
            .enumerate()
            .for_each(|(p, (b0, out))| {
                let b1 = nb * (p + 1) / parts;
                let base = starts[b0];
                let mut cursor: Vec<u32> = starts[b0..b1].iter().map(|&s| s - base).collect();
                let mut s = Scratch::default();
                for (i, k) in keys.iter().enumerate() {
                    for &(h, del) in s.variants(k, r) {
                        let b = (h >> shift) as usize;
                        if (b0..b1).contains(&b) {
                            let at = cursor[b - b0] as usize * ENTRY_BYTES;
                            cursor[b - b0] += 1;
                            out[at..at + ENTRY_BYTES]
                                .copy_from_slice(&entry(h, del, i as u32).to_le_bytes());
                        }
                    }
                }
                // Each bucket's entries in rising order.
                let mut buf: Vec<u64> = Vec::new();
                for b in b0..b1 {
                    let (s0, s1) = ((starts[b] - base) as usize, (starts[b + 1] - base) as usize);
                    if s1 - s0 < 2 {
                        continue;
                    }
                    let run = &mut out[s0 * ENTRY_BYTES..s1 * ENTRY_BYTES];
                    buf.clear();
                    buf.extend(run.chunks_exact(8).map(read_u64));
                    buf.sort_unstable();
                    for (o, e) in run.chunks_exact_mut(8).zip(&buf) {
                        o.copy_from_slice(&e.to_le_bytes());
                    }
                }
            });
        Ok(VariantTable { bytes })
    }

    /// The table's bytes (the section's contents).
    pub fn bytes(&self) -> &[u8] {
        &self.bytes
    }

    /// The table's size in bytes.
    pub fn len(&self) -> usize {
        self.bytes.len()
    }

    /// Whether the table has no bytes (never: it has at least a header).
    pub fn is_empty(&self) -> bool {
        self.bytes.is_empty()
    }
}

/// One entry: fingerprint, deletions, item.
#[inline]
fn entry(h: u64, del: u8, item: u32) -> u64 {
    let fp = (h as u32) >> 2;
    (u64::from(fp) << 34) | (u64::from(del) << 32) | u64::from(item)
}

#[inline]
fn read_u64(b: &[u8]) -> u64 {
    u64::from_le_bytes(b.try_into().expect("8 bytes"))
}

#[inline]
fn read_u32(b: &[u8]) -> u32 {
    u32::from_le_bytes(b.try_into().expect("4 bytes"))
}

/// A table read in place (from an index section or a [`VariantTable`]).
#[derive(Clone, Copy, Debug)]
pub struct Variants<'a> {
    radius: u32,
    bits: u32,
    entries: u64,
    starts: &'a [u8],
    data: &'a [u8],
}

impl<'a> Variants<'a> {
    /// Reads the header of a table for `n` items and checks that its size fits it (time
    /// independent of the table's size); [`Variants::check`] checks the rest.
    pub fn open(bytes: &'a [u8], n: usize) -> Result<Variants<'a>, String> {
        if bytes.len() < HEADER {
            return Err(format!("{} bytes, shorter than its header", bytes.len()));
        }
        let radius = read_u32(&bytes[0..4]);
        let bits = read_u32(&bytes[4..8]);
        let items = read_u64(&bytes[8..16]);
        let entries = read_u64(&bytes[16..24]);
        if !(1..=MAX_RADIUS).contains(&radius) {
            return Err(format!("radius {radius}; tables have a radius of 1 or 2"));
        }
        if !(1..=MAX_BITS).contains(&bits) {
            return Err(format!("{bits} bucket bits, not 1 to {MAX_BITS}"));
        }
        if items != n as u64 {
            return Err(format!("built for {items} items; the index has {n}"));
        }
        if entries > u64::from(u32::MAX) {
            return Err(format!("{entries} entries, more than a table holds"));
        }
        if bytes[24..HEADER].iter().any(|&b| b != 0) {
            return Err("non-zero bytes in its header's padding".into());
        }
        let want = table_len(bits, entries);
        if want != Some(bytes.len()) {
            return Err(format!(
                "{} bytes; a table of {entries} entries and 2^{bits} buckets has {}",
                bytes.len(),
                want.map_or("more than fits".into(), |w| w.to_string())
            ));
        }
        let nb = 1usize << bits;
        let at = entries_at(bits);
        Ok(Variants {
            radius,
            bits,
            entries,
            starts: &bytes[HEADER..HEADER + 4 * (nb + 1)],
            data: &bytes[at..],
        })
    }

    /// Checks every field a look-up relies on, in one pass: the bucket starts rise from 0
    /// to the entry count, every entry's item is below `n` and its deletions at most the
    /// radius, each bucket's entries rise strictly, and the padding is zero. (An entry
    /// left out or moved gives wrong answers, never a crash; [`Variants::same_as_built`]
    /// compares the whole table with one built again.)
    pub fn check(&self, bytes: &[u8], n: usize) -> Result<(), String> {
        let nb = 1usize << self.bits;
        let pad = &bytes[HEADER + 4 * (nb + 1)..entries_at(self.bits)];
        if pad.iter().any(|&b| b != 0) {
            return Err("non-zero bytes between the bucket starts and the entries".into());
        }
        if self.start(0) != 0 || u64::from(self.start(nb)) != self.entries {
            return Err(format!(
                "bucket starts run from {} to {}, not from 0 to its {} entries",
                self.start(0),
                self.start(nb),
                self.entries
            ));
        }
        (0..nb).into_par_iter().try_for_each(|b| {
            let (s0, s1) = (self.start(b), self.start(b + 1));
            if s1 < s0 {
                return Err(format!("bucket {b} starts at {s0} and ends at {s1}"));
            }
            let mut prev: Option<u64> = None;
            for j in s0..s1 {
                let e = self.entry(j as usize);
                let (item, del) = (e as u32, ((e >> 32) & 3) as u32);
                if item as usize >= n {
                    return Err(format!(
                        "entry {j} names item {item}; the index has {n} items"
                    ));
                }
                if del > self.radius {
                    return Err(format!(
                        "entry {j} has {del} deletions, more than the radius {}",
                        self.radius
                    ));
                }
                if prev.is_some_and(|p| p >= e) {
                    return Err(format!("bucket {b}: entry {j} is out of order or repeated"));
                }
                prev = Some(e);
            }
            Ok(())
        })
    }

    /// Whether the table is the one `keys` give (built again and compared byte for byte).
    pub fn same_as_built(bytes: &[u8], keys: &[&[u8]], radius: u32) -> bool {
        VariantTable::try_build(keys, radius).is_ok_and(|t| t.bytes() == bytes)
    }

    /// The radius the table was built for: look-ups up to it are exact.
    pub fn radius(&self) -> u32 {
        self.radius
    }

    /// Number of (variant, item) entries.
    pub fn entries(&self) -> u64 {
        self.entries
    }

    #[inline]
    fn start(&self, b: usize) -> u32 {
        read_u32(&self.starts[4 * b..4 * b + 4])
    }

    #[inline]
    fn entry(&self, j: usize) -> u64 {
        self.data
            .get(j * ENTRY_BYTES..(j + 1) * ENTRY_BYTES)
            .map_or(u64::MAX, read_u64)
    }

    /// The items that share with `key` a variant that each makes with at most `r` chars
    /// deleted (`r` at most [`Variants::radius`]), sorted, each once, into `out`. Every item
    /// within `r` of `key` under the metrics of [`supports`] is among them.
    pub fn candidates(&self, key: &[u8], r: u32, s: &mut Scratch, out: &mut Vec<u32>) {
        out.clear();
        let r = r.min(self.radius);
        let shift = 64 - self.bits;
        for &(h, _) in s.variants(key, r) {
            let b = (h >> shift) as usize;
            let (s0, s1) = (self.start(b) as usize, self.start(b + 1) as usize);
            let fp = u64::from((h as u32) >> 2);
            // First entry of the bucket at or above this fingerprint.
            let (mut lo, mut hi) = (s0, s1.max(s0));
            while lo < hi {
                let mid = (lo + hi) / 2;
                if self.entry(mid) >> 34 < fp {
                    lo = mid + 1;
                } else {
                    hi = mid;
                }
            }
            let mut j = lo;
            while j < s1 {
                let e = self.entry(j);
                if e >> 34 != fp {
                    break;
                }
                if ((e >> 32) & 3) as u32 <= r {
                    out.push(e as u32);
                }
                j += 1;
            }
        }
        out.sort_unstable();
        out.dedup();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lev(a: &str, b: &str) -> usize {
        // strsim (a general-purpose string-distance crate) as the reference.
        strsim::levenshtein(a, b)
    }

    #[test]
    fn variants_are_every_deletion_once_with_the_fewest_deletions() {
        let mut s = Scratch::default();
        let v: Vec<(u64, u8)> = s.variants(b"abca", 2).to_vec();
        // By hand: "abca"; 1 deletion: bca, aca, aba, abc; 2: ca, ba, bc, aa, ac, ab.
        let words = [
            ("abca", 0),
            ("bca", 1),
            ("aca", 1),
            ("aba", 1),
            ("abc", 1),
            ("ca", 2),
            ("ba", 2),
            ("bc", 2),
            ("aa", 2),
            ("ac", 2),
            ("ab", 2),
        ];
        let mut want: Vec<(u64, u8)> = words
            .iter()
            .map(|&(w, d)| (hash_chars(&w.chars().collect::<Vec<_>>()), d))
            .collect();
        want.sort_unstable();
        assert_eq!(v, want);
        // A repeated char: "aab" loses either a to the same "ab", listed once.
        assert_eq!(s.variants(b"aab", 1).len(), 3);
    }

    #[test]
    fn a_table_finds_every_item_within_its_radius_on_random_words() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let alphabet: Vec<char> = "abcdeé".chars().collect();
        let word = |rng: &mut rand_chacha::ChaCha8Rng| -> String {
            let len = rng.gen_range(0..7);
            (0..len)
                .map(|_| alphabet[rng.gen_range(0..alphabet.len())])
                .collect()
        };
        let words: Vec<String> = (0..600).map(|_| word(&mut rng)).collect();
        let keys: Vec<&[u8]> = words.iter().map(|w| w.as_bytes()).collect();
        for r in 1..=2 {
            let t = VariantTable::build(&keys, r);
            let v = Variants::open(t.bytes(), keys.len()).unwrap();
            v.check(t.bytes(), keys.len()).unwrap();
            assert!(Variants::same_as_built(t.bytes(), &keys, r));
            let mut s = Scratch::default();
            let mut out = Vec::new();
            for _ in 0..200 {
                let q = word(&mut rng);
                for rq in 0..=r {
                    v.candidates(q.as_bytes(), rq, &mut s, &mut out);
                    for (i, w) in words.iter().enumerate() {
                        if lev(&q, w) <= rq as usize {
                            assert!(out.binary_search(&(i as u32)).is_ok(), "{q} {w} {rq}");
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn crafted_tables_are_refused() {
        let keys: Vec<&[u8]> = ["quay", "key", "strand"].map(str::as_bytes).to_vec();
        let t = VariantTable::build(&keys, 2);
        let good = t.bytes().to_vec();
        let check = |b: &[u8], n: usize| Variants::open(b, n).and_then(|v| v.check(b, n));
        check(&good, 3).unwrap();
        assert!(check(&good, 4).unwrap_err().contains("built for 3 items"));
        let mut b = good.clone();
        b[0] = 3;
        assert!(check(&b, 3).unwrap_err().contains("radius 3"));
        let mut b = good.clone();
        b[4] = 31;
        assert!(check(&b, 3).unwrap_err().contains("bucket bits"));
        assert!(check(&good[..good.len() - 8], 3)
            .unwrap_err()
            .contains("bytes; a table"));
        // The last entry names an item past the index.
        let mut b = good.clone();
        let at = b.len() - 8;
        b[at..at + 4].copy_from_slice(&9u32.to_le_bytes());
        assert!(check(&b, 3).unwrap_err().contains("names item 9"));
        // A bucket start past the next one.
        let mut b = good.clone();
        b[HEADER + 4..HEADER + 8].copy_from_slice(&u32::MAX.to_le_bytes());
        assert!(check(&b, 3).is_err());
    }
}
