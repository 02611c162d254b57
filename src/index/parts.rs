//! Indexes in parts over one embedding: items added and removed without a rebuild.
//!
//! An index that has grown is a small *list file* at the index's path that names index
//! parts in a folder beside it (`INDEX.parts/`). Every part is an ordinary index file
//! (format version 2, or the original file of any version) whose coordinates were made with
//! the same reference items, scale, metric and normalisation: its *embedding fingerprint*
//! ([`fingerprint`]) is the list's. A part written by [`add`] or a merge stores the
//! reference items' keys in its metadata ([`super::IndexMeta::references`]), so embedding a
//! new item never needs the first part's items, and a part opens and answers on its own.
//!
//! Items are numbered across the parts in list order: part 0's items first, then part 1's.
//! The list also holds, per part, the item numbers removed ([`remove`]); they are never
//! returned by a search and are dropped by a merge ([`compact`], and the merges [`add`]
//! runs by [`needs_merge`]).
//!
//! The list file:
//!
//! ```text
//! WMKPARTS 1 <SHA-256 of the body, 64 hex digits>\n
//! <body: JSON> {"fingerprint": "<hex>", "parts": [{"file": "part-…wmk", "bytes": B,
//!               "digest": "<hex>", "n": N, "removed": [item numbers]}, …]}
//! ```
//!
//! `digest` is the SHA-256 of the part's header and section table, which hold the CRC-32 of
//! every section: a part replaced, truncated or damaged in a small section is refused when
//! the index is opened, and `inspect --verify` checks every section.
//!
//! A graph index grows by edge lists ([`add_graph`]): its graph becomes the union, whose new
//! nodes are the new items, and the index is rewritten as one part on the union graph (new
//! edges can shorten paths between old nodes, so old coordinates can change). A removed
//! node stays a node of the graph; every part and merge carries the graph whole.
//!
//! Writers ([`add`], [`add_graph`], [`remove`], [`compact`]) take an exclusive lock on a
//! file beside the index (`.INDEX.waymark-lock`), write new part files, then the new list
//! through a temporary file renamed over the index: a reader sees the old list or the new
//! one, whole, and a writer killed at any moment leaves the old state (part files it wrote
//! but did not list are removed by the next writer).
//!
//! ```no_run
//! use waymark::index::parts::Parts;
//!
//! let parts = Parts::open("names.wmk".as_ref())?;
//! println!("{} parts, {} live items", parts.parts().len(), parts.live());
//! # Ok::<(), waymark::Error>(())
//! ```

use std::fs::File;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use super::build::{write_part, PartCoords};
use super::{IdKind, IdRef, Index, IndexMeta};
use crate::error::{Error, Result};
use crate::ingest::{Corpus, Ids, Normalize};
use crate::metric::{AnyMetric, Graph, MetricSpec};

/// The first 8 bytes of a list file (an index file starts with `WAYMARK\0`).
pub const LIST_MAGIC: &[u8; 8] = b"WMKPARTS";
/// The list file format version written and read.
pub const LIST_VERSION: u32 = 1;
/// The most parts a list may name.
pub const MAX_PARTS: usize = 1024;
/// The largest list file read (its removed item numbers make most of it).
const MAX_LIST_BYTES: u64 = 1 << 30;
/// How long a writer waits for another to finish before it is refused.
pub const WRITER_WAIT: Duration = Duration::from_secs(10);

/// Lowercase hexadecimal of `bytes`.
pub fn hex_encode(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// The bytes of a hexadecimal string, or `None` when it is not one.
pub fn hex_decode(s: &str) -> Option<Vec<u8>> {
    if !s.len().is_multiple_of(2) {
        return None;
    }
    (0..s.len())
        .step_by(2)
        .map(|i| s.get(i..i + 2).and_then(|h| u8::from_str_radix(h, 16).ok()))
        .collect()
}

/// One part as the list names it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PartEntry {
    /// File name in the parts folder (no folder, no `..`).
    pub file: String,
    /// File length in bytes.
    pub bytes: u64,
    /// SHA-256 of the part's header and section table, in hexadecimal.
    pub digest: String,
    /// Number of items in the part, removed ones included.
    pub n: u64,
    /// Item numbers of the part (0-based, in the part) that are removed, ascending.
    #[serde(default)]
    pub removed: Vec<u32>,
}

/// The body of a list file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PartsList {
    /// The embedding fingerprint every part has ([`fingerprint`]).
    pub fingerprint: String,
    /// The parts, in item-number order.
    pub parts: Vec<PartEntry>,
}

/// One open part.
pub struct Part {
    /// The part's index.
    pub index: Index,
    /// Its removed item numbers (in the part), ascending.
    pub removed: Vec<u32>,
    /// The number of its first item across the parts.
    pub offset: u32,
    /// Its file name in the parts folder (the index's own name for a single file).
    pub file: String,
}

impl Part {
    /// Whether item `i` of the part is removed.
    pub fn is_removed(&self, i: u32) -> bool {
        self.removed.binary_search(&i).is_ok()
    }

    /// Number of items not removed.
    pub fn live(&self) -> usize {
        self.index.len() - self.removed.len()
    }
}

/// An index opened whole: a single index file (one part, nothing removed) or the parts its
/// list file names.
pub struct Parts {
    path: PathBuf,
    parts: Vec<Part>,
    listed: bool,
    fingerprint: String,
}

/// The folder of an index's parts: `INDEX.parts` beside it.
pub fn parts_dir(index: &Path) -> PathBuf {
    let mut name = index
        .file_name()
        .map(|n| n.to_os_string())
        .unwrap_or_else(|| "index".into());
    name.push(".parts");
    index.with_file_name(name)
}

/// Whether the file at `path` is a list file (it starts with [`LIST_MAGIC`]).
pub fn is_list(path: &Path) -> Result<bool> {
    use std::io::Read;
    // Anything but a regular file (a folder, a named pipe, which would hang a read) is not a
    // list: `Index::open` refuses it with its own message.
    if !std::fs::metadata(path).is_ok_and(|m| m.is_file()) {
        return Ok(false);
    }
    let mut f = File::open(path).map_err(|e| io(path, e))?;
    let mut head = [0u8; 8];
    let mut got = 0;
    while got < 8 {
        match f.read(&mut head[got..]) {
            Ok(0) => break,
            Ok(k) => got += k,
            Err(e) => return Err(io(path, e)),
        }
    }
    Ok(got == 8 && &head == LIST_MAGIC)
}

fn io(path: &Path, source: std::io::Error) -> Error {
    Error::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// The embedding fingerprint of an index: the SHA-256 (hexadecimal) of the canonical JSON
/// of its embedding (reference items numbered in order), the reference items' keys, the
/// coordinate scale, dimension, row stride, metric and normalisation. Two indexes with the
/// same fingerprint give any item the same stored coordinates, so their coordinates compare.
pub fn fingerprint(index: &Index) -> String {
    let m = index.meta();
    let refs: Vec<String> = index
        .reference_keys()
        .iter()
        .map(|k| hex_encode(k))
        .collect();
    let canon = serde_json::json!({
        "embedding": m.embedding.renumbered(),
        "references": refs,
        "scale": m.scale,
        "dim": m.dim,
        "stride": m.stride,
        "metric": m.metric_spec,
        "normalize": m.normalize,
    });
    hex_encode(&Sha256::digest(canon.to_string().as_bytes()))
}

/// The SHA-256 (hexadecimal) of an index file's header and section table.
pub(super) fn part_digest(index: &Index) -> String {
    let head = super::file::HEADER_LEN + super::file::MAX_SECTIONS * 32;
    hex_encode(&Sha256::digest(&index.map[..head.min(index.map.len())]))
}

/// Whether `name` is a plain file name in the parts folder: letters, digits, `-`, `_` and
/// `.`, not starting with a dot, ending in `.wmk`, at most 200 bytes.
fn plain_name(name: &str) -> bool {
    !name.is_empty()
        && name.len() <= 200
        && !name.starts_with('.')
        && name.ends_with(".wmk")
        && name
            .bytes()
            .all(|b| b.is_ascii_alphanumeric() || matches!(b, b'-' | b'_' | b'.'))
}

/// Reads and checks a list file's bytes.
fn parse_list(path: &Path, bytes: &[u8]) -> Result<PartsList> {
    let bad = |m: String| Error::corrupt(path, format!("list file: {m}"));
    let nl = bytes
        .iter()
        .take(200)
        .position(|&b| b == b'\n')
        .ok_or_else(|| bad("no header line".into()))?;
    let head = std::str::from_utf8(&bytes[..nl]).map_err(|_| bad("header not UTF-8".into()))?;
    let mut words = head.split(' ');
    if words.next() != Some("WMKPARTS") {
        return Err(Error::refused(path, "not a waymark list file"));
    }
    let version: u32 = words
        .next()
        .and_then(|v| v.parse().ok())
        .ok_or_else(|| bad("no version".into()))?;
    if version != LIST_VERSION {
        return Err(Error::refused(
            path,
            format!(
                "list file version {version}; this waymark reads version {LIST_VERSION} \
                 (written by a newer waymark?)"
            ),
        ));
    }
    let sum = words.next().ok_or_else(|| bad("no checksum".into()))?;
    let body = &bytes[nl + 1..];
    if hex_encode(&Sha256::digest(body)) != sum {
        return Err(bad("the checksum does not match the body (damaged?)".into()));
    }
    let list: PartsList =
        serde_json::from_slice(body).map_err(|e| bad(format!("does not parse: {e}")))?;
    if list.parts.is_empty() || list.parts.len() > MAX_PARTS {
        return Err(bad(format!(
            "{} parts (1 to {MAX_PARTS} allowed)",
            list.parts.len()
        )));
    }
    let mut total = 0u64;
    let mut names = std::collections::HashSet::new();
    for (j, p) in list.parts.iter().enumerate() {
        if !plain_name(&p.file) {
            return Err(bad(format!(
                "part {j}: `{}` is not a plain file name of the parts folder",
                p.file
            )));
        }
        if !names.insert(&p.file) {
            return Err(bad(format!("part {j}: `{}` is listed twice", p.file)));
        }
        if p.n == 0 || p.n > u64::from(u32::MAX) {
            return Err(bad(format!("part {j}: {} items", p.n)));
        }
        total += p.n;
        if p.removed.len() as u64 > p.n
            || p.removed.windows(2).any(|w| w[0] >= w[1])
            || p.removed.last().is_some_and(|&r| u64::from(r) >= p.n)
        {
            return Err(bad(format!(
                "part {j}: the removed item numbers are not ascending item numbers of the part"
            )));
        }
    }
    if total > u64::from(u32::MAX) {
        return Err(bad(format!("{total} items, more than an index holds")));
    }
    Ok(list)
}

/// The bytes of a list file for `list`.
fn list_bytes(list: &PartsList) -> Vec<u8> {
    let body = serde_json::to_vec(list).expect("the list serialises");
    let mut out = format!(
        "WMKPARTS {LIST_VERSION} {}\n",
        hex_encode(&Sha256::digest(&body))
    )
    .into_bytes();
    out.extend_from_slice(&body);
    out
}

impl Parts {
    /// Opens the index at `path`: a single index file, or a list file and every part it
    /// names. Each part is opened as [`Index::open`] does, and checked against its entry
    /// (length, header digest, item count) and the list's embedding fingerprint. When a part
    /// is missing because a writer replaced the list meanwhile, the new list is read again.
    pub fn open(path: &Path) -> Result<Parts> {
        // The file at `path` (device and inode): a writer replaces it by rename.
        let file_at = || {
            std::fs::metadata(path)
                .ok()
                .map(|m| super::file::file_id(&m))
        };
        let mut tries = 0;
        loop {
            let before = file_at();
            match Parts::open_once(path) {
                Err(e) if tries < 5 => {
                    // A list replaced while it was being opened: try the new one.
                    let after = file_at();
                    if after.is_some() && after != before {
                        tries += 1;
                        continue;
                    }
                    return Err(e);
                }
                r => return r,
            }
        }
    }

    fn open_once(path: &Path) -> Result<Parts> {
        if !is_list(path)? {
            let index = Index::open(path)?;
            let name = path
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default();
            let fingerprint = fingerprint(&index);
            return Ok(Parts {
                path: path.to_path_buf(),
                parts: vec![Part {
                    index,
                    removed: Vec::new(),
                    offset: 0,
                    file: name,
                }],
                listed: false,
                fingerprint,
            });
        }
        let len = std::fs::metadata(path).map_err(|e| io(path, e))?.len();
        if len > MAX_LIST_BYTES {
            return Err(Error::corrupt(
                path,
                format!("list file of {len} bytes, more than a list holds"),
            ));
        }
        let bytes = std::fs::read(path).map_err(|e| io(path, e))?;
        let list = parse_list(path, &bytes)?;
        let dir = parts_dir(path);
        let mut parts = Vec::with_capacity(list.parts.len());
        let mut offset = 0u32;
        for (j, e) in list.parts.iter().enumerate() {
            let file = dir.join(&e.file);
            let index = Index::open(&file).map_err(|err| match err {
                Error::Io { source, .. } if source.kind() == std::io::ErrorKind::NotFound => {
                    Error::corrupt(path, format!("part {j} ({}) is missing", file.display()))
                }
                other => other,
            })?;
            let wrong = |m: String| Error::corrupt(path, format!("part {j} ({}): {m}", e.file));
            if index.file_len() as u64 != e.bytes || part_digest(&index) != e.digest {
                return Err(wrong(
                    "its length or header checksum is not the one listed (replaced or damaged)"
                        .into(),
                ));
            }
            if index.len() as u64 != e.n {
                return Err(wrong(format!(
                    "{} items, the list says {}",
                    index.len(),
                    e.n
                )));
            }
            if fingerprint(&index) != list.fingerprint {
                return Err(wrong(
                    "its embedding (reference items, scale, metric or normalisation) is not \
                     the index's"
                        .into(),
                ));
            }
            parts.push(Part {
                index,
                removed: e.removed.clone(),
                offset,
                file: e.file.clone(),
            });
            offset = offset.wrapping_add(e.n as u32);
        }
        Ok(Parts {
            path: path.to_path_buf(),
            parts,
            listed: true,
            fingerprint: list.fingerprint,
        })
    }

    /// An index file already open, as an index of one part (for an index opened with a
    /// metric of the caller's, [`Index::open_with_metric`]).
    pub fn single(index: Index) -> Parts {
        let path = index.path().to_path_buf();
        let file = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        let fingerprint = fingerprint(&index);
        Parts {
            path,
            parts: vec![Part {
                index,
                removed: Vec::new(),
                offset: 0,
                file,
            }],
            listed: false,
            fingerprint,
        }
    }

    /// What the index holds, as `waymark inspect --json` prints it for a list file: the
    /// path, the fingerprint, the items and live items, each part (file, items, removed
    /// items, bytes, format version, drift from `drift_sample` rows: [`Parts::drift`]), and
    /// the first part's report ([`Index::report`]). `verified` says whether the caller
    /// checked every checksum ([`Parts::verify`]).
    pub fn report(&self, verified: bool, drift_sample: usize) -> serde_json::Value {
        let drift = self.drift(drift_sample);
        let list: Vec<serde_json::Value> = self
            .parts
            .iter()
            .zip(&drift)
            .map(|(p, d)| {
                serde_json::json!({
                    "file": p.file,
                    "items": p.index.len(),
                    "removed": p.removed.len(),
                    "bytes": p.index.file_len(),
                    "format_version": p.index.format_version(),
                    "drift": d,
                })
            })
            .collect();
        serde_json::json!({
            "path": self.path.display().to_string(),
            "format": "parts",
            "list_version": LIST_VERSION,
            "fingerprint": self.fingerprint,
            "items": self.len(),
            "live": self.live(),
            "verified": verified,
            "parts": list,
            "first": self.first().report(verified),
        })
    }

    /// The path the index was opened from.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The parts, in item-number order.
    pub fn parts(&self) -> &[Part] {
        &self.parts
    }

    /// The first part: its metadata holds the defaults of a search (candidates, space,
    /// recall curve).
    pub fn first(&self) -> &Index {
        &self.parts[0].index
    }

    /// The first part's index, the others dropped (for an index that [`Self::is_whole`]).
    pub fn into_first(self) -> Index {
        self.parts
            .into_iter()
            .next()
            .expect("an open index has a part")
            .index
    }

    /// Whether the index is a list file (else a single index file).
    pub fn is_listed(&self) -> bool {
        self.listed
    }

    /// Whether the index is one part with nothing removed: it answers as that part alone.
    pub fn is_whole(&self) -> bool {
        self.parts.len() == 1 && self.parts[0].removed.is_empty()
    }

    /// The embedding fingerprint every part has.
    pub fn fingerprint(&self) -> &str {
        &self.fingerprint
    }

    /// Number of items across the parts, removed ones included (item numbers run below it).
    pub fn len(&self) -> usize {
        self.parts.iter().map(|p| p.index.len()).sum()
    }

    /// Whether there is no item (never, for an index that opened).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Number of items not removed.
    pub fn live(&self) -> usize {
        self.parts.iter().map(Part::live).sum()
    }

    /// The part holding item number `g` and the item's number in it.
    pub fn locate(&self, g: u32) -> (usize, usize) {
        let j = self.parts.partition_point(|p| p.offset <= g).max(1) - 1;
        (j, (g - self.parts[j].offset) as usize)
    }

    /// The id of item `g`.
    pub fn id(&self, g: u32) -> IdRef<'_> {
        let (j, i) = self.locate(g);
        self.parts[j].index.id(i)
    }

    /// Item `g` as given.
    pub fn item(&self, g: u32) -> &[u8] {
        let (j, i) = self.locate(g);
        self.parts[j].index.item(i)
    }

    /// Item `g` as distances are computed on it.
    pub fn key(&self, g: u32) -> &[u8] {
        let (j, i) = self.locate(g);
        self.parts[j].index.key(i)
    }

    /// Whether item `g` is removed.
    pub fn is_removed(&self, g: u32) -> bool {
        let (j, i) = self.locate(g);
        self.parts[j].is_removed(i as u32)
    }

    /// Checks every section checksum of every part ([`Index::verify`]).
    pub fn verify(&self) -> Result<()> {
        self.parts.iter().try_for_each(|p| p.index.verify())
    }

    /// How each part's coordinates compare with the first part's ([`PartDrift`]), from up
    /// to `sample` rows of each part (evenly spaced).
    pub fn drift(&self, sample: usize) -> Vec<PartDrift> {
        self.parts
            .iter()
            .map(|p| {
                let meta = p.index.meta();
                let dim = meta.dim as usize;
                let n = p.index.len();
                let step = n.div_ceil(sample.max(1)).max(1);
                let rows = p.index.rows();
                let (mut sat, mut zero, mut near, mut count) = (0usize, 0usize, 0.0f64, 0usize);
                if p.index.check_rows().is_ok() {
                    for i in (0..n).step_by(step) {
                        let r = &rows.row(i)[..dim];
                        sat += r.iter().filter(|&&b| b == 255).count();
                        zero += r.iter().filter(|&&b| b == 0).count();
                        let min = r.iter().copied().min().unwrap_or(0);
                        near += (f64::from(min) + 0.5) * meta.scale;
                        count += 1;
                    }
                }
                let cells = (count * dim).max(1) as f64;
                PartDrift {
                    rows: count,
                    saturated: sat as f64 / cells,
                    zeros: zero as f64 / cells,
                    nearest_reference: (meta.embedding.distance_valued() && count > 0)
                        .then(|| near / count as f64),
                }
            })
            .collect()
    }

    fn list(&self) -> PartsList {
        PartsList {
            fingerprint: self.fingerprint.clone(),
            parts: self
                .parts
                .iter()
                .map(|p| PartEntry {
                    file: p.file.clone(),
                    bytes: p.index.file_len() as u64,
                    digest: part_digest(&p.index),
                    n: p.index.len() as u64,
                    removed: p.removed.clone(),
                })
                .collect(),
        }
    }
}

/// How a part's stored coordinates look, to compare with the first part's: items unlike
/// those the reference items were chosen from (a new alphabet, much longer items) saturate
/// more coordinates (255, the largest stored value) and lie farther from every reference.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PartDrift {
    /// Rows looked at.
    pub rows: usize,
    /// Share of stored coordinates at 255.
    pub saturated: f64,
    /// Share of stored coordinates at 0.
    pub zeros: f64,
    /// Mean over the rows of the distance to the nearest reference item (the smallest
    /// coordinate, to within the scale); `None` for FastMap, whose coordinates are not
    /// distances.
    pub nearest_reference: Option<f64>,
}

/// The exclusive right to change an index, held until dropped: an advisory lock on
/// `.NAME.waymark-lock` beside it, let go on every return (an error partway included) and
/// by the system with a killed process. The file itself is left in place on purpose: only
/// the lock on it excludes, so a file left behind never blocks a writer, whereas removing
/// it could let one writer lock the removed file while another locks a new one.
pub struct WriterLock {
    _file: File,
}

impl WriterLock {
    /// Takes the lock of the index at `index`, waiting up to [`WRITER_WAIT`] for another
    /// writer; refused after that.
    pub fn take(index: &Path) -> Result<WriterLock> {
        let name = index
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "index".into());
        let lock = index.with_file_name(format!(".{name}.waymark-lock"));
        let file = std::fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&lock)
            .map_err(|e| io(&lock, e))?;
        let t0 = Instant::now();
        loop {
            match file.try_lock() {
                Ok(()) => return Ok(WriterLock { _file: file }),
                Err(std::fs::TryLockError::WouldBlock) if t0.elapsed() < WRITER_WAIT => {
                    std::thread::sleep(Duration::from_millis(50));
                }
                Err(std::fs::TryLockError::WouldBlock) => {
                    return Err(Error::Usage(format!(
                        "{}: another waymark is changing this index (waited {} s); try again \
                         when it is done",
                        index.display(),
                        WRITER_WAIT.as_secs()
                    )))
                }
                Err(std::fs::TryLockError::Error(e)) => return Err(io(&lock, e)),
            }
        }
    }
}

/// A new part file name: `part-` and 16 random hex digits (never reused, so a reader with
/// an old list never opens another part under a name it read).
fn new_part_name() -> String {
    use rand::Rng;
    format!("part-{:016x}.wmk", rand::thread_rng().gen::<u64>())
}

pub(super) fn sync_dir(dir: &Path) -> Result<()> {
    File::open(dir)
        .and_then(|d| d.sync_all())
        .map_err(|e| io(dir, e))
}

/// Writes `list` over the index at `path` atomically (temporary file, flush, rename, flush
/// of the folder).
pub(super) fn write_list(path: &Path, list: &PartsList) -> Result<()> {
    let mut tmp = super::file::partial_for(path)?;
    tmp.as_file_mut()
        .write_all(&list_bytes(list))
        .and_then(|_| tmp.as_file().sync_all())
        .map_err(|e| io(path, e))?;
    super::file::persist_partial(tmp, path)
}

/// Removes the files of the parts folder that `keep` does not name (parts of a writer that
/// was killed, parts a merge replaced). Called under the writer lock.
pub(super) fn remove_unlisted(dir: &Path, keep: &[String]) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        if keep.contains(&name) {
            continue;
        }
        if e.file_type().is_ok_and(|t| t.is_file()) {
            let _ = std::fs::remove_file(e.path());
        }
    }
}

/// The index at `path` as parts in its folder: a single file is linked (not moved) into the
/// folder as part 0; a list is returned as it is.
fn as_listed(path: &Path, cur: &Parts) -> Result<Vec<Part>> {
    let dir = parts_dir(path);
    std::fs::create_dir_all(&dir).map_err(|e| io(&dir, e))?;
    let keep: Vec<String> = if cur.listed {
        cur.parts.iter().map(|p| p.file.clone()).collect()
    } else {
        Vec::new()
    };
    remove_unlisted(&dir, &keep);
    if cur.listed {
        return Ok(Vec::new());
    }
    let name = new_part_name();
    let dest = dir.join(&name);
    if std::fs::hard_link(path, &dest).is_err() {
        std::fs::copy(path, &dest).map_err(|e| io(&dest, e))?;
    }
    let index = Index::open(&dest)?;
    Ok(vec![Part {
        index,
        removed: Vec::new(),
        offset: 0,
        file: name,
    }])
}

/// What [`add`] did.
#[derive(Clone, Debug, PartialEq)]
pub struct AddReport {
    /// Items added.
    pub added: usize,
    /// Parts after the change.
    pub parts: usize,
    /// Parts merged by the merge policy ([`needs_merge`]), 0 for none.
    pub merged: usize,
}

/// How ids of added items are made.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum NewIds {
    /// The corpus's ids as they are (an id column or field of the input).
    Given,
    /// Integer ids counting up from one above the largest integer id of the index (for
    /// inputs whose ids are their record numbers).
    Continue,
}

/// Adds the items of `corpus` to the index at `path` as a new part over its embedding, then
/// merges parts as [`needs_merge`] says. `normalize` must be the index's, and the corpus's
/// ids typed as the index's; the metric is checked against the index's as the items are
/// embedded. `inputs` are the files read (never written over).
#[allow(clippy::too_many_arguments)]
pub fn add(
    path: &Path,
    mut corpus: Corpus,
    source: &str,
    metric: MetricSpec,
    normalize: Normalize,
    ids: NewIds,
    inputs: Vec<PathBuf>,
) -> Result<AddReport> {
    let _lock = WriterLock::take(path)?;
    let cur = Parts::open(path)?;
    let base = cur.first().meta().clone();
    if base.metric_spec == MetricSpec::Graph {
        return Err(Error::Usage(format!(
            "{source}: {} is an index of the graph metric: add an edge list to it, read with \
             `--metric graph` (`add_graph` in the library); its new nodes become items",
            path.display()
        )));
    }
    if let MetricSpec::Custom { name, .. } = &base.metric_spec {
        return Err(Error::Usage(format!(
            "{source}: items cannot be added to an index of a metric of your own (`{name}`): \
             its distance is code of the library's caller, which `add` cannot run; build a new \
             index with the library"
        )));
    }
    if normalize != base.normalize {
        return Err(Error::Usage(format!(
            "{source}: read with the normalisation {}, the index's is {}: give the index's \
             options (`waymark inspect {}` shows them)",
            serde_json::to_string(&normalize).unwrap_or_default(),
            serde_json::to_string(&base.normalize).unwrap_or_default(),
            path.display()
        )));
    }
    if ids == NewIds::Continue {
        if base.ids != IdKind::Int {
            return Err(Error::Usage(format!(
                "{source}: the index has text ids; give the new items' ids with --id-field"
            )));
        }
        let mut top: Option<i64> = None;
        for p in &cur.parts {
            for i in 0..p.index.len() {
                if let IdRef::Int(v) = p.index.id(i) {
                    top = Some(top.map_or(v, |t| t.max(v)));
                }
            }
        }
        let from = top.map_or(Some(0), |t| t.checked_add(1)).ok_or_else(|| {
            Error::Usage(format!("{source}: the index's largest id leaves no room"))
        })?;
        let n = corpus.items.len() as i64;
        if from.checked_add(n).is_none() {
            return Err(Error::Usage(format!(
                "{source}: the index's largest id leaves no room"
            )));
        }
        corpus.ids = Ids::Int((from..from + n).collect());
    }
    let kind = match corpus.ids {
        Ids::Int(_) => IdKind::Int,
        Ids::Text(_) => IdKind::Text,
    };
    if kind != base.ids {
        return Err(Error::Usage(format!(
            "{source}: the ids read are {}, the index's are {}",
            if kind == IdKind::Int {
                "integers"
            } else {
                "text"
            },
            if base.ids == IdKind::Int {
                "integers"
            } else {
                "text"
            }
        )));
    }
    if cur.len() as u64 + corpus.items.len() as u64 > u64::from(u32::MAX) {
        return Err(Error::Usage(format!(
            "{source}: {} more items than an index holds",
            cur.len() + corpus.items.len()
        )));
    }
    let refs = cur.first().reference_keys();
    let small_radius = cur.first().variants_summary().map(|(r, _, _)| r);
    let linked = as_listed(path, &cur)?;
    let dir = parts_dir(path);
    let name = new_part_name();
    let dest = dir.join(&name);
    write_part(
        &corpus,
        source,
        &base,
        metric,
        None,
        &refs,
        PartCoords::Embed,
        small_radius,
        inputs,
        &dest,
    )?;
    let mut parts: Vec<Part> = if cur.listed { cur.parts } else { linked };
    let index = Index::open(&dest)?;
    parts.push(Part {
        index,
        removed: Vec::new(),
        offset: 0,
        file: name,
    });
    let (parts, merged) = merge_tail(path, &base, parts)?;
    let next = Parts {
        path: path.to_path_buf(),
        parts,
        listed: true,
        fingerprint: cur.fingerprint,
    };
    sync_dir(&dir)?;
    write_list(path, &next.list())?;
    let keep: Vec<String> = next.parts.iter().map(|p| p.file.clone()).collect();
    remove_unlisted(&dir, &keep);
    Ok(AddReport {
        added: corpus.items.len(),
        parts: next.parts.len(),
        merged,
    })
}

/// What [`add_graph`] did.
#[derive(Clone, Debug, PartialEq)]
pub struct GraphAddReport {
    /// New nodes, each now an item.
    pub added: usize,
    /// Live items whose coordinates were computed again on the union graph (all of them).
    pub rewritten: usize,
    /// Removed items dropped by the rewrite.
    pub dropped: usize,
    /// Nodes of the union graph.
    pub nodes: usize,
    /// Edges of the union graph.
    pub edges: usize,
    /// Share of stored coordinates at 255 before and after (a coordinate that saturates
    /// still gives a valid bound, a weaker one): new nodes far from every reference item,
    /// or a union whose distances outgrow the coordinate scale, raise it.
    pub saturated: (f64, f64),
    /// Edges of the added edge list that the index's graph has with a smaller weight, so
    /// that their given weight was not taken ([`Graph::longer_in`]): (a, b, the weight
    /// given, the weight kept), in the edge list's node order.
    pub longer: Vec<(String, String, f64, f64)>,
}

/// Adds the edges of `more` (an edge list read from `source`) to the graph-metric index at
/// `path`. The index's graph becomes the union ([`Graph::union`]), and every node of `more`
/// that is not a node of the index's graph becomes an item (its name its item and id).
/// Nodes already in the graph are not added again, and a removed node stays removed.
///
/// New edges can shorten paths between old nodes, so old items' coordinates (their
/// distances to the reference items) can change: a graph `add` rewrites the index. The live
/// items, old and new, are embedded again on the union graph over the same reference items
/// and coordinate scale, and written as one part that carries the union graph; the list
/// then names that part alone. Any coordinate scale keeps answers exact (stored values are
/// floored, and a bound gives up one quantum for it; a coordinate past the scale saturates
/// and bounds less). `inputs` are the files read (never written over).
pub fn add_graph(
    path: &Path,
    more: &Graph,
    source: &str,
    inputs: Vec<PathBuf>,
) -> Result<GraphAddReport> {
    let _lock = WriterLock::take(path)?;
    let cur = Parts::open(path)?;
    let base = cur.first().meta().clone();
    let Some(old) = graph_of(cur.first())? else {
        return Err(Error::Usage(format!(
            "{source}: an edge list, and {} is an index of the {} metric: give its metric \
             and options",
            path.display(),
            base.metric
        )));
    };
    let longer = old
        .longer_in(more)
        .into_iter()
        .map(|(a, b, given, kept)| {
            let name = |n: &[u8]| String::from_utf8_lossy(n).into_owned();
            (name(a), name(b), given, kept)
        })
        .collect();
    let union = old
        .union(more, source)
        .map_err(|e| Error::Usage(e.to_string()))?;
    let (mut corpus, _) = live_corpus(path, &base, &cur.parts)?;
    let rewritten = corpus.items.len();
    let new_nodes = (old.len()..union.len())
        .map(|v| String::from_utf8_lossy(union.name(v as u32)).into_owned())
        .collect::<Vec<_>>();
    let added = new_nodes.len();
    if cur.len() as u64
        - cur
            .parts
            .iter()
            .map(|p| p.removed.len() as u64)
            .sum::<u64>()
        + added as u64
        > u64::from(u32::MAX)
    {
        return Err(Error::Usage(format!(
            "{source}: {added} more items than an index holds"
        )));
    }
    if corpus.keys.is_some() {
        // Graph items are compared by their names: an index built with keys apart is one
        // a graph add cannot extend faithfully.
        return Err(Error::refused(
            path,
            "a graph index whose items have keys apart from their names",
        ));
    }
    match &mut corpus.ids {
        Ids::Text(ids) => ids.extend(new_nodes.iter().cloned()),
        Ids::Int(_) => {
            return Err(Error::Usage(format!(
                "{source}: {} has integer ids; the items an edge list adds are named by their \
                 node names",
                path.display()
            )))
        }
    }
    corpus.items.extend(new_nodes);
    corpus.records = corpus.items.len();
    let saturated_before = saturated_share(&cur);
    let dir = parts_dir(path);
    std::fs::create_dir_all(&dir).map_err(|e| io(&dir, e))?;
    let keep: Vec<String> = if cur.listed {
        cur.parts.iter().map(|p| p.file.clone()).collect()
    } else {
        Vec::new()
    };
    remove_unlisted(&dir, &keep);
    let first = cur.first();
    let refs = first.reference_keys();
    let name = new_part_name();
    let dest = dir.join(&name);
    let (nodes, edges) = (union.len(), union.edges());
    write_part(
        &corpus,
        source,
        &base,
        MetricSpec::Graph,
        Some(union),
        &refs,
        PartCoords::Embed,
        None,
        inputs,
        &dest,
    )?;
    let next = Parts {
        path: path.to_path_buf(),
        parts: vec![Part {
            index: Index::open(&dest)?,
            removed: Vec::new(),
            offset: 0,
            file: name.clone(),
        }],
        listed: true,
        fingerprint: cur.fingerprint.clone(),
    };
    if fingerprint(&next.parts[0].index) != cur.fingerprint {
        let _ = std::fs::remove_file(&dest);
        return Err(Error::refused(
            path,
            "the rewritten part's embedding differs from the index's; nothing was changed",
        ));
    }
    let saturated_after = saturated_share(&next);
    sync_dir(&dir)?;
    write_list(path, &next.list())?;
    remove_unlisted(&dir, &[name]);
    Ok(GraphAddReport {
        added,
        rewritten,
        dropped: cur.len() - cur.live(),
        nodes,
        edges,
        saturated: (saturated_before, saturated_after),
        longer,
    })
}

/// The share of the stored coordinates of every live item that are 255.
fn saturated_share(parts: &Parts) -> f64 {
    let (mut sat, mut all) = (0usize, 0usize);
    for p in &parts.parts {
        if p.index.check_rows().is_err() {
            continue;
        }
        let dim = p.index.meta().dim as usize;
        let rows = p.index.rows();
        for i in 0..p.index.len() {
            if p.is_removed(i as u32) {
                continue;
            }
            sat += rows.row(i)[..dim].iter().filter(|&&b| b == 255).count();
            all += dim;
        }
    }
    sat as f64 / all.max(1) as f64
}

/// The merge policy: how many parts at the end of a list of live sizes `sizes` to merge
/// into one (0: none). The last two parts merge while the one before the last holds at most
/// twice the last's live items (after a merge the merged part is the last), so that parts
/// grow geometrically: n items added in equal batches leave O(log n) parts, and each item
/// is rewritten O(log n) times. The first part joins a merge only on the same rule.
pub fn needs_merge(sizes: &[usize]) -> usize {
    let mut sizes = sizes.to_vec();
    let mut merged = 0;
    while sizes.len() >= 2 {
        let last = sizes[sizes.len() - 1];
        let prev = sizes[sizes.len() - 2];
        if prev > 2 * last {
            break;
        }
        sizes.pop();
        *sizes.last_mut().expect("two sizes") += last;
        merged = if merged == 0 { 2 } else { merged + 1 };
    }
    merged
}

/// Merges the parts at the end of `parts` that [`needs_merge`] names into one new part
/// file; returns the parts and how many were merged.
fn merge_tail(path: &Path, base: &IndexMeta, parts: Vec<Part>) -> Result<(Vec<Part>, usize)> {
    let sizes: Vec<usize> = parts.iter().map(Part::live).collect();
    let m = needs_merge(&sizes);
    if m == 0 {
        return Ok((parts, 0));
    }
    let mut parts = parts;
    let tail = parts.split_off(parts.len() - m);
    let merged = merge_parts(path, base, &tail)?;
    parts.push(merged);
    Ok((parts, m))
}

/// Writes the live items of `parts` as one new part in the folder, with their stored
/// coordinate rows (no item is embedded again).
fn merge_parts(path: &Path, base: &IndexMeta, parts: &[Part]) -> Result<Part> {
    let dir = parts_dir(path);
    let name = new_part_name();
    let dest = dir.join(&name);
    write_merged(path, base, parts, &dest)?;
    Ok(Part {
        index: Index::open(&dest)?,
        removed: Vec::new(),
        offset: 0,
        file: name,
    })
}

/// The live items of `parts`, in item-number order, as a corpus, with their stored
/// coordinate rows (one `stride` row each). Refused when every item is removed.
fn live_corpus(path: &Path, base: &IndexMeta, parts: &[Part]) -> Result<(Corpus, Vec<u8>)> {
    let live: usize = parts.iter().map(Part::live).sum();
    if live == 0 {
        return Err(Error::Usage(format!(
            "{}: every item is removed; an index needs at least one",
            path.display()
        )));
    }
    let stride = base.stride as usize;
    let with_keys = parts.iter().any(|p| p.index.keys.is_some());
    let mut items = Vec::with_capacity(live);
    let mut keys = Vec::with_capacity(if with_keys { live } else { 0 });
    let mut int_ids = Vec::new();
    let mut text_ids = Vec::new();
    let mut rows = Vec::with_capacity(live * stride);
    for p in parts {
        p.index.check_rows()?;
        let r = p.index.rows();
        for i in 0..p.index.len() {
            if p.is_removed(i as u32) {
                continue;
            }
            items.push(String::from_utf8_lossy(p.index.item(i)).into_owned());
            if with_keys {
                keys.push(p.index.key(i).to_vec());
            }
            match p.index.id(i) {
                IdRef::Int(v) => int_ids.push(v),
                IdRef::Text(t) => text_ids.push(String::from_utf8_lossy(t).into_owned()),
            }
            rows.extend_from_slice(r.row(i));
        }
    }
    let ids = match base.ids {
        IdKind::Int => Ids::Int(int_ids),
        IdKind::Text => Ids::Text(text_ids),
    };
    let corpus = Corpus {
        items,
        keys: with_keys.then_some(keys),
        ids,
        blank_skipped: 0,
        records: live,
    };
    Ok((corpus, rows))
}

/// The graph of a graph-metric index (every part carries the same one), cloned; `None`
/// for the other metrics.
pub(super) fn graph_of(index: &Index) -> Result<Option<Graph>> {
    if index.meta().metric_spec != MetricSpec::Graph {
        return Ok(None);
    }
    match index.metric()? {
        AnyMetric::Graph(g) => Ok(Some(g.graph().clone())),
        _ => Err(Error::corrupt(
            index.path(),
            "a graph-metric index whose metric is not a graph",
        )),
    }
}

/// Writes the live items of `parts` at `dest` as one index over their embedding. The
/// graph of a graph index is carried whole: a removed node stays a node of the graph (the
/// shortest paths through it are unchanged), it is only never an answer.
fn write_merged(path: &Path, base: &IndexMeta, parts: &[Part], dest: &Path) -> Result<()> {
    if let MetricSpec::Custom { name, .. } = &base.metric_spec {
        return Err(Error::Usage(format!(
            "{}: an index in parts of a metric of your own (`{name}`): its live items cannot \
             be written as one index (its distance is code of the library's caller), so it \
             cannot be compacted, and `pairs`, `groups` and `eval` (which read the live items \
             as one index) refuse it; `query` answers it; build a new index from the items \
             kept",
            path.display(),
        )));
    }
    let (corpus, rows) = live_corpus(path, base, parts)?;
    let first = &parts[0].index;
    let refs = first.reference_keys();
    let small_radius = first.variants_summary().map(|(r, _, _)| r);
    write_part(
        &corpus,
        &path.display().to_string(),
        base,
        base.metric_spec.clone(),
        graph_of(first)?,
        &refs,
        PartCoords::Rows(rows),
        small_radius,
        Vec::new(),
        dest,
    )?;
    Ok(())
}

/// The live items of an index in parts as one index file, for the commands that read one
/// index (`pairs`, `groups`, the ground truth and distortion of `eval`): the file a
/// [`compact`] would write (stored coordinate rows kept, kd-tree, cells and deletion-variant
/// table built anew), written to a temporary folder and deleted when this is dropped. The
/// index itself is not changed and no writer lock is taken.
pub struct LiveIndex {
    index: Index,
    numbers: Vec<u32>,
    _dir: tempfile::TempDir,
}

impl LiveIndex {
    /// The temporary index of the live items.
    pub fn index(&self) -> &Index {
        &self.index
    }

    /// The item number across the parts ([`Parts::item`]) of item `i` of [`Self::index`]:
    /// the live items keep their order, so numbers only close up over removed items.
    pub fn number(&self, i: u32) -> u32 {
        self.numbers[i as usize]
    }
}

impl Parts {
    /// Writes the live items as one temporary index ([`LiveIndex`]) in the system's
    /// temporary folder (`TMPDIR`). It takes the disk space and time of a [`compact`].
    pub fn live_index(&self) -> Result<LiveIndex> {
        let base = self.first().meta().clone();
        let dir = tempfile::Builder::new()
            .prefix("waymark-live-")
            .tempdir()
            .map_err(|e| io(&std::env::temp_dir(), e))?;
        let name = self
            .path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "index".into());
        let dest = dir.path().join(format!("{name}.live.wmk"));
        write_merged(&self.path, &base, &self.parts, &dest)?;
        let numbers = self
            .parts
            .iter()
            .flat_map(|p| {
                (0..p.index.len() as u32)
                    .filter(|&i| !p.is_removed(i))
                    .map(move |i| p.offset + i)
            })
            .collect();
        Ok(LiveIndex {
            index: Index::open(&dest)?,
            numbers,
            _dir: dir,
        })
    }
}

/// What [`remove`] did.
#[derive(Clone, Debug, PartialEq)]
pub struct RemoveReport {
    /// Items removed (every live item with an id given).
    pub removed: usize,
    /// Items left.
    pub live: usize,
}

/// An id to remove, as read from a file: its line, and its text (parsed as an integer for an
/// index of integer ids).
pub struct RemoveId {
    /// 1-based line of the ids file.
    pub line: usize,
    /// The id as written.
    pub text: String,
}

/// Removes every live item whose id is one of `ids` from the index at `path` (read from
/// `source`, for messages). An id that names no live item is refused with its line, and
/// nothing changes; removing every item is refused too.
pub fn remove(path: &Path, ids: &[RemoveId], source: &str) -> Result<RemoveReport> {
    use std::collections::HashMap;
    let _lock = WriterLock::take(path)?;
    let cur = Parts::open(path)?;
    let kind = cur.first().meta().ids;
    // id (as text of its canonical form) -> line
    let mut wanted: HashMap<String, usize> = HashMap::new();
    for id in ids {
        let t = id.text.trim_end_matches('\r');
        let canon = match kind {
            IdKind::Int => t
                .trim()
                .parse::<i64>()
                .map_err(|_| {
                    Error::Usage(format!(
                        "{source}: line {}: `{t}` is not an integer id (the index's ids are integers)",
                        id.line
                    ))
                })?
                .to_string(),
            IdKind::Text => t.to_string(),
        };
        wanted.entry(canon).or_insert(id.line);
    }
    let mut found: HashMap<&str, usize> = HashMap::new();
    let mut removed_now: Vec<Vec<u32>> = vec![Vec::new(); cur.parts.len()];
    for (j, p) in cur.parts.iter().enumerate() {
        for i in 0..p.index.len() {
            if p.is_removed(i as u32) {
                continue;
            }
            let key = match p.index.id(i) {
                IdRef::Int(v) => v.to_string(),
                IdRef::Text(t) => String::from_utf8_lossy(t).into_owned(),
            };
            if let Some((k, _)) = wanted.get_key_value(&key) {
                *found.entry(k.as_str()).or_default() += 1;
                removed_now[j].push(i as u32);
            }
        }
    }
    if let Some((id, line)) = wanted
        .iter()
        .filter(|(k, _)| !found.contains_key(k.as_str()))
        .min_by_key(|(_, &l)| l)
    {
        return Err(Error::Usage(format!(
            "{source}: line {line}: no item of {} has id `{id}` (or it is removed already)",
            path.display()
        )));
    }
    let count: usize = removed_now.iter().map(Vec::len).sum();
    if count >= cur.live() {
        return Err(Error::Usage(format!(
            "{source}: these ids name every item of {}; an index needs at least one (build a \
             new one instead)",
            path.display()
        )));
    }
    let linked = as_listed(path, &cur)?;
    let mut parts: Vec<Part> = if cur.listed { cur.parts } else { linked };
    for (p, more) in parts.iter_mut().zip(removed_now) {
        p.removed.extend(more);
        p.removed.sort_unstable();
        p.removed.dedup();
    }
    let next = Parts {
        path: path.to_path_buf(),
        parts,
        listed: true,
        fingerprint: cur.fingerprint,
    };
    let dir = parts_dir(path);
    sync_dir(&dir)?;
    write_list(path, &next.list())?;
    Ok(RemoveReport {
        removed: count,
        live: next.live(),
    })
}

/// What [`compact`] did.
#[derive(Clone, Debug, PartialEq)]
pub struct CompactReport {
    /// Parts before.
    pub parts_before: usize,
    /// Removed items dropped.
    pub dropped: usize,
    /// Items in the compacted index.
    pub items: usize,
    /// Whether anything was written (a single file with nothing removed is left alone).
    pub written: bool,
}

/// Merges every part of the index at `path` into one index file written over it, without
/// the removed items: the stored coordinate rows are kept (no item is embedded again), the
/// kd-tree, cells (and deletion-variant table) are built anew, the recall curve of the first
/// part is kept. The old part files are deleted (readers that have them open keep reading
/// them) and the parts folder with them.
pub fn compact(path: &Path) -> Result<CompactReport> {
    let _lock = WriterLock::take(path)?;
    let cur = Parts::open(path)?;
    let before = cur.parts.len();
    let dropped: usize = cur.parts.iter().map(|p| p.removed.len()).sum();
    if !cur.listed {
        return Ok(CompactReport {
            parts_before: 1,
            dropped: 0,
            items: cur.len(),
            written: false,
        });
    }
    let base = cur.first().meta().clone();
    // The merged file goes straight over the list (temporary file and rename).
    write_merged(path, &base, &cur.parts, path)?;
    let dir = parts_dir(path);
    remove_unlisted(&dir, &[]);
    let _ = std::fs::remove_dir(&dir);
    Ok(CompactReport {
        parts_before: before,
        dropped,
        items: cur.live(),
        written: true,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_merge_policy_keeps_parts_few() {
        assert_eq!(needs_merge(&[1000]), 0);
        assert_eq!(needs_merge(&[663_473, 1000]), 0);
        assert_eq!(needs_merge(&[663_473, 1000, 1000]), 2);
        assert_eq!(needs_merge(&[663_473, 3000, 1000, 1000]), 3);
        // Twenty additions of 1,000 to a large first part.
        let mut sizes = vec![663_473usize];
        for _ in 0..20 {
            sizes.push(1000);
            let m = needs_merge(&sizes);
            if m > 0 {
                let s: usize = sizes.split_off(sizes.len() - m).iter().sum();
                sizes.push(s);
            }
            assert!(sizes.len() <= 6, "{sizes:?}");
        }
        assert_eq!(sizes.iter().sum::<usize>(), 683_473);
    }

    #[test]
    fn hex_round_trips_and_refuses_non_hex() {
        assert_eq!(
            hex_decode(&hex_encode(b"\x00\xffab")).unwrap(),
            b"\x00\xffab"
        );
        assert!(hex_decode("0g").is_none());
        assert!(hex_decode("abc").is_none());
    }

    #[test]
    fn part_names_are_plain() {
        assert!(plain_name("part-0123456789abcdef.wmk"));
        for bad in [
            "../x.wmk",
            "/etc/x.wmk",
            ".hidden.wmk",
            "a/b.wmk",
            "x.txt",
            "",
        ] {
            assert!(!plain_name(bad), "{bad}");
        }
    }
}
