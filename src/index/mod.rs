//! The index file: items, ids, landmark coordinates and a kd-tree in one checked file.
//!
//! An index is opened by memory-mapping it. Opening reads the header, the section table and
//! the small metadata section, and checks their checksums and every section's size against
//! the counts in the metadata: its cost does not grow with the number of items. The large
//! sections are read in place; `inspect --verify` checks their checksums, and every access
//! is bounds-checked so that a damaged file cannot crash a query.
//!
//! ```no_run
//! use waymark::index::Index;
//!
//! let index = Index::open("names.wmk".as_ref())?;
//! println!("{} items, {} landmarks", index.len(), index.meta().dim);
//! # Ok::<(), waymark::Error>(())
//! ```

mod build;
pub mod calibration;
pub mod cells;
pub mod file;
mod install;
pub mod parts;
pub mod rows;
pub mod shards;
pub mod tree;
pub mod variants;

use std::fs::File;
use std::ops::Range;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

use memmap2::Mmap;
use serde::{Deserialize, Serialize};

pub use build::{
    build_index, build_index_from, build_index_with, build_index_with_metric, open_metric,
    store_calibration, BuildOptions, BuildProgress, BuildReport, BuildStage, AXIOM_SAMPLE,
};
pub use calibration::{Calibration, CalibrationBand, CalibrationPoint, RecallChoice};
use file::{Section, SectionKind};
pub use install::install_index;
pub use rows::Rows;

pub use crate::coords::coord_stride;

use crate::coords::Space;
use crate::error::{Error, Result};
use crate::ingest::Normalize;
use crate::metric::{vector_bytes, AnyMetric, Graph, MetricKind, MetricSpec};

/// Default embedding dimension of a build (`benches/end_to_end.rs` chose it; see the README).
pub const DEFAULT_DIM: usize = 64;

/// The smallest default number of candidates a build stores; larger indexes get more
/// ([`default_candidates`]).
pub const DEFAULT_CANDIDATES: usize = 2000;

/// The default number of candidates stored in an index of `n` items: `n / 80`, at least
/// [`DEFAULT_CANDIDATES`] and at most 6,000, ranked in L2: the counts with which
/// `benches/families.rs` kept threshold recall@10 at or above 0.95 on every query family
/// (typos of English, French and German words, natural spelling variants, the demo data;
/// figures in the README). Indexes written before keep the count they store.
pub fn default_candidates(n: usize) -> usize {
    (n / 80).clamp(DEFAULT_CANDIDATES, 6000)
}

fn is_zero(v: &u32) -> bool {
    *v == 0
}

/// How the ids of an index are typed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum IdKind {
    /// Integer ids (record numbers, or integer ids of a JSON Lines input).
    Int,
    /// Text ids (a CSV column, or string ids of a JSON Lines input).
    Text,
}

/// The build parameters and counts stored in an index.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct IndexMeta {
    /// Number of items.
    pub n: u64,
    /// The metric items are compared with.
    pub metric: MetricKind,
    /// The metric's parameters (files written before they were recorded are Levenshtein).
    #[serde(default)]
    pub metric_spec: MetricSpec,
    /// Normalisation applied to items and, automatically, to queries.
    pub normalize: Normalize,
    /// Embedding dimension (number of coordinates).
    pub dim: u32,
    /// Bytes per item in the coordinate section (`dim` rounded up for SIMD).
    pub stride: u32,
    /// Dimension the kd-tree was compiled for: in format version 2 the first
    /// [`tree::prefix_dims`] coordinates, in version 1 all `dim`, padded with zeros.
    pub tree_dim: u32,
    /// How coordinates were made (method and its reference items).
    pub embedding: crate::embed::Embedding,
    /// Coordinate quantum of the u8 rows (see [`crate::embed::quantize`]).
    pub scale: f64,
    /// Seed of the embedding's random choices.
    pub seed: u64,
    /// Size of the sample landmarks or FastMap pivots were chosen from.
    pub sample: u64,
    /// How ids are typed.
    pub ids: IdKind,
    /// Integer ids that are consecutive are not stored (format version 2): item `i`'s id is
    /// `ids_from + i` (for the default ids, the 0-based record numbers, `0`). Absent when the
    /// ids are stored.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ids_from: Option<i64>,
    /// Default number of candidates re-ranked per query.
    pub candidates: u32,
    /// Default space in which candidates are ranked.
    pub space: Space,
    /// Default doublings of the candidates for a query whose answers reach deep into its
    /// candidate list ([`crate::search::SearchParams::widen`]); absent, and 0 (never), in
    /// files written before it existed.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub widen: u32,
    /// Name of the input file.
    pub source: String,
    /// Records read from the input, including skipped ones.
    pub records: u64,
    /// Records skipped because their item was empty.
    pub blank_skipped: u64,
    /// The waymark version that wrote the file.
    pub written_by: String,
    /// The recall curve measured on this index (see [`calibration`]); absent in files
    /// written before it existed or built without it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibration: Option<Calibration>,
    /// The keys of the reference items in hexadecimal, in the order of
    /// [`crate::embed::Embedding::refs`], when the file does not hold them among its items (a
    /// part added to an index, a compacted index: [`parts`]); the embedding then numbers them
    /// `0..` in this list ([`crate::embed::Embedding::renumbered`]). Absent in a build.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub references: Option<Vec<String>>,
}

/// An id as stored: typed as in the input.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum IdRef<'a> {
    /// An integer id.
    Int(i64),
    /// A text id (bytes of UTF-8).
    Text(&'a [u8]),
}

/// An open, memory-mapped index.
pub struct Index {
    path: PathBuf,
    map: Mmap,
    version: u32,
    meta: IndexMeta,
    sections: Vec<Section>,
    items: Strings,
    keys: Option<Strings>,
    id_ints: Option<Range<usize>>,
    id_text: Option<Strings>,
    /// The coordinates section (format version 1).
    coords: Option<Range<usize>>,
    /// The positions section (format version 2).
    positions: Option<Range<usize>>,
    tree: Range<usize>,
    tree_checked: OnceLock<std::result::Result<(), String>>,
    cells: Option<Range<usize>>,
    /// The first-use check of the cells (and in version 2 of the positions: the layout of
    /// the rows).
    cells_checked: OnceLock<std::result::Result<(), String>>,
    graph: Option<Range<usize>>,
    /// The deletion-variant table (`--small-radius`), if the file has one.
    variants: Option<Range<usize>>,
    variants_checked: OnceLock<std::result::Result<(), String>>,
    metric: OnceLock<Result<AnyMetric>>,
    /// The reference items' keys when the metadata stores them ([`IndexMeta::references`]).
    ref_keys: Option<Vec<Vec<u8>>>,
}

/// A string table: offsets and bytes sections.
#[derive(Clone, Debug)]
struct Strings {
    offsets: Range<usize>,
    bytes: Range<usize>,
}

/// The largest coordinate scale an index may record: the bounds of exact and range queries,
/// `scale · (difference − 1)` for differences up to 256, stay finite below it.
pub const MAX_SCALE: f64 = f64::MAX / 512.0;

/// The counts of the metadata: `n` fits the u32 item numbers, the default candidates are at
/// least 1, and the records read cover the items and the blank records skipped.
fn check_counts(meta: &IndexMeta) -> std::result::Result<(), String> {
    if meta.n > u64::from(u32::MAX) {
        return Err(format!(
            "{} items, more than {} an index can hold",
            meta.n,
            u32::MAX
        ));
    }
    if meta.n == 0 {
        return Err("no items".into());
    }
    if meta.candidates == 0 {
        return Err("the stored default of candidates per query is 0".into());
    }
    if meta.sample == 0 || meta.sample > meta.n {
        return Err(format!(
            "a sample of {} items out of {}",
            meta.sample, meta.n
        ));
    }
    if meta
        .n
        .checked_add(meta.blank_skipped)
        .is_none_or(|need| meta.records < need)
    {
        return Err(format!(
            "{} records read, fewer than its {} items and {} blank records skipped",
            meta.records, meta.n, meta.blank_skipped
        ));
    }
    Ok(())
}

/// The last offset of a strings section: the length of all its strings together.
fn strings_total(map: &[u8], s: &Strings) -> Option<u64> {
    let end = s.offsets.end.checked_sub(8)?;
    let b = map.get(end..s.offsets.end)?;
    Some(u64::from_le_bytes(b.try_into().ok()?))
}

/// The metric's parameters, checked at open rather than at first use: q-grams of at least
/// one character, a non-empty separator, vectors of at least one component whose keys are
/// `4 · dim` bytes each (in total), an external program with a positive time limit, Hamming
/// items whose bytes can hold their length in chars.
fn check_metric_spec(
    meta: &IndexMeta,
    map: &[u8],
    items: &Strings,
    keys: Option<&Strings>,
) -> std::result::Result<(), String> {
    use crate::metric::Tokens;
    let n = meta.n;
    match &meta.metric_spec {
        MetricSpec::Jaccard {
            tokens: Tokens::QGrams(0),
        } => Err("jaccard q-grams of 0 characters".into()),
        MetricSpec::Jaccard {
            tokens: Tokens::Separator(sep),
        } if sep.is_empty() => Err("an empty jaccard separator".into()),
        MetricSpec::Vector { dim, .. } => {
            if *dim == 0 {
                return Err("vectors of 0 components".into());
            }
            let want = n.checked_mul(4 * u64::from(*dim));
            let have = keys.and_then(|k| strings_total(map, k));
            if have.is_none() || have != want {
                return Err(format!(
                    "the vector keys hold {} bytes; {n} vectors of {dim} components need {}",
                    have.map_or("no".to_string(), |h| h.to_string()),
                    want.map_or("more than fits".to_string(), |w| w.to_string())
                ));
            }
            Ok(())
        }
        MetricSpec::External {
            command,
            timeout_ms,
        } => {
            if command.first().is_none_or(|c| c.is_empty()) {
                Err("the external metric has no program".into())
            } else if *timeout_ms == 0 {
                Err("the external metric has a time limit of 0".into())
            } else {
                Ok(())
            }
        }
        MetricSpec::Hamming { length } => {
            // Each item holds `length` chars of 1 to 4 bytes.
            let total = strings_total(map, keys.unwrap_or(items));
            let fits = total.is_some_and(|t| {
                n.checked_mul(*length).is_some_and(|lo| t >= lo)
                    && n.checked_mul(*length)
                        .and_then(|x| x.checked_mul(4))
                        .is_none_or(|hi| t <= hi)
            });
            if fits {
                Ok(())
            } else {
                Err(format!(
                    "hamming items of {length} chars cannot make {} bytes for {n} items",
                    total.map_or("no".to_string(), |t| t.to_string())
                ))
            }
        }
        _ => Ok(()),
    }
}

impl Index {
    /// Opens and checks an index file.
    pub fn open(path: &Path) -> Result<Index> {
        let io = |source| Error::Io {
            path: path.to_path_buf(),
            source,
        };
        // Only a regular file is mapped: opening a FIFO would block until a writer comes,
        // and a folder or device cannot be an index. The type is checked before the open,
        // and again on the file opened.
        let what = |t: std::fs::FileType| {
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
        };
        let refuse_type = |t: std::fs::FileType| {
            Error::refused(
                path,
                format!(
                    "is {}, not an index file (an index is a regular file)",
                    what(t)
                ),
            )
        };
        let t = std::fs::metadata(path).map_err(io)?.file_type();
        if !t.is_file() {
            return Err(refuse_type(t));
        }
        let file = File::open(path).map_err(io)?;
        let t = file.metadata().map_err(io)?.file_type();
        if !t.is_file() {
            return Err(refuse_type(t));
        }
        // SAFETY: the mapping is read-only and the file is never written in place: builds
        // write a new file and rename it over the old one, so a reader's pages stay valid.
        // Another program truncating the file while it is mapped is outside what any mapped
        // reader can defend against; every access below is bounds-checked against the
        // mapping's length fixed at open.
        let map = unsafe { Mmap::map(&file) }.map_err(|source| Error::Io {
            path: path.to_path_buf(),
            source,
        })?;
        let (version, sections) = file::read_table(path, &map)?;
        let corrupt = |reason: String| Error::corrupt(path, reason);
        let find = |k: SectionKind| {
            sections
                .iter()
                .find(|s| s.kind == k)
                .map(|s| s.range.clone())
        };
        let need = |k: SectionKind| {
            find(k).ok_or_else(|| corrupt(format!("missing section {}", k.name())))
        };
        let meta_bytes = &map[need(SectionKind::Meta)?];
        let meta: IndexMeta = serde_json::from_slice(meta_bytes).map_err(|e| {
            let e = e.to_string();
            corrupt(format!(
                "metadata does not parse: {}",
                crate::escape::escape_controls(&e)
            ))
        })?;
        check_counts(&meta).map_err(corrupt)?;
        let n = usize::try_from(meta.n).map_err(|_| corrupt("n too large".into()))?;
        let expect_len = |k: SectionKind, r: &Range<usize>, want: Option<usize>| match want {
            Some(w) if r.len() == w => Ok(()),
            _ => Err(corrupt(format!(
                "section {} has {} bytes, expected {}",
                k.name(),
                r.len(),
                want.map_or("a size that fits in memory".to_string(), |w| w.to_string())
            ))),
        };
        let offsets_len = n.checked_add(1).and_then(|x| x.checked_mul(8));
        let strings = |ko: SectionKind, kb: SectionKind| -> Result<Strings> {
            let offsets = need(ko)?;
            expect_len(ko, &offsets, offsets_len)?;
            let bytes = need(kb)?;
            Ok(Strings { offsets, bytes })
        };
        let items = strings(SectionKind::ItemOffsets, SectionKind::ItemBytes)?;
        let keys = match find(SectionKind::KeyOffsets) {
            Some(_) => Some(strings(SectionKind::KeyOffsets, SectionKind::KeyBytes)?),
            None => None,
        };
        let (id_ints, id_text) = match (meta.ids, meta.ids_from) {
            (IdKind::Int, None) => {
                let r = need(SectionKind::IdInts)?;
                expect_len(SectionKind::IdInts, &r, n.checked_mul(8))?;
                (Some(r), None)
            }
            (IdKind::Int, Some(from)) => {
                if version < 2 {
                    return Err(corrupt(format!(
                        "ids recorded as consecutive from {from}, which format version {version} does not have"
                    )));
                }
                if find(SectionKind::IdInts).is_some() {
                    return Err(corrupt(format!(
                        "ids recorded as consecutive from {from}, but an ids section is stored too"
                    )));
                }
                if from.checked_add(meta.n as i64 - 1).is_none() {
                    return Err(corrupt(format!(
                        "ids consecutive from {from} pass the largest id for {n} items"
                    )));
                }
                (None, None)
            }
            (IdKind::Text, None) => (
                None,
                Some(strings(SectionKind::IdOffsets, SectionKind::IdBytes)?),
            ),
            (IdKind::Text, Some(_)) => {
                return Err(corrupt("text ids recorded as consecutive integers".into()))
            }
        };
        let dim = meta.dim as usize;
        if dim == 0 || dim > crate::embed::MAX_DIM || meta.embedding.dim() != dim {
            return Err(corrupt(format!(
                "dimension {dim} with {} coordinates in its embedding",
                meta.embedding.dim()
            )));
        }
        // Bounds are `scale · (difference − 1)` for differences up to 255 (and the first one
        // past them): each must be a finite number, or an exact query's pruning breaks.
        if !(meta.scale.is_finite() && meta.scale > 0.0 && meta.scale <= MAX_SCALE) {
            let scale = if meta.scale.abs() < 1e15 {
                meta.scale.to_string()
            } else {
                format!("{:e}", meta.scale)
            };
            return Err(corrupt(format!(
                "coordinate scale {scale} is not a positive number of at most {MAX_SCALE:e}"
            )));
        }
        let tree_dims = if version >= 2 {
            tree::prefix_dims(dim)
        } else {
            dim
        };
        if meta.stride as usize != coord_stride(dim)
            || meta.tree_dim as usize != tree::tree_dim(tree_dims)
        {
            return Err(corrupt(
                "coordinate layout does not match its dimension".into(),
            ));
        }
        let ref_keys = match &meta.references {
            Some(r) => Some(
                r.iter()
                    .map(|h| parts::hex_decode(h))
                    .collect::<Option<Vec<_>>>()
                    .ok_or_else(|| {
                        corrupt("metadata: a reference key is not hexadecimal".into())
                    })?,
            ),
            None => None,
        };
        let ref_count = ref_keys.as_ref().map_or(meta.n, |r| r.len() as u64);
        if ref_keys
            .as_ref()
            .is_some_and(|r| r.len() != meta.embedding.refs().len())
        {
            return Err(corrupt(
                "metadata: the reference keys are not one per reference item".into(),
            ));
        }
        meta.embedding
            .check(ref_count)
            .map_err(|m| corrupt(format!("embedding: {m}")))?;
        let stride = meta.stride as usize;
        let cells = find(SectionKind::Cells);
        let (coords, positions) = if version >= 2 {
            // The rows live in the cells section, mapped by the positions section.
            if find(SectionKind::Coords).is_some() {
                return Err(corrupt(
                    "a coordinates section in a format version 2 file, whose rows are in the cells section".into(),
                ));
            }
            let c = need(SectionKind::Cells)?;
            cells::check_len(&map[c.clone()], n, stride)
                .map_err(|e| corrupt(format!("section cells is refused: {e}")))?;
            let p = need(SectionKind::Positions)?;
            expect_len(SectionKind::Positions, &p, n.checked_mul(4))?;
            (None, Some(p))
        } else {
            if find(SectionKind::Positions).is_some() {
                return Err(corrupt(
                    "a positions section in a format version 1 file".into(),
                ));
            }
            let coords = need(SectionKind::Coords)?;
            expect_len(SectionKind::Coords, &coords, n.checked_mul(stride))?;
            (Some(coords), None)
        };
        let tree = need(SectionKind::Tree)?;
        if meta.metric_spec.kind() != meta.metric {
            return Err(corrupt(format!(
                "metric {} with parameters of {}",
                meta.metric,
                meta.metric_spec.kind()
            )));
        }
        check_metric_spec(&meta, &map, &items, keys.as_ref()).map_err(corrupt)?;
        let graph = find(SectionKind::Graph);
        if (meta.metric == MetricKind::Graph) != graph.is_some() {
            return Err(corrupt(
                "a graph section belongs to graph-metric indexes only".into(),
            ));
        }
        let variant_section = find(SectionKind::Variants);
        if let Some(r) = &variant_section {
            if version < 2 {
                return Err(corrupt(format!(
                    "a deletion-variants section in a format version {version} file"
                )));
            }
            if !variants::supports(&meta.metric_spec) {
                return Err(corrupt(format!(
                    "a deletion-variants section in an index of the {} metric, for which it is not exact",
                    meta.metric
                )));
            }
            variants::Variants::open(&map[r.clone()], n)
                .map_err(|e| corrupt(format!("section deletion-variants is refused: {e}")))?;
        }
        Ok(Index {
            path: path.to_path_buf(),
            map,
            version,
            meta,
            sections,
            items,
            keys,
            id_ints,
            id_text,
            coords,
            positions,
            tree,
            tree_checked: OnceLock::new(),
            cells,
            cells_checked: OnceLock::new(),
            graph,
            variants: variant_section,
            variants_checked: OnceLock::new(),
            metric: OnceLock::new(),
            ref_keys,
        })
    }

    /// Opens an index built with a metric of your own ([`build_index_with_metric`]),
    /// supplying that metric again: the code of a metric is not in the file, only its name.
    ///
    /// Refused when the index records another metric, or the same name with another
    /// answer to [`crate::metric::Metric::is_integral`].
    pub fn open_with_metric(path: &Path, metric: &crate::metric::CustomMetric) -> Result<Index> {
        use crate::metric::Metric;
        let index = Index::open(path)?;
        let bad = |reason: String| Error::refused(path, reason);
        match &index.meta.metric_spec {
            MetricSpec::Custom { name, integral } => {
                let esc = crate::escape::escape_controls;
                if name != metric.name() {
                    return Err(bad(format!(
                        "built with the custom metric `{}`, not `{}`",
                        esc(name),
                        esc(metric.name())
                    )));
                }
                if *integral != metric.is_integral() {
                    return Err(bad(format!(
                        "the custom metric `{}` was recorded with {} distances, \
                         but the metric given has {}",
                        esc(name),
                        if *integral { "whole" } else { "fractional" },
                        if metric.is_integral() {
                            "whole"
                        } else {
                            "fractional"
                        },
                    )));
                }
            }
            other => {
                return Err(bad(format!(
                    "built with the {} metric, not a custom one; open it with Index::open",
                    other.kind()
                )))
            }
        }
        let _ = index.metric.set(Ok(AnyMetric::Custom(metric.clone())));
        Ok(index)
    }

    /// How to turn stored coordinate differences into lower bounds of the true distance, or
    /// `None` when the embedding is not contractive (no pruning, no exact answers).
    pub fn bound(&self) -> Option<crate::embed::Bound> {
        self.meta
            .embedding
            .contractive()
            .then(|| crate::embed::Bound {
                scale: self.meta.scale,
                whole: self.meta.metric_spec.is_integral() && self.meta.scale == 1.0,
            })
    }

    /// The file this index was opened from.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Build parameters and counts.
    pub fn meta(&self) -> &IndexMeta {
        &self.meta
    }

    /// Number of items.
    pub fn len(&self) -> usize {
        self.meta.n as usize
    }

    /// Whether the index holds no items (never true for a file written by waymark).
    pub fn is_empty(&self) -> bool {
        self.meta.n == 0
    }

    /// The format version of the file (1 or 2; see [`file::FORMAT_VERSION`]).
    pub fn format_version(&self) -> u32 {
        self.version
    }

    /// Size of the file in bytes.
    pub fn file_len(&self) -> usize {
        self.map.len()
    }

    /// The sections of the file with their sizes, for `inspect`.
    pub fn sections(&self) -> impl Iterator<Item = (&'static str, usize)> + '_ {
        self.sections.iter().map(|s| (s.kind.name(), s.range.len()))
    }

    /// The items the embedding measures every query against (landmarks, pool items or
    /// pivots), as given at build time.
    pub fn reference_items(&self) -> Vec<String> {
        if self.ref_keys.is_some() {
            return self
                .reference_keys()
                .iter()
                .map(|k| String::from_utf8_lossy(k).into_owned())
                .collect();
        }
        self.meta
            .embedding
            .refs()
            .iter()
            .map(|&l| String::from_utf8_lossy(self.item(l as usize)).into_owned())
            .collect()
    }

    /// The keys of the reference items (the form distances are computed on), in the order of
    /// [`crate::embed::Embedding::refs`]: a query is measured against each. They are items of
    /// the index, or stored in its metadata ([`IndexMeta::references`]).
    pub fn reference_keys(&self) -> Vec<&[u8]> {
        match &self.ref_keys {
            Some(r) => r.iter().map(Vec::as_slice).collect(),
            None => self
                .meta
                .embedding
                .refs()
                .iter()
                .map(|&l| self.key(l as usize))
                .collect(),
        }
    }

    /// What the index holds, as `waymark inspect --json` prints it: the path, format
    /// version, file size, the metadata ([`IndexMeta`]), the reference items, every
    /// section's size, the deletion-variant table's radius, entries and bytes
    /// (`small_radius`, null without one), and `verified` (whether the caller checked every
    /// checksum with
    /// [`Index::verify`]).
    ///
    /// ```no_run
    /// let index = waymark::index::Index::open("names.wmk".as_ref())?;
    /// let report = index.report(false);
    /// assert_eq!(report["meta"]["n"], index.len());
    /// # Ok::<(), waymark::Error>(())
    /// ```
    pub fn report(&self, verified: bool) -> serde_json::Value {
        serde_json::json!({
            "path": self.path.display().to_string(),
            "format_version": self.format_version(),
            "file_bytes": self.file_len(),
            "meta": &self.meta,
            "landmark_items": self.reference_items(),
            "sections": self
                .sections()
                .map(|(k, l)| serde_json::json!({"name": k, "bytes": l}))
                .collect::<Vec<_>>(),
            "small_radius": self.variants_summary().map(|(r, e, b)| {
                serde_json::json!({"radius": r, "entries": e, "bytes": b})
            }),
            "verified": verified,
        })
    }

    /// Checks the checksum of every section: a full read of the file.
    pub fn verify(&self) -> Result<()> {
        file::verify_sections(&self.path, &self.map, &self.sections)?;
        self.cells()?;
        self.check_rows()?;
        self.tree()?;
        if let (Some(v), Some(r)) = (self.variants()?, &self.variants) {
            // The table is built again from the keys and compared whole: an entry left
            // out (which no field check can see) would lose answers.
            let keys = self.keys();
            let all: Vec<&[u8]> = (0..self.len()).map(|i| keys.get(i)).collect();
            if !variants::Variants::same_as_built(&self.map[r.clone()], &all, v.radius()) {
                return Err(Error::corrupt(
                    &self.path,
                    "section deletion-variants is refused: it is not the table of the index's keys",
                ));
            }
        }
        Ok(())
    }

    /// The deletion-variant table of small-radius range queries, or `None` for a file
    /// without one; checked on first use (its checksum, then every field, one pass).
    pub fn variants(&self) -> Result<Option<variants::Variants<'_>>> {
        let Some(range) = self.variants.clone() else {
            return Ok(None);
        };
        let bytes = &self.map[range];
        let n = self.len();
        let checked = self.variants_checked.get_or_init(|| {
            self.check_section(SectionKind::Variants, bytes, || {
                variants::Variants::open(bytes, n)?.check(bytes, n)
            })
        });
        self.checked(checked)?;
        Ok(variants::Variants::open(bytes, n).ok())
    }

    /// Whether the file has a deletion-variant table (not checked by this call).
    pub fn has_variants(&self) -> bool {
        self.variants.is_some()
    }

    /// The deletion-variant table's radius, entries and bytes, from its header (checked at
    /// open; the rest is not read by this call), for `inspect`.
    pub fn variants_summary(&self) -> Option<(u32, u64, usize)> {
        let r = self.variants.clone()?;
        let v = variants::Variants::open(&self.map[r.clone()], self.len()).ok()?;
        Some((v.radius(), v.entries(), r.len()))
    }

    fn table(&self, table: &Strings) -> StrTable<'_> {
        StrTable {
            offsets: &self.map[table.offsets.clone()],
            bytes: &self.map[table.bytes.clone()],
        }
    }

    fn string(&self, table: &Strings, i: usize) -> &[u8] {
        self.table(table).get(i)
    }

    /// The comparison keys as a table, for loops that read many of them.
    pub fn keys(&self) -> StrTable<'_> {
        self.table(self.keys.as_ref().unwrap_or(&self.items))
    }

    /// Item `i` as given at build time (UTF-8 unless the file is damaged).
    pub fn item(&self, i: usize) -> &[u8] {
        self.string(&self.items, i)
    }

    /// Item `i` in the form distances are computed on (after normalisation).
    pub fn key(&self, i: usize) -> &[u8] {
        match &self.keys {
            Some(k) => self.string(k, i),
            None => self.item(i),
        }
    }

    /// The id of item `i`, typed as in the input.
    pub fn id(&self, i: usize) -> IdRef<'_> {
        if let Some(r) = &self.id_ints {
            let v = self.map[r.clone()]
                .get(i * 8..i * 8 + 8)
                .map_or(0, |b| i64::from_le_bytes(b.try_into().expect("8 bytes")));
            IdRef::Int(v)
        } else if let Some(t) = &self.id_text {
            IdRef::Text(self.string(t, i))
        } else {
            // Checked at open: `ids_from + i` fits for every item.
            IdRef::Int(self.meta.ids_from.unwrap_or(0).wrapping_add(i as i64))
        }
    }

    /// The u8 coordinate rows (`stride` bytes per item), as the file keeps them; see
    /// [`Rows`]. Not checked by this call: [`Index::check_rows`] checks the tables that map
    /// items to rows (every access is bounds-checked either way, so a damaged table gives
    /// wrong rows, never a crash).
    pub fn rows(&self) -> Rows<'_> {
        if let Some(c) = &self.coords {
            return Rows::in_item_order(&self.map[c.clone()], self.stride());
        }
        let (n, stride) = (self.len(), self.stride());
        let cells = self
            .cells
            .as_ref()
            .and_then(|r| cells::CellsView::open_unchecked(&self.map[r.clone()], n, stride));
        let positions = self.positions.as_ref().map(|r| &self.map[r.clone()]);
        match (cells, positions) {
            (Some(c), Some(p)) => Rows::permuted(c.all_rows(), stride, c.members(), p),
            // Not reached: open requires both in a version 2 file.
            _ => Rows::in_item_order(&[], stride),
        }
    }

    /// Checks, once, the tables through which [`Index::rows`] finds an item's row: in a
    /// format version 2 file the cells section and the positions section (checksums, the
    /// members a permutation of the items, the positions its inverse); nothing to check in
    /// a version 1 file. Every query checks this first.
    pub fn check_rows(&self) -> Result<()> {
        if self.version >= 2 {
            self.cells()?;
        }
        Ok(())
    }

    /// Bytes per coordinate row ([`Index::rows`]).
    pub fn stride(&self) -> usize {
        self.meta.stride as usize
    }

    /// The metric the index was built with, set up on first use (a graph index parses its
    /// graph; an external metric starts its program, once per process).
    pub fn metric(&self) -> Result<&AnyMetric> {
        let m = self.metric.get_or_init(|| {
            let graph = match &self.graph {
                Some(r) => {
                    let text = std::str::from_utf8(&self.map[r.clone()]).map_err(|_| {
                        Error::corrupt(&self.path, "the graph section is not UTF-8")
                    })?;
                    Some(
                        Graph::parse(text, "graph section")
                            .map_err(|e| Error::corrupt(&self.path, e.to_string()))?,
                    )
                }
                None => None,
            };
            self.meta
                .metric_spec
                .open(graph)
                .map_err(|e| Error::refused(&self.path, e.to_string()))
        });
        m.as_ref().map_err(|e| match e {
            Error::CorruptIndex { path, reason } => Error::corrupt(path, reason.clone()),
            // Already named after the file: not named twice.
            Error::IndexRefused { path, reason } => Error::refused(path, reason.clone()),
            other => Error::refused(&self.path, other.to_string()),
        })
    }

    /// A query's key: the bytes the metric compares, made as the items' were. Text is
    /// normalised as the index says; a vector query is parsed from its text form (numbers
    /// separated by commas, tabs or spaces) and must have the index's dimension; a graph
    /// query must name a node; a Hamming query must have the items' length.
    pub fn query_key(&self, query: &str) -> Result<Vec<u8>> {
        let meta = &self.meta;
        Ok(match &meta.metric_spec {
            MetricSpec::Vector { dim, .. } => {
                let v = crate::ingest::parse_vector(query, *dim as usize)
                    .map_err(Error::InvalidQuery)?;
                vector_bytes(&v)
            }
            MetricSpec::Graph => {
                if let AnyMetric::Graph(g) = self.metric()? {
                    if g.graph().node(query.as_bytes()).is_none() {
                        return Err(Error::InvalidQuery(format!(
                            "`{query}` is not a node of the graph"
                        )));
                    }
                }
                query.as_bytes().to_vec()
            }
            MetricSpec::Hamming { length } => {
                let key = meta.normalize.apply(query);
                let n = key.chars().count() as u64;
                if n != *length {
                    return Err(Error::InvalidQuery(format!(
                        "the query has {n} characters; Hamming distance needs the items' length, {length}"
                    )));
                }
                key.into_owned().into_bytes()
            }
            _ => meta.normalize.apply(query).into_owned().into_bytes(),
        })
    }

    /// A query prepared for the index's metric from its text ([`Index::query_key`]).
    pub fn prepare_query(&self, query: &str) -> Result<crate::metric::AnyQuery> {
        use crate::metric::Metric;
        let key = self.query_key(query)?;
        Ok(self.metric()?.prepare(&key))
    }

    /// The bytes of the graph section (the edge list of a graph index), unchecked.
    pub(crate) fn graph_section(&self) -> Option<&[u8]> {
        self.graph.as_ref().map(|r| &self.map[r.clone()])
    }

    /// Whether the file has cells (see [`Index::cells`]; not checked by this call).
    pub fn has_cells(&self) -> bool {
        self.cells.is_some()
    }

    /// The cells (items partitioned by their coordinates, see `cells.rs`), or `None` for a
    /// file without them; checked on first use: the checksum, then every field against the
    /// index (a pass linear in the section's size).
    pub fn cells(&self) -> Result<Option<cells::CellsView<'_>>> {
        let Some(range) = self.cells.clone() else {
            return Ok(None);
        };
        let bytes = &self.map[range];
        let (n, stride) = (self.len(), self.stride());
        let checked = self.cells_checked.get_or_init(|| {
            let coords = self.coords.as_ref().map(|c| &self.map[c.clone()]);
            let Some(positions) = self.positions.clone() else {
                return self.check_section(SectionKind::Cells, bytes, || {
                    cells::CellsView::open(bytes, n, stride, coords).map(|_| ())
                });
            };
            let positions = &self.map[positions];
            self.check_section(SectionKind::Cells, bytes, || {
                cells::CellsView::open(bytes, n, stride, None).map(|_| ())
            })?;
            self.check_section(SectionKind::Positions, positions, || {
                let view = cells::CellsView::open_unchecked(bytes, n, stride)
                    .ok_or("the cells section does not fit")?;
                cells::check_positions(&view, positions, n)
            })
        });
        self.checked(checked)?;
        Ok(cells::CellsView::open_unchecked(bytes, n, stride))
    }

    /// The first-use check of a section: its checksum, then `fields`; the error names the
    /// section.
    fn check_section(
        &self,
        kind: SectionKind,
        bytes: &[u8],
        fields: impl FnOnce() -> std::result::Result<(), String>,
    ) -> std::result::Result<(), String> {
        let crc = self.sections.iter().find(|s| s.kind == kind).map(|s| s.crc);
        if crc != Some(crc32fast::hash(bytes)) {
            return Err(format!("checksum mismatch in section {}", kind.name()));
        }
        fields().map_err(|e| format!("section {} is refused: {e}", kind.name()))
    }

    /// The outcome of a first-use check as this index's error.
    fn checked(&self, outcome: &std::result::Result<(), String>) -> Result<()> {
        outcome
            .clone()
            .map_err(|reason| Error::corrupt(&self.path, reason))
    }

    /// The kd-tree, checked on first use: its checksum, rkyv's structural validation and
    /// every field kiddo's queries trust (see `tree.rs`), a pass linear in the tree's size.
    pub fn tree(&self) -> Result<tree::TreeView<'_>> {
        let bytes = &self.map[self.tree.clone()];
        let dim = self.tree_dims();
        // A version 2 tree holds the rows' first coordinates: the rows are checked first,
        // then every point against its item's row.
        self.check_rows()?;
        let checked = self.tree_checked.get_or_init(|| {
            self.check_section(SectionKind::Tree, bytes, || {
                let rows = self.rows();
                let row = |i: usize| rows.row(i);
                let points: Option<tree::RowOf<'_>> = (self.version >= 2).then_some(&row);
                tree::TreeView::open(bytes, dim, self.len(), points).map(|_| ())
            })
        });
        self.checked(checked)?;
        // SAFETY: `tree_checked` holds `Ok` only once `TreeView::open` accepted these bytes
        // with this `dim` and `len()`: `self.tree`, `meta` and the read-only mapping are fixed
        // when the index is opened and never change, so they are the bytes it checked.
        Ok(unsafe { tree::TreeView::validated(bytes, dim, self.len()) })
    }

    /// The coordinates the kd-tree holds: the first [`tree::prefix_dims`] of the u8 rows in
    /// a format version 2 file, every coordinate unquantised (f32) in a version 1 file.
    pub fn tree_dims(&self) -> usize {
        let dim = self.meta.dim as usize;
        if self.version >= 2 {
            tree::prefix_dims(dim)
        } else {
            dim
        }
    }

    /// Whether the kd-tree holds the rows' first coordinates (format version 2) rather than
    /// the unquantised ones (version 1).
    pub fn tree_holds_rows(&self) -> bool {
        self.version >= 2
    }
}

/// A table of strings read in place: offsets and bytes of one index section pair.
#[derive(Clone, Copy, Debug)]
pub struct StrTable<'a> {
    offsets: &'a [u8],
    bytes: &'a [u8],
}

impl<'a> StrTable<'a> {
    /// Asks the CPU to fetch the offsets of string `i` into cache (no effect on results).
    #[inline]
    pub fn prefetch_offsets(&self, i: usize) {
        if let Some(b) = self.offsets.get(i * 8..i * 8 + 16) {
            crate::cpu::prefetch(b.as_ptr());
        }
    }

    /// Asks the CPU to fetch the first bytes of string `i` into cache.
    #[inline]
    pub fn prefetch_bytes(&self, i: usize) {
        if let Some(b) = self.offsets.get(i * 8..i * 8 + 8) {
            let at = u64::from_le_bytes(b.try_into().expect("8 bytes")) as usize;
            if let Some(x) = self.bytes.get(at..) {
                crate::cpu::prefetch(x.as_ptr());
            }
        }
    }

    /// String `i`; empty when the file is damaged so that its offsets make no sense.
    #[inline]
    pub fn get(&self, i: usize) -> &'a [u8] {
        let at = |j: usize| {
            self.offsets
                .get(j * 8..j * 8 + 8)
                .map(|b| u64::from_le_bytes(b.try_into().expect("8 bytes")) as usize)
        };
        match (at(i), at(i + 1)) {
            (Some(s), Some(e)) if s <= e => self.bytes.get(s..e).unwrap_or(&[]),
            _ => &[],
        }
    }
}
