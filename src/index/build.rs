//! Building an index: embed every item, build the tree, write the file.

use std::path::{Path, PathBuf};
use std::time::Instant;

use super::file::{ContainerWriter, SectionKind};
use super::{cells, coord_stride, tree, IdKind, IndexMeta};
use crate::coords::Space;
use crate::embed::{embed_items, quantize, EmbedOptions, Embedded, Method, MAX_DIM};
use crate::error::{Error, Param, Result};
use crate::ingest::{Corpus, Ids, Normalize};
use crate::metric::{
    check_axioms, check_equal_lengths, AnyMetric, AxiomReport, CustomMetric, Graph, MetricSpec,
};

/// Parameters of a build.
#[derive(Clone, Debug)]
pub struct BuildOptions {
    /// The metric and its parameters (for Hamming, the length is filled in from the items).
    pub metric: MetricSpec,
    /// The graph of a [`MetricSpec::Graph`] index (its nodes are the corpus's items).
    pub graph: Option<Graph>,
    /// Embedding method.
    pub method: Method,
    /// Embedding dimension: number of coordinates, 1 to 64.
    pub dim: usize,
    /// Seed of every random choice of the embedding.
    pub seed: u64,
    /// Size of the sample landmarks and FastMap pivots are chosen from.
    pub sample: usize,
    /// Size of the reference-set pool (the reference-set method's cost per query).
    pub pool: usize,
    /// Which sampled items may be landmarks.
    pub landmark_rule: crate::embed::LandmarkRule,
    /// Default candidates per query stored in the index; 0 (the default) stores
    /// [`super::default_candidates`] of the number of items.
    pub candidates: usize,
    /// Default candidate space stored in the index.
    pub space: Space,
    /// Default doublings of the candidates stored in the index
    /// ([`crate::search::SearchParams::widen`]).
    pub widen: u32,
    /// The normalisation the corpus keys were made with; queries get the same.
    pub normalize: Normalize,
    /// The files the build reads (the input, a cost file): the index must not be written
    /// over any of them (compared by device and inode, so links are caught too).
    pub inputs: Vec<PathBuf>,
    /// Also store a deletion-variant table of this radius (1 or 2; [`super::variants`]):
    /// exact range queries and self-joins up to it without the column blocks, at about
    /// 8.5 bytes per (variant, item). Only for the metrics of [`super::variants::supports`].
    pub small_radius: Option<u32>,
}

impl Default for BuildOptions {
    fn default() -> Self {
        BuildOptions {
            metric: MetricSpec::Levenshtein,
            graph: None,
            method: Method::Landmarks,
            dim: super::DEFAULT_DIM,
            seed: 0,
            sample: 4096,
            pool: crate::embed::DEFAULT_POOL,
            landmark_rule: crate::embed::LandmarkRule::default(),
            candidates: 0,
            space: Space::default(),
            widen: 0,
            normalize: Normalize::default(),
            inputs: Vec::new(),
            small_radius: None,
        }
    }
}

impl BuildOptions {
    /// Checks the parameters that do not depend on the items (the dimension, the pool), so
    /// that a caller can refuse them before reading an input; [`build_index`] checks them too.
    pub fn check(&self) -> Result<()> {
        if self.dim == 0 || self.dim > MAX_DIM {
            return Err(Error::parameter(
                Param::Dim,
                format!("must be between 1 and {MAX_DIM}, not {}", self.dim),
            ));
        }
        if self.method == Method::RefSets && self.pool == 0 {
            return Err(Error::parameter(Param::Pool, "must be at least 1"));
        }
        if self.sample == 0 {
            return Err(Error::parameter(Param::Sample, "must be at least 1"));
        }
        if let Some(r) = self.small_radius {
            if !(1..=super::variants::MAX_RADIUS).contains(&r) {
                return Err(Error::parameter(
                    Param::SmallRadius,
                    format!(
                        "must be 1 or 2, not {r} (the table grows with the length to the power R)"
                    ),
                ));
            }
            if !super::variants::supports(&self.metric) {
                return Err(Error::parameter(
                    Param::SmallRadius,
                    format!(
                        "needs the levenshtein, damerau or hamming metric, for which a \
                         deletion-variant table is exact; this build's metric is {}",
                        self.metric.kind()
                    ),
                ));
            }
        }
        Ok(())
    }
}

/// The stages of a build after reading, in order, as reported to [`BuildProgress::stage`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BuildStage {
    /// Choosing the reference items and embedding every item (reported item by item through
    /// [`BuildProgress::embedded`]).
    Embed,
    /// Building the kd-tree and the cells (one step, no finer progress).
    TreeAndCells,
    /// Writing the file.
    Write,
}

/// What a build reports while it runs; every method does nothing unless overridden.
pub trait BuildProgress: Sync {
    /// A stage begins.
    fn stage(&self, stage: BuildStage) {
        let _ = stage;
    }
    /// `items` more items have been embedded (called from several threads).
    fn embedded(&self, items: usize) {
        let _ = items;
    }
}

/// Reports no progress.
impl BuildProgress for () {}

/// Reports embedded items only, to a closure (the progress argument of [`build_index`]).
struct ItemsOnly<'a>(&'a (dyn Fn(usize) + Sync));

impl BuildProgress for ItemsOnly<'_> {
    fn embedded(&self, items: usize) {
        (self.0)(items)
    }
}

/// What a build did, for the command's summary.
#[derive(Clone, Debug)]
pub struct BuildReport {
    /// The metadata written.
    pub meta: IndexMeta,
    /// Size of the file written.
    pub file_len: u64,
    /// Seconds spent choosing reference items and embedding.
    pub embed_seconds: f64,
    /// Seconds spent building the kd-tree and the cells.
    pub tree_seconds: f64,
    /// Seconds spent writing the file.
    pub write_seconds: f64,
    /// Seconds spent building the deletion-variant table (0 without one).
    pub variants_seconds: f64,
    /// The metric axioms checked on a small sample of the items ([`AXIOM_SAMPLE`]); `None`
    /// for builds from given coordinates.
    pub axioms: Option<AxiomReport>,
}

/// Items sampled by every build to check the metric axioms (all pairs and triples of them).
pub const AXIOM_SAMPLE: usize = 40;

fn string_sections(strings: impl ExactSizeIterator<Item = impl AsRef<[u8]>>) -> (Vec<u8>, Vec<u8>) {
    let mut offsets = Vec::with_capacity((strings.len() + 1) * 8);
    let mut bytes = Vec::new();
    offsets.extend_from_slice(&0u64.to_le_bytes());
    for s in strings {
        bytes.extend_from_slice(s.as_ref());
        offsets.extend_from_slice(&(bytes.len() as u64).to_le_bytes());
    }
    (offsets, bytes)
}

/// Builds an index of `corpus` at `dest`, atomically replacing any file there.
///
/// `progress` is called with the number of items embedded since the last call; see
/// [`build_index_with`] for the stages too. The index carries no recall curve (the curve is
/// measured by searching, a layer above this one): `waymark build` adds it with
/// `waymark::eval::calibrate_file`, which a library user can call too.
pub fn build_index(
    corpus: &Corpus,
    source: &str,
    opts: &BuildOptions,
    dest: &Path,
    progress: &(dyn Fn(usize) + Sync),
) -> Result<BuildReport> {
    build(corpus, source, opts, None, dest, &ItemsOnly(progress))
}

/// [`build_index`], reporting each stage and the items embedded to `progress`.
pub fn build_index_with(
    corpus: &Corpus,
    source: &str,
    opts: &BuildOptions,
    dest: &Path,
    progress: &dyn BuildProgress,
) -> Result<BuildReport> {
    build(corpus, source, opts, None, dest, progress)
}

/// Builds an index of `corpus` at `dest` with a metric of your own (`opts.metric` is not
/// used), reporting to `progress` as [`build_index_with`]. The index records the metric's
/// name; open it with [`super::Index::open_with_metric`] and the same metric. See
/// `examples/custom_metric.rs`.
pub fn build_index_with_metric(
    corpus: &Corpus,
    source: &str,
    opts: &BuildOptions,
    metric: &CustomMetric,
    dest: &Path,
    progress: &dyn BuildProgress,
) -> Result<BuildReport> {
    build(corpus, source, opts, Some(metric), dest, progress)
}

/// The build behind [`build_index_with`] and [`build_index_with_metric`].
fn build(
    corpus: &Corpus,
    source: &str,
    opts: &BuildOptions,
    custom: Option<&CustomMetric>,
    dest: &Path,
    progress: &dyn BuildProgress,
) -> Result<BuildReport> {
    check_options(corpus, source, opts)?;
    let keys = corpus.key_bytes();
    let (spec, metric) = match custom {
        Some(m) => (MetricSpec::custom(m), AnyMetric::Custom(m.clone())),
        None => open_metric(&keys, source, opts)?,
    };
    // Start the file first: an unwritable destination fails before the expensive part.
    let writer = ContainerWriter::create(dest, &opts.inputs)?;
    let t0 = Instant::now();
    progress.stage(BuildStage::Embed);
    let embedded = embed_items(
        &metric,
        &keys,
        &EmbedOptions {
            method: opts.method,
            dim: opts.dim,
            sample: opts.sample,
            pool: opts.pool,
            seed: opts.seed,
            rule: opts.landmark_rule,
        },
        &|n| progress.embedded(n),
    );
    let axioms = check_axioms(&metric, &keys, AXIOM_SAMPLE, opts.seed);
    metric.check()?;
    let embed_seconds = t0.elapsed().as_secs_f64();
    let mut report = write_index(
        corpus,
        source,
        opts,
        &spec,
        &embedded,
        writer,
        dest,
        embed_seconds,
        progress,
        None,
    )?;
    report.axioms = Some(axioms);
    Ok(report)
}

/// The metric of a build (opened), checked against the items: Hamming items must have one length
/// (which is recorded), vector items the recorded dimension, graph items be the graph's
/// nodes.
pub fn open_metric(
    keys: &[&[u8]],
    source: &str,
    opts: &BuildOptions,
) -> Result<(MetricSpec, AnyMetric)> {
    let mut spec = opts.metric.clone();
    match &mut spec {
        MetricSpec::Hamming { length } => {
            let l = check_equal_lengths(keys.iter().copied())
                .map_err(|e| Error::Usage(format!("{source}: {e}")))?;
            *length = l.unwrap_or(0) as u64;
        }
        MetricSpec::Vector { dim, .. } => {
            let want = *dim as usize * 4;
            if let Some(i) = keys.iter().position(|k| k.len() != want) {
                return Err(Error::Usage(format!(
                    "{source}: record {}: {} components, the index has {dim}",
                    i + 1,
                    keys[i].len() / 4
                )));
            }
        }
        MetricSpec::Graph => {
            let g = opts.graph.as_ref().ok_or_else(|| {
                Error::Usage(format!("{source}: the graph metric needs the graph"))
            })?;
            if let Some(i) = keys.iter().position(|k| g.node(k).is_none()) {
                return Err(Error::Usage(format!(
                    "{source}: record {}: `{}` is not a node of the graph",
                    i + 1,
                    String::from_utf8_lossy(keys[i])
                )));
            }
        }
        _ => {}
    }
    let metric = spec.open(opts.graph.clone())?;
    Ok((spec, metric))
}

/// Builds an index of `corpus` at `dest` from coordinates already computed (for example a
/// prefix of a larger embedding, see [`Embedded::prefix`]). `embedded` must have been made
/// from this corpus's keys; `opts.method`, `opts.dim` and `opts.pool` are ignored.
pub fn build_index_from(
    corpus: &Corpus,
    source: &str,
    opts: &BuildOptions,
    embedded: &Embedded,
    dest: &Path,
) -> Result<BuildReport> {
    check_options(corpus, source, opts)?;
    let (spec, _) = open_metric(&corpus.key_bytes(), source, opts)?;
    if embedded.n != corpus.items.len() || embedded.dim() == 0 || embedded.dim() > MAX_DIM {
        return Err(Error::Usage(format!(
            "{source}: the embedding given has {} items and {} coordinates; the corpus has {} items",
            embedded.n,
            embedded.dim(),
            corpus.items.len()
        )));
    }
    let writer = ContainerWriter::create(dest, &opts.inputs)?;
    write_index(
        corpus,
        source,
        opts,
        &spec,
        embedded,
        writer,
        dest,
        0.0,
        &(),
        None,
    )
}

/// What an index part takes from the index it joins (see [`super::parts`]): the embedding
/// (numbered in its stored reference list), the reference keys, the coordinate scale, the
/// default candidates and the recall curve.
pub(crate) struct Fixed {
    pub embedding: crate::embed::Embedding,
    pub references: Vec<String>,
    pub scale: f64,
    pub candidates: u32,
    pub calibration: Option<super::Calibration>,
}

/// The coordinates of a part's items: computed against the reference items, or the u8 rows
/// of existing parts (one `stride` row per item), kept as they are.
pub(crate) enum PartCoords {
    Embed,
    Rows(Vec<u8>),
}

/// Writes `corpus` at `dest` as a part over the embedding of `base` (an index's metadata
/// whose reference keys are `refs`): the same references, scale, metric and normalisation,
/// so that its coordinates compare with every other part's. The file stores the reference
/// keys, so it opens and answers on its own. A part of the graph metric needs `graph`
/// (its items are nodes of it, and it is stored in the part).
#[allow(clippy::too_many_arguments)]
pub(crate) fn write_part(
    corpus: &Corpus,
    source: &str,
    base: &IndexMeta,
    metric: MetricSpec,
    graph: Option<Graph>,
    refs: &[&[u8]],
    coords: PartCoords,
    small_radius: Option<u32>,
    inputs: Vec<PathBuf>,
    dest: &Path,
) -> Result<BuildReport> {
    let opts = BuildOptions {
        metric,
        graph,
        seed: base.seed,
        sample: base.sample.max(1) as usize,
        candidates: base.candidates as usize,
        space: base.space,
        widen: base.widen,
        normalize: base.normalize,
        inputs,
        small_radius,
        ..BuildOptions::default()
    };
    check_options(corpus, source, &opts)?;
    let keys = corpus.key_bytes();
    if let MetricSpec::Custom { name, .. } = &base.metric_spec {
        return Err(Error::Usage(format!(
            "{source}: items cannot be added to an index of a metric of your own (`{name}`): \
             its distance is code of the library's caller, which `add` cannot run; build a new \
             index with the library"
        )));
    }
    let (spec, metric) = open_metric(&keys, source, &opts)?;
    if spec != base.metric_spec {
        return Err(Error::Usage(format!(
            "{source}: the items are compared under {}, the index's under {}: give the index's \
             metric and options",
            serde_json::to_string(&spec).unwrap_or_default(),
            serde_json::to_string(&base.metric_spec).unwrap_or_default()
        )));
    }
    let writer = ContainerWriter::create(dest, &opts.inputs)?;
    let t0 = Instant::now();
    let embedding = base.embedding.renumbered();
    let dim = embedding.dim();
    let coords = match coords {
        PartCoords::Embed => {
            let c = crate::embed::embed_against(&metric, refs, &keys, &embedding, &|_| {});
            metric.check()?;
            c
        }
        // (b + 1/2)·scale quantises back to b (see `quantize`): the rows are kept exactly.
        PartCoords::Rows(rows) => rows
            .chunks_exact(base.stride as usize)
            .flat_map(|r| r[..dim].iter().map(|&b| (f64::from(b) + 0.5) * base.scale))
            .collect(),
    };
    if coords.len() != corpus.items.len() * dim {
        return Err(Error::Usage(format!(
            "{source}: {} coordinates for {} items of {dim}",
            coords.len(),
            corpus.items.len()
        )));
    }
    let embedded = Embedded {
        embedding: embedding.clone(),
        coords,
        n: corpus.items.len(),
    };
    let fixed = Fixed {
        embedding,
        references: refs.iter().map(|r| super::parts::hex_encode(r)).collect(),
        scale: base.scale,
        candidates: base.candidates,
        calibration: base.calibration.clone(),
    };
    write_index(
        corpus,
        source,
        &opts,
        &spec,
        &embedded,
        writer,
        dest,
        t0.elapsed().as_secs_f64(),
        &(),
        Some(&fixed),
    )
}

fn check_options(corpus: &Corpus, source: &str, opts: &BuildOptions) -> Result<()> {
    opts.check()?;
    corpus
        .check()
        .map_err(|e| Error::Usage(format!("{source}: {e}")))?;
    let n = corpus.items.len();
    if n == 0 {
        return Err(Error::Usage(format!("{source}: no items to index")));
    }
    if n > u32::MAX as usize {
        return Err(Error::Usage(format!(
            "{source}: {n} items; an index holds at most {} items",
            u32::MAX
        )));
    }
    Ok(())
}

#[allow(clippy::too_many_arguments)]
fn write_index(
    corpus: &Corpus,
    source: &str,
    opts: &BuildOptions,
    spec: &MetricSpec,
    embedded: &Embedded,
    mut writer: ContainerWriter,
    dest: &Path,
    embed_seconds: f64,
    progress: &dyn BuildProgress,
    fixed: Option<&Fixed>,
) -> Result<BuildReport> {
    let n = corpus.items.len();
    let kind = spec.kind();
    let dim = embedded.dim();
    if dim == 0 {
        return Err(Error::Usage(format!(
            "{source}: the items allow no {} coordinate (all items equal?)",
            embedded.embedding.name()
        )));
    }
    let coords = &embedded.coords;
    let stride = coord_stride(dim);
    let scale = match (&opts.graph, spec) {
        _ if fixed.is_some() => fixed.map_or(1.0, |f| f.scale),
        // Nodes in other components are at one large distance that says nothing about
        // nearness: the scale comes from the other coordinates and that one saturates.
        (Some(g), MetricSpec::Graph) => embedded.scale_below(g.disconnected_distance()),
        _ => embedded.scale(spec.is_integral()),
    };
    let mut small = vec![0u8; n * stride];
    for (row, c) in small.chunks_exact_mut(stride).zip(coords.chunks_exact(dim)) {
        for (b, &x) in row.iter_mut().zip(c) {
            *b = quantize(x, scale);
        }
    }
    progress.stage(BuildStage::TreeAndCells);
    let t1 = Instant::now();
    // The tree holds the first coordinates of the u8 rows (see `tree.rs`).
    let prefix = tree::prefix_dims(dim);
    let f32s: Vec<f32> = small
        .chunks_exact(stride)
        .flat_map(|row| row[..prefix].iter().map(|&b| f32::from(b)))
        .collect();
    let tree_bytes = tree::build(&f32s, prefix)
        .map_err(|e| Error::refused(dest, format!("building the kd-tree failed: {e}")))?;
    drop(f32s);
    // The cells section keeps the only copy of the rows, in cell order; the positions
    // section maps each item to its row.
    let cells_bytes = cells::build(&small, stride, opts.seed);
    drop(small);
    let positions = cells::CellsView::open_unchecked(&cells_bytes, n, stride)
        .map(|v| cells::positions(v.members()))
        .ok_or_else(|| Error::refused(dest, "the cells built do not fit their layout"))?;
    let tree_seconds = t1.elapsed().as_secs_f64();
    // Integer ids that count up by one from the first (the default record numbers of an
    // input without blank records) are not stored.
    let ids_from = match &corpus.ids {
        Ids::Int(v) => v.first().copied().filter(|&first| {
            v.iter()
                .enumerate()
                .all(|(i, &id)| first.checked_add(i as i64) == Some(id))
        }),
        Ids::Text(_) => None,
    };

    progress.stage(BuildStage::Write);
    let t2 = Instant::now();
    let meta = IndexMeta {
        n: n as u64,
        metric: kind,
        metric_spec: spec.clone(),
        normalize: opts.normalize,
        dim: dim as u32,
        stride: stride as u32,
        tree_dim: tree::tree_dim(prefix) as u32,
        embedding: match fixed {
            Some(f) => f.embedding.clone(),
            None => embedded.embedding.clone(),
        },
        scale,
        seed: opts.seed,
        sample: opts.sample.min(n) as u64,
        ids: match corpus.ids {
            Ids::Int(_) => IdKind::Int,
            Ids::Text(_) => IdKind::Text,
        },
        ids_from,
        candidates: match fixed.map_or(opts.candidates, |f| f.candidates as usize) {
            0 => super::default_candidates(n),
            c => c,
        }
        .min(u32::MAX as usize) as u32,
        space: opts.space,
        widen: opts.widen,
        source: source.to_string(),
        records: corpus.records as u64,
        blank_skipped: corpus.blank_skipped as u64,
        written_by: format!("waymark {}", env!("CARGO_PKG_VERSION")),
        calibration: fixed.and_then(|f| f.calibration.clone()),
        references: fixed.map(|f| f.references.clone()),
    };
    let meta_json = serde_json::to_vec_pretty(&meta).expect("metadata serialises");
    writer.add(SectionKind::Meta, &meta_json)?;
    let (o, b) = string_sections(corpus.items.iter());
    writer.add(SectionKind::ItemOffsets, &o)?;
    writer.add(SectionKind::ItemBytes, &b)?;
    if let Some(k) = &corpus.keys {
        let (o, b) = string_sections(k.iter());
        writer.add(SectionKind::KeyOffsets, &o)?;
        writer.add(SectionKind::KeyBytes, &b)?;
    }
    match &corpus.ids {
        Ids::Int(_) if ids_from.is_some() => {}
        Ids::Int(v) => {
            let bytes: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
            writer.add(SectionKind::IdInts, &bytes)?;
        }
        Ids::Text(v) => {
            let (o, b) = string_sections(v.iter());
            writer.add(SectionKind::IdOffsets, &o)?;
            writer.add(SectionKind::IdBytes, &b)?;
        }
    }
    if let (MetricSpec::Graph, Some(g)) = (spec, &opts.graph) {
        writer.add(SectionKind::Graph, g.to_edge_list().as_bytes())?;
    }
    writer.add(SectionKind::Cells, &cells_bytes)?;
    writer.add(SectionKind::Positions, &positions)?;
    writer.add_aligned(SectionKind::Tree, &tree_bytes, super::file::TREE_ALIGN)?;
    drop(tree_bytes);
    let mut variants_seconds = 0.0;
    if let Some(r) = opts.small_radius {
        let t3 = Instant::now();
        let keys = corpus.key_bytes();
        let table = super::variants::VariantTable::try_build(&keys, r)
            .map_err(|e| Error::Usage(format!("{source}: {e}")))?;
        variants_seconds = t3.elapsed().as_secs_f64();
        writer.add(SectionKind::Variants, table.bytes())?;
    }
    writer.finish()?;
    let file_len = std::fs::metadata(dest).map(|m| m.len()).unwrap_or(0);
    Ok(BuildReport {
        meta,
        file_len,
        embed_seconds,
        tree_seconds,
        write_seconds: t2.elapsed().as_secs_f64() - variants_seconds,
        variants_seconds,
        axioms: None,
    })
}

/// Stores `calibration` in the metadata of the index at `path` (replacing any curve there),
/// by writing a new file through the same temporary file, lock and rename as a build: the
/// other sections are copied byte for byte at their alignment, readers that have the old
/// file open keep reading it, and a failure leaves the old file as it was. Returns the new
/// file's length. `expect` is the metadata the caller read: a file whose metadata has changed
/// since (another build in between) is refused rather than overwritten with old contents.
pub fn store_calibration(
    path: &Path,
    expect: &IndexMeta,
    calibration: Option<super::Calibration>,
) -> Result<u64> {
    if let Some(c) = &calibration {
        c.check()
            .map_err(|m| Error::Usage(format!("{}: not stored: {m}", path.display())))?;
    }
    let io = |source| Error::Io {
        path: path.to_path_buf(),
        source,
    };
    let file = std::fs::File::open(path).map_err(io)?;
    // SAFETY: read-only; the file is replaced by rename, never written in place.
    let map = unsafe { memmap2::Mmap::map(&file) }.map_err(io)?;
    let (version, mut sections) = super::file::read_table(path, &map)?;
    if version != super::file::FORMAT_VERSION {
        // The writer writes the current version's header, whose sections differ (version 1
        // stores the coordinates twice and has no positions): copying them would mislabel
        // the file.
        return Err(Error::refused(
            path,
            format!(
                "a recall curve is stored only in index format version {}; this file is version {version}: rebuild it with `waymark build`",
                super::file::FORMAT_VERSION
            ),
        ));
    }
    sections.sort_by_key(|s| s.range.start);
    let meta_range = sections
        .iter()
        .find(|s| s.kind == SectionKind::Meta)
        .map(|s| s.range.clone())
        .ok_or_else(|| Error::corrupt(path, "missing section meta"))?;
    let mut meta: IndexMeta = serde_json::from_slice(&map[meta_range])
        .map_err(|e| Error::corrupt(path, format!("metadata does not parse: {e}")))?;
    let unchanged = IndexMeta {
        calibration: expect.calibration.clone(),
        ..meta.clone()
    };
    if serde_json::to_value(&unchanged).ok() != serde_json::to_value(expect).ok() {
        return Err(Error::refused(
            path,
            "the file changed while it was being calibrated (another build?); nothing was written",
        ));
    }
    meta.calibration = calibration;
    let meta_json = serde_json::to_vec_pretty(&meta).expect("metadata serialises");
    let mut writer = ContainerWriter::create(path, &[])?;
    for s in &sections {
        // The alignments of a build (`write_index`), so that the same contents give the
        // same bytes: the kd-tree on its page boundary, every other section on 64 bytes.
        let align = match s.kind {
            SectionKind::Tree => super::file::TREE_ALIGN,
            _ => super::file::ALIGN,
        };
        if s.kind == SectionKind::Meta {
            writer.add_aligned(s.kind, &meta_json, align)?;
        } else {
            writer.add_aligned(s.kind, &map[s.range.clone()], align)?;
        }
    }
    writer.finish()?;
    Ok(std::fs::metadata(path).map(|m| m.len()).unwrap_or(0))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names() -> Vec<String> {
        [
            "Keth Landing",
            "Orvane Quay",
            "Mirrow Steps",
            "Orvane Strand",
        ]
        .map(String::from)
        .to_vec()
    }

    #[test]
    fn a_corpus_without_one_id_and_one_key_per_item_is_refused_and_nothing_is_written() {
        let dir = tempfile::tempdir().unwrap();
        let dest = dir.path().join("names.wmk");
        let opts = BuildOptions {
            dim: 2,
            ..BuildOptions::default()
        };
        let few_ids = Corpus {
            items: names(),
            keys: None,
            ids: Ids::Int(vec![0, 1, 2]),
            blank_skipped: 0,
            records: 4,
        };
        let e = build_index(&few_ids, "names", &opts, &dest, &|_| {}).unwrap_err();
        assert!(matches!(e, Error::Usage(_)), "{e:?}");
        assert_eq!(
            e.to_string(),
            "names: a corpus of 4 items was given 3 ids: it needs one per item"
        );
        let few_keys = Corpus {
            keys: Some(vec![b"keth landing".to_vec()]),
            ids: Ids::Int(vec![0, 1, 2, 3]),
            ..few_ids
        };
        let e = build_index(&few_keys, "names", &opts, &dest, &|_| {}).unwrap_err();
        assert!(e.to_string().contains("was given 1 keys"), "{e}");
        assert!(!dest.exists());
    }

    #[test]
    fn stages_are_reported_in_order_and_every_item_is_embedded_once() {
        use std::sync::atomic::{AtomicUsize, Ordering};
        use std::sync::Mutex;
        #[derive(Default)]
        struct Record {
            stages: Mutex<Vec<BuildStage>>,
            items: AtomicUsize,
        }
        impl BuildProgress for Record {
            fn stage(&self, stage: BuildStage) {
                self.stages.lock().unwrap().push(stage);
            }
            fn embedded(&self, items: usize) {
                self.items.fetch_add(items, Ordering::Relaxed);
            }
        }
        let dir = tempfile::tempdir().unwrap();
        let corpus = Corpus::new(names(), None, Ids::Int(vec![0, 1, 2, 3])).unwrap();
        let record = Record::default();
        let opts = BuildOptions {
            dim: 2,
            ..BuildOptions::default()
        };
        build_index_with(&corpus, "names", &opts, &dir.path().join("n.wmk"), &record).unwrap();
        assert_eq!(
            *record.stages.lock().unwrap(),
            [
                BuildStage::Embed,
                BuildStage::TreeAndCells,
                BuildStage::Write
            ]
        );
        assert_eq!(record.items.load(Ordering::Relaxed), 4);
    }
}
