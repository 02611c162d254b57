//! Exact answers for a list of queries, cached next to the queries file.
//!
//! The brute force costs a full pass over the items per query, so its answers are kept in a
//! file beside the queries, `QUERIES.truth-<index key>-k<K>.json`. The cache is keyed by what
//! the answers depend on: the index's content (the whole metric with its parameters — cost
//! table, tokenisation, vector norm and dimension, external command —, the graph of a graph
//! index, the normalisation, every key and id; not the embedding, so indexes of one corpus
//! built with different embeddings share a cache) and the queries themselves (SHA-256 of
//! both). A cache file whose keys, counts or checksum do not match is not trusted: it is
//! recomputed and replaced, and the reason is reported. The checksum only catches damage,
//! not a file edited with care, so before a cache is trusted the answers of
//! [`CACHE_SAMPLE`] queries chosen at random are recomputed by brute force and compared
//! with it. The cache path must be a regular file (checked on the file opened, so a link to
//! a device is refused) of at most [`cache_size_bound`] bytes, which is all that is read.

use std::path::{Path, PathBuf};
use std::time::Instant;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use super::brute::brute_force_k;
use crate::error::{Error, Result};
use crate::index::{IdRef, Index};
use crate::search::order::Neighbor;

const FORMAT: &str = "waymark-truth";
const VERSION: u32 = 1;
/// Hashed first into every index key: a change of what the key covers changes this, so that
/// caches written under an older key are simply not found (their file names differ).
const KEY_VERSION: &str = "waymark-truth-key/2";

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

/// The key of an index's content for ground truth: SHA-256 (hex) of its metric with all its
/// parameters, its graph (graph indexes), normalisation, keys and ids; not of its embedding.
///
/// The metric is hashed as the JSON of its [`crate::metric::MetricSpec`], which is canonical:
/// serde writes fields in declaration order, the cost table's maps are sorted, and floats are
/// written so that they read back to the same value. Every variable-length part is hashed
/// after its length, so no two contents run together into one key.
pub fn index_key(index: &Index) -> String {
    let mut h = Sha256::new();
    let m = index.meta();
    let mut part = |bytes: &[u8]| {
        h.update((bytes.len() as u64).to_le_bytes());
        h.update(bytes);
    };
    part(KEY_VERSION.as_bytes());
    let spec = serde_json::to_vec(&m.metric_spec).expect("a metric spec serialises to JSON");
    part(&spec);
    part(
        serde_json::to_vec(&m.normalize)
            .expect("a normalisation serialises to JSON")
            .as_slice(),
    );
    match index.graph_section() {
        Some(g) => {
            part(b"graph");
            part(g);
        }
        None => part(b"no graph"),
    }
    h.update(m.n.to_le_bytes());
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
    let suffix = format!(".truth-{}-k{k}.json", &index_key[..16]);
    // A file name has at most 255 bytes: a long queries name is cut, with a digest of the
    // whole name, so that every queries file gets a cache name of its own.
    let name = if name.len() + suffix.len() > NAME_MAX {
        let mut cut = NAME_MAX - suffix.len() - 17;
        while !name.is_char_boundary(cut) {
            cut -= 1;
        }
        let digest = hex(Sha256::digest(name.as_bytes()));
        format!("{}~{}", &name[..cut], &digest[..16])
    } else {
        name
    };
    queries_file.with_file_name(format!("{name}{suffix}"))
}

/// The longest file name most filesystems take, in bytes.
const NAME_MAX: usize = 255;

/// Exact answers by brute force on all cores ([`super::brute_force`]); `progress` is called
/// with the number of queries done since the last call. For `k = 0` every answer is empty.
pub fn compute_truth(
    index: &Index,
    queries: &[String],
    k: usize,
    progress: &(dyn Fn(usize) + Sync),
) -> Truth {
    let Some(nz) = std::num::NonZeroUsize::new(k) else {
        progress(queries.len());
        return Truth {
            k,
            answers: vec![Vec::new(); queries.len()],
        };
    };
    if index.meta().metric == crate::metric::MetricKind::Levenshtein {
        // Many queries at once in vector lanes: the answers of the full scan, faster.
        let answers = super::scan::full_scan_lanes_all(index, queries, nz, progress);
        return Truth { k, answers };
    }
    let answers = queries
        .par_iter()
        .map(|q| {
            let a = brute_force_k(index, q, nz);
            progress(1);
            a
        })
        .collect();
    Truth { k, answers }
}

/// Queries of a cache whose answers are recomputed by brute force before it is trusted,
/// chosen at random (all of them when there are no more).
pub const CACHE_SAMPLE: usize = 8;

/// The most bytes a cache file of `queries` answers of `k` neighbours among `n` items can
/// hold: the header, and per answer `min(k, n)` pairs `[item, distance]` of at most 48
/// bytes each (a u32 and a shortest round-trip f64) with the brackets and commas.
pub fn cache_size_bound(queries: usize, k: usize, n: usize) -> u64 {
    let per_answer = (k.min(n) as u64).saturating_mul(48).saturating_add(4);
    (queries as u64)
        .saturating_mul(per_answer)
        .saturating_add(4096)
}

/// What a file type is, for the refusal of a cache path that is not a regular file.
fn file_kind(t: std::fs::FileType) -> &'static str {
    use std::os::unix::fs::FileTypeExt;
    if t.is_dir() {
        "a folder"
    } else if t.is_fifo() {
        "a named pipe (FIFO)"
    } else if t.is_socket() {
        "a socket"
    } else if t.is_block_device() || t.is_char_device() {
        "a device"
    } else {
        "not a regular file"
    }
}

/// The bytes of a cache file: a regular file (its type checked by name first, so that a
/// FIFO is never opened, and then on the file opened, which is what counts) of at most
/// `bound` bytes, read with that cap.
fn read_bounded(path: &Path, bound: u64) -> std::result::Result<Vec<u8>, String> {
    use std::io::Read;
    let named = std::fs::metadata(path).map_err(|e| format!("cannot be read ({e})"))?;
    if !named.is_file() {
        return Err(format!(
            "is {}, not a regular file",
            file_kind(named.file_type())
        ));
    }
    let file = std::fs::File::open(path).map_err(|e| format!("cannot be read ({e})"))?;
    let meta = file
        .metadata()
        .map_err(|e| format!("cannot be read ({e})"))?;
    if !meta.is_file() {
        return Err(format!(
            "is {}, not a regular file",
            file_kind(meta.file_type())
        ));
    }
    let too_large = |len: u64| {
        format!(
            "is too large ({len} bytes; answers of this many queries and neighbours take at \
             most {bound})"
        )
    };
    if meta.len() > bound {
        return Err(too_large(meta.len()));
    }
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    file.take(bound.saturating_add(1))
        .read_to_end(&mut bytes)
        .map_err(|e| format!("cannot be read ({e})"))?;
    if bytes.len() as u64 > bound {
        return Err(too_large(bytes.len() as u64));
    }
    Ok(bytes)
}

/// Recomputes the answers of [`CACHE_SAMPLE`] queries chosen at random and compares them
/// with the cache's; `Err` names the first query whose answer differs.
fn check_sample(
    index: &Index,
    queries: &[String],
    truth: &Truth,
) -> std::result::Result<(), String> {
    use rand::seq::index::sample;
    let Some(k) = std::num::NonZeroUsize::new(truth.k) else {
        return Ok(());
    };
    let picked = sample(
        &mut rand::thread_rng(),
        queries.len(),
        CACHE_SAMPLE.min(queries.len()),
    );
    let mut picked = picked.into_vec();
    picked.sort_unstable();
    let wrong = picked
        .par_iter()
        .filter_map(|&q| {
            let fresh = brute_force_k(index, &queries[q], k);
            (fresh != truth.answers[q]).then_some(q)
        })
        .min();
    match wrong {
        None => Ok(()),
        Some(q) => Err(format!(
            "does not hold the true answers: query {} ({:?}) was recomputed and differs \
             ({} of {} queries checked at random)",
            q + 1,
            crate::escape::escape_controls(&queries[q]),
            picked.len(),
            queries.len()
        )),
    }
}

/// Reads and checks a cache file; `Err` says why it cannot be used.
fn read_cache(
    path: &Path,
    index: &Index,
    index_key: &str,
    queries: &[String],
    k: usize,
) -> std::result::Result<Truth, String> {
    let bytes = read_bounded(path, cache_size_bound(queries.len(), k, index.len()))?;
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
    // Created with the mode of any new file (not a temporary file's 0600), which the
    // rename keeps; see `new_file_permissions`.
    let mut tmp = tempfile::Builder::new()
        .permissions(crate::index::file::new_file_permissions())
        .tempfile_in(dir)
        .map_err(io)?;
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
    if std::fs::symlink_metadata(&path).is_ok() {
        let checked = read_cache(&path, index, &key, queries, k)
            .and_then(|truth| check_sample(index, queries, &truth).map(|()| truth));
        match checked {
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

#[cfg(test)]
mod tests {
    use std::path::Path;

    use super::*;
    use crate::index::{build_index, BuildOptions};
    use crate::ingest::{read_corpus_from, Corpus, IngestOptions, Normalize};
    use crate::metric::{CostTable, Graph, MetricSpec, Tokens};

    fn demo(name: &str) -> String {
        let path = Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("demo-data")
            .join(name);
        std::fs::read_to_string(path).expect("demo data")
    }

    /// The first `n` lines of a demo file as a corpus of text items.
    fn corpus(name: &str, n: usize) -> Corpus {
        corpus_with(name, n, Normalize::default())
    }

    fn corpus_with(name: &str, n: usize, normalize: Normalize) -> Corpus {
        let text: String = demo(name)
            .lines()
            .take(n)
            .map(|l| format!("{l}\n"))
            .collect();
        let opts = IngestOptions {
            normalize,
            ..IngestOptions::default()
        };
        read_corpus_from(text.as_bytes(), name, &opts).expect("corpus")
    }

    fn build(dir: &Path, file: &str, corpus: &Corpus, opts: &BuildOptions) -> Index {
        let dest = dir.join(file);
        build_index(corpus, "test", opts, &dest, &|_| {}).expect("build");
        Index::open(&dest).expect("open")
    }

    fn weighted(costs: &str) -> BuildOptions {
        let table = CostTable::parse(costs, "test.costs").expect("costs");
        BuildOptions {
            metric: MetricSpec::WeightedEdit {
                costs: table.rules().clone(),
            },
            dim: 8,
            sample: 200,
            ..BuildOptions::default()
        }
    }

    /// Unit costs: every edit costs 1 (so different from the demo file's 1.5 and 0.5).
    const UNIT_COSTS: &str = "indel * 1\nsub * * 1\n";

    /// Two weighted-edit indexes over the same items with different cost files: their
    /// exact answers differ, so the second must not be served the first one's cache.
    #[test]
    fn another_cost_file_is_another_cache() {
        let dir = tempfile::tempdir().unwrap();
        let items = corpus("barcodes.txt", 300);
        let a = build(
            dir.path(),
            "a.wmk",
            &items,
            &weighted(&demo("nucleotide-costs.txt")),
        );
        let b = build(dir.path(), "b.wmk", &items, &weighted(UNIT_COSTS));

        let queries: Vec<String> = demo("barcode-reads.txt")
            .lines()
            .take(12)
            .map(str::to_string)
            .collect();
        let qf = dir.path().join("reads.txt");
        std::fs::write(&qf, queries.join("\n")).unwrap();
        let (ta, sa) = load_or_compute_truth(&a, &queries, Some(&qf), 5, &|_| {});
        assert!(matches!(sa, TruthSource::Computed { .. }), "{sa:?}");
        let (tb, sb) = load_or_compute_truth(&b, &queries, Some(&qf), 5, &|_| {});
        assert!(
            matches!(sb, TruthSource::Computed { .. }),
            "the second cost file was served the first one's answers: {sb:?}"
        );
        assert_eq!(tb, compute_truth(&b, &queries, 5, &|_| {}));
        assert_ne!(ta, tb, "the two cost files should give different answers");
        // Each index now finds its own cache.
        let (ta2, sa2) = load_or_compute_truth(&a, &queries, Some(&qf), 5, &|_| {});
        assert!(matches!(sa2, TruthSource::Cached(_)), "{sa2:?}");
        assert_eq!(ta2, ta);
        let (tb2, sb2) = load_or_compute_truth(&b, &queries, Some(&qf), 5, &|_| {});
        assert!(matches!(sb2, TruthSource::Cached(_)), "{sb2:?}");
        assert_eq!(tb2, tb);
        assert_ne!(index_key(&a), index_key(&b));
    }

    /// The key follows the metric's parameters (tokenisation, graph weights) and the
    /// normalisation, and not the embedding: an index rebuilt with another dimension and
    /// seed over the same items and metric shares the cache.
    #[test]
    fn key_covers_the_metric_and_not_the_embedding() {
        let dir = tempfile::tempdir().unwrap();
        let tags = corpus("tags.txt", 200);
        let jaccard = |tokens: Tokens, dim: usize, seed: u64| BuildOptions {
            metric: MetricSpec::Jaccard { tokens },
            dim,
            seed,
            sample: 100,
            ..BuildOptions::default()
        };
        let words = build(
            dir.path(),
            "w.wmk",
            &tags,
            &jaccard(Tokens::Whitespace, 8, 1),
        );
        let words2 = build(
            dir.path(),
            "w2.wmk",
            &tags,
            &jaccard(Tokens::Whitespace, 12, 9),
        );
        let grams = build(
            dir.path(),
            "q.wmk",
            &tags,
            &jaccard(Tokens::QGrams(2), 8, 1),
        );
        assert_eq!(index_key(&words), index_key(&words2));
        assert_ne!(index_key(&words), index_key(&grams));

        let fold = Normalize {
            fold_case: true,
            trim: true,
            ..Normalize::default()
        };
        let folded = BuildOptions {
            normalize: fold,
            ..jaccard(Tokens::Whitespace, 8, 1)
        };
        let folded = build(
            dir.path(),
            "f.wmk",
            &corpus_with("tags.txt", 200, fold),
            &folded,
        );
        assert_ne!(index_key(&words), index_key(&folded));

        // The same stops with other leg times.
        let edges = "A B 1\nB C 2\nC D 3\nD A 4\nA C 5\n";
        let slower = "A B 1\nB C 2\nC D 3\nD A 4\nA C 6\n";
        let graph = |text: &str, file: &str| {
            let g = Graph::parse(text, "test graph").expect("graph");
            let names: Vec<String> = (0..g.len() as u32)
                .map(|v| String::from_utf8_lossy(g.name(v)).into_owned())
                .collect();
            let nodes = Corpus {
                records: names.len(),
                items: names.clone(),
                keys: None,
                ids: crate::ingest::Ids::Text(names),
                blank_skipped: 0,
            };
            let opts = BuildOptions {
                metric: MetricSpec::Graph,
                graph: Some(g),
                dim: 2,
                ..BuildOptions::default()
            };
            build(dir.path(), file, &nodes, &opts)
        };
        let g1 = graph(edges, "g1.wmk");
        let g2 = graph(slower, "g2.wmk");
        assert_eq!(g1.len(), g2.len());
        assert_ne!(index_key(&g1), index_key(&g2));
    }
}
