//! Exact answers for a list of queries, cached next to the queries file.
//!
//! The brute force costs a full pass over the items per query, so its answers are kept in a
//! file beside the queries, `QUERIES.truth-<index key>-k<K>.json`. The cache is keyed by what
//! the answers depend on: the index's content (metric, normalisation, every key and id — not
//! the embedding, so indexes of one corpus built with different embeddings share a cache) and
//! the queries themselves (SHA-256 of both). A cache file whose keys, counts or checksum do not
//! match is not trusted: it is recomputed and replaced, and the reason is reported.

use std::path::{Path, PathBuf};
use std::time::Instant;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use super::brute::brute_force;
use crate::error::{Error, Result};
use crate::index::{IdRef, Index};
use crate::search::order::Neighbor;

const FORMAT: &str = "waymark-truth";
const VERSION: u32 = 1;

/// Exact k nearest neighbours of every query.
#[derive(Clone, Debug, PartialEq)]
pub struct Truth {
    /// Neighbours per query.
    pub k: usize,
    /// For each query, its exact neighbours in answer order.
    pub answers: Vec<Vec<Neighbor>>,
}

/// Where the ground truth came from.
#[derive(Clone, Debug, PartialEq)]
pub enum TruthSource {
    /// Read from the cache file.
    Cached(PathBuf),
    /// Computed by brute force; `seconds` of wall time on all cores. `note` says why a cache
    /// file there was not used, and whether the new one could be written.
    Computed {
        /// Wall time of the brute force.
        seconds: f64,
        /// Why no cache was used, or why none could be written.
        note: Option<String>,
    },
}

#[derive(Serialize, Deserialize)]
struct CacheFile {
    format: String,
    version: u32,
    index_key: String,
    queries_key: String,
    k: usize,
    n: u64,
    queries: usize,
    checksum: String,
    answers: Vec<Vec<(u32, f64)>>,
}

fn hex(d: impl AsRef<[u8]>) -> String {
    d.as_ref().iter().map(|b| format!("{b:02x}")).collect()
}

/// The key of an index's content for ground truth: SHA-256 (hex) of its metric,
/// normalisation, keys and ids.
pub fn index_key(index: &Index) -> String {
    let mut h = Sha256::new();
    let m = index.meta();
    h.update(format!("{}|{:?}|{}|", m.metric, m.normalize, m.n).as_bytes());
    let keys = index.keys();
    for i in 0..index.len() {
        let k = keys.get(i);
        h.update((k.len() as u64).to_le_bytes());
        h.update(k);
        match index.id(i) {
            IdRef::Int(v) => {
                h.update([0u8]);
                h.update(v.to_le_bytes());
            }
            IdRef::Text(t) => {
                h.update([1u8]);
                h.update((t.len() as u64).to_le_bytes());
                h.update(t);
            }
        }
    }
    hex(h.finalize())
}

/// SHA-256 (hex) of a list of queries.
pub fn queries_key(queries: &[String]) -> String {
    let mut h = Sha256::new();
    for q in queries {
        h.update((q.len() as u64).to_le_bytes());
        h.update(q.as_bytes());
    }
    hex(h.finalize())
}

fn answers_checksum(answers: &[Vec<(u32, f64)>]) -> String {
    let mut h = Sha256::new();
    for a in answers {
        h.update((a.len() as u64).to_le_bytes());
        for (i, d) in a {
            h.update(i.to_le_bytes());
            h.update(d.to_bits().to_le_bytes());
        }
    }
    hex(h.finalize())
}

/// The cache file used for `queries_file`, an index of key `index_key` and `k`.
pub fn cache_path(queries_file: &Path, index_key: &str, k: usize) -> PathBuf {
    let name = queries_file
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "queries".into());
    queries_file.with_file_name(format!("{name}.truth-{}-k{k}.json", &index_key[..16]))
}

/// Exact answers by brute force on all cores ([`brute_force`]); `progress` is called with the
/// number of queries done since the last call.
pub fn compute_truth(
    index: &Index,
    queries: &[String],
    k: usize,
    progress: &(dyn Fn(usize) + Sync),
) -> Truth {
    let answers = queries
        .par_iter()
        .map(|q| {
            let a = brute_force(index, q, k);
            progress(1);
            a
        })
        .collect();
    Truth { k, answers }
}

/// Reads and checks a cache file; `Err` says why it cannot be used.
fn read_cache(
    path: &Path,
    index: &Index,
    index_key: &str,
    queries: &[String],
    k: usize,
) -> std::result::Result<Truth, String> {
    let bytes = std::fs::read(path).map_err(|e| format!("cannot be read ({e})"))?;
    let c: CacheFile =
        serde_json::from_slice(&bytes).map_err(|e| format!("is damaged (does not parse: {e})"))?;
    if c.format != FORMAT || c.version != VERSION {
        return Err(format!("has another format ({} {})", c.format, c.version));
    }
    if c.index_key != index_key || c.n != index.len() as u64 {
        return Err("is stale (made for another index content)".into());
    }
    if c.queries_key != queries_key(queries) || c.queries != queries.len() {
        return Err("is stale (the queries changed)".into());
    }
    if c.k != k {
        return Err(format!("is for k = {}, not {k}", c.k));
    }
    if c.answers.len() != queries.len() || answers_checksum(&c.answers) != c.checksum {
        return Err("is damaged (checksum mismatch)".into());
    }
    let want = k.min(index.len());
    let mut answers = Vec::with_capacity(c.answers.len());
    for a in &c.answers {
        let ok = a.len() == want
            && a.iter()
                .all(|&(i, d)| (i as usize) < index.len() && d.is_finite() && d >= 0.0)
            && a.windows(2).all(|w| w[0].1 <= w[1].1);
        if !ok {
            return Err("is damaged (an answer list is malformed)".into());
        }
        answers.push(
            a.iter()
                .map(|&(index, distance)| Neighbor { index, distance })
                .collect(),
        );
    }
    Ok(Truth { k, answers })
}

fn write_cache(path: &Path, c: &CacheFile) -> Result<()> {
    let io = |source| Error::Io {
        path: path.to_path_buf(),
        source,
    };
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let mut tmp = tempfile::NamedTempFile::new_in(dir).map_err(io)?;
    serde_json::to_writer(&mut tmp, c).map_err(|e| io(std::io::Error::other(e)))?;
    tmp.persist(path).map_err(|e| io(e.error))?;
    Ok(())
}

/// The exact answers for `queries`, from the cache beside `queries_file` when it is valid,
/// else by brute force (then written to the cache; a cache that cannot be written is
/// reported in the note, not an error). `queries_file = None` never caches.
pub fn load_or_compute_truth(
    index: &Index,
    queries: &[String],
    queries_file: Option<&Path>,
    k: usize,
    progress: &(dyn Fn(usize) + Sync),
) -> (Truth, TruthSource) {
    let Some(qf) = queries_file else {
        let t = Instant::now();
        let truth = compute_truth(index, queries, k, progress);
        return (
            truth,
            TruthSource::Computed {
                seconds: t.elapsed().as_secs_f64(),
                note: None,
            },
        );
    };
    let key = index_key(index);
    let path = cache_path(qf, &key, k);
    let mut note = None;
    if path.exists() {
        match read_cache(&path, index, &key, queries, k) {
            Ok(truth) => return (truth, TruthSource::Cached(path)),
            Err(why) => {
                note = Some(format!(
                    "ground-truth cache {} {why}; recomputed",
                    path.display()
                ))
            }
        }
    }
    let t = Instant::now();
    let truth = compute_truth(index, queries, k, progress);
    let seconds = t.elapsed().as_secs_f64();
    let answers: Vec<Vec<(u32, f64)>> = truth
        .answers
        .iter()
        .map(|a| a.iter().map(|n| (n.index, n.distance)).collect())
        .collect();
    let file = CacheFile {
        format: FORMAT.into(),
        version: VERSION,
        index_key: key,
        queries_key: queries_key(queries),
        k,
        n: index.len() as u64,
        queries: queries.len(),
        checksum: answers_checksum(&answers),
        answers,
    };
    if let Err(e) = write_cache(&path, &file) {
        let msg = format!("could not write the ground-truth cache: {e}");
        note = Some(match note {
            Some(n) => format!("{n}; {msg}"),
            None => msg,
        });
    }
    (truth, TruthSource::Computed { seconds, note })
}
