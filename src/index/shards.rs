//! Sharded builds: one embedding chosen once, many parts embedded against it independently.
//!
//! A large input is indexed in three steps, which may run on one machine
//! ([`build_sharded`], `waymark build --shards N`) or on many (a job per shard):
//!
//! 1. **The seed.** An ordinary index of a sample of the items ([`seed_sample`],
//!    [`build_seed`]): its build chooses the reference items (landmarks, reference sets or
//!    FastMap pivots) and the coordinate scale, and its file holds them. The seed is not a
//!    part of the sharded index (unless its caller lists it as one); it is only read.
//! 2. **The shards.** Each shard's items are embedded against the seed's reference items and
//!    written as one part file ([`build_shard`]) named by its shard number and the SHA-256
//!    of its contents: `shard-00003-0123456789abcdef.wmk`. The file is written under a
//!    temporary name in the same folder and renamed, so a task that is killed leaves no
//!    file under a shard name, and a task run twice (retried, or speculatively) writes the
//!    same bytes under the same name: the second rename replaces the file by an identical
//!    one.
//! 3. **The list.** [`write_parts`] checks the shard files (names, contents, one embedding),
//!    links them into the index's parts folder (`INDEX.parts/`) and writes the list file at
//!    `INDEX` atomically. The result is an index in parts ([`super::parts`]): it opens with
//!    [`Parts::open`](super::parts::Parts::open) and takes `query`, `add`, `remove` and
//!    `compact` like a grown one.
//!
//! Item numbers run across the shards in shard order (shard 0's items first). The ids are
//! the ones given with each shard's items; for record numbers, shard `s` takes the numbers
//! from the count of items of shards `0..s` up ([`record_ids`]), which is what an ordinary
//! build of the shards' items concatenated in shard order gives.
//!
//! ```no_run
//! use waymark::index::shards::{build_seed, build_shard, record_ids, seed_sample, write_parts};
//! use waymark::index::{BuildOptions, Index};
//! use waymark::ingest::{Corpus, Ids};
//!
//! let words: Vec<String> = ["harbour", "harbor", "arbour", "harbours", "larboard"]
//!     .map(String::from)
//!     .to_vec();
//! let all = Corpus::new(words.clone(), None, Ids::Int((0..5).collect()))?;
//! let opts = BuildOptions { dim: 2, ..BuildOptions::default() };
//! build_seed(&seed_sample(&all, 4, 0), "words", &opts, Some(5), "seed.wmk".as_ref())?;
//! let seed = Index::open("seed.wmk".as_ref())?;
//! let first = Corpus::new(words[..3].to_vec(), None, record_ids(0, 3))?;
//! let second = Corpus::new(words[3..].to_vec(), None, record_ids(3, 2))?;
//! let a = build_shard(&first, "words", &seed, "shards".as_ref(), 0, Vec::new())?;
//! let b = build_shard(&second, "words", &seed, "shards".as_ref(), 1, Vec::new())?;
//! write_parts("words.wmk".as_ref(), &[a, b])?;
//! # Ok::<(), waymark::Error>(())
//! ```

use std::ops::Range;
use std::path::{Path, PathBuf};

use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use sha2::{Digest, Sha256};

use super::build::{write_part, PartCoords};
use super::parts::{
    fingerprint, hex_encode, part_digest, parts_dir, remove_unlisted, sync_dir, write_list,
    PartEntry, PartsList, WriterLock, MAX_PARTS,
};
use super::{build_index_with, default_candidates, BuildOptions, BuildReport, Index};
use crate::error::{Error, Result};
use crate::ingest::{Corpus, Ids};

/// The most shards an index has: shard numbers run from 0 to `MAX_SHARDS - 1` (the most
/// parts a list names).
pub const MAX_SHARDS: usize = MAX_PARTS;

/// Hexadecimal digits of the content checksum in a shard file's name.
const NAME_HASH_DIGITS: usize = 16;

/// The file name of shard `shard` whose contents have the SHA-256 `sha256_hex`:
/// `shard-NNNNN-` and the first 16 hexadecimal digits of the checksum, then `.wmk`.
///
/// ```
/// use waymark::index::shards::{shard_name, shard_number};
///
/// let name = shard_name(3, "0123456789abcdef0123");
/// assert_eq!(name, "shard-00003-0123456789abcdef.wmk");
/// assert_eq!(shard_number(&name), Some(3));
/// assert_eq!(shard_number("part-0123456789abcdef.wmk"), None);
/// ```
pub fn shard_name(shard: usize, sha256_hex: &str) -> String {
    let h = &sha256_hex[..NAME_HASH_DIGITS.min(sha256_hex.len())];
    format!("shard-{shard:05}-{h}.wmk")
}

/// The shard number of a shard file name ([`shard_name`]), or `None` when `name` is not
/// one.
pub fn shard_number(name: &str) -> Option<usize> {
    let rest = name.strip_prefix("shard-")?.strip_suffix(".wmk")?;
    let (num, hash) = rest.split_once('-')?;
    let ok = num.len() == 5
        && num.bytes().all(|b| b.is_ascii_digit())
        && hash.len() == NAME_HASH_DIGITS
        && hash.bytes().all(|b| matches!(b, b'0'..=b'9' | b'a'..=b'f'));
    ok.then(|| num.parse().ok()).flatten()
}

/// Integer ids `first, first + 1, …` for `n` items: the record numbers of a shard whose
/// first item is record `first` of the whole input.
pub fn record_ids(first: i64, n: usize) -> Ids {
    Ids::Int((first..first.saturating_add(n as i64)).collect())
}

/// Up to `size` items of `corpus` chosen at random (by `seed`), in their order: the items
/// a seed index is built from.
pub fn seed_sample(corpus: &Corpus, size: usize, seed: u64) -> Corpus {
    let n = corpus.items.len();
    let mut chosen: Vec<usize> = if size >= n {
        (0..n).collect()
    } else {
        sample(&mut ChaCha8Rng::seed_from_u64(seed), n, size).into_vec()
    };
    chosen.sort_unstable();
    subset(corpus, chosen.into_iter())
}

/// The items `which` of `corpus`, with their keys and ids.
fn subset(corpus: &Corpus, which: impl Iterator<Item = usize> + Clone) -> Corpus {
    let items: Vec<String> = which.clone().map(|i| corpus.items[i].clone()).collect();
    let keys = corpus
        .keys
        .as_ref()
        .map(|k| which.clone().map(|i| k[i].clone()).collect());
    let ids = match &corpus.ids {
        Ids::Int(v) => Ids::Int(which.map(|i| v[i]).collect()),
        Ids::Text(v) => Ids::Text(which.map(|i| v[i].clone()).collect()),
    };
    Corpus {
        records: items.len(),
        items,
        keys,
        ids,
        blank_skipped: 0,
    }
}

/// Builds the seed of a sharded index at `dest`: an ordinary index of `sample` (build it
/// with [`seed_sample`] or take the sample any way you like) whose reference items and
/// coordinate scale every shard then uses. `total`, the number of items the sharded index
/// will hold, sets the default candidates stored ([`default_candidates`]) when
/// `opts.candidates` is 0, as a build of that many items would; without it the sample's
/// own size does. No recall curve is measured (the sample's curve is not the whole's).
pub fn build_seed(
    sample: &Corpus,
    source: &str,
    opts: &BuildOptions,
    total: Option<usize>,
    dest: &Path,
) -> Result<BuildReport> {
    let opts = BuildOptions {
        candidates: match (opts.candidates, total) {
            (0, Some(t)) => default_candidates(t),
            (c, _) => c,
        },
        ..opts.clone()
    };
    build_index_with(sample, source, &opts, dest, &())
}

/// Embeds the items of `corpus` against the reference items of `seed` and writes them as
/// shard `shard` in `folder` (created if missing); returns the file's path
/// (`folder/shard-NNNNN-HASH.wmk`, [`shard_name`]).
///
/// The corpus's keys must be made with the seed's normalisation (the seed's metadata has
/// it); its metric is the seed's. The file is written under a hidden temporary name in
/// `folder` and renamed, so the same items written twice as the same shard leave one file;
/// once it is named, the temporary files that killed writers of the same shard left in
/// `folder` are removed (only names of that pattern, only those no live writer holds).
/// `inputs` are files the items were read from (never written over).
pub fn build_shard(
    corpus: &Corpus,
    source: &str,
    seed: &Index,
    folder: &Path,
    shard: usize,
    inputs: Vec<PathBuf>,
) -> Result<PathBuf> {
    if shard >= MAX_SHARDS {
        return Err(Error::Usage(format!(
            "{source}: shard number {shard} is out of range (0 to {})",
            MAX_SHARDS - 1
        )));
    }
    std::fs::create_dir_all(folder).map_err(|e| io(folder, e))?;
    let base = seed.meta();
    let refs = seed.reference_keys();
    let small_radius = seed.variants_summary().map(|(r, _, _)| r);
    // A name of this writer's own, hidden (a leading dot: never a part name), so that two
    // tasks writing the same shard at once never share a file.
    let unnamed = folder.join(format!(
        ".shard-{shard:05}.{:016x}.unnamed",
        rand::random::<u64>()
    ));
    let written = write_part(
        corpus,
        source,
        base,
        base.metric_spec.clone(),
        super::parts::graph_of(seed)?,
        &refs,
        PartCoords::Embed,
        small_radius,
        inputs,
        &unnamed,
    );
    let named = written.and_then(|_| {
        // Locked while it is hashed and renamed, so that another writer's clean-up
        // ([`remove_stale_temporaries`]) leaves it alone.
        let held = std::fs::File::open(&unnamed).map_err(|e| io(&unnamed, e))?;
        held.lock().map_err(|e| io(&unnamed, e))?;
        let sum = file_sha256(&unnamed)?;
        let dest = folder.join(shard_name(shard, &sum));
        std::fs::rename(&unnamed, &dest).map_err(|e| io(&dest, e))?;
        sync_dir(folder)?;
        Ok(dest)
    });
    if named.is_err() {
        let _ = std::fs::remove_file(&unnamed);
    } else {
        remove_stale_temporaries(folder, shard);
    }
    named
}

/// Whether `file` is a temporary file of a writer of shard `shard` ([`build_shard`]): its
/// hidden name before the rename, `.shard-NNNNN.HHHHHHHHHHHHHHHH.unnamed` (16 lowercase hex
/// digits), or the partial file that name is written through,
/// `..shard-NNNNN.HHHHHHHHHHHHHHHH.unnamed.XXXXXX.waymark-partial`.
fn is_shard_temporary(file: &str, shard: usize) -> bool {
    let hex16 =
        |h: &str| h.len() == 16 && h.bytes().all(|b| matches!(b, b'0'..=b'9' | b'a'..=b'f'));
    let prefix = format!(".shard-{shard:05}.");
    let unnamed = |f: &str| {
        f.strip_prefix(prefix.as_str())
            .and_then(|f| f.strip_suffix(".unnamed"))
            .is_some_and(hex16)
    };
    if unnamed(file) {
        return true;
    }
    file.strip_prefix('.')
        .and_then(|f| f.strip_suffix(".waymark-partial"))
        .and_then(|f| f.rsplit_once('.'))
        .is_some_and(|(dest, rand)| {
            rand.len() == 6 && rand.bytes().all(|b| b.is_ascii_alphanumeric()) && unnamed(dest)
        })
}

/// Removes, from `folder`, the temporary files that writers of shard `shard` left when they
/// were killed (a task stopped mid-write, then run again): only names of that pattern
/// ([`is_shard_temporary`]), only plain files, and only those whose lock can be taken (a
/// live writer holds its file's lock). Best effort: whatever cannot be read, locked or
/// removed stays, and no error stops the build.
fn remove_stale_temporaries(folder: &Path, shard: usize) {
    let Ok(entries) = std::fs::read_dir(folder) else {
        return;
    };
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        if !is_shard_temporary(&name, shard) {
            continue;
        }
        let path = e.path();
        let Ok(meta) = std::fs::symlink_metadata(&path) else {
            continue;
        };
        if !meta.file_type().is_file() {
            continue;
        }
        let Ok(file) = std::fs::File::open(&path) else {
            continue;
        };
        if file.try_lock().is_err() {
            continue;
        }
        // Still the file that was locked (not renamed into place meanwhile)?
        let same = match (file.metadata(), std::fs::symlink_metadata(&path)) {
            (Ok(a), Ok(b)) => super::file::file_id(&a) == super::file::file_id(&b),
            _ => false,
        };
        if same {
            let _ = std::fs::remove_file(&path);
        }
    }
}

/// The SHA-256 (hexadecimal) of the file at `path`.
fn file_sha256(path: &Path) -> Result<String> {
    use std::io::Read;
    let mut f = std::fs::File::open(path).map_err(|e| io(path, e))?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        match f.read(&mut buf) {
            Ok(0) => break,
            Ok(k) => h.update(&buf[..k]),
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(io(path, e)),
        }
    }
    Ok(hex_encode(&h.finalize()))
}

fn io(path: &Path, source: std::io::Error) -> Error {
    Error::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// What [`write_parts`] wrote.
#[derive(Clone, Debug, PartialEq)]
pub struct PartsWritten {
    /// Shards listed.
    pub shards: usize,
    /// Items across them.
    pub items: usize,
    /// The embedding fingerprint they share ([`fingerprint`]).
    pub fingerprint: String,
}

/// Writes the list file at `index` for the shard files `shards` (any order; listed in shard
/// order), atomically, and links (or copies) each into the index's parts folder
/// (`INDEX.parts/`) unless it is there already.
///
/// Refused, with nothing written: a file whose name is not a shard name ([`shard_name`]) or
/// whose contents do not have the checksum its name carries; shard numbers that are not
/// `0..N` each once (a shard missing, or two files of one shard); shards whose embeddings
/// differ (built from different seeds); shards with ids of different kinds.
///
/// The files of the parts folder that the new list does not name are removed (as every
/// writer of an index in parts does): keep a folder of shards apart from `INDEX.parts/` if
/// it holds other files.
pub fn write_parts(index: &Path, shards: &[PathBuf]) -> Result<PartsWritten> {
    let _lock = WriterLock::take(index)?;
    write_parts_locked(index, shards)
}

/// [`write_parts`] under a lock the caller holds.
fn write_parts_locked(index: &Path, shards: &[PathBuf]) -> Result<PartsWritten> {
    let where_ = index.display();
    if shards.is_empty() {
        return Err(Error::Usage(format!("{where_}: no shard files to list")));
    }
    if shards.len() > MAX_SHARDS {
        return Err(Error::Usage(format!(
            "{where_}: {} shard files; an index lists at most {MAX_SHARDS}",
            shards.len()
        )));
    }
    super::file::refuse_input_as_output(index, shards)?;
    let mut numbered: Vec<(usize, &PathBuf)> = Vec::with_capacity(shards.len());
    for p in shards {
        let name = p.file_name().and_then(|n| n.to_str()).unwrap_or("");
        let s = shard_number(name).ok_or_else(|| {
            Error::Usage(format!(
                "{}: not a shard file name (shard-NNNNN-HASH.wmk, as a shard build writes it)",
                p.display()
            ))
        })?;
        numbered.push((s, p));
    }
    numbered.sort_by_key(|&(s, _)| s);
    for w in numbered.windows(2) {
        if w[0].0 == w[1].0 {
            return Err(Error::Usage(format!(
                "{} and {}: two files of shard {} (from two different runs?): list one",
                w[0].1.display(),
                w[1].1.display(),
                w[0].0
            )));
        }
    }
    if let Some(missing) = (0..numbered.len()).find(|&s| numbered[s].0 != s) {
        return Err(Error::Usage(format!(
            "{where_}: shard {missing} is missing: {} shard files given, numbered up to {} \
             (the shards of an index are numbered 0, 1, 2, … with none left out)",
            numbered.len(),
            numbered.last().map_or(0, |&(s, _)| s)
        )));
    }
    let mut opened = Vec::with_capacity(numbered.len());
    for &(s, p) in &numbered {
        let name = p.file_name().and_then(|n| n.to_str()).unwrap_or("");
        let sum = file_sha256(p).map_err(|e| match e {
            Error::Io { source, .. } if source.kind() == std::io::ErrorKind::NotFound => {
                Error::Usage(format!(
                    "{}: shard {s}: the file does not exist",
                    p.display()
                ))
            }
            other => other,
        })?;
        if name != shard_name(s, &sum) {
            return Err(Error::corrupt(
                p,
                format!(
                    "shard {s}: its contents do not have the checksum its name carries \
                     (changed or damaged after it was written)"
                ),
            ));
        }
        opened.push(Index::open(p)?);
    }
    let fp = fingerprint(&opened[0]);
    let kind = opened[0].meta().ids;
    for (j, ix) in opened.iter().enumerate().skip(1) {
        if fingerprint(ix) != fp {
            return Err(Error::Usage(format!(
                "{}: shard {j}: its embedding (reference items, scale, metric or \
                 normalisation) is not shard 0's ({}): were they built from different seeds?",
                numbered[j].1.display(),
                numbered[0].1.display()
            )));
        }
        if ix.meta().ids != kind {
            return Err(Error::Usage(format!(
                "{}: shard {j}: its ids are {}, shard 0's are {}",
                numbered[j].1.display(),
                id_kind_name(ix.meta().ids),
                id_kind_name(kind)
            )));
        }
    }
    let total: u64 = opened.iter().map(|ix| ix.len() as u64).sum();
    if total > u64::from(u32::MAX) {
        return Err(Error::Usage(format!(
            "{where_}: the shards hold {total} items, more than an index holds"
        )));
    }
    let dir = parts_dir(index);
    std::fs::create_dir_all(&dir).map_err(|e| io(&dir, e))?;
    let mut entries = Vec::with_capacity(opened.len());
    for ((_, p), ix) in numbered.iter().zip(&opened) {
        let name = p
            .file_name()
            .and_then(|n| n.to_str())
            .unwrap_or_default()
            .to_string();
        let dest = dir.join(&name);
        place(p, &dest, ix.file_len() as u64)?;
        entries.push(PartEntry {
            file: name,
            bytes: ix.file_len() as u64,
            digest: part_digest(ix),
            n: ix.len() as u64,
            removed: Vec::new(),
        });
    }
    sync_dir(&dir)?;
    let keep: Vec<String> = entries.iter().map(|e| e.file.clone()).collect();
    write_list(
        index,
        &PartsList {
            fingerprint: fp.clone(),
            parts: entries,
        },
    )?;
    remove_unlisted(&dir, &keep);
    Ok(PartsWritten {
        shards: opened.len(),
        items: total as usize,
        fingerprint: fp,
    })
}

fn id_kind_name(k: super::IdKind) -> &'static str {
    match k {
        super::IdKind::Int => "integers",
        super::IdKind::Text => "text",
    }
}

/// Puts the shard file `from` at `dest` in the parts folder: nothing to do when it is the
/// same file or a file of the same name and length is there (its name carries its
/// checksum); else a hard link, or a copy where links are not possible (another file
/// system), through a temporary name and a rename.
fn place(from: &Path, dest: &Path, len: u64) -> Result<()> {
    if let (Ok(a), Ok(b)) = (std::fs::canonicalize(from), std::fs::canonicalize(dest)) {
        if a == b {
            return Ok(());
        }
    }
    if std::fs::metadata(dest).is_ok_and(|m| m.is_file() && m.len() == len) {
        return Ok(());
    }
    let dir = dest.parent().unwrap_or(Path::new("."));
    let tmp = dir.join(format!(".placing.{:016x}", rand::random::<u64>()));
    if std::fs::hard_link(from, &tmp).is_err() {
        std::fs::copy(from, &tmp).map_err(|e| io(dest, e))?;
    }
    std::fs::rename(&tmp, dest).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        io(dest, e)
    })
}

/// The item ranges of `shards` shards of `n` items: consecutive, sizes differing by at most
/// one, the larger first.
///
/// ```
/// assert_eq!(waymark::index::shards::split(7, 3), vec![0..3, 3..5, 5..7]);
/// ```
pub fn split(n: usize, shards: usize) -> Vec<Range<usize>> {
    let shards = shards.max(1);
    let (q, r) = (n / shards, n % shards);
    let mut start = 0;
    (0..shards)
        .map(|s| {
            let len = q + usize::from(s < r);
            let range = start..start + len;
            start += len;
            range
        })
        .collect()
}

/// What [`build_sharded`] did.
#[derive(Clone, Debug)]
pub struct ShardedReport {
    /// The seed's build (its metadata: the embedding every shard uses).
    pub seed: BuildReport,
    /// Items in the seed's sample.
    pub sample: usize,
    /// Items per shard, in shard order.
    pub shard_items: Vec<usize>,
    /// Seconds building the seed.
    pub seed_seconds: f64,
    /// Seconds building the shards (in parallel).
    pub shards_seconds: f64,
}

/// Builds `corpus` at `dest` as an index of `shards` parts on this machine: the seed from
/// `opts.sample` items chosen at random by `opts.seed` ([`seed_sample`], [`build_seed`],
/// written to a temporary file and removed), then the shards (consecutive ranges of the
/// items, [`split`], built in parallel), then the list ([`write_parts`]). The ids are the
/// corpus's. Any index at `dest` is replaced only when every shard is written.
pub fn build_sharded(
    corpus: &Corpus,
    source: &str,
    opts: &BuildOptions,
    shards: usize,
    dest: &Path,
) -> Result<ShardedReport> {
    let n = corpus.items.len();
    if shards == 0 || shards > MAX_SHARDS {
        return Err(Error::Usage(format!(
            "--shards {shards}: must be between 1 and {MAX_SHARDS}"
        )));
    }
    if shards > n {
        return Err(Error::Usage(format!(
            "{source}: {n} items cannot make {shards} shards (a shard holds at least one item)"
        )));
    }
    opts.check()?;
    corpus
        .check()
        .map_err(|e| Error::Usage(format!("{source}: {e}")))?;
    super::file::refuse_input_as_output(dest, &opts.inputs)?;
    let _lock = WriterLock::take(dest)?;
    let dir = parts_dir(dest);
    std::fs::create_dir_all(&dir).map_err(|e| io(&dir, e))?;
    let t0 = std::time::Instant::now();
    let sample = seed_sample(corpus, opts.sample.max(1), opts.seed);
    let seed_path = dir.join(format!(".seed.{:016x}.unnamed", rand::random::<u64>()));
    let result = (|| {
        let report = build_seed(&sample, source, opts, Some(n), &seed_path)?;
        let seed = Index::open(&seed_path)?;
        let seed_seconds = t0.elapsed().as_secs_f64();
        let t1 = std::time::Instant::now();
        let ranges = split(n, shards);
        let files: Vec<PathBuf> = ranges
            .par_iter()
            .enumerate()
            .map(|(s, r)| {
                let part = subset(corpus, r.clone());
                build_shard(&part, source, &seed, &dir, s, opts.inputs.clone())
            })
            .collect::<Result<_>>()?;
        let shards_seconds = t1.elapsed().as_secs_f64();
        write_parts_locked(dest, &files)?;
        Ok(ShardedReport {
            seed: report,
            sample: sample.items.len(),
            shard_items: ranges.iter().map(|r| r.len()).collect(),
            seed_seconds,
            shards_seconds,
        })
    })();
    let _ = std::fs::remove_file(&seed_path);
    result
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_the_temporaries_of_the_same_shard_match() {
        let h = "0123456789abcdef";
        for yes in [
            format!(".shard-00003.{h}.unnamed"),
            format!("..shard-00003.{h}.unnamed.Ab12Xy.waymark-partial"),
        ] {
            assert!(is_shard_temporary(&yes, 3), "{yes}");
            assert!(!is_shard_temporary(&yes, 4), "{yes}");
        }
        for no in [
            format!("shard-00003-{h}.wmk"),
            format!(".shard-00003.{h}.unnamed.keep"),
            format!(".shard-00003.{}.unnamed", h.to_uppercase()),
            format!(".shard-00003.{h}0.unnamed"),
            format!(".shard-3.{h}.unnamed"),
            format!("..shard-00003.{h}.unnamed.Ab12X.waymark-partial"),
            format!(".seed.{h}.unnamed"),
            ".shard-00003..unnamed".to_string(),
        ] {
            assert!(!is_shard_temporary(&no, 3), "{no}");
        }
    }

    #[test]
    fn shard_names_round_trip_and_others_are_not_shards() {
        let h = "00ff".repeat(16);
        assert_eq!(shard_number(&shard_name(1023, &h)), Some(1023));
        for bad in [
            "shard-3-0123456789abcdef.wmk",
            "shard-00003-0123456789ABCDEF.wmk",
            "shard-00003-0123456789abcde.wmk",
            "shard-00003-0123456789abcdef.wmk.tmp",
            "part-0123456789abcdef.wmk",
        ] {
            assert_eq!(shard_number(bad), None, "{bad}");
        }
    }

    #[test]
    fn split_covers_every_item_once() {
        for n in 1..40 {
            for s in 1..=n.min(9) {
                let r = split(n, s);
                assert_eq!(r.len(), s);
                assert_eq!(r[0].start, 0);
                assert_eq!(r[s - 1].end, n);
                assert!(r.windows(2).all(|w| w[0].end == w[1].start));
                assert!(r.iter().all(|x| !x.is_empty()));
            }
        }
    }

    #[test]
    fn a_seed_sample_keeps_order_and_is_reproducible() {
        let c = Corpus::new(
            (0..100).map(|i| format!("w{i}")).collect(),
            None,
            record_ids(0, 100),
        )
        .unwrap();
        let a = seed_sample(&c, 10, 7);
        let b = seed_sample(&c, 10, 7);
        assert_eq!(a.items, b.items);
        assert_eq!(a.items.len(), 10);
        let Ids::Int(ids) = &a.ids else { panic!() };
        assert!(ids.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(seed_sample(&c, 1000, 7).items.len(), 100);
    }
}
